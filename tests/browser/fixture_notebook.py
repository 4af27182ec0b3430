"""A small stand-in for the walkthrough notebook, built with nbformat: the demo plan, one slider
on ``s1.rc``, each stage's result in words, a bokeh canvas of the Q-points and a static record
(an HTML table and a PNG), all with the CSS hooks and bokeh source names of the notebook face.

It exercises the same plumbing as the real face (``%load_ext ampplan``, BokehJS from the server
route, ipywidgets + jupyter_bokeh, display_id updates) so that the browser tests, the benchmark and
the screenshot helper can be built before the walkthrough exists.
"""

from __future__ import annotations

import nbformat

CELLS = [
    "%load_ext ampplan",
    '''\
import base64, struct, zlib
from importlib.resources import files

import ipywidgets as widgets
from bokeh.models import ColumnDataSource
from bokeh.plotting import figure
from IPython.display import HTML, Image, display
from jupyter_bokeh import BokehModel

import ampplan

plan = ampplan.Plan.load(files("ampplan") / "data" / "demo_plan.json")
MODEL = "constant-drop"
result = plan.solve(model=MODEL)
ids = [s.id for s in result.stages]

def qpoints(res):
    return {s.id: {"x": [float(s.transistor.vce)], "y": [float(s.transistor.ic) * 1e3]} for s in res.stages}

def words(s):
    return (f"<b>{s.id}</b> {s.region}: I_C = {s.transistor.ic * 1e3:.4f} mA, "
            f"V_CE = {s.transistor.vce:.4f} V, gain {s.gain:.3f}")

def picture(res, width=120, height=60):
    """A PNG (grey background, one dark column per stage scaled by I_C): a stand-in record picture."""
    top = max(s.transistor.ic for s in res.stages)
    rows = []
    for y in range(height):
        row = bytearray([0])
        for x in range(width):
            k = x * len(res.stages) // width
            bar = (height - y) <= height * res.stages[k].transistor.ic / top
            row += bytes([40, 40, 120] if bar else [230, 230, 230])
        rows.append(bytes(row))
    def chunk(kind, data):
        return struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data))
    return (b"\\x89PNG\\r\\n\\x1a\\n" + chunk(b"IHDR", struct.pack(">IIBBBBB", width, height, 8, 2, 0, 0, 0))
            + chunk(b"IDAT", zlib.compress(b"".join(rows))) + chunk(b"IEND", b""))

sources = {sid: ColumnDataSource(data=d, name=f"ampplan-{sid}-qpoint") for sid, d in qpoints(result).items()}
fig = figure(width=520, height=300, title="Q-points (I_C in mA against V_CE in V)", toolbar_location=None)
for sid, src in sources.items():
    fig.scatter("x", "y", source=src, size=12, legend_label=sid)
canvas = BokehModel(fig)
canvas.add_class("ampplan-canvas")
views = {}
for sid in ids:
    views[sid] = widgets.HTML()
    views[sid].add_class("ampplan-stage-result")
    views[sid].add_class(f"ampplan-stage-result-{sid}")
table_handle = picture_handle = None

def refresh(res):
    for s in res.stages:
        views[s.id].value = words(s)
    new = qpoints(res)
    for sid, src in sources.items():
        src.data = new[sid]
    if table_handle is not None:
        table_handle.update(HTML(res._repr_html_()))
        picture_handle.update(Image(data=picture(res), format="png"))

rc = widgets.FloatLogSlider(value=plan.get("s1.rc"), base=10, min=3.0, max=4.5, step=0.005,
                            description="s1.rc", continuous_update=True)
rc.add_class("ampplan-control")
rc.add_class("ampplan-control-s1-rc")

def on_rc(change):
    plan.set("s1.rc", change["new"])
    refresh(plan.solve(model=MODEL))

rc.observe(on_rc, names="value")
refresh(result)''',
    '''\
editor = widgets.VBox([rc, views["s1"]])
editor.add_class("ampplan-editor")
editor.add_class("ampplan-editor-s1")
editor''',
    '''\
editor2 = widgets.VBox([views["s2"]])
editor2.add_class("ampplan-editor")
editor2.add_class("ampplan-editor-s2")
editor2''',
    "canvas",
    '''\
table_handle = display(HTML(result._repr_html_()), display_id=True)
picture_handle = display(Image(data=picture(result), format="png"), display_id=True)''',
]


def has_live_plan() -> bool:
    """Whether this checkout has the notebook face's live plan (``ampplan.notebook.LivePlan``)."""
    import importlib

    try:
        return hasattr(importlib.import_module("ampplan.notebook"), "LivePlan")
    except ImportError:
        return False


#: The designer's workflow of issue 7 on the demo plan: one editor per stage, canvas, summary.
LIVE_CELLS = [
    "%load_ext ampplan",
    'from ampplan import notebook as nb\nlive = nb.LivePlan.demo()\nlive.model = "constant-drop"',
    'live.editor("s1")',
    'live.editor("s2")',
    'live.editor("s3")',
    "live.canvas()",
    "live.summary()",
]


def build_live(model: str = "constant-drop") -> nbformat.NotebookNode:
    """The live-plan notebook (issue 7's workflow), without outputs, solving with ``model``."""
    cells = [c.replace('live.model = "constant-drop"', f"live.model = {model!r}") for c in LIVE_CELLS]
    nb = nbformat.v4.new_notebook(cells=[nbformat.v4.new_code_cell(source) for source in cells])
    nb.metadata["kernelspec"] = {"name": "python3", "display_name": "Python 3", "language": "python"}
    return nb


def build_best(model: str = "constant-drop") -> nbformat.NotebookNode:
    """The live-plan notebook where this checkout has the live plan, else the stand-in."""
    return build_live(model) if has_live_plan() else build(model)


def build(model: str = "constant-drop") -> nbformat.NotebookNode:
    """The notebook, without outputs, with the python3 kernel, solving with device ``model``."""
    cells = [c.replace('MODEL = "constant-drop"', f"MODEL = {model!r}") for c in CELLS]
    nb = nbformat.v4.new_notebook(cells=[nbformat.v4.new_code_cell(source) for source in cells])
    nb.metadata["kernelspec"] = {"name": "python3", "display_name": "Python 3", "language": "python"}
    return nb

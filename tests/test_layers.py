"""The layers stay one-way, and the core stays light.

Sources: DESIGN §3 (data flows one way; a lower layer never imports a higher one) and STYLE.md
(the core never imports ipywidgets, bokeh, jupyter_bokeh or IPython; checked in a fresh
interpreter so that nothing else the test session has imported can hide an import).

Two checks, because they see different things:

* the import graph, read statically by import-linter against the contracts in ``.importlinter``
  (every ``import`` in every module, deferred ones included, against the layer order);
* a fresh interpreter that really imports and uses the core (solves, plans, plan files, the
  command line) and then looks at ``sys.modules``, which also catches an import made indirectly
  through a third-party package.
"""

from __future__ import annotations

import json
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
NOTEBOOK_MODULES = ["ipywidgets", "bokeh", "jupyter_bokeh", "IPython", "matplotlib"]


def _lint_imports(config: Path) -> subprocess.CompletedProcess:
    exe = shutil.which("lint-imports", path=str(Path(sys.executable).parent))
    if exe is None:
        pytest.fail("lint-imports (import-linter) is not installed in this environment; "
                    "it is part of the test extra in pyproject.toml")
    return subprocess.run([exe, "--no-cache", str(config)], cwd=ROOT, capture_output=True, text=True,
                          timeout=300)


def test_import_graph_keeps_the_layer_order():
    done = _lint_imports(ROOT / ".importlinter")
    assert done.returncode == 0, done.stdout + done.stderr
    assert re.search(r"Contracts: (\d+) kept, 0 broken", done.stdout), done.stdout


def test_layer_contract_can_fail(tmp_path):
    # A contract whose order is turned upside down must break: the check above really reads the
    # import graph and is not trivially satisfied.
    text = (ROOT / ".importlinter").read_text(encoding="utf-8")
    upside_down = text.replace("    ampplan.circuit\n    ampplan.devices\n", "    ampplan.devices\n    ampplan.circuit\n")
    assert upside_down != text
    config = tmp_path / "upside_down.ini"
    config.write_text(upside_down, encoding="utf-8")
    done = _lint_imports(config)
    assert done.returncode != 0
    assert "ampplan.circuit -> ampplan.devices" in done.stdout


SCRIPT = r"""
import json, sys
import ampplan

c = ampplan.Circuit()
c.voltage_source("VCC", "vcc", "gnd", 12.0)
c.resistor("R1", "vcc", "b", 100e3)
c.resistor("R2", "b", "gnd", 22e3)
c.resistor("RC", "vcc", "c", 4.7e3)
c.resistor("RE", "e", "gnd", 1e3)
c.capacitor("CE", "e", "gnd")
c.bjt("Q1", collector="c", base="b", emitter="e", device=ampplan.Transistor())
regions = {}
for model in ("constant-drop", "ebers-moll"):
    regions[model] = c.solve(model=model).transistors["Q1"].region
    c.solve(model=model, batch={"RC": [3.3e3, 4.7e3]})
# The layers above the solver too: a plan with its analyses, a plan file and the command line.
import io, os, tempfile, contextlib
import ampplan.cli, ampplan.record
plan = ampplan.Plan(supply=12.0, source_resistance=600.0, load_resistance=10e3)
plan.add(ampplan.CommonEmitter(rb1=100e3, rb2=22e3, rc=4.7e3, re_bypassed=1e3))
result = plan.solve()
with tempfile.TemporaryDirectory() as folder:
    plan.save(os.path.join(folder, "p.json"))
    with contextlib.redirect_stdout(io.StringIO()):
        ampplan.cli.main(["check", os.path.join(folder, "p.json")])
regions["plan"] = result.stages[0].region
# The live plan and the canvas's plane data sit below the widgets; the notebook package itself
# loads its widget libraries only when LivePlan is first used.
import ampplan.live, ampplan.analyses.plane, ampplan.notebook, ampplan.notebook.tables
live = ampplan.live.ObservablePlan(plan)
live.set("s1.rc", 3.9e3)
ampplan.analyses.plane.plan_planes(live.result, live.plan)
# What the notebook's what-if views draw is plain data below them too.
import ampplan.analyses.whatif.pictures as pictures
pictures.sweep_picture(live.plan, "s1.rc", 1e3, 10e3, n=8)
pictures.tolerance_picture(live.plan.tolerance(samples=20, seed=1))
loaded = {name: name in sys.modules for name in %(modules)r}
print(json.dumps({"regions": regions, "loaded": loaded}))
"""


def test_core_imports_no_notebook_library():
    done = subprocess.run([sys.executable, "-W", "error", "-c", SCRIPT % {"modules": NOTEBOOK_MODULES}], cwd=ROOT,
                          capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    report = json.loads(done.stdout.strip().splitlines()[-1])
    # The circuit really was solved by both models (a forward-active divider-biased stage).
    assert report["regions"] == {"constant-drop": "forward-active", "ebers-moll": "forward-active",
                                 "plan": "forward-active"}
    loaded = [name for name, present in report["loaded"].items() if present]
    assert not loaded, f"the core imported {loaded}"

"""The core stays light: importing ampplan, solving, planning, plan files and the command line
load no notebook library.

Source: issue 2 §7 and STYLE.md (one-way layers; core never imports ipywidgets, bokeh,
jupyter_bokeh or IPython); checked in a fresh interpreter so that nothing else the test session has
imported can hide an import.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

NOTEBOOK_MODULES = ["ipywidgets", "bokeh", "jupyter_bokeh", "IPython"]

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
loaded = {name: name in sys.modules for name in %(modules)r}
print(json.dumps({"regions": regions, "loaded": loaded}))
"""


def test_core_imports_no_notebook_library():
    root = Path(__file__).resolve().parents[1]
    done = subprocess.run([sys.executable, "-W", "error", "-c", SCRIPT % {"modules": NOTEBOOK_MODULES}], cwd=root,
                          capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    report = json.loads(done.stdout.strip().splitlines()[-1])
    # The circuit really was solved by both models (a forward-active divider-biased stage).
    assert report["regions"] == {"constant-drop": "forward-active", "ebers-moll": "forward-active",
                                 "plan": "forward-active"}
    loaded = [name for name, present in report["loaded"].items() if present]
    assert not loaded, f"the core imported {loaded}"

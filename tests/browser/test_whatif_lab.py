"""The what-if views in real JupyterLab, in headless Chromium (Playwright).

A small notebook shows the demo plan's editor of stage 1, a sweep view of ``s1.rc`` and a tolerance
view; Run All; then the test moves the ``s1.rc`` slider one step with the keyboard and asserts
that BokehJS's copy of the sweep view's marker moved to the new value (the kernel re-swept the
live plan and sent it), that the tolerance view's histograms reached the page, and that no cell
shows an error and the page asked nothing of any other server.
"""

from __future__ import annotations

import json
import os
import pathlib

import pytest

from . import lab_page
from .test_lab import error_outputs

nbformat = pytest.importorskip("nbformat")

NOTEBOOK_NAME = "whatif-under-test.ipynb"
SLIDER = ".ampplan-control-s1-rc .noUi-handle"
MARKER = "ampplan-sweep1-marker-0"

CELLS = [
    "%load_ext ampplan",
    "from ampplan import notebook as nb\nlive = nb.LivePlan.demo()",
    'live.editor("s1")',
    'live.canvas()',
    'live.sweep_view("s1.rc", 1e3, 20e3, n=200, show=["s1.vce", "s2.vce"])',
    "live.tolerance_view(samples=300, seed=1)",
]


def write_notebook(folder: pathlib.Path) -> pathlib.Path:
    nb = nbformat.v4.new_notebook()
    nb.cells = [nbformat.v4.new_code_cell(source) for source in CELLS]
    nb.metadata["kernelspec"] = {"name": "python3", "display_name": "Python 3", "language": "python"}
    path = folder / NOTEBOOK_NAME
    nbformat.write(nb, path)
    return path


@pytest.mark.browser
def test_sweep_view_follows_a_slider_in_jupyterlab(lab, browser):
    write_notebook(lab.root_dir)
    context = browser.new_context(viewport={"width": 1280, "height": 1000})
    page = context.new_page()
    requests = []
    page.on("request", lambda r: requests.append(r.url))
    try:
        lab_page.open_notebook(page, lab, NOTEBOOK_NAME)
        lab_page.run_all(page)
        page.locator(".ampplan-sweep canvas").first.wait_for(timeout=60_000)
        lab_page.wait_source(page, MARKER)
        lab_page.wait_source(page, "ampplan-tolerance-hist-0")
        page.locator(SLIDER).first.wait_for(timeout=30_000)
        assert error_outputs(page) == []
        before = lab_page.source_data(page, MARKER)
        assert before["x"] == [pytest.approx(4.7)]    # kΩ: the demo's s1.rc
        hist = lab_page.source_data(page, "ampplan-tolerance-hist-0")
        assert sum(hist["top"]) > 0
        curve = lab_page.source_data(page, "ampplan-sweep1-curve-0")
        assert len(curve["x"]) == 200

        handle = page.locator(SLIDER).first
        handle.focus()
        handle.press("ArrowRight")
        page.wait_for_function(
            f"(old) => JSON.stringify(({lab_page.JS_SOURCE_DATA})({json.dumps(MARKER)}).x) !== JSON.stringify(old)",
            arg=before["x"], timeout=30_000)
        after = lab_page.source_data(page, MARKER)
        # One step of the log slider is a 24th of a decade (the E24 spacing of IEC 60063).
        assert after["x"][0] == pytest.approx(4.7 * 10 ** (1 / 24), rel=0.02)
        assert after["y"] != before["y"]
        assert error_outputs(page) == []

        shots = os.environ.get("AMPPLAN_WHATIF_SCREENSHOTS")
        if shots:   # for looking at the views by eye: AMPPLAN_WHATIF_SCREENSHOTS=/tmp/shots
            folder = pathlib.Path(shots)
            folder.mkdir(parents=True, exist_ok=True)
            lab_page.wait_kernel_idle(page)
            page.wait_for_timeout(1500)
            lab_page.screenshot_element(page, ".ampplan-sweep", str(folder / "sweep.png"))
            lab_page.screenshot_element(page, ".ampplan-tolerance", str(folder / "tolerance.png"))
            lab_page.screenshot_element(page, ".ampplan-canvas", str(folder / "canvas.png"))
    finally:
        context.close()
    outside = [u for u in requests if not u.startswith(lab.url) and not u.startswith(("data:", "blob:"))]
    assert outside == [], f"requests outside the local server: {outside[:5]}"

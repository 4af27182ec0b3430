"""The notebook face in real JupyterLab, in headless Chromium (Playwright), and its saved record.

* JupyterLab is started by the test on 127.0.0.1 with a token; ampplan's server extension is
  enabled by its packaged config file and BokehJS comes from it (the test checks the request).
* The notebook is run with Run All; a slider is moved with the keyboard; the test asserts that
  BokehJS's copy of the canvas data and the next stage's view changed, that no cell shows an
  error, and that the page requested nothing outside the local server.
* The notebook executed headless with ``jupyter nbconvert --execute`` and converted to HTML is
  opened with every network request blocked: the PNG picture and the tables must be visible.
* An executed 3-stage notebook stays under 1 MB (BokehJS is not inlined into it).
"""

from __future__ import annotations

import json
import pathlib
import shutil
import subprocess
import sys

import pytest

from . import fixture_notebook, lab_page
from .servers import ROOT, isolated_env

nbformat = pytest.importorskip("nbformat")

#: The notebook under test and the hooks it carries (CSS classes and bokeh source names of the face).
SLIDER = ".ampplan-control-s1-rc .noUi-handle"
CANVAS = ".ampplan-canvas"
CANVAS_SOURCE = "ampplan-s1-qpoint"
NEXT_STAGE_VIEW = ".ampplan-stage-result-s2"
NOTEBOOK_NAME = "walkthrough-under-test.ipynb"
MAX_RECORD_BYTES = 1_000_000
WALKTHROUGH = ROOT / "notebooks" / "walkthrough.ipynb"


def write_notebook(folder: pathlib.Path, which: str = "record") -> pathlib.Path:
    """Write the notebook under test into ``folder``.

    ``"walkthrough"``: notebooks/walkthrough.ipynb. ``"workflow"``: issue 7's workflow on the demo
    plan (``fixture_notebook.build_best``: the live plan's editors, canvas and summary; a stand-in
    with the same hooks where this checkout has no live plan yet). ``"record"``: the walkthrough
    where it exists, else the workflow.
    """
    path = folder / NOTEBOOK_NAME
    if which == "walkthrough" or (which == "record" and WALKTHROUGH.exists()):
        if not WALKTHROUGH.exists():
            pytest.skip("notebooks/walkthrough.ipynb is not in this checkout")
        shutil.copy(WALKTHROUGH, path)
    else:
        nbformat.write(fixture_notebook.build_best(), path)
    return path


def demo_value(address: str) -> float:
    from importlib.resources import files

    import ampplan

    return ampplan.Plan.load(files("ampplan") / "data" / "demo_plan.json").get(address)


def shown_values_drift(page) -> list[str]:
    """Controls whose shown value differs from the demo plan's after Run All, untouched.

    Displaying an editor must not edit the plan: a slider whose front end snaps the value to its
    step grid and sends it back would silently change the design (and fill the undo history).
    """
    from ampplan.units import parse_quantity

    drift = []
    for address in ("s1.rb1", "s1.rb2", "s1.rc", "s1.re", "s2.rc", "s3.re"):
        field = page.locator(f".ampplan-control-{address.replace('.', '-')} .ampplan-control-text input")
        if field.count() == 0:
            continue
        text = field.first.input_value()
        expected = demo_value(address)
        if abs(parse_quantity(text, "Ω") - expected) > 1e-6 * expected:
            drift.append(f"{address} shows {text!r}, the demo plan has {expected:g} Ω")
    return drift


def error_outputs(page) -> list[str]:
    """Texts of every error-looking output on the page: tracebacks, stderr, widget and BokehJS errors."""
    return page.evaluate("""() => {
      const found = [];
      for (const el of document.querySelectorAll(
          ".jp-OutputArea-output[data-mime-type='application/vnd.jupyter.stderr'], .ampplan-bokehjs-error")) {
        found.push(el.textContent.slice(0, 500));
      }
      for (const el of document.querySelectorAll('.jp-OutputArea-output')) {
        const t = el.textContent;
        if (t.includes('Error displaying widget') || t.includes('Click to show javascript error')) {
          found.push(t.slice(0, 500));
        }
      }
      return found;
    }""")


@pytest.mark.browser
@pytest.mark.parametrize("which", ["walkthrough", "workflow"])
def test_notebook_live_in_jupyterlab(lab, browser, request, which):
    write_notebook(lab.root_dir, which)
    context = browser.new_context(viewport={"width": 1280, "height": 1000})
    page = context.new_page()
    requests, console_errors = [], []
    page.on("request", lambda r: requests.append(r.url))
    page.on("console", lambda m: console_errors.append(m.text) if m.type == "error" else None)
    try:
        lab_page.open_notebook(page, lab, NOTEBOOK_NAME)
        lab_page.run_all(page)
        page.locator(f"{CANVAS} canvas").first.wait_for(timeout=60_000)
        lab_page.wait_source(page, CANVAS_SOURCE)
        page.locator(SLIDER).first.wait_for(timeout=30_000)
        assert error_outputs(page) == []
        if which == "workflow" and fixture_notebook.has_live_plan():
            page.wait_for_timeout(1000)   # let any value a slider view sends back arrive
            drift = shown_values_drift(page)
            assert drift == [], ("showing the editors changed the plan (a slider view snapping the value "
                                 "to its step grid and syncing it back?): " + "; ".join(drift))

        if which == "walkthrough":
            # The walkthrough ends with live.set("s1.rc", 3.9e3) from code; the slider must not send
            # back that value snapped to its old grid (seen once: 3.879 kΩ, two stray edits).
            page.wait_for_timeout(1000)
            field = page.locator(".ampplan-control-s1-rc .ampplan-control-text input").first
            assert field.input_value() == "3.9 kΩ"
        # In a live page each view hides its static copy (kept for the saved notebook), so nothing
        # shows twice; the copies are in the DOM, as the saved notebook will have them.
        shown = page.evaluate("""() => Array.from(document.querySelectorAll('.ampplan-static')).map(
            el => getComputedStyle(el.closest('.jp-OutputArea-child')).display)""")
        assert shown and set(shown) == {"none"}, shown

        # BokehJS came from ampplan's route on this server, the installed version, no CDN.
        served = [u for u in requests if "/ampplan/bokehjs/js/bokeh.min.js" in u]
        assert served and served[0].startswith(lab.url + "ampplan/bokehjs/"), served
        import bokeh
        assert page.evaluate("() => Bokeh.version") == bokeh.__version__

        before = lab_page.source_data(page, CANVAS_SOURCE)
        view = page.locator(f"{NEXT_STAGE_VIEW}").first
        # textContent, not innerText: a cell scrolled out of view under content-visibility windowing
        # is not rendered, and its innerText does not follow the DOM.
        view_before = view.text_content()
        handle = page.locator(SLIDER).first
        handle.focus()
        handle.press("ArrowRight")
        page.wait_for_function(
            f"(old) => JSON.stringify(({lab_page.JS_SOURCE_DATA})({json.dumps(CANVAS_SOURCE)})) !== JSON.stringify(old)",
            arg=before, timeout=30_000)
        page.wait_for_function("([sel, old]) => document.querySelector(sel).textContent !== old",
                               arg=[NEXT_STAGE_VIEW, view_before], timeout=30_000)
        after = lab_page.source_data(page, CANVAS_SOURCE)
        assert after != before                                 # the Q-point moved
        assert view.text_content() != view_before              # the direct-coupled next stage followed
        assert error_outputs(page) == []

        if which == "workflow" and fixture_notebook.has_live_plan():
            # A burst of key presses does not queue: the browser holds one message in flight per
            # widget and merges the rest, so the kernel solves fewer times than keys were pressed
            # and ends on the value of the last press (a 24th of a decade per press, E24 spacing).
            lab_page.wait_kernel_idle(page, quiet_s=1.0)
            start = json.loads(lab_page.kernel_print(page, "print(__import__('json').dumps("
                                                           "[live.solve_count, live.get('s1.rc')]))"))
            presses = 12
            # All twelve in one task of the page (as fast as a held-down key can go), so none can
            # be answered before the next is pressed.
            page.evaluate("""([selector, n]) => {
                const el = document.querySelector(selector);
                for (let k = 0; k < n; k++) {
                    el.dispatchEvent(new KeyboardEvent('keydown', {key: 'ArrowRight', bubbles: true}));
                }}""", [SLIDER, presses])
            lab_page.wait_kernel_idle(page, quiet_s=1.5)
            end = json.loads(lab_page.kernel_print(page, "print(__import__('json').dumps("
                                                         "[live.solve_count, live.get('s1.rc')]))"))
            assert end[1] == pytest.approx(start[1] * 10 ** (presses / 24), rel=1e-9)
            assert 1 <= end[0] - start[0] < presses, f"{end[0] - start[0]} solves for {presses} presses"
            assert error_outputs(page) == []

        # The saved notebook (executed in JupyterLab, widget state included) stays small.
        lab_page.wait_kernel_idle(page, quiet_s=1.5)   # the last static records rewritten first
        lab_page.save(page)
        size = (lab.root_dir / NOTEBOOK_NAME).stat().st_size
        assert size < MAX_RECORD_BYTES, f"saved notebook is {size} bytes"

        shot = request.config.getoption("--screenshot-to", default=None)
        if shot:
            pathlib.Path(shot).parent.mkdir(parents=True, exist_ok=True)
            lab_page.screenshot_element(page, CANVAS, shot)
    finally:
        context.close()
    outside = [u for u in requests if not u.startswith(lab.url) and not u.startswith(("data:", "blob:"))]
    assert outside == [], f"requests outside the local server: {outside[:5]}"
    bokeh_errors = [e for e in console_errors if "ampplan" in e or "Bokeh" in e]
    assert bokeh_errors == []


def execute_headless(folder: pathlib.Path) -> pathlib.Path:
    """The notebook executed with ``jupyter nbconvert --execute --to notebook`` in throw-away dirs."""
    source = write_notebook(folder)
    env = isolated_env(folder / "env")
    done = subprocess.run([str(pathlib.Path(sys.executable).parent / "jupyter"), "nbconvert", "--execute",
                           "--to", "notebook", "--output", "executed.ipynb",
                           "--ExecutePreprocessor.timeout=300", str(source)],
                          capture_output=True, text=True, env=env, cwd=folder, timeout=600)
    assert done.returncode == 0, done.stderr[-3000:]
    return folder / "executed.ipynb"


def test_executed_notebook_stays_under_a_megabyte(tmp_path):
    executed = execute_headless(tmp_path)
    size = executed.stat().st_size
    assert size < MAX_RECORD_BYTES, f"{executed.name} is {size} bytes"
    nb = nbformat.read(executed, as_version=4)
    outputs = [o for c in nb.cells if c.cell_type == "code" for o in c.outputs]
    assert not [o for o in outputs if o.output_type == "error"]
    # the record holds the latest static table and picture (display_id outputs)
    mimes = {m for o in outputs for m in o.get("data", {})}
    assert {"text/html", "image/png", "application/vnd.bokehjs_load.v0+json"} <= mimes


@pytest.mark.browser
def test_record_reads_offline_as_html(tmp_path, browser):
    executed = execute_headless(tmp_path)
    env = isolated_env(tmp_path / "env")
    done = subprocess.run([str(pathlib.Path(sys.executable).parent / "jupyter"), "nbconvert", "--to", "html",
                           str(executed)], capture_output=True, text=True, env=env, cwd=tmp_path, timeout=300)
    assert done.returncode == 0, done.stderr[-3000:]
    html = executed.with_suffix(".html")
    context = browser.new_context(viewport={"width": 1280, "height": 1000})
    blocked = []

    def block(route):
        blocked.append(route.request.url)
        route.abort()

    context.route("http://*/**", block)
    context.route("https://*/**", block)
    page = context.new_page()
    try:
        page.goto(html.as_uri())
        page.wait_for_load_state("load")
        pictures = page.locator(".jp-OutputArea-output img[src^='data:image/png']")
        assert pictures.count() >= 1
        picture = pictures.first
        picture.scroll_into_view_if_needed()
        assert picture.is_visible()
        assert page.evaluate("(img) => img.complete && img.naturalWidth > 0", picture.element_handle())
        tables = page.locator(".jp-OutputArea-output table")
        assert tables.count() >= 1 and tables.first.is_visible()
        body = page.inner_text("body")
        assert "s1" in body and "forward-active" in body and "Ω" in tables.first.inner_text()
    finally:
        context.close()
    # whatever the page asked for beyond the file itself was refused, not fetched
    assert all(u.startswith(("http://", "https://")) for u in blocked)

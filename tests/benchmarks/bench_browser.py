"""Slider latency in real JupyterLab, in headless Chromium: key press → changed canvas data in BokehJS.

For the 3-stage demo plan, with each device model, the benchmark starts JupyterLab on 127.0.0.1
(throw-away folders, ampplan's server extension enabled), runs a notebook that shows the stage-1
editor and the canvas, presses the arrow keys on the ``s1.rc`` slider PRESSES times, and measures in
the page (``performance.now()``) the time from each keydown to BokehJS's data-change signal of the
canvas source ``ampplan-s1-qpoint``. Each press waits until the kernel is idle again, so a figure
is one whole round trip (browser → kernel → solve → views → BokehJS) and never a wait behind the
previous press. A second line per model gives the time from the press until the kernel is idle
again (every view, the static record included), from Playwright's side (coarser, ~20 ms polling).

Targets (issue 7): median under 100 ms with constant-drop and under 250 ms with Ebers–Moll.
Baseline printed beside them, measured in the same run: the same round trip with a notebook whose
callback does no solve (it moves the point by the slider value only), i.e. the cost of the
browser/kernel/BokehJS plumbing itself.

The notebook is issue 7's workflow on the live plan (``ampplan.notebook.LivePlan.demo()``, one editor
per stage, the canvas, the summary) when this checkout has it, otherwise the browser tests' stand-in notebook (same plumbing,
a plain solve per value); the output says which.

Run with ``make bench`` (prints a line and exits 0 when no Chromium is found). Timings on a shared
2-core machine are noisy: compare the figures with the baseline of the same run.
"""

from __future__ import annotations

import os
import pathlib
import statistics
import sys
import tempfile

HERE = pathlib.Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

import nbformat  # noqa: E402

from browser import fixture_notebook, lab_page  # noqa: E402
from browser.chromium import CHROMIUM_ARGS, find_chromium  # noqa: E402
from browser.servers import isolated_env, start_server  # noqa: E402

PRESSES = 24
TARGETS_MS = {"constant-drop": 100.0, "ebers-moll": 250.0}
SLIDER = ".ampplan-control-s1-rc .noUi-handle"
SOURCE = "ampplan-s1-qpoint"


has_live_plan = fixture_notebook.has_live_plan


def baseline_notebook() -> nbformat.NotebookNode:
    """The stand-in notebook whose slider callback only moves the point: no solve, same plumbing."""
    nb = fixture_notebook.build()
    for cell in nb.cells:
        cell.source = cell.source.replace('    plan.set("s1.rc", change["new"])\n    refresh(plan.solve(model=MODEL))',
                                          '    sources["s1"].data = {"x": [change["new"] / 1e3], "y": [1.0]}')
    assert any('change["new"] / 1e3' in c.source for c in nb.cells), "baseline edit did not apply"
    return nb


def measure(server, browser, name: str, nb: nbformat.NotebookNode) -> tuple[list[float], list[float]]:
    nbformat.write(nb, server.root_dir / name)
    context = browser.new_context(viewport={"width": 1280, "height": 1000})
    page = context.new_page()
    try:
        lab_page.open_notebook(page, server, name)
        lab_page.run_all(page)
        page.locator(".ampplan-canvas canvas").first.wait_for(timeout=60_000)
        lab_page.wait_source(page, SOURCE)
        keys = ["ArrowRight"] * (PRESSES // 2) + ["ArrowLeft"] * (PRESSES - PRESSES // 2)
        return lab_page.press_and_time(page, SLIDER, [SOURCE], PRESSES, key_cycle=keys)
    finally:
        context.close()


def solve_times(model: str, repeats: int = 10) -> list[float]:
    """In-process ``plan.solve()`` of the demo plan, ms: the part of the round trip the solve takes."""
    import time
    from importlib.resources import files

    import ampplan

    plan = ampplan.Plan.load(files("ampplan") / "data" / "demo_plan.json")
    plan.solve(model=model)
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        plan.solve(model=model)
        times.append((time.perf_counter() - start) * 1000)
    return times


def line(label: str, times: list[float], target: float | None, baseline: float | None) -> str:
    median = statistics.median(times)
    text = (f"  {label:<34} n={len(times):<3} min {min(times):6.1f}  median {median:6.1f}  "
            f"max {max(times):6.1f} ms")
    if baseline:
        text += f"  ({median / baseline:4.1f}x the no-solve baseline)"
    if target is not None:
        text += f"  target < {target:.0f} ms: {'met' if median < target else 'NOT met'}"
    return text


def main() -> int:
    chromium = find_chromium()
    if not chromium:
        print("bench_browser: no Chromium found (apt-get install -y chromium); slider latency not measured")
        return 0
    from playwright.sync_api import sync_playwright

    live = has_live_plan()
    print(f"Slider latency in JupyterLab, headless Chromium, 3-stage demo, {PRESSES} key presses each "
          f"(keydown → BokehJS data change of {SOURCE}); notebook: "
          f"{'the live plan (LivePlan.demo, editor, canvas)' if live else 'the browser tests stand-in (no LivePlan in this checkout)'}")
    with tempfile.TemporaryDirectory(prefix="ampplan-bench-") as folder:
        folder = pathlib.Path(folder)
        root = folder / "notebooks"
        root.mkdir()
        server = start_server(folder / "lab", root, lab=True)
        env = isolated_env(folder / "chromium")
        os.environ.update(HOME=env["HOME"], TMPDIR=env["TMPDIR"])
        try:
            with sync_playwright() as pw:
                browser = pw.chromium.launch(executable_path=chromium, headless=True, args=CHROMIUM_ARGS, env=env)
                base, _ = measure(server, browser, "baseline.ipynb", baseline_notebook())
                base_median = statistics.median(base)
                print(line("baseline: no solve in the callback", base, None, None))
                for model, target in TARGETS_MS.items():
                    nb = fixture_notebook.build_best(model)
                    times, busy = measure(server, browser, f"bench-{model}.ipynb", nb)
                    print(line(model, times, target, base_median))
                    print(line(f"  {model}: until the kernel is idle", busy, None, None))
                    print(line(f"  {model}: plan.solve() alone, in-process", solve_times(model), None, None))
                browser.close()
        finally:
            server.stop()
    print("  (shared 2-core machine: figures are noisy; compare with the baseline of the same run)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())

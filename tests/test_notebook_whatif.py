"""The notebook's what-if views headless: the sweep view, the tolerance view, design on a live plan.

Outside references: every curve point checked here is compared with ``plan.solve()`` of a copy of
the plan with the swept value set (the plain single solve, no batch); the regions of the shaded
spans with the region of such a single solve inside them; the tolerance view's yield with
``plan.tolerance`` run on its own with the same seed, and its clouds with single solves of the
samples' own values; a design result applied to the live plan by a single solve of a copy
reaching the target.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

pytest.importorskip("ipywidgets")
pytest.importorskip("bokeh")
pytest.importorskip("jupyter_bokeh")
pytest.importorskip("matplotlib")

from ampplan import notebook as nb  # noqa: E402
from ampplan.analyses.plane import plan_planes  # noqa: E402
from ampplan.analyses.whatif.pictures import CLOUD_POINTS, sweep_picture  # noqa: E402
from ampplan.errors import InvalidValueError, TargetNotReachedError, UnknownNameError  # noqa: E402
from ampplan.notebook.look import current_scale  # noqa: E402
from ampplan.notebook.whatif_picture import display_scale, log_ticks  # noqa: E402

PNG = b"\x89PNG\r\n\x1a\n"


@pytest.fixture
def live():
    return nb.LivePlan.demo()


def single(plan, **values):
    """The plan copied, the values set one by one, solved on its own (no batch)."""
    copy = plan.copy()
    for address, value in values.items():
        copy.set(address.replace("__", "."), value)
    return copy.solve()


def solve_at(plan, address, value):
    copy = plan.copy()
    copy.set(address, value)
    return copy.solve()


# -- the sweep view ------------------------------------------------------------------------

def test_sweep_view_curves_equal_single_solves(live):
    view = live.sweep_view("s1.rc", 1e3, 20e3, n=200, show=["s1.vce", "s2.vce", "gain"])
    p = view.picture
    assert len(p.x) == 200 and p.log and p.x[0] == pytest.approx(1e3) and p.x[-1] == pytest.approx(20e3)
    for i in (0, 37, 120, 199):
        reference = solve_at(live.plan, "s1.rc", p.x[i])
        for curve in p.curves:
            assert curve.y[i] == pytest.approx(reference[curve.address], rel=1e-9, abs=1e-15, nan_ok=True), (curve.address, i)
    # The bokeh sources hold the same numbers, scaled for display as the axis says.
    x_factor, _ = display_scale(p.x, p.unit)
    for k, curve in enumerate(p.curves):
        factor, unit = display_scale(curve.y, curve.unit)
        data = view.curves[k].data
        assert data["x"] == pytest.approx([v * x_factor for v in p.x])
        assert data["y"] == pytest.approx([v * factor for v in curve.y], nan_ok=True)
        assert view.figures[k].title.text.endswith(f"({unit})")
    # The marked point is the live plan's own result.
    now = solve_at(live.plan, "s1.rc", live.get("s1.rc"))
    assert view.markers[0].data["x"] == pytest.approx([4.7])  # kΩ
    assert p.curves[0].current == pytest.approx(now["s1.vce"], rel=1e-12)
    assert all(line.location == pytest.approx(4.7) for line in view.now)
    # A log axis over 1 … 20 kΩ is labelled 1, 2, 5, 10, 20 (the 1-2-5 sequence of log scales:
    # common practice, no source), in the live figures and the static picture alike.
    assert all(f.xaxis[0].ticker.ticks == [1.0, 2.0, 5.0, 10.0, 20.0] for f in view.figures)


def test_log_ticks():
    assert log_ticks(1.0, 20.0) == [1.0, 2.0, 5.0, 10.0, 20.0]
    assert log_ticks(0.47, 10.0) == [0.5, 1.0, 2.0, 5.0, 10.0]
    assert log_ticks(1.5, 4.0) == [2.0, 3.0, 4.0]          # too few of 1, 2, 5: every mantissa
    assert log_ticks(3.3, 4.7) == []                        # narrower still: the library's ticks
    assert log_ticks(0.0, 1.0) == []


def test_sweep_view_is_one_batched_sweep(live):
    # The curves are plan.sweep's own samples (one batched call), not a loop of solves.
    view = live.sweep_view("s2.rc", 2e3, 12e3, n=50, show=["s2.vce", "s3.ic"])
    values = np.linspace(2e3, 12e3, 50)   # a ratio of 6: linear spacing
    assert not view.picture.log
    run = live.plan.sweep({"s2.rc": values})
    assert view.picture.curves[0].y == pytest.approx(tuple(run["s2.vce"]), rel=1e-12)
    assert view.picture.curves[1].y == pytest.approx(tuple(run["s3.ic"]), rel=1e-12)


def test_sweep_view_follows_live_edits(live):
    view = live.sweep_view("s1.rc", 1e3, 20e3, n=60, show=["s2.vce"])
    before = list(view.curves[0].data["y"])
    live.set("s1.rc", 5.6e3)                       # the swept value: the marker moves
    assert view.markers[0].data["x"] == pytest.approx([5.6])
    assert view.picture.current == 5.6e3
    assert view.curves[0].data["y"] == pytest.approx(before)   # same plan otherwise: same curve
    live.set("s2.rc", 3.3e3)                       # another value: the whole curve is swept again
    assert view.curves[0].data["y"] != pytest.approx(before)
    i = 41
    reference = single(live.plan, s1__rc=view.picture.x[i])
    assert view.picture.curves[0].y[i] == pytest.approx(reference["s2.vce"], rel=1e-9)
    live.undo()
    live.undo()
    assert view.markers[0].data["x"] == pytest.approx([4.7])
    assert view.curves[0].data["y"] == pytest.approx(before)
    # The same arguments give the same view.
    assert live.sweep_view("s1.rc", 1e3, 20e3, n=60, show=["s2.vce"]) is view


def test_sweep_view_spans_are_the_regions_of_single_solves(live):
    view = live.sweep_view("s1.rc", 1e3, 20e3, n=120, show=["s1.vce"])
    spans = view.picture.spans
    assert spans, "the demo leaves forward-active somewhere over 1 kΩ … 20 kΩ"
    for span in spans:
        middle = math.sqrt(span.lo * span.hi)
        reference = solve_at(live.plan, "s1.rc", middle)
        assert reference[f"{span.sid}.region"] == span.what
        assert span.text in view.words.value.replace("&#x27;", "'")
    # Between the spans every stage is forward-active (a single solve at the live value).
    now = solve_at(live.plan, "s1.rc", 4.7e3)
    assert all(now[f"{sid}.region"] == "forward-active" for sid in live.stage_ids)
    assert "every stage forward-active" in view.picture.words[-1]
    assert view.spans.data["x0"] == pytest.approx([s.lo / 1e3 for s in spans])


def test_sweep_view_keeps_going_when_its_stage_goes(live):
    view = live.sweep_view("s3.re", 500.0, 5e3, n=20, show=["s3.vce"])
    live.remove("s3")
    assert live.status.ok
    assert "cannot be redrawn" in view.status.value and "s3" in view.status.value
    assert view.figures[0].background_fill_color == "#e6e6e6"
    live.undo()
    assert view.figures[0].background_fill_color == "#ffffff"


@pytest.mark.parametrize("args, culprit", [
    (("s1.rcx", 1e3, 2e3), "s1.rcx"),
    (("s1.rc", 2e3, 1e3), "lo"),
    (("s1.rc", 1e3, float("nan")), "hi"),
    (("s1.rc", 1e3, 2e3, 1), "n"),
    (("s1.coupling", 1.0, 2.0), "s1.coupling"),
    (("s1.rf", 1e3, 2e3), "s1.rf"),
])
def test_sweep_view_bad_input_names_the_culprit(live, args, culprit):
    with pytest.raises((InvalidValueError, UnknownNameError), match=culprit.replace(".", r"\.")):
        live.sweep_view(*args)
    assert not [k for k in live._views if k[0] == "sweep"]


@pytest.mark.parametrize("show, culprit", [(["s1.region"], "s1.region"), (["s9.vce"], "s9"), ([], "at least one"),
                                           (["gainn"], "gainn")])
def test_sweep_view_bad_show_names_the_culprit(live, show, culprit):
    with pytest.raises((InvalidValueError, UnknownNameError), match=culprit):
        live.sweep_view("s1.rc", 1e3, 2e3, show=show)


def test_sweep_picture_refuses_a_show_that_is_not_a_list(live):
    with pytest.raises(InvalidValueError, match="show"):
        sweep_picture(live.plan, "s1.rc", 1e3, 2e3, show=3)


def test_sweep_view_static_record(live):
    view = live.sweep_view("s1.rc", 1e3, 20e3, n=40)
    html_part, png_part = (part.bundle() for part in view.record.parts)
    assert "ampplan-static" in html_part["text/html"] and "s1.vce" in html_part["text/html"]
    assert png_part["image/png"].startswith(PNG)
    live.set("s1.rc", 3.3e3)
    assert "3.3 kΩ" in view.record.parts[0].bundle()["text/html"]


# -- the tolerance view --------------------------------------------------------------------

def test_tolerance_view_yield_equals_the_tolerance_run(live):
    live.set("s1.rc", 3.9e3)
    canvas = live.canvas()
    view = live.tolerance_view(samples=600, seed=7, resistors=0.05)
    alone = live.plan.tolerance(samples=600, seed=7, resistors=0.05)
    assert view.run.yield_fraction == alone.yield_fraction
    assert view.picture.passed == int(alone.passed.sum())
    assert f"{100 * alone.yield_fraction:.1f} %" in view.summary.value
    assert view.progress.value == view.progress.max == 600
    # Each histogram counts every sample that solved, split by pass/fail.
    ok = int(alone.sweep.ok.sum())
    for h in view.picture.histograms:
        assert sum(h.passed) + sum(h.failed) == ok
    # The sensitivity ranking is the run's own (scipy's rank correlations).
    first = dict(view.picture.sensitivity)["s1.saturation_margin"][0]
    assert first == alone.sensitivity["s1.saturation_margin"][0]
    assert canvas.canvas.clouds


def test_tolerance_clouds_on_the_canvas_are_the_samples(live):
    canvas = live.canvas()
    view = live.tolerance_view(samples=300, seed=11)
    run = view.run
    planes = plan_planes(live.result, live.plan)
    for sid in live.stage_ids:
        passing = canvas.canvas.source(sid, "cloud").data
        failing = canvas.canvas.source(sid, "cloud_failed").data
        assert len(passing["x"]) + len(failing["x"]) == min(int(run.sweep.ok.sum()), CLOUD_POINTS)
        assert len(passing["x"]) == int(np.sum(run.passed & run.sweep.ok))
        scale, _ = current_scale(planes.stage(sid).i_max)
        # The first drawn sample, solved on its own from its own values.
        first = int(np.flatnonzero(run.sweep.ok)[0])
        reference = run.sweep.plan_of(first).solve()
        data = passing if run.passed[first] else failing
        sign = -1.0 if live.plan.stage(sid).device.polarity == "pnp" else 1.0
        assert data["x"][0] == pytest.approx(sign * reference[f"{sid}.vce"], rel=1e-9)
        assert data["y"][0] == pytest.approx(reference[f"{sid}.ic"] * scale, rel=1e-9)
    # The canvas's static picture draws them too (and still is a PNG).
    assert canvas._record_bundle()["image/png"].startswith(PNG)


def test_tolerance_view_after_an_edit_and_again(live):
    canvas = live.canvas()
    view = live.tolerance_view(samples=200, seed=1)
    assert not view.stale
    live.set("s2.rc", 3.3e3)
    assert view.stale and "changed since this run" in view.status.value
    assert all(c.stale for c in live.clouds)
    glyph = canvas.canvas.panels["s1"].renderers["cloud"].glyph
    assert glyph.fill_color == "#9a9a9a"
    view.rerun()                                   # the button's action: the plan as it is now
    assert not view.stale and view.run.sweep.plan.get("s2.rc") == 3.3e3
    assert glyph.fill_color != "#9a9a9a"
    again = live.tolerance_view(samples=100, seed=2)   # a new call re-runs the one view
    assert again is view and again.run.samples == 100


def test_tolerance_view_is_current_again_when_an_undo_restores_the_plan_that_was_run(live):
    canvas = live.canvas()
    view = live.tolerance_view(samples=200, seed=1)
    glyph = canvas.canvas.panels["s1"].renderers["cloud"].glyph
    live.set("s2.rc", 3.3e3)
    assert view.stale and glyph.fill_color == "#9a9a9a"
    live.set("s2.rc", 3.6e3)                       # still not the plan that was run
    assert view.stale
    live.undo()
    live.undo()                                    # back to the plan of the run
    assert not view.stale and "back to the one that was run" in view.status.value
    assert not any(c.stale for c in live.clouds) and glyph.fill_color != "#9a9a9a"
    assert "before a later edit" not in view._record_html()["text/html"]
    live.redo()
    assert view.stale and "changed since this run" in view.status.value


def test_tolerance_view_button_runs_it_again(live):
    view = live.tolerance_view(samples=100, seed=5)
    first = view.run
    live.set("s1.rc", 3.9e3)
    view.button.click()
    assert view.run is not first and view.run.sweep.plan.get("s1.rc") == 3.9e3


def test_tolerance_view_interrupted_keeps_the_previous_run(live, monkeypatch):
    view = live.tolerance_view(samples=100, seed=5)
    previous = view.run
    import ampplan.analyses.whatif as whatif

    def interrupted(plan, progress=None, **kwargs):
        progress(40, 100)
        raise KeyboardInterrupt

    monkeypatch.setattr(whatif, "tolerance", interrupted)
    assert view.rerun() is False
    assert view.run is previous
    assert "Interrupted" in view.status.value and "40 of 100" in view.status.value
    assert view.progress.bar_style == "warning" and not view.button.disabled


@pytest.mark.parametrize("kwargs, culprit", [({"samples": 0}, "samples"), ({"resistors": 2.0}, "resistors"),
                                             ({"beta": (2.0, 1.0)}, "beta"), ({"model": "lookup-table"}, "model"),
                                             ({"distribution": "flat"}, "distribution")])
def test_tolerance_view_bad_input_names_the_culprit(live, kwargs, culprit):
    with pytest.raises(Exception, match=culprit) as caught:
        live.tolerance_view(**kwargs)
    assert caught.type.__module__.startswith("ampplan")
    assert "tolerance" not in live._views


def test_tolerance_view_static_record(live):
    view = live.tolerance_view(samples=150, seed=3)
    html_part, png_part = (part.bundle() for part in view.record.parts)
    assert "Yield" in html_part["text/html"] and "driven most by" in html_part["text/html"]
    assert png_part["image/png"].startswith(PNG)


# -- design on the live plan ---------------------------------------------------------------

def test_design_is_applied_and_undoable(live):
    summary = live.summary()
    edits = len(live._undo)
    result = live.design("s1.rc", ("s1.vce", 5.0))
    assert live.get("s1.rc") == result.exact
    assert len(live._undo) == edits + 1            # one edit
    assert solve_at(live.plan, "s1.rc", result.exact)["s1.vce"] == pytest.approx(5.0, abs=1e-6)
    assert live.result["s1.vce"] == pytest.approx(5.0, abs=1e-6)
    assert not summary.undo_button.disabled
    live.undo()
    assert live.get("s1.rc") == 4.7e3


def test_design_with_a_series_sets_the_standard_value(live):
    result = live.design("s1.rc", ("s1.vce", 5.0), series="E24")
    assert live.get("s1.rc") == result.snapped
    # E24 (IEC 60063): 5.6 and 6.2 are neighbours of the exact value near 6 kΩ.
    assert result.snapped in (5.6e3, 6.2e3)


def test_design_bad_input_names_the_culprit_and_changes_nothing(live):
    with pytest.raises(TargetNotReachedError):
        live.design("s1.rc", ("s1.vce", 500.0))
    assert live.get("s1.rc") == 4.7e3 and live.status.kind == "refused"
    with pytest.raises(UnknownNameError, match="s1.rcc"):
        live.design("s1.rcc", ("s1.vce", 5.0))
    assert not live.can_undo

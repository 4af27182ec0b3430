"""The notebook face headless: controls set from code, then the plan, the result, the other stages'
views, the summary and the canvas data sources are checked (no browser, no kernel).

Outside references: every number a view shows is compared with an independent ``plan.solve()`` of
a copy of the same plan; engineering notation is read against the SI prefixes of IEC 60050
(k = 1e3, µ/u = 1e-6); the log sliders' step is a 24th of a decade, the E24 spacing of IEC 60063.
"""

from __future__ import annotations

import math

import pytest

pytest.importorskip("ipywidgets")
pytest.importorskip("bokeh")
pytest.importorskip("jupyter_bokeh")

import ipywidgets as widgets  # noqa: E402

import ampplan  # noqa: E402
from ampplan import notebook as nb  # noqa: E402
from ampplan.notebook.controls import LOG_STEP, QuantityControl, slider_range  # noqa: E402
from ampplan.notebook.tables import CUSTOM_DEVICE  # noqa: E402
from ampplan.units import format_quantity  # noqa: E402


@pytest.fixture
def live():
    return nb.LivePlan.demo()


def classes(widget):
    return set(widget._dom_classes)


def test_editor_controls_come_from_the_declarations(live):
    editor = live.editor("s1")
    assert isinstance(editor, widgets.Widget)
    stage = live.plan.stage("s1")
    for p in stage.PARAMETERS:
        control = editor.controls[f"s1.{p.name}"]
        assert control.parameter is p and control.value == live.get(f"s1.{p.name}")
        # Log or linear as declared; optional ones have a "fitted" box.
        assert isinstance(control.slider, widgets.FloatLogSlider if p.scale == "log" else widgets.FloatSlider)
        assert (control.fitted in control.children) == p.optional
    assert {"s1.device", "s1.device.beta", "s1.coupling"} <= set(editor.controls)
    assert editor.controls["s1.rc"].value == 4.7e3  # SI: ohms, not kilohms
    # One arrow-key step on a log slider is a 24th of a decade (the E24 spacing, IEC 60063).
    assert editor.controls["s1.rc"].slider.step == pytest.approx(1 / 24) == LOG_STEP


def test_css_hooks_for_the_browser(live):
    editor = live.editor("s1")
    assert {"ampplan-editor", "ampplan-editor-s1"} <= classes(editor)
    assert {"ampplan-control", "ampplan-control-s1-rc"} <= classes(editor.controls["s1.rc"])
    assert "ampplan-control-s1-device-beta" in classes(editor.controls["s1.device.beta"])
    assert {"ampplan-stage-result", "ampplan-stage-result-s1"} <= classes(editor.result_view)
    assert "ampplan-status" in classes(editor.status)
    assert "ampplan-canvas" in classes(live.canvas())
    assert "ampplan-summary" in classes(live.summary())
    canvas = live.canvas().canvas
    doc_names = {m.name for m in canvas.layout.references() if getattr(m, "name", None)}
    assert {"ampplan-s1-qpoint", "ampplan-s2-dc", "ampplan-s3-ac", "ampplan-chain-available"} <= doc_names


def test_moving_a_control_resolves_once_and_every_view_follows(live):
    e1, e2, canvas, summary = live.editor("s1"), live.editor("s2"), live.canvas(), live.summary()
    before_s2 = e2.result_view.value
    before_summary = summary.figures.value
    solves = live.solve_count
    e1.controls["s1.rc"].slider.value = 3.3e3  # as a slider drag would
    assert live.solve_count == solves + 1
    assert live.plan.get("s1.rc") == pytest.approx(3.3e3)
    expected = live.plan.copy().solve()
    # s2 is direct-coupled from s1's collector: its bias moved, and its view shows it.
    s2 = expected.stage("s2")
    assert e2.result_view.value != before_s2
    assert format_quantity(s2.transistor.ic, "A") in e2.result_view.value
    assert format_quantity(-s2.transistor.vce, "V") in e2.result_view.value  # V_EC for the PNP
    assert summary.figures.value != before_summary
    assert format_quantity(expected.supply_current, "A") in summary.figures.value
    # The canvas data: the Q-point of every panel is the solved one (mA on the axis).
    for s in expected.stages:
        data = canvas.canvas.source(s.id, "qpoint").data
        assert data["x"][0] == pytest.approx(abs(s.transistor.vce), rel=1e-9)
        assert data["y"][0] == pytest.approx(s.transistor.ic * 1e3, rel=1e-9)
    assert e1.controls["s1.rc"].text.value == format_quantity(live.plan.get("s1.rc"), "Ω")


def test_set_from_code_is_the_same_as_moving_the_control(live):
    editor, canvas = live.editor("s1"), live.canvas()
    live.set("s1.rc", 3.9e3)
    assert editor.controls["s1.rc"].value == 3.9e3 and editor.controls["s1.rc"].text.value == "3.9 kΩ"
    assert canvas.canvas.source("s1", "qpoint").data["y"][0] == pytest.approx(
        live.result.stage("s1").transistor.ic * 1e3)


@pytest.mark.parametrize("typed, ohms", [("4.7k", 4.7e3), ("4.7 kΩ", 4.7e3), ("3.3kOhm", 3.3e3), ("820", 820.0),
                                         ("1.2M", 1.2e6)])
def test_typed_values_read_engineering_notation(live, typed, ohms):
    control = live.editor("s1").controls["s1.rc"]
    live.set("s1.rc", 1e3)
    control.text.value = typed
    assert live.plan.get("s1.rc") == pytest.approx(ohms, rel=1e-12) and control.value == pytest.approx(ohms)
    assert control.message.value == ""


@pytest.mark.parametrize("typed, words", [("abc", "cannot read"), ("4.7 kV", "unexpected"),
                                          ("-4.7k", "must be")])
def test_bad_typed_value_gets_a_message_and_the_control_goes_back(live, typed, words):
    control = live.editor("s1").controls["s1.rc"]
    before = ampplan.record.plan_to_dict(live.plan)
    solves = live.solve_count
    control.text.value = typed
    assert words in control.message.value and "s1.rc" in control.message.value
    assert control.value == 4.7e3 and control.text.value == "4.7 kΩ" and control.slider.value == pytest.approx(4.7e3)
    assert ampplan.record.plan_to_dict(live.plan) == before and live.solve_count == solves


def test_value_set_out_of_bounds_from_code_is_refused_and_shown(live):
    editor, summary = live.editor("s1"), live.summary()
    control = editor.controls["s1.rc"]
    control.value = -5.0
    assert control.value == 4.7e3 and live.plan.get("s1.rc") == 4.7e3
    assert "must be" in control.message.value
    assert "refused" in editor.status.value and "refused" in summary.status.value
    control.value = 5.6e3  # the next good value clears the message
    assert control.message.value == "" and "solved" in editor.status.value


def test_not_fitted_box(live):
    control = live.editor("s1").controls["s1.re"]
    control.fitted.value = False
    assert live.plan.get("s1.re") is None and control.value is None and control.text.value == "not fitted"
    assert control.slider.disabled
    control.fitted.value = True
    assert live.plan.get("s1.re") == pytest.approx(control.slider.value)
    control.text.value = "none"
    assert live.plan.get("s1.re") is None


def test_device_preset_by_role_and_coupling_choice(live):
    editor = live.editor("s1")
    preset = editor.controls["s1.device"]
    assert "general-purpose small-signal NPN" in preset.dropdown.options
    preset.dropdown.value = "low-noise high-gain NPN"
    assert live.plan.stage("s1").device == ampplan.preset("low-noise high-gain NPN")
    assert editor.controls["s1.device.beta"].value == ampplan.preset("low-noise high-gain NPN").beta
    editor.controls["s1.device.beta"].value = 123.0
    assert preset.value == CUSTOM_DEVICE
    # s2 has no base bias of its own: capacitor coupling is refused, next to the control.
    coupling = live.editor("s2").controls["s2.coupling"]
    coupling.dropdown.value = "capacitor"
    assert live.get("s2.coupling") == "direct" and coupling.value == "direct"
    assert "base bias" in coupling.message.value


def test_undo_redo_move_the_controls_back(live):
    editor, summary = live.editor("s1"), live.summary()
    editor.controls["s1.rc"].value = 3.3e3
    assert not summary.undo_button.disabled
    summary.undo_button.click()
    assert editor.controls["s1.rc"].value == 4.7e3 and live.get("s1.rc") == 4.7e3
    summary.redo_button.click()
    assert editor.controls["s1.rc"].value == 3.3e3


def test_add_and_remove_grow_and_shrink_the_canvas(live):
    view = live.canvas()
    canvas = view.canvas
    figures = {sid: panel.figure for sid, panel in canvas.panels.items()}
    sid = live.add(ampplan.CommonCollector(re=3.3e3, device=ampplan.preset("general-purpose small-signal NPN")),
                   coupling="direct")
    assert set(canvas.panels) == {"s1", "s2", "s3", sid}
    # Existing figures are kept, not rebuilt.
    assert all(canvas.panels[k].figure is f for k, f in figures.items())
    shown = [f for r in canvas.layout.children for f in r.children]
    assert canvas.panels[sid].figure in shown and len(shown) == 5
    new_editor = live.editor(sid)
    assert "forward-active" in new_editor.result_view.value
    live.remove(sid)
    assert set(canvas.panels) == {"s1", "s2", "s3"}
    assert sum(len(r.children) for r in canvas.layout.children) == 4
    assert "no longer in the plan" in new_editor.result_view.value
    assert new_editor.controls[f"{sid}.re"].slider.disabled


def test_canvas_updates_data_in_place(live):
    canvas = live.canvas().canvas
    source = canvas.source("s1", "qpoint")
    live.set("s1.rc", 3.3e3)
    assert canvas.source("s1", "qpoint") is source
    assert set(source.data) == {"x", "y", "text"}
    assert "Q-point" in source.data["text"][0] and "V_CE" in source.data["text"][0]
    title = canvas.panels["s1"].figure.title.text
    assert "forward-active" in title


def test_unsettled_plan_greys_the_canvas_and_says_so(live, monkeypatch):
    view, summary, e2 = live.canvas(), live.summary(), live.editor("s2")
    solve = ampplan.Plan.solve

    def unsettled(plan, *args, **kwargs):
        if plan.get("s1.rc") < 10.0:
            raise ampplan.errors.NoConsistentRegionError("no consistent assignment (test double)")
        return solve(plan, *args, **kwargs)

    monkeypatch.setattr(ampplan.Plan, "solve", unsettled)
    good_q = view.canvas.source("s1", "qpoint").data["x"][0]
    live.set("s1.rc", 1.0)
    assert view.canvas.source("s1", "qpoint").data["x"][0] == good_q  # the last good picture is kept
    assert view.canvas.panels["s1"].figure.background_fill_color != "#ffffff"
    assert "LAST GOOD" in view.canvas.panels["s1"].figure.title.text
    assert "Greyed" in view.note.value and "not settled" in view.status.value
    assert "Last good result" in summary.figures.value and "Last good result" in e2.result_view.value
    live.undo()
    assert view.canvas.panels["s1"].figure.background_fill_color == "#ffffff" and view.note.value == ""


def test_exception_in_a_view_is_shown_in_the_view(live, monkeypatch):
    view, editor = live.canvas(), live.editor("s1")

    def broken(planes, stale=False):
        raise RuntimeError("drawing failed")

    monkeypatch.setattr(view.canvas, "update", broken)
    editor.controls["s1.rc"].value = 3.3e3
    assert live.get("s1.rc") == 3.3e3  # the plan took the value; only the view failed
    assert "could not be redrawn" in view.note.value and "drawing failed" in view.note.value
    assert "LAST GOOD" in view.canvas.panels["s1"].figure.title.text
    assert "a view failed" in editor.status.value and "drawing failed" in editor.status.value


def test_plan_editor_and_summary_figures(live):
    plan_editor, summary = live.editor("plan"), live.summary()
    assert "ampplan-editor-plan" in classes(plan_editor)
    plan_editor.controls["supply"].text.value = "15 V"
    assert live.plan.supply == 15.0
    r = live.plan.copy().solve()
    text = summary.figures.value
    for needed in (f"{r.gain:.4g} V/V", f"{20 * math.log10(abs(r.gain)):.1f} dB", format_quantity(r.input_resistance, "Ω"),
                   format_quantity(r.output_resistance, "Ω"), f"limited by {r.limiting_stage}",
                   format_quantity(r.supply_power, "W"), "constant-drop"):
        assert needed in text, needed
    live.model = "ebers-moll"
    assert "ebers-moll" in summary.figures.value


def test_views_are_made_once(live):
    assert live.editor("s1") is live.editor("s1") and live.canvas() is live.canvas()
    with pytest.raises(ampplan.errors.UnknownNameError, match="s9"):
        live.editor("s9")


def test_static_records_hold_the_latest_state(live):
    editor, view, summary = live.editor("s1"), live.canvas(), live.summary()
    live.set("s1.rc", 3.9e3)
    bundle = editor.record.bundle()
    assert "3.9 kΩ" in bundle["text/html"] and "ampplan-static" in bundle["text/html"]
    assert "3.9 kΩ" in bundle["text/plain"]
    png = view.record.bundle()["image/png"]
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    assert format_quantity(live.result.supply_current, "A") in summary.record.bundle()["text/html"]


def test_slider_range_from_typical_or_derived():
    p = ampplan.CommonEmitter.PARAMETERS[2]  # rc: log, 4.7 kΩ default
    low, high = slider_range(p, 4.7e3)
    assert low < 4.7e3 < high and p.minimum <= low and high <= p.maximum
    assert slider_range(p, 4.7e3, typical=(1e3, 1e5)) == (1e3, 1e5)
    assert slider_range(p, 5e5, typical=(1e3, 1e5)) == (1e3, 5e5)  # stretched to hold the value
    supply = ampplan.plan.PLAN_PARAMETERS["supply"]  # linear, > 0, with a declared typical range
    low, high = slider_range(supply, 12.0)
    assert (low, high) == supply.typical and low < 12.0 < high


def test_quantity_control_reports_an_exception_in_its_callback():
    def broken(address, value):
        raise RuntimeError("kaboom")

    p = ampplan.CommonEmitter.PARAMETERS[2]
    control = QuantityControl("s1.rc", p, 4.7e3, broken)
    control.value = 1e3
    assert "kaboom" in control.message.value and control.value == 4.7e3


def test_removing_a_middle_stage_keeps_every_other_editor_on_its_stage(live):
    e3, canvas = live.editor("s3"), live.canvas().canvas
    figure_s3 = canvas.panels["s3"].figure
    live.remove("s2")
    assert set(canvas.panels) == {"s1", "s3"} and canvas.panels["s3"].figure is figure_s3
    # s3 now hangs from s1's collector: its editor still edits s3 and shows s3's new result.
    r = live.plan.copy().solve()
    assert format_quantity(r.stage("s3").transistor.ic, "A") in e3.result_view.value
    e3.controls["s3.re"].value = 2.2e3
    assert live.get("s3.re") == 2.2e3
    live.undo()
    live.undo()
    assert live.stage_ids == ("s1", "s2", "s3") and set(canvas.panels) == {"s1", "s2", "s3"}
    assert e3.controls["s3.re"].value == 1.8e3


def test_moving_a_stage_reorders_the_canvas_without_rebuilding(live):
    canvas = live.canvas().canvas
    figures = {sid: p.figure for sid, p in canvas.panels.items()}
    live.add(ampplan.CommonEmitter(rb1=100e3, rb2=22e3, rc=4.7e3, re=1e3), id="pre")
    live.move("pre", 0)
    shown = [f for r in canvas.layout.children for f in r.children]
    assert shown[:4] == [canvas.panels[sid].figure for sid in ("pre", "s1", "s2", "s3")]
    assert all(canvas.panels[sid].figure is f for sid, f in figures.items())


def test_static_record_refreshes_merge_to_one_per_cell(monkeypatch):
    # In a cell, every change marks the record; it is drawn once when the cell ends (IPython's
    # post_run_cell event), however many edits the cell made.
    from ampplan.notebook import record as rec

    class Events:
        def __init__(self):
            self.callbacks = []

        def register(self, name, callback):
            assert name == "post_run_cell"
            self.callbacks.append(callback)

    class Shell:
        events = Events()

    shell = Shell()
    drawn = []
    monkeypatch.setattr(rec, "_shell", lambda: shell)
    monkeypatch.setattr(rec, "_handling", lambda: "execute_request")
    monkeypatch.setattr(rec, "_HOOKED", [])
    monkeypatch.setattr(rec, "_AT_CELL_END", {})
    record = rec.StaticRecord(lambda: {"text/plain": "x"})
    monkeypatch.setattr(record, "_flush", lambda: drawn.append(1))
    record.shown = True
    for _ in range(5):
        record.refresh()
    assert drawn == [] and len(shell.events.callbacks) == 1
    shell.events.callbacks[0]()
    assert drawn == [1]
    shell.events.callbacks[0]()  # nothing changed since: nothing drawn
    assert drawn == [1]


def test_canvas_sends_only_what_changed(live):
    canvas = live.canvas().canvas
    sources = {(sid, name): s for sid, p in canvas.panels.items() for name, s in p.sources.items()}
    before = {k: s.data for k, s in sources.items()}
    live.set("s3.re", 2.2e3)  # the follower: s1 and s2 keep their Q-points
    assert sources[("s1", "qpoint")].data is before[("s1", "qpoint")]
    assert sources[("s3", "qpoint")].data is not before[("s3", "qpoint")]


@pytest.mark.parametrize("address", ["s1.rb1", "s1.rb2", "s1.rc", "s1.re", "s1.device.beta", "s1.device.vbe_on"])
def test_slider_grid_passes_through_the_plan_value(live, address):
    # A slider's front end snaps to min + k·step and sends the result back: the grid must pass
    # through the value, or showing the editor would change the design.
    control = live.editor("s1").controls[address]
    slider = control.slider
    here = math.log10(control.value) if isinstance(slider, widgets.FloatLogSlider) else control.value
    k = (here - slider.min) / slider.step
    assert abs(k - round(k)) < 1e-6 and slider.min <= here <= slider.max
    live.set(address, control.value * 1.013)  # off the old grid
    here = math.log10(control.value) if isinstance(slider, widgets.FloatLogSlider) else control.value
    k = (here - slider.min) / slider.step
    assert abs(k - round(k)) < 1e-6


def test_slider_echo_does_not_edit_the_plan(live):
    control = live.editor("s1").controls["s1.rc"]
    solves = live.solve_count
    control.slider.value = 4.7e3 * (1 + 1e-13)  # the front end's rounding of 4.7 kΩ
    assert live.get("s1.rc") == 4.7e3 and live.solve_count == solves and not live.can_undo


def test_a_value_from_code_snapped_to_the_old_slider_grid_is_not_an_edit(live):
    # Seen in JupyterLab: after live.set("s1.rc", 3.9e3) from code, the slider applied the value
    # before its new grid and sent back 3.9 kΩ snapped to the grid laid through 4.7 kΩ.
    control = live.editor("s1").controls["s1.rc"]
    old_grid = math.log10(4.7e3)
    live.set("s1.rc", 3.9e3)
    edits = len(live._undo)
    k = round((math.log10(3.9e3) - old_grid) / LOG_STEP)
    control.slider.value = 10 ** (old_grid + k * LOG_STEP)  # about 3.879 kΩ
    assert live.get("s1.rc") == 3.9e3 and len(live._undo) == edits
    assert control.slider.value == pytest.approx(3.9e3, rel=1e-12)  # the slider is put back
    # A real move is a whole step (a 24th of a decade, E24 spacing per IEC 60063) and is taken.
    control.slider.value = 10 ** (math.log10(3.9e3) + LOG_STEP)
    assert live.get("s1.rc") == pytest.approx(3.9e3 * 10 ** LOG_STEP, rel=1e-9)


def test_a_linear_slider_echo_within_half_a_step_is_not_an_edit(live):
    control = live.editor("plan").controls["supply"]
    step = control.slider.step
    solves = live.solve_count
    control.slider.value = live.get("supply") + 0.3 * step
    assert live.solve_count == solves and control.slider.value == live.get("supply")
    control.slider.value = live.get("supply") + step
    assert live.solve_count == solves + 1


def test_sliders_send_only_what_the_designer_does(live):
    # With continuous updates, ipywidgets' log slider sends back every value the kernel gives it
    # (snapped to its grid), and such echoes can arrive after later edits.
    for control in live.editor("s1").controls.values():
        if isinstance(control, QuantityControl):
            assert control.slider.continuous_update is False


def test_a_slider_message_carries_its_new_range_before_its_value(live):
    control = live.editor("s1").controls["s1.rc"]
    messages = []
    control.slider._send = lambda msg, buffers=None: messages.append(msg)
    live.set("s1.rc", 3.9e3)  # off the old grid: the range moves with the value
    [message] = [m for m in messages if "value" in m.get("state", {})]
    keys = list(message["state"])
    assert keys[-1] == "value" and {"min", "max"} <= set(keys)


def test_canvas_carries_a_key_for_every_kind_of_layer(live):
    from ampplan.notebook.look import COLOURS, KEY, LAYER_NAMES
    view = live.canvas()
    assert {name for name, _, _ in KEY} | {"cutoff"} == set(LAYER_NAMES)
    for name, _, words in KEY:
        assert COLOURS[name] in view.key.value and words in view.key.value

"""The live views: stage editors, the plan editor, the canvas and the summary.

Every view observes the live plan (:class:`ampplan.live.ObservablePlan`) and reads the one result
it holds; controls write values through it. No view solves anything. Each view, when displayed,
also shows its static record (:mod:`.record`), refreshed on every change.
"""

from __future__ import annotations

import html

import ipywidgets as widgets

from ..analyses.plane import plan_planes
from ..devices import PRESETS, preset
from ..plan import COUPLINGS, PLAN_PARAMETERS
from ..stages import Parameter
from . import tables
from .controls import ChoiceControl, QuantityControl
from .record import StaticRecord, html_block
from .tables import CUSTOM_DEVICE, preset_of

__all__ = ["StageEditor", "PlanEditor", "CanvasView", "SummaryView", "DEVICE_PARAMETERS", "PLAN_CONTROLS"]

#: The device parameters each stage editor offers, declared like the templates' parameters, with
#: the slider range each starts with (common practice for small-signal silicon parts, no source).
DEVICE_PARAMETERS: tuple = (
    (Parameter("beta", "", 100.0, "forward current gain β = I_C / I_B", minimum=0.0, optional=False,
               scale="log"), (20.0, 1000.0)),
    (Parameter("vbe_on", "V", 0.7, "base-emitter drop when conducting (constant-drop model)", minimum=0.0,
               maximum=2.0, optional=False, scale="linear"), (0.5, 0.9)),
    (Parameter("vce_sat", "V", 0.2, "collector-emitter voltage in saturation (constant-drop model)",
               minimum=0.0, minimum_inclusive=True, maximum=2.0, optional=False, scale="linear"), (0.0, 1.0)),
)
#: Plan values the plan editor offers.
PLAN_CONTROLS = ("supply", "negative_supply", "source_resistance", "load_resistance", "temperature")

def _e(text) -> str:
    return html.escape(str(text))


def status_html(live) -> str:
    return tables.status_html(live.status, live.model)


def stage_result_html(live, sid: str) -> str:
    return tables.stage_result_html(live.plan, live.result, sid, live.result_is_current)


def summary_html(live) -> str:
    return tables.summary_html(live.result, live.result_is_current)


#: In a live JupyterLab page the static record right after a live view would show everything twice:
#: this rule, carried by every live view, hides the output that follows it. Where the view does not
#: render (a saved notebook without a kernel, nbconvert's HTML, a code host) the rule is not on the
#: page and the record shows.
LIVE_STYLE = ("<style>.jp-OutputArea-child:has(.ampplan-live-view) + .jp-OutputArea-child "
              "{display: none;}</style>")


class _View(widgets.VBox):
    """A VBox that shows its static record after itself when displayed."""

    record: StaticRecord

    def __init__(self, children, **kwargs):
        style = widgets.HTML(LIVE_STYLE, layout=widgets.Layout(display="none"))
        super().__init__(children=[*children, style], **kwargs)
        self.add_class("ampplan-live-view")

    def _ipython_display_(self):
        from IPython.display import display
        display(self._repr_mimebundle_(), raw=True)
        self.record.show()

    def _status_widget(self):
        status = widgets.HTML("")
        status.add_class("ampplan-status")
        return status


class StageEditor(_View):
    """The editor of one stage: its controls (``.controls`` by plan address), its result, the status.

    Controls come from the stage template's :class:`~ampplan.stages.Parameter` declarations, the
    device preset by role, the device parameters of :data:`DEVICE_PARAMETERS` and the coupling.
    """

    def __init__(self, live, sid: str):
        self.live = live
        self.sid = sid
        stage = live.plan.stage(sid)
        self.controls: dict = {}
        for p in stage.PARAMETERS:
            address = f"{sid}.{p.name}"
            self.controls[address] = QuantityControl(address, p, live.get(address), live.set, label=p.name)
        self.controls[f"{sid}.device"] = ChoiceControl(f"{sid}.device", [*PRESETS, CUSTOM_DEVICE],
                                                       preset_of(stage.device), self._set_device,
                                                       "device preset")
        for p, typical in DEVICE_PARAMETERS:
            address = f"{sid}.device.{p.name}"
            self.controls[address] = QuantityControl(address, p, live.get(address), live.set,
                                                     label=f"device.{p.name}", typical=typical)
        self.controls[f"{sid}.coupling"] = ChoiceControl(f"{sid}.coupling", COUPLINGS, live.get(f"{sid}.coupling"),
                                                         live.set, "coupling")
        self.header = widgets.HTML("")
        self.result_view = widgets.HTML("")
        self.result_view.add_class("ampplan-stage-result")
        self.result_view.add_class(f"ampplan-stage-result-{sid}")
        self.status = self._status_widget()
        super().__init__([self.header, *self.controls.values(), self.result_view, self.status])
        self.add_class("ampplan-editor")
        self.add_class(f"ampplan-editor-{sid}")
        self.record = StaticRecord(self._record_bundle)
        self.refresh()

    def _set_device(self, address, role):
        if role == CUSTOM_DEVICE:
            return
        self.live.set(address, preset(role))

    def _header_html(self) -> str:
        if self.sid not in self.live.plan.stage_ids:
            return f"<b>Stage {_e(self.sid)}</b> (removed from the plan)"
        stage = self.live.plan.stage(self.sid)
        coupling = self.live.get(f"{self.sid}.coupling")
        return (f"<b>Stage {_e(self.sid)}</b>: {_e(stage.kind)}, {_e(stage.device.polarity.upper())}, "
                f"{_e(coupling)}-coupled")

    def refresh(self, change=None) -> None:
        """Follow the live plan: control values, header, result, status."""
        present = self.sid in self.live.plan.stage_ids
        for address, control in self.controls.items():
            control.disabled = not present
            for child in control.children:
                if hasattr(child, "disabled") and not isinstance(child, widgets.HTML):
                    child.disabled = not present
            if not present:
                continue
            if address == f"{self.sid}.device":
                control.sync(preset_of(self.live.plan.stage(self.sid).device))
            else:
                control.sync(self.live.get(address))
            if change is not None and change.status.kind != "refused" and change.address == address:
                control.clear_message()
        self.header.value = self._header_html()
        self.result_view.value = stage_result_html(self.live, self.sid)
        self.status.value = status_html(self.live)
        self.record.refresh()

    def _record_bundle(self) -> dict:
        values = tables.stage_values(self.live.plan, self.sid) if self.sid in self.live.plan.stage_ids else []
        body = (self._header_html() + "<div style='display:flex;gap:2em'>" + tables.table(values)
                + "<div>" + stage_result_html(self.live, self.sid) + "</div></div>")
        text = f"stage {self.sid}: " + ", ".join(f"{k} {v}" for k, v in values)
        return {"text/html": html_block(body, f"Static record of stage {self.sid} (latest state)"),
                "text/plain": text}


class PlanEditor(_View):
    """The editor of the plan's own values (supply, source, load, temperature) and load coupling."""

    def __init__(self, live):
        self.live = live
        self.sid = "plan"
        self.controls: dict = {}
        for name in PLAN_CONTROLS:
            self.controls[name] = QuantityControl(name, PLAN_PARAMETERS[name], live.get(name), live.set)
        self.controls["load_coupling"] = ChoiceControl("load_coupling", COUPLINGS, live.get("load_coupling"),
                                                       live.set, "load_coupling")
        self.result_view = widgets.HTML("")
        self.result_view.add_class("ampplan-stage-result")
        self.result_view.add_class("ampplan-stage-result-plan")
        self.status = self._status_widget()
        super().__init__([widgets.HTML("<b>Plan</b>: supply, source, load"), *self.controls.values(),
                          self.result_view, self.status])
        self.add_class("ampplan-editor")
        self.add_class("ampplan-editor-plan")
        self.record = StaticRecord(self._record_bundle)
        self.refresh()

    def refresh(self, change=None) -> None:
        for address, control in self.controls.items():
            control.sync(self.live.get(address))
            if change is not None and change.status.kind != "refused" and change.address == address:
                control.clear_message()
        self.result_view.value = summary_html(self.live)
        self.status.value = status_html(self.live)
        self.record.refresh()

    def _record_bundle(self) -> dict:
        values = tables.plan_values(self.live.plan)
        return {"text/html": html_block(tables.table(values), "Static record of the plan values (latest state)"),
                "text/plain": ", ".join(f"{k} {v}" for k, v in values)}


class SummaryView(_View):
    """The chain figures, the status, and undo / redo buttons."""

    def __init__(self, live):
        self.live = live
        self.figures = widgets.HTML("")
        self.figures.add_class("ampplan-summary-figures")
        self.status = self._status_widget()
        self.undo_button = widgets.Button(description="undo", layout=widgets.Layout(width="80px"))
        self.redo_button = widgets.Button(description="redo", layout=widgets.Layout(width="80px"))
        self.undo_button.on_click(lambda _: live.undo())
        self.redo_button.on_click(lambda _: live.redo())
        super().__init__([widgets.HTML("<b>Chain</b>"), self.figures, self.status,
                          widgets.HBox([self.undo_button, self.redo_button])])
        self.add_class("ampplan-summary")
        self.record = StaticRecord(self._record_bundle)
        self.refresh()

    def refresh(self, change=None) -> None:
        self.figures.value = summary_html(self.live)
        self.status.value = status_html(self.live)
        self.undo_button.disabled = not self.live.can_undo
        self.redo_button.disabled = not self.live.can_redo
        self.record.refresh()

    def _record_bundle(self) -> dict:
        r = self.live.result
        text = r.summary() if r is not None else "no result"
        return {"text/html": html_block(summary_html(self.live), "Static record of the chain (latest state)"),
                "text/plain": text}


class CanvasView(_View):
    """The bokeh canvas in a widget (through jupyter_bokeh), with a status line above it.

    Its static record is the PNG picture drawn by matplotlib from the same plane data.
    """

    def __init__(self, live):
        from .bokehwidget import BatchedBokehModel
        from .canvas import Canvas
        self.live = live
        self.canvas = Canvas()
        self.status = self._status_widget()
        self.note = widgets.HTML("")
        self.note.add_class("ampplan-canvas-note")
        self._planes = None
        self.plot = None
        self.refresh()
        self.plot = BatchedBokehModel(self.canvas.layout)
        self.plot.add_class("ampplan-canvas-plot")
        from .look import key_html
        self.key = widgets.HTML(key_html())
        super().__init__([self.status, self.note, self.key, self.plot])
        self.add_class("ampplan-canvas")
        self.record = StaticRecord(self._record_bundle)

    def _ipython_display_(self):
        _ensure_bokehjs()
        super()._ipython_display_()

    def refresh(self, change=None) -> None:
        live = self.live
        self.status.value = status_html(live)
        if live.result is None:
            self.note.value = "<i>Nothing to draw: the plan has no result.</i>"
            return
        try:
            self._planes = plan_planes(live.result, live.plan)
            # Every change of this edit reaches BokehJS as one message, applied in one step.
            if self.plot is None:
                self.canvas.update(self._planes, stale=not live.result_is_current)
            else:
                with self.plot.batch():
                    self.canvas.update(self._planes, stale=not live.result_is_current)
        except Exception as exc:
            # Keep the last good picture, greyed, and say why where the designer looks.
            self.canvas.grey(f"the canvas could not be redrawn: {type(exc).__name__}")
            self.note.value = (f"<span style='color:#a01a1a'><b>⚠ The canvas could not be redrawn</b> "
                               f"({_e(type(exc).__name__)}: {_e(exc)}); it shows the last good result, "
                               "greyed.</span>")
            raise
        self.note.value = ("" if live.result_is_current else
                           "<span style='color:#a01a1a'><b>Greyed: last good result.</b> The plan as it is "
                           "now did not settle; undo, or change a value.</span>")
        record = getattr(self, "record", None)
        if record is not None:
            record.refresh()

    def _record_bundle(self) -> dict:
        from .picture import draw_png
        if self._planes is None:
            return {"text/plain": "no picture: the plan has no result"}
        png = draw_png(self._planes, stale=not self.live.result_is_current, clouds=self.canvas.clouds)
        return {"image/png": png,
                "text/plain": "Static picture of the canvas: " + "; ".join(p.title for p in self._planes.stages)}


def _ensure_bokehjs() -> None:
    """Put BokehJS on the page before the first canvas (idempotent; see :mod:`.resources`)."""
    from .resources import ensure_bokehjs
    ensure_bokehjs()

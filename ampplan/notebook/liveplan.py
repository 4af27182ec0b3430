"""``LivePlan``: the observable plan of :mod:`ampplan.live` with its notebook views."""

from __future__ import annotations

from ..live import ObservablePlan
from .views import CanvasView, PlanEditor, StageEditor, SummaryView

__all__ = ["LivePlan"]


class LivePlan(ObservablePlan):
    """A plan that re-solves on every accepted change, with editors, a canvas and a summary.

    ``LivePlan(plan, model="constant-drop")`` or ``LivePlan.demo()``; then, each in its own cell,
    ``live.editor("s1")``, ``live.editor("s2")``, ..., ``live.canvas()``, ``live.summary()``.
    Moving any control re-solves the whole plan once and every view follows. Each view is made
    once and kept: calling ``live.editor("s1")`` again gives the same widget (another view of it).
    See :class:`ampplan.live.ObservablePlan` for ``set``, ``undo``, ``redo``, ``add``,
    ``remove``, ``observe``, ``save`` and the status.
    """

    def __init__(self, plan, model: str = "constant-drop"):
        self._views: dict = {}
        super().__init__(plan, model=model)

    def _view(self, key, make):
        view = self._views.get(key)
        if view is None:
            view = make()
            self._views[key] = view
            self.observe(view.refresh, kind="change")
            if key == "canvas":
                # The canvas is told first: its data is what the designer watches while a slider
                # moves, and the browser applies messages in the order they were sent.
                self._observers.insert(0, self._observers.pop())
        return view

    def editor(self, sid: str = "plan"):
        """The editor of stage ``sid`` (``"s1"`` ...), or of the plan's own values with ``"plan"``.

        An ipywidgets widget with ``.controls``: a dict from plan address (``"s1.rc"``,
        ``"s1.device.beta"``, ``"s1.coupling"``) to its control, whose ``.value`` is in SI units.

        Raises
        ------
        UnknownNameError
            The plan has no stage ``sid``.
        """
        if sid == "plan":
            return self._view("plan", lambda: PlanEditor(self))
        self.plan.stage(sid)  # names the stages when sid is not one of them
        return self._view(("stage", sid), lambda: StageEditor(self, sid))

    def canvas(self):
        """The canvas: every stage's I_C–V_CE panel and the chain view (one bokeh layout)."""
        return self._view("canvas", lambda: CanvasView(self))

    def summary(self):
        """The chain figures: gain, R_in, R_out, largest source amplitude and its stage, supply
        current and power, cautions, the model."""
        return self._view("summary", lambda: SummaryView(self))

    def record(self) -> None:
        """Rewrite every static record now (before saving a notebook, say)."""
        for view in self._views.values():
            view.record._flush() if view.record.shown else None

"""``LivePlan``: the observable plan of :mod:`ampplan.live` with its notebook views."""

from __future__ import annotations

from ..errors import AmpplanError
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
        self._clouds: tuple = ()
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
        """The canvas: every stage's I_C–V_CE panel and the chain view (one bokeh layout).

        After a tolerance run (:meth:`tolerance_view`) each panel also shows the run's sampled
        Q-points as a cloud (grey once the plan has changed since the run)."""
        return self._view("canvas", self._make_canvas)

    def _make_canvas(self):
        view = CanvasView(self)
        if self._clouds:
            view.canvas.set_clouds(self._clouds)
        return view

    # -- what-if views ------------------------------------------------------------------------
    def sweep_view(self, address: str, lo, hi, n: int = 200, show=None):
        """Curves of results against one plan value, following every edit.

        ``live.sweep_view("s1.rc", 1e3, 20e3, show=["s1.vce", "s2.vce"])``: the results at
        ``show`` (default: the swept stage's V_CE and I_C and the largest source amplitude) over
        ``n`` values of ``address`` from ``lo`` to ``hi`` (geometric when lo > 0 and hi/lo >= 10),
        computed by one batched sweep of a copy of the live plan
        (:func:`ampplan.analyses.whatif.sweep`); the plan's current value marked on each curve;
        the spans where a stage leaves forward-active or the plan does not solve shaded and said in
        words. Every edit of the live plan re-sweeps it. The same arguments give the same view.

        Raises
        ------
        InvalidValueError, UnknownNameError
            A bad range or count, an address that is unknown, a word or not fitted, a result
            address that is unknown or a word; the message names it.
        """
        from .whatif import SweepView
        show_key = None if show is None else (show,) if isinstance(show, str) else tuple(show)
        key = ("sweep", address, lo, hi, n, show_key)
        return self._view(key, lambda: SweepView(self, address, lo, hi, n, show))

    def tolerance_view(self, samples: int = 10_000, seed=None, resistors=0.05, beta=(0.5, 2.0), vbe_on=0.01,
                       temperature=(0.0, 50.0), distribution: str = "uniform", required_amplitude=None,
                       model=None, executor=None):
        """Run a tolerance run of the live plan now and show it: the yield, each margin's histogram,
        the sensitivity ranking, and the sampled Q-points as clouds on the canvas's panels.

        The keyword arguments are those of :meth:`ampplan.Plan.tolerance` (``model`` defaults to
        the live plan's). The run shows a progress bar and stops cleanly when the kernel is
        interrupted. Its button runs it again on the plan as it is then; a later call runs it
        again with the new arguments (one tolerance view per live plan).

        Raises
        ------
        InvalidValueError, UnknownModelError
            Bad spreads, sample count, seed, distribution, model or executor (named).
        """
        from .whatif import ToleranceView
        options = dict(samples=samples, seed=seed, resistors=resistors, beta=beta, vbe_on=vbe_on,
                       temperature=temperature, distribution=distribution, required_amplitude=required_amplitude,
                       model=model, executor=executor)
        view = self._views.get("tolerance")
        if view is None:
            view = ToleranceView(self, options)
            view.rerun()  # raises on bad arguments before the view is kept
            self._view("tolerance", lambda: view)
        else:
            view.options = {}
            view.rerun(**options)
        return view

    def design(self, address: str, target, series=None, bounds=None):
        """Solve ``address`` so that a result reaches ``target`` (see :meth:`ampplan.Plan.design`)
        and set it on the live plan: one edit, which :meth:`undo` takes back.

        ``live.design("s1.rc", ("s1.vce", 5.0), series="E24")`` sets the E24 value that lands
        closest; without a series, the exact value. Returns the DesignResult.

        Raises
        ------
        InvalidValueError, UnknownNameError, TargetNotReachedError
            From :meth:`ampplan.Plan.design` (recorded in the status too); the plan is unchanged.
        """
        with self._lock:
            try:
                result = self.plan.design(address, target, series=series, bounds=bounds, model=self.model)
            except AmpplanError as exc:
                self._refuse(exc, "design", address if isinstance(address, str) else None)
                raise
            self.set(address, result.chosen)
            return result

    @property
    def clouds(self) -> tuple:
        """The latest tolerance run's sampled Q-points per stage (StageCloud), drawn on the canvas."""
        return self._clouds

    def _set_clouds(self, clouds) -> None:
        self._clouds = tuple(clouds)
        view = self._views.get("canvas")
        if view is None:
            return
        if view.plot is None:
            view.canvas.set_clouds(self._clouds)
        else:
            with view.plot.batch():
                view.canvas.set_clouds(self._clouds)
        view.record.refresh()

    def summary(self):
        """The chain figures: gain, R_in, R_out, largest source amplitude and its stage, supply
        current and power, cautions, the model."""
        return self._view("summary", lambda: SummaryView(self))

    def record(self) -> None:
        """Rewrite every static record now (before saving a notebook, say)."""
        for view in self._views.values():
            view.record._flush() if view.record.shown else None

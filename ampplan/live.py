"""The observable design below the widgets: a plan, its latest good result, a status, an undo
history and observers.

It imports no widget library, so it is used and tested without Jupyter; the notebook's editors,
canvas and summary (:mod:`ampplan.notebook`) only observe it and write values through it.

Rules it keeps:

* one solve per accepted change (a value, a stage added or removed, the model, an undo or redo);
  every view reads that one result;
* a refused value (bad number, unknown address, a stage left without its base bias) leaves the
  plan as it was, raises the error and records it in the status; nothing is solved;
* a plan the solver cannot settle keeps the change (undo takes it back), keeps the last good
  result and says so in the status (``result_is_current`` is False);
* an observer that raises does not stop the others; its error becomes the status;
* one change at a time: JupyterLab may deliver widget messages on a thread of their own (a kernel
  subshell) while a cell runs, so every change holds the live plan's lock from the edit until the
  last observer has been told.

Stage ids are the plan's own (``plan.stage_ids``); the live plan never keys anything by position.
"""

from __future__ import annotations

import copy
import functools
import importlib.resources
import os
import threading
from dataclasses import dataclass
from typing import Callable, Literal, get_args

from .errors import AmpplanError, ConvergenceError, NoConsistentRegionError, UnknownModelError
from .plan import Plan
from .solver import MODELS

__all__ = ["ObservablePlan", "Status", "StatusKind", "STATUS_KINDS", "Change", "DEMO_PLAN"]

#: The demo plan shipped inside the package (an invented scenario), relative to the package.
DEMO_PLAN = "data/demo_plan.json"

StatusKind = Literal["ok", "refused", "unsettled", "error"]
STATUS_KINDS: tuple[str, ...] = get_args(StatusKind)

#: What an observer is told about.
ObserveKind = Literal["result", "change"]
OBSERVE_KINDS: tuple[str, ...] = get_args(ObserveKind)

_UNSETTLED = (NoConsistentRegionError, ConvergenceError)


def _one_at_a_time(method):
    """Run ``method`` holding the live plan's lock (re-entrant: an observer may edit again)."""
    @functools.wraps(method)
    def locked(self, *args, **kwargs):
        with self._lock:
            return method(self, *args, **kwargs)
    return locked


@dataclass(frozen=True)
class Status:
    """How the live plan stands after the latest change.

    Attributes
    ----------
    kind : {"ok", "refused", "unsettled", "error"}
        ``ok``: the result belongs to the plan as it is. ``refused``: the latest value was refused
        and the plan is unchanged. ``unsettled``: the solver could not settle the plan as it is;
        the result is the last good one. ``error``: an observer (a view) failed.
    message : str
        One sentence for the designer ("" when ok).
    address : str or None
        The plan address the message is about, when there is one (``"s1.rc"``).
    """
    kind: str = "ok"
    message: str = ""
    address: str | None = None

    @property
    def ok(self) -> bool:
        return self.kind == "ok"

    def __str__(self) -> str:
        return "ok" if self.ok else f"{self.kind}: {self.message}"


@dataclass(frozen=True)
class Change:
    """What observers of kind ``"change"`` receive after every change, accepted or not.

    Attributes
    ----------
    what : str
        ``"set"``, ``"add"``, ``"remove"``, ``"move"``, ``"model"``, ``"undo"``, ``"redo"`` or ``"refresh"``.
    address : str or None
        The address set, or the stage id added or removed.
    status : Status
    solved : bool
        True when a new result came with this change.
    structure : bool
        True when the set of stages changed (views may have to grow or shrink).
    """
    what: str
    address: str | None
    status: Status
    solved: bool
    structure: bool = False


@dataclass(frozen=True)
class _Snapshot:
    plan_state: dict
    model: str
    label: str


class ObservablePlan:
    """A plan that re-solves on every accepted change and tells its observers.

    Parameters
    ----------
    plan : Plan
        The plan to edit in place (it is not copied: ``live.plan is plan``).
    model : {"constant-drop", "ebers-moll"}
        Device model for every solve.

    Raises
    ------
    InvalidValueError
        ``plan`` is not a Plan.
    UnknownModelError
        ``model`` is not one of the solver's models.
    """

    def __init__(self, plan: Plan, model: str = "constant-drop"):
        if not isinstance(plan, Plan):
            from .errors import InvalidValueError
            raise InvalidValueError(f"LivePlan needs an ampplan.Plan, got {type(plan).__name__}")
        _check_model(model)
        self._lock = threading.RLock()
        self._plan = plan
        self._model = model
        self._result = None
        self._result_is_current = False
        self._status = Status()
        self._observers: list[tuple[Callable, str]] = []
        self._undo: list[_Snapshot] = []
        self._redo: list[_Snapshot] = []
        self.solve_count = 0
        self._solve()

    # -- constructors -----------------------------------------------------------------------
    @classmethod
    def demo(cls, model: str = "constant-drop"):
        """The shipped demo plan (an invented three-stage front end), live."""
        from .record import plan_from_dict, read_plan_file
        with importlib.resources.as_file(importlib.resources.files("ampplan").joinpath(DEMO_PLAN)) as path:
            plan = plan_from_dict(read_plan_file(path), source=os.fspath(path))
        return cls(plan, model=model)

    # -- state ------------------------------------------------------------------------------
    @property
    def plan(self) -> Plan:
        """The live plan (edit it through :meth:`set`, :meth:`add`, :meth:`remove`)."""
        return self._plan

    @property
    def result(self):
        """The latest good :class:`~ampplan.analyses.PlanResult` (None if no solve ever settled)."""
        return self._result

    @property
    def result_is_current(self) -> bool:
        """False when the plan changed since :attr:`result` (the solver could not settle it)."""
        return self._result_is_current

    @property
    def status(self) -> Status:
        return self._status

    @property
    def model(self) -> str:
        """Device model of every solve; setting it re-solves (and is an edit undo takes back)."""
        return self._model

    @model.setter
    @_one_at_a_time
    def model(self, value: str):
        try:
            _check_model(value)
        except AmpplanError as exc:
            self._refuse(exc, "model", "model")
            raise
        if value == self._model:
            return
        self._remember(f"model {value}")
        self._model = value
        self._solve("model", "model")

    @property
    def can_undo(self) -> bool:
        return bool(self._undo)

    @property
    def can_redo(self) -> bool:
        return bool(self._redo)

    @property
    def stage_ids(self) -> tuple:
        return self._plan.stage_ids

    def get(self, address: str):
        """The plan's value at a dotted address (``"s1.rc"``); see :meth:`Plan.get`."""
        return self._plan.get(address)

    # -- edits ------------------------------------------------------------------------------
    @_one_at_a_time
    def set(self, address: str, value) -> None:
        """Set the value at a dotted address and re-solve once.

        A refused value raises the plan's error (its message names the address) after recording
        it in :attr:`status`; the plan is unchanged and nothing is solved. Setting the value a
        plan already holds does nothing.
        """
        try:
            if _same(self._plan.get(address), value):
                return
            before = self._snapshot(f"set {address}")
            self._plan.set(address, value)
        except AmpplanError as exc:
            named = _named(exc, address)
            self._refuse(named, "set", address)
            if named is exc:
                raise
            raise named from exc
        self._push(before)
        self._solve("set", address)

    @_one_at_a_time
    def add(self, stage, coupling: str = "capacitor", *, id: str | None = None) -> str:
        """Append a stage (see :meth:`Plan.add`), re-solve once; returns the new stage's id."""
        before = self._snapshot("add")
        try:
            sid = self._plan.add(stage, coupling=coupling, id=id)
        except AmpplanError as exc:
            self._refuse(exc, "add", None)
            raise
        self._push(before)
        self._solve("add", sid, structure=True)
        return sid

    @_one_at_a_time
    def remove(self, sid: str):
        """Remove stage ``sid`` (see :meth:`Plan.remove`), re-solve once; returns the stage."""
        before = self._snapshot(f"remove {sid}")
        try:
            stage = self._plan.remove(sid)
        except AmpplanError as exc:
            self._refuse(exc, "remove", sid)
            raise
        self._push(before)
        if self._plan.stage_ids:
            self._solve("remove", sid, structure=True)
        else:
            # Nothing left to solve: no result, and the views empty themselves.
            self._result, self._result_is_current = None, True
            self._set_status(Status("ok"))
            self._notify(Change("remove", sid, self._status, solved=False, structure=True))
        return stage

    @_one_at_a_time
    def move(self, sid: str, position: int) -> None:
        """Move stage ``sid`` to ``position`` in the chain (see :meth:`Plan.move`), re-solve once.

        The stage keeps its id, so its editor keeps editing it.
        """
        before = self._snapshot(f"move {sid}")
        try:
            self._plan.move(sid, position)
        except AmpplanError as exc:
            self._refuse(exc, "move", sid)
            raise
        self._push(before)
        self._solve("move", sid, structure=True)

    @_one_at_a_time
    def undo(self) -> bool:
        """Take back the latest edit and re-solve; False when there is nothing to undo."""
        return self._step(self._undo, self._redo, "undo")

    @_one_at_a_time
    def redo(self) -> bool:
        """Do again the latest edit undone and re-solve; False when there is nothing to redo."""
        return self._step(self._redo, self._undo, "redo")

    @_one_at_a_time
    def refresh(self) -> None:
        """Solve again and tell every observer (after editing the plan outside the live plan)."""
        self._solve("refresh", None, structure=True)

    def save(self, path) -> None:
        """Write the plan file (see :meth:`Plan.save`)."""
        self._plan.save(path)

    # -- observers --------------------------------------------------------------------------
    def observe(self, callback: Callable, kind: str = "result") -> Callable:
        """Call ``callback`` after changes; returns it (so it can be passed to :meth:`unobserve`).

        ``kind="result"``: called with the new PlanResult after each solve that settled.
        ``kind="change"``: called with a :class:`Change` after every change, refused or not.
        An observer that raises does not stop the others; its error becomes the status.
        """
        if kind not in OBSERVE_KINDS:
            raise UnknownModelError(f"observe kind must be one of {', '.join(OBSERVE_KINDS)}, got {kind!r}")
        self._observers.append((callback, kind))
        return callback

    def unobserve(self, callback: Callable) -> None:
        self._observers = [(c, k) for c, k in self._observers if c is not callback]

    # -- internals --------------------------------------------------------------------------
    def _snapshot(self, label: str) -> _Snapshot:
        # The plan's whole state, copied; restored in place so that ``live.plan`` stays the same
        # object for whoever holds it. Stages are immutable, so the copy is cheap.
        return _Snapshot(copy.deepcopy(self._plan.__dict__), self._model, label)

    def _remember(self, label: str) -> None:
        self._push(self._snapshot(label))

    def _push(self, snapshot: _Snapshot) -> None:
        self._undo.append(snapshot)
        self._redo.clear()

    def _restore(self, snapshot: _Snapshot) -> None:
        self._plan.__dict__.clear()
        self._plan.__dict__.update(copy.deepcopy(snapshot.plan_state))
        self._model = snapshot.model

    def _step(self, source: list, target: list, what: str) -> bool:
        if not source:
            return False
        snapshot = source.pop()
        target.append(self._snapshot(snapshot.label))
        structure = tuple(self._plan.stage_ids)
        self._restore(snapshot)
        self._solve(what, snapshot.label, structure=structure != tuple(self._plan.stage_ids))
        return True

    def _solve(self, what: str = "solve", address: str | None = None, structure: bool = False) -> None:
        try:
            result = self._plan.solve(model=self._model)
        except _UNSETTLED as exc:
            self._result_is_current = False
            self._set_status(Status("unsettled", f"the solver could not settle the plan: {exc}", address))
            self._notify(Change(what, address, self._status, solved=False, structure=structure))
            return
        except AmpplanError as exc:
            self._result_is_current = False
            self._set_status(Status("unsettled", f"the plan cannot be solved: {exc}", address))
            self._notify(Change(what, address, self._status, solved=False, structure=structure))
            return
        self.solve_count += 1
        self._result, self._result_is_current = result, True
        self._set_status(Status("ok"))
        self._notify(Change(what, address, self._status, solved=True, structure=structure))

    def _refuse(self, exc: Exception, what: str, address: str | None) -> None:
        self._set_status(Status("refused", str(exc), address))
        self._notify(Change(what, address, self._status, solved=False))

    def _set_status(self, status: Status) -> None:
        self._status = status

    def _notify(self, change: Change) -> None:
        failures = []
        for callback, kind in list(self._observers):
            try:
                if kind == "result":
                    if change.solved:
                        callback(self._result)
                else:
                    callback(change)
            except Exception as exc:  # noqa: BLE001 - a failing view must not stop the others
                failures.append(f"{getattr(callback, '__qualname__', callback)!s} raised "
                                f"{type(exc).__name__}: {exc}")
        if failures:
            self._status = Status("error", "; ".join(failures), change.address)
            # Views that watch changes learn of the failure (they show it); a second failure here
            # is not reported again, so this cannot loop.
            note = Change("error", change.address, self._status, solved=False)
            for callback, kind in list(self._observers):
                if kind == "change":
                    try:
                        callback(note)
                    except Exception:  # noqa: BLE001 - already reported in the status
                        pass

    def __repr__(self) -> str:
        return (f"{type(self).__name__}({len(self._plan.stage_ids)} stage(s), model={self._model}, "
                f"status {self._status})")


def _named(exc: AmpplanError, address) -> AmpplanError:
    """``exc`` led by the plan address (``s1.rc: ...``) when its message does not start with it.

    The plan's own messages name a stage's parameter by its template (``CommonEmitter.rc``); the
    designer at a live plan thinks in addresses.
    """
    message = str(exc)
    if not isinstance(address, str) or message.startswith(address):
        return exc
    try:
        return type(exc)(f"{address}: {message}")
    except TypeError:  # an error class with another constructor: keep it as it is
        return exc


def _check_model(model) -> None:
    if model not in MODELS:
        raise UnknownModelError(f"model must be one of {', '.join(MODELS)}, got {model!r}")


def _same(old, new) -> bool:
    """True when setting ``new`` would not change ``old`` (so nothing needs solving)."""
    if old is None or new is None:
        return old is new
    if isinstance(new, bool):
        return False  # refused later by the plan's own check; never "the same" as a number
    if isinstance(old, float) and isinstance(new, (int, float)):
        return old == float(new)
    return type(old) is type(new) and old == new

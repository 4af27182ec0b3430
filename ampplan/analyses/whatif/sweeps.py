"""Plan sweeps: many variants of one plan through one compiled circuit and the batched solver.

:func:`solve_table` is the one place the what-if tools solve: it hands a batch of plan values to
the batched plan solve (:meth:`ampplan.Plan.solve` with ``batch=``: one compiled circuit, the
batched solver, the vectorised analyses) and keeps, per sample, every result address
(:mod:`ampplan.analyses.addresses`) and whether a caution fired. :class:`PlanSweep` holds that
table with the inputs.
"""

from __future__ import annotations

import html
import math
import numbers
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np

from ...devices import Transistor
from ...errors import AmpplanError, InvalidValueError, UnknownModelError
from ...solver import MODELS
from ..addresses import WORD_RESULTS, check_result_address, read_result, result_addresses
from ..chain import analyse_plan
from .tables import TableBuilder, Words, equals

__all__ = ["PlanSweep", "sweep", "check_values", "solve_table", "check_model", "RESOLUTION"]

#: Samples per batched solve of a sweep: the working memory grows with the chunk (about 5 kB a
#: sample for the 3-stage demo, so about 40 MB), the kept table with the sweep (about 0.5 kB a sample).
CHUNK = 8192
#: The most samples a sweep takes (a grid is refused before it is made).
MAX_SAMPLES = 10_000_000

#: Relative agreement of every sample with its own single solve, per model (issue 8): differences
#: between samples below it are not resolved (rounding, Newton's tolerance).
RESOLUTION = {"constant-drop": 1e-9, "ebers-moll": 1e-6}


def check_model(model) -> str:
    if model not in MODELS:
        raise UnknownModelError(f"model must be one of {', '.join(MODELS)}, got {model!r}")
    return model


def check_address(plan, address: str, where: str = "sweep") -> None:
    """Refuse a plan address a batch cannot vary: a word, a transistor, or a part that is not fitted.

    Coupling, polarity, fitted/not fitted change the circuit's topology, which one compiled circuit
    cannot hold.
    """
    current = plan.get(address)  # UnknownNameError with the plan's own did-you-mean
    if isinstance(current, str):
        raise InvalidValueError(f"{where} {address}: holds a word ({current!r}), not a number; a coupling, a "
                                "polarity or a description changes the plan's topology and cannot be varied "
                                "in one batch (compare two plans instead)")
    if isinstance(current, Transistor):
        raise InvalidValueError(f"{where} {address}: is a whole transistor; vary its parameters one at a time "
                                f"({address}.beta, {address}.vbe_on ...)")
    if current is None:
        raise InvalidValueError(f"{where} {address}: is not fitted in this plan; fitting or removing a part "
                                "changes the topology and cannot be varied in one batch (set it on the plan first)")
    if address in ("source_resistance", "negative_supply") and current == 0:
        raise InvalidValueError(f"{where} {address}: is 0 in this plan, so the circuit has no such element; "
                                "giving it a value changes the topology (set it on the plan first)")


def check_values(plan, values, grid: bool = False, where: str = "sweep") -> dict:
    """Validated inputs of a batch: plan address -> float array of shape (S,).

    With ``grid=True`` the arrays are the axes of a full grid (first address slowest), expanded
    here to S = product of their lengths.

    Raises
    ------
    InvalidValueError
        Not a mapping, empty, an array that is not 1-D, empty, or holds NaN/infinity/None, unequal
        lengths without ``grid``, a value the plan refuses (out of its declared bounds), or a change
        of topology (see :func:`check_address`).
    UnknownNameError
        An address the plan does not have.
    """
    if not isinstance(values, Mapping) or not values:
        raise InvalidValueError(f"{where}: values must be a non-empty dict of plan address -> 1-D array, "
                                f"got {values!r}")
    arrays = {}
    for address, raw in values.items():
        check_address(plan, address, where)
        if (isinstance(raw, (list, tuple)) and any(isinstance(v, (bool, np.bool_)) for v in raw)) or (
                isinstance(raw, (np.ndarray, bool, np.bool_)) and np.asarray(raw).dtype == bool):
            raise InvalidValueError(f"{where} {address}: values must be numbers, not true/false, got {raw!r}")
        try:
            array = np.asarray(raw, dtype=float)
        except (TypeError, ValueError, OverflowError):
            raise InvalidValueError(f"{where} {address}: values must be numbers, got {raw!r}") from None
        if array.ndim != 1 or array.size == 0:
            raise InvalidValueError(f"{where} {address}: values must be a non-empty 1-D array, got shape "
                                    f"{array.shape}")
        if not np.all(np.isfinite(array)):
            bad = int(np.flatnonzero(~np.isfinite(array))[0])
            raise InvalidValueError(f"{where} {address}[{bad}]: must be a finite number, got {array[bad]!r}")
        if address in ("source_resistance", "negative_supply") and np.any(array == 0):
            raise InvalidValueError(f"{where} {address}: a value of 0 removes the element, a change of topology")
        trial = plan.copy()
        for k in (int(np.argmin(array)), int(np.argmax(array))):
            try:
                trial.set(address, float(array[k]))
            except AmpplanError as exc:
                raise InvalidValueError(f"{where} {address}[{k}]: {exc}") from None
        arrays[address] = array
    if grid:
        size = math.prod(a.size for a in arrays.values())
        if size > MAX_SAMPLES:
            raise InvalidValueError(f"{where}: the grid has {size} samples, more than {MAX_SAMPLES}")
        axes = np.meshgrid(*arrays.values(), indexing="ij")
        return {address: axis.ravel() for address, axis in zip(arrays, axes)}
    lengths = {address: a.size for address, a in arrays.items()}
    if len(set(lengths.values())) > 1:
        raise InvalidValueError(f"{where}: every address needs as many values (or use grid=True); got "
                                + ", ".join(f"{a}: {n}" for a, n in lengths.items()))
    return arrays


def _caution_fired(result, size: int) -> np.ndarray:
    """Bool (S,): a caution fired in each sample of a batched PlanResult (its BatchCautions flags)."""
    return np.broadcast_to(np.asarray(result.cautions.any, dtype=bool), (size,)).copy()


def _column(value, size: int, word: bool) -> np.ndarray:
    """One result address as an array of shape (S,): float, or str ('' for None) for words."""
    if word:
        array = np.asarray(value)
        if array.dtype.kind == "U":
            return np.broadcast_to(array, (size,)).copy()
        array = np.broadcast_to(np.asarray(value, dtype=object), (size,))
        # None and NaN (the one value unequal to itself) are blank; the rest through str, as
        # astype(str) converts an object array (one comparison and one conversion over the
        # samples instead of a Python loop).
        with np.errstate(invalid="ignore"):
            blank = np.equal(array, None) | np.not_equal(array, array)
        return np.where(blank, "", array).astype(str)
    return np.broadcast_to(np.asarray(value, dtype=float), (size,)).copy()


def solve_table(plan, model: str, values: dict, addresses=None) -> dict:
    """Solve a batch of plan values; per-sample result addresses and caution flags.

    Parameters
    ----------
    plan : Plan
        Left unchanged.
    model : {"constant-drop", "ebers-moll"}
    values : dict of str -> ndarray of shape (S,)
        Checked plan values (:func:`check_values`).
    addresses : sequence of str, optional
        Result addresses to keep (default every one, :func:`result_addresses`).

    Returns
    -------
    dict of str -> ndarray of shape (S,)
        Every kept result address (float; str for ``region``, ``limiting_stage``, ``status``, with
        ``""`` where no stage clips or a sample failed), plus ``"caution_fired"`` (bool).
    """
    size = len(next(iter(values.values())))
    # Plan.solve(batch=...) without the DC load lines' ports, which no result address reads.
    result = analyse_plan(plan, model=model, batch=values, dc_load_lines=False)
    addresses = result_addresses(plan.stage_ids) if addresses is None else addresses
    table = {a: _column(read_result(result, a), size, a.rpartition(".")[2] in WORD_RESULTS) for a in addresses}
    table["caution_fired"] = _caution_fired(result, size)
    return table


def passed_rule(table: dict, stage_ids, required_amplitude=None) -> np.ndarray:
    """Bool (S,): the rule of ``ampplan check`` exit 0, per sample.

    The sample solved (status ``"ok"``), every stage is forward-active, no caution fired, and,
    when ``required_amplitude`` is given (volts), ``max_source_amplitude >= required_amplitude``.
    """
    ok = equals(table["status"], "ok") & ~table["caution_fired"]
    for sid in stage_ids:
        ok &= equals(table[f"{sid}.region"], "forward-active")
    if required_amplitude is not None:
        with np.errstate(invalid="ignore"):
            ok &= table["max_source_amplitude"] >= required_amplitude
    return ok


@dataclass(frozen=True, eq=False)
class PlanSweep:
    """Results of a batch of plan variants, one sample per set of input values.

    Attributes
    ----------
    values : dict of str -> ndarray of shape (S,)
        The inputs: plan address -> value of each sample (SI units, °C for temperature).
    model : str
    plan : Plan
        A copy of the plan the sweep started from (every other value as in it).

    ``sweep[address]`` is an array of shape (S,) for a result address (``"s1.vce"``, ``"gain"``,
    ``"s2.region"``: str arrays for regions, ``limiting_stage`` and ``status``) or a swept plan
    address. A failed sample has its status and NaN numbers (``""`` words).
    """
    values: dict
    model: str
    plan: object = field(repr=False)
    _table: dict = field(repr=False)

    def __len__(self) -> int:
        return len(self._table["status"])

    def __getitem__(self, address: str) -> np.ndarray:
        if isinstance(address, str) and address in self.values:
            return self.values[address]
        check_result_address(address, self.plan.stage_ids)
        column = self._table[address]
        return column.decode() if isinstance(column, Words) else column

    @property
    def addresses(self) -> tuple:
        """Every result address the sweep holds."""
        return result_addresses(self.plan.stage_ids)

    @property
    def ok(self) -> np.ndarray:
        """Bool (S,): the sample solved (status ``"ok"``)."""
        return equals(self._table["status"], "ok")

    @property
    def caution_fired(self) -> np.ndarray:
        """Bool (S,): a caution fired in the sample."""
        return self._table["caution_fired"]

    def passed(self, required_amplitude=None) -> np.ndarray:
        """Bool (S,): the ``ampplan check`` exit-0 rule per sample (see :func:`passed_rule`)."""
        return passed_rule(self._table, self.plan.stage_ids, required_amplitude)

    def _index(self, i) -> int:
        n = len(self)
        if isinstance(i, bool) or not isinstance(i, numbers.Integral) or not -n <= i < n:
            raise InvalidValueError(f"PlanSweep: sample index must be an integer from 0 to {n - 1}, got {i!r}")
        return int(i) % n

    def plan_of(self, i: int):
        """A copy of the plan with sample ``i``'s values set (through :meth:`Plan.set`, one by one)."""
        i = self._index(i)
        plan = self.plan.copy()
        for address, array in self.values.items():
            plan.set(address, float(array[i]))
        return plan

    def sample(self, i: int):
        """The full PlanResult of sample ``i``: :meth:`plan_of` solved on its own.

        Raises the solver's error (NoConsistentRegionError, ConvergenceError) for a sample whose
        status is not ``"ok"``, exactly as ``plan.solve()`` would.
        """
        return self.plan_of(i).solve(model=self.model)

    def to_dict(self) -> dict:
        """Plain, JSON-ready dict: model, inputs and every result address as lists (NaN -> None)."""
        def plain(array):
            if array.dtype.kind in "US":
                return array.tolist()
            return [None if not math.isfinite(v) else v for v in array.tolist()]
        return {"model": self.model, "samples": len(self),
                "values": {a: plain(v) for a, v in self.values.items()},
                "results": {a: plain(self[a]) for a in self.addresses}}

    def __repr__(self) -> str:
        inputs = ", ".join(f"{a} {np.min(v):.4g}…{np.max(v):.4g}" for a, v in self.values.items())
        failed = int(np.sum(~self.ok))
        return (f"PlanSweep({self.model}, {len(self)} samples over {inputs}; "
                f"{len(self) - failed} solved, {failed} failed)")

    def _repr_html_(self) -> str:
        e = html.escape
        n = len(self)
        rows = "".join(f"<tr><td>{e(a)}</td><td>{np.min(v):.4g}</td><td>{np.max(v):.4g}</td></tr>"
                       for a, v in self.values.items())
        return (f"<div><strong>Plan sweep ({e(self.model)}, {n} samples, {int(np.sum(self.ok))} solved)</strong>"
                f"<table><thead><tr><th>input</th><th>from</th><th>to</th></tr></thead><tbody>{rows}</tbody>"
                "</table></div>")


def sweep(plan, values, model: str = "constant-drop", grid: bool = False) -> PlanSweep:
    """Solve many variants of a plan in one batched call.

    Parameters
    ----------
    plan : Plan
        Left unchanged.
    values : dict of str -> array_like of shape (S,)
        Plan address (``"s1.rc"``, ``"s2.device.beta"``, ``"supply"``, ``"temperature"``) -> the
        values to try, in the address's SI unit (°C for temperature). Every array has the same
        length S, unless ``grid``.
    model : {"constant-drop", "ebers-moll"}
    grid : bool
        Every combination of the arrays (their lengths multiply; the first address varies slowest).

    Returns
    -------
    PlanSweep
        Sample i equals ``plan.copy()`` with sample i's values set and solved (to the batched
        solver's tolerance: 1e-9 relative for constant-drop, 1e-6 for Ebers–Moll).

    Raises
    ------
    UnknownModelError, UnknownNameError, InvalidValueError
        Bad model, unknown address, bad values, or a value that changes the topology (a coupling,
        a polarity, a part fitted or removed).
    """
    check_model(model)
    checked = check_values(plan, values, grid)
    frozen = plan.copy()
    return PlanSweep(values=checked, model=model, plan=frozen, _table=solve_chunked(frozen, model, checked))


def solve_chunked(plan, model: str, values: dict) -> dict:
    """:func:`solve_table` of any number of samples, :data:`CHUNK` at a time, so that the working
    memory stays that of one chunk (the words kept as codes); the same table as one call."""
    size = len(next(iter(values.values())))
    if size <= CHUNK:
        return solve_table(plan, model, values)
    builder = TableBuilder(size)
    for start in range(0, size, CHUNK):
        builder.put(start, solve_table(plan, model, {a: v[start:start + CHUNK] for a, v in values.items()}))
    return builder.table()

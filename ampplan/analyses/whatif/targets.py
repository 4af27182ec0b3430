"""Design to a target: the value of one plan address that brings a result to a chosen value.

"What collector resistor puts V_CE at 5 V?" is ``design(plan, "s1.rc", ("s1.vce", 5.0))``. The
named target ``"sN.symmetric_swing"`` asks for the Q-point centred on the stage's AC load line:
swing toward saturation equal to swing toward cutoff. Only forward-active samples count for it:
outside forward-active both swings are zero, which is a difference of zero but no centred Q-point.

Method: one batched solve over a grid of the bounds (logarithmic when they span a factor of four
or more, else linear) brackets every sign change of ``result − target``; each bracket is then
refined by :func:`scipy.optimize.brentq`, each evaluation one sample of the batched solver. A sign
change across a jump (a change of region, a failed sample) is no root and is left out. An end of
the bounds whose residual is zero to the model's resolution (:data:`.sweeps.RESOLUTION`) is a
root, unless one was found between it and the next grid point. With an
E-series, both standard neighbours of the exact value are re-solved and the one that lands closer
to the target is kept. The plan passed in is never changed.
"""

from __future__ import annotations

import html
import math
import numbers
from dataclasses import dataclass, field

import numpy as np
from scipy import optimize

from ... import eseries
from ...circuit import did_you_mean
from ...errors import AmpplanError, InvalidValueError, TargetNotReachedError, UnknownNameError
from ..addresses import WORD_RESULTS, check_result_address
from .sweeps import RESOLUTION, check_address, check_model, solve_table

__all__ = ["DesignResult", "design", "SYMMETRIC_SWING"]

#: Name of the centred-Q-point target, after the stage id (``"s1.symmetric_swing"``).
SYMMETRIC_SWING = "symmetric_swing"
#: Grid points of the bracketing solve.
POINTS = 65
#: Default bounds: the current value divided and multiplied by this.
SPAN = 100.0


@dataclass(frozen=True, eq=False)
class DesignResult:
    """The value of one plan address that reaches a target.

    Attributes
    ----------
    address : str
        The plan address solved for (``"s1.rc"``).
    target : str
        The result address aimed at (``"s1.vce"``), or ``"sN.symmetric_swing"``.
    value : float
        The target value (0 for the symmetric swing: swing toward saturation minus toward cutoff).
    exact : float
        The value of ``address`` that reaches it (the root nearest the plan's current value when
        there are several; all of them in ``roots``).
    achieved : float
        The target quantity with ``exact`` set, re-solved on its own.
    roots : tuple of float
        Every value within the bounds that reaches the target, ascending.
    series : str or None
    snapped : float or None
        The E-series neighbour of ``exact`` that lands closer to the target (re-solving both).
    achieved_snapped : float or None
        The target quantity with ``snapped`` set.
    neighbours : tuple of (float, float)
        Each E-series neighbour tried with the target quantity it gives (NaN if it did not solve).
    plan : Plan
        A copy of the plan with the snapped value (or the exact one without a series).
    result : PlanResult
        That plan solved.
    """
    address: str
    target: str
    value: float
    exact: float
    achieved: float
    roots: tuple
    series: str | None
    snapped: float | None
    achieved_snapped: float | None
    neighbours: tuple
    plan: object = field(repr=False)
    result: object = field(repr=False)

    @property
    def chosen(self) -> float:
        """The value the returned plan holds: ``snapped`` with a series, else ``exact``."""
        return self.exact if self.snapped is None else self.snapped

    def to_dict(self) -> dict:
        def number(v):
            return None if v is None or not math.isfinite(v) else v
        return {"address": self.address, "target": self.target, "value": self.value, "exact": self.exact,
                "achieved": number(self.achieved), "roots": list(self.roots), "series": self.series,
                "snapped": self.snapped, "achieved_snapped": number(self.achieved_snapped),
                "neighbours": [[v, number(a)] for v, a in self.neighbours]}

    def __repr__(self) -> str:
        text = (f"DesignResult({self.address} = {self.exact:.6g} gives {self.target} = {self.achieved:.6g} "
                f"(target {self.value:g})")
        if self.snapped is not None:
            text += f"; {self.series}: {self.snapped:g} gives {self.achieved_snapped:.6g}"
        if len(self.roots) > 1:
            text += f"; also reached at {', '.join(f'{r:.6g}' for r in self.roots if r != self.exact)}"
        return text + ")"

    def _repr_html_(self) -> str:
        e = html.escape
        rows = [("exact", f"{self.exact:.6g}", f"{self.achieved:.6g}")]
        if self.snapped is not None:
            rows.append((f"{self.series} value", f"{self.snapped:g}", f"{self.achieved_snapped:.6g}"))
        body = "".join("<tr>" + "".join(f"<td>{e(c)}</td>" for c in row) + "</tr>" for row in rows)
        return (f"<div><strong>Design: {e(self.address)} for {e(self.target)} = {self.value:g}</strong><table>"
                f"<thead><tr><th></th><th>{e(self.address)}</th><th>{e(self.target)}</th></tr></thead>"
                f"<tbody>{body}</tbody></table></div>")


def _target(plan, target) -> tuple:
    """(label, value, columns, function of a table -> residual array)."""
    if isinstance(target, str):
        sid, _, name = target.partition(".")
        if name != SYMMETRIC_SWING:
            raise InvalidValueError(f"design target {target!r}: a named target is '<stage id>.{SYMMETRIC_SWING}'; "
                                    "otherwise give (result address, value), e.g. ('s1.vce', 5.0)")
        if sid not in plan.stage_ids:
            raise UnknownNameError(f"design target {target!r}: the plan has no stage {sid!r}; its stages are "
                                   f"{', '.join(plan.stage_ids) or 'none'}" + did_you_mean(sid, plan.stage_ids))
        up, down, region = f"{sid}.swing_to_saturation", f"{sid}.swing_to_cutoff", f"{sid}.region"

        def centred(t):
            # Saturated or cut off, both swings are 0: no centred Q-point, so no value at all.
            active = np.asarray(t[region]) == "forward-active"
            with np.errstate(invalid="ignore"):
                return np.where(active, np.asarray(t[up], dtype=float) - np.asarray(t[down], dtype=float), np.nan)
        return target, 0.0, (up, down, region), centred
    try:
        address, value = target
    except (TypeError, ValueError):
        raise InvalidValueError(f"design target: give (result address, value) such as ('s1.vce', 5.0) or "
                                f"'s1.{SYMMETRIC_SWING}', got {target!r}") from None
    check_result_address(address, plan.stage_ids)
    if address.rpartition(".")[2] in WORD_RESULTS:
        raise InvalidValueError(f"design target {address!r} is a word, not a number to reach")
    if isinstance(value, bool) or not isinstance(value, numbers.Real) or not math.isfinite(value):
        raise InvalidValueError(f"design target {address}: the value must be a finite number, got {value!r}")
    value = float(value)
    return address, value, (address,), lambda t: t[address] - value


def _bounds(plan, address: str, bounds) -> tuple:
    current = float(plan.get(address))
    if bounds is None:
        if current <= 0:
            raise InvalidValueError(f"design {address}: its value is {current:g}, so no default bounds "
                                    "(x/100 … 100·x) exist; give bounds=(low, high)")
        lo, hi = current / SPAN, current * SPAN
        trial = plan.copy()
        # Shrink toward the current value until the plan accepts both ends (declared bounds).
        for _ in range(60):
            try:
                trial.set(address, lo)
                break
            except AmpplanError:
                lo = math.sqrt(lo * current)
        for _ in range(60):
            try:
                trial.set(address, hi)
                break
            except AmpplanError:
                hi = math.sqrt(hi * current)
        return lo, hi
    try:
        lo, hi = (float(v) for v in bounds)
    except (TypeError, ValueError):
        raise InvalidValueError(f"design bounds: give (low, high), got {bounds!r}") from None
    if not (math.isfinite(lo) and math.isfinite(hi) and lo < hi):
        raise InvalidValueError(f"design bounds for {address}: need finite low < high, got {bounds!r}")
    trial = plan.copy()
    for end in (lo, hi):
        try:
            trial.set(address, end)
        except AmpplanError as exc:
            raise InvalidValueError(f"design bounds for {address}: {exc}") from None
    return lo, hi


def _resolve(plan, address: str, x: float, model: str, columns):
    """The plan with ``address = x`` solved on its own: (plan, result, columns: floats, words as str)."""
    trial = plan.copy()
    trial.set(address, x)
    result = trial.solve(model=model)
    return trial, result, {c: result[c] if c.rpartition(".")[2] in WORD_RESULTS else float(result[c])
                           for c in columns}


def design(plan, address: str, target, series=None, bounds=None, model: str = "constant-drop") -> DesignResult:
    """Solve one plan value so that a result reaches a target (see the module docstring).

    Parameters
    ----------
    plan : Plan
        Never changed.
    address : str
        Plan address to solve for (``"s1.rc"``, ``"s1.rb2"``, ``"supply"`` …).
    target : (str, float) or str
        ``(result address, value)`` in SI units (``("s1.vce", 5.0)``, ``("s1.ic", 1e-3)``,
        ``("gain", 100.0)``, signed as the result is), or ``"sN.symmetric_swing"``.
    series : {"E6", "E12", "E24", "E48", "E96", "E192"}, optional
        Snap to the nearer standard value (IEC 60063).
    bounds : (float, float), optional
        Range searched; default the current value / 100 … · 100, within the declared bounds.
    model : {"constant-drop", "ebers-moll"}

    Returns
    -------
    DesignResult

    Raises
    ------
    TargetNotReachedError
        No value within the bounds reaches the target (the message gives the range the result
        covers there).
    InvalidValueError
        Bad bounds or target, or a series snap of a non-positive value.
    UnknownNameError, UnknownModelError
        Unknown address, result address, series or model.
    """
    check_model(model)
    check_address(plan, address, "design")
    if series is not None:
        eseries.series(series)  # UnknownModelError for a bad name
    label, value, columns, residual = _target(plan, target)
    lo, hi = _bounds(plan, address, bounds)
    frozen = plan.copy()
    logarithmic = lo > 0 and hi / lo >= 4
    grid = np.geomspace(lo, hi, POINTS) if logarithmic else np.linspace(lo, hi, POINTS)
    table = solve_table(frozen, model, {address: grid}, addresses=(*columns, "status"))
    f = residual(table)
    finite = np.isfinite(f)
    scale = float(np.median(np.abs(f[finite]))) if finite.any() else 0.0
    tolerance = 1e-6 * max(abs(value), scale, 1e-300)

    def g(x):
        t = solve_table(frozen, model, {address: np.array([x])}, addresses=columns)
        return float(residual(t)[0])

    roots, bracketed = [], set()    # bracketed: the grid intervals a root was found in
    for k in range(POINTS - 1):
        a, b, fa, fb = grid[k], grid[k + 1], f[k], f[k + 1]
        if not (finite[k] and finite[k + 1]):
            continue
        if fa == 0:
            roots.append(float(a))
            bracketed.add(k)
            continue
        if fa * fb < 0:
            ga, gb = g(a), g(b)
            if not (math.isfinite(ga) and math.isfinite(gb)) or ga * gb > 0:
                continue
            root = optimize.brentq(g, a, b, xtol=1e-15 * max(abs(a), abs(b)), rtol=4 * np.finfo(float).eps)
            if abs(g(root)) <= tolerance:  # else a jump across a change of region, not a root
                roots.append(float(root))
                bracketed.add(k)
    # An end of the bounds that reaches the target to the model's resolution, with rounding on the
    # wrong side of zero (no sign change to bracket), is a root too.
    at_bound = RESOLUTION[model] * max(abs(value), scale, 1e-300)
    if finite[0] and f[0] != 0 and abs(f[0]) <= at_bound and 0 not in bracketed:
        roots.append(float(grid[0]))
    if finite[-1] and (f[-1] == 0 or (abs(f[-1]) <= at_bound and POINTS - 2 not in bracketed)):
        roots.append(float(grid[-1]))
    if not roots:
        span = (f"{label} − target spans {np.min(f[finite]):.4g} … {np.max(f[finite]):.4g}" if finite.any()
                else "no sample solved")
        raise TargetNotReachedError(f"design {address}: no value in {lo:.6g} … {hi:.6g} reaches {label} = {value:g} "
                                f"({span} there); widen bounds=(low, high) or choose another value to solve for")
    current = float(frozen.get(address))
    distance = ((lambda r: abs(math.log(r / current))) if current > 0 and all(r > 0 for r in roots)
                else (lambda r: abs(r - current)))
    exact = min(roots, key=distance)
    exact_plan, exact_result, got = _resolve(frozen, address, exact, model, columns)
    achieved = _quantity(got, columns, value)
    snapped = achieved_snapped = None
    tried = ()
    final_plan, final_result = exact_plan, exact_result
    if series is not None:
        if exact <= 0:
            raise InvalidValueError(f"design {address}: the exact value {exact:g} is not positive, so it has no "
                                    f"{series} neighbour")
        candidates = []
        for neighbour in dict.fromkeys(eseries.neighbours(exact, series)):
            try:
                trial_plan, trial_result, trial = _resolve(frozen, address, neighbour, model, columns)
            except AmpplanError:
                candidates.append((neighbour, math.nan, None, None))
                continue
            candidates.append((neighbour, _quantity(trial, columns, value), trial_plan, trial_result))
        tried = tuple((c[0], c[1]) for c in candidates)
        solved = [c for c in candidates if math.isfinite(c[1])]
        if not solved:
            raise InvalidValueError(f"design {address}: neither {series} neighbour of {exact:.6g} "
                                    f"({', '.join(f'{c[0]:g}' for c in candidates)}) gives a plan that solves")
        snapped, achieved_snapped, final_plan, final_result = min(solved, key=lambda c: abs(c[1] - value))
    return DesignResult(address=address, target=label, value=value, exact=exact, achieved=achieved,
                        roots=tuple(sorted(roots)), series=None if series is None else series.upper(),
                        snapped=snapped, achieved_snapped=achieved_snapped, neighbours=tried, plan=final_plan,
                        result=final_result)


def _quantity(got: dict, columns, value: float) -> float:
    """The target quantity from re-solved columns (the swing difference for the symmetric target,
    NaN when that stage is not forward-active)."""
    if len(columns) == 3:
        up, down, region = columns
        return got[up] - got[down] if got[region] == "forward-active" else math.nan
    return got[columns[0]]

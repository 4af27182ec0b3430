"""Corner analysis: the plan at the extremes of its spreads, and the worst case of each margin.

The spreads are those of a tolerance run (:func:`.runs.spreads_of`): each varied value sits at
its low or its high end, and β follows the temperature of the corner as in a tolerance run.

* **Every corner** when there are at most ``max_corners`` of them (2^P for P varied values;
  :data:`MAX_CORNERS` by default, so every corner of a 3-stage chain with all its parts varied).
* **Otherwise a subset** (the usual sensitivity-guided worst case): the nominal point, the 2·P
  one-at-a-time extremes, and, for each margin, the corner that puts every value at the end that
  lowered that margin in the one-at-a-time solves. Exact when each margin is monotonic in each
  value; it can miss a worst case where a margin bends back inside a range (on the demo plan the
  subset put the worst s1.swing about 2 % above the worst of every corner).

Even every corner bounds a margin only where it is monotonic in each value: a margin whose worst
lies inside a range (a swing limited by saturation on one side and cutoff on the other, say) is
found by a tolerance run, which samples the inside.
"""

from __future__ import annotations

import html
import math
import numbers
from dataclasses import dataclass, field

import numpy as np

from ...errors import InvalidValueError
from .runs import BETA_TEMPERATURE_COEFFICIENT, ToleranceSpec, spreads_of, values_at
from .sweeps import PlanSweep, check_model, passed_rule, solve_chunked

__all__ = ["Corner", "CornersResult", "corners", "MAX_CORNERS"]

#: Default cap of the exhaustive enumeration: every corner of up to 16 varied values (a 3-stage
#: chain with every part varied). 65,536 corners take about 1 s with constant-drop and 6 s with
#: Ebers–Moll here (2 cores), solved in chunks, so the memory stays that of one chunk.
MAX_CORNERS = 2 ** 16


@dataclass(frozen=True)
class Corner:
    """The worst value of one margin over the corners, and where it occurs.

    Attributes
    ----------
    address : str
        Result address of the margin (``"s1.saturation_margin"`` …).
    value : float
        Its smallest value over the corners that solved (NaN if none did).
    index : int or None
        Which corner (row of :attr:`CornersResult.parameters`); None when no corner solved.
    parameters : dict of str -> float
        The corner's values (empty when no corner solved).
    """
    address: str
    value: float
    index: int | None
    parameters: dict

    def to_dict(self) -> dict:
        return {"address": self.address, "value": self.value if math.isfinite(self.value) else None,
                "index": self.index, "parameters": dict(self.parameters)}


@dataclass(frozen=True, eq=False)
class CornersResult:
    """Corners of a plan's spreads.

    Attributes
    ----------
    parameters : dict of str -> ndarray of shape (C,)
        Every varied plan address -> its value at each corner evaluated.
    sweep : PlanSweep
        Every result address at each corner.
    passed : ndarray of bool, shape (C,)
        The ``ampplan check`` exit-0 rule (and the required amplitude) per corner.
    exhaustive : bool
        True when every corner was evaluated, False for the subset (module docstring).
    worst_case : dict of str -> Corner
        Per margin (each stage's saturation and cutoff margin and swing, the chain's
        ``max_source_amplitude``), its worst corner.
    """
    parameters: dict
    sweep: PlanSweep
    passed: np.ndarray
    exhaustive: bool
    worst_case: dict
    model: str
    required_amplitude: float | None = None
    spreads: tuple = field(default=(), repr=False)

    @property
    def all_passed(self) -> bool:
        return bool(np.all(self.passed))

    def to_dict(self) -> dict:
        return {"model": self.model, "corners": len(self.passed), "exhaustive": self.exhaustive,
                "all_passed": self.all_passed, "passed": int(np.sum(self.passed)),
                "required_amplitude": self.required_amplitude,
                "spreads": {s.address: {"low": s.low, "high": s.high} for s in self.spreads},
                "worst_case": {a: c.to_dict() for a, c in self.worst_case.items()}}

    def __repr__(self) -> str:
        how = "every corner" if self.exhaustive else "sensitivity-guided subset"
        lines = [f"CornersResult({self.model}, {len(self.passed)} corners ({how}), "
                 f"{int(np.sum(self.passed))} pass)"]
        for address, corner in self.worst_case.items():
            where = "no corner solved" if corner.index is None else f"at corner {corner.index}"
            lines.append(f"  worst {address}: {corner.value:.4g} {where}")
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        e = html.escape
        rows = "".join(f"<tr><td>{e(a)}</td><td>{c.value:.4g}</td><td>{'none solved' if c.index is None else c.index}"
                       f"</td></tr>"
                       for a, c in self.worst_case.items())
        return (f"<div><strong>Corners ({e(self.model)}, {len(self.passed)}, {int(np.sum(self.passed))} pass)"
                f"</strong><table><thead><tr><th>margin</th><th>worst</th><th>corner</th></tr></thead>"
                f"<tbody>{rows}</tbody></table></div>")


def _margins(stage_ids) -> tuple:
    return tuple(f"{sid}.{name}" for sid in stage_ids
                 for name in ("saturation_margin", "cutoff_margin", "swing")) + ("max_source_amplitude",)


def corners(plan, resistors=0.05, beta=(0.5, 2.0), vbe_on=0.01, temperature=(0.0, 50.0), required_amplitude=None,
            model: str = "constant-drop", *, max_corners: int = MAX_CORNERS,
            beta_temperature_coefficient: float = BETA_TEMPERATURE_COEFFICIENT) -> CornersResult:
    """Evaluate the plan at the extremes of its spreads (see the module docstring).

    Parameters as for :func:`ampplan.analyses.whatif.tolerance` (uniform ranges); ``max_corners``
    caps the exhaustive enumeration.

    Raises
    ------
    InvalidValueError, UnknownModelError
        Bad spreads, model, ``required_amplitude`` or ``max_corners``.
    """
    check_model(model)
    if isinstance(max_corners, bool) or not isinstance(max_corners, numbers.Integral) or max_corners < 1:
        raise InvalidValueError(f"corners max_corners: must be a whole number >= 1, got {max_corners!r}")
    if required_amplitude is not None and (isinstance(required_amplitude, bool)
                                           or not isinstance(required_amplitude, numbers.Real)
                                           or not 0 < required_amplitude < math.inf):
        raise InvalidValueError(f"corners required_amplitude: must be a positive number of volts, got "
                                f"{required_amplitude!r}")
    spreads = spreads_of(plan, model, resistors, beta, vbe_on, temperature, "uniform", beta_temperature_coefficient)
    spec = ToleranceSpec(spreads=spreads, entropy=0, distribution="uniform", model=model,
                         beta_temperature_coefficient=float(beta_temperature_coefficient),
                         required_amplitude=None if required_amplitude is None else float(required_amplitude))
    axes = [j for j, s in enumerate(spreads) if s.half != 0]
    p = len(axes)
    frozen = plan.copy()
    margins = _margins(frozen.stage_ids)

    def solve(x_axes):
        x = np.zeros((len(x_axes), len(spreads)))
        x[:, axes] = x_axes
        values = values_at(spec, x) or {"temperature": np.full(len(x_axes), float(frozen.temperature))}
        return values, solve_chunked(frozen, model, values)

    exhaustive = p < 63 and 2 ** p <= max_corners
    if exhaustive:
        x = (((np.arange(2 ** p)[:, None] >> np.arange(p)) & 1) * 2.0 - 1.0) if p else np.zeros((1, 0))
        values, table = solve(x)
    else:
        # One-at-a-time: row 0 nominal, rows 1 + 2j / 2 + 2j value j low / high.
        probe = np.zeros((1 + 2 * p, p))
        probe[1 + 2 * np.arange(p), np.arange(p)] = -1.0
        probe[2 + 2 * np.arange(p), np.arange(p)] = 1.0
        _, first = solve(probe)
        guided = []
        for address in margins:
            low, high = first[address][1::2], first[address][2::2]
            # The end that lowers the margin; where a probe failed or the margin did not move, low.
            guided.append(np.where(np.nan_to_num(high - low, nan=0.0) < 0, 1.0, -1.0))
        x = np.concatenate([probe, np.unique(np.array(guided), axis=0)])
        values, table = solve(x)
    passed = passed_rule(table, frozen.stage_ids, spec.required_amplitude)
    sweep = PlanSweep(values=values, model=model, plan=frozen, _table=table)
    worst = {}
    for address in margins:
        column = np.asarray(sweep[address], dtype=float)
        finite = np.isfinite(column)
        if not finite.any():
            worst[address] = Corner(address, math.nan, None, {})
            continue
        index = int(np.flatnonzero(finite)[np.argmin(column[finite])])
        worst[address] = Corner(address, float(column[index]), index, {a: float(v[index]) for a, v in values.items()})
    return CornersResult(parameters=values, sweep=sweep, passed=passed, exhaustive=exhaustive, worst_case=worst,
                         model=model, required_amplitude=spec.required_amplitude, spreads=spreads)

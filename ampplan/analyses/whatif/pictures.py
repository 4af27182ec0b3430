"""What the notebook's what-if views draw, as plain data: sweep curves and tolerance clouds.

The notebook's sweep view and tolerance view (:mod:`ampplan.notebook.whatif`) and their static
matplotlib pictures render what is computed here; neither computes anything of its own, so the
live view and the saved picture cannot disagree (as with :mod:`ampplan.analyses.plane` for the
canvas).

* :func:`sweep_picture`: result curves against one plan value, from one batched
  :func:`~ampplan.analyses.whatif.sweeps.sweep` (never a loop of solves), with the spans where a
  stage leaves forward-active or the plan does not solve, stated in words too, and the plan's
  current value marked.
* :func:`tolerance_picture`: from a :class:`~ampplan.analyses.whatif.runs.ToleranceResult`, each
  stage's sampled Q-points in the frame of its canvas panel (V_CE and I_C for an NPN, V_EC and the
  collector current out of the collector for a PNP, as :mod:`ampplan.analyses.plane` draws them),
  the yield, a histogram of every margin split into passing and failing samples, and the
  parameters that drive each margin most (rank correlations of the run).
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass

import numpy as np

from ...errors import InvalidValueError
from ...units import format_quantity
from ..addresses import RESULT_UNITS, WORD_RESULTS, check_result_address, read_result
from .sweeps import check_address, check_model, sweep

__all__ = ["Curve", "Span", "SweepPicture", "sweep_picture", "sweep_values", "default_show",
           "StageCloud", "Histogram", "TolerancePicture", "tolerance_picture", "CLOUD_POINTS", "BINS",
           "LOG_RATIO"]

#: A sweep from lo to hi is spaced geometrically when lo > 0 and hi / lo is at least this (a
#: resistor over a decade), else linearly.
LOG_RATIO = 10.0
#: At most this many samples of a tolerance run are drawn as each stage's cloud (the first ones:
#: the samples are independent draws, so the first N are an unbiased subset).
CLOUD_POINTS = 1000
#: Bins of each margin histogram.
BINS = 30


def _unit(address: str) -> str:
    return RESULT_UNITS[address.rpartition(".")[2]]


# -- sweeps ---------------------------------------------------------------------------------

@dataclass(frozen=True)
class Curve:
    """One result against the swept value.

    Attributes
    ----------
    address : str
        The result address (``"s1.vce"``).
    unit : str
        Its SI unit (``""`` for a ratio).
    y : tuple of float
        Per sample; NaN where the sample did not solve.
    current : float
        The result at the plan's current value (the live result), NaN without one.
    """
    address: str
    unit: str
    y: tuple
    current: float


@dataclass(frozen=True)
class Span:
    """A stretch of the swept value where a stage is not forward-active, or the plan does not solve.

    Attributes
    ----------
    lo, hi : float
        Its ends (midway between the samples either side of the change; the sweep's ends).
    sid : str or None
        The stage (None: the plan did not solve there).
    what : str
        The region (``"saturation"``, ``"cutoff"`` ...) or ``"no solution"``.
    text : str
        One sentence saying so, values in engineering notation.
    """
    lo: float
    hi: float
    sid: str | None
    what: str
    text: str


@dataclass(frozen=True)
class SweepPicture:
    """Everything the sweep view draws.

    Attributes
    ----------
    address : str
        The swept plan address.
    unit : str
        Its unit (``plan.unit``).
    log : bool
        The values are spaced geometrically (draw the axis on a log scale).
    x : tuple of float
        The swept values, ascending.
    current : float
        The plan's value at ``address`` now.
    curves : tuple of Curve
    spans : tuple of Span
    words : tuple of str
        The spans and the current value, in sentences.
    model : str
    title : str
    """
    address: str
    unit: str
    log: bool
    x: tuple
    current: float
    curves: tuple
    spans: tuple
    words: tuple
    model: str
    title: str


def _number(value, name: str) -> float:
    if isinstance(value, bool) or not isinstance(value, numbers.Real) or not math.isfinite(value):
        raise InvalidValueError(f"sweep_view {name}: must be a finite number, got {value!r}")
    return float(value)


def sweep_values(lo, hi, n) -> tuple:
    """(values, log): ``n`` values from ``lo`` to ``hi``, geometric when lo > 0 and hi/lo >= LOG_RATIO.

    Raises
    ------
    InvalidValueError
        lo or hi not a finite number, lo >= hi, n not a whole number >= 2.
    """
    lo, hi = _number(lo, "lo"), _number(hi, "hi")
    if not lo < hi:
        raise InvalidValueError(f"sweep_view lo, hi: need lo < hi, got lo={lo:g}, hi={hi:g}")
    if isinstance(n, bool) or not isinstance(n, numbers.Integral) or n < 2:
        raise InvalidValueError(f"sweep_view n: must be a whole number >= 2, got {n!r}")
    log = lo > 0 and hi / lo >= LOG_RATIO
    values = np.geomspace(lo, hi, int(n)) if log else np.linspace(lo, hi, int(n))
    return values, log


def default_show(plan, address: str) -> tuple:
    """The results shown when none are named: the swept stage's V_CE and I_C, else every stage's
    V_CE; then the largest source amplitude."""
    head = address.partition(".")[0]
    if head in plan.stage_ids:
        return (f"{head}.vce", f"{head}.ic", "max_source_amplitude")
    return tuple(f"{sid}.vce" for sid in plan.stage_ids) + ("max_source_amplitude",)


def _check_show(plan, show) -> tuple:
    if isinstance(show, str):
        show = (show,)
    try:
        show = tuple(show)
    except TypeError:
        raise InvalidValueError(f"sweep_view show: must be a list of result addresses, got {show!r}") from None
    if not show:
        raise InvalidValueError("sweep_view show: name at least one result address ('s1.vce', 'gain' ...)")
    for address in show:
        check_result_address(address, plan.stage_ids)
        if address.rpartition(".")[2] in WORD_RESULTS:
            raise InvalidValueError(f"sweep_view show {address!r}: is a word, not a number; regions are shown "
                                    "as shaded spans anyway (pick a number such as 's1.vce')")
    return show


def _edges(x: np.ndarray, log: bool) -> np.ndarray:
    """Boundaries between neighbouring samples (geometric or arithmetic midpoints), with the ends."""
    mids = np.sqrt(x[:-1] * x[1:]) if log else (x[:-1] + x[1:]) / 2
    return np.concatenate([[x[0]], mids, [x[-1]]])


def _runs(mask: np.ndarray) -> list:
    """(first, last) index of every run of True."""
    out, start = [], None
    for k, flag in enumerate(mask.tolist()):
        if flag and start is None:
            start = k
        elif not flag and start is not None:
            out.append((start, k - 1))
            start = None
    if start is not None:
        out.append((start, len(mask) - 1))
    return out


def sweep_picture(plan, address: str, lo, hi, n: int = 200, show=None, model: str = "constant-drop",
                  result=None) -> SweepPicture:
    """The sweep view's data: ``show`` against ``address`` from ``lo`` to ``hi`` (n samples).

    Parameters
    ----------
    plan : Plan
        Left unchanged (the sweep runs on a copy).
    address : str
        A numeric plan address (``"s1.rc"``, ``"supply"``, ``"s2.device.beta"``).
    lo, hi : float
        The range, in the address's SI unit.
    n : int
    show : sequence of str, optional
        Numeric result addresses; default :func:`default_show`.
    model : {"constant-drop", "ebers-moll"}
    result : PlanResult, optional
        The plan solved as it is (the live result): the marked point of each curve. Solved here
        when not given.

    Raises
    ------
    InvalidValueError, UnknownNameError, UnknownModelError
        A bad range, count, address (unknown, a word, a part not fitted: it names it), result
        address or model.
    """
    check_model(model)
    check_address(plan, address, "sweep_view")
    values, log = sweep_values(lo, hi, n)
    show = _check_show(plan, default_show(plan, address) if show is None else show)
    run = sweep(plan, {address: values}, model=model)
    if result is None:
        try:
            result = plan.solve(model=model)
        except Exception:  # noqa: BLE001 - the plan as it is may not settle; the curves still do
            result = None
    unit = plan.unit(address)
    current = float(plan.get(address))
    curves = tuple(Curve(a, _unit(a), tuple(float(v) for v in run[a]),
                         math.nan if result is None else float(read_result(result, a))) for a in show)
    edges = _edges(values, log)
    spans = []
    failed = ~run.ok
    for first, last in _runs(failed):
        a, b = float(edges[first]), float(edges[last + 1])
        spans.append(Span(a, b, None, "no solution",
                          f"The plan does not solve for {address} from {format_quantity(a, unit)} to "
                          f"{format_quantity(b, unit)}."))
    for sid in plan.stage_ids:
        region = np.asarray(run[f"{sid}.region"])
        for what in sorted(set(region[~failed].tolist()) - {"forward-active", ""}):
            for first, last in _runs((region == what) & ~failed):
                a, b = float(edges[first]), float(edges[last + 1])
                spans.append(Span(a, b, sid, what, f"{sid} is in {what} for {address} from "
                                                   f"{format_quantity(a, unit)} to {format_quantity(b, unit)}."))
    spans.sort(key=lambda s: (s.lo, s.sid or ""))
    words = [s.text for s in spans] or [f"Every stage is forward-active over the whole sweep of {address}."]
    now = f"{address} is {format_quantity(current, unit)} now"
    if not values[0] <= current <= values[-1]:
        now += ", outside the sweep"
    else:
        inside = [s for s in spans if s.lo <= current <= s.hi]
        now += (": " + "; ".join(f"{s.sid} {s.what}" if s.sid else "no solution" for s in inside)
                if inside else ": every stage forward-active")
    words.append(now + ".")
    title = f"{', '.join(show)} against {address} ({model}, {len(values)} values)"
    return SweepPicture(address=address, unit=unit, log=log, x=tuple(float(v) for v in values), current=current,
                        curves=curves, spans=tuple(spans), words=tuple(words), model=model, title=title)


# -- tolerance runs -------------------------------------------------------------------------

@dataclass(frozen=True)
class StageCloud:
    """A stage's sampled Q-points in its canvas panel's frame.

    Attributes
    ----------
    sid : str
    v, i : tuple of float
        Volts and amperes (V_CE and I_C for an NPN; V_EC and the current out of the collector for
        a PNP), of the samples that solved (at most :data:`CLOUD_POINTS` of the run).
    passed : tuple of bool
        Whether each drawn sample passes (the ``ampplan check`` rule of the run).
    total : int
        Samples in the run.
    stale : bool
        The run was made on the plan as it was before a later edit.
    """
    sid: str
    v: tuple
    i: tuple
    passed: tuple
    total: int
    stale: bool = False


@dataclass(frozen=True)
class Histogram:
    """A margin over the samples that solved, split into passing and failing samples.

    Attributes
    ----------
    address : str
        The result address (``"s1.saturation_margin"``).
    unit : str
    edges : tuple of float
        BINS + 1 bin edges.
    passed, failed : tuple of int
        Counts per bin.
    nominal : float
        The margin of the plan as it is (NaN without a result).
    p5 : float
        The 5th percentile over the run.
    """
    address: str
    unit: str
    edges: tuple
    passed: tuple
    failed: tuple
    nominal: float
    p5: float


@dataclass(frozen=True)
class TolerancePicture:
    """Everything the tolerance view draws.

    Attributes
    ----------
    samples, passed, failed_to_solve : int
    yield_fraction : float
    clouds : tuple of StageCloud
        One per stage.
    histograms : tuple of Histogram
        Each stage's saturation and cutoff margins, then the chain's largest source amplitude.
    sensitivity : tuple of (str, tuple of (str, float))
        Per margin, the three varied values that drive it most, with their rank correlation.
    words : tuple of str
        The yield and how many samples did not solve, in sentences.
    drivers : tuple of str
        The strongest driver of each margin, in sentences.
    model : str
    seed : int
    title : str
    """
    samples: int
    passed: int
    failed_to_solve: int
    yield_fraction: float
    clouds: tuple
    histograms: tuple
    sensitivity: tuple
    words: tuple
    drivers: tuple
    model: str
    seed: int
    title: str


def stale_clouds(clouds) -> tuple:
    """The same clouds marked as made before the latest edit."""
    from dataclasses import replace
    return tuple(replace(c, stale=True) for c in clouds)


def tolerance_picture(run, nominal=None, cloud_points: int = CLOUD_POINTS, bins: int = BINS) -> TolerancePicture:
    """The tolerance view's data from a :class:`~ampplan.analyses.whatif.runs.ToleranceResult`.

    ``nominal`` is the PlanResult of the plan as it is (each histogram marks its margin).
    """
    plan = run.sweep.plan
    sweep_ = run.sweep
    ok = np.asarray(sweep_.ok)
    passed = np.asarray(run.passed)
    drawn = np.flatnonzero(ok)[:cloud_points]
    clouds = []
    for sid in plan.stage_ids:
        sign = -1.0 if plan.stage(sid).device.polarity == "pnp" else 1.0
        v = sign * np.asarray(sweep_[f"{sid}.vce"], dtype=float)[drawn]
        i = np.asarray(sweep_[f"{sid}.ic"], dtype=float)[drawn]
        clouds.append(StageCloud(sid, tuple(v.tolist()), tuple(i.tolist()), tuple(passed[drawn].tolist()),
                                 run.samples))
    histograms = []
    addresses = [f"{sid}.{m}" for sid in plan.stage_ids for m in ("saturation_margin", "cutoff_margin")]
    addresses.append("max_source_amplitude")
    for address in addresses:
        values = np.asarray(sweep_[address], dtype=float)
        finite = np.isfinite(values)
        if finite.any():
            edges = np.histogram_bin_edges(values[finite], bins=bins)
        else:
            edges = np.linspace(0.0, 1.0, bins + 1)
        good, _ = np.histogram(values[finite & passed], bins=edges)
        bad, _ = np.histogram(values[finite & ~passed], bins=edges)
        histograms.append(Histogram(address, _unit(address), tuple(edges.tolist()), tuple(good.tolist()),
                                    tuple(bad.tolist()),
                                    math.nan if nominal is None else float(read_result(nominal, address)),
                                    run.percentiles.get(address, {}).get(5, math.nan)))
    sensitivity = tuple((address, tuple(run.sensitivity.get(address, ())[:3])) for address in addresses)
    failed_to_solve = int(np.sum(~ok))
    count = int(np.sum(passed))
    words = [f"Yield {100 * run.yield_fraction:.1f} %: {count} of {run.samples} samples pass (every stage "
             f"forward-active, no caution"
             + (f", at least {format_quantity(run.required_amplitude, 'V')} peak of source" if run.required_amplitude
                else "") + ")."]
    if failed_to_solve:
        words.append(f"{failed_to_solve} samples did not solve.")
    drivers = tuple(f"{address} is driven most by {pairs[0][0]} (rank correlation {pairs[0][1]:+.2f})."
                    for address, pairs in sensitivity if pairs)
    title = f"Tolerance run: {run.samples} samples ({run.distribution}, {run.model}, seed {run.seed})"
    return TolerancePicture(samples=run.samples, passed=count, failed_to_solve=failed_to_solve,
                            yield_fraction=run.yield_fraction, clouds=tuple(clouds), histograms=tuple(histograms),
                            sensitivity=sensitivity, words=tuple(words), drivers=drivers, model=run.model,
                            seed=run.seed,
                            title=title)

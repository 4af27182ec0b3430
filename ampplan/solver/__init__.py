"""The shared region solver: one entry point, two device models, single or batched.

:func:`solve` validates the options, compiles the circuit's layout, and dispatches to the
constant-drop region search (:mod:`.constant_drop`) or Ebers–Moll Newton (:mod:`.ebers_moll`).
Both return one :class:`OperatingPoint`. A single solve raises when it fails; in a batch a failed
sample gets a status and NaN fields and the others carry on.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Literal, get_args

import numpy as np

from ..circuit import Circuit
from ..devices import thermal_voltage
from ..validation import shown
from ..errors import (ConvergenceError, InvalidValueError, NoConsistentRegionError, UnknownModelError,
                      UnknownNameError)
from . import constant_drop as cd
from .assembly import layout_of, take_samples
from . import ebers_moll as em
from .result import REGIONS, UNSOLVED, Alternatives, Check, OperatingPoint, TransistorResult

__all__ = ["solve", "Model", "MODELS", "ActiveEdge", "ACTIVE_EDGES", "OperatingPoint", "TransistorResult",
           "Check", "REGIONS"]

Model = Literal["constant-drop", "ebers-moll"]
MODELS: tuple[str, ...] = get_args(Model)
ActiveEdge = Literal["vce-sat", "vcb-zero"]
ACTIVE_EDGES: tuple[str, ...] = get_args(ActiveEdge)


def solve(circuit, model: str = "constant-drop", temperature: float = 25.0, batch: dict | None = None,
          active_edge: str = "vce-sat", assume: dict | None = None, warm_start: bool = True) -> OperatingPoint:
    """Solve a circuit's DC operating point.

    Parameters
    ----------
    circuit : ampplan.Circuit
    model : {"constant-drop", "ebers-moll"}
    temperature : float
        Degrees Celsius.
    batch : dict of str -> array_like of shape (S,), optional
        Values to vary (see :meth:`ampplan.Circuit.solve`).
    active_edge : {"vce-sat", "vcb-zero"}
        Constant-drop model only: the edge between forward-active and saturation.
    assume : dict of str -> str, optional
        Constant-drop model only: solve with these regions assumed (transistor name -> region,
        every transistor named) and only check them, as in hand analysis. No search: where a
        check fails the status is ``"assumption-fails"`` (the numbers are still reported, with the
        failing checks), and a single solve does not raise.
    warm_start : bool
        Batches only: start Newton for every sample from one solved sample (fast). A circuit with
        a unique operating point gives the same answers either way (to Newton's 1e-9 tolerance);
        one with several (a latch, a trigger) may settle some samples on another of them than a
        single solve would, unless their regions differ from the solved sample's (those are
        re-solved from their own start). False solves each sample from its own start, exactly as
        one-by-one solves do, at several times the cost.

    Returns
    -------
    OperatingPoint
        Scalars for a single solve; arrays of shape (S,) for a batch.

    Raises
    ------
    UnknownModelError, InvalidValueError, UnknownNameError, FloatingNodeError,
    VoltageSourceLoopError
        Bad input, before anything is solved.
    NoConsistentRegionError, ConvergenceError
        A single solve that fails (a batch records a status instead).
    """
    if not isinstance(model, str) or model not in MODELS:
        raise UnknownModelError(f"unknown model {shown(model)}; choose one of {', '.join(MODELS)}")
    if not isinstance(active_edge, str) or active_edge not in ACTIVE_EDGES:
        raise UnknownModelError(f"unknown active_edge {shown(active_edge)}; choose one of {', '.join(ACTIVE_EDGES)}")
    if not isinstance(warm_start, (bool, np.bool_)):
        raise InvalidValueError(f"warm_start must be True or False, got {shown(warm_start)}")
    if not isinstance(circuit, Circuit):
        raise InvalidValueError(f"solve expects an ampplan Circuit, got {type(circuit).__name__}")
    if not circuit.elements:
        raise InvalidValueError("the circuit is empty: add a source and the elements it drives")
    if assume is not None and not isinstance(assume, Mapping):
        raise InvalidValueError(f"assume must map each transistor's name to a region, e.g. "
                                f"{{'Q1': 'forward-active'}}, got {type(assume).__name__}")
    layout = layout_of(circuit)
    if assume is not None:
        if model != "constant-drop":
            raise UnknownModelError("assume= applies to the constant-drop model only")
        names = [q.name for q in layout.bjts]
        missing = [n for n in names if n not in assume]
        extra = [n for n in assume if n not in names]
        if missing or extra:
            raise UnknownNameError("assume must name every transistor exactly once"
                                   + (f"; missing {', '.join(missing)}" if missing else "")
                                   + (f"; no transistor named {', '.join(extra)}" if extra else ""))
        bad = {n: r for n, r in assume.items() if not isinstance(r, str) or r not in REGIONS}
        if bad:
            raise UnknownModelError(f"assume: unknown region(s) {bad}; regions are {', '.join(REGIONS)}")
    params = layout.parameters(temperature=temperature, batch=batch)
    single = batch is None
    if model == "ebers-moll":
        return _solve_ebers_moll(circuit, layout, params, single, warm_start)
    if assume is not None:
        return _solve_assumed(circuit, layout, params, single, active_edge,
                              [REGIONS.index(assume[q.name]) for q in layout.bjts])
    return _solve_constant_drop(circuit, layout, params, single, active_edge, warm_start)


def _part(params, rows, count):
    """Samples ``rows`` of ``params`` (the parameters themselves when ``rows`` covers all ``count``)."""
    return params if rows.size == count else take_samples(params, rows)


def _solve_assumed(circuit, layout, params, single, active_edge, codes):
    """Constant-drop solve of one assumed assignment, checked but not searched (in blocks of samples)."""
    cd.check_size(layout)
    s_count, n_q = params.size, layout.n_bjt
    regions = np.broadcast_to(np.array(codes, dtype=np.int8), (s_count, n_q)).copy()
    x = np.empty((s_count, layout.size + 1))
    good = np.empty(s_count, dtype=bool)
    ok = np.empty(s_count, dtype=bool)
    checks = [np.empty((s_count, n_q, 2)) for _ in range(3)] + [np.empty((s_count, n_q, 2), dtype=bool)]
    for rows in cd.blocks(s_count, layout, sparse=not single):
        problem = cd.RegionProblem(layout, _part(params, rows, s_count), active_edge, sparse=not single)
        local = np.arange(rows.size)
        x[rows], ok[rows] = problem.solve(local, regions[rows])
        good[rows], _, block_checks = problem.consistent(local, regions[rows], x[rows], ok[rows])
        for whole, part in zip(checks, block_checks):
            whole[rows] = part
    status = np.where(good, "ok", np.where(ok, "assumption-fails", "singular"))
    return _build(circuit, layout, params, x, regions, (problem.check_names(regions),) + tuple(checks), status,
                  "constant-drop", "assumed regions", 1, single)


# -- Ebers–Moll -----------------------------------------------------------------------------------
def _newton_start(layout, params, sparse=False):
    """Newton's start for given samples: the constant-drop answer with every transistor forward-active."""
    def start(rows):
        problem = cd.RegionProblem(layout, take_samples(params, rows), sparse=sparse)
        x0, _ = problem.solve(np.arange(rows.size), np.full((rows.size, layout.n_bjt), cd.ACTIVE, dtype=np.int8))
        return x0
    return start


def _solve_ebers_moll(circuit, layout, params, single, warm_start=True):
    x, converged, iterations, method, rejected, regions = em.solve_newton(
        layout, params, _newton_start(layout, params, not single), warm_start=warm_start, sparse=not single)
    if single and not converged[0]:
        raise ConvergenceError(_em_failure_message(layout, params, em.METHODS[method[0]], rejected,
                                                   int(iterations[0])),
                               iterations=int(iterations[0]),
                               last_iterate=dict(zip(layout.nodes, rejected[0, :layout.n_nodes].tolist())))
    regions, checks = em.classify(layout, params, x, regions=regions)
    status = np.where(converged, "ok", "no-convergence")
    names, values, limits, margins = checks
    holds = np.ones(values.shape, dtype=bool)
    methods = sorted(em.METHODS[k] for k in np.flatnonzero(np.bincount(method[converged], minlength=1))) or ["newton"]
    return _build(circuit, layout, params, x, regions, (names, values, limits, margins, holds), status,
                  "ebers-moll", " + ".join(methods), int(iterations.max(initial=0)), single)


def _em_failure_message(layout, params, method, rejected, iterations):
    """Why a single Ebers–Moll solve has no answer, in terms of what was measured."""
    from ..units import format_quantity as fq
    names = ", ".join(q.name for q in layout.bjts) or "(none)"
    temperature = float(params.temperature[0])
    if method == "overdriven":
        dev = params.at_temperature
        nvt = dev["emission_coefficient"][0] * thermal_voltage(temperature)
        s = layout.sign
        x = rejected[:1]
        v_be = (s * (x[:, layout.q_b] - x[:, layout.q_e]))[0]
        v_bc = (s * (x[:, layout.q_b] - x[:, layout.q_c]))[0]
        over = np.maximum(v_be, v_bc) / nvt
        j = int(np.argmax(over))
        junction, volts = ("base-emitter", v_be[j]) if v_be[j] >= v_bc[j] else ("base-collector", v_bc[j])
        i_s = float(dev["saturation_current"][0, j])
        reach = i_s * np.exp(em.EXP_LIMIT)   # the largest current the exponential law carries
        head = (f"no operating point within the Ebers–Moll law's range: the only answer found holds the "
                f"{junction} junction of {layout.bjts[j].name} at {volts:.4g} V, beyond {em.EXP_LIMIT:g}·n·V_T = "
                f"{em.EXP_LIMIT * nvt[j]:.4g} V at {temperature:g} °C, where the exponential is continued as a "
                f"straight line; ")
        if reach > 1.0:
            return head + (f"the law would carry {reach:.3g} A there, so only a source with too little series "
                           "resistance can hold the junction that far forward: put a resistance in series with it")
        return head + (f"at its saturation current ({fq(i_s, 'A')} at {temperature:g} °C) the law carries at "
                       f"most {fq(reach, 'A')} before that, less than the circuit asks of it: the saturation "
                       "current is too small")
    if method == "residual too large":
        check = em.residuals(layout, take_samples(params, np.array([0])), rejected[:1])
        parts = []
        if check.kcl[0] > check.kcl_allowed[0]:
            parts.append(f"Kirchhoff's current law by {fq(check.kcl[0], 'A')} at node "
                         f"{layout.nodes[int(check.kcl_node[0])]} (allowed {fq(check.kcl_allowed[0], 'A')})")
        if check.device[0] > check.device_allowed[0]:
            parts.append(f"the device equations of {layout.bjts[int(check.device_transistor[0])].name} by "
                         f"{fq(check.device[0], 'A')} (allowed {fq(check.device_allowed[0], 'A')})")
        return (f"Ebers–Moll Newton stopped at an answer for transistors {names} that misses "
                + " and ".join(parts) + f" (relative tolerance {em.RESIDUAL_TOLERANCE:g}), so it is not reported; "
                "this happens when the equations are too ill-conditioned for double precision, for example "
                "with a saturation current or a resistance far outside the usual range")
    return (f"Ebers–Moll Newton did not converge for the circuit with transistors {names}, after {iterations} "
            "iterations including the conductance ladder and source stepping; check for a node held only through "
            "reverse-biased junctions, or use model='constant-drop'")


# -- constant-drop --------------------------------------------------------------------------------
def _em_guess(layout, params, rows, warm_start=True):
    """Region guess from the Ebers–Moll solution (all forward-active where it fails)."""
    sub = take_samples(params, rows)
    x, converged, iterations, _, _, regions = em.solve_newton(layout, sub, _newton_start(layout, sub),
                                                              warm_start=warm_start)
    if regions is None:
        regions, _ = em.classify(layout, sub, x, checks=False)
    regions[~converged] = cd.ACTIVE
    return regions.astype(np.int8), int(iterations.max(initial=0))


def _solve_constant_drop(circuit, layout, params, single, active_edge, warm_start=True):
    """The region search of :mod:`.constant_drop`, block by block over the samples; Ebers–Moll only
    where a sample has several consistent assignments or (beyond the enumeration limit) none near
    its start. ``warm_start`` is not used: those Ebers–Moll solves start each sample on its own, as a
    single solve does, so every sample equals its single solve."""
    cd.check_size(layout)
    if single:
        done = _single_at_start(circuit, layout, params, active_edge)
        if done is not None:
            return done
    s_count, n_q = params.size, layout.n_bjt
    blocks = list(cd.blocks(s_count, layout, sparse=not single))
    if len(blocks) > 1:
        # x, regions, found, values, limits, margins, holds of every sample, filled block by block.
        whole = [np.empty((s_count, layout.size + 1)), np.empty((s_count, n_q), dtype=np.int8),
                 np.empty(s_count, dtype=bool)] + [np.empty((s_count, n_q, 2)) for _ in range(3)] + [
                 np.empty((s_count, n_q, 2), dtype=bool)]
    iterations, deepest, notes = 0, 1, []
    for rows in blocks:
        sub = _part(params, rows, s_count)
        problem = cd.RegionProblem(layout, sub, active_edge, sparse=not single)
        local = np.arange(rows.size)
        result = cd.search(problem, local, np.full((rows.size, n_q), cd.ACTIVE, dtype=np.int8))
        iterations += result.solves
        tied = sorted(result.ties)
        restart = sorted(result.misses) if n_q > cd.ENUMERATION_LIMIT else []
        if tied or restart:
            # Rare: the Ebers–Moll solution breaks ties and, beyond the enumeration limit, gives a
            # second start where the first found nothing nearby.
            guess, em_iterations = _em_guess(layout, sub, np.array(tied + restart), warm_start=False)
            iterations += em_iterations
            for k, g in zip(tied, guess):
                result.settle(k, _nearest(result.ties[k], g))
            notes += ["Ebers–Moll tie-break"] if tied else []
            if restart:
                notes.append("search from the Ebers–Moll guess")
                again = cd.search(problem, np.array(restart), guess[len(tied):])
                iterations += again.solves
                for i, k in enumerate(restart):
                    if again.found[i]:
                        result.settle(k, again.regions[i])
                    elif i in again.ties:
                        result.settle(k, _nearest(again.ties[i], guess[len(tied) + i]))
        deepest = max(deepest, result.deepest)
        stale = np.flatnonzero(result.stale) if result.stale.any() else ()
        if len(stale):
            result.x[stale], result.ok[stale] = problem.solve(stale, result.regions[stale])
            iterations += stale.size
            for kept, fresh in zip(result.checks, problem.checks(stale, result.regions[stale], result.x[stale])):
                kept[stale] = fresh
        part = (result.x, result.regions, result.found & result.ok, *result.checks)
        if len(blocks) > 1:
            for array, values in zip(whole, part):
                array[rows] = values
        else:
            whole = part   # one block (every single solve, every small batch) is used as it is
    x, regions, found, *checks = whole

    if single and not found[0]:
        misses = _closest(problem, *result.misses[0]) if 0 in result.misses else []
        raise NoConsistentRegionError(_no_region_message(layout, misses), closest=misses)
    steps = ("forward-active start", "repair by failed checks",
             "enumeration" if n_q <= cd.ENUMERATION_LIMIT else "local search")
    method = ", ".join(steps[:deepest] + tuple(dict.fromkeys(notes)))
    status = _OK if single else np.where(found, "ok", "no-consistent-region")   # a failed single solve raised
    alternatives = ()
    if single and n_q:
        chosen = regions[0].copy()
        alternatives = Alternatives(lambda: _alternatives(circuit, layout, params, problem, chosen, method))
    return _build(circuit, layout, params, x, regions, (problem.check_names(regions),) + tuple(checks), status,
                  "constant-drop", method, iterations, single, alternatives)


_OK = np.array(["ok"])
_SAMPLE_0 = np.zeros(1, dtype=np.intp)
_SAMPLE_0.flags.writeable = False


def _single_at_start(circuit, layout, params, active_edge):
    """A single solve whose forward-active start holds (most amplifiers): step 1 of the search
    (:func:`.constant_drop.search`) with the checks in plain floats, straight into the result.

    None when the start does not hold; the full search then runs and reaches the same answer it
    always did (it tries the same start first). The result is the one that search gives.
    """
    n_q = layout.n_bjt
    problem = cd.RegionProblem(layout, params, active_edge)
    start = np.full((1, n_q), cd.ACTIVE, dtype=np.int8)
    x, ok = problem.solve(_SAMPLE_0, start)
    if not ok[0]:
        return None
    checks = problem.checks_one(0, [cd.ACTIVE] * n_q, x[0].tolist())
    if not all(h for pair in checks[4] for h in pair):
        return None
    method = "forward-active start"
    alternatives = ()
    if n_q:
        alternatives = Alternatives(lambda: _alternatives(circuit, layout, params, problem, start[0], method))
    return _build_single(circuit, layout, params, x[0], start[0], checks, "ok", "constant-drop", method, 1,
                         alternatives)


def _nearest(candidates, guess):
    """The candidate (C, N) with the fewest regions different from ``guess``; the first of equals."""
    return candidates[np.argmin(cd.hamming(candidates, guess))]


def _alternatives(circuit, layout, params, problem, chosen, method):
    """Other consistent operating points of a single solve, distinct from the chosen and each other."""
    cands, x, consistent = cd.alternatives(problem, chosen)
    out = []
    for k in _distinct_others(x, np.flatnonzero(consistent), 0, layout):
        reg = cands[k:k + 1]
        xk, ok = problem.solve(np.zeros(1, dtype=np.intp), reg)
        good, _, checks = problem.consistent(np.zeros(1, dtype=np.intp), reg, xk, ok)
        if good[0]:
            out.append(_build(circuit, layout, params, xk, reg, (problem.check_names(reg),) + checks,
                              np.array(["ok"]), "constant-drop", method, len(cands), True))
    return tuple(out)


def _closest(problem, cands, x, ok, score):
    """The near misses of sample 0: (assignment, failed checks) for the best-scoring assignments
    tried, best first."""
    names = [q.name for q in problem.layout.bjts]
    order = np.argsort(score, kind="stable")
    samples = np.zeros(len(order), dtype=np.intp)
    values, limits, margins, holds = problem.checks(samples, cands[order], x[order])
    chk_names = problem.check_names(cands[order])
    out = []
    for k, idx in enumerate(order):
        if not ok[idx]:
            continue
        assignment = {n: REGIONS[r] for n, r in zip(names, cands[idx])}
        failed = [f"{names[j]}: {chk_names[k, j, c]} fails (value {values[k, j, c]:.6g}, "
                  f"limit {limits[k, j, c]:.6g})"
                  for j in range(len(names)) for c in range(2) if not holds[k, j, c]]
        out.append((assignment, "; ".join(failed)))
    return out


def _no_region_message(layout, misses):
    lines = ["no region assignment of transistors "
             f"{', '.join(q.name for q in layout.bjts)} satisfies every check of the constant-drop model"]
    for assignment, failed in misses:
        lines.append("  closest: " + ", ".join(f"{k} {v}" for k, v in assignment.items()) + f" — {failed}")
    lines.append("  (try model='ebers-moll', or look for a latch or an impossible bias)")
    return "\n".join(lines)


def _distinct_others(x, candidates, pick, layout):
    """Indices of consistent candidates whose node voltages differ from the chosen and each other."""
    n = layout.n_nodes
    kept = [x[pick, :n]]
    out = []
    for k in candidates:
        if k == pick:
            continue
        scale = 1e-6 * (1.0 + np.max(np.abs(x[k, :n]), initial=0.0))
        if all(np.max(np.abs(x[k, :n] - y), initial=0.0) > scale for y in kept):
            kept.append(x[k, :n])
            out.append(k)
    return out


# -- results --------------------------------------------------------------------------------------
def _build(circuit, layout, params, x, regions, checks, status, model, method, iterations, single,
           alternatives=()):
    """Assemble an OperatingPoint from unknowns ``x`` (S, size + 1) and regions (S, N); a batch's
    ``x`` is taken over (failed rows set to NaN in place, kept as the result's unknowns).

    A single solve takes a lean path (:func:`_build_single`): a handful of array operations, then
    plain floats.
    """
    if single:
        return _build_single(circuit, layout, params, x[0], regions[0], [c[0] for c in checks], str(status[0]),
                             model, method, iterations, alternatives)
    # Samples with no answer at all get NaN; an assumption that fails keeps its numbers. ``x`` is
    # the solver's own array, taken over here (no copy: at 100,000 samples each copy is 16 MB).
    failed = (status != "ok") & (status != "assumption-fails")
    x[failed] = np.nan
    n = layout.size
    x[:, n] = 0.0
    # Every quantity is computed for all elements at once, samples last (count, S), so that each
    # element's array is one contiguous row.
    xt = np.ascontiguousarray(x.T)
    node_v = xt[:layout.n_nodes]
    r_i = (xt[layout.r_a] - xt[layout.r_b]) * params.conductance.T
    vs_i = -xt[layout.vs_row]
    ib, ic = xt[layout.q_ib], xt[layout.q_ic]
    vbe = xt[layout.q_b] - xt[layout.q_e]
    vce = xt[layout.q_c] - xt[layout.q_e]
    with np.errstate(divide="ignore", invalid="ignore"):
        forced = np.where(ib != 0, ic / np.where(ib != 0, ib, 1.0), np.nan)
    power = layout.sign[:, None] * (vce * ic + vbe * ib)
    names, values, limits, margins, holds = checks
    if np.any(failed):
        names = np.where(failed[:, None, None], "", names)
        values, limits, margins = (np.where(failed[:, None, None], np.nan, a) for a in (values, limits, margins))
        holds = holds & ~failed[:, None, None]
    codes = np.where(failed[:, None], len(REGIONS), np.clip(regions, 0, 3))
    cols = lambda a: list(np.moveaxis(a, 1, 0))  # noqa: E731  (S, N, ...) -> N of (S, ...)
    v = {"gnd": np.zeros(x.shape[0])}
    v.update(zip(layout.nodes, node_v))
    currents = dict(zip((r.name for r in layout.resistors), r_i))
    currents.update(zip((src.name for src in layout.voltage_sources), vs_i))
    currents.update(zip((src.name for src in layout.current_sources), cols(params.current)))
    region = [_words(_REGION_WORDS, codes[:, j]) for j in range(layout.n_bjt)]
    per_q = zip(layout.bjts, region, ic, ib, ib + ic, vbe, vce, forced,
                power, cols(names), cols(values), cols(limits), cols(holds), cols(margins))
    transistors = {}
    for q, reg, c_, b_, e_, be_, ce_, f_, p_, nm, va, li, ho, ma in per_q:
        chk = tuple(Check(nm[:, c], va[:, c], li[:, c], ho[:, c], ma[:, c]) for c in range(2))
        transistors[q.name] = TransistorResult(
            name=q.name, polarity=q.device.polarity, region=reg,
            ic=c_, ib=b_, ie=e_, vbe=be_, vce=ce_, beta_forced=f_, power=p_, checks=chk)
    return OperatingPoint(
        model=model, v=v, i=currents, transistors=transistors, status=status.astype(str),
        temperature=params.temperature, method=method, iterations=int(iterations), batch_size=params.size,
        circuit=circuit, unknowns=x[:, :n], parameters=params)


#: Region words by code, "unsolved" last.
_REGION_WORDS = np.array(REGIONS + (UNSOLVED,))


def _words(table, codes):
    """``table[codes]``; where every code is the same, one read-only view of that one word (a
    batch of 100,000 would otherwise write 100,000 words per transistor)."""
    if codes.size and np.all(codes == codes.flat[0]):
        return np.broadcast_to(table[codes.flat[0]], codes.shape)
    return table.take(codes)


class _Names:
    """A layout's element names and unknown indices as plain lists, for single solves' results."""

    def __init__(self, layout):
        self.resistors = [r.name for r in layout.resistors]
        self.r_a, self.r_b = layout.r_a.tolist(), layout.r_b.tolist()
        self.voltage_sources = [src.name for src in layout.voltage_sources]
        self.vs_row = layout.vs_row.tolist()
        self.current_sources = [src.name for src in layout.current_sources]
        self.transistors = list(zip(layout.bjts, layout.sign.tolist(), layout.q_ib.tolist(), layout.q_ic.tolist(),
                                    layout.q_b.tolist(), layout.q_c.tolist(), layout.q_e.tolist()))


def _names(layout) -> _Names:
    """:class:`_Names` of ``layout`` (kept on it)."""
    names = getattr(layout, "_result_names", None)
    if names is None:
        names = layout._result_names = _Names(layout)
    return names


def _build_single(circuit, layout, params, x, regions, checks, status, model, method, iterations,
                  alternatives=()):
    """The OperatingPoint of one solve from unknowns ``x`` (size + 1,), regions (N,) and checks
    (each (N, 2)): a few array operations, then plain floats."""
    n, n_q = layout.size, layout.n_bjt
    failed = status not in ("ok", "assumption-fails")
    x = np.full(n + 1, np.nan) if failed else x.copy()
    x[n] = 0.0
    names_of = _names(layout)
    xl = x.tolist()
    v = {"gnd": 0.0}
    v.update(zip(layout.nodes, xl[:layout.n_nodes]))
    g = params.conductance[0].tolist()
    currents = {name: (xl[a] - xl[b]) * gk for name, a, b, gk in zip(names_of.resistors, names_of.r_a, names_of.r_b, g)}
    currents.update((name, -xl[row]) for name, row in zip(names_of.voltage_sources, names_of.vs_row))
    currents.update(zip(names_of.current_sources, params.current[0].tolist()))
    if failed:
        blank = [[math.nan, math.nan]] * n_q
        names, values, limits, holds, margins = [["", ""]] * n_q, blank, blank, [[False, False]] * n_q, blank
    else:
        names, values, limits, margins, holds = (a.tolist() if isinstance(a, np.ndarray) else a for a in checks)
    transistors = {}
    for j, (q, sg, ib_at, ic_at, b_at, c_at, e_at) in enumerate(names_of.transistors):
        b_, c_ = xl[ib_at], xl[ic_at]
        be_, ce_ = xl[b_at] - xl[e_at], xl[c_at] - xl[e_at]
        nm, va, li, ho, ma = names[j], values[j], limits[j], holds[j], margins[j]
        transistors[q.name] = TransistorResult(
            name=q.name, polarity=q.device.polarity, region=UNSOLVED if failed else REGIONS[regions[j]],
            ic=c_, ib=b_, ie=b_ + c_, vbe=be_, vce=ce_, beta_forced=c_ / b_ if b_ != 0 else math.nan,
            power=sg * (ce_ * c_ + be_ * b_),
            checks=(Check(nm[0], va[0], li[0], ho[0], ma[0]), Check(nm[1], va[1], li[1], ho[1], ma[1])))
    return OperatingPoint(
        model=model, v=v, i=currents, transistors=transistors, status=status,
        temperature=float(params.temperature[0]), alternatives=alternatives, method=method,
        iterations=int(iterations), batch_size=None, circuit=circuit, unknowns=x[:n].copy())

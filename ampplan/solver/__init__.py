"""The shared region solver: one entry point, two device models, single or batched.

:func:`solve` validates the options, compiles the circuit's layout, and dispatches to the
constant-drop region search (:mod:`.constant_drop`) or Ebers–Moll Newton (:mod:`.ebers_moll`).
Both return one :class:`OperatingPoint`. A single solve raises when it fails; in a batch a failed
sample gets a status and NaN fields and the others carry on.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping
from typing import Literal, get_args

import numpy as np

from ..circuit import Circuit
from ..validation import shown
from ..errors import (ConvergenceError, InvalidValueError, NoConsistentRegionError, UnknownModelError,
                      UnknownNameError)
from . import constant_drop as cd
from .assembly import layout_of, take_samples
from . import ebers_moll as em
from .result import REGIONS, UNSOLVED, Check, OperatingPoint, TransistorResult

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


def _solve_assumed(circuit, layout, params, single, active_edge, codes):
    """Constant-drop solve of one assumed assignment, checked but not searched."""
    problem = cd.RegionProblem(layout, params, active_edge)
    rows = np.arange(params.size)
    regions = np.broadcast_to(np.array(codes, dtype=np.int8), (params.size, layout.n_bjt)).copy()
    x, ok = problem.solve(rows, regions)
    good, _, checks = problem.consistent(rows, regions, x, ok)
    status = np.where(good, "ok", np.where(ok, "assumption-fails", "singular"))
    return _build(circuit, layout, params, x, regions, (problem.check_names(regions),) + checks, status,
                  "constant-drop", "assumed regions", 1, single)


# -- Ebers–Moll -----------------------------------------------------------------------------------
def _newton_start(layout, params):
    """Newton's start for given samples: the constant-drop answer with every transistor forward-active."""
    def start(rows):
        problem = cd.RegionProblem(layout, take_samples(params, rows))
        x0, _ = problem.solve(np.arange(rows.size), np.full((rows.size, layout.n_bjt), cd.ACTIVE, dtype=np.int8))
        return x0
    return start


def _solve_ebers_moll(circuit, layout, params, single, warm_start=True):
    x, converged, iterations, method = em.solve_newton(layout, params, _newton_start(layout, params),
                                                      warm_start=warm_start)
    if single and method[0] == "overdriven":
        raise ConvergenceError(
            "no physical operating point: a junction of "
            f"{', '.join(q.name for q in layout.bjts)} is driven beyond "
            f"{em.EXP_LIMIT:g}·n·V_T (about {em.EXP_LIMIT * 0.0257:.1f} V) forward, which only ideal sources "
            "can do; put a resistance in series with the source driving it",
            iterations=int(iterations[0]))
    if single and not converged[0]:
        raise ConvergenceError(
            f"Ebers–Moll Newton did not converge for the circuit with transistors "
            f"{', '.join(q.name for q in layout.bjts) or '(none)'}, after {int(iterations[0])} iterations "
            "including the conductance ladder and source stepping; check for a node held only through "
            "reverse-biased junctions, or use model='constant-drop'",
            iterations=int(iterations[0]))
    regions, checks = em.classify(layout, params, x)
    status = np.where(converged, "ok", "no-convergence")
    names, values, limits, margins = checks
    holds = np.ones(values.shape, dtype=bool)
    methods = sorted(set(method[converged].tolist())) or ["newton"]
    return _build(circuit, layout, params, x, regions, (names, values, limits, margins, holds), status,
                  "ebers-moll", " + ".join(methods), int(iterations.max(initial=0)), single)


# -- constant-drop --------------------------------------------------------------------------------
def _em_guess(layout, params, rows, warm_start=True):
    """Region guess from the Ebers–Moll solution (all forward-active where it fails)."""
    sub = take_samples(params, rows)
    x, converged, iterations, _ = em.solve_newton(layout, sub, _newton_start(layout, sub), warm_start=warm_start)
    regions, _ = em.classify(layout, sub, x)
    regions[~converged] = cd.ACTIVE
    return regions.astype(np.int8), int(iterations.max(initial=0))


def _solve_constant_drop(circuit, layout, params, single, active_edge, warm_start=True):
    problem = cd.RegionProblem(layout, params, active_edge)
    s_count, n_q = params.size, layout.n_bjt
    chosen = np.full((s_count, n_q), cd.ACTIVE, dtype=np.int8)
    found = np.zeros(s_count, dtype=bool)
    near_misses: dict[int, list] = {}
    alternatives = []
    iterations = 0
    final = None
    final_checks = None

    if single and n_q <= cd.ENUMERATION_LIMIT:
        method = "enumeration"
        every = cd.all_assignments(n_q)
        x, ok = problem.solve(np.zeros(len(every), dtype=np.intp), every)
        good, score, every_checks = problem.consistent(np.zeros(len(every), dtype=np.intp), every, x, ok)
        iterations = len(every)
        candidates = np.flatnonzero(good)
        if candidates.size == 1:
            pick = candidates[0]
        elif candidates.size > 1:
            # Several consistent assignments: the Ebers–Moll solution breaks the tie.
            guess, em_its = _em_guess(layout, params, np.array([0]))
            iterations += em_its
            method = "enumeration, nearest the Ebers–Moll guess"
            pick = candidates[np.argmin(cd.hamming(every[candidates], guess[0]))]
        else:
            pick = None
            near_misses[0] = _closest(problem, every, x, ok, score)
        if pick is not None:
            chosen[0], found[0] = every[pick], True
            alternatives = _distinct_others(x, candidates, pick, layout)
            alt_regions = every
            alt_x = x
            final = x[pick:pick + 1], ok[pick:pick + 1]
            final_checks = tuple(a[pick:pick + 1] for a in every_checks)
    else:
        method = "search from Ebers–Moll guess"
        rows = np.arange(s_count)
        guess, iterations = _em_guess(layout, params, rows, warm_start)
        x, ok = problem.solve(rows, guess)
        good, _, _ = problem.consistent(rows, guess, x, ok)
        chosen[good], found[good] = guess[good], True
        left = np.flatnonzero(~good)
        if left.size and n_q <= cd.ENUMERATION_LIMIT:
            # Every assignment of every sample whose guess failed, in one batched solve.
            every = cd.all_assignments(n_q)
            samples = np.repeat(left, len(every))
            cands = np.tile(every, (left.size, 1))
            x, ok = problem.solve(samples, cands)
            good_all, score, _ = problem.consistent(samples, cands, x, ok)
            iterations += len(samples)
            good_all = good_all.reshape(left.size, len(every))
            distance = np.where(good_all, cd.hamming(every[None, :, :], guess[left][:, None, :]), n_q + 1)
            best = np.argmin(distance, axis=1)   # first of the nearest, in enumeration order
            hit = good_all[np.arange(left.size), best]
            chosen[left[hit]], found[left[hit]] = every[best[hit]], True
            for k in np.flatnonzero(~hit):
                rows_k = slice(k * len(every), (k + 1) * len(every))
                near_misses[left[k]] = _closest(problem, every, x[rows_k], ok[rows_k], score[rows_k],
                                                sample=left[k])
        else:
            for u in left:
                # Beyond the enumeration limit each failed guess is searched on its own (rare).
                pick, misses, solves = _search_near(problem, u, guess[u])
                iterations += solves
                if pick is not None:
                    chosen[u], found[u] = pick, True
                else:
                    near_misses[u] = misses
        if single and found[0]:
            # Alternatives within two region changes (one beyond a dozen transistors).
            around = cd.neighbours(chosen[0], 2 if n_q <= 12 else 1)
            ax, aok = problem.solve(np.zeros(len(around), dtype=np.intp), around)
            agood, _, _ = problem.consistent(np.zeros(len(around), dtype=np.intp), around, ax, aok)
            alternatives = _distinct_others(ax, np.flatnonzero(agood), 0, layout)
            alt_regions, alt_x = around, ax

    if single and not found[0]:
        raise NoConsistentRegionError(_no_region_message(layout, near_misses[0]), closest=near_misses[0])

    rows = np.arange(s_count)
    x, ok = final if final is not None else problem.solve(rows, chosen)
    if final_checks is None:
        final_checks = problem.checks(rows, chosen, x)
    checks = (problem.check_names(chosen),) + final_checks
    found &= ok
    status = np.where(found, "ok", "no-consistent-region")
    result = _build(circuit, layout, params, x, chosen, checks, status, "constant-drop", method, iterations,
                    single)
    if single and alternatives:
        alts = []
        for k in alternatives:
            reg = alt_regions[k:k + 1]
            xk = alt_x[k:k + 1]
            checks = (problem.check_names(reg),) + problem.checks(np.array([0]), reg, xk)
            alts.append(_build(circuit, layout, params, xk, reg, checks,
                               np.array(["ok"]), "constant-drop", method, iterations, True))
        result = dataclasses.replace(result, alternatives=tuple(alts))
    return result


def _search_near(problem, u, guess):
    """Search near ``guess`` for one sample of more than ENUMERATION_LIMIT transistors: repair by
    failed checks, then every assignment within two region changes.

    Returns (assignment or None, near misses, linear solves spent)."""
    current = guess[None, :].copy()
    seen = {current.tobytes()}
    for _ in range(cd.REPAIR_ROUNDS):
        x, ok = problem.solve(np.array([u]), current)
        good, _, _ = problem.consistent(np.array([u]), current, x, ok)
        if good[0]:
            return current[0], [], len(seen)
        current = problem.repair(np.array([u]), current, x)
        if current.tobytes() in seen:
            break
        seen.add(current.tobytes())
    cands = cd.neighbours(guess, 2)
    samples = np.full(len(cands), u, dtype=np.intp)
    x, ok = problem.solve(samples, cands)
    good, score, _ = problem.consistent(samples, cands, x, ok)
    idx = np.flatnonzero(good)
    if idx.size:
        return cands[idx[np.argmin(cd.hamming(cands[idx], guess))]], [], len(cands)
    return None, _closest(problem, cands, x, ok, score, sample=u), len(cands)


def _closest(problem, cands, x, ok, score, sample=0, count=3):
    """The near misses: (assignment, failed checks) for the best-scoring assignments."""
    names = [q.name for q in problem.layout.bjts]
    order = np.argsort(score, kind="stable")[:count]
    out = []
    samples = np.full(len(order), sample, dtype=np.intp)
    values, limits, margins, holds = problem.checks(samples, cands[order], x[order])
    chk_names = problem.check_names(cands[order])
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
def _build(circuit, layout, params, x, regions, checks, status, model, method, iterations, single):
    """Assemble an OperatingPoint from unknowns ``x`` (S, size + 1) and regions (S, N)."""
    # Samples with no answer at all get NaN; an assumption that fails keeps its numbers.
    failed = (status != "ok") & (status != "assumption-fails")
    x = x.copy()
    x[failed] = np.nan
    n = layout.size
    x[:, n] = 0.0
    # Every quantity is computed for all elements at once, shape (S, count); a single solve then
    # turns columns into floats.
    node_v = x[:, :layout.n_nodes]
    r_i = (x[:, layout.r_a] - x[:, layout.r_b]) * params.conductance
    vs_i = -x[:, layout.vs_row]
    ib, ic = x[:, layout.q_ib], x[:, layout.q_ic]
    vbe = x[:, layout.q_b] - x[:, layout.q_e]
    vce = x[:, layout.q_c] - x[:, layout.q_e]
    with np.errstate(divide="ignore", invalid="ignore"):
        forced = np.where(ib != 0, ic / np.where(ib != 0, ib, 1.0), np.nan)
    power = layout.sign * (vce * ic + vbe * ib)
    names, values, limits, margins, holds = checks
    names = np.where(failed[:, None, None], "", names)
    values, limits, margins = (np.where(failed[:, None, None], np.nan, a) for a in (values, limits, margins))
    holds = holds & ~failed[:, None, None]
    region = np.where(failed[:, None], UNSOLVED, np.array(REGIONS)[np.clip(regions, 0, 3)])
    if single:
        cols = lambda a: a[0].tolist()  # noqa: E731
    else:
        cols = lambda a: list(np.moveaxis(a, 1, 0))  # noqa: E731  (S, N, ...) -> N of (S, ...)
    v = {"gnd": 0.0 if single else np.zeros(x.shape[0])}
    v.update(zip(layout.nodes, cols(node_v)))
    currents = dict(zip((r.name for r in layout.resistors), cols(r_i)))
    currents.update(zip((src.name for src in layout.voltage_sources), cols(vs_i)))
    currents.update(zip((src.name for src in layout.current_sources), cols(params.current)))
    per_q = zip(layout.bjts, cols(region), cols(ic), cols(ib), cols(ib + ic), cols(vbe), cols(vce), cols(forced),
                cols(power), cols(names), cols(values), cols(limits), cols(holds), cols(margins))
    transistors = {}
    for q, reg, c_, b_, e_, be_, ce_, f_, p_, nm, va, li, ho, ma in per_q:
        if single:
            chk = tuple(Check(str(nm[c]), va[c], li[c], bool(ho[c]), ma[c]) for c in range(2))
        else:
            chk = tuple(Check(nm[:, c], va[:, c], li[:, c], ho[:, c], ma[:, c]) for c in range(2))
        transistors[q.name] = TransistorResult(
            name=q.name, polarity=q.device.polarity, region=str(reg) if single else reg,
            ic=c_, ib=b_, ie=e_, vbe=be_, vce=ce_, beta_forced=f_, power=p_, checks=chk)
    return OperatingPoint(
        model=model, v=v, i=currents, transistors=transistors,
        status=str(status[0]) if single else status.astype(str),
        temperature=float(params.temperature[0]) if single else params.temperature,
        method=method, iterations=int(iterations), batch_size=None if single else params.size,
        circuit=circuit, unknowns=x[0, :n].copy() if single else x[:, :n].copy())

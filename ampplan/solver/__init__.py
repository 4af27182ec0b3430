"""The shared region solver: one entry point, two device models, single or batched.

:func:`solve` validates the options, compiles the circuit's layout, and dispatches to the
constant-drop region search (:mod:`.constant_drop`) or Ebers–Moll Newton (:mod:`.ebers_moll`).
Both return one :class:`OperatingPoint`. A single solve raises when it fails; in a batch a failed
sample gets a status and NaN fields and the others carry on.
"""

from __future__ import annotations

from typing import Literal, get_args

import numpy as np

from ..errors import ConvergenceError, NoConsistentRegionError, UnknownModelError
from . import constant_drop as cd
from . import ebers_moll as em
from .result import REGIONS, UNSOLVED, Check, OperatingPoint, TransistorResult

__all__ = ["solve", "Model", "MODELS", "ActiveEdge", "ACTIVE_EDGES", "OperatingPoint", "TransistorResult",
           "Check", "REGIONS"]

Model = Literal["constant-drop", "ebers-moll"]
MODELS: tuple[str, ...] = get_args(Model)
ActiveEdge = Literal["vce-sat", "vcb-zero"]
ACTIVE_EDGES: tuple[str, ...] = get_args(ActiveEdge)


def solve(circuit, model: str = "constant-drop", temperature: float = 25.0, batch: dict | None = None,
          active_edge: str = "vce-sat") -> OperatingPoint:
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
    if model not in MODELS:
        raise UnknownModelError(f"unknown model {model!r}; choose one of {', '.join(MODELS)}")
    if active_edge not in ACTIVE_EDGES:
        raise UnknownModelError(f"unknown active_edge {active_edge!r}; choose one of {', '.join(ACTIVE_EDGES)}")
    layout = circuit.layout()
    params = layout.parameters(temperature=temperature, batch=batch)
    single = batch is None
    if model == "ebers-moll":
        return _solve_ebers_moll(circuit, layout, params, single)
    return _solve_constant_drop(circuit, layout, params, single, active_edge)


# -- Ebers–Moll -----------------------------------------------------------------------------------
def _solve_ebers_moll(circuit, layout, params, single):
    x, converged, iterations, method = em.solve_newton(layout, params)
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
def _em_guess(layout, params, rows):
    """Region guess from the Ebers–Moll solution (all forward-active where it fails)."""
    from .ebers_moll import _take
    sub = _take(params, rows)
    x, converged, iterations, _ = em.solve_newton(layout, sub)
    regions, _ = em.classify(layout, sub, x)
    regions[~converged] = cd.ACTIVE
    return regions.astype(np.int8), int(iterations.max(initial=0))


def _solve_constant_drop(circuit, layout, params, single, active_edge):
    problem = cd.RegionProblem(layout, params, active_edge)
    s_count, n_q = params.size, layout.n_bjt
    chosen = np.full((s_count, n_q), cd.ACTIVE, dtype=np.int8)
    found = np.zeros(s_count, dtype=bool)
    near_misses: dict[int, list] = {}
    alternatives = []
    iterations = 0

    if single and n_q <= cd.ENUMERATION_LIMIT:
        method = "enumeration"
        every = cd.all_assignments(n_q)
        x, ok = problem.solve(np.zeros(len(every), dtype=np.intp), every)
        good, score = problem.consistent(np.zeros(len(every), dtype=np.intp), every, x, ok)
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
    else:
        method = "search from Ebers–Moll guess"
        rows = np.arange(s_count)
        guess, iterations = _em_guess(layout, params, rows)
        x, ok = problem.solve(rows, guess)
        good, _ = problem.consistent(rows, guess, x, ok)
        chosen[good], found[good] = guess[good], True
        for u in np.flatnonzero(~good):
            # The rare path: samples whose guess failed are searched one by one.
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
            agood, _ = problem.consistent(np.zeros(len(around), dtype=np.intp), around, ax, aok)
            alternatives = _distinct_others(ax, np.flatnonzero(agood), 0, layout)
            alt_regions, alt_x = around, ax

    if single and not found[0]:
        raise NoConsistentRegionError(_no_region_message(layout, near_misses[0]), closest=near_misses[0])

    rows = np.arange(s_count)
    x, ok = problem.solve(rows, chosen)
    checks = problem.checks(rows, chosen, x)
    found &= ok
    status = np.where(found, "ok", "no-consistent-region")
    result = _build(circuit, layout, params, x, chosen, checks, status, "constant-drop", method, iterations,
                    single)
    if single and alternatives:
        alts = []
        for k in alternatives:
            reg = alt_regions[k:k + 1]
            xk = alt_x[k:k + 1]
            alts.append(_build(circuit, layout, params, xk, reg, problem.checks(np.array([0]), reg, xk),
                               np.array(["ok"]), "constant-drop", method, iterations, True))
        result = _replace(result, alternatives=tuple(alts))
    return result


def _search_near(problem, u, guess):
    """Search one sample's assignments near ``guess``. Returns (assignment or None, misses, solves)."""
    n_q = guess.shape[0]
    if n_q <= cd.ENUMERATION_LIMIT:
        cands = cd.all_assignments(n_q)
    else:
        current = guess[None, :].copy()
        seen = {current.tobytes()}
        for _ in range(cd.REPAIR_ROUNDS):
            x, ok = problem.solve(np.array([u]), current)
            good, _ = problem.consistent(np.array([u]), current, x, ok)
            if good[0]:
                return current[0], [], len(seen)
            current = problem.repair(np.array([u]), current, x)
            if current.tobytes() in seen:
                break
            seen.add(current.tobytes())
        cands = cd.neighbours(guess, 2)
    samples = np.full(len(cands), u, dtype=np.intp)
    x, ok = problem.solve(samples, cands)
    good, score = problem.consistent(samples, cands, x, ok)
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
    chk_names, values, limits, margins, holds = problem.checks(samples, cands[order], x[order])
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


def _replace(result, **changes):
    import dataclasses
    return dataclasses.replace(result, **changes)


# -- results --------------------------------------------------------------------------------------
def _build(circuit, layout, params, x, regions, checks, status, model, method, iterations, single):
    """Assemble an OperatingPoint from unknowns ``x`` (S, size + 1) and regions (S, N)."""
    failed = status != "ok"
    x = x.copy()
    x[failed] = np.nan
    n = layout.size
    x[:, n] = 0.0
    take = (lambda a: float(a[0])) if single else (lambda a: a)
    v = {"gnd": take(np.zeros(x.shape[0]))}
    for k, node in enumerate(layout.nodes):
        v[node] = take(x[:, k])
    currents = {}
    for k, r in enumerate(layout.resistors):
        currents[r.name] = take((x[:, layout.r_a[k]] - x[:, layout.r_b[k]]) * params.conductance[:, k])
    for k, src in enumerate(layout.voltage_sources):
        currents[src.name] = take(-x[:, layout.vs_row[k]])
    for k, src in enumerate(layout.current_sources):
        currents[src.name] = take(params.current[:, k])
    names, values, limits, margins, holds = checks
    transistors = {}
    for j, q in enumerate(layout.bjts):
        ib, ic = x[:, layout.q_ib[j]], x[:, layout.q_ic[j]]
        vbe = x[:, layout.q_b[j]] - x[:, layout.q_e[j]]
        vce = x[:, layout.q_c[j]] - x[:, layout.q_e[j]]
        with np.errstate(divide="ignore", invalid="ignore"):
            forced = np.where(ib != 0, ic / np.where(ib != 0, ib, 1.0), np.nan)
        region = np.where(failed, UNSOLVED, np.array(REGIONS)[np.clip(regions[:, j], 0, 3)])
        chk = []
        for c in range(2):
            nm = np.where(failed, "", names[:, j, c]).astype(str)
            chk.append(Check(
                name=str(nm[0]) if single else nm,
                value=take(np.where(failed, np.nan, values[:, j, c])),
                limit=take(np.where(failed, np.nan, limits[:, j, c])),
                holds=bool(holds[0, j, c] and not failed[0]) if single else (holds[:, j, c] & ~failed),
                margin=take(np.where(failed, np.nan, margins[:, j, c]))))
        transistors[q.name] = TransistorResult(
            name=q.name, polarity=q.device.polarity, region=str(region[0]) if single else region,
            ic=take(ic), ib=take(ib), ie=take(ib + ic), vbe=take(vbe), vce=take(vce),
            beta_forced=take(forced), power=take(q.device.sign * (vce * ic + vbe * ib)), checks=tuple(chk))
    return OperatingPoint(
        model=model, v=v, i=currents, transistors=transistors,
        status=str(status[0]) if single else status.astype(str),
        temperature=take(params.temperature), method=method, iterations=int(iterations),
        batch_size=None if single else params.size, circuit=circuit,
        unknowns=x[0, :n].copy() if single else x[:, :n].copy())

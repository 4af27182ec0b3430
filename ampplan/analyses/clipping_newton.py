"""Ebers–Moll clipping by Newton's method straight to each edge of forward-active.

For each sample and each direction of the source EMF, the first excursion at which a transistor
leaves forward-active is a zero of one of the forward-active checks (V_BE at its conduction
voltage: toward cutoff; V_CE at V_CE(sat): toward saturation) along the quasi-static path of the
held circuit (capacitors held at their Q-point voltages).

1. **Which check.** At the Q-point every check has a margin and, from the midband drive solve
   (the tangent dx/dEMF of the held circuit there), a slope. Saturation's margin moves with the
   drive almost linearly: its first-order edge is margin / slope. Toward cutoff the junction
   voltage does not move linearly but the current does: with I ∝ exp(V_BE/(n·V_T)) falling
   linearly, V_BE reaches the conduction voltage (a hundred nanoamperes) at about
   n·V_T·(1 − exp(−margin/(n·V_T))) / slope. The check with the nearest first-order edge is
   pinned.
2. **Where.** Newton's method on the held circuit bordered by that check held at its limit
   (:mod:`ampplan.solver.edges`), from the Q-point: a few iterations to the exact edge, no
   bracketing. Where that does not converge (the Q-point's tangent can fling a transistor biased
   at a few microamperes far off), the circuit is first solved at the check's first-order edge
   with the excursion held there, and the bordered Newton starts again from that answer.
3. **Verified.** At the answer every other check must still hold; one that does not went first,
   and the check whose margin the straight line between the two points puts to zero earliest is
   pinned next, its answer required to lie nearer than where it was seen crossed. The pinned
   check must cross there (its slope points out of forward-active), and no check may dip below
   its limit in between: a cubic through each margin's values and slopes at both ends (in volts,
   and toward cutoff in the current's terms too) must stay above zero.
4. **The next check.** A pinned check whose edge Newton cannot find from either start, or finds
   on the wrong side or beyond where another check was seen past its limit, has no edge before
   the first one (typically another transistor leaves first and stops driving it): the untried
   check with the next nearest first-order edge is pinned.

A bracket that runs out of checks, or whose answer fails the slope or dip test (a margin that
does not move monotonically), is handed back to the caller, which
searches it on a grid (:func:`ampplan.analyses.clipping._searched`). The edge found is exact to
Newton's tolerance (a part in 10^9 of the excursion or better), far inside the grid search's
resolution.
"""

from __future__ import annotations

import numpy as np

from ..solver.assembly import Parameters, layout_of
from ..solver.ebers_moll import conduction_voltage
from ..solver.edges import EdgeProblem

__all__ = ["newton_edges"]

#: Volts: a margin below minus this counts as crossed (rounding at the edge itself is not).
MARGIN_TOLERANCE = 1e-12
#: Interior points of [0, edge] where the cubic through each margin is checked.
_T = np.linspace(0.0, 1.0, 9)[1:-1]


def _held_map(compiled, held):
    """How the held circuit's values and unknowns are read from the plan circuit's (kept per plan)."""
    cached = compiled.cache.get("held-map")
    if cached is not None:
        return cached
    plan_layout = layout_of(compiled.circuit)
    lay = layout_of(held)
    by = lambda items: {e.name: k for k, e in enumerate(items)}  # noqa: E731
    resistors, sources, currents = by(plan_layout.resistors), by(plan_layout.voltage_sources), \
        by(plan_layout.current_sources)
    transistors = by(plan_layout.bjts)
    ground = plan_layout.size        # the zero column appended to the plan's unknowns
    node_at = lambda name: plan_layout.index[name]  # noqa: E731
    capacitor = {}
    for k, src in enumerate(lay.voltage_sources):
        if src.name not in sources:
            cap = compiled.circuit.element(src.name)
            capacitor[k] = (node_at(cap.a), node_at(cap.b))
    unknown = np.full(lay.size + 1, ground, dtype=np.intp)
    for name, i in lay.index.items():
        unknown[i] = node_at(name)
    for k, src in enumerate(lay.voltage_sources):
        if src.name in sources:
            unknown[lay.vs_row[k]] = plan_layout.vs_row[sources[src.name]]
    q_cols = np.array([transistors[q.name] for q in lay.bjts], dtype=np.intp)
    unknown[lay.q_ib] = plan_layout.q_ib[q_cols]
    unknown[lay.q_ic] = plan_layout.q_ic[q_cols]
    cached = compiled.cache["held-map"] = dict(
        layout=lay,
        resistors=np.array([resistors[r.name] for r in lay.resistors], dtype=np.intp),
        sources=[sources.get(s.name, -1) for s in lay.voltage_sources],
        capacitor=capacitor,
        currents=np.array([currents[c.name] for c in lay.current_sources], dtype=np.intp),
        transistors=q_cols,
        unknown=unknown,
        source=next(k for k, s in enumerate(lay.voltage_sources) if s.name == compiled.source),
    )
    return cached


def newton_edges(compiled, held, op, params, drive, system, todo, span, reach_factor):
    """First edges of samples ``todo`` in both directions by Newton (module docstring).

    Parameters
    ----------
    compiled : CompiledPlan
    held : Circuit
        The plan circuit with its capacitors as voltage sources of the same names.
    op : OperatingPoint
        The Q-point (Ebers–Moll), S samples.
    params : Parameters
        The values ``op`` was solved with.
    drive : ndarray, shape (S, size)
        The midband incremental solve driven by 1 V of source EMF (unknowns of ``system``).
    system : IncrementalSystem
    todo : ndarray of int, shape (T,)
        Samples to search (every transistor forward-active at the Q-point).
    span : ndarray, shape (S,)
        Largest rail magnitude, volts.
    reach_factor : float
        Nothing beyond ``reach_factor``·span is reported (``inf`` there).

    Returns
    -------
    amount : ndarray, shape (T, 2)
        Volts (positive, then negative direction); ``inf`` beyond the reach; NaN where not found.
    transistor : ndarray of int, shape (T, 2)
        Index of the transistor that leaves (layout order of the plan circuit), -1 where not found.
    check : ndarray of int, shape (T, 2)
        0: toward cutoff, 1: toward saturation, -1 where not found.
    found : ndarray of bool, shape (T, 2)
    """
    hm = _held_map(compiled, held)
    lay = hm["layout"]
    t_count, n_q = todo.size, lay.n_bjt
    # The held circuit's values and its Q-point, read from the plan's (no validation again: they
    # are the plan's own, already checked).
    q_cols = hm["transistors"]
    x_plan = np.concatenate([np.atleast_2d(op.unknowns)[todo], np.zeros((t_count, 1))], axis=1)
    voltage = np.empty((t_count, lay.n_vs))
    for k, col in enumerate(hm["sources"]):
        if col >= 0:
            voltage[:, k] = params.voltage[todo, col]
        else:
            a, b = hm["capacitor"][k]
            voltage[:, k] = x_plan[:, a] - x_plan[:, b]
    held_params = Parameters(
        conductance=params.conductance[todo][:, hm["resistors"]], voltage=voltage,
        current=params.current[todo][:, hm["currents"]],
        device={k: v[todo][:, q_cols] for k, v in params.device.items()},
        temperature=params.temperature[todo],
        at_temperature={k: v[todo][:, q_cols] for k, v in params.at_temperature.items()})
    x_q = x_plan[:, hm["unknown"]]
    x_q[:, lay.size] = 0.0
    problem = EdgeProblem(lay, held_params, sparse=True)

    # Margins at the Q-point and their slopes per volt of EMF (the drive solve), NPN frame.
    sign = lay.sign
    on = conduction_voltage(problem.dev, problem.v_t)
    sat = problem.dev["vce_sat"]
    nvt = problem.nvt
    d_ext = np.concatenate([drive[todo], np.zeros((t_count, 1))], axis=1)            # ground last
    name_of = lay.nodes + ("gnd",)
    col = lambda i: np.array([system.index[name_of[min(j, lay.n_nodes)]] for j in i], dtype=np.intp)  # noqa: E731
    b_col, c_col, e_col = col(lay.q_b), col(lay.q_c), col(lay.q_e)
    slope0 = np.stack([sign * (d_ext[:, b_col] - d_ext[:, e_col]), sign * (d_ext[:, c_col] - d_ext[:, e_col])],
                      axis=-1)                                                         # (T, N, 2)
    vbe_q, vbc_q = problem.junctions(x_q)
    margin0 = np.stack([vbe_q - on, vbe_q - vbc_q - sat], axis=-1)                    # (T, N, 2)

    # Brackets: sample-major, positive direction first.
    sample = np.repeat(np.arange(t_count), 2)
    direction = np.tile([1.0, -1.0], t_count)
    reach = reach_factor * span[todo][sample]
    m0, s0 = margin0[sample], direction[:, None, None] * slope0[sample]               # (K, N, 2)
    n_vt = nvt[sample]                                                                 # (K, N)
    with np.errstate(all="ignore"):
        first_order = np.where(s0 < 0, np.stack([n_vt * -np.expm1(-m0[..., 0] / n_vt), m0[..., 1]], axis=-1) / -s0,
                               np.inf)
    flat = first_order.reshape(sample.size, -1)
    pinned = np.argmin(flat, axis=1)
    pending = np.flatnonzero(np.isfinite(flat[np.arange(sample.size), pinned]))
    amount = np.full(sample.size, np.nan)
    who = np.full(sample.size, -1)
    which = np.full(sample.size, -1)
    start = x_q[sample]
    tried = np.zeros(flat.shape, dtype=bool)     # checks whose own edge was not the answer
    retried = np.zeros(sample.size, dtype=bool)  # the current pin has had its second start
    ceiling = np.full(sample.size, np.inf)       # a check was seen past its limit this far out

    def next_candidate(brackets):
        """Pin each bracket's untried check with the nearest first-order edge; those with none left
        are dropped (returned are the brackets that go on)."""
        order = np.where(tried[brackets], np.inf, flat[brackets])
        best = np.argmin(order, axis=1)
        left = np.isfinite(order[np.arange(brackets.size), best])
        brackets, best = brackets[left], best[left]
        pinned[brackets], retried[brackets] = best, False
        start[brackets] = x_q[sample[brackets]]
        return brackets

    def first_past(brackets, margins):
        """Per bracket, the check past its limit in ``margins`` (K', N, 2) that the straight line
        from the Q-point puts there first (flat index), or -1 where none is past."""
        if brackets.size == 0:
            return np.zeros(0, dtype=np.intp)
        past = margins < -MARGIN_TOLERANCE
        with np.errstate(all="ignore"):
            t = np.where(past, m0[brackets] / (m0[brackets] - margins), np.inf).reshape(brackets.size, -1)
        return np.where(past.any(axis=(1, 2)), np.argmin(t, axis=1), -1)

    def repin(brackets, check, at):
        """Pin ``check`` (flat index) next, below excursion ``at``, from the Q-point."""
        tried[brackets, pinned[brackets]] = True
        pinned[brackets], retried[brackets] = check, False
        ceiling[brackets] = np.abs(at)
        start[brackets] = x_q[sample[brackets]]

    for _ in range(4 * n_q + 2):
        if pending.size == 0:
            break
        q, c = np.divmod(pinned[pending], 2)
        rows = sample[pending]
        edge = problem.solve(rows, start[pending], hm["source"], q, c)
        d = direction[pending]
        k_count = pending.size
        at = np.arange(k_count)
        with np.errstate(invalid="ignore"):
            ok = edge.converged & (d * edge.delta > 0) & (d * edge.delta < ceiling[pending])
        vbe, vbc = problem.junctions(np.where(ok[:, None], edge.x, x_q[rows]))
        m1 = np.stack([vbe - on[rows], vbe - vbc - sat[rows]], axis=-1)               # (K', N, 2)
        tan = edge.tangent
        gnd = tan.shape[1] - 1
        node = lambda i: np.where(i < lay.n_nodes, i, gnd)  # noqa: E731
        s1 = d[:, None, None] * np.stack([sign * (tan[:, node(lay.q_b)] - tan[:, node(lay.q_e)]),
                                          sign * (tan[:, node(lay.q_c)] - tan[:, node(lay.q_e)])], axis=-1)
        is_pinned = np.zeros((k_count, n_q, 2), dtype=bool)
        is_pinned[at, q, c] = True
        m1_others = np.where(is_pinned | ~ok[:, None, None], np.inf, m1)
        # A check past its limit at the answer went first: it is pinned next.
        went_first = np.full(k_count, -1)
        went_first[ok] = first_past(pending[ok], m1_others[ok])
        again = went_first >= 0
        repin(pending[again], went_first[again], edge.delta[again])
        # Where nothing went first, the pinned check must leave there, and nothing may dip below
        # its limit on the way.
        accept = (ok & ~again & (s1[at, q, c] < 0)
                  & ~_dips(m0[pending], s0[pending], m1, s1, np.abs(edge.delta), n_vt[pending]))
        i = pending[accept]
        size = np.abs(edge.delta[accept])
        amount[i] = np.where(size <= reach[i], size, np.inf)
        who[i], which[i] = q_cols[q[accept]], c[accept]
        # Newton that did not converge from the Q-point gets a second start: the circuit solved
        # at the pinned check's first-order edge (where the Q-point's tangent no longer reaches).
        # A check already past its limit there went first, and is pinned instead.
        lost = pending[~edge.converged & ~retried[pending]]
        retry = lost[np.isfinite(flat[lost, pinned[lost]])]
        if retry.size:
            at_edge = direction[retry] * flat[retry, pinned[retry]]
            settled = problem.solve(sample[retry], x_q[sample[retry]], hm["source"], np.zeros(retry.size, np.intp),
                                    np.ones(retry.size, np.intp), hold=at_edge)
            retry, at_edge, x_s = retry[settled.converged], at_edge[settled.converged], settled.x[settled.converged]
            retried[retry] = True
            vbe, vbc = problem.junctions(x_s)
            m_s = np.stack([vbe - on[sample[retry]], vbe - vbc - sat[sample[retry]]], axis=-1)
            # The pinned check itself past its limit there: its edge lies between, found from here.
            other = first_past(retry, m_s)
            other = np.where(other == pinned[retry], -1, other)
            repin(retry[other >= 0], other[other >= 0], at_edge[other >= 0])
            start[retry[other < 0]] = x_s[other < 0]
        # A pinned check whose edge Newton cannot find, or finds on the wrong side or beyond where
        # another check was seen past its limit, has none before the first edge: the next check.
        failed = ~edge.converged | (edge.converged & ~ok)
        given_up = pending[failed & ~np.isin(pending, retry)]
        tried[given_up, pinned[given_up]] = True
        pending = np.concatenate([pending[again], retry, next_candidate(given_up)])
    found = np.isfinite(amount) | np.isinf(amount)
    found &= who >= 0
    return (amount.reshape(t_count, 2), who.reshape(t_count, 2), which.reshape(t_count, 2),
            found.reshape(t_count, 2))


def _dips(m0, s0, m1, s1, size, n_vt):
    """True per bracket where the cubic through some check's margins and slopes at both ends dips
    below zero inside (0, edge). Slopes are per volt along the bracket's direction; a check toward
    cutoff dips only when it does in volts and in terms of its current, exp(margin/(n·V_T)) − 1."""
    t = _T[None, None, None, :]
    h00, h10 = 2 * t ** 3 - 3 * t ** 2 + 1, t ** 3 - 2 * t ** 2 + t
    h01, h11 = -2 * t ** 3 + 3 * t ** 2, t ** 3 - t ** 2
    length = size[:, None, None, None]

    def cubic(f0, p0, f1, p1):
        return np.min(h00 * f0[..., None] + h10 * length * p0[..., None] + h01 * f1[..., None]
                      + h11 * length * p1[..., None], axis=-1)

    with np.errstate(all="ignore"):
        volts = cubic(m0, s0, m1, s1) < -MARGIN_TOLERANCE
        n = n_vt[..., None]
        g0, g1 = np.expm1(m0 / n), np.expm1(m1 / n)
        current = cubic(g0, (g0 + 1) * s0 / n, g1, (g1 + 1) * s1 / n) < 0
    dip = volts & np.stack([current[..., 0], np.ones_like(current[..., 1])], axis=-1)
    return np.any(dip, axis=(1, 2))

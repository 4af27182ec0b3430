"""Ebers–Moll device equations and the batched, damped Newton solver built on them.

Equations (transport form with forward Early effect; Gray & Meyer, *Analysis and Design of
Analog Integrated Circuits*, bipolar large-signal model, from memory), in the NPN frame where
v_be = V(B) - V(E) and v_bc = V(B) - V(C) (a PNP uses V(E) - V(B) and V(C) - V(B) and reverses
every terminal current):

    e_be = exp(v_be / (n·V_T)),   e_bc = exp(v_bc / (n·V_T)),   V_T = k·T/q
    i_t  = I_S · (e_be - e_bc) · (1 - v_bc / V_A)
    i_c  = i_t - (I_S / β_R) · (e_bc - 1)
    i_b  = (I_S / β_F) · (e_be - 1) + (I_S / β_R) · (e_bc - 1)
    i_e  = i_c + i_b

Newton's method iterates on the node voltages and voltage-source currents only (the reduced
system of :meth:`~ampplan.solver.assembly.Layout.assemble`): each transistor's currents, linearised
about the last iterate (its companion model), are stamped straight into the node rows. I_B and I_C
are then recovered from the same linearisation, so the returned unknowns have the full layout of
both models (node voltages, source currents, I_B and I_C per transistor) and Kirchhoff's law
holds to rounding at every iterate. Each junction voltage is limited between iterates
(logarithmic steps above the critical voltage where the exponential turns steep), and exponents
above 80 continue linearly so nothing overflows.

When plain Newton fails, two fallbacks follow in order: a conductance ladder (a conductance from
every node to ground, 1 mS stepped down tenfold to zero) and source stepping (every source
scaled 0 → 1 in twenty steps). Every loop is bounded.

An answer counts only when it meets the equations it claims to solve: after Newton, every
converged sample is checked afresh (:func:`residuals`) for Kirchhoff's current law at every node
and for the device equations at every transistor, each to :data:`RESIDUAL_TOLERANCE` of the
currents involved. A sample that fails either check is not converged.

Regions are classified from the solution by :func:`classify`, with the rule and the check table
of :mod:`.regions`: a junction conducts when it injects at least
:data:`~ampplan.solver.regions.CONDUCTION_CURRENT` at that device's I_S and temperature.
"""

from __future__ import annotations

import numpy as np

from dataclasses import dataclass, fields

from ..devices import thermal_voltage
from . import regions as rg
from .assembly import Scatter, take_samples
from .linear import solve_batch
from .sparse import Elimination

#: Exponent beyond which exp() continues as a straight line (keeps far iterates finite).
EXP_LIMIT = 80.0
MAX_ITERATIONS = 150
LADDER_ITERATIONS = 60
#: Samples per block of the warm-started attempt.
BLOCK = 2048
#: A batch's Newton steps solve their linear systems through the planned sparse elimination
#: (:mod:`.sparse`) up to this many unknowns; beyond it, and in single solves, LAPACK.
SPARSE_ORDER = 400
#: ... and for batches of at least this many samples: below it, the elimination's fixed cost per
#: step outweighs LAPACK's (the clipping search of one plan solves batches of a few dozen). Newton
#: answers agree to its tolerance either way; a warm-started batch never matched its single solves
#: bit for bit anyway.
SPARSE_MIN_BATCH = 256
#: Iterations allowed from a solved neighbour before the sample restarts from its own guess.
WARM_ITERATIONS = 40
LADDER = (1e-3, 1e-4, 1e-5, 1e-6, 1e-7, 1e-8, 1e-9, 1e-10, 1e-11, 1e-12, 0.0)
SOURCE_STEPS = 20
RELATIVE_TOLERANCE = 1e-9
VOLTAGE_TOLERANCE = 1e-9    # volts
CURRENT_TOLERANCE = 1e-15   # amperes
#: Amperes: the device-versus-linearised current test is relative above this (nA currents included).
FIT_TOLERANCE = 1e-21
#: Relative: an iterate whose device currents match the linearised ones to this fraction is
#: converged. A hundredth of RELATIVE_TOLERANCE: the answer's own error is of the order of this
#: mismatch, and at RELATIVE_TOLERANCE itself two starts (a batch's solved neighbour, a single
#: solve's own guess) could stop 1e-9 apart; near a solution Newton's mismatch falls quadratically,
#: so the tighter test rarely costs an iteration.
FIT_RELATIVE = 1e-11
#: Relative tolerance of the final check of every answer: Kirchhoff's current law at each node, to
#: this fraction of the sum of the magnitudes of the currents meeting there, and each transistor's
#: I_B and I_C against the device equations, to this fraction of the larger of the two values
#: (each plus CURRENT_TOLERANCE). A hundred times Newton's own 1e-9: room for rounding, none for an
#: answer that does not solve the equations.
RESIDUAL_TOLERANCE = 1e-7


def _exp(arg):
    """exp(arg) and its derivative, continued linearly above EXP_LIMIT."""
    clipped = np.minimum(arg, EXP_LIMIT)
    e = np.exp(clipped)
    return e * (1.0 + np.maximum(arg - EXP_LIMIT, 0.0)), e


def device_currents(v_be, v_bc, dev, v_t):
    """Ebers–Moll terminal currents and their derivatives, NPN frame.

    Parameters
    ----------
    v_be, v_bc : ndarray, shape (S, N)
        Junction voltages, volts.
    dev : dict of str -> ndarray (S, N)
        Device parameters at the solve temperature.
    v_t : ndarray, shape (S, 1)
        Thermal voltage, volts.

    Returns
    -------
    i_b, i_c : ndarray (S, N)
        Amperes, textbook signs.
    d : dict of ndarray (S, N)
        ``"b_be"``, ``"b_bc"``, ``"c_be"``, ``"c_bc"``: ∂i_b/∂v_be ... siemens.
    """
    nvt = dev["emission_coefficient"] * v_t
    i_s = dev["saturation_current"]
    e_be, de_be = _exp(v_be / nvt)
    e_bc, de_bc = _exp(v_bc / nvt)
    de_be = de_be / nvt
    de_bc = de_bc / nvt
    inv_va = 1.0 / dev["early_voltage"]          # 0 for an infinite Early voltage
    q = 1.0 - v_bc * inv_va
    ib_f, ib_r = i_s / dev["beta"], i_s / dev["beta_reverse"]
    i_t = i_s * (e_be - e_bc) * q
    i_c = i_t - ib_r * (e_bc - 1.0)
    i_b = ib_f * (e_be - 1.0) + ib_r * (e_bc - 1.0)
    dt_be = i_s * de_be * q
    dt_bc = -i_s * de_bc * q - i_s * (e_be - e_bc) * inv_va
    d = {"b_be": ib_f * de_be, "b_bc": ib_r * de_bc, "c_be": dt_be, "c_bc": dt_bc - ib_r * de_bc}
    return i_b, i_c, d


def _limit_junction(v_new, v_old, nvt, v_crit, two_nvt=None):
    """Limit a junction-voltage step where the exponential is steep (logarithmic step).

    Returns ``v_new`` itself when no step is limited. ``two_nvt`` is 2·``nvt``, when the caller
    keeps it.
    """
    steep = (v_new > v_crit) & (np.abs(v_new - v_old) > (2.0 * nvt if two_nvt is None else two_nvt))
    if not steep.any():
        return v_new
    with np.errstate(invalid="ignore", divide="ignore"):
        arg = 1.0 + (v_new - v_old) / nvt
        from_on = np.where(arg > 0, v_old + nvt * np.log(np.where(arg > 0, arg, 1.0)), v_crit)
        from_off = nvt * np.log(np.where(v_new > 0, v_new / nvt, 1.0))
    limited = np.where(v_old > 0, from_on, from_off)
    return np.where(steep, limited, v_new)


def _device_rows(vj, k):
    """:func:`device_currents` for the sparse Newton path: samples last, both junctions in one array.

    The same arithmetic as :func:`device_currents`, operation for operation (so the same values
    to the last bit), in about half as many numpy passes: the exponentials of both junctions are
    one call, and the constants that depend on the sample alone come precomputed.

    Parameters
    ----------
    vj : ndarray, shape (2N, S)
        v_be of every transistor, then v_bc, volts (NPN frame).
    k : dict of str -> ndarray
        ``"ib_fr"`` (2N, S): I_S/β_F, then I_S/β_R; ``"nvt"``, ``"i_s"`` and ``"inv_va"`` (N, S):
        n·V_T, I_S and 1/V_A.

    Returns
    -------
    ndarray, shape (11N, S)
        Rows of N: i_b, i_c (amperes), ∂i_b/∂v_be, ∂i_b/∂v_bc, ∂i_c/∂v_be, ∂i_c/∂v_bc (siemens),
        then five blocks left for the caller (the sums of :func:`companion_terms`).
    """
    n, s_count = vj.shape[0] // 2, vj.shape[1]
    out = np.empty((11 * n, s_count))
    nvt = k["nvt"]
    arg = vj.reshape(2, n, s_count) / nvt           # both junctions over one n·V_T
    if arg.size == 0 or arg.max() <= EXP_LIMIT:
        # exp() needs no linear continuation: _exp would return this value twice (times 1.0).
        e = np.exp(arg)
        de = e / nvt
    else:
        e, de = _exp(arg)
        de /= nvt
    e, de = e.reshape(2 * n, s_count), de.reshape(2 * n, s_count)
    e_be, e_bc = e[:n], e[n:]
    q = 1.0 - vj[n:] * k["inv_va"]
    ise = k["i_s"] * (e_be - e_bc)
    i_b, i_c, b_bc, c_bc = out[:n], out[n:2 * n], out[3 * n:4 * n], out[5 * n:6 * n]
    np.multiply(ise, q, out=i_c)                              # i_t
    leak = k["ib_fr"] * (e - 1.0)                             # (I_S/β_F)(e_be - 1), (I_S/β_R)(e_bc - 1)
    i_c -= leak[n:]
    np.add(leak[:n], leak[n:], out=i_b)
    np.multiply(k["ib_fr"], de, out=out[2 * n:4 * n])         # ∂i_b/∂v_be, ∂i_b/∂v_bc
    c = out[4 * n:6 * n].reshape(2, n, s_count)
    np.multiply(k["i_s"], de.reshape(2, n, s_count), out=c)  # I_S·e'_be, I_S·e'_bc
    c *= q                                                    # ∂i_t/∂v_be; minus the first term of ∂i_t/∂v_bc
    np.negative(c_bc, out=c_bc)                               # (-I_S·e'_bc)·q is exactly -(I_S·e'_bc·q)
    c_bc -= ise * k["inv_va"]
    c_bc -= b_bc
    return out


def _onto_plan(scatter, rows, offset=0):
    """:func:`_onto`'s form of a :class:`~ampplan.solver.assembly.Scatter` into ``rows`` rows:
    its passes, each split by weight into terms added, terms subtracted and (rare) others,
    sources shifted by ``offset``, and the rows its first pass leaves alone. A weight of ±1 adds
    or subtracts the value itself: the same sum as multiplying by the weight, without a
    broadcast product (slow where the samples are the contiguous axis)."""
    passes = []
    for position, source, weight in scatter.passes:
        groups = []
        for chosen, how in ((weight == 1.0, np.add), (weight == -1.0, np.subtract)):
            if chosen.any():
                groups.append((position[chosen], source[chosen] + offset, how, None))
        other = (weight != 1.0) & (weight != -1.0)
        if other.any():
            groups.append((position[other], source[other] + offset, np.add, weight[other][:, None]))
        passes.append(groups)
    first = np.concatenate([g[0] for g in passes[0]]) if passes else np.zeros(0, dtype=np.intp)
    return passes, np.setdiff1d(np.arange(rows), first)


def _onto(plan, values, base):
    """``base`` (P, S) plus the terms of a scatter (:func:`_onto_plan`) read from ``values``, as a
    new array: the sums of ``Scatter.last(values, base.copy())``, value for value, without the
    copy (the first pass writes its positions outright)."""
    passes, rest = plan
    out = np.empty(base.shape)
    out[rest] = base[rest]
    for k, groups in enumerate(passes):
        for position, source, how, weight in groups:
            term = values[source] if weight is None else values[source] * weight
            out[position] = how(base[position] if k == 0 else out[position], term)
    return out


def _sorted_onto(plan):
    """A :func:`_onto` plan whose first pass is one block of adds and one of subtractions, for a
    base kept with its rows in the order ``order`` (those blocks, then the rest): the first pass
    then reads and writes row ranges instead of gathered rows. Returns (order, the plan of the
    other passes in the sorted rows, the first pass's sources added and subtracted), or None where
    a weight is not ±1."""
    passes, rest = plan
    if not passes:
        return None
    groups = {how: (position, source) for position, source, how, weight in passes[0] if weight is None}
    if len(groups) != len(passes[0]) or any(w is not None for g in passes[1:] for *_, w in g):
        return None
    empty = (np.zeros(0, dtype=np.intp),) * 2
    (add_at, add_from), (sub_at, sub_from) = groups.get(np.add, empty), groups.get(np.subtract, empty)
    order = np.concatenate([add_at, sub_at, rest])
    where = np.argsort(order)
    later = [[(where[p], src, how, None) for p, src, how, _ in g] for g in passes[1:]]
    return order, where, later, add_from, sub_from


class NewtonProblem:
    """The Ebers–Moll equations of one layout for S samples, ready for Newton iterations."""

    def __init__(self, layout, params, sparse: bool = False):
        self.layout = layout
        self.params = params
        self.sparse = sparse and layout.n_nodes + layout.n_vs <= SPARSE_ORDER and params.size >= SPARSE_MIN_BATCH
        self.dev = params.at_temperature
        self.v_t = thermal_voltage(params.temperature[:, None])
        nvt = self.dev["emission_coefficient"] * self.v_t
        self.nvt = nvt
        self.v_crit = nvt * np.log(nvt / (np.sqrt(2.0) * self.dev["saturation_current"]))
        n = layout.size
        self.abs_tol = np.concatenate([np.full(layout.n_nodes, VOLTAGE_TOLERANCE),
                                       np.full(n - layout.n_nodes, CURRENT_TOLERANCE)])
        # The reduced system: node voltages and source currents, then ground as the spare index.
        nu = layout.n_nodes + layout.n_vs
        reduced = lambda i: nu if i == n else int(i)  # noqa: E731
        self.terminals = [(reduced(b), reduced(c), reduced(e), float(sg)) for b, c, e, sg in
                          zip(layout.q_b, layout.q_c, layout.q_e, layout.sign)]

    def junctions(self, x, rows=slice(None)):
        """NPN-frame v_be and v_bc, shape (S', N), from unknowns x of shape (S', size + 1)."""
        lay = self.layout
        s = lay.sign
        return s * (x[:, lay.q_b] - x[:, lay.q_e]), s * (x[:, lay.q_b] - x[:, lay.q_c])

    def _companion_currents(self, new, j_b, j_c, d, dev, v_t):
        """Write the companion model's I_B and I_C at ``new``'s junction voltages into ``new`` (dense
        rows, samples first) and compare them with the device's own currents there.

        Returns (fits: bool per sample, the device's I_B, I_C and derivatives at those voltages).
        """
        lay = self.layout
        vbe_new, vbc_new = self.junctions(new)
        lin_b = j_b + d["b_be"] * vbe_new + d["b_bc"] * vbc_new
        lin_c = j_c + d["c_be"] * vbe_new + d["c_bc"] * vbc_new
        new[:, lay.q_ib], new[:, lay.q_ic] = lin_b, lin_c
        true_b, true_c, d_true = device_currents(vbe_new, vbc_new, dev, v_t)
        fits = np.all((np.abs(true_b - lin_b) <= FIT_RELATIVE * np.abs(lin_b) + FIT_TOLERANCE)
                      & (np.abs(true_c - lin_c) <= FIT_RELATIVE * np.abs(lin_c) + FIT_TOLERANCE), axis=1)
        return fits, true_b, true_c, d_true

    def newton(self, rows, x, v_old, ladder_conductance=0.0, scale=1.0, max_iterations=MAX_ITERATIONS):
        """Newton iterations on the samples ``rows`` (index array), from iterate ``x``.

        The iterations run on the reduced system of node voltages and source currents: each
        transistor's linearised currents are stamped straight into the node rows (its companion
        model), which halves the system a batched LU factorises. I_B and I_C are recovered from the
        same linearisation, so Kirchhoff's law holds at every iterate.

        Parameters
        ----------
        rows : ndarray of int, shape (S',)
        x : ndarray, shape (S', size + 1)
            Starting unknowns; the last column is ground and stays 0.
        v_old : tuple of ndarray (S', N)
            Junction voltages the previous step used (for limiting).

        Returns
        -------
        x, v_old, converged (bool (S',)), iterations (int (S',))
        """
        if self.sparse and rows.size >= SPARSE_MIN_BATCH:
            return self._newton_sparse(rows, x, v_old, ladder_conductance, scale, max_iterations)
        lay = self.layout
        every = rows.size == self.params.size and np.array_equal(rows, np.arange(rows.size))
        pick = (lambda a: a) if every else (lambda a: a[rows])  # noqa: E731  (no copies for a full set)
        params = take_samples(self.params, rows, device=False) if not every else self.params
        nu = lay.n_nodes + lay.n_vs
        base, rhs0 = lay.assemble(params, source_scale=scale, ladder_conductance=ladder_conductance, reduced=True)
        # Drop ground's spare row and column once, so each iteration's matrix is contiguous.
        base, rhs0 = np.ascontiguousarray(base[:, :nu, :nu]), np.ascontiguousarray(rhs0[:, :nu])
        dev = {k: pick(self.dev[k]) for k in _MODEL_PARAMETERS}
        v_t, nvt, v_crit = pick(self.v_t), pick(self.nvt), pick(self.v_crit)
        abs_tol = self.abs_tol[:nu]
        converged = np.zeros(len(rows), dtype=bool)
        iterations = np.zeros(len(rows), dtype=int)
        active = np.arange(len(rows))
        vbe_old, vbc_old = v_old
        x = x.copy()
        gathered = False
        ahead = None     # device currents at the latest iterate, reused when it is not limited
        for _ in range(max_iterations):
            if active.size == 0:
                break
            if not gathered:
                # Gather the still-active samples once per change of the active set.
                gathered = True
                if active.size == len(rows):
                    d_act = dev
                    vt_act, nvt_act, crit_act = v_t, nvt, v_crit
                    base_act, rhs_act = base, rhs0
                else:
                    d_act = {k: v[active] for k, v in dev.items()}
                    vt_act, nvt_act, crit_act = v_t[active], nvt[active], v_crit[active]
                    base_act, rhs_act = base[active], rhs0[active]
            xa = x[active]
            vbe_raw, vbc_raw = self.junctions(xa)
            vbe = _limit_junction(vbe_raw, vbe_old[active], nvt_act, crit_act)
            vbc = _limit_junction(vbc_raw, vbc_old[active], nvt_act, crit_act)
            was_limited = np.any((vbe != vbe_raw) | (vbc != vbc_raw), axis=1)
            if ahead is not None and not was_limited.any():
                i_b, i_c, d = ahead          # evaluated at exactly these voltages last time round
            else:
                i_b, i_c, d = device_currents(vbe, vbc, d_act, vt_act)
            # Companion model: i = j + g_be·v_be + g_bc·v_bc, j being the part not proportional to v.
            j_b = i_b - d["b_be"] * vbe - d["b_bc"] * vbc
            j_c = i_c - d["c_be"] * vbe - d["c_bc"] * vbc
            matrix, rhs = base_act.copy(), rhs_act.copy()
            self._stamp_companion(matrix, rhs, d, j_b, j_c)
            u, ok = solve_batch(matrix, rhs, check_residual=False)
            step = np.abs(u - xa[:, :nu])
            small = np.all(step <= RELATIVE_TOLERANCE * np.maximum(np.abs(u), np.abs(xa[:, :nu])) + abs_tol,
                           axis=1)
            iterations[active] += 1
            new = xa.copy()
            new[:, :nu] = u
            # Converged when the step is negligible, or when the device's own currents at the new
            # voltages already match the linearised ones (which Kirchhoff's law holds exactly):
            # the second test spares the confirming iteration.
            fits, true_b, true_c, d_new = self._companion_currents(new, j_b, j_c, d, d_act, vt_act)
            done = ok & ((small & ~was_limited) | fits)
            x[active] = np.where(ok[:, None], new, xa)
            vbe_old[active], vbc_old[active] = vbe, vbc
            converged[active[done]] = True
            # A singular or non-finite iterate ends that sample's attempt; a fallback takes over.
            still = ~done & ok
            ahead = (true_b, true_c, d_new)
            if not np.all(still):
                active = active[still]
                gathered = False
                ahead = (true_b[still], true_c[still], {k: v[still] for k, v in d_new.items()})
        return x, (vbe_old, vbc_old), converged, iterations

    def _newton_sparse(self, rows, x, v_old, ladder_conductance, scale, max_iterations):
        """:meth:`newton` through the planned sparse elimination, with every array held samples
        last ((unknowns, S'), (N, S')): the elimination reads and writes that layout, so nothing is
        transposed per iteration, and every row operation runs over contiguous samples. The
        arithmetic is that of :meth:`newton`'s dense path, value for value; the working arrays
        hold the still-active samples only, written back when that set shrinks.

        Fewer numpy passes per iteration than the dense path (each pass over a few thousand
        samples costs about as much in call overhead as in arithmetic): the two junctions of every
        transistor are one array of 2N rows (v_be, then v_bc), limited and exponentiated in one
        go (:func:`_device_rows`); the per-sample constants of the equations (I_S/β_F, 1/V_A ...)
        are formed once per call, not per iteration; each iteration writes the new iterate into
        the working array in place, and the junction voltages and device currents it evaluates
        there are the next iteration's (the iterate they came from is the one it starts at).
        """
        lay = self.layout
        # A run of consecutive samples (a block of the warm-started attempt) is read through a
        # slice: views, no copies.
        run = rows.size > 0 and rows[-1] - rows[0] == rows.size - 1 and bool(np.all(np.diff(rows) == 1))
        chosen = slice(int(rows[0]), int(rows[-1]) + 1) if run else rows
        pick = (lambda a: a[chosen])  # noqa: E731
        params = take_samples(self.params, chosen, device=False)
        nu = lay.n_nodes + lay.n_vs
        positions, elimination, conductances, currents = self._sparse_plan(nu)
        entries, right = lay.entries(params, positions, reduced=True, source_scale=scale,
                                     ladder_conductance=ladder_conductance)

        def dense(local):
            sub = take_samples(params, local, device=False)
            b, r = lay.assemble(sub, source_scale=scale, ladder_conductance=ladder_conductance, reduced=True)
            return b[:, :nu, :nu], r[:, :nu]

        n_q = lay.n_bjt
        abs_tol = self.abs_tol[:nu, None]
        # Both junctions of every transistor as one array of 2N rows: v_be = s·(V_B - V_E), then
        # v_bc = s·(V_B - V_C). A sign of +1 multiplies exactly, so an all-NPN circuit skips it.
        take_b, take_o = np.concatenate([lay.q_b, lay.q_b]), np.concatenate([lay.q_e, lay.q_c])
        sign2 = None if np.all(lay.sign == 1.0) else np.concatenate([lay.sign, lay.sign])[:, None]

        def junctions(xs):
            v = xs[take_b] - xs[take_o]
            return v if sign2 is None else np.multiply(v, sign2, out=v)

        # The companion conductances and their sums (companion_terms) sit in rows 2N onwards of
        # _device_rows' array: the plan's scatter reads them there.
        g_passes, j_passes = _onto_plan(conductances, positions.size, offset=2 * n_q), _onto_plan(currents, nu)
        sorted_g = _sorted_onto(g_passes)
        if sorted_g is not None:
            entries = entries[sorted_g[0]]      # kept in the order of the first pass's adds
        q_ibc = np.concatenate([lay.q_ib, lay.q_ic])    # rows of I_B, then I_C, in the unknowns
        x_all = np.ascontiguousarray(x.T)                   # (size + 1, S'), every sample
        vj_all = np.concatenate([v_old[0].T, v_old[1].T])   # (2N, S'): junction voltages last used
        dev = {k: pick(self.dev[k]).T for k in _MODEL_PARAMETERS}
        nvt = pick(self.nvt).T
        i_s = dev["saturation_current"]
        # Every per-sample array of the active samples as rows of one array, so that dropping the
        # samples that are done is one gather: the iterate, the junction voltages last used, the
        # linear part (entries, right-hand side), and the constants of the device equations of
        # device_currents, each formed as it forms them: n·V_T, 2·n·V_T and V_crit (both
        # junctions of a transistor share them), I_S/β_F and I_S/β_R, I_S, 1/V_A.
        parts = [("x", x_all), ("vj", vj_all), ("entries", entries), ("right", right),
                 ("nvt", nvt), ("two_nvt", 2.0 * nvt), ("v_crit", pick(self.v_crit).T),
                 ("ib_fr", np.concatenate([i_s / dev["beta"], i_s / dev["beta_reverse"]])),
                 ("i_s", i_s), ("inv_va", 1.0 / dev["early_voltage"])]
        at, spans = 0, {}
        for name, a in parts:
            spans[name] = slice(at, at + a.shape[0])
            at += a.shape[0]
        state = np.empty((at, len(rows)))
        for name, a in parts:
            state[spans[name]] = a

        def views(state):
            return {name: state[span] for name, span in spans.items()}

        w = views(state)
        converged = np.zeros(len(rows), dtype=bool)
        iterations = np.zeros(len(rows), dtype=int)
        active = np.arange(len(rows))
        dense_act = dense
        ahead = None     # _device_rows at the latest iterate, and its junction voltages
        for _ in range(max_iterations):
            if active.size == 0:
                break
            xa = w["x"]
            if ahead is None:
                vj_raw, ev = junctions(xa), None
            else:
                vj_raw, ev = ahead
            s_act = active.size
            pair = vj_raw.reshape(2, n_q, s_act)       # both junctions over one n·V_T and V_crit
            limited = _limit_junction(pair, w["vj"].reshape(2, n_q, s_act), w["nvt"], w["v_crit"], w["two_nvt"])
            vj = vj_raw if limited is pair else limited.reshape(2 * n_q, s_act)
            was_limited = None
            if vj is not vj_raw:
                was_limited = np.any(vj != vj_raw, axis=0)
                if not was_limited.any():
                    was_limited = None
            if ev is None or was_limited is not None:
                ev = _device_rows(vj, w)
            g = ev[2 * n_q:6 * n_q]
            # Companion model: i = j + g_be·v_be + g_bc·v_bc, j being the part not proportional
            # to v; (2, N, S') = j_b, then j_c.
            prod = g.reshape(2, 2 * n_q, s_act) * vj
            j = ev[:2 * n_q].reshape(2, n_q, s_act) - prod[:, :n_q]
            j -= prod[:, n_q:]
            # The sums companion_terms adds after the four conductances.
            g4 = g.reshape(2, 2, n_q, s_act)
            np.add(g4[:, 0], g4[:, 1], out=ev[6 * n_q:8 * n_q].reshape(2, n_q, s_act))
            np.add(ev[6 * n_q:7 * n_q], ev[7 * n_q:8 * n_q], out=ev[8 * n_q:9 * n_q])
            np.add(g[:2 * n_q], g[2 * n_q:], out=ev[9 * n_q:])
            rhs = _onto(j_passes, j.reshape(2 * n_q, s_act), w["right"])
            if sorted_g is None:
                values = _onto(g_passes, ev, w["entries"])
                u, ok = elimination.solve(values, rhs, check_residual=False)
            else:
                # The linear part is kept in sorted_g's row order: its first pass is two row
                # ranges; the elimination reads the rows back in its own order (take=).
                _, where, later, add_from, sub_from = sorted_g
                base = w["entries"]
                values = np.empty(base.shape)
                n_add, n_sub = add_from.size, sub_from.size
                np.add(base[:n_add], ev[add_from], out=values[:n_add])
                np.subtract(base[n_add:n_add + n_sub], ev[sub_from], out=values[n_add:n_add + n_sub])
                values[n_add + n_sub:] = base[n_add + n_sub:]
                for groups in later:
                    for position, source, how, _ in groups:
                        values[position] = how(values[position], ev[source])
                u, ok = elimination.solve(values, rhs, check_residual=False, take=where)
            bad = np.flatnonzero(~ok)
            if bad.size:
                matrix, b = dense_act(bad)
                matrix, b = matrix.copy(), b.copy()
                d = {k: g[q * n_q:(q + 1) * n_q, bad].T for q, k in enumerate(_COMPANION)}
                self._stamp_companion(matrix, b, d, j[0][:, bad].T, j[1][:, bad].T)
                solved, ok[bad] = solve_batch(matrix, b, check_residual=False)
                u[:, bad] = solved.T
                bad = bad[~ok[bad]]
            xn = xa[:nu]
            step = np.abs(u - xn)
            small = np.all(step <= RELATIVE_TOLERANCE * np.maximum(np.abs(u), np.abs(xn)) + abs_tol, axis=0)
            iterations[active] += 1
            kept = xa[:, bad] if bad.size else None      # a failed step leaves its sample as it was
            # The new iterate in place; I_B and I_C from the companion model at its voltages.
            xn[...] = u
            vj_new = junctions(xa)
            prod = g.reshape(2, 2 * n_q, s_act) * vj_new
            lin = j + prod[:, :n_q]
            lin += prod[:, n_q:]
            lin = lin.reshape(2 * n_q, s_act)
            xa[q_ibc] = lin
            # Converged as in newton(): a negligible step, or device currents that already match.
            ev_new = _device_rows(vj_new, w)
            fits = np.all(np.abs(ev_new[:2 * n_q] - lin) <= FIT_RELATIVE * np.abs(lin) + FIT_TOLERANCE, axis=0)
            done = (small | fits) if was_limited is None else ((small & ~was_limited) | fits)
            if kept is not None:
                done &= ok
                xa[:, bad] = kept
            w["vj"][...] = vj
            converged[active[done]] = True
            # A singular or non-finite iterate ends that sample's attempt; a fallback takes over.
            still = ~done & ok
            if still.all():
                ahead = (vj_new, ev_new)
            else:
                x_all[:, active], vj_all[:, active] = w["x"], w["vj"]
                keep = np.flatnonzero(still)
                active = active[keep]
                state = state.take(keep, axis=1)
                w = views(state)
                ev_next = np.empty((11 * n_q, keep.size))
                np.take(ev_new[:6 * n_q], keep, axis=1, out=ev_next[:6 * n_q])   # the rest is rewritten
                ahead = (vj_new.take(keep, axis=1), ev_next)
                dense_act = (lambda local, chosen=active: dense(chosen[local]))
        x_all[:, active], vj_all[:, active] = w["x"], w["vj"]
        return np.ascontiguousarray(x_all.T), (vj_all[:n_q].T, vj_all[n_q:].T), converged, iterations

    def _sparse_plan(self, m):
        """The sparse elimination of the reduced Newton system (m unknowns), planned once per
        layout: the pattern is every entry the assembly or a companion model can touch, plus the
        node diagonal (the conductance ladder), and the pivots are chosen on the circuit's own
        values with every transistor's companion at a typical forward-active bias (1 mA, β = 100,
        V_A = 100 V)."""
        lay = self.layout
        plan = lay.region_plans.get("ebers-moll")
        if plan is not None:
            return plan
        base, _ = lay.assemble(lay.parameters(), reduced=True)
        matrix = np.ascontiguousarray(base[:, :m, :m])
        n_q = lay.n_bjt
        g_m = 1e-3 / 0.025
        typical = {"b_be": np.full((1, n_q), g_m / 100.0), "b_bc": np.full((1, n_q), 1e-12),
                   "c_be": np.full((1, n_q), g_m), "c_bc": np.full((1, n_q), -1e-5)}
        self._stamp_companion(matrix, np.zeros((1, m)), typical, np.zeros((1, n_q)), np.zeros((1, n_q)))
        # Kept across layouts too (a plan compiled again, chunk by chunk, has a new layout), by
        # everything the plan is made of.
        shared = (matrix.tobytes(), np.array(self.terminals).tobytes(), lay.n_nodes)
        plan = _PLANS.get(shared)
        if plan is None:
            pattern = matrix[0] != 0.0
            nodes = np.arange(lay.n_nodes)
            pattern[nodes, nodes] = True
            for b, c, e, _ in self.terminals:
                touched = [t for t in (b, c, e) if t < m]
                pattern[np.ix_(touched, touched)] = True
            rows, cols = np.nonzero(pattern)
            slot = np.full(m * m, -1, dtype=np.intp)
            slot[rows * m + cols] = np.arange(rows.size)
            # The companion models as terms over the nine sums of companion_terms (9N values)
            # into the entries, and over (j_b, j_c) (2N) into the right-hand side, as
            # _stamp_companion adds them: one term per entry and transistor.
            g_pos, g_src, g_wt, j_pos, j_src, j_wt = [], [], [], [], [], []
            for k, (b, c, e, sg) in enumerate(self.terminals):
                b_be, b_bc, c_be, c_bc, sum_b, sum_c, sum_all, sum_be, sum_bc = (q * n_q + k for q in range(9))
                for node, weights, j, j_sign in ((b, ((b, sum_b, 1.0), (e, b_be, -1.0), (c, b_bc, -1.0)), [k], 1.0),
                                                 (c, ((b, sum_c, 1.0), (e, c_be, -1.0), (c, c_bc, -1.0)), [n_q + k],
                                                  1.0),
                                                 (e, ((b, sum_all, -1.0), (e, sum_be, 1.0), (c, sum_bc, 1.0)),
                                                  [k, n_q + k], -1.0)):
                    if node >= m:
                        continue
                    for col, source, weight in weights:
                        if col < m:
                            g_pos.append(slot[node * m + col])
                            g_src.append(source)
                            g_wt.append(weight)
                    j_pos += [node] * len(j)
                    j_src += j
                    j_wt += [-j_sign * sg] * len(j)
            plan = (rows * m + cols, Elimination(m, rows, cols, matrix[0, rows, cols]),
                    Scatter(g_pos, g_src, g_wt), Scatter(j_pos, j_src, j_wt))
            _PLANS[shared] = plan
            while len(_PLANS) > _PLANS_KEPT:
                _PLANS.pop(next(iter(_PLANS)))
        lay.region_plans["ebers-moll"] = plan
        return plan

    def _stamp_companion(self, matrix, rhs, d, j_b, j_c):
        """Add each transistor's companion model to the node rows of the reduced system.

        Currents leaving a node into the transistor: s·I_B at the base, s·I_C at the collector,
        -s·(I_B + I_C) at the emitter, with v_be = s·(V_B - V_E) and v_bc = s·(V_B - V_C); the
        two factors of s cancel in the conductances. One transistor at a time (a loop over the
        N transistors, never over samples), so that transistors sharing a node add up.
        """
        ground = matrix.shape[1]     # ground has no row or column here: its terms are skipped
        for k, (b, c, e, s) in enumerate(self.terminals):
            gb_be, gb_bc = d["b_be"][:, k], d["b_bc"][:, k]
            gc_be, gc_bc = d["c_be"][:, k], d["c_bc"][:, k]
            for node, sign, g_be, g_bc, j in ((b, 1.0, gb_be, gb_bc, j_b[:, k]), (c, 1.0, gc_be, gc_bc, j_c[:, k]),
                                              (e, -1.0, gb_be + gc_be, gb_bc + gc_bc, j_b[:, k] + j_c[:, k])):
                if node == ground:
                    continue
                if b != ground:
                    matrix[:, node, b] += sign * (g_be + g_bc)
                if e != ground:
                    matrix[:, node, e] -= sign * g_be
                if c != ground:
                    matrix[:, node, c] -= sign * g_bc
                rhs[:, node] -= sign * s * j


#: Sparse Newton plans by circuit, oldest first; at most _PLANS_KEPT are kept.
_PLANS: dict = {}
_PLANS_KEPT = 64

#: The companion conductances of each transistor (the first four rows of companion_terms).
_COMPANION = ("b_be", "b_bc", "c_be", "c_bc")


def companion_terms(d):
    """What the companion models add to the sparse plan's entries, samples last.

    Parameters
    ----------
    d : dict of str -> ndarray (N, S)
        The conductances of :func:`device_currents` (``"b_be"`` ...), siemens.

    Returns
    -------
    ndarray, shape (9N, S)
        Rows of N: ∂i_b/∂v_be, ∂i_b/∂v_bc, ∂i_c/∂v_be, ∂i_c/∂v_bc, then the sums each entry
        takes (base row: the two ∂i_b; collector row: the two ∂i_c; emitter row: all four, the
        two ∂/∂v_be, the two ∂/∂v_bc), so that every entry of a transistor is one term.
    """
    sum_b = d["b_be"] + d["b_bc"]
    sum_c = d["c_be"] + d["c_bc"]
    return np.concatenate([d["b_be"], d["b_bc"], d["c_be"], d["c_bc"], sum_b, sum_c, sum_b + sum_c,
                           d["b_be"] + d["c_be"], d["b_bc"] + d["c_bc"]])

#: The device parameters the Ebers–Moll equations read.
_MODEL_PARAMETERS = ("beta", "beta_reverse", "saturation_current", "early_voltage", "emission_coefficient")


def solve_newton(layout, params, start=None, warm_start: bool = True, sparse: bool = False):
    """Solve the Ebers–Moll equations for every sample.

    Attempts, each on the samples the previous ones left unsolved:

    1. in a batch, one sample from its own start, then every other sample from that sample's
       answer (a solved neighbour is a far better start than any guess: a few iterations each);
       a sample that lands in other regions than that neighbour is solved from its own start
       too, so that a circuit with several operating points answers as a single solve would;
    2. plain Newton from the sample's own start ``x0``;
    3. the conductance ladder; 4. source stepping.

    Parameters
    ----------
    layout : ampplan.solver.assembly.Layout
    params : ampplan.solver.assembly.Parameters
        S samples.
    start : callable, optional
        ``start(rows) -> ndarray (len(rows), size + 1)``: starting unknowns of those samples (the
        constant-drop all-forward-active answer is a good one); rows with NaN start from zero.
        Called only for the samples that need it. None: start from zero.
    warm_start : bool
        Allow attempt 1.
    sparse : bool
        Solve Newton's linear systems through the planned sparse elimination (batches); False
        solves each densely (single solves).

    Returns
    -------
    x : ndarray, shape (S, size + 1)
        Unknowns (NaN rows where every attempt failed); last column is ground.
    converged : ndarray of bool, shape (S,)
    iterations : ndarray of int, shape (S,)
    method : ndarray of int8, shape (S,)
        Codes into :data:`METHODS`: ``"newton"``, ``"conductance ladder"`` or ``"source
        stepping"``; ``"overdriven"`` for a sample whose only answer holds a junction beyond
        EXP_LIMIT·n·V_T, and ``"residual too large"`` for one whose answer misses Kirchhoff's law
        or the device equations by more than :data:`RESIDUAL_TOLERANCE` (neither converged);
        ``""`` where every attempt failed.
    rejected : ndarray, shape (S, size + 1)
        The answer an ``"overdriven"`` or ``"residual too large"`` sample was refused for (NaN
        elsewhere), for the message that explains it.
    regions : ndarray of int8, shape (S, N), or None
        The regions :func:`classify` gives ``x``, where the warm start classified them (so that
        the caller does not classify twice); None otherwise.
    """
    problem = NewtonProblem(layout, params, sparse)
    s_count = params.size
    size = layout.size + 1

    def own_start(rows):
        """Each sample's own start and the junction voltages its limiting begins from."""
        x0 = np.zeros((rows.size, size)) if start is None else start(rows)
        x0 = np.where(np.all(np.isfinite(x0), axis=1, keepdims=True), x0, 0.0)
        # Junction voltages "used last" start no higher than the constant-drop on-voltages, so a
        # start with a junction driven hard forward is approached in limited steps.
        vbe0, vbc0 = problem.junctions(x0)
        return x0, (np.minimum(vbe0, problem.dev["vbe_on"][rows]), np.minimum(vbc0, problem.dev["vbc_on"][rows]))

    x = np.full((s_count, size), np.nan)
    converged = np.zeros(s_count, dtype=bool)
    iterations = np.zeros(s_count, dtype=int)
    method = np.zeros(s_count, dtype=np.int8)     # codes into METHODS: words for 10,000 samples cost

    def attempt(rows, start, v_start, label, **options):
        """Run Newton on ``rows``; record the ones that converge; return those that did not."""
        xs, _, ok, its = problem.newton(rows, start, v_start, **options)
        iterations[rows] += its
        x[rows[ok]] = xs[ok]
        converged[rows[ok]] = True
        method[rows[ok]] = METHODS.index(label)
        return rows[~ok]

    left = np.arange(s_count)
    regions = None
    if warm_start and s_count > 1:
        first = left[:1]
        if attempt(first, *own_start(first), "newton").size == 0:
            # Blocks of BLOCK samples: the same vectorised iterations, with working arrays small
            # enough to stay in cache (about a quarter faster than one pass over 10,000 samples).
            unsolved = []
            for at in range(1, s_count, BLOCK):
                rows = left[at:at + BLOCK]
                warm = np.repeat(x[first], rows.size, axis=0)
                unsolved.append(attempt(rows, warm, problem.junctions(warm), "newton",
                                        max_iterations=WARM_ITERATIONS))
            left = np.concatenate(unsolved)
            # A circuit with several operating points (a latch, a trigger) can lead a warm start
            # to another one than the sample's own start finds. Where the regions differ from the
            # solved neighbour's, the sample is solved from its own start as well, and that answer
            # (the one a single solve gives) is kept when it converges.
            regions, _ = classify(layout, params, x, checks=False)
            classified = converged.copy()       # rows whose regions hold for their answer
            moved = np.flatnonzero(converged & np.any(regions != regions[first], axis=1))
            if moved.size:
                xs, _, ok, its = problem.newton(moved, *own_start(moved))
                iterations[moved] += its
                x[moved[ok]] = xs[ok]
                classified[moved[ok]] = False
    left = left[~converged[left]]
    if left.size:
        # Blocks of BLOCK samples, as above: working arrays that stay in cache.
        left = np.concatenate([attempt(rows, *own_start(rows), "newton")
                               for rows in np.array_split(left, -(-left.size // BLOCK))])
    for label, rungs in (("conductance ladder", [{"ladder_conductance": g} for g in LADDER]),
                         ("source stepping", [{"scale": a} for a in np.linspace(0.0, 1.0, SOURCE_STEPS + 1)])):
        if not left.size:
            break
        # Each rung starts from the previous rung's answer; a sample that fails a rung is out.
        xl = np.zeros((left.size, size))
        vl = (np.zeros((left.size, layout.n_bjt)), np.zeros((left.size, layout.n_bjt)))
        alive = np.ones(left.size, dtype=bool)
        for rung in rungs:
            idx = np.flatnonzero(alive)
            xs, vs, ok, its = problem.newton(left[idx], xl[idx], (vl[0][idx], vl[1][idx]),
                                             max_iterations=LADDER_ITERATIONS, **rung)
            xl[idx], vl[0][idx], vl[1][idx] = xs, vs[0], vs[1]
            iterations[left[idx]] += its
            alive[idx[~ok]] = False
        x[left[alive]] = xl[alive]
        converged[left[alive]] = True
        method[left[alive]] = METHODS.index(label)
        left = left[~alive]
    # An answer on the straight continuation of exp() is no operating point: only ideal sources
    # can hold a junction that far forward. Those samples fail with their own label.
    done = np.flatnonzero(converged)
    if done.size:
        vbe, vbc = problem.junctions(x[done])
        limit = EXP_LIMIT * problem.nvt[done]
        over = np.any((vbe > limit) | (vbc > limit), axis=1)
        converged[done[over]] = False
        method[done[over]] = METHODS.index("overdriven")
    # Every answer is checked against its own equations before it counts.
    done = np.flatnonzero(converged)
    if done.size:
        every = done.size == s_count
        missed = ~residuals(layout, params if every else take_samples(params, done), x if every else x[done]).ok
        converged[done[missed]] = False
        method[done[missed]] = METHODS.index("residual too large")
    rejected = np.where(converged[:, None], np.nan, x)
    x[~converged] = np.nan
    # The regions of every answer, when the warm start classified them (those are kept; a sample
    # with no answer is what classify makes of NaN, cutoff).
    if regions is not None:
        stale = np.flatnonzero(converged & ~classified)
        if stale.size:
            regions[stale] = classify(layout, take_samples(params, stale), x[stale], checks=False)[0]
        regions[~converged] = rg.CUTOFF
    return x, converged, iterations, method, rejected, regions


#: How :func:`solve_newton` reached (or failed to reach) each answer, by code.
METHODS = ("", "newton", "conductance ladder", "source stepping", "overdriven", "residual too large")


def conduction_voltage(dev, v_t):
    """Junction voltage at which a junction injects :data:`~ampplan.solver.regions.CONDUCTION_CURRENT`.

    ``n·V_T·ln(1 + CONDUCTION_CURRENT / I_S)``, from the junction law I = I_S·(exp(V/(n·V_T)) − 1)
    of the module docstring, with I_S and V_T at the solve temperature.

    Parameters
    ----------
    dev : dict of str -> ndarray (S, N)
        Device parameters at the solve temperature.
    v_t : ndarray, shape (S, 1)
        Thermal voltage, volts.

    Returns
    -------
    ndarray, shape (S, N)
        Volts.
    """
    return dev["emission_coefficient"] * v_t * np.log1p(rg.CONDUCTION_CURRENT / dev["saturation_current"])


def classify(layout, params, x, checks: bool = True, regions=None):
    """Regions of an Ebers–Moll solution, with the checks that decided them.

    The rule (:mod:`.regions`, NPN frame): a junction conducts when its voltage is at least
    :func:`conduction_voltage` (it then injects at least ``CONDUCTION_CURRENT`` at this device's
    I_S and temperature). Neither conducting: cutoff. Otherwise forward-active when
    V_CE >= V_CE(sat), reverse-active when V_CE <= -V_CE(sat), saturation in between.

    Parameters
    ----------
    layout : ampplan.solver.assembly.Layout
    params : ampplan.solver.assembly.Parameters
        S samples.
    x : ndarray, shape (S, size + 1)
        Unknowns.
    checks : bool
        Also return the checks (False: the regions alone, None for the checks).
    regions : ndarray of int, shape (S, N), optional
        The regions of ``x`` already classified (by this function): only the checks are made.

    Returns
    -------
    regions : ndarray of int, shape (S, N)
        Codes into ``REGIONS``.
    checks : tuple (names, values, limits, margins), each ndarray (S, N, 2), or None
    """
    dev = params.at_temperature
    on = conduction_voltage(dev, thermal_voltage(params.temperature[:, None]))
    s = layout.sign
    x_b = x[:, layout.q_b]
    v_be, v_bc = x_b - x[:, layout.q_e], x_b - x[:, layout.q_c]
    if not np.all(s == 1.0):     # (a sign of +1 multiplies exactly)
        v_be *= s
        v_bc *= s
    v_ce = v_be - v_bc
    sat = dev["vce_sat"]
    if regions is None:
        regions = np.where(v_ce >= sat, _CODE[rg.ACTIVE],
                           np.where(v_ce <= -sat, _CODE[rg.REVERSE], _CODE[rg.SATURATION]))
        regions[~((v_be >= on) | (v_bc >= on))] = rg.CUTOFF     # neither junction conducts
    if not checks:
        return regions, None
    # The quantity and limit slots of regions.QUANTITIES and LIMITS that the Ebers–Moll table reads.
    quantities = (v_be, v_bc, v_ce, None, None, None)
    limits = (on, on, sat, None, None, -sat)
    table = rg.table("ebers-moll")
    values, bounds, margins = table.choose(quantities, limits, regions)
    return regions, (table.check_names(regions, s), values, bounds, margins)


#: Region codes as one-byte scalars (np.where keeps their type).
_CODE = {code: np.int8(code) for code in (rg.CUTOFF, rg.ACTIVE, rg.SATURATION, rg.REVERSE)}


@dataclass(frozen=True)
class Residuals:
    """How far answers miss their own equations (see :func:`residuals`); arrays of shape (S,).

    Attributes
    ----------
    ok : ndarray of bool
        Both residuals within :data:`RESIDUAL_TOLERANCE`.
    kcl : ndarray
        Largest net current leaving a node, amperes.
    kcl_node : ndarray of int
        Index of that node in ``layout.nodes``.
    kcl_allowed : ndarray
        What the tolerance allows at that node, amperes.
    device : ndarray
        Largest difference between a reported I_B or I_C and the device equations, amperes.
    device_transistor : ndarray of int
        Index of that transistor in ``layout.bjts``.
    device_allowed : ndarray
        What the tolerance allows there, amperes.
    """
    ok: np.ndarray
    kcl: np.ndarray
    kcl_node: np.ndarray
    kcl_allowed: np.ndarray
    device: np.ndarray
    device_transistor: np.ndarray
    device_allowed: np.ndarray


def residuals(layout, params, x) -> Residuals:
    """Kirchhoff's current law and the device equations, re-evaluated at answers ``x``.

    Independent of how Newton got there: the net current leaving every node is summed from the
    element currents (resistors g·ΔV, source currents, I_B and I_C as reported), and each
    transistor's reported I_B and I_C are compared with :func:`device_currents` at its junction
    voltages. One vectorised pass over the elements, none over the samples.

    Parameters
    ----------
    layout : ampplan.solver.assembly.Layout
    params : ampplan.solver.assembly.Parameters
        S samples.
    x : ndarray, shape (S, size + 1)
        Unknowns, ground last.

    Returns
    -------
    Residuals
    """
    if x.shape[0] > BLOCK:
        # Blocks of BLOCK samples (views of the parameters): the same arithmetic, on working
        # arrays that stay in cache.
        parts = [_residuals(layout, take_samples(params, slice(at, at + BLOCK)), x[at:at + BLOCK])
                 for at in range(0, x.shape[0], BLOCK)]
        return Residuals(*(np.concatenate([getattr(p, f.name) for p in parts]) for f in fields(Residuals)))
    return _residuals(layout, params, x)


def _residuals(layout, params, x) -> Residuals:
    """:func:`residuals` of one block of samples."""
    s_count = x.shape[0]
    n_full = layout.size + 1
    # Samples last, so that each element's term is a contiguous row.
    xt = np.ascontiguousarray(x.T)
    net = np.zeros((n_full, s_count))
    scale = np.zeros((n_full, s_count))
    ground = layout.size     # ground's row is not checked: its terms are skipped

    def leave(node, current, size, sign=1.0):
        # A loop over the circuit's elements (never over samples): each adds one row. Adding
        # -current is subtracting current, exactly.
        if node != ground:
            if sign > 0:
                net[node] += current
            else:
                net[node] -= current
            scale[node] += size

    with np.errstate(all="ignore"):
        r_i = (xt[layout.r_a] - xt[layout.r_b]) * params.conductance.T
        r_size = np.abs(r_i)
        for k, (a, b) in enumerate(zip(layout.r_a, layout.r_b)):
            leave(a, r_i[k], r_size[k])
            leave(b, r_i[k], r_size[k], -1.0)
        for plus, minus, row in zip(layout.vs_plus, layout.vs_minus, layout.vs_row):
            size = np.abs(xt[row])
            leave(plus, xt[row], size)
            leave(minus, xt[row], size, -1.0)
        for k, (f, t) in enumerate(zip(layout.cs_from, layout.cs_to)):
            size = np.abs(params.current[:, k])
            leave(f, params.current[:, k], size)
            leave(t, params.current[:, k], size, -1.0)
        for b, c, e, sg, ib_at, ic_at in zip(layout.q_b, layout.q_c, layout.q_e, layout.sign, layout.q_ib, layout.q_ic):
            # s·I_B at the base, s·I_C at the collector, -s·(I_B + I_C) at the emitter (s = ±1).
            leave(b, xt[ib_at], np.abs(xt[ib_at]), sg)
            leave(c, xt[ic_at], np.abs(xt[ic_at]), sg)
            i_e = xt[ib_at] + xt[ic_at]
            leave(e, i_e, np.abs(i_e), -sg)
        nodes = slice(0, layout.n_nodes)
        kcl_allowed = RESIDUAL_TOLERANCE * scale[nodes] + CURRENT_TOLERANCE
        kcl = np.abs(net[nodes])

        # The device equations, samples last (the arithmetic of device_currents, to the bit).
        n_q = layout.n_bjt
        i_b, i_c = xt[layout.q_ib], xt[layout.q_ic]
        v_j = xt[np.concatenate([layout.q_b, layout.q_b])] - xt[np.concatenate([layout.q_e, layout.q_c])]
        v_j *= np.concatenate([layout.sign, layout.sign])[:, None]
        dev = params.at_temperature
        i_s = dev["saturation_current"].T
        constants = {"nvt": (dev["emission_coefficient"] * thermal_voltage(params.temperature[:, None])).T,
                     "ib_fr": np.concatenate([i_s / dev["beta"].T, i_s / dev["beta_reverse"].T]),
                     "i_s": i_s, "inv_va": 1.0 / dev["early_voltage"].T}
        device = _device_rows(v_j, constants)
        true_b, true_c = device[:n_q], device[n_q:2 * n_q]
        miss = np.maximum(np.abs(true_b - i_b), np.abs(true_c - i_c))
        dev_allowed = RESIDUAL_TOLERANCE * np.maximum(np.maximum(np.abs(true_b), np.abs(true_c)),
                                                      np.maximum(np.abs(i_b), np.abs(i_c))) + CURRENT_TOLERANCE
    kcl_ok, kcl_at = _worst(kcl, kcl_allowed)
    dev_ok, dev_at = _worst(miss, dev_allowed)
    samples = np.arange(s_count)
    at = lambda a, k: a[k, samples] if a.shape[0] else np.zeros(s_count)  # noqa: E731  (N may be 0)
    return Residuals(kcl_ok & dev_ok, at(kcl, kcl_at), kcl_at, at(kcl_allowed, kcl_at),
                     at(miss, dev_at), dev_at, at(dev_allowed, dev_at))


def _worst(residual, allowed):
    """Per sample: whether every residual is within what is allowed, and the index of the worst
    (arrays samples last, (K, S))."""
    with np.errstate(all="ignore"):
        excess = residual / allowed
    excess[np.isnan(excess)] = np.inf
    if excess.shape[0] == 0:
        return np.ones(excess.shape[1], dtype=bool), np.zeros(excess.shape[1], dtype=np.intp)
    return np.all(excess <= 1.0, axis=0), np.argmax(excess, axis=0)

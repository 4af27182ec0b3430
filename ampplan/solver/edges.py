"""Ebers–Moll: the value of one source at which a transistor reaches an edge of forward-active.

The circuit's equations F(x) = b + δ·e (e: the unit right-hand side of the varied source's row, δ
its excursion from the value in ``params``) are bordered by one more equation, a forward-active
check of one transistor held at its limit (the *pinned* check, in the NPN frame):

* ``"be conducts"`` (``check = 0``): V_BE = its conduction voltage (the edge toward cutoff);
* ``"above edge"`` (``check = 1``): V_CE = V_CE(sat) (the edge toward saturation).

Both are linear in the node voltages, a·x = L. Newton's method on the bordered system in (x, δ)
(Keller's bordering, from memory; Allgower & Georg, *Numerical Continuation Methods*, the chapter
on Newton's method for underdetermined systems, from memory) needs at each iterate the usual
Newton matrix J (the linear part plus every transistor's companion model, exactly as
:meth:`~ampplan.solver.ebers_moll.NewtonProblem.newton` builds it) and two solves with it:

    J·u = b − j (the plain Newton iterate at δ = 0),   J·w = e (the tangent dx/dδ),
    δ = (L − a·u) / (a·w),   x = u + δ·w,

so every iterate meets the pinned check exactly and Kirchhoff's law to rounding. A junction that
is pinned toward cutoff is linearised at its pinned voltage (where the new iterate puts it), not
at the last iterate: its exponential then never has to be followed down from the Q-point, and
the pinned transistor is a known current from the first step. Every other junction is limited
between iterates as in the plain Newton. An iterate has converged when its step is below
:data:`~ampplan.solver.ebers_moll.RELATIVE_TOLERANCE` (the excursion included) or its device
currents match the linearised ones to :data:`~ampplan.solver.ebers_moll.FIT_RELATIVE`, the tests
of the plain Newton; the answer is then checked against the circuit's equations
(:func:`~ampplan.solver.ebers_moll.residuals`).

With the excursion held (``hold=``) instead of bordered, the same iterations are the plain
Newton of the circuit at that excursion (a start for a bordered solve that did not converge).

This answers "where is the edge of this check", not "which check goes first": the caller picks the
check, and checks the others at the answer.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .assembly import take_samples
from .ebers_moll import (_MODEL_PARAMETERS, RELATIVE_TOLERANCE, VOLTAGE_TOLERANCE, NewtonProblem, _limit_junction,
                         companion_terms, conduction_voltage, device_currents, residuals)
from .linear import solve_batch

__all__ = ["EdgeProblem", "Edges", "EDGE_ITERATIONS"]

#: Newton iterations allowed for the bordered system; a bracket that has not converged by then is
#: reported as such (the caller searches it another way).
EDGE_ITERATIONS = 30


@dataclass(frozen=True)
class Edges:
    """Answers of :meth:`EdgeProblem.solve`, one per bracket (K of them).

    Attributes
    ----------
    delta : ndarray, shape (K,)
        The source's excursion at the edge, volts (signed; NaN where not converged).
    x : ndarray, shape (K, size + 1)
        The unknowns there (full layout, ground last; NaN rows where not converged).
    tangent : ndarray, shape (K, n_nodes + 1)
        dV/dδ of every node there (ground last, 0), from the last iterate's Newton matrix.
    converged : ndarray of bool, shape (K,)
        Newton converged and the answer meets the circuit's equations.
    iterations : ndarray of int, shape (K,)
    """
    delta: np.ndarray
    x: np.ndarray
    tangent: np.ndarray
    converged: np.ndarray
    iterations: np.ndarray


class EdgeProblem(NewtonProblem):
    """The Ebers–Moll equations of one layout for S samples, bordered by one pinned check per bracket."""

    def pin(self, rows, transistor, check):
        """Node indices, frame sign and limit of the pinned checks: (plus, minus, sign, limit), each (K,).

        The pinned quantity is ``sign·(V[plus] − V[minus])``: V_BE for ``check`` 0, V_CE for 1.
        """
        lay = self.layout
        sign = lay.sign[transistor]
        plus = np.where(check == 0, lay.q_b[transistor], lay.q_c[transistor])
        minus = lay.q_e[transistor]
        dev = {k: self.dev[k][rows] for k in ("emission_coefficient", "saturation_current", "vce_sat")}
        at = np.arange(rows.size)
        on = conduction_voltage(dev, self.v_t[rows])[at, transistor]
        limit = np.where(check == 0, on, dev["vce_sat"][at, transistor])
        return plus, minus, sign, limit

    def solve(self, rows, x, source, transistor, check, hold=None, max_iterations=EDGE_ITERATIONS) -> Edges:
        """Bordered Newton (module docstring) for K brackets.

        Parameters
        ----------
        rows : ndarray of int, shape (K,)
            The sample of each bracket (samples may repeat: one bracket per direction).
        x : ndarray, shape (K, size + 1)
            Starting unknowns (a solution at δ = 0 is a good start); the last column is ground, 0.
        source : int
            Index of the varied voltage source in ``layout.voltage_sources``.
        transistor : ndarray of int, shape (K,)
            The pinned transistor of each bracket (index in ``layout.bjts``).
        check : ndarray of int, shape (K,)
            0: its base-emitter junction at the conduction voltage; 1: V_CE at V_CE(sat).
        hold : ndarray, shape (K,), optional
            Brackets with a finite value here are not bordered: their excursion is held at that
            value (volts) and Newton solves the circuit there (their ``transistor`` and ``check``
            are not read). None: every bracket is bordered.

        Returns
        -------
        Edges
        """
        lay = self.layout
        nu = lay.n_nodes + lay.n_vs
        k_count = rows.size
        src_row = lay.n_nodes + source
        params = take_samples(self.params, rows, device=False)
        dev = {k: self.dev[k][rows] for k in _MODEL_PARAMETERS}
        v_t, nvt, v_crit = self.v_t[rows], self.nvt[rows], self.v_crit[rows]
        held = np.zeros(k_count, dtype=bool) if hold is None else np.isfinite(hold)
        check = np.where(held, 1, check)         # a held bracket pins nothing toward cutoff
        plus, minus, sign, limit = self.pin(rows, transistor, check)
        # Reduced indices: ground is the zero column nu appended to u and w.
        plus = np.where(plus == lay.size, nu, plus)
        minus = np.where(minus == lay.size, nu, minus)
        abs_tol = self.abs_tol[:nu]
        if self.sparse:
            positions = self._sparse_plan(nu)[0]
            entries, right = lay.entries(params, positions, reduced=True)
        else:
            base, rhs0 = lay.assemble(params, reduced=True)
            base, rhs0 = np.ascontiguousarray(base[:, :nu, :nu]), np.ascontiguousarray(rhs0[:, :nu])

        x = x.copy()
        delta = np.zeros(k_count)
        tangent = np.zeros((k_count, nu + 1))
        converged = np.zeros(k_count, dtype=bool)
        iterations = np.zeros(k_count, dtype=int)
        vbe_old, vbc_old = self.junctions(x)
        active = np.arange(k_count)
        gathered = False
        for _ in range(max_iterations):
            if active.size == 0:
                break
            if not gathered:
                # Gather the still-active brackets once per change of the active set.
                gathered = True
                g = (lambda a: a) if active.size == k_count else (lambda a: a[active])  # noqa: E731
                d_act = {name: g(value) for name, value in dev.items()}
                vt_a, nvt_a, crit_a = g(v_t), g(nvt), g(v_crit)
                plus_a, minus_a, sign_a, limit_a = g(plus), g(minus), g(sign), g(limit)
                held_a = g(held)
                hold_a = g(hold)[held_a] if held_a.any() else None
                here = np.arange(active.size)
                cut_at = (here[g(check) == 0], g(transistor)[g(check) == 0])
                cut_limit = limit_a[cut_at[0]]
                if self.sparse:
                    ent_a, right_a = (entries, right) if active.size == k_count else \
                        (np.ascontiguousarray(entries[:, active]), np.ascontiguousarray(right[:, active]))
                else:
                    base_a, rhs_a = g(base), g(rhs0)
                ext = np.zeros((active.size, nu + 1))     # u, then w, with ground's zero column
            with np.errstate(all="ignore"):     # a diverging bracket overflows: it fails, the others go on
                xa = x[active]
                vbe_raw, vbc_raw = self.junctions(xa)
                # A junction pinned toward cutoff is linearised where the new iterate will hold it.
                vbe_raw[cut_at] = cut_limit
                vbe = _limit_junction(vbe_raw, vbe_old[active], nvt_a, crit_a)
                vbc = _limit_junction(vbc_raw, vbc_old[active], nvt_a, crit_a)
                was_limited = np.any((vbe != vbe_raw) | (vbc != vbc_raw), axis=1)
                i_b, i_c, d = device_currents(vbe, vbc, d_act, vt_a)
                j_b = i_b - d["b_be"] * vbe - d["b_bc"] * vbc
                j_c = i_c - d["c_be"] * vbe - d["c_bc"] * vbc
                if self.sparse:
                    u, w, ok = self._solve_pair(ent_a.copy(), right_a.copy(), params, active, d, j_b, j_c, src_row)
                else:
                    matrix, rhs = base_a.copy(), rhs_a.copy()
                    self._stamp_companion(matrix, rhs, d, j_b, j_c)
                    unit = np.zeros_like(rhs)
                    unit[:, src_row] = 1.0
                    both, ok = solve_batch(matrix, np.stack([rhs, unit], axis=-1), check_residual=False)
                    u, w = both[..., 0], both[..., 1]
                # The bordered step: x = u + δ·w with the pinned check at its limit.
                ext[:, :nu] = u
                a_u = sign_a * (ext[here, plus_a] - ext[here, minus_a])
                ext[:, :nu] = w
                a_w = sign_a * (ext[here, plus_a] - ext[here, minus_a])
                d_new = (limit_a - a_u) / a_w
                if hold_a is not None:
                    d_new[held_a] = hold_a
                ok &= np.isfinite(d_new)
                d_new[~ok] = 0.0
                d_old = delta[active]
                new = xa.copy()
                new[:, :nu] = u + d_new[:, None] * w
                ok &= np.all(np.isfinite(new[:, :nu]), axis=1)
                step = np.abs(new[:, :nu] - xa[:, :nu])
                small = (np.all(step <= RELATIVE_TOLERANCE * np.maximum(np.abs(new[:, :nu]), np.abs(xa[:, :nu]))
                                + abs_tol, axis=1)
                         & (np.abs(d_new - d_old) <= RELATIVE_TOLERANCE * np.maximum(np.abs(d_new), np.abs(d_old))
                            + VOLTAGE_TOLERANCE))
                iterations[active] += 1
                fits = self._companion_currents(new, j_b, j_c, d, d_act, vt_a)[0]
            done = ok & ((small & ~was_limited) | fits)
            x[active[ok]] = new[ok]
            delta[active[ok]] = d_new[ok]
            tangent[active[ok]] = ext[ok]
            vbe_old[active], vbc_old[active] = vbe, vbc
            converged[active[done]] = True
            # A singular or non-finite step ends that bracket's attempt.
            still = ~done & ok
            if not np.all(still):
                active = active[still]
                gathered = False
        good = np.flatnonzero(converged)
        if good.size:
            check_ = residuals(lay, take_samples(self.params, rows[good]), x[good])
            converged[good[~check_.ok]] = False
        x[~converged] = np.nan
        delta[~converged] = np.nan
        nodes = np.concatenate([tangent[:, :lay.n_nodes], tangent[:, nu:]], axis=1)
        return Edges(delta=delta, x=x, tangent=nodes, converged=converged, iterations=iterations)

    def _solve_pair(self, entries, right, params, k, d, j_b, j_c, src_row):
        """One bordered step's two solves with the same Newton matrix, through the planned sparse
        elimination (dense LAPACK for the samples whose pivots it does not suit): the plain
        iterate u and the tangent w, each (K', m), and ok (K',)."""
        _, elimination, conductances, currents = self._sparse_plan(right.shape[0])
        values = conductances.last(companion_terms({name: v.T for name, v in d.items()}), entries)   # in place
        rhs = currents.last(np.concatenate([j_b.T, j_c.T]), right)
        unit = np.zeros_like(rhs)
        unit[src_row] = 1.0
        (u, w), ok = elimination.solve_several(values, (rhs, unit))
        u, w = u.T.copy(), w.T.copy()
        bad = np.flatnonzero(~ok)
        if bad.size:
            sub = take_samples(params, k[bad], device=False)
            matrix, b = self.layout.assemble(sub, reduced=True)
            m = right.shape[0]
            matrix, b = matrix[:, :m, :m].copy(), b[:, :m].copy()
            self._stamp_companion(matrix, b, {name: v[bad] for name, v in d.items()}, j_b[bad], j_c[bad])
            one = np.zeros_like(b)
            one[:, src_row] = 1.0
            both, ok[bad] = solve_batch(matrix, np.stack([b, one], axis=-1), check_residual=False)
            u[bad], w[bad] = both[..., 0], both[..., 1]
        return u, w, ok

"""The constant-drop region method: assume regions, solve the linear equations, check, search.

Per transistor, in the NPN frame (a PNP negates every voltage and current; DESIGN §4):

================  ==========================================  ===================================
region            equations                                   checks (must hold)
================  ==========================================  ===================================
cutoff            I_B = 0, I_C = 0                            V_BE < V_BE(on), V_BC < V_BC(on)
forward-active    V_BE = V_BE(on), I_C = β·I_B                I_B > 0, V_CE >= V_CE(sat)
saturation        V_BE = V_BE(on), V_CE = V_CE(sat)           I_B > 0, I_C < β·I_B
reverse-active    V_BC = V_BC(on), I_C = -(β_R + 1)·I_B       I_B > 0, V_CE <= -V_CE(sat)
================  ==========================================  ===================================

With ``active_edge="vcb-zero"`` forward-active ends at V_CB = 0 instead, and saturation then holds
V_CB = 0 (V_CE = V_BE(on)), so the two regions still meet without a gap.

The search (the same per sample, whether alone or in a batch):

1. Guess the regions from the Ebers–Moll solution of the same circuit (all forward-active where
   Newton fails) and solve; if every check holds, done.
2. Otherwise, up to :data:`ENUMERATION_LIMIT` transistors, solve every one of the 4^N
   assignments at once (one batched linear solve) and keep the consistent ones; beyond that,
   repair the guess by the failed checks (a few rounds), then try every assignment within two
   region changes of the guess.
3. Of several consistent assignments, the one nearest the guess wins (fewest changed regions);
   the others are reported as alternatives. None consistent: NoConsistentRegionError, listing
   the assignments that came closest and the check each failed.

A single solve of N <= ENUMERATION_LIMIT transistors enumerates first and runs Ebers–Moll only
when it must break a tie, which gives the same answer as the order above at a fraction of the cost.
"""

from __future__ import annotations

import functools
import itertools

import numpy as np

from ..devices import scaled_to_temperature
from .linear import solve_batch

#: Up to this many transistors every region assignment is tried (4^5 = 1024 linear solves).
ENUMERATION_LIMIT = 5
#: Rounds of repair-by-failed-check beyond the enumeration limit.
REPAIR_ROUNDS = 12
#: Systems per batched linear solve when enumerating many samples (bounds memory).
CHUNK = 20000

CUTOFF, ACTIVE, SATURATION, REVERSE = 0, 1, 2, 3


class RegionProblem:
    """Constant-drop equations of one layout for S samples; solves any region assignment."""

    def __init__(self, layout, params, active_edge: str = "vce-sat"):
        self.layout = layout
        self.params = params
        dev = scaled_to_temperature(params.device, params.temperature[:, None])
        self.dev = dev
        self.vbe_on = dev["vbe_on"]
        self.vbc_on = dev["vbc_on"]
        # The voltage at which forward-active meets saturation (NPN frame V_CE).
        self.edge = dev["vbe_on"] if active_edge == "vcb-zero" else dev["vce_sat"]
        self.active_edge = active_edge
        self.matrix, self.rhs = layout.assemble(params)

    def solve(self, samples, regions):
        """Solve the linear equations of assignments ``regions`` for samples ``samples``.

        Parameters
        ----------
        samples : ndarray of int, shape (K,)
            Sample index of each system (repeats allowed: several assignments of one sample).
        regions : ndarray of int, shape (K, N)

        Returns
        -------
        x : ndarray, shape (K, size + 1)
            Unknowns, ground last (0); NaN where the system is singular.
        ok : ndarray of bool, shape (K,)
        """
        lay = self.layout
        n = lay.size
        out_x = np.empty((len(samples), n + 1))
        out_ok = np.empty(len(samples), dtype=bool)
        for start in range(0, len(samples), CHUNK):
            part = slice(start, start + CHUNK)
            smp, reg = samples[part], regions[part]
            matrix = self.matrix[smp]
            rhs = self.rhs[smp]
            self._stamp(matrix, rhs, smp, reg)
            x, ok = solve_batch(matrix[:, :n, :n], rhs[:, :n])
            out_x[part, :n] = x
            out_x[part, n] = 0.0
            out_ok[part] = ok
        return out_x, out_ok

    def _stamp(self, matrix, rhs, smp, reg):
        lay = self.layout
        s = lay.sign
        beta = self.dev["beta"][smp]
        beta_r = self.dev["beta_reverse"][smp]
        cut, act, sat, rev = (reg == CUTOFF), (reg == ACTIVE), (reg == SATURATION), (reg == REVERSE)
        on = act | sat
        # Base row: I_B = 0 (cutoff), V_BE = V_BE(on) (active, saturation), V_BC = V_BC(on) (reverse).
        matrix[:, lay.q_ib, lay.q_ib] += cut
        matrix[:, lay.q_ib, lay.q_b] += s * (on | rev)
        matrix[:, lay.q_ib, lay.q_e] -= s * on
        matrix[:, lay.q_ib, lay.q_c] -= s * rev
        rhs[:, lay.q_ib] += np.where(on, self.vbe_on[smp], 0.0) + np.where(rev, self.vbc_on[smp], 0.0)
        # Collector row: I_C = 0, I_C = β·I_B, V_CE = edge, I_C = -(β_R + 1)·I_B.
        matrix[:, lay.q_ic, lay.q_ic] += ~sat
        matrix[:, lay.q_ic, lay.q_ib] += np.where(act, -beta, 0.0) + np.where(rev, beta_r + 1.0, 0.0)
        matrix[:, lay.q_ic, lay.q_c] += s * sat
        matrix[:, lay.q_ic, lay.q_e] -= s * sat
        rhs[:, lay.q_ic] += np.where(sat, self.edge[smp], 0.0)

    def checks(self, samples, regions, x):
        """The two checks of each transistor's region at solutions ``x``.

        Returns
        -------
        values, limits, margins : ndarray (K, N, 2)
            Margins are positive where the check holds with room.
        holds : ndarray of bool (K, N, 2)
            Margin above minus a rounding tolerance scaled to the circuit's voltages and currents.
        """
        lay = self.layout
        s = lay.sign
        v_be = s * (x[:, lay.q_b] - x[:, lay.q_e])
        v_bc = s * (x[:, lay.q_b] - x[:, lay.q_c])
        i_b = x[:, lay.q_ib]
        i_c = x[:, lay.q_ic]
        beta = self.dev["beta"][samples]
        zero = np.zeros_like(i_b)
        # Quantities and limits the table below picks from, stacked on a last axis.
        quantities = np.stack([v_be, v_bc, v_be - v_bc, -v_bc, i_b, i_c], axis=-1)
        bounds = np.stack([self.vbe_on[samples], self.vbc_on[samples], self.edge[samples], zero, beta * i_b,
                           -self.dev["vce_sat"][samples]], axis=-1)
        reg = regions.astype(np.intp)
        edge_slot = 1 if self.active_edge == "vcb-zero" else 0
        q_idx = _QUANTITY[edge_slot][reg]
        values = np.take_along_axis(quantities, q_idx, axis=2)
        l_idx = _LIMIT[edge_slot][reg]
        limits = np.take_along_axis(bounds, l_idx, axis=2)
        direction = _DIRECTION[reg]
        margins = np.where(direction > 0, values - limits, limits - values)
        # Rounding tolerance: relative to the largest voltage and the largest current in the answer.
        n_nodes = lay.n_nodes
        with np.errstate(invalid="ignore"):
            v_scale = np.max(np.abs(x[:, :n_nodes]), axis=1, initial=1.0)
            i_scale = np.max(np.abs(x[:, n_nodes:lay.size]), axis=1, initial=0.0)
        tol = np.where(_IS_CURRENT[reg], (1e-9 * i_scale + 1e-18)[:, None, None], (1e-9 * v_scale)[:, None, None])
        holds = margins >= -tol
        return values, limits, margins, holds

    def check_names(self, regions):
        """Names of the checks of ``regions`` (K, N), as a str array (K, N, 2)."""
        npn = self.layout.sign > 0
        edge_slot = 1 if self.active_edge == "vcb-zero" else 0
        table = np.where(npn[None, :, None], _NAMES_NPN[edge_slot][regions.astype(np.intp)],
                         _NAMES_PNP[edge_slot][regions.astype(np.intp)])
        return table

    def consistent(self, samples, regions, x, ok):
        """True where the solve succeeded and every check of every transistor holds; a violation
        score (number of failed checks, then their size) for ranking near misses; and the checks
        themselves (as :meth:`checks` returns them)."""
        checks = self.checks(samples, regions, x)
        values, limits, margins, holds = checks
        good = ok & np.all(holds, axis=(1, 2))
        failed = np.sum(~holds, axis=(1, 2))
        with np.errstate(invalid="ignore"):
            size = np.nansum(np.where(holds, 0.0, -margins), axis=(1, 2))
        score = np.where(ok, failed + np.tanh(size), np.inf)
        return good, score, checks

    def repair(self, samples, regions, x):
        """Next guess: move each transistor whose check failed toward the region it points to."""
        values, limits, margins, holds = self.checks(samples, regions, x)
        first_fail, second_fail = ~holds[..., 0], ~holds[..., 1]
        new = regions.copy()
        new = np.where((regions == CUTOFF) & first_fail, ACTIVE, new)
        new = np.where((regions == CUTOFF) & ~first_fail & second_fail, REVERSE, new)
        new = np.where((regions == ACTIVE) & first_fail, CUTOFF, new)
        new = np.where((regions == ACTIVE) & ~first_fail & second_fail, SATURATION, new)
        new = np.where((regions == SATURATION) & first_fail, CUTOFF, new)
        new = np.where((regions == SATURATION) & ~first_fail & second_fail, ACTIVE, new)
        new = np.where((regions == REVERSE) & first_fail, CUTOFF, new)
        new = np.where((regions == REVERSE) & ~first_fail & second_fail, SATURATION, new)
        return new


# The check table: for each region (row) its two checks (columns). Quantity indices into
# (v_be, v_bc, v_ce, v_cb, i_b, i_c), limit indices into (V_BE(on), V_BC(on), edge, 0, β·I_B,
# -V_CE(sat)); direction +1 wants value above limit, -1 below. The first table of each pair is for
# active_edge="vce-sat", the second for "vcb-zero".
_QUANTITY = (np.array([[0, 1], [4, 2], [4, 5], [4, 2]]), np.array([[0, 1], [4, 3], [4, 5], [4, 2]]))
_LIMIT = (np.array([[0, 1], [3, 2], [3, 4], [3, 5]]), np.array([[0, 1], [3, 3], [3, 4], [3, 5]]))
_DIRECTION = np.array([[-1, -1], [1, 1], [1, -1], [1, -1]])
_IS_CURRENT = np.array([[False, False], [True, False], [True, True], [True, False]])
_NAMES_NPN = tuple(np.array(t, dtype=str) for t in (
    [["V_BE < V_BE(on)", "V_BC < V_BC(on)"], ["I_B > 0", "V_CE >= V_CE(sat)"],
     ["I_B > 0", "I_C < beta*I_B"], ["I_B > 0", "V_CE <= -V_CE(sat)"]],
    [["V_BE < V_BE(on)", "V_BC < V_BC(on)"], ["I_B > 0", "V_CB >= 0"],
     ["I_B > 0", "I_C < beta*I_B"], ["I_B > 0", "V_CE <= -V_CE(sat)"]]))
_NAMES_PNP = tuple(np.array(t, dtype=str) for t in (
    [["V_EB < V_EB(on)", "V_CB < V_CB(on)"], ["I_B > 0", "V_EC >= V_EC(sat)"],
     ["I_B > 0", "I_C < beta*I_B"], ["I_B > 0", "V_EC <= -V_EC(sat)"]],
    [["V_EB < V_EB(on)", "V_CB < V_CB(on)"], ["I_B > 0", "V_BC >= 0"],
     ["I_B > 0", "I_C < beta*I_B"], ["I_B > 0", "V_EC <= -V_EC(sat)"]]))


@functools.lru_cache(maxsize=None)
def all_assignments(n: int) -> np.ndarray:
    """Every region assignment of n transistors, shape (4^n, n), all forward-active first (read-only)."""
    order = (ACTIVE, CUTOFF, SATURATION, REVERSE)
    table = np.array(list(itertools.product(order, repeat=n)), dtype=np.int8).reshape(4 ** n, n)
    table.flags.writeable = False
    return table


def neighbours(guess: np.ndarray, distance: int) -> np.ndarray:
    """Assignments that differ from ``guess`` (shape (N,)) in 1..distance transistors."""
    n = guess.shape[0]
    out = [guess[None, :]]
    for d in range(1, distance + 1):
        for who in itertools.combinations(range(n), d):
            for what in itertools.product(range(1, 4), repeat=d):
                cand = guess.copy()
                cand[list(who)] = (cand[list(who)] + np.array(what)) % 4
                out.append(cand[None, :])
    return np.concatenate(out).astype(np.int8)


def hamming(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Number of transistors whose region differs, along the last axis."""
    return np.sum(a != b, axis=-1)

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
V_CB = 0 (V_CE = V_BE(on)), so the two regions still meet without a gap. The checks come from
the check table both models share (:mod:`.regions`), as do the region codes.

The search (the same per sample, whether alone or in a batch, so a batch sample always equals
its single solve):

1. Start from every transistor forward-active (the same start Ebers–Moll's Newton takes) and
   solve; if every check holds, done. Most amplifier samples stop here, after one linear solve.
2. Otherwise repair: move each transistor whose check failed toward the region that check points
   to, solve again, up to :data:`REPAIR_ROUNDS` times or until an assignment repeats.
3. Otherwise search locally: up to :data:`ENUMERATION_LIMIT` transistors every one of the 4^N
   assignments (complete); beyond that, every assignment within :func:`search_distance` region
   changes of the start and of the last repaired assignment. One consistent assignment: done.
   Several: the caller breaks the tie with the Ebers–Moll solution (the nearest wins). None
   beyond the enumeration limit: the caller restarts steps 2–3 from the Ebers–Moll guess.
   None at all: NoConsistentRegionError (a single solve) listing the assignments that came
   closest and the check each failed, or the status ``"no-consistent-region"`` (a batch).

Steps 1 and 2 solve the full system directly, one system per sample. Step 3 and the single
solve's list of alternatives try many assignments of one sample, so they solve the linear part
once and reduce each assignment to the transistors' ports (:meth:`RegionProblem.solve_ports`):
every assignment changes only the 2N device rows, so its solution is a reference solution plus a
combination of 2N fixed columns, found from a 2N×2N system. The answer reported is always one
direct solve of the chosen assignment, checked again.

Nothing ever lists all 4^N assignments beyond the enumeration limit, and circuits of more than
:data:`MAX_TRANSISTORS` transistors are refused before anything is allocated.
"""

from __future__ import annotations

import dataclasses
import functools
import itertools
import math

import numpy as np

from . import regions as rg
from .linear import solve_batch
from .assembly import Scatter, take_samples
from .sparse import Elimination

#: Up to this many transistors the local search tries every region assignment (4^5 = 1024).
ENUMERATION_LIMIT = 5
#: Rounds of repair-by-failed-check before the local search.
REPAIR_ROUNDS = 12
#: Up to this many transistors the local search and the alternatives reach two region changes
#: (9·N(N-1)/2 assignments); beyond it, one (3N).
TWO_CHANGE_LIMIT = 12
#: Circuits with more transistors are refused: each repair round and each assignment the local
#: search tries is a dense solve whose cost grows with the circuit.
MAX_TRANSISTORS = 100
#: Circuits whose dense system would exceed this many bytes (one sample) are refused.
MAX_MATRIX_BYTES = 64 * 2**20
#: Bytes of working arrays one batched step may hold: samples and candidate assignments are
#: processed in blocks of this size, so memory stays flat however large the batch.
WORK_BYTES = 16 * 2**20

# Region codes and the check table are shared with Ebers–Moll (regions.py).
#: A batch's direct solves go through the planned sparse elimination (:mod:`.sparse`) of each
#: region assignment, up to this many unknowns; beyond it, and in single solves, LAPACK solves one
#: dense system at a time.
SPARSE_ORDER = 400
#: A sparse solve of a batch runs over chunks of samples whose working arrays (about two numbers
#: per slot of the elimination) take about this many bytes, a core's second-level cache: the
#: elimination's steps then read what the steps before them wrote from the cache (chunks of
#: 1,000–2,000 samples of the 3-stage demo measured about 10 % faster than chunks of 4,000);
#: never fewer than SPARSE_CHUNK_MIN samples, whose per-call overhead would dominate.
CACHE_BYTES = 2 * 2**20
SPARSE_CHUNK_MIN = 256
#: Rows of size + 1 numbers a sparse batch's search holds per sample, at most (:func:`blocks`).
SPARSE_ROWS = 8
#: Stamped single systems kept per layout (the circuit's own parameters only).
STAMPED_KEPT = 128

CUTOFF, ACTIVE, SATURATION, REVERSE = rg.CUTOFF, rg.ACTIVE, rg.SATURATION, rg.REVERSE


def check_size(layout) -> None:
    """Refuse a circuit beyond the search's reach, before anything is allocated.

    Raises
    ------
    InvalidValueError
        More than :data:`MAX_TRANSISTORS` transistors, or a dense system above
        :data:`MAX_MATRIX_BYTES`.
    """
    from ..errors import InvalidValueError
    if layout.n_bjt > MAX_TRANSISTORS:
        raise InvalidValueError(
            f"the circuit has {layout.n_bjt} transistors; the constant-drop region search handles at most "
            f"{MAX_TRANSISTORS} (every repair and every assignment it tries is a dense solve of the whole "
            "circuit); split the chain into parts and solve them one by one")
    if 8 * (layout.size + 1) ** 2 > MAX_MATRIX_BYTES:
        raise InvalidValueError(
            f"the circuit has {layout.size} unknowns ({layout.n_nodes} nodes); its dense system would take "
            f"{8 * (layout.size + 1) ** 2 / 2**20:.0f} MiB per sample, above the solver's "
            f"{MAX_MATRIX_BYTES / 2**20:.0f} MiB; split the circuit into parts")


def _sparse_for(layout, sparse: bool) -> bool:
    """Whether a batch asked to solve sparsely (``sparse``) does so: up to SPARSE_ORDER unknowns."""
    return sparse and layout.size <= SPARSE_ORDER


def blocks(count: int, layout, sparse: bool = False):
    """Index arrays that cover ``count`` samples in blocks small enough for :data:`WORK_BYTES`.

    A block's samples hold their dense systems, (size + 1)² numbers each, unless ``sparse``: a
    batch whose direct solves go through the sparse elimination (``RegionProblem(sparse=True)``)
    assembles dense systems only for the few samples that need one, a chunk at a time
    (:meth:`RegionProblem.systems`), and otherwise holds :data:`SPARSE_ROWS` rows of size + 1
    numbers per sample (its unknowns, their copies and its checks).
    """
    sparse = _sparse_for(layout, sparse)
    per_sample = 8 * (layout.size + 1) * (SPARSE_ROWS if sparse else layout.size + 1)
    size = max(1, WORK_BYTES // per_sample)
    if count <= size:
        yield np.arange(count)
        return
    for start in range(0, count, size):
        yield np.arange(start, min(count, start + size))


def search_distance(n_q: int) -> int:
    """Region changes the local search and the alternatives reach for ``n_q`` transistors."""
    return 2 if n_q <= TWO_CHANGE_LIMIT else 1


class RegionProblem:
    """Constant-drop equations of one layout for S samples; solves any region assignment."""

    def __init__(self, layout, params, active_edge: str = "vce-sat", sparse: bool = False):
        self.layout = layout
        self.sparse = _sparse_for(layout, sparse)
        self.params = params
        dev = params.at_temperature
        self.dev = dev
        self.vbe_on = dev["vbe_on"]
        self.vbc_on = dev["vbc_on"]
        # The voltage at which forward-active meets saturation (NPN frame V_CE).
        self.edge = dev["vbe_on"] if active_edge == "vcb-zero" else dev["vce_sat"]
        self.active_edge = active_edge
        self.table = rg.table("constant-drop", active_edge)
        self._assembled = None
        self._bounds = None
        # Per transistor, the unknowns its two rows touch: V_B, V_C, V_E, I_B, I_C.
        self.ports = layout.ports
        # Reference solutions of solve_ports by sample (x0, W, regular): the local search and the
        # alternatives come back to the same few samples many times.
        self._references: dict = {}

    @property
    def matrix(self):
        """The linear part of every sample's system, dense (S, size + 1, size + 1), assembled when
        first needed (a batch's sparse solves never need it)."""
        if self._assembled is None:
            self._assembled = self.layout.assembled(self.params)
        return self._assembled[0]

    @property
    def rhs(self):
        """The right-hand sides of :attr:`matrix`, (S, size + 1)."""
        if self._assembled is None:
            self._assembled = self.layout.assembled(self.params)
        return self._assembled[1]

    def systems(self, samples):
        """Dense matrices (K, size + 1, size + 1) and right-hand sides (K, size + 1) of ``samples``,
        to stamp: rows of :attr:`matrix` where it is assembled or the problem has one sample (a
        single solve keeps it), else assembled for those samples alone (the same sums, sample by
        sample), so that a sparse batch never assembles the samples its sparse solves took."""
        if self._assembled is not None or self.params.size == 1:
            return self.matrix[samples], self.rhs[samples]
        return self.layout.assemble(take_samples(self.params, samples, device=False))

    def solve(self, samples, regions):
        """Solve the linear equations of assignments ``regions`` for samples ``samples``, directly.

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
        n = self.layout.size
        count = len(samples)
        if count == 1 and not self.sparse:
            return self._solve_one(samples, regions)
        if not self.sparse or count == 0:
            return self._solve_dense(samples, regions)
        # Systems that share an assignment share a sparsity pattern: the planned sparse elimination
        # takes each group at once (whatever its size, so a sample's answer never depends on its
        # batch); the samples its pivots do not suit go to LAPACK.
        if np.all(regions == regions[:1]):
            groups = [(regions[0], np.arange(count))]
        else:
            distinct, which = np.unique(regions, axis=0, return_inverse=True)
            groups = [(assignment, np.flatnonzero(which.ravel() == g)) for g, assignment in enumerate(distinct)]
        out_x = np.empty((count, n + 1))
        out_ok = np.empty(count, dtype=bool)
        rest = []
        for assignment, members in groups:
            x, ok = self._solve_sparse(samples[members], assignment)
            out_x[members], out_ok[members] = x, ok
            rest.append(members[~ok])
        rest = np.concatenate(rest)
        if rest.size:
            out_x[rest], out_ok[rest] = self._solve_dense(samples[rest], regions[rest])
        return out_x, out_ok

    def _solve_one(self, samples, regions):
        """:meth:`solve` for one system, lean: one LAPACK solve of the stamped matrix (kept per
        assignment when the parameters are the circuit's own, so repeated single solves of an
        unchanged circuit stamp it once) and :func:`~.linear.solve_batch`'s residual test."""
        lay = self.layout
        n = lay.size
        k = int(samples[0])
        key = (id(self.params), self.active_edge, k, regions.tobytes())
        kept = lay.stamped.get(key)
        if kept is None or kept[0] is not self.params:
            matrix, rhs = self.matrix[samples], self.rhs[samples]
            self._stamp(matrix, rhs, samples, regions)
            a, b = np.ascontiguousarray(matrix[0, :n, :n]), np.ascontiguousarray(rhs[0, :n])
            kept = (self.params, a, b, np.abs(a).max(initial=0.0), np.abs(b).max(initial=0.0))
            if self._assembled is not None and not self._assembled[0].flags.writeable:
                # The layout's own parameters (read-only, kept): keep the stamped system too.
                if len(lay.stamped) >= STAMPED_KEPT:
                    lay.stamped.pop(next(iter(lay.stamped)))
                lay.stamped[key] = kept
        _, a, b, a_size, b_size = kept
        out = np.empty((1, n + 1))
        out[0, n] = 0.0
        try:
            x = np.linalg.solve(a, b)
        except np.linalg.LinAlgError:
            out[0, :n] = np.nan
            return out, np.zeros(1, dtype=bool)
        # Finite (the largest magnitude is NaN or infinite otherwise), then the residual test of
        # linear.solve_batch; with x finite, neither step can overflow into a warning.
        x_size = float(np.abs(x).max()) if n else 0.0
        ok = math.isfinite(x_size)
        if ok and n:
            ok = float(np.abs(a @ x - b).max()) <= 1e-8 * (a_size * x_size + b_size) + 1e-300
        out[0, :n] = x if ok else np.nan
        return out, np.array([ok])

    def _solve_dense(self, samples, regions):
        """:meth:`solve` one dense LAPACK solve per system."""
        lay = self.layout
        n = lay.size
        out_x = np.empty((len(samples), n + 1))
        out_ok = np.empty(len(samples), dtype=bool)
        chunk = max(1, WORK_BYTES // (8 * (n + 1) ** 2))
        for start in range(0, len(samples), chunk):
            part = slice(start, start + chunk)
            smp, reg = samples[part], regions[part]
            matrix, rhs = self.systems(smp)
            self._stamp(matrix, rhs, smp, reg)
            x, ok = solve_batch(matrix[:, :n, :n], rhs[:, :n])
            out_x[part, :n] = x
            out_x[part, n] = 0.0
            out_ok[part] = ok
        return out_x, out_ok

    def _solve_sparse(self, samples, assignment):
        """:meth:`solve` for systems of one assignment (N,), through the planned sparse
        elimination of that assignment's pattern (:func:`_sparse_plan`); ``ok`` is False where
        the planned pivots do not suit a sample (the caller solves those densely)."""
        lay = self.layout
        n = lay.size
        positions, elimination, constant, per_sample, device_rhs = _sparse_plan(lay, assignment)
        out_x = np.empty((len(samples), n + 1))
        out_ok = np.empty(len(samples), dtype=bool)
        # Chunks whose working arrays stay in a core's cache (CACHE_BYTES), not merely in WORK_BYTES.
        chunk = max(1, min(WORK_BYTES // (8 * 4 * (elimination.n_slots + n)),
                           max(SPARSE_CHUNK_MIN, CACHE_BYTES // (8 * 2 * (elimination.n_slots + n)))))
        dev = self.dev
        for start in range(0, len(samples), chunk):
            smp = samples[start:start + chunk]
            # The linear part straight into the pattern's entries, samples last, then the device rows.
            values, rhs = lay.entries(self.params, positions, rows=smp)
            values[constant[0]] += constant[1][:, None]
            per_sample.last(np.concatenate([dev["beta"][smp].T, dev["beta_reverse"][smp].T + 1.0]), values)
            device_rhs.last(np.concatenate([self.vbe_on[smp].T, self.vbc_on[smp].T, self.edge[smp].T]), rhs)
            x, ok = elimination.solve(values, rhs)
            out_x[start:start + chunk, :n] = x.T
            out_x[start:start + chunk, n] = 0.0
            out_ok[start:start + chunk] = ok
        return out_x, out_ok

    def solve_ports(self, samples, regions):
        """Same answers as :meth:`solve`, through the transistors' ports: for many assignments of
        few samples.

        Every assignment differs only in the 2N device rows. With a reference assignment whose
        system M0 is regular (all cutoff, else all forward-active), the unknowns that satisfy every
        other row are x = x0 + W·u, where M0·x0 = b0 and M0·W = the 2N unit device rows; an
        assignment's own device rows R·x = d then leave the 2N×2N system (R·W)·u = d - R·x0 (the
        Schur complement on the device rows). One dense solve per sample, then one small solve per
        assignment. Samples whose references are both singular fall back to :meth:`solve`.

        Parameters and returns as for :meth:`solve`.
        """
        lay = self.layout
        n, n_q = lay.size, lay.n_bjt
        count = len(samples)
        out_x = np.full((count, n + 1), np.nan)
        out_ok = np.zeros(count, dtype=bool)
        if count == 0:
            return out_x, out_ok
        units, where = np.unique(samples, return_inverse=True)
        x0, w, ref_ok = self._reference(units)
        direct = ~ref_ok[where]
        if np.any(direct):
            out_x[direct], out_ok[direct] = self.solve(samples[direct], regions[direct])
        port_x0 = x0[:, self.ports]            # (U, N, 5)
        port_w = w[:, self.ports, :]           # (U, N, 5, 2N)
        todo = np.flatnonzero(~direct)
        per_system = 8 * ((n + 1) * 2 * n_q + 12 * n_q * 2 * n_q + n + 1)
        chunk = max(1, WORK_BYTES // per_system)
        for start in range(0, todo.size, chunk):
            k = todo[start:start + chunk]
            u_k = where[k]
            coef, value = self._rows(samples[k], regions[k])
            a = np.einsum("knrp,knpm->knrm", coef, port_w[u_k]).reshape(k.size, 2 * n_q, 2 * n_q)
            b = (value - np.einsum("knrp,knp->knr", coef, port_x0[u_k])).reshape(k.size, 2 * n_q)
            u, ok = solve_batch(a, b)
            out_x[k] = x0[u_k] + np.einsum("knm,km->kn", w[u_k], np.where(ok[:, None], u, 0.0))
            out_ok[k] = ok
        out_x[~out_ok] = np.nan
        return out_x, out_ok

    def _reference(self, units):
        """x0 (U, size + 1) and W (U, size + 1, 2N) of :meth:`solve_ports`, and which are regular
        (computed once per sample)."""
        lay = self.layout
        n, n_q = lay.size, lay.n_bjt
        missing = np.array([u for u in units.tolist() if u not in self._references], dtype=np.intp)
        if missing.size:
            first = lay.n_nodes + lay.n_vs            # the device rows are the last 2N, in port order
            x0 = np.zeros((missing.size, n + 1))
            w = np.zeros((missing.size, n + 1, 2 * n_q))
            ok = np.zeros(missing.size, dtype=bool)
            unit_rows = np.zeros((n, 2 * n_q))
            unit_rows[first + np.arange(2 * n_q), np.arange(2 * n_q)] = 1.0
            for code in (CUTOFF, ACTIVE):
                todo = np.flatnonzero(~ok)
                if not todo.size:
                    break
                smp = missing[todo]
                matrix, rhs = self.systems(smp)
                self._stamp(matrix, rhs, smp, np.full((todo.size, n_q), code, dtype=np.int8))
                both = np.concatenate([rhs[:, :n, None], np.broadcast_to(unit_rows, (todo.size, n, 2 * n_q))],
                                      axis=2)
                sol, good = solve_batch(matrix[:, :n, :n], both)
                x0[todo[good], :n] = sol[good, :, 0]
                w[todo[good], :n] = sol[good, :, 1:]
                ok[todo[good]] = True
            for i, u in enumerate(missing.tolist()):
                self._references[u] = (x0[i], w[i], ok[i])
        x0, w, ok = zip(*(self._references[u] for u in units.tolist()))
        return np.stack(x0), np.stack(w), np.array(ok)

    def _rows(self, samples, regions):
        """The two device rows of every transistor in ``regions`` over its ports (V_B, V_C, V_E,
        I_B, I_C): coefficients (K, N, 2, 5) and right-hand sides (K, N, 2), as :meth:`_stamp`
        writes them into the full system."""
        s = self.layout.sign
        cut, act, sat, rev = (regions == CUTOFF), (regions == ACTIVE), (regions == SATURATION), (regions == REVERSE)
        on = act | sat
        coef = np.zeros(regions.shape + (2, 5))
        value = np.zeros(regions.shape + (2,))
        coef[..., 0, 0] = s * (on | rev)
        coef[..., 0, 1] = -s * rev
        coef[..., 0, 2] = -s * on
        coef[..., 0, 3] = cut
        value[..., 0] = np.where(on, self.vbe_on[samples], 0.0) + np.where(rev, self.vbc_on[samples], 0.0)
        coef[..., 1, 1] = s * sat
        coef[..., 1, 2] = -s * sat
        coef[..., 1, 3] = (np.where(act, -self.dev["beta"][samples], 0.0)
                           + np.where(rev, self.dev["beta_reverse"][samples] + 1.0, 0.0))
        coef[..., 1, 4] = ~sat
        value[..., 1] = np.where(sat, self.edge[samples], 0.0)
        return coef, value

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
        k_count, n_q = regions.shape
        # The quantity and limit slots of the shared check table (regions.QUANTITIES, LIMITS),
        # written into place: (v_be, v_bc, v_ce, v_cb, i_b, i_c) and (V_BE(on), V_BC(on), edge, 0,
        # β·I_B, -V_CE(sat)).
        ports = x[:, self.ports]                     # (K, N, 5): V_B, V_C, V_E, I_B, I_C
        s = lay.sign[:, None]
        quantities = np.empty((k_count, n_q, 6))
        quantities[..., 0] = s.T * (ports[..., 0] - ports[..., 2])
        quantities[..., 1] = s.T * (ports[..., 0] - ports[..., 1])
        quantities[..., 2] = quantities[..., 0] - quantities[..., 1]
        quantities[..., 3] = -quantities[..., 1]
        quantities[..., 4:] = ports[..., 3:]
        if self._bounds is None:
            # The limits that do not depend on the answer, for every sample (all but β·I_B).
            fixed = np.zeros(self.vbe_on.shape + (6,))
            fixed[..., 0], fixed[..., 1], fixed[..., 2] = self.vbe_on, self.vbc_on, self.edge
            fixed[..., 5] = -self.dev["vce_sat"]
            self._bounds = fixed
        bounds = self._bounds[samples]
        bounds[..., 4] = self.dev["beta"][samples] * ports[..., 3]
        reg = regions.astype(np.intp)
        values, limits, margins = self.table.evaluate(quantities, bounds, reg)
        # Rounding tolerance: relative to the largest voltage and the largest current in the answer.
        n_nodes = lay.n_nodes
        with np.errstate(invalid="ignore"):
            size = np.abs(x[:, :lay.size])
            v_scale = np.max(size[:, :n_nodes], axis=1, initial=1.0)
            i_scale = np.max(size[:, n_nodes:], axis=1, initial=0.0)
        tol = np.where(self.table.is_current.take(reg, axis=0), (1e-9 * i_scale + 1e-18)[:, None, None],
                       (1e-9 * v_scale)[:, None, None])
        holds = margins >= -tol
        return values, limits, margins, holds

    def checks_one(self, k: int, regions: list, x: list):
        """:meth:`checks` of one sample in plain floats (a single solve: a few dozen numbers, where
        numpy's per-call cost would dominate), with the check names; the same arithmetic in the
        same order, so the same figures bit for bit.

        Parameters
        ----------
        k : int
            Sample index.
        regions : list of int, length N
        x : list of float, length size + 1
            A finite solution (NaN is not handled here: :meth:`checks` is).

        Returns
        -------
        names, values, limits, margins, holds : list of N lists of 2
        """
        lay = self.layout
        dev = self.dev
        n_nodes = lay.n_nodes
        v_scale = max(1.0, *map(abs, x[:n_nodes])) if n_nodes else 1.0
        i_scale = max(0.0, *map(abs, x[n_nodes:lay.size])) if lay.size > n_nodes else 0.0
        tol_v, tol_i = 1e-9 * v_scale, 1e-9 * i_scale + 1e-18
        vbe_on, vbc_on, edge = self.vbe_on[k].tolist(), self.vbc_on[k].tolist(), self.edge[k].tolist()
        vce_sat, beta = dev["vce_sat"][k].tolist(), dev["beta"][k].tolist()
        rows = self.table.rows
        names, values, limits, margins, holds = [], [], [], [], []
        for j, (s, (b, c, e, ib, ic)) in enumerate(lay.port_lists):
            # The quantity and limit slots of regions.QUANTITIES and LIMITS, as checks() fills them.
            v_be = s * (x[b] - x[e])
            v_bc = s * (x[b] - x[c])
            quantity = (v_be, v_bc, v_be - v_bc, -v_bc, x[ib], x[ic])
            bound = (vbe_on[j], vbc_on[j], edge[j], 0.0, beta[j] * x[ib], -vce_sat[j])
            (q0, l0, above0, current0, npn0, pnp0), (q1, l1, above1, current1, npn1, pnp1) = rows[regions[j]]
            value0, limit0, value1, limit1 = quantity[q0], bound[l0], quantity[q1], bound[l1]
            margin0 = value0 - limit0 if above0 else limit0 - value0
            margin1 = value1 - limit1 if above1 else limit1 - value1
            names.append([npn0, npn1] if s > 0 else [pnp0, pnp1])
            values.append([value0, value1])
            limits.append([limit0, limit1])
            margins.append([margin0, margin1])
            holds.append([margin0 >= -(tol_i if current0 else tol_v), margin1 >= -(tol_i if current1 else tol_v)])
        return names, values, limits, margins, holds

    def check_names(self, regions):
        """Names of the checks of ``regions`` (K, N), as a str array (K, N, 2)."""
        return self.table.check_names(regions, self.layout.sign)

    def consistent(self, samples, regions, x, ok, score: bool = True):
        """True where the solve succeeded and every check of every transistor holds; a violation
        score (number of failed checks, then their size) for ranking near misses (None unless
        ``score``); and the checks themselves (as :meth:`checks` returns them)."""
        checks = self.checks(samples, regions, x)
        values, limits, margins, holds = checks
        good = ok & np.all(holds, axis=(1, 2))
        if not score:
            return good, None, checks
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


def _sparse_plan(layout, assignment):
    """The sparse elimination of one region assignment's system, planned once per layout on the
    circuit's own values (so the pivots depend on the circuit, never on a batch).

    Returns flat positions (row·size + column) of the pattern's entries, the
    :class:`~ampplan.solver.sparse.Elimination`, and the device rows of the assignment as
    :meth:`RegionProblem._stamp` writes them: the constant coefficients (entry indices, values),
    a scatter of the per-sample ones over (-β, β_R + 1) of every transistor (2N values), and a
    scatter of the right-hand sides over (V_BE(on), V_BC(on), edge) (3N values).

    The pattern is the nonzero entries of the stamped matrix: every entry a stamp can touch is
    nonzero for any valid values (conductances, β and the unit incidences never cancel), so it is
    every sample's pattern too."""
    key = assignment.astype(np.int8).tobytes()
    plan = layout.region_plans.get(key)
    if plan is not None:
        return plan
    n = layout.size
    nominal = RegionProblem(layout, layout.parameters())
    matrix, rhs = nominal.matrix.copy(), nominal.rhs.copy()
    nominal._stamp(matrix, rhs, np.zeros(1, dtype=np.intp), assignment[None, :])
    # Kept across layouts too (a plan compiled again, chunk by chunk, has a new layout): by
    # everything the plan is made of, the stamped matrix and where the device rows sit.
    shared = (matrix.tobytes(), key) + tuple(a.tobytes() for a in (layout.q_ib, layout.q_ic, layout.q_b, layout.q_c,
                                                                    layout.q_e, layout.sign))
    plan = _PLANS.get(shared)
    if plan is None:
        rows, cols = np.nonzero(matrix[0, :n, :n])
        slot = np.full((n + 1) * (n + 1), -1, dtype=np.intp)
        slot[rows * (n + 1) + cols] = np.arange(rows.size)
        n_q = layout.n_bjt
        constant: dict = {}
        varying, right = [], []          # (entry, source, weight), (row, source, weight)
        for j in range(n_q):
            r, sg = int(assignment[j]), float(layout.sign[j])
            ib, ic, b, c, e = (int(a[j]) for a in (layout.q_ib, layout.q_ic, layout.q_b, layout.q_c, layout.q_e))
            terms = []
            if r == CUTOFF:
                terms.append((ib, ib, 1.0))
            elif r in (ACTIVE, SATURATION):
                terms += [(ib, b, sg), (ib, e, -sg)]
                right.append((ib, j, 1.0))
            else:
                terms += [(ib, b, sg), (ib, c, -sg)]
                right.append((ib, n_q + j, 1.0))
            if r != SATURATION:
                terms.append((ic, ic, 1.0))
            if r == ACTIVE:
                varying.append((slot[ic * (n + 1) + ib], j, -1.0))
            elif r == REVERSE:
                varying.append((slot[ic * (n + 1) + ib], n_q + j, 1.0))
            else:
                if r == SATURATION:
                    terms += [(ic, c, sg), (ic, e, -sg)]
                    right.append((ic, 2 * n_q + j, 1.0))
            for row, col, value in terms:
                if col < n:
                    constant[(row, col)] = constant.get((row, col), 0.0) + value
        kept = [(slot[row * (n + 1) + col], value) for (row, col), value in constant.items() if value != 0.0]
        pick = lambda items, k: np.array([t[k] for t in items])  # noqa: E731
        plan = (rows * n + cols, Elimination(n, rows, cols, matrix[0, rows, cols]),
                (pick(kept, 0).astype(np.intp), pick(kept, 1).astype(float)),
                Scatter(pick(varying, 0), pick(varying, 1), pick(varying, 2)),
                Scatter(pick(right, 0), pick(right, 1), pick(right, 2)))
        _PLANS[shared] = plan
        while len(_PLANS) > _PLANS_KEPT:
            _PLANS.pop(next(iter(_PLANS)))
    layout.region_plans[key] = plan
    return plan


#: Sparse plans by circuit and assignment, oldest first; at most _PLANS_KEPT are kept.
_PLANS: dict = {}
_PLANS_KEPT = 64


@functools.lru_cache(maxsize=None)
def all_assignments(n: int) -> np.ndarray:
    """Every region assignment of n transistors, shape (4^n, n), all forward-active first (read-only).

    Called only for n <= ENUMERATION_LIMIT (4^5 = 1024 rows).
    """
    order = (ACTIVE, CUTOFF, SATURATION, REVERSE)
    table = np.array(list(itertools.product(order, repeat=n)), dtype=np.int8).reshape(4 ** n, n)
    table.flags.writeable = False
    return table


@functools.lru_cache(maxsize=64)
def _changes(n: int, distance: int):
    """How each neighbour of a centre differs from it: (count, rows, columns, steps), read-only.

    ``count`` is 1 + 3n (+ 9·n(n-1)/2 for distance 2); row 0 is the centre itself. Entry i adds
    ``steps[i]`` (mod 4) to the region code in column ``columns[i]`` of neighbour ``rows[i]``.
    """
    rows, cols, steps = [], [], []
    count = 1
    for d in range(1, distance + 1):
        for who in itertools.combinations(range(n), d):
            for what in itertools.product(range(1, 4), repeat=d):
                rows += [count] * d
                cols += list(who)
                steps += list(what)
                count += 1
    out = (count, np.array(rows, dtype=np.intp), np.array(cols, dtype=np.intp), np.array(steps, dtype=np.int8))
    for arr in out[1:]:
        arr.flags.writeable = False
    return out


def neighbours(centres: np.ndarray, distance: int) -> np.ndarray:
    """Each centre and the assignments that differ from it in 1..distance transistors.

    Parameters
    ----------
    centres : ndarray of int8, shape (K, N)

    Returns
    -------
    ndarray of int8, shape (K, C, N)
        C = 1 + 3N (+ 9·N(N-1)/2 for distance 2); index 0 is the centre.
    """
    k, n = centres.shape
    count, rows, cols, steps = _changes(n, distance)
    out = np.repeat(centres[:, None, :], count, axis=1)
    out[:, rows, cols] = (out[:, rows, cols] + steps) % 4
    return out


def hamming(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Number of transistors whose region differs, along the last axis."""
    return np.sum(a != b, axis=-1)


@dataclasses.dataclass
class Search:
    """Outcome of :func:`search` for the samples it was given (arrays aligned with them).

    Attributes
    ----------
    regions : ndarray of int8, shape (K, N)
        The consistent assignment found, else the last one tried.
    found : ndarray of bool, shape (K,)
    x : ndarray, shape (K, size + 1)
        Direct solution of ``regions`` (stale where ``settle`` changed them; see ``stale``).
    ok : ndarray of bool, shape (K,)
    checks : list of 4 ndarray (K, N, 2)
        Values, limits, margins and holds of the direct solution (see :meth:`RegionProblem.checks`).
    stale : ndarray of bool, shape (K,)
        Samples whose ``regions`` changed after their last direct solve (``x``, ``ok`` and
        ``checks`` are to be renewed).
    ties : dict of int -> ndarray (C, N)
        Samples with several consistent assignments (the caller chooses with :meth:`settle`).
    misses : dict of int -> tuple
        Samples with none: the best-scoring assignments tried (candidates, x, ok, score).
    solves : int
        Linear systems solved (direct and through the ports).
    deepest : int
        The furthest step any sample needed: 1 start, 2 repair, 3 local search.
    """
    regions: np.ndarray
    found: np.ndarray
    x: np.ndarray
    ok: np.ndarray
    checks: list
    stale: np.ndarray
    ties: dict
    misses: dict
    solves: int
    deepest: int

    def settle(self, k: int, assignment: np.ndarray) -> None:
        """Record ``assignment`` as sample k's choice (its x is solved again later)."""
        self.regions[k] = assignment
        self.found[k] = True
        self.stale[k] = True
        self.ties.pop(k, None)
        self.misses.pop(k, None)


def search(problem: RegionProblem, rows: np.ndarray, starts: np.ndarray) -> Search:
    """Steps 1–3 of the search (module docstring) for samples ``rows`` of ``problem``.

    Parameters
    ----------
    rows : ndarray of int, shape (K,)
        Sample indices into ``problem``.
    starts : ndarray of int8, shape (K, N)
        The assignment each sample starts from.
    """
    count, n_q = starts.shape
    regions = starts.copy()
    x, ok = problem.solve(rows, regions)
    good, _, checks = problem.consistent(rows, regions, x, ok, score=False)
    checks = list(checks)
    solves, deepest = count, 1
    if good.all():
        # Every sample consistent at its start (most amplifiers): nothing to repair or search.
        return Search(regions=regions, found=good, x=x, ok=ok, checks=checks, stale=np.zeros(count, dtype=bool),
                      ties={}, misses={}, solves=solves, deepest=deepest)
    # Repair, vectorised over the samples still failing; ``history`` holds what each has tried.
    active = np.flatnonzero(~good)
    history = [regions[active]]
    for _ in range(REPAIR_ROUNDS):
        if not active.size:
            break
        deepest = 2
        new = problem.repair(rows[active], regions[active], x[active])
        repeat = np.zeros(active.size, dtype=bool)
        for past in history:
            repeat |= np.all(new == past, axis=1)
        active, new = active[~repeat], new[~repeat]
        history = [h[~repeat] for h in history]
        if not active.size:
            break
        regions[active] = new
        x[active], ok[active] = problem.solve(rows[active], new)
        solves += active.size
        hit, _, renewed = problem.consistent(rows[active], new, x[active], ok[active], score=False)
        for whole, part in zip(checks, renewed):
            whole[active] = part
        good[active] = hit
        history = [h[~hit] for h in history] + [new[~hit]]
        active = active[~hit]
    result = Search(regions=regions, found=good, x=x, ok=ok, checks=checks, stale=np.zeros(count, dtype=bool), ties={},
                    misses={}, solves=solves, deepest=deepest)
    left = np.flatnonzero(~good)
    if left.size:
        result.deepest = 3
        _local_search(problem, rows, starts, result, left)
    return result


def _local_search(problem, rows, starts, result, left):
    """Step 3 for the samples ``left`` (indices into ``rows``): every assignment when N is small;
    else a greedy descent from the last repaired assignment, then the neighbourhoods of the start
    and of where the descent stopped."""
    n_q = starts.shape[1]
    if n_q <= ENUMERATION_LIMIT:
        every = all_assignments(n_q)
        _try_each(problem, rows, result, left, lambda ks: np.broadcast_to(every, (ks.size,) + every.shape))
        return
    left = _repair_one_at_a_time(problem, rows, starts, result, left)
    if left.size:
        left = _descend(problem, rows, result, left)
    if left.size:
        distance = search_distance(n_q)
        _try_each(problem, rows, result, left, lambda ks: np.concatenate(
            [neighbours(starts[ks], distance), neighbours(result.regions[ks], distance)], axis=1))


def _repair_one_at_a_time(problem, rows, starts, result, left):
    """Repair again from the start, one transistor per step: the first transistor (in circuit
    order) with a failed check moves as :meth:`RegionProblem.repair` says, which does not
    oscillate the way moving every failing transistor at once can (a least-index pivoting rule, as
    in Murty's method for complementarity problems, from memory). Vectorised over the samples
    ``left``, through the ports, at most 4N + 8 steps.

    Returns the samples that found nothing (``result.regions`` keeps the last repaired assignment)."""
    n_q = starts.shape[1]
    current = starts[left].copy()
    active = left
    for _ in range(4 * n_q + 8):
        smp = rows[active]
        x, ok = problem.solve_ports(smp, current)
        result.solves += active.size
        good, _, checks = problem.consistent(smp, current, x, ok)
        settled = np.zeros(active.size, dtype=bool)
        for i in np.flatnonzero(good):
            settled[i] = _settle_hits(problem, rows, result, active[i], current[i:i + 1])
        failing = ~np.all(checks[3], axis=2)
        first = np.argmax(failing, axis=1)
        proposal = problem.repair(smp, current, x)
        pick = np.arange(active.size)
        keep = ~settled & ok & (proposal[pick, first] != current[pick, first])
        current[pick, first] = proposal[pick, first]
        active, current = active[keep], current[keep]
        if not active.size:
            break
    return np.array([k for k in left if not result.found[k]], dtype=np.intp)


def _descend(problem, rows, result, left):
    """Greedy descent, vectorised over the samples ``left``: try every assignment one region change
    away, stop at any consistent one, else move to the one with the best score (fewest failed
    checks, then the smallest violation) while that improves, at most 2N moves.

    Returns the samples that found nothing (their ``result.regions`` is where they stopped)."""
    n_q = result.regions.shape[1]
    current = result.regions[left].copy()
    active = left
    unresolved = []
    for _ in range(2 * n_q):
        cands = neighbours(current, 1)
        count = cands.shape[1]
        flat = cands.reshape(-1, n_q)
        smp = np.repeat(rows[active], count)
        xc, okc = problem.solve_ports(smp, flat)
        result.solves += len(smp)
        good, score, _ = problem.consistent(smp, flat, xc, okc)
        good, score = good.reshape(active.size, count), score.reshape(active.size, count)
        settled = np.zeros(active.size, dtype=bool)
        for i in np.flatnonzero(np.any(good, axis=1)):
            settled[i] = _settle_hits(problem, rows, result, active[i], cands[i][good[i]])
        best = np.argmin(score, axis=1)
        moves = ~settled & (score[np.arange(active.size), best] < score[:, 0])
        unresolved.append(active[~settled & ~moves])
        result.regions[active[~settled & ~moves]] = current[~settled & ~moves]
        active, current = active[moves], cands[np.flatnonzero(moves), best[moves]]
        if not active.size:
            break
    result.regions[active] = current
    unresolved.append(active)
    return np.concatenate(unresolved)


def _try_each(problem, rows, result, left, candidates):
    """Try the assignments ``candidates(ks)`` (K, C, N) of the samples ``left``, in groups that fit
    :data:`WORK_BYTES`; settle each sample with what holds, or record its near misses."""
    n_q = result.regions.shape[1]
    n = problem.layout.size
    per_sample = candidates(left[:1]).shape[1]
    group = max(1, WORK_BYTES // (8 * per_sample * (n + 1) * 2))
    for start in range(0, left.size, group):
        ks = left[start:start + group]
        cands = candidates(ks)
        flat = cands.reshape(-1, n_q)
        smp = np.repeat(rows[ks], per_sample)
        xc, okc = problem.solve_ports(smp, flat)
        result.solves += len(smp)
        good, score, _ = problem.consistent(smp, flat, xc, okc)
        good, score = good.reshape(ks.size, per_sample), score.reshape(ks.size, per_sample)
        xc, okc = xc.reshape(ks.size, per_sample, -1), okc.reshape(ks.size, per_sample)
        # Per-sample bookkeeping, only for the few samples the repair could not settle.
        for i, k in enumerate(ks):
            if not _settle_hits(problem, rows, result, k, cands[i][good[i]]):
                best = np.argsort(score[i], kind="stable")[:3]
                result.misses[k] = (cands[i][best].copy(), xc[i][best], okc[i][best], score[i][best])


def _settle_hits(problem, rows, result, k, hits):
    """Settle sample k with the consistent assignments ``hits`` (C, N) found through the ports,
    once a direct solve confirms them (the verdict is the direct solve's, as for every answer
    reported): one settles it, several are a tie for the caller. False when none is confirmed."""
    hits = _unique_rows(hits)
    if hits.shape[0]:
        samples = np.full(hits.shape[0], rows[k])
        hx, hok = problem.solve(samples, hits)
        result.solves += hits.shape[0]
        verified, _, _ = problem.consistent(samples, hits, hx, hok)
        hits = hits[verified]
    if hits.shape[0] == 1:
        result.settle(k, hits[0])
    elif hits.shape[0] > 1:
        result.ties[k] = hits
    return hits.shape[0] > 0


def _unique_rows(a: np.ndarray) -> np.ndarray:
    """The distinct rows of ``a`` in order of first appearance."""
    if a.shape[0] < 2:
        return a
    _, first = np.unique(a, axis=0, return_index=True)
    return a[np.sort(first)]


def alternatives(problem: RegionProblem, chosen: np.ndarray):
    """Consistent assignments other than ``chosen`` (N,) of sample 0: every assignment when N is
    small, else those within :func:`search_distance` region changes.

    Returns
    -------
    candidates : ndarray (C, N), x : ndarray (C, size + 1), consistent : ndarray of bool (C,)
        ``candidates[0]`` is ``chosen`` itself; x through the ports.
    """
    n_q = chosen.shape[0]
    if n_q <= ENUMERATION_LIMIT:
        cands = np.concatenate([chosen[None, :], all_assignments(n_q)])
    else:
        cands = neighbours(chosen[None, :], search_distance(n_q))[0]
    smp = np.zeros(cands.shape[0], dtype=np.intp)
    x, ok = problem.solve_ports(smp, cands)
    good, _, _ = problem.consistent(smp, cands, x, ok)
    good &= np.any(cands != chosen, axis=1)
    return cands, x, good

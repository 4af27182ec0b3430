"""Sparse LU of many matrices that share one sparsity pattern, in one fixed pivot order.

A batch of circuit equations (tolerance samples, sweep points, the variants of the incremental
systems) is many small sparse matrices with the same pattern. LAPACK solves them one dense
matrix at a time; here the elimination is planned once per pattern and then run on every sample
at once, with the samples on the last axis, so each step of the elimination is one vectorised
numpy operation over all samples (no matrix products, so no BLAS threads either).

The plan (:class:`Elimination`) is Gaussian elimination with threshold pivoting in the Markowitz
order (Duff, Erisman & Reid, *Direct Methods for Sparse Matrices*, the chapters on pivoting for
sparsity and stability, from memory): at each step, among the entries at least :data:`THRESHOLD`
times the largest of their column, the one whose row and column hold the fewest other entries.
It is chosen on representative values given once; every sample then uses the same pivots. Steps
that touch disjoint entries are grouped into levels, so a level is a handful of numpy calls.

The error bound of such an elimination holds while its multipliers stay bounded (Higham,
*Accuracy and Stability of Numerical Algorithms*, the chapter on LU factorisation and growth
factors, from memory). Every sample's multipliers are checked against 1/:data:`RUN_THRESHOLD`:
a sample whose planned pivot is too small for its own values (or zero), or whose answer is not
finite or fails the residual test of :func:`ampplan.solver.linear.solve_batch` (a nearly
singular matrix), is reported as not solved, for the caller to solve densely
(:func:`ampplan.solver.linear.solve_batch`), so the fixed order never costs accuracy. Each
sample's arithmetic reads only its own values: its answer does not depend on the batch, bit for
bit.
"""

from __future__ import annotations

import threading
from typing import NamedTuple

import numpy as np

from .assembly import Scatter
from .program import Program

__all__ = ["Elimination", "Schedule", "scratch", "THRESHOLD", "RUN_THRESHOLD", "RESIDUAL"]

#: A pivot must be at least this fraction of the largest entry of its column (representative values).
THRESHOLD = 0.1
#: In a sample, every multiplier of the elimination must be at most 1/RUN_THRESHOLD in size (the
#: pivot at least this fraction of every entry it eliminates), else the sample is not solved here.
RUN_THRESHOLD = 0.01
#: A sample whose residual max|A·x - b| exceeds this times max|A|·max|x| + max|b| is reported as
#: singular (the test :func:`ampplan.solver.linear.solve_batch` applies).
RESIDUAL = 1e-8

#: Working arrays of :meth:`Elimination.solve`, per thread, by name and shape. A batch solves
#: block after block of the same shape; a fresh array of a few megabytes each time is a fresh
#: mapping from the system, and touching its pages for the first time cost more than the
#: elimination's arithmetic. At most _SCRATCH_KEPT arrays of at most _SCRATCH_BYTES each are kept.
_SCRATCH = threading.local()
_SCRATCH_KEPT = 6
_SCRATCH_BYTES = 8 * 2**20


def scratch(name: str, shape: tuple) -> np.ndarray:
    """A working array of ``shape`` for this thread; its contents are undefined, and the next call
    with the same name and shape (in this thread) returns it again, so use it before that."""
    kept = getattr(_SCRATCH, "arrays", None)
    if kept is None:
        kept = _SCRATCH.arrays = {}
    key = (name, shape)
    array = kept.pop(key, None)
    if array is None:
        array = np.empty(shape)
        if array.nbytes > _SCRATCH_BYTES:
            return array
    kept[key] = array             # most recently used last
    while len(kept) > _SCRATCH_KEPT:
        kept.pop(next(iter(kept)))
    return array


class Schedule(NamedTuple):
    """The steps of an :class:`Elimination` restricted by :meth:`Elimination.schedule_for`.

    Attributes
    ----------
    entries, fill : ndarray of int or None
        Entry slots to load and fill-in slots to zero (None: all).
    factor_levels : list
        The factorisation's levels, as :attr:`Elimination._factor_levels`.
    multipliers : ndarray of int
        The L slots computed (checked against 1/:data:`RUN_THRESHOLD`).
    forward, backward : list
        The substitutions' levels.
    computed : ndarray of int or None
        The unknowns computed (None: all).
    """
    entries: np.ndarray | None
    fill: np.ndarray | None
    factor_levels: list
    multipliers: np.ndarray
    forward: list
    backward: list
    computed: np.ndarray | None


class Elimination:
    """A planned LU factorisation for square matrices of order ``n`` with a given pattern.

    Parameters
    ----------
    n : int
        Order of the matrices.
    rows, cols : array_like of int, shape (P,)
        Positions of the entries that may be non-zero (distinct).
    representative : array_like of float, shape (P,)
        Typical values of those entries; the pivots are chosen on them. An entry that is zero here
        may still be non-zero in a sample (it is part of the pattern); it is never chosen as pivot.
    block : int, optional
        The matrix is block diagonal with blocks of this order (several independent systems solved
        as one): each block is planned on its own and their steps run side by side.

    Attributes
    ----------
    singular : bool
        True when the representative matrix has no pivot left at some step (structurally or
        numerically singular): :meth:`solve` then reports every sample as not solved.
    """

    def __init__(self, n: int, rows, cols, representative, block: int | None = None):
        self.n = n
        rows = np.asarray(rows, dtype=np.intp)
        cols = np.asarray(cols, dtype=np.intp)
        representative = np.asarray(representative, dtype=float)
        self.positions = rows * n + cols
        self._cols = cols
        self._rows = Scatter(rows, np.arange(rows.size), np.ones(rows.size))
        block = n if block is None else block
        self.singular = False
        steps, fill = [], []
        for first in range(0, n, block):
            inside = (rows >= first) & (rows < first + block)
            if np.any((cols[inside] < first) | (cols[inside] >= first + block)):
                raise ValueError("an entry lies outside its diagonal block")
            local_steps, local_fill = self._plan(block, rows[inside] - first, cols[inside] - first,
                                                 representative[inside])
            steps += [(p + first, q + first, below + first, right + first) for p, q, below, right in local_steps]
            fill.append((local_fill // block + first) * n + local_fill % block + first)
        self.steps = steps
        if self.singular:
            self.n_slots = 0
            return
        extra = np.setdiff1d(np.concatenate(fill), self.positions)
        keys = np.concatenate([self.positions, extra])
        self.n_slots = keys.size
        order = np.argsort(keys)
        self._keys, self._slots = keys[order], order
        self._schedule(steps)

    def _slot(self, i, j):
        key = np.asarray(i, dtype=np.intp) * self.n + np.asarray(j, dtype=np.intp)
        return self._slots[np.searchsorted(self._keys, key)]

    # -- planning ---------------------------------------------------------------------------------
    def _plan(self, n, rows, cols, representative):
        """Pivots of one block: (p, q, rows below, columns right) per step, and the filled pattern
        (flat positions in the block)."""
        dense = np.zeros((n, n))
        dense[rows, cols] = representative
        pattern = np.zeros((n, n), dtype=bool)
        pattern[rows, cols] = True
        free_r = np.ones(n, dtype=bool)
        free_c = np.ones(n, dtype=bool)
        steps = []
        for _ in range(n):
            live = pattern & free_r[:, None] & free_c[None, :]
            size = np.abs(np.where(live, dense, 0.0))
            col_max = size.max(axis=0)
            ok = live & (size > 0.0) & (size >= THRESHOLD * col_max[None, :])
            if not ok.any():
                self.singular = True
                break
            row_count = live.sum(axis=1)
            col_count = live.sum(axis=0)
            cost = (row_count[:, None] - 1) * (col_count[None, :] - 1)
            # Fewest fill-ins first, then the larger entry against its column, then the first position.
            with np.errstate(divide="ignore", invalid="ignore"):
                ratio = np.where(ok, size / np.where(col_max > 0, col_max, 1.0)[None, :], 0.0)
            key = np.where(ok, cost.astype(float) - ratio * 0.5, np.inf)
            p, q = np.unravel_index(int(np.argmin(key)), key.shape)
            below = np.flatnonzero(live[:, q] & (np.arange(n) != p))
            right = np.flatnonzero(live[p, :] & (np.arange(n) != q))
            if below.size and right.size:
                factor = dense[below, q] / dense[p, q]
                dense[np.ix_(below, right)] -= factor[:, None] * dense[p, right][None, :]
                pattern[np.ix_(below, right)] = True
            dense[below, q] /= dense[p, q]
            free_r[p] = False
            free_c[q] = False
            steps.append((int(p), int(q), below, right))
        return steps, np.flatnonzero(pattern.ravel())

    def _schedule(self, steps):
        """Group the factorisation and both substitutions into levels of independent steps."""
        at = self._slot
        # Factorisation: a step waits for the last writer of every slot it reads or writes.
        written: dict[int, int] = {}
        levels: list[list] = []
        lower: dict[int, list] = {}     # row -> [(slot of l[row, q_m], p_m)]
        for p, q, below, right in steps:
            piv = int(at(p, q))
            col = at(below, q)
            row = at(p, right)
            target = at(below[:, None], right[None, :]).ravel()
            touched = np.concatenate([[piv], col, row, target]).tolist()
            level = 1 + max((written.get(s, -1) for s in touched), default=-1)
            for s in col.tolist() + target.tolist():
                written[s] = level
            while len(levels) <= level:
                levels.append([[], [], [], [], []])
            entry = levels[level]
            entry[0].append(col)
            entry[1].append(np.full(col.size, piv))
            entry[2].append(target)
            entry[3].append(np.repeat(col, right.size))
            entry[4].append(np.tile(row, below.size))
            for i, c in zip(below.tolist(), col.tolist()):
                lower.setdefault(i, []).append((c, p))
        cat = lambda parts: np.concatenate(parts).astype(np.intp) if parts else np.zeros(0, np.intp)  # noqa: E731
        self._factor_levels = [tuple(cat(part) for part in entry) for entry in levels]
        self._multipliers = cat([entry[0] for entry in self._factor_levels])

        # Row-oriented substitutions. Forward (L·y = b, unit diagonal): y[p_k] = b[p_k] minus
        # l[p_k, q_m]·y[p_m] over the earlier steps m whose column held an entry in row p_k.
        self._lower = lower
        self._pivot_rows = [p for p, _, _, _ in steps]
        self._forward = self._forward_levels(None)
        # Backward (U·x = y), last step first: x[q_k] = (y[p_k] - u[p_k, j]·x[j] summed over the
        # columns j of row p_k pivoted later, fill included) / u[p_k, q_k].
        self._upper = [(q, p, int(at(p, q)), list(zip(at(p, right).tolist(), right.tolist())) if right.size else [])
                       for p, q, _, right in reversed(steps)]
        self._backward = self._backward_levels(None)
        self._schedules: dict = {}
        self._programs: dict = {}

    def _backward_levels(self, needed):
        """The backward substitution's levels; with ``needed`` (unknowns, or None for all), only
        those unknowns are computed (each needs the later ones its row reads: the caller's set is
        closed under that)."""
        level_of_col: dict[int, int] = {}
        grouped: list[list] = []
        for q, p, piv, deps in self._upper:
            if needed is not None and q not in needed:
                continue
            level = 1 + max((level_of_col[j] for _, j in deps), default=-1)
            level_of_col[q] = level
            while len(grouped) <= level:
                grouped.append([])
            grouped[level].append((q, p, piv, deps))
        out = []
        for group in grouped:
            targets, passes = self._pack([(q, deps) for q, _, _, deps in group])
            sources = np.array([p for _, p, _, _ in group], dtype=np.intp)
            pivots = np.array([piv for _, _, piv, _ in group], dtype=np.intp)
            out.append((targets, sources, pivots, passes))
        return out

    def _forward_levels(self, nonzero, rows=None):
        """The forward substitution's levels; with ``nonzero`` (rows of y that may be non-zero, or
        None for all), the terms that read a y known to be zero are left out; with ``rows``, only
        those rows of y are computed (closed under what they read)."""
        level_of_row: dict[int, int] = {}
        grouped: list[list] = []
        for p in self._pivot_rows:
            if rows is not None and p not in rows:
                continue
            deps = self._lower.get(p, [])
            if nonzero is not None:
                deps = [(c, pm) for c, pm in deps if pm in nonzero]
            level = 1 + max((level_of_row[pm] for _, pm in deps), default=-1)
            level_of_row[p] = level
            while len(grouped) <= level:
                grouped.append([])
            grouped[level].append((p, deps))
        return [self._pack(group) for group in grouped]

    def schedule_for(self, rhs_rows=None, wanted=None) -> "Schedule":
        """The elimination restricted to what a caller needs (kept per request).

        Parameters
        ----------
        rhs_rows : array_like of int, optional
            The only rows in which the right-hand side may be non-zero, in every sample. y[p] is
            then zero, exactly, unless b[p] or a y it reads is not, and a term l·y that reads a
            zero y changes nothing (l is finite in every sample :meth:`solve` reports as solved:
            each multiplier it uses is checked), so it is left out.
        wanted : array_like of int, optional
            The only unknowns the caller reads. Only they, the unknowns their rows read in the
            backward substitution, the y those read, and the factor entries all of these need
            (traced back through every update that writes them) are computed; the rest of x is
            left undefined.

        The entries a wanted unknown depends on go through the same operations in the same order
        as in the full elimination, so they come out the same, bit for bit (up to the sign of a
        zero). The incremental systems' right-hand sides have one or two entries per variant and
        their callers read a few unknowns of each.
        """
        rows_key = None if rhs_rows is None else np.unique(np.asarray(rhs_rows, dtype=np.intp))
        wanted_key = None if wanted is None else np.unique(np.asarray(wanted, dtype=np.intp))
        key = (None if rows_key is None else rows_key.tobytes(), None if wanted_key is None else wanted_key.tobytes())
        schedule = self._schedules.get(key)
        if schedule is not None:
            return schedule
        nonzero = None
        if rows_key is not None:
            nonzero = set(rows_key.tolist())
            for p in self._pivot_rows:
                if p not in nonzero and any(pm in nonzero for _, pm in self._lower.get(p, [])):
                    nonzero.add(p)
        if wanted_key is None:
            schedule = Schedule(None, None, self._factor_levels, self._multipliers, self._forward_levels(nonzero),
                                self._backward, None)
        else:
            # Unknowns: the wanted ones and every later one their rows read.
            row_of = {q: deps for q, _, _, deps in self._upper}
            needed = set(wanted_key.tolist())
            stack = list(needed)
            while stack:
                for _, j in row_of.get(stack.pop(), []):
                    if j not in needed:
                        needed.add(j)
                        stack.append(j)
            upper = [(q, p, piv, deps) for q, p, piv, deps in self._upper if q in needed]
            # Rows of y those read, and the y rows those read (zero ones left out).
            rows = {p for _, p, _, _ in upper}
            stack = list(rows)
            while stack:
                for _, pm in self._lower.get(stack.pop(), []):
                    if pm not in rows and (nonzero is None or pm in nonzero):
                        rows.add(pm)
                        stack.append(pm)
            # Factor slots read by both substitutions, then every update that writes a needed
            # slot, last level first (a level's steps are independent; its divisions precede its
            # updates, which read the divided column).
            slots = {piv for _, _, piv, _ in upper} | {c for _, _, _, deps in upper for c, _ in deps}
            slots |= {c for p in rows for c, pm in self._lower.get(p, []) if nonzero is None or pm in nonzero}
            kept_levels = []
            for col, piv, target, left, right in reversed(self._factor_levels):
                used = np.array([t in slots for t in target.tolist()], dtype=bool)
                slots.update(left[used].tolist())
                slots.update(right[used].tolist())
                divided = np.array([c in slots for c in col.tolist()], dtype=bool)
                slots.update(piv[divided].tolist())
                kept_levels.append((col[divided], piv[divided], target[used], left[used], right[used]))
            kept_levels = [level for level in reversed(kept_levels) if level[0].size or level[2].size]
            slots_array = np.array(sorted(slots), dtype=np.intp)
            count = self.positions.size
            multipliers = np.concatenate([level[0] for level in kept_levels]) if kept_levels else np.zeros(0, np.intp)
            schedule = Schedule(slots_array[slots_array < count], slots_array[slots_array >= count], kept_levels,
                                multipliers.astype(np.intp), self._forward_levels(nonzero, rows),
                                self._backward_levels(needed), np.array(sorted(needed), dtype=np.intp))
        self._schedules[key] = schedule
        return schedule

    @staticmethod
    def _pack(group):
        """A level of a substitution: its targets, and its terms in passes in which each target
        occurs at most once (target, coefficient slot, source) for one indexed update per pass."""
        targets = np.array([t for t, _ in group], dtype=np.intp)
        passes = []
        for k in range(max((len(deps) for _, deps in group), default=0)):
            chosen = [(t, deps[k]) for t, deps in group if len(deps) > k]
            passes.append((np.array([t for t, _ in chosen], dtype=np.intp),
                           np.array([c for _, (c, _) in chosen], dtype=np.intp),
                           np.array([src for _, (_, src) in chosen], dtype=np.intp)))
        return targets, passes

    # -- running ----------------------------------------------------------------------------------
    def factor(self, values: np.ndarray, take=None, out=None, schedule: "Schedule | None" = None) -> np.ndarray:
        """LU factors of every sample.

        Parameters
        ----------
        values : ndarray, shape (P, S)
            The pattern's entries (in the order of ``rows``, ``cols``) for S samples.
        take : ndarray of int, shape (P,), optional
            The entries are ``values[take]`` (entries that share a value given once).
        out : ndarray, shape (n_slots, S), optional
            Where to write the factors (a new array by default).
        schedule : Schedule, optional
            Of :meth:`schedule_for`: only the slots it needs are computed (the rest undefined).

        Returns
        -------
        ndarray, shape (n_slots, S)
            L (below the pivots, unit diagonal implied) and U in the planned slots.
        """
        s_count = values.shape[1]
        count = self.positions.size
        a = np.empty((self.n_slots, s_count)) if out is None else out
        if schedule is None or schedule.entries is None:
            if take is None:
                a[:count] = values
            else:
                np.take(values, take, axis=0, out=a[:count])
            a[count:] = 0.0
        else:
            a[schedule.entries] = values[schedule.entries if take is None else take[schedule.entries]]
            a[schedule.fill] = 0.0
        levels = self._factor_levels if schedule is None else schedule.factor_levels
        with np.errstate(all="ignore"):
            for col, piv, target, left, right in levels:
                a[col] /= a[piv]
                if target.size:
                    a[target] -= a[left] * a[right]
        return a

    def substitute(self, factors: np.ndarray, rhs: np.ndarray, schedule: "Schedule | None" = None,
                   out=None) -> np.ndarray:
        """x with A·x = rhs from :meth:`factor`'s factors; rhs and x of shape (n, S); only the
        unknowns of a ``schedule`` of :meth:`schedule_for` when given; x written into ``out``
        when given."""
        y = scratch("forward", rhs.shape)
        x = np.empty(rhs.shape) if out is None else out
        forward = self._forward if schedule is None else schedule.forward
        backward = self._backward if schedule is None else schedule.backward
        with np.errstate(all="ignore"):
            for targets, passes in forward:
                y[targets] = rhs[targets]
                for target, coef, source in passes:
                    y[target] -= factors[coef] * y[source]
            for targets, sources, pivots, passes in backward:
                x[targets] = y[sources]
                for target, coef, source in passes:
                    x[target] -= factors[coef] * x[source]
                x[targets] /= factors[pivots]
        return x

    def solve(self, values: np.ndarray, rhs: np.ndarray, check_residual: bool = True, take=None,
              rhs_rows=None, wanted=None, out=None) -> tuple[np.ndarray, np.ndarray]:
        """Solve A·x = rhs for every sample.

        Parameters
        ----------
        values : ndarray, shape (P, S)
        rhs : ndarray, shape (n, S)
        check_residual : bool
            Also apply the residual test (about as costly as the solve itself for large batches
            of small systems; an exactly singular matrix is caught without it).
        take : ndarray of int, shape (P,), optional
            As for :meth:`factor`.
        rhs_rows, wanted : array_like of int, optional
            The only rows in which ``rhs`` may be non-zero, in every sample, and the only unknowns
            the caller reads (see :meth:`schedule_for`); with ``wanted``, the other rows of x are
            undefined and the residual test is not available.
        out : ndarray, shape (n, S), optional
            Where to write x (a new array by default).

        Returns
        -------
        x : ndarray, shape (n, S)
        ok : ndarray of bool, shape (S,)
            False where the answer is not finite, a multiplier of the elimination exceeds
            1/:data:`RUN_THRESHOLD` (the planned pivot is too small for that sample's column, so
            the error bound of the elimination no longer holds) or the residual exceeds
            :data:`RESIDUAL` of the equations' scale: solve those samples another way (NaN here).
        """
        s_count = rhs.shape[1]
        if self.singular:
            return np.full(rhs.shape, np.nan), np.zeros(s_count, dtype=bool)
        if wanted is not None and check_residual:
            raise ValueError("the residual test needs every unknown: give wanted=None")
        program = self._program(rhs_rows, wanted, take, values.shape[0])
        work = program.run(values, rhs, scratch("registers", (program.registers, s_count)))
        x = np.empty(rhs.shape) if out is None else out
        if program.unknowns.size == self.n and x.flags.c_contiguous:
            np.take(work, program.unknown_registers, axis=0, out=x)     # every unknown, in order
        else:
            x[program.unknowns] = work[program.unknown_registers]
        with np.errstate(all="ignore"):
            ok = np.all(np.isfinite(work[program.unknown_registers]), axis=0)
            if program.multiplier_registers.size:
                ok &= np.all(np.abs(work[program.multiplier_registers]) <= 1.0 / RUN_THRESHOLD, axis=0)
        if take is not None and check_residual:
            values = values[take]
        if check_residual:
            with np.errstate(all="ignore"):
                # The residual test of linear.solve_batch, so that both call the same samples singular.
                xz = np.where(ok[None, :], x, 0.0)
                product = self._rows.new_last(values * xz[self._cols], np.zeros(self.n))
                residual = np.abs(product - rhs).max(axis=0)
                scale = (np.abs(values).max(axis=0, initial=0.0) * np.abs(xz).max(axis=0, initial=0.0)
                         + np.abs(rhs).max(axis=0, initial=0.0))
                ok &= residual <= RESIDUAL * scale + 1e-300
        x[:, ~ok] = np.nan
        return x, ok

    def _program(self, rhs_rows, wanted, take, n_values: int) -> Program:
        """The :class:`~ampplan.solver.program.Program` of a request (kept per schedule, ``take``
        and number of value rows)."""
        take_key = None if take is None else np.asarray(take, dtype=np.intp).tobytes()
        rows_key = None if rhs_rows is None else np.unique(np.asarray(rhs_rows, dtype=np.intp)).tobytes()
        wanted_key = None if wanted is None else np.unique(np.asarray(wanted, dtype=np.intp)).tobytes()
        key = (rows_key, wanted_key, take_key, n_values)
        program = self._programs.get(key)
        if program is None:
            if rhs_rows is None and wanted is None:
                schedule = Schedule(None, None, self._factor_levels, self._multipliers, self._forward,
                                    self._backward, None)
            else:
                schedule = self.schedule_for(rhs_rows, wanted)
            program = self._programs[key] = Program(self, schedule, take, n_values)
        return program

    @staticmethod
    def _usable(factors: np.ndarray, multipliers: np.ndarray, xs) -> np.ndarray:
        """Bool (S,): every x of ``xs`` finite and every multiplier used within 1/RUN_THRESHOLD."""
        with np.errstate(all="ignore"):
            ok = np.ones(factors.shape[1], dtype=bool)
            for x in xs:
                ok &= np.all(np.isfinite(x), axis=0)
            if multipliers.size:
                ok &= np.all(np.abs(factors[multipliers]) <= 1.0 / RUN_THRESHOLD, axis=0)
        return ok

    def solve_several(self, values: np.ndarray, rhs: tuple) -> tuple[tuple, np.ndarray]:
        """Solve A·x = b for several right-hand sides b of every sample, factorising once.

        Parameters
        ----------
        values : ndarray, shape (P, S)
        rhs : tuple of ndarray, each of shape (n, S)

        Returns
        -------
        x : tuple of ndarray, each of shape (n, S)
        ok : ndarray of bool, shape (S,)
            As for :meth:`solve` without the residual test (NaN columns where False).
        """
        s_count = values.shape[1]
        if self.singular:
            return tuple(np.full(b.shape, np.nan) for b in rhs), np.zeros(s_count, dtype=bool)
        factors = self.factor(values)
        xs = tuple(self.substitute(factors, b) for b in rhs)
        ok = self._usable(factors, self._multipliers, xs)
        for x in xs:
            x[:, ~ok] = np.nan
        return xs, ok

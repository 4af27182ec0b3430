"""A planned elimination run as straight-line code on a register file, repeated work done once.

:class:`ampplan.solver.sparse.Elimination` factorises in place: each level of its schedule reads
the slots it needs, computes, and writes them back by index. :class:`Program` records the same
operations once per schedule as steps on a register file ``R`` of shape (registers, S), samples
last, in which every result gets a register of its own (each register is written once):

* the first registers hold the inputs (the rows of the entry values, one zero, the rows of the
  right-hand side the substitution reads); they are copied in, every other register is computed;
* a step is one of two operations over a group of registers, ``R[out] = R[a] / R[b]`` or
  ``R[out] = R[a] - R[b] * R[c]``, each group's outputs one contiguous range (a slice, no
  scatter), its operands gathered by index (or a slice, where they happen to be contiguous);
* an operation already recorded with the same operands is not recorded again: its register is
  reused (value numbering; Aho, Sethi & Ullman, *Compilers*, the section on the DAG
  representation of basic blocks, from memory). Several systems solved as one block-diagonal
  system (the variants of the incremental equations) share most of their entries, so most of
  their factorisations are the same operations on the same values;
* every operation waits only for its own operands, so operations from different levels of the
  elimination's schedule run in the same step when their operands are ready.

Every entry of the answer is computed by the same IEEE operations on the same operands as the
in-place elimination (only when and where they run differs), so it is the same, bit for bit.
"""

from __future__ import annotations

import numpy as np

__all__ = ["Program"]

_DIVIDE, _UPDATE = 0, 1


def _index(registers: list) -> np.ndarray | slice:
    """The gather of ``registers``: a slice where they are contiguous and ascending (a view)."""
    array = np.asarray(registers, dtype=np.intp)
    if array.size and np.all(np.diff(array) == 1):
        return slice(int(array[0]), int(array[-1]) + 1)
    return array


class Program:
    """One elimination schedule, with a given input layout, as register steps.

    Parameters
    ----------
    elimination : ampplan.solver.sparse.Elimination
    schedule : ampplan.solver.sparse.Schedule
        The steps to run (:meth:`~ampplan.solver.sparse.Elimination.schedule_for`, or the full one).
    take : ndarray of int, shape (P,), or None
        Entry p of the pattern is row ``take[p]`` of the values given to :meth:`run` (row p
        without it).
    n_values : int
        Rows of the values given to :meth:`run`.

    Attributes
    ----------
    registers : int
        Rows of the register file.
    steps : list of (int, slice, index, index, index or None)
        (operation, outputs, a, b, c) in running order.
    rhs_rows : ndarray of int
        Rows of the right-hand side copied in (after the values and the zero).
    unknowns : ndarray of int
        The unknowns computed, and ``unknown_registers`` where each one ends.
    multiplier_registers : ndarray of int
        Registers of the multipliers (L entries) the schedule computes, each once.
    repeated : int
        Operations of the schedule left out as repeats of one already recorded.
    """

    def __init__(self, elimination, schedule, take, n_values: int):
        count = elimination.positions.size
        zero = n_values
        table: dict = {}                 # (operation, operands) -> operation number
        operations: list = []            # (operation, operands), operands as ("in", register) or ("op", k)
        repeated = 0

        def record(operation, *operands):
            nonlocal repeated
            key = (operation, operands)
            k = table.get(key)
            if k is None:
                k = table[key] = len(operations)
                operations.append(key)
            else:
                repeated += 1
            return ("op", k)

        loaded = range(count) if schedule.entries is None else schedule.entries.tolist()
        slot = {p: ("in", int(p if take is None else take[p])) for p in loaded}
        fill = range(count, elimination.n_slots) if schedule.fill is None else schedule.fill.tolist()
        slot.update((f, ("in", zero)) for f in fill)
        for col, piv, target, left, right in schedule.factor_levels:
            divided = {c: record(_DIVIDE, slot[c], slot[p]) for c, p in zip(col.tolist(), piv.tolist())}
            slot.update(divided)
            updated = {t: record(_UPDATE, slot[t], slot[a], slot[b])
                       for t, a, b in zip(target.tolist(), left.tolist(), right.tolist())}
            slot.update(updated)
        multipliers = [slot[m] for m in schedule.multipliers.tolist()]

        rhs_rows = sorted({t for targets, _ in schedule.forward for t in targets.tolist()})
        rhs_register = {p: ("in", zero + 1 + k) for k, p in enumerate(rhs_rows)}
        y: dict = {}
        for targets, passes in schedule.forward:
            y.update((t, rhs_register[t]) for t in targets.tolist())
            for target, coef, source in passes:
                y.update({t: record(_UPDATE, y[t], slot[c], y[s])
                          for t, c, s in zip(target.tolist(), coef.tolist(), source.tolist())})
        x: dict = {}
        for targets, sources, pivots, passes in schedule.backward:
            x.update((t, y[s]) for t, s in zip(targets.tolist(), sources.tolist()))
            for target, coef, source in passes:
                x.update({t: record(_UPDATE, x[t], slot[c], x[s])
                          for t, c, s in zip(target.tolist(), coef.tolist(), source.tolist())})
            x.update({t: record(_DIVIDE, x[t], slot[p]) for t, p in zip(targets.tolist(), pivots.tolist())})

        # Steps: every operation as soon as its operands are ready, grouped by operation; within a
        # group in the order of its operands' registers, so that they are often contiguous (a slice).
        inputs = zero + 1 + len(rhs_rows)
        depth = [0] * len(operations)
        for k, (_, operands) in enumerate(operations):
            depth[k] = 1 + max((depth[o] for kind, o in operands if kind == "op"), default=0)
        groups: dict = {}
        for k in range(len(operations)):
            groups.setdefault((depth[k], operations[k][0]), []).append(k)
        register = [0] * len(operations)
        at = lambda operand: operand[1] if operand[0] == "in" else register[operand[1]]  # noqa: E731
        steps = []
        next_register = inputs
        for (_, operation), group in sorted(groups.items()):
            group.sort(key=lambda k: [at(o) for o in operations[k][1]])
            for r, k in enumerate(group):
                register[k] = next_register + r
            columns = list(zip(*[[at(o) for o in operations[k][1]] for k in group]))
            steps.append((operation, slice(next_register, next_register + len(group)),
                          *(_index(list(c)) for c in columns), *([None] if len(columns) == 2 else [])))
            next_register += len(group)
        self.registers = inputs + len(operations)
        self.n_values = n_values
        self.steps = steps
        self.rhs_rows = np.asarray(rhs_rows, dtype=np.intp)
        self.unknowns = np.array(sorted(x), dtype=np.intp)
        self.unknown_registers = np.array([at(x[q]) for q in self.unknowns.tolist()], dtype=np.intp)
        self.multiplier_registers = np.unique(np.array([at(m) for m in multipliers], dtype=np.intp))
        self.repeated = repeated

    def run(self, values: np.ndarray, rhs: np.ndarray, work: np.ndarray) -> np.ndarray:
        """Run the steps for S samples.

        Parameters
        ----------
        values : ndarray, shape (n_values, S)
        rhs : ndarray, shape (n, S)
        work : ndarray, shape (registers, S)
            The register file (its contents on entry do not matter); returned.
        """
        zero = self.n_values
        work[:zero] = values
        work[zero] = 0.0
        np.take(rhs, self.rhs_rows, axis=0, out=work[zero + 1:zero + 1 + self.rhs_rows.size])
        # A slice is a view; ndarray.take gathers rows with less overhead than fancy indexing.
        read = lambda at: work[at] if type(at) is slice else work.take(at, axis=0)  # noqa: E731
        with np.errstate(all="ignore"):
            for operation, out, a, b, c in self.steps:
                if operation == _DIVIDE:
                    np.divide(read(a), read(b), out=work[out])
                else:
                    np.subtract(read(a), read(b) * read(c), out=work[out])
        return work

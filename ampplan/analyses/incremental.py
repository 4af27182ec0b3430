"""Every incremental (small-signal) solve a plan's analyses need, for S samples, in one call.

The incremental circuit about a Q-point (sources zeroed, capacitors shorted or opened, each
transistor replaced by its incremental model) is the same for every figure of a plan; only small
things change between them: a 1 V excitation, a 1 A injection, a port cut (terminals of the
elements on one side of a node moved to ground), a transistor replaced by a test excitation for
its load line. :class:`IncrementalSystem` turns each such *variant* into a list of matrix stamps
once per circuit (the topology), and :meth:`IncrementalSystem.solve` fills in the values of S
samples and solves the S·V systems in one batched call.

The unknowns are those of :mod:`ampplan.solver.assembly` plus one current per capacitor: every
node but ground, every voltage source's current, every capacitor's current (its 0 V short at
midband), then I_B and I_C of every transistor. A source or short left out of a variant (it would
close a loop of sources, or a capacitor is open) keeps its unknown at zero through an identity
row; so does a node that a cut leaves with no element (its increment is reported as NaN).

The incremental models (:func:`transistor_models`) are those of
:func:`ampplan.analyses.smallsignal.incremental_models`, as arrays over the samples.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..circuit import GROUND, Bjt, Capacitor, CurrentSource, Resistor, UnionFind, VoltageSource
from ..devices import scaled_to_temperature, thermal_voltage
from ..solver.assembly import Scatter, layout_of
from ..solver.ebers_moll import device_currents
from ..solver.linear import solve_batch
from ..solver.sparse import Elimination, scratch

__all__ = ["Variant", "IncrementalSystem", "TransistorModels", "WantedUnknowns", "transistor_models"]

#: Value columns per transistor in the value table (see :meth:`IncrementalSystem._values`).
_PER_Q = 9


@dataclass(frozen=True)
class Variant:
    """One incremental solve.

    Attributes
    ----------
    capacitors : {"short", "open"}
    excite : str or None
        Voltage source set to 1 V.
    inject : str or None
        Node into which 1 A is injected from ground.
    ground : dict of str -> frozenset of str
        Per element, terminal nodes moved to ground (a port cut).
    port : int or None
        Index (layout order) of the transistor replaced by a test excitation: collector current
        1 A with its own output conductance kept, I_B = 1/β.
    """
    capacitors: str = "short"
    excite: str | None = None
    inject: str | None = None
    ground: dict = field(default_factory=dict)
    port: int | None = None


@dataclass(frozen=True)
class TransistorModels:
    """Incremental models of every transistor for S samples (NPN frame), as arrays.

    Attributes
    ----------
    g : ndarray, shape (S, N, 2, 2)
        ``i_b = g[..., 0, 0]·v_be + g[..., 0, 1]·v_bc``, ``i_c = g[..., 1, 0]·v_be + g[..., 1, 1]·v_bc``,
        siemens (zero where ``held``).
    held : ndarray of bool, shape (S, N)
        Constant-drop saturation: V_BE and V_CE held (incremental shorts).
    beta_ac : ndarray, shape (S, N)
        ∂I_C/∂I_B at fixed V_BC (NaN where undefined).
    """
    g: np.ndarray
    held: np.ndarray
    beta_ac: np.ndarray


def transistor_models(op, params) -> TransistorModels:
    """Incremental models at the operating point ``op`` (single or batched) of every transistor.

    Constant-drop: hybrid-π in forward-active (g_m = I_C/V_T, r_π = β/g_m, r_o = V_A/I_C; Sedra &
    Smith, *Microelectronic Circuits*, the hybrid-π section of the BJT chapter, from memory), the
    same with collector and emitter exchanged in reverse-active, held in saturation, open in
    cutoff. Ebers–Moll: the model's own derivatives at the solution.

    Parameters
    ----------
    op : OperatingPoint
    params : ampplan.solver.assembly.Parameters
        The values ``op`` was solved with (S samples; S = 1 for a single solve).
    """
    layout = layout_of(op.circuit)
    names = [q.name for q in layout.bjts]
    s_count, n_q = params.size, len(names)
    col = lambda attr: np.stack([np.atleast_1d(np.asarray(getattr(op.transistors[n], attr), dtype=float))  # noqa: E731
                                 for n in names], axis=1) if n_q else np.zeros((s_count, 0))
    dev = scaled_to_temperature(params.device, params.temperature[:, None])
    v_t = thermal_voltage(params.temperature)[:, None]
    g = np.zeros((s_count, n_q, 2, 2))
    held = np.zeros((s_count, n_q), dtype=bool)
    if n_q == 0:
        return TransistorModels(g, held, np.zeros((s_count, 0)))
    if op.model == "ebers-moll":
        s = layout.sign
        v_be, vce = s * col("vbe"), s * col("vce")
        _, _, d = device_currents(v_be, v_be - vce, dev, v_t)
        g[..., 0, 0], g[..., 0, 1], g[..., 1, 0], g[..., 1, 1] = d["b_be"], d["b_bc"], d["c_be"], d["c_bc"]
        with np.errstate(divide="ignore", invalid="ignore"):
            beta_ac = np.where(g[..., 0, 0] > 0, g[..., 1, 0] / np.where(g[..., 0, 0] > 0, g[..., 0, 0], 1.0), np.nan)
        return TransistorModels(g, held, beta_ac)
    regions = np.stack([np.atleast_1d(np.asarray(op.transistors[n].region)) for n in names], axis=1)
    ic, ie = col("ic"), col("ie")
    beta, beta_r, v_a = dev["beta"], dev["beta_reverse"], dev["early_voltage"]
    with np.errstate(divide="ignore", invalid="ignore"):
        active = (regions == "forward-active") & (ic > 0)
        g_m = np.where(active, ic / v_t, 0.0)
        g_o = np.where(active, ic / v_a, 0.0)            # 0 for an infinite Early voltage
        g[..., 0, 0] = np.where(active, g_m / beta, 0.0)
        g[..., 1, 0] = g_m + g_o
        g[..., 1, 1] = -g_o
        reverse = (regions == "reverse-active") & (ie < 0)
        g_r = np.where(reverse, -ie / v_t, 0.0)
        g[..., 0, 1] += np.where(reverse, g_r / beta_r, 0.0)
        g[..., 1, 1] += np.where(reverse, -(1.0 + beta_r) * g_r / beta_r, 0.0)
    held = regions == "saturation"
    beta_ac = np.where(active, beta, np.nan)
    return TransistorModels(g, held, beta_ac)


class IncrementalSystem:
    """The incremental equations of one circuit, in several variants, for any number of samples.

    Parameters
    ----------
    circuit : ampplan.Circuit
    variants : sequence of Variant
    """

    def __init__(self, circuit, variants):
        layout = layout_of(circuit)
        self.layout = layout
        self.variants = tuple(variants)
        self.capacitors = circuit.of_kind(Capacitor)
        nodes = layout.nodes
        index = {n: k for k, n in enumerate(nodes)}
        n_nodes, n_vs, n_c, n_q = len(nodes), layout.n_vs, len(self.capacitors), layout.n_bjt
        self.size = size = n_nodes + n_vs + n_c + 2 * n_q
        index[GROUND] = size
        self.index = index
        vs_row = {e.name: n_nodes + k for k, e in enumerate(layout.voltage_sources)}
        vs_row.update({e.name: n_nodes + n_vs + k for k, e in enumerate(self.capacitors)})
        self.source_row = vs_row
        self.q_ib = n_nodes + n_vs + n_c + 2 * np.arange(n_q)
        self.q_ic = self.q_ib + 1
        self.n_r = len(layout.resistors)
        r_index = {e.name: k for k, e in enumerate(layout.resistors)}
        q_index = {e.name: k for k, e in enumerate(layout.bjts)}
        self.n_values = 1 + self.n_r + _PER_Q * n_q
        elements = circuit.elements

        stamps, rhs_stamps, vanished = [], [], []
        for v, variant in enumerate(self.variants):
            st, rh = [], []       # (row, col, value column, coefficient), (row, value column, coefficient)
            present = set()
            ties = UnionFind()    # nodes tied by kept sources: a source that would close a loop is left out
            kept = set()

            def at(e, node, moved=None):
                moved = variant.ground.get(e.name, ()) if moved is None else moved
                return size if node in moved else index[node]

            def source(name, plus, minus, volts):
                if plus != minus and ties.union(plus, minus):
                    r = vs_row[name]
                    kept.add(name)
                    p, m = index[plus], index[minus]
                    st.extend([(p, r, 0, 1.0), (m, r, 0, -1.0), (r, p, 0, 1.0), (r, m, 0, -1.0)])
                    present.update((plus, minus))
                    if volts:
                        rh.append((r, 0, 1.0))

            for e in elements:
                moved = variant.ground.get(e.name, ())
                node = lambda n: GROUND if n in moved else n  # noqa: E731
                if isinstance(e, Resistor):
                    a, b, k = index[node(e.a)], index[node(e.b)], 1 + r_index[e.name]
                    st.extend([(a, a, k, 1.0), (b, b, k, 1.0), (a, b, k, -1.0), (b, a, k, -1.0)])
                    present.update((node(e.a), node(e.b)))
                elif isinstance(e, VoltageSource):
                    source(e.name, node(e.plus), node(e.minus), e.name == variant.excite)
                elif isinstance(e, CurrentSource):
                    present.update((node(e.from_node), node(e.to_node)))
                elif isinstance(e, Bjt):
                    j = q_index[e.name]
                    s = e.device.sign
                    c, b, em = index[node(e.collector)], index[node(e.base)], index[node(e.emitter)]
                    present.update((node(e.collector), node(e.base), node(e.emitter)))
                    ib, ic = int(self.q_ib[j]), int(self.q_ic[j])
                    # Terminal currents into the node rows (textbook signs).
                    st.extend([(b, ib, 0, s), (c, ic, 0, s), (em, ib, 0, -s), (em, ic, 0, -s)])
                    base = 1 + self.n_r + _PER_Q * j
                    if variant.port == j:
                        st.extend([(ib, ib, 0, 1.0), (ic, ic, 0, 1.0), (ic, c, base + 7, -s), (ic, em, base + 7, s)])
                        rh.extend([(ib, base + 8, 1.0), (ic, 0, 1.0)])
                    else:
                        st.extend([(ib, ib, base, 1.0), (ib, b, base + 1, 1.0), (ib, em, base + 2, 1.0),
                                   (ib, c, base + 3, 1.0), (ic, ic, base, 1.0), (ic, b, base + 4, 1.0),
                                   (ic, em, base + 5, 1.0), (ic, c, base + 6, 1.0)])
            if variant.capacitors == "short":
                for e in self.capacitors:
                    moved = variant.ground.get(e.name, ())
                    source(e.name, GROUND if e.a in moved else e.a, GROUND if e.b in moved else e.b, False)
            for name, r in vs_row.items():
                if name not in kept:
                    st.append((r, r, 0, 1.0))
            gone = [index[n] for n in nodes if n not in present]
            st.extend((k, k, 0, 1.0) for k in gone)
            vanished.append(gone)
            if variant.inject is not None:
                rh.append((index[variant.inject], 0, 1.0))
            stamps.append(np.array([(v, *t) for t in st if t[0] < size and t[1] < size]).reshape(-1, 5))
            rhs_stamps.append(np.array([(v, *t) for t in rh if t[0] < size]).reshape(-1, 4))
        self.vanished = vanished
        every = np.concatenate(stamps)
        variant, row, col = (every[:, k].astype(np.intp) for k in range(3))
        self._matrix_plan = Scatter(variant * size * size + row * size + col, every[:, 3], every[:, 4])
        rhs_every = np.concatenate(rhs_stamps)
        self._rhs_plan = Scatter(rhs_every[:, 0].astype(np.intp) * size + rhs_every[:, 1].astype(np.intp),
                                 rhs_every[:, 2], rhs_every[:, 3])
        self._stamp_table = every
        self._sparse = None

    def _sparse_plan(self):
        """The variants as one block-diagonal sparse system (built when a batch first needs it):
        the :class:`~ampplan.solver.sparse.Elimination` and the scatter of the value table into its
        entries. The pivots are chosen on typical values that depend on the topology only (every
        resistor 1 kΩ, every transistor forward-active at 1 mA with β = 100 and V_A = 100 V), so
        the answers never depend on which values came first."""
        if self._sparse is None:
            every = self._stamp_table
            n, n_var = self.size, len(self.variants)
            total = n * n_var
            rows = every[:, 0].astype(np.intp) * n + every[:, 1].astype(np.intp)
            cols = every[:, 0].astype(np.intp) * n + every[:, 2].astype(np.intp)
            entries, entry_of = np.unique(rows * total + cols, return_inverse=True)
            entry_of = entry_of.ravel()
            # Entries that are the same sum of table columns (most of them: every variant repeats
            # the base's stamps) are computed once, as one "kind", and copied into place.
            terms: list = [[] for _ in range(entries.size)]
            for e, column, coefficient in zip(entry_of.tolist(), every[:, 3].astype(np.intp).tolist(),
                                              every[:, 4].tolist()):
                terms[e].append((column, coefficient))
            kinds: dict = {}
            kind_of = np.array([kinds.setdefault(tuple(sorted(t)), len(kinds)) for t in terms], dtype=np.intp)
            fixed = np.zeros(len(kinds))
            position, source, weight = [], [], []
            for signature, k in kinds.items():
                for column, coefficient in signature:
                    if column == 0:          # the table's constant column (always 1), summed here
                        fixed[k] += coefficient
                    else:
                        position.append(k)
                        source.append(column)
                        weight.append(coefficient)
            values_plan = (fixed, Scatter(position, source, weight), kind_of)
            n_q = self.layout.n_bjt
            g_m, g_o = 1e-3 / 0.025, 1e-3 / 100.0
            g = np.zeros((1, n_q, 2, 2))
            g[..., 0, 0], g[..., 1, 0], g[..., 1, 1] = g_m / 100.0, g_m + g_o, -g_o
            typical = self._values(np.full((1, self.n_r), 1e-3),
                                   TransistorModels(g, np.zeros((1, n_q), dtype=bool), np.full((1, n_q), 100.0)),
                                   self.layout.sign)
            representative = values_plan[1].new_last(typical, fixed)[kind_of, 0]
            elimination = Elimination(total, entries // total, entries % total, representative, block=n)
            self._sparse = (elimination, values_plan)
        return self._sparse

    def _values(self, conductance, models: TransistorModels, signs) -> np.ndarray:
        """The value table (n_values, S) the stamps read, samples last (as the sparse solves read
        it): 1, conductances, per-transistor terms."""
        s_count = conductance.shape[0]
        table = np.empty((self.n_values, s_count))
        table[0] = 1.0
        table[1:1 + self.n_r] = conductance.T
        g, h = models.g, models.held.astype(float)
        s = signs[None, :]
        per = np.stack([
            1.0 - h,
            -s * (g[..., 0, 0] + g[..., 0, 1]) + s * h,
            s * g[..., 0, 0] - s * h,
            s * g[..., 0, 1],
            -s * (g[..., 1, 0] + g[..., 1, 1]),
            s * g[..., 1, 0] - s * h,
            s * g[..., 1, 1] + s * h,
            np.where(models.held, 0.0, -g[..., 1, 1]),
            np.zeros_like(h),
        ], axis=-1)                                   # (S, N, _PER_Q)
        with np.errstate(divide="ignore", invalid="ignore"):
            beta = np.where(np.isfinite(models.beta_ac) & (models.beta_ac > 0), models.beta_ac, np.nan)
        per[..., 8] = 1.0 / beta
        table[1 + self.n_r:].reshape(-1, _PER_Q, s_count)[:] = per.transpose(1, 2, 0)
        return table

    def solve(self, conductance, models: TransistorModels, port_beta=None, shared: bool = True,
              wanted=None) -> np.ndarray:
        """Solve every variant for every sample.

        A batch (``shared=True``) solves all variants of all samples as one block-diagonal sparse
        system in a fixed pivot order (:class:`ampplan.solver.sparse.Elimination`, planned once
        per topology), every step one numpy operation over the samples of a block of
        :data:`BLOCK`; a sample that the fixed pivots do not suit (a held transistor zeroes a pivot,
        say) fails the elimination's own backward-error check and is solved densely instead, as
        is a single solve (``shared=False``): each variant's matrix on its own, in one batched
        LAPACK call. Either way a sample's answer does not depend on the other samples in its
        batch, bit for bit.

        Parameters
        ----------
        conductance : ndarray, shape (S, n_resistors)
            Siemens, in the layout's resistor order.
        models : TransistorModels
        port_beta : ndarray, shape (S, N), optional
            β giving I_B = 1/β of a port excitation (default ``models.beta_ac``).
        shared : bool
            Solve the batch through the planned sparse elimination (True) or every matrix densely.
        wanted : sequence of (int, int), optional
            With ``shared``: the only (variant, unknown) pairs the caller reads. The planned
            elimination then computes only what they depend on (the same operations, so the same
            figures: :meth:`ampplan.solver.sparse.Elimination.schedule_for`), and the other
            entries are NaN (:meth:`solve_wanted` keeps only the wanted ones).

        Returns
        -------
        ndarray, shape (S, V, size)
            Unknowns per sample and variant (NaN for a singular system and for vanished nodes).
        """
        if shared and wanted is not None:
            few = self.solve_wanted(conductance, models, wanted, port_beta)
            store = np.full((len(self.variants) * self.size, few.values.shape[1]), np.nan)
            store[few.flat] = few.values
            return store.reshape(len(self.variants), self.size, -1).transpose(2, 0, 1)
        if port_beta is not None:
            models = TransistorModels(models.g, models.held, port_beta)
        table = self._values(conductance, models, self.layout.sign)
        s_count, n_var, n = table.shape[1], len(self.variants), self.size
        if shared:
            # Samples last, as the elimination writes them (and as a caller reads one unknown of
            # every sample); x is the (S, V, size) view.
            store = np.empty((n_var * n, s_count))
            for at in range(0, s_count, BLOCK):
                self._solve_sparse(table[:, at:at + BLOCK], store[:, at:at + BLOCK])
            x = store.reshape(n_var, n, s_count).transpose(2, 0, 1)
        else:
            x = np.empty((s_count, n_var, n))
            for at in range(0, s_count, BLOCK):
                x[at:at + BLOCK] = self._solve_dense(table[:, at:at + BLOCK].T)
        for v, gone in enumerate(self.vanished):
            if gone:
                x[:, v, gone] = np.nan
        return x

    def solve_wanted(self, conductance, models: TransistorModels, wanted, port_beta=None) -> "WantedUnknowns":
        """:meth:`solve` of a batch (``shared=True``) for the (variant, unknown) pairs ``wanted``
        only, kept as rows of their own (the same figures, bit for bit); no array of every
        unknown of every variant and sample is made.

        Parameters
        ----------
        conductance, models, port_beta
            As for :meth:`solve`.
        wanted : sequence of (int, int)
            (variant, unknown) pairs.

        Returns
        -------
        WantedUnknowns
        """
        if port_beta is not None:
            models = TransistorModels(models.g, models.held, port_beta)
        table = self._values(conductance, models, self.layout.sign)
        s_count, n = table.shape[1], self.size
        flat = np.unique(np.array([v * n + k for v, k in wanted], dtype=np.intp))
        values = np.empty((flat.size, s_count))
        for at in range(0, s_count, BLOCK):
            self._solve_sparse(table[:, at:at + BLOCK], values[:, at:at + BLOCK], flat)
        gone = np.isin(flat, [v * n + k for v, ks in enumerate(self.vanished) for k in ks])
        values[gone] = np.nan
        return WantedUnknowns(self.size, flat, values)

    def _solve_dense(self, table):
        """Every variant's matrix on its own, in one batched dense solve (``table`` (S, n_values))."""
        s_count, n_var, n = table.shape[0], len(self.variants), self.size
        rhs = self._rhs_plan(table, np.zeros((s_count, n_var * n))).reshape(s_count * n_var, n)
        matrix = self._matrix_plan(table, np.zeros((s_count, n_var * n * n))).reshape(s_count * n_var, n, n)
        xs, _ = solve_batch(matrix, rhs)
        return xs.reshape(s_count, n_var, n)

    def _solve_sparse(self, table, out, wanted=None):
        """Every variant of every sample of ``table`` (n_values, S) through the planned sparse
        elimination (dense where it fails), into ``out`` (V·size, S), samples last; with
        ``wanted`` (sorted flat entries variant·size + unknown), only those, into ``out``
        (len(wanted), S)."""
        elimination, values_plan = self._sparse_plan()
        s_count, n_var, n = table.shape[1], len(self.variants), self.size
        fixed, varying, kind_of = values_plan
        kinds = varying.new_last(table, fixed)
        rhs = self._rhs_plan.new_last(table, np.zeros(n_var * n))
        # The solution is copied into ``out`` at once, so it may live in a working array.
        solution, ok = elimination.solve(kinds, rhs, check_residual=False, take=kind_of,
                                         rhs_rows=self._rhs_plan.targets, wanted=wanted,
                                         out=scratch("solution", rhs.shape))
        if wanted is None:
            out[:] = solution
        else:
            np.take(solution, wanted, axis=0, out=out)
        bad = np.flatnonzero(~ok)
        if bad.size:
            dense = self._solve_dense(table[:, bad].T).reshape(bad.size, n_var * n).T
            out[:, bad] = dense if wanted is None else dense[wanted]


@dataclass(frozen=True, eq=False)
class WantedUnknowns:
    """Some unknowns of every variant and sample (:meth:`IncrementalSystem.solve_wanted`).

    Attributes
    ----------
    size : int
        Unknowns per variant.
    flat : ndarray of int, shape (W,)
        The pairs held, as variant·size + unknown (sorted).
    values : ndarray, shape (W, S)
        Their values, samples last (NaN for a singular system and for vanished nodes).
    """
    size: int
    flat: np.ndarray
    values: np.ndarray

    def __getitem__(self, pair) -> np.ndarray:
        """Unknown k of variant v for every sample, ``unknowns[v, k]``, shape (S,)."""
        v, k = pair
        at = int(np.searchsorted(self.flat, v * self.size + k))
        if at == self.flat.size or self.flat[at] != v * self.size + k:
            raise KeyError(f"unknown {k} of variant {v} was not asked for")
        return self.values[at]

    def variant(self, v: int) -> np.ndarray:
        """Every unknown of variant v, (S, size): NaN where not asked for."""
        out = np.full((self.values.shape[1], self.size), np.nan)
        inside = (self.flat >= v * self.size) & (self.flat < (v + 1) * self.size)
        out[:, self.flat[inside] - v * self.size] = self.values[inside].T
        return out


#: Samples per block of :meth:`IncrementalSystem.solve` (bounds the working arrays).
BLOCK = 512

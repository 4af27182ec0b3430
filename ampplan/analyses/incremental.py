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
from ..solver.assembly import layout_of
from ..solver.ebers_moll import device_currents
from ..solver.linear import solve_batch

__all__ = ["Variant", "IncrementalSystem", "TransistorModels", "transistor_models"]

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
        self._stamps = stamps
        self._matrix_plan = self._scatter_plan(np.concatenate(stamps), size * size,
                                               lambda a: a[:, 1] * size + a[:, 2])
        self._rhs_plan = self._scatter_plan(np.concatenate(rhs_stamps), size, lambda a: a[:, 1])
        self._base_plan = self._scatter_plan(stamps[0], size * size, lambda a: a[:, 1] * size + a[:, 2])
        self._edit_plans = None

    @property
    def _edits(self):
        """Each variant as edits of the base (built when a batch first needs them)."""
        if self._edit_plans is None:
            self._edit_plans = [self._edit_plan(self._stamps[0], st) for st in self._stamps[1:]]
        return self._edit_plans

    @staticmethod
    def _scatter_plan(stamps, per_variant, position):
        """Sorted stamp positions and value columns for a scatter by ``np.add.reduceat``."""
        flat = (stamps[:, 0].astype(np.intp) * per_variant + position(stamps).astype(np.intp))
        order = np.argsort(flat, kind="stable")
        flat = flat[order]
        starts = np.flatnonzero(np.r_[True, flat[1:] != flat[:-1]]) if flat.size else np.zeros(0, dtype=np.intp)
        return flat[starts], starts, stamps[order, -2].astype(np.intp), stamps[order, -1]

    def _edit_plan(self, base, variant):
        """How a variant's matrix differs from the base (variant 0) one: rows R and columns C that
        cover every differing entry, and scatter plans for the difference in those rows (R x n) and
        in those columns outside R (n x C). The variant is then M0 + E_R·A + B·E_Cᵀ."""
        n = self.size
        entries = {}
        for sign, st in ((-1.0, base), (1.0, variant)):
            for _, r, c, col, coef in st:
                entries.setdefault((int(r), int(c)), []).append((int(col), sign * coef))

        def net(terms):
            total = {}
            for col, coef in terms:
                total[col] = total.get(col, 0.0) + coef
            return {k: v for k, v in total.items() if v != 0.0}

        differ = {pos for pos, terms in entries.items() if net(terms)}
        rows, cols = [], []
        left = set(differ)
        while left:
            # Greedy cover: the row or column holding most of what is left.
            row_count, col_count = {}, {}
            for r, c in left:
                row_count[r] = row_count.get(r, 0) + 1
                col_count[c] = col_count.get(c, 0) + 1
            best_row = max(row_count, key=row_count.get)
            best_col = max(col_count, key=col_count.get)
            if row_count[best_row] >= col_count[best_col]:
                rows.append(best_row)
                left = {p for p in left if p[0] != best_row}
            else:
                cols.append(best_col)
                left = {p for p in left if p[1] != best_col}
        row_at = {r: k for k, r in enumerate(rows)}
        col_at = {c: k for k, c in enumerate(cols)}
        in_rows, in_cols = [], []
        for (r, c), terms in entries.items():
            for col, coef in terms:
                if r in row_at:
                    in_rows.append((0, row_at[r] * n + c, col, coef))
                elif c in col_at:
                    in_cols.append((0, r * len(cols) + col_at[c], col, coef))
        plan = lambda a: self._scatter_plan(np.array(a, dtype=float).reshape(-1, 4), 0, lambda x: x[:, 1])  # noqa: E731
        return np.array(rows, dtype=np.intp), np.array(cols, dtype=np.intp), plan(in_rows), plan(in_cols)

    def _values(self, conductance, models: TransistorModels, signs) -> np.ndarray:
        """The value table (S, n_values) the stamps read: 1, conductances, per-transistor terms."""
        s_count = conductance.shape[0]
        table = np.empty((s_count, self.n_values))
        table[:, 0] = 1.0
        table[:, 1:1 + self.n_r] = conductance
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
        table[:, 1 + self.n_r:] = per.reshape(s_count, -1)
        return table

    @staticmethod
    def _scatter(table, plan, total):
        positions, starts, columns, coefficients = plan
        out = np.zeros((table.shape[0], total))
        if positions.size:
            out[:, positions] = np.add.reduceat(table[:, columns] * coefficients, starts, axis=1)
        return out

    def solve(self, conductance, models: TransistorModels, port_beta=None, shared: bool = True) -> np.ndarray:
        """Solve every variant for every sample.

        One factorisation per sample: the base variant's matrix M0 is inverted once, and every
        other variant, M0 + E_R·A + B·E_Cᵀ (a few rows and columns edited, see :meth:`_edit_plan`),
        is solved from it by the Sherman–Morrison–Woodbury identity (Golub & Van Loan, *Matrix
        Computations*, the section on updating matrix factorisations, from memory), followed by
        one step of iterative refinement. Samples are taken in blocks of :data:`BLOCK`, so memory
        stays bounded; samples whose base matrix is singular, and a single solve
        (``shared=False``), are solved variant by variant.

        Parameters
        ----------
        conductance : ndarray, shape (S, n_resistors)
            Siemens, in the layout's resistor order.
        models : TransistorModels
        port_beta : ndarray, shape (S, N), optional
            β giving I_B = 1/β of a port excitation (default ``models.beta_ac``).
        shared : bool
            Share one factorisation per sample (a batch). False solves each variant's matrix on
            its own, which is cheaper for a single solve. Either way a sample's answer does not
            depend on the other samples in its batch, bit for bit.

        Returns
        -------
        ndarray, shape (S, V, size)
            Unknowns per sample and variant (NaN for a singular system and for vanished nodes).
        """
        if port_beta is not None:
            models = TransistorModels(models.g, models.held, port_beta)
        table = self._values(conductance, models, self.layout.sign)
        s_count, n_var, n = table.shape[0], len(self.variants), self.size
        x = np.empty((s_count, n_var, n))
        for at in range(0, s_count, BLOCK):
            x[at:at + BLOCK] = self._solve_block(table[at:at + BLOCK], shared)
        for v, gone in enumerate(self.vanished):
            if gone:
                x[:, v, gone] = np.nan
        return x

    def _solve_block(self, table, shared):
        s_count, n_var, n = table.shape[0], len(self.variants), self.size
        rhs = self._scatter(table, self._rhs_plan, n_var * n).reshape(s_count, n_var, n)
        if not shared:
            # Every variant's matrix on its own, all in one batched solve (cheaper than the
            # updates below when there is no factorisation to share).
            matrix = self._scatter(table, self._matrix_plan, n_var * n * n).reshape(s_count * n_var, n, n)
            xs, _ = solve_batch(matrix, rhs.reshape(s_count * n_var, n))
            return xs.reshape(s_count, n_var, n)
        base = self._scatter(table, self._base_plan, n * n).reshape(s_count, n, n)
        inverse, ok = _inverse(base)
        x = np.full((s_count, n_var, n), np.nan)
        good = np.flatnonzero(ok)
        if good.size:
            m0, m_inv, t = base[good], inverse[good], table[good]
            solve_base = lambda r: _mv(m_inv, r)  # noqa: E731
            x[good, 0] = _refined(solve_base, lambda y: _mv(m0, y), rhs[good, 0])
            for v, (rows, cols, row_plan, col_plan) in enumerate(self._edits, start=1):
                if rows.size + cols.size == 0:
                    x[good, v] = _refined(solve_base, lambda y: _mv(m0, y), rhs[good, v])
                    continue
                a = self._scatter(t, row_plan, rows.size * n).reshape(t.shape[0], rows.size, n)
                b = self._scatter(t, col_plan, n * cols.size).reshape(t.shape[0], n, cols.size)
                z = np.concatenate([m_inv[:, :, rows], m_inv @ b], axis=2)      # M0⁻¹·U
                wz = np.concatenate([a @ z, z[:, cols, :]], axis=1)              # W·M0⁻¹·U
                cap_inv, cap_ok = _inverse(wz + np.eye(rows.size + cols.size))

                def apply(r, m_inv=m_inv, a=a, z=z, cols=cols, cap_inv=cap_inv):
                    y = _mv(m_inv, r)
                    wy = np.concatenate([_mv(a, y), y[:, cols]], axis=1)
                    return y - _mv(z, _mv(cap_inv, wy))

                def multiply(y, m0=m0, a=a, b=b, rows=rows, cols=cols):
                    out = _mv(m0, y)
                    out[:, rows] += _mv(a, y)
                    return out + _mv(b, y[:, cols])

                xv = _refined(apply, multiply, rhs[good, v])
                xv[~cap_ok] = np.nan
                x[good, v] = xv
        bad = np.flatnonzero(~ok)
        if bad.size:
            # The base system is singular here: every variant of these samples on its own.
            matrix = self._scatter(table[bad], self._matrix_plan, n_var * n * n).reshape(bad.size * n_var, n, n)
            xs, _ = solve_batch(matrix, rhs[bad].reshape(bad.size * n_var, n))
            x[bad] = xs.reshape(bad.size, n_var, n)
        return x


def _mv(matrix, vector):
    """Stacked matrix-vector products: (S, m, k) @ (S, k) -> (S, m)."""
    return (matrix @ vector[..., None])[..., 0]


#: Samples per block of :meth:`IncrementalSystem.solve` (bounds the working arrays).
BLOCK = 2048


def _inverse(matrix):
    """Inverse of each matrix of a stack and which ones are regular (NaN rows elsewhere)."""
    try:
        inverse = np.linalg.inv(matrix)
        ok = np.ones(matrix.shape[0], dtype=bool)
    except np.linalg.LinAlgError:
        # One singular member spoils LAPACK's batched call; invert one at a time on this rare path.
        inverse = np.full(matrix.shape, np.nan)
        ok = np.zeros(matrix.shape[0], dtype=bool)
        for k in range(matrix.shape[0]):
            try:
                inverse[k] = np.linalg.inv(matrix[k])
                ok[k] = True
            except np.linalg.LinAlgError:
                pass
    with np.errstate(all="ignore"):
        ok &= np.all(np.isfinite(inverse), axis=(1, 2))
        # A nearly singular member gives finite nonsense: M·M⁻¹ must be the identity.
        error = np.abs(matrix @ np.where(ok[:, None, None], inverse, 0.0)
                       - np.eye(matrix.shape[1])).max(axis=(1, 2), initial=0.0)
        ok &= error <= 1e-6
    return inverse, ok


def _refined(apply, multiply, rhs):
    """``apply(rhs)`` (an approximate inverse) with one step of iterative refinement against the
    exact product ``multiply``."""
    x = apply(rhs)
    return x + apply(rhs - multiply(x))

"""Incremental (small-signal) analysis of any circuit about a solved operating point.

Each transistor is replaced by its incremental model at the Q-point (:func:`incremental_models`):

* constant-drop model, forward-active: the hybrid-π model, g_m = I_C/V_T, r_π = β/g_m,
  r_o = V_A/I_C (Sedra & Smith, *Microelectronic Circuits*, the hybrid-π section of the BJT
  chapter, from memory); reverse-active: the same with collector and emitter exchanged and β_R;
  saturation: the model's own linearisation, V_BE and V_CE held (incremental shorts);
  cutoff: open;
* Ebers–Moll model: the model's own derivatives ∂(I_B, I_C)/∂(V_BE, V_BC) at the solution.

:func:`solve_incremental` then solves the linear circuit with coupling and bypass capacitors as
shorts (midband) or opens (DC increments), every DC source zeroed, and an optional excitation
(a source at 1 V, or 1 A injected into a node). Nodes can be re-pointed to ground per element,
which is how a port is cut to measure what lies on one side of it.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal, get_args

import numpy as np

from ..solver.assembly import layout_of
from ..circuit import GROUND, Bjt, Capacitor, Circuit, CurrentSource, Resistor, VoltageSource, terminals, UnionFind
from ..devices import scaled_to_temperature, thermal_voltage
from ..errors import UnknownModelError
from ..solver.ebers_moll import device_currents
from ..solver.linear import solve_batch

#: How an incremental model is written: conductances, or V_BE and V_CE held (saturation).
ModelKind = Literal["conductance", "held"]
#: What the capacitors are in an incremental solve: shorts (midband) or opens (DC increments).
CapacitorTreatment = Literal["short", "open"]
CAPACITOR_TREATMENTS: tuple[str, ...] = get_args(CapacitorTreatment)

__all__ = ["IncrementalModel", "incremental_models", "solve_incremental", "IncrementalSolution",
           "TEST_CURRENT"]

#: Name of the 1 A test source :func:`solve_incremental` injects.
TEST_CURRENT = "test_current"


@dataclass(frozen=True)
class IncrementalModel:
    """One transistor's incremental model, NPN frame.

    Attributes
    ----------
    kind : {"conductance", "held"}
        ``"conductance"``: ``i_b = g[0,0]·v_be + g[0,1]·v_bc`` and ``i_c = g[1,0]·v_be + g[1,1]·v_bc``;
        ``"held"``: v_be = 0 and v_ce = 0 (constant-drop saturation).
    g : ndarray, shape (2, 2)
        Siemens.
    beta_ac : float
        Incremental current gain ∂I_C/∂I_B at fixed V_BC (NaN when undefined).
    """
    kind: ModelKind
    g: np.ndarray
    beta_ac: float


def incremental_models(op) -> dict:
    """Incremental model of every transistor of a single (not batched) operating point.

    Returns
    -------
    dict of str -> IncrementalModel
    """
    circuit = op.circuit
    layout = layout_of(circuit)
    params = layout.parameters(temperature=op.temperature)
    dev = scaled_to_temperature(params.device, params.temperature[:, None])
    v_t = thermal_voltage(op.temperature)
    out = {}
    for j, q in enumerate(layout.bjts):
        t = op.transistors[q.name]
        s = q.device.sign
        if op.model == "ebers-moll":
            v_be = np.array([[s * t.vbe]])
            v_bc = np.array([[s * (t.vbe - t.vce)]])
            one = {k: v[:, j:j + 1] for k, v in dev.items()}
            _, _, d = device_currents(v_be, v_bc, one, np.array([[v_t]]))
            g = np.array([[d["b_be"][0, 0], d["b_bc"][0, 0]], [d["c_be"][0, 0], d["c_bc"][0, 0]]])
            beta_ac = g[1, 0] / g[0, 0] if g[0, 0] > 0 else np.nan
            out[q.name] = IncrementalModel("conductance", g, float(beta_ac))
            continue
        beta, beta_r, v_a = dev["beta"][0, j], dev["beta_reverse"][0, j], dev["early_voltage"][0, j]
        if t.region == "forward-active" and t.ic > 0:
            g_m = t.ic / v_t
            g_o = t.ic / v_a                                  # 0 for an infinite Early voltage
            g = np.array([[g_m / beta, 0.0], [g_m + g_o, -g_o]])
            out[q.name] = IncrementalModel("conductance", g, float(beta))
        elif t.region == "reverse-active" and t.ie < 0:
            g_m = -t.ie / v_t
            g = np.array([[0.0, g_m / beta_r], [0.0, -(1.0 + beta_r) * g_m / beta_r]])
            out[q.name] = IncrementalModel("conductance", g, np.nan)
        elif t.region == "saturation":
            out[q.name] = IncrementalModel("held", np.zeros((2, 2)), np.nan)
        else:
            out[q.name] = IncrementalModel("conductance", np.zeros((2, 2)), np.nan)
    return out


@dataclass(frozen=True)
class IncrementalSolution:
    """Node voltages (volts per volt or per ampere of excitation) of one incremental solve."""
    v: dict
    i: dict
    ok: bool

    def __getitem__(self, node: str) -> float:
        return self.v[node]


def _incremental_circuit(circuit: Circuit, capacitors: CapacitorTreatment, excite: str | None, inject: str | None,
                         ground: dict) -> Circuit:
    """The circuit for an incremental solve: sources zeroed, capacitors shorted or opened."""
    ac = Circuit()
    held = UnionFind()        # nodes tied by zero-volt sources, to skip shorts that would loop
    for e in circuit.elements:
        moved = ground.get(e.name, ())
        node = lambda n: GROUND if n in moved else n  # noqa: E731
        if isinstance(e, Resistor):
            ac.resistor(e.name, node(e.a), node(e.b), e.resistance)
        elif isinstance(e, VoltageSource):
            plus, minus = node(e.plus), node(e.minus)
            if plus != minus and held.union(plus, minus):
                ac.voltage_source(e.name, plus, minus, 1.0 if e.name == excite else 0.0)
        elif isinstance(e, CurrentSource):
            ac.current_source(e.name, node(e.from_node), node(e.to_node), 0.0)
        elif isinstance(e, Bjt):
            ac.bjt(e.name, node(e.collector), node(e.base), node(e.emitter), e.device)
    if capacitors == "short":
        for e in circuit.of_kind(Capacitor):
            moved = ground.get(e.name, ())
            a = GROUND if e.a in moved else e.a
            b = GROUND if e.b in moved else e.b
            if a != b and held.union(a, b):
                ac.voltage_source(e.name, a, b, 0.0)
    if inject is not None:
        ac.current_source(TEST_CURRENT, GROUND, inject, 1.0)
    return ac


def solve_incremental(op, models: dict, *, capacitors: CapacitorTreatment = "short", excite: str | None = None,
                      inject: str | None = None, ground: dict | None = None,
                      port: tuple[str, float] | None = None) -> IncrementalSolution:
    """Solve the incremental circuit about ``op``.

    Parameters
    ----------
    op : OperatingPoint
        A single solved operating point (its ``circuit`` is used).
    models : dict of str -> IncrementalModel
        From :func:`incremental_models`.
    capacitors : {"short", "open"}
        Midband (shorts) or DC increments (opens).
    excite : str, optional
        Name of the voltage source set to 1 V; every other source is zero.
    inject : str, optional
        Node into which 1 A is injected from ground.
    ground : dict of str -> set of str, optional
        Per element, terminal nodes re-pointed to ground (cuts a port).
    port : (str, float), optional
        Transistor replaced by a test excitation: its controlled collector current 1 A and
        I_B = the float (textbook signs), its own output conductance 1/r_o kept across
        collector and emitter (so the port sees r_o in parallel with the rest, as a load line
        of the controlled source should).

    Returns
    -------
    IncrementalSolution
        Node voltages and element currents (NaN when the circuit is singular).
    """
    if capacitors not in CAPACITOR_TREATMENTS:
        raise UnknownModelError(f"capacitors must be one of {', '.join(CAPACITOR_TREATMENTS)}, got {capacitors!r}")
    ac = _incremental_circuit(op.circuit, capacitors, excite, inject, ground or {})
    lay = layout_of(ac)
    params = lay.parameters()
    matrix, rhs = lay.assemble(params)
    matrix, rhs = matrix[0], rhs[0]
    for j, q in enumerate(lay.bjts):
        rb, rc = lay.q_ib[j], lay.q_ic[j]
        b, c, e = lay.q_b[j], lay.q_c[j], lay.q_e[j]
        s = lay.sign[j]
        m = models[q.name]
        if port is not None and q.name == port[0]:
            matrix[rb, rb] = 1.0
            rhs[rb] = port[1]
            # I_C = 1 + g_o·V_CE (transistor frame), g_o = -∂I_C/∂V_BC at fixed V_BE.
            g_o = -m.g[1, 1] if m.kind == "conductance" else 0.0
            matrix[rc, rc] = 1.0
            matrix[rc, c] -= s * g_o
            matrix[rc, e] += s * g_o
            rhs[rc] = 1.0
            continue
        if m.kind == "held":
            matrix[rb, b] += s
            matrix[rb, e] -= s
            matrix[rc, c] += s
            matrix[rc, e] -= s
            continue
        g = m.g
        # i - g_be·s(V_B - V_E) - g_bc·s(V_B - V_C) = 0 for i = I_B (row rb) and I_C (row rc)
        for row, col, (g_be, g_bc) in ((rb, rb, g[0]), (rc, rc, g[1])):
            matrix[row, col] += 1.0
            matrix[row, b] -= s * (g_be + g_bc)
            matrix[row, e] += s * g_be
            matrix[row, c] += s * g_bc
    n = lay.size
    x, ok = solve_batch(matrix[None, :n, :n], rhs[None, :n])
    x = np.append(x[0], 0.0)
    v = {GROUND: 0.0}
    v.update({node: float(x[k]) for k, node in enumerate(lay.nodes)})
    i = {r.name: float((x[lay.r_a[k]] - x[lay.r_b[k]]) * params.conductance[0, k])
         for k, r in enumerate(lay.resistors)}
    i.update({src.name: float(-x[lay.vs_row[k]]) for k, src in enumerate(lay.voltage_sources)})
    for j, q in enumerate(lay.bjts):
        i[q.name + ".ib"], i[q.name + ".ic"] = float(x[lay.q_ib[j]]), float(x[lay.q_ic[j]])
    for node in {n_ for e in op.circuit.elements for n_ in terminals(e)} - set(v):
        v[node] = np.nan   # a node cut away entirely has no defined increment
    return IncrementalSolution(v=v, i=i, ok=bool(ok[0]))

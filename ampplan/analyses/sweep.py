"""Quasi-static large-signal sweep of a source: where does the first transistor leave forward-active?

The bisected reference: plans find their clipping with :mod:`.clipping` (exact for constant-drop,
a guided search for Ebers–Moll); the tests hold that to this sweep.

The coupling and bypass capacitors are held at their Q-point voltages (each becomes a voltage
source of that value), the source EMF is stepped away from its Q-point value in both directions,
and every step is one sample of one batched solve. A coarse logarithmic grid brackets the first
step at which any transistor is out of forward-active; a few rounds of finer grids narrow the
bracket to a part in 10^9.

For the constant-drop model each forward-active transistor also gets its hybrid-π input and
output resistances about the Q-point (:func:`with_hybrid_pi`): r_π in series with the base and
r_o across collector and emitter, each offset so the Q-point itself does not move. The
constant-drop equations alone hold V_BE fixed (r_π = 0), which pins the base of a bypassed stage
and makes the sweep disagree with the midband gains (or, from an ideal source, leaves it no
solution at all). With them the chain is piecewise linear and agrees with the hybrid-π gains, so
the answer is exact to the sweep's resolution; each step checks the all-forward-active
assignment (``assume=``), the branch a quasi-static sweep stays on while it is consistent.
"""

from __future__ import annotations

import numpy as np

from ..circuit import Bjt, Capacitor, Circuit, VoltageSource, UnionFind
from .results import Clipping
from .smallsignal import incremental_models

__all__ = ["held_capacitor_circuit", "with_hybrid_pi", "clipping_sweep"]

#: Coarse grid: this many steps per direction, logarithmic from 1 µV·span to 10·span.
COARSE_STEPS = 60
#: Refinement: rounds of this many steps each.
REFINE_STEPS = 16
REFINE_ROUNDS = 8


def held_capacitor_circuit(op) -> Circuit:
    """A copy of ``op.circuit`` with every capacitor replaced by a source holding its Q-point voltage.

    A capacitor whose nodes voltage sources already tie together is left out (it would close a
    loop of sources and holds nothing new).
    """
    circuit = op.circuit
    held = Circuit()
    ties = UnionFind()
    for e in circuit.elements:
        if isinstance(e, VoltageSource):
            ties.union(e.plus, e.minus)
    for e in circuit.elements:
        if isinstance(e, Capacitor):
            if ties.union(e.a, e.b):
                held.voltage_source(e.name, e.a, e.b, op.v[e.a] - op.v[e.b])
        else:
            held.add(e)
    return held


def with_hybrid_pi(circuit: Circuit, op, models: dict) -> Circuit:
    """``circuit`` with r_π and r_o added about the Q-point of ``op`` to each forward-active transistor.

    For a transistor with incremental model ``models[name]`` (hybrid-π: g[0, 0] = 1/r_π,
    g[1, 1] = -1/r_o), the base is fed through r_π and a source of -r_π·I_BQ, and r_o sits across
    collector and emitter beside a current source carrying its Q-point current the other way.
    At the Q-point both additions carry nothing, so the bias is unchanged; away from it they add
    exactly the hybrid-π terms the constant-drop equations leave out. New nodes are named
    ``"<transistor>.base"`` and ``"<transistor>.pi"``.
    """
    out = Circuit()
    for e in circuit.elements:
        m = models.get(e.name) if isinstance(e, Bjt) else None
        if m is None or m.kind != "conductance" or op.transistors[e.name].region != "forward-active" \
                or m.g[0, 0] <= 0:
            out.add(e)
            continue
        t = op.transistors[e.name]
        r_pi = 1.0 / m.g[0, 0]
        inner, middle = f"{e.name}.base", f"{e.name}.pi"
        out.resistor(f"{e.name}_r_pi", e.base, middle, r_pi)
        # Current into the base terminal is s·I_B (textbook I_B flows out of a PNP's base).
        out.voltage_source(f"{e.name}_v_pi", middle, inner, -r_pi * e.device.sign * t.ib)
        out.bjt(e.name, e.collector, inner, e.emitter, e.device)
        g_o = -m.g[1, 1]
        if g_o > 0:
            out.resistor(f"{e.name}_r_o", e.collector, e.emitter, 1.0 / g_o)
            out.current_source(f"{e.name}_i_o", e.emitter, e.collector, t.vce * g_o)
    return out


def clipping_sweep(op, source: str, transistor_stage: dict, model: str, active_edge: str = "vce-sat",
                   span: float | None = None, models: dict | None = None) -> Clipping:
    """Smallest source excursions, each sign, at which a transistor leaves forward-active.

    Parameters
    ----------
    op : OperatingPoint
        The Q-point (single solve).
    source : str
        The voltage source to step (its Q-point value is the sweep's zero).
    transistor_stage : dict of str -> str
        Stage id of each transistor, for reporting.
    model, active_edge : str
        As for :func:`ampplan.solver.solve`.
    span : float, optional
        Volts setting the sweep range (default: the largest supply magnitude); the sweep reaches
        ten times it.
    models : dict of str -> IncrementalModel, optional
        The Q-point's incremental models (computed when not given); the constant-drop sweep
        adds their r_π and r_o (:func:`with_hybrid_pi`).

    Returns
    -------
    Clipping
    """
    circuit = held_capacitor_circuit(op)
    if model == "constant-drop":
        circuit = with_hybrid_pi(circuit, op, incremental_models(op) if models is None else models)
    base = circuit.element(source).voltage
    names = list(op.transistors)
    stage_of = [transistor_stage.get(n) for n in names]
    out_now = [k for k, n in enumerate(names) if op.transistors[n].region != "forward-active"]
    if out_now:
        k = out_now[0]
        region = op.transistors[names[k]].region
        return Clipping(0.0, 0.0, stage_of[k], stage_of[k], region, region)
    if span is None:
        span = max((abs(e.voltage) for e in circuit.of_kind(VoltageSource) if e.name != source), default=1.0)
        span = max(span, 1.0)

    # The constant-drop chain stays on its forward-active branch for as long as that branch is
    # consistent (the operating point moves continuously), so each step only has to check the
    # all-forward-active assignment: one linear solve per step, no search.
    assume = {n: "forward-active" for n in names} if model == "constant-drop" else None

    def leaving(steps):
        """For each step (signed volts): index of the first transistor out of forward-active, or -1."""
        res = circuit.solve(model=model, temperature=op.temperature, active_edge=active_edge,
                            batch={source: base + steps}, assume=assume)
        if assume is None:
            out = np.stack([res.transistors[n].region != "forward-active" for n in names], axis=1)
        else:
            out = np.stack([~(res.transistors[n].checks[0].holds & res.transistors[n].checks[1].holds)
                            for n in names], axis=1)
        # A step with no answer at all counts as leaving; a singular all-forward-active system is
        # singular at every step (the source only moves the right-hand side) and says nothing.
        failed = ~np.isin(res.status, ("ok", "assumption-fails", "singular"))
        out |= failed[:, None]
        if assume is not None and np.all(res.status == "singular"):
            raise _Undetermined
        return np.where(out.any(axis=1), np.argmax(out, axis=1), -1)

    def entered(step, k):
        """The region transistor k is in just past the edge (a full solve of that one step)."""
        res = circuit.solve(model=model, temperature=op.temperature, active_edge=active_edge,
                            batch={source: np.array([base + step])})
        return str(res.transistors[names[k]].region[0])

    coarse = np.geomspace(1e-6 * span, 10.0 * span, COARSE_STEPS)
    # Both directions in one batch: positive steps first, then negative.
    try:
        first = leaving(np.concatenate([coarse, -coarse]))
    except _Undetermined:
        return Clipping(np.nan, np.nan, None, None, None, None)
    results = []
    for sign, part in ((1.0, slice(0, COARSE_STEPS)), (-1.0, slice(COARSE_STEPS, 2 * COARSE_STEPS))):
        hit = np.flatnonzero(first[part] >= 0)
        if hit.size == 0:
            results.append((np.inf, None, None))
            continue
        h = hit[0]
        results.append([0.0 if h == 0 else coarse[h - 1], coarse[h]])
    # Refine both brackets together.
    open_ = [k for k, r in enumerate(results) if isinstance(r, list)]
    for _ in range(REFINE_ROUNDS):
        if not open_:
            break
        grids = [np.linspace(results[k][0], results[k][1], REFINE_STEPS + 1)[1:] for k in open_]
        signs = [1.0 if k == 0 else -1.0 for k in open_]
        steps = np.concatenate([s * g for s, g in zip(signs, grids)])
        first = leaving(steps)
        for j, k in enumerate(open_):
            part = first[j * REFINE_STEPS:(j + 1) * REFINE_STEPS]
            h = int(np.flatnonzero(part >= 0)[0]) if np.any(part >= 0) else REFINE_STEPS - 1
            low = results[k][0] if h == 0 else grids[j][h - 1]
            results[k] = [low, grids[j][h]]
    # Report the first point found outside, and who left there.
    final = []
    for k, r in enumerate(results):
        if not isinstance(r, list):
            final.append(r)
            continue
        step = (1.0 if k == 0 else -1.0) * r[1]
        idx = max(int(leaving(np.array([step]))[0]), 0)
        final.append((0.5 * (r[0] + r[1]), stage_of[idx], entered(step, idx)))
    (pos, pos_stage, pos_region), (neg, neg_stage, neg_region) = final
    return Clipping(float(pos), float(neg), pos_stage, neg_stage, pos_region, neg_region)


class _Undetermined(Exception):
    """The forward-active branch of the held circuit is singular: the sweep cannot say."""

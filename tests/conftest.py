"""Shared helpers for ampplan's tests: hypothesis profile, circuit strategies, comparisons.

The reference side (plain circuit descriptions, sympy and scipy solvers) lives in
``tests/reference.py``; this file only draws circuits and compares results.
"""

from __future__ import annotations

import math
import os

import numpy as np
import pytest
from hypothesis import HealthCheck, Phase, settings
from hypothesis import strategies as st

import reference as ref

# Fast and deterministic enough for every run; a longer profile can be chosen by name.
# The explain phase is left out: it writes patch files and pulls in source-rewriting libraries
# whose import warnings would turn into errors (pytest runs with warnings as errors).
settings.register_profile(
    "ampplan", deadline=None, max_examples=40, print_blob=True,
    phases=(Phase.explicit, Phase.reuse, Phase.generate, Phase.target, Phase.shrink),
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much])
settings.register_profile(
    "ampplan-long", parent=settings.get_profile("ampplan"), max_examples=400)
settings.load_profile(os.environ.get("AMPPLAN_HYPOTHESIS_PROFILE", "ampplan"))

MODELS = ("constant-drop", "ebers-moll")


# --------------------------------------------------------------------------------------------
# Drawing circuits
# --------------------------------------------------------------------------------------------

def _hypothesis_draw(draw):
    def value(name, lo, hi, log):
        if log:
            return float(math.exp(draw(st.floats(math.log(lo), math.log(hi)), label=name)))
        return float(draw(st.floats(lo, hi), label=name))
    return value


@st.composite
def circuits(draw, topologies=ref.TOPOLOGIES):
    """(topology, element list) for one of the random circuit families of ``reference.build``."""
    topology = draw(st.sampled_from(topologies), label="topology")
    return topology, ref.build(topology, _hypothesis_draw(draw))


def reproducible_circuits(per_topology: int, entropy: int = 20240601, topologies=ref.TOPOLOGIES):
    """pytest params with stable ids (``divider-ce-0`` ...) from a numpy generator with fixed entropy."""
    params = []
    for t_index, topology in enumerate(topologies):
        for k in range(per_topology):
            rng = np.random.default_rng([entropy, t_index, k])
            params.append(pytest.param(topology, ref.build(topology, ref.numpy_draw(rng)),
                                       id=f"{topology}-{k}"))
    return params


# --------------------------------------------------------------------------------------------
# Reading results
# --------------------------------------------------------------------------------------------

def as_solution(op) -> dict:
    """An ampplan OperatingPoint in the reference layout (floats, or arrays in a batch)."""
    return {
        "v": dict(op.v),
        "i": dict(op.i),
        "transistors": {name: {"ic": t.ic, "ib": t.ib, "ie": t.ie, "vbe": t.vbe, "vce": t.vce}
                        for name, t in op.transistors.items()},
    }


def regions_of(op) -> dict:
    return {name: t.region for name, t in op.transistors.items()}


def voltage_scale(elements) -> float:
    """Largest source voltage magnitude, volts: the scale node voltages are compared against."""
    return max([abs(e.value) for e in elements if e.kind == "V"] + [1.0])


def compare(actual: dict, expected: dict, rtol: float, elements, voltage_floor: float = 1e-3,
            current_floor: float = 1e-6) -> list[str]:
    """Differences beyond ``rtol`` between two solutions in the reference layout.

    A voltage passes when ``|a - e| <= rtol * max(|e|, 1e-3 * V_scale)`` and a current when
    ``|a - e| <= rtol * max(|e|, 1e-6 * I_scale)``: relative to itself, except that values many
    decades below the circuit's largest (a cut-off transistor's leakage) are compared on that floor;
    a resistor's current also gets the voltage floor divided by its resistance. ``voltage_floor``
    and ``current_floor`` (fractions of the voltage and current scales) set the floors.
    """
    v_scale = voltage_scale(elements)
    i_scale = ref.current_scale(expected)
    bad = []

    def check(label, a, e, floor):
        a, e = float(a), float(e)
        if not (math.isfinite(a) and abs(a - e) <= rtol * max(abs(e), floor)):
            bad.append(f"{label}: got {a!r}, reference {e!r}")

    for node, e in expected["v"].items():
        check(f"v[{node}]", actual["v"][node], e, voltage_floor * v_scale)
    resistance = {e.name: e.value for e in elements if e.kind == "R"}
    for name, e in expected["i"].items():
        # A resistor current is a voltage difference over R: the voltage floor carries over.
        floor = max(current_floor * i_scale, voltage_floor * v_scale / resistance.get(name, math.inf))
        check(f"i[{name}]", actual["i"][name], e, floor)
    for name, t in expected["transistors"].items():
        for key in ("ic", "ib", "ie"):
            check(f"{name}.{key}", actual["transistors"][name][key], t[key], current_floor * i_scale)
        for key in ("vbe", "vce"):
            check(f"{name}.{key}", actual["transistors"][name][key], t[key], voltage_floor * v_scale)
    return bad


def kcl_imbalance(op, elements):
    """Net current leaving every non-ground node, amperes, recomputed here from the results.

    Resistor currents come from the node voltages (``(V_a - V_b) / R``), voltage-source currents
    from ``op.i``, current sources from their values, transistor currents from
    ``op.transistors`` with the textbook signs (API notes).

    Returns ``(imbalance, scale)``: ``imbalance`` maps node -> net current (float or (S,) array);
    ``scale`` maps node -> the current the tolerance is relative to: the largest current anywhere
    in the circuit, or, when larger, the sum of ``(|V_a| + |V_b|) / R`` over the node's resistors,
    the size of the numbers a resistor current is computed from (so that rounding a node voltage
    in its last bit is not counted as a KCL error).
    """
    net = {n: 0.0 for n in ref.nodes_of(elements)}
    operands = {n: 0.0 for n in net}
    magnitudes = [0.0]

    def leave(node, current, operand=0.0):
        magnitudes.append(np.abs(current))
        if node != ref.GROUND:
            net[node] = net[node] + current
            operands[node] = operands[node] + operand

    for e in elements:
        if e.kind == "R":
            a, b = e.nodes
            va, vb = np.asarray(op.v[a]), np.asarray(op.v[b])
            cur = (va - vb) / e.value
            operand = (np.abs(va) + np.abs(vb)) / e.value
            leave(a, cur, operand)
            leave(b, -cur, operand)
        elif e.kind == "V":
            plus, minus = e.nodes
            leave(plus, -np.asarray(op.i[e.name]))
            leave(minus, np.asarray(op.i[e.name]))
        elif e.kind == "I":
            leave(e.nodes[0], e.value)
            leave(e.nodes[1], -e.value)
        elif e.kind == "Q":
            s = ref.sign(e)
            coll, base, emit = e.nodes
            t = op.transistors[e.name]
            leave(coll, s * np.asarray(t.ic))
            leave(base, s * np.asarray(t.ib))
            leave(emit, -s * np.asarray(t.ie))
    largest = np.max(np.broadcast_arrays(*magnitudes), axis=0)
    scale = {n: np.maximum(largest, operands[n]) for n in net}
    return net, scale

"""The bordered Ebers–Moll Newton (ampplan.solver.edges): the source excursion at which a check of
forward-active reaches its limit.

Sources: the same circuit solved at the reported excursion by ``scipy.optimize.root`` on the
Ebers–Moll equations written independently in tests/reference.py; there the pinned quantity must
sit at its limit, V_CE(sat) as given, or the conduction voltage n·V_T·ln(1 + 100 nA / I_S) (the
junction law I = I_S·(exp(V/(n·V_T)) − 1) solved for 100 nA, with V_T = kT/q from
scipy.constants). The tangent is checked against a central difference of two such solutions.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import reference as ref
from ampplan.solver.assembly import layout_of
from ampplan.solver.edges import EdgeProblem

DEVICE = dict(beta=120.0, early_voltage=80.0, saturation_current=2e-14, beta_reverse=2.0, emission_coefficient=1.05)
SOURCE_VOLTS = 1.2


def stage(polarity="npn"):
    """A common-emitter stage driven at its base through RB, and a follower on its collector."""
    elements = [
        ref.V("VCC", "vcc", "gnd", 12.0),
        ref.V("VS", "in", "gnd", SOURCE_VOLTS),
        ref.R("RB", "in", "b", 10e3),
        ref.R("RC", "vcc", "c", 4.7e3),
        ref.R("RE", "e", "gnd", 1e3),
        ref.Q("Q1", "c", "b", "e", **DEVICE),
        ref.R("RE2", "e2", "gnd", 2.2e3),
        ref.Q("Q2", "vcc", "c", "e2", **DEVICE),
    ]
    return ref.mirror(elements) if polarity == "pnp" else elements


def _problem(elements, rc_values):
    circuit = ref.to_circuit(elements)
    lay = layout_of(circuit)
    batch = {"RC": np.asarray(rc_values, dtype=float)}
    op = circuit.solve(model="ebers-moll", batch=batch)
    x = np.concatenate([op.unknowns, np.zeros((len(rc_values), 1))], axis=1)
    source = [s.name for s in lay.voltage_sources].index("VS")
    return EdgeProblem(lay, lay.parameters(batch=batch), sparse=True), lay, x, source


def _reference_at(elements, rc, delta):
    s = 1.0 if ref.sign(elements[5]) > 0 else -1.0
    changed = ref.with_changes(elements, {"RC": rc, "VS": s * SOURCE_VOLTS + delta})
    sol = ref.ebers_moll_root(changed)
    assert sol["converged"]
    return sol


def _conduction_voltage():
    # Source: I_S·(exp(V/(n·V_T)) − 1) = 100 nA solved for V; V_T = kT/q (scipy.constants).
    nvt = DEVICE["emission_coefficient"] * ref.thermal_voltage(25.0)
    return nvt * math.log1p(100e-9 / DEVICE["saturation_current"])


@pytest.mark.parametrize("polarity", ["npn", "pnp"])
@pytest.mark.parametrize("count", [3, 300])          # dense LAPACK solves; the planned sparse elimination
@pytest.mark.parametrize("check", [0, 1])
def test_edge_solves_the_circuit_with_the_check_at_its_limit(polarity, count, check):
    elements = stage(polarity)
    rc_values = np.linspace(3.3e3, 6.8e3, count)
    problem, lay, x, source = _problem(elements, rc_values)
    assert problem.sparse == (count >= 256)
    rows = np.arange(count)
    edge = problem.solve(rows, x, source, np.zeros(count, dtype=np.intp), np.full(count, check))
    assert edge.converged.all()
    s = 1.0 if polarity == "npn" else -1.0
    for k in (0, count // 2, count - 1):
        delta = float(edge.delta[k])
        # Toward saturation the base is driven up (NPN), toward cutoff down; a PNP mirrors it.
        assert s * delta * (1 if check == 1 else -1) > 0
        sol = _reference_at(elements, rc_values[k], delta)
        volts = np.array([sol["v"][n] for n in lay.nodes])
        got = edge.x[k, :lay.n_nodes]
        # Source: scipy.optimize.root on the reference equations at the same excursion.
        assert np.max(np.abs(got - volts)) <= 1e-8 * np.max(np.abs(volts))
        t = sol["transistors"]["Q1"]
        if check == 1:
            assert abs(s * t["vce"] - 0.2) <= 1e-9
        else:
            assert abs(s * t["vbe"] - _conduction_voltage()) <= 1e-9


def test_tangent_is_the_derivative_of_the_answer():
    elements = stage()
    problem, lay, x, source = _problem(elements, [4.7e3])
    edge = problem.solve(np.array([0]), x, source, np.array([0]), np.array([1]))
    delta, h = float(edge.delta[0]), 1e-4
    up, down = _reference_at(elements, 4.7e3, delta + h), _reference_at(elements, 4.7e3, delta - h)
    # Source: central difference of two reference solutions (error of order h² times the curvature).
    for j, node in enumerate(lay.nodes):
        slope = (up["v"][node] - down["v"][node]) / (2 * h)
        assert math.isclose(edge.tangent[0, j], slope, rel_tol=1e-4, abs_tol=1e-6), node
    assert edge.tangent[0, -1] == 0.0          # ground


def test_held_excursion_is_the_plain_solution_there():
    elements = stage()
    problem, lay, x, source = _problem(elements, [4.7e3, 5.6e3])
    hold = np.array([0.3, -0.45])
    edge = problem.solve(np.array([0, 1]), x, source, np.zeros(2, dtype=np.intp), np.ones(2, dtype=np.intp),
                         hold=hold)
    assert edge.converged.all() and np.array_equal(edge.delta, hold)
    for k, rc in enumerate((4.7e3, 5.6e3)):
        sol = _reference_at(elements, rc, hold[k])
        # Source: scipy.optimize.root at that source value.
        volts = np.array([sol["v"][n] for n in lay.nodes])
        assert np.max(np.abs(edge.x[k, :lay.n_nodes] - volts)) <= 1e-8 * np.max(np.abs(volts))


def test_an_edge_the_circuit_cannot_reach_is_reported_not_converged():
    # The follower's V_CE = 12 V − V(e2) cannot come down to V_CE(sat): its base is fed from the
    # 12 V rail through RC, so V(e2) stays below 12 V minus a junction drop whatever the source does.
    elements = stage()
    problem, lay, x, source = _problem(elements, [4.7e3])
    edge = problem.solve(np.array([0]), x, source, np.array([1]), np.array([1]))
    assert not edge.converged[0]
    assert math.isnan(edge.delta[0]) and np.isnan(edge.x[0]).all()

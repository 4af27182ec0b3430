"""ampplan against independent solutions of the same equations (issue 2 §7).

- Constant-drop: for reproducible random circuits, sympy solves the linear equations of the region
  assignment ampplan reports, in exact rationals (tests/reference.py builds them from the element
  list); every value must agree to 1e-9 and every region check must hold exactly.
- Ebers–Moll: scipy.optimize.root solves our own KCL residual with the same device equations
  (API notes), started from our own constant-drop solution; agreement to 1e-6 relative.

The circuits come from numpy generators with fixed entropy, so every case has a stable id (``diff-pair-3``).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import constants

import reference as ref
from ampplan import errors
from conftest import as_solution, compare, regions_of, reproducible_circuits

CASES = reproducible_circuits(per_topology=10)


@pytest.mark.parametrize("topology, elements", CASES)
def test_constant_drop_equals_sympy_exact_solution(topology, elements):
    # Source: sympy exact-rational solution of the reported region's linear equations
    # (reference.constant_drop_exact), compared to 1e-9 relative.
    consistent = ref.constant_drop_enumerate(elements)
    try:
        op = ref.to_circuit(elements).solve(model="constant-drop")
    except errors.NoConsistentRegionError:
        assert not consistent, (
            f"ampplan found no consistent region, our enumeration found {[r for r, _, _ in consistent]}")
        return
    regions = regions_of(op)
    exact = ref.constant_drop_exact(elements, regions)
    assert exact is not None, f"the equations of {regions} are singular, yet ampplan reports them"
    # Source: the region conditions of DESIGN §4, evaluated in exact arithmetic on sympy's solution.
    for name, checks in exact["checks"].items():
        for check, margin, strict in checks:
            assert float(margin) >= -1e-12 * ref.current_scale(exact), (name, check, margin)
    bad = compare(as_solution(op), exact, 1e-9, elements)
    assert not bad, f"{regions}:\n" + "\n".join(bad)


@pytest.mark.parametrize("topology, elements", CASES)
def test_constant_drop_region_is_one_our_enumeration_finds(topology, elements):
    # Source: our own brute-force walk over all 4**N assignments (reference.constant_drop_enumerate):
    # the reported assignment and every alternative must be among the consistent ones, and when
    # there is just one consistent assignment, ampplan must report it.
    consistent = ref.constant_drop_enumerate(elements)
    op = ref.to_circuit(elements).solve(model="constant-drop")
    found = [r for r, _, _ in consistent]
    assert regions_of(op) in found
    for alt in op.alternatives:
        assert regions_of(alt) in found
    if len(found) == 1:
        assert not op.alternatives


@pytest.mark.parametrize("topology, elements", CASES)
def test_ebers_moll_equals_scipy_root(topology, elements):
    # Source: scipy.optimize.root on our own Ebers–Moll KCL residual (reference.ebers_moll_root),
    # same device equations (API notes), V_T from scipy.constants; compared to 1e-6 relative.
    reference = ref.ebers_moll_root(elements)
    assert reference["converged"], "our scipy reference did not converge (a test problem, not ampplan's)"
    op = ref.to_circuit(elements).solve(model="ebers-moll")
    bad = compare(as_solution(op), reference, 1e-6, elements)
    assert not bad, f"(reference started from {reference['start']}):\n" + "\n".join(bad)


@pytest.mark.parametrize("topology, elements", CASES[::3])
def test_ebers_moll_solution_is_a_root_of_our_residual(topology, elements):
    # Source: our own residual (reference._em_system) evaluated at ampplan's node voltages and source
    # currents: every KCL row to 1e-9 of the largest current, every source constraint to 1e-9 V.
    op = ref.to_circuit(elements).solve(model="ebers-moll")
    nodes, index, fun = ref._em_system(elements, ref.thermal_voltage(25.0))
    x = np.zeros(len(index))
    for (kind, name), k in index.items():
        x[k] = op.v[name] if kind == "v" else op.i[name]
    f, _ = fun(x)
    i_scale = max(abs(op.i[e.name]) for e in elements if e.kind == "V")
    kcl = np.array([f[index[("v", n)]] for n in nodes])
    assert np.max(np.abs(kcl)) <= 1e-9 * i_scale
    # And the reported transistor currents are the device equations at the reported voltages.
    for e in ref.transistors_of(elements):
        s = ref.sign(e)
        coll, base, emit = e.nodes
        ic, ib, _, _ = ref.ebers_moll_currents(e.params(), s * (op.v[base] - op.v[emit]),
                                               s * (op.v[base] - op.v[coll]), ref.thermal_voltage(25.0))
        t = op.transistors[e.name]
        assert t.ic == pytest.approx(ic, rel=1e-9, abs=1e-12 * i_scale)
        assert t.ib == pytest.approx(ib, rel=1e-9, abs=1e-12 * i_scale)


@pytest.mark.parametrize("topology, elements", CASES[1::4])
def test_ebers_moll_at_60C_with_textbook_saturation_current_law(topology, elements):
    # Source: scipy.optimize.root on our residual at 60 °C with V_T = kT/q (scipy.constants) and
    # I_S(T) = I_S(T0) (T/T0)^(3/n) exp(E_g q / (n k) (1/T0 - 1/T)), E_g = 1.11 eV (Gray & Meyer, Analysis
    # and Design of Analog Integrated Circuits, from memory; n = emission coefficient, as the
    # Transistor docstring documents); compared to 1e-6 relative.
    t0, t1 = 25.0 + constants.zero_Celsius, 60.0 + constants.zero_Celsius
    scaled = []
    for e in elements:
        if e.kind == "Q":
            p = e.params()
            n = p["emission_coefficient"]
            factor = (t1 / t0) ** (3.0 / n) * math.exp(1.11 * constants.e / (n * constants.k) * (1 / t0 - 1 / t1))
            e = ref.with_changes([e], {f"{e.name}.saturation_current": p["saturation_current"] * factor})[0]
        scaled.append(e)
    reference = ref.ebers_moll_root(scaled, temperature=60.0)
    assert reference["converged"]
    op = ref.to_circuit(elements).solve(model="ebers-moll", temperature=60.0)
    bad = compare(as_solution(op), reference, 1e-6, elements)
    assert not bad, "\n".join(bad)


def _latch(rc2):
    """Two cross-coupled common-emitter stages (a bistable latch), the textbook circuit with more than
    one DC operating point (Sedra & Smith, bistable multivibrator, from memory)."""
    return [ref.V("VCC", "vcc", ref.GROUND, 5.0), ref.R("RC1", "vcc", "c1", 1e3), ref.R("RC2", "vcc", "c2", rc2),
            ref.R("RB1", "c2", "b1", 10e3), ref.R("RB2", "c1", "b2", 10e3),
            ref.Q("Q1", "c1", "b1", ref.GROUND), ref.Q("Q2", "c2", "b2", ref.GROUND)]


@pytest.mark.parametrize("rc2", [1e3, 1.2e3], ids=["symmetric", "lopsided"])
def test_latch_reports_every_consistent_operating_point(rc2):
    # Source: our brute-force enumeration (reference.constant_drop_enumerate) and sympy exact solves:
    # the chosen point and op.alternatives together are exactly the consistent assignments (issue 2 §3),
    # each one equal to its sympy solution to 1e-9.
    elements = _latch(rc2)
    found = [r for r, _, _ in ref.constant_drop_enumerate(elements)]
    assert len(found) >= 2, "the latch should have several consistent points"
    op = ref.to_circuit(elements).solve(model="constant-drop")
    reported = [regions_of(op)] + [regions_of(a) for a in op.alternatives]
    assert sorted(map(str, reported)) == sorted(map(str, found))
    for point in (op, *op.alternatives):
        exact = ref.constant_drop_exact(elements, regions_of(point))
        bad = compare(as_solution(point), exact, 1e-9, elements)
        assert not bad, "\n".join(bad)
    # Issue 2 §3: the one returned is the one the Ebers–Moll solution points to.
    em = ref.to_circuit(elements).solve(model="ebers-moll")
    if regions_of(em) in found:
        assert regions_of(op) == regions_of(em)


CHAINS = [pytest.param(ref.build_chain(ref.numpy_draw(np.random.default_rng([20240602, k]))), id=f"chain-6q-{k}")
          for k in range(8)]


@pytest.mark.parametrize("elements", CHAINS)
def test_six_transistor_chain_against_sympy_and_scipy(elements):
    # Source: sympy exact solution of the reported regions (consistent in exact arithmetic, equal to
    # 1e-9) and scipy.optimize.root on our Ebers–Moll residual (equal to 1e-6), for cascades of six
    # transistors, beyond ampplan's full enumeration (its search from the Ebers–Moll guess).
    op = ref.to_circuit(elements).solve(model="constant-drop")
    exact = ref.constant_drop_exact(elements, regions_of(op))
    assert exact is not None
    assert ref.is_consistent(exact, rtol=1e-12), exact["checks"]
    bad = compare(as_solution(op), exact, 1e-9, elements)
    assert not bad, "\n".join(bad)
    # Our root finder starts from ampplan's constant-drop voltages (a different model's answer).
    reference = ref.ebers_moll_root(elements, start=op.v)
    assert reference["converged"]
    em = ref.to_circuit(elements).solve(model="ebers-moll")
    bad = compare(as_solution(em), reference, 1e-6, elements)
    assert not bad, "\n".join(bad)

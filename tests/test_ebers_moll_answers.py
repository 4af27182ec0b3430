"""An Ebers–Moll answer is "ok" only when it solves its own equations (issue 9 item 2).

Sources: Kirchhoff's current law recomputed here from the reported currents (conftest.kcl_imbalance);
the transport-form Ebers–Moll equations written independently in tests/reference.py, with I_S
moved to the temperature by the textbook law (Gray & Meyer, Analysis and Design of Analog
Integrated Circuits, from memory) and V_T = kT/q from scipy.constants.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, note, settings
from hypothesis import strategies as st
from scipy import constants

import ampplan
import reference as ref
from ampplan import errors
from conftest import kcl_imbalance

#: The solver's documented tolerance for the final check (ampplan.solver.ebers_moll.RESIDUAL_TOLERANCE).
TOLERANCE = 1e-7


def _reversed_stage(saturation_current):
    """Collector and emitter swapped on the board; an absurd saturation current makes it ill-conditioned."""
    q = ampplan.Transistor(beta=90.0, saturation_current=saturation_current, beta_reverse=0.25,
                           emission_coefficient=1.1, early_voltage=57.0)
    c = ampplan.Circuit()
    c.voltage_source("VCC", "vcc", "gnd", 10.0)
    c.resistor("RB", "vcc", "b", 51e3)
    c.resistor("RE", "vcc", "e", 6.2e3)
    c.resistor("RC", "c", "gnd", 75e3)
    c.bjt("Q1", collector="c", base="b", emitter="e", device=q)
    return c


@pytest.mark.parametrize("saturation_current, celsius", [(20.0, 140.0), (43.0, 147.0)])
def test_answer_missing_kirchhoffs_law_is_refused_with_the_measured_miss(saturation_current, celsius):
    # Found by fuzzing: with a saturation current of tens of amperes (valid input: only > 0 is
    # required) Newton's last iterate misses KCL at the base by about 1 % of the supply current;
    # that answer used to come back "ok". It must fail, saying by how much and where.
    c = _reversed_stage(saturation_current)
    with pytest.raises(errors.ConvergenceError, match=r"misses Kirchhoff's current law by .* at node b") as info:
        c.solve(model="ebers-moll", temperature=celsius)
    assert "relative tolerance 1e-07" in str(info.value)
    assert set(info.value.last_iterate) == {"vcc", "b", "e", "c"}


def test_in_a_batch_only_the_sample_that_misses_fails():
    c = _reversed_stage(1e-14)
    op = c.solve(model="ebers-moll", temperature=140.0, batch={"Q1.saturation_current": [1e-14, 20.0, 1e-15]})
    assert op.status.tolist() == ["ok", "no-convergence", "ok"]
    assert np.isnan(op.v["b"][1]) and op.transistors["Q1"].region[1] == "unsolved"
    assert np.all(op.kcl_residual()[[0, 2]] <= 1e-12 * abs(op.i["VCC"][[0, 2]]))


def _saturation_current_at(p, celsius):
    # Source: I_S(T) = I_S(T0) (T/T0)^(m/n) exp(E_g q/(n k) (1/T0 - 1/T)), Gray & Meyer (from memory).
    t0, t = 25.0 + constants.zero_Celsius, celsius + constants.zero_Celsius
    n = p["emission_coefficient"]
    return p["saturation_current"] * (t / t0) ** (3.0 / n) * math.exp(
        1.11 * constants.e / (n * constants.k) * (1.0 / t0 - 1.0 / t))


@st.composite
def extreme_circuits(draw):
    """A random circuit family of reference.build, a temperature anywhere in the valid range, and
    saturation currents anywhere from ordinary (0.1 fA) to absurd (100 A)."""
    topology = draw(st.sampled_from(ref.TOPOLOGIES), label="topology")
    huge = draw(st.booleans(), label="absurd saturation current")

    def value(name, lo, hi, log):
        if name.endswith("saturation_current") and huge:
            lo, hi = 1e-3, 1e2
        if log:
            return float(math.exp(draw(st.floats(math.log(lo), math.log(hi)), label=name)))
        return float(draw(st.floats(lo, hi), label=name))

    return ref.build(topology, value), draw(st.floats(-55.0, 150.0), label="temperature")


@settings(max_examples=120)
@given(case=extreme_circuits())
def test_every_ok_answer_meets_kcl_and_the_device_equations(case):
    # Issue 9 item 2: no result may be "ok" unless its own residual is within the solver's
    # tolerance; otherwise a single solve raises ConvergenceError with the reason.
    elements, celsius = case
    try:
        op = ref.to_circuit(elements).solve(model="ebers-moll", temperature=celsius)
    except errors.ConvergenceError as error:
        note(str(error))
        return
    assert op.status == "ok"
    net, scale = kcl_imbalance(op, elements)
    for node, imbalance in net.items():
        assert abs(imbalance) <= 2 * TOLERANCE * scale[node], (node, imbalance, scale[node])
    v_t = constants.k * (celsius + constants.zero_Celsius) / constants.e
    for e in ref.transistors_of(elements):
        p = dict(e.params())
        p["saturation_current"] = _saturation_current_at(p, celsius)
        s, t = ref.sign(e), op.transistors[e.name]
        ic, ib, _, _ = ref.ebers_moll_currents(p, s * t.vbe, s * (t.vbe - t.vce), v_t)
        size = max(abs(ic), abs(ib), abs(t.ic), abs(t.ib))
        assert abs(ic - t.ic) <= 2 * TOLERANCE * size + 1e-15, e.name
        assert abs(ib - t.ib) <= 2 * TOLERANCE * size + 1e-15, e.name

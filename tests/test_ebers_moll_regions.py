"""Ebers–Moll region classification: by what the junctions do at the device's I_S and temperature.

The rule (ampplan.solver.regions, the API notes): a junction conducts when it injects at least
100 nA, I_S·(exp(V/(n·V_T)) − 1) >= 100 nA, with I_S and V_T at the solve temperature; cutoff
when neither conducts, else forward-active / saturation / reverse-active by V_CE against
V_CE(sat). The checks here recompute that rule from scipy.constants and the textbook I_S law, and
test that both models agree on the region wherever constant-drop's margins are comfortable.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from scipy import constants

import ampplan


def _thermal_voltage(celsius):
    # Source: V_T = kT/q, k and e from scipy.constants.
    return constants.k * (celsius + constants.zero_Celsius) / constants.e


def _saturation_current(device, celsius):
    # Source: I_S(T) = I_S(T0) (T/T0)^(m/n) exp(E_g q/(n k) (1/T0 - 1/T)) (Gray & Meyer, Analysis and
    # Design of Analog Integrated Circuits, the I_S temperature law of the bipolar chapter, from
    # memory); k, e from scipy.constants; T0 = 25 °C.
    t0, t = 25.0 + constants.zero_Celsius, celsius + constants.zero_Celsius
    n = device.emission_coefficient
    return device.saturation_current * (t / t0) ** (device.saturation_current_exponent / n) * math.exp(
        device.bandgap_energy * constants.e / (n * constants.k) * (1.0 / t0 - 1.0 / t))


def _vbe_on(device, celsius):
    # Source: V_BE(on) moves linearly, vbe_temperature_coefficient per kelvin from 25 °C (the
    # documented constant-drop law; -2 mV/K by default, common practice, no source).
    return device.vbe_on + device.vbe_temperature_coefficient * (celsius - 25.0)


def _stage(device, vcc, r1, r2, rc, re):
    """A divider-biased common-emitter stage; a PNP is mirrored (supply negative)."""
    s = device.sign
    c = ampplan.Circuit()
    c.voltage_source("VCC", "vcc", "gnd", s * vcc)
    if r1 is not None:
        c.resistor("R1", "vcc", "b", r1)
    c.resistor("R2", "b", "gnd", r2)
    c.resistor("RC", "vcc", "c", rc)
    c.resistor("RE", "e", "gnd", re)
    c.bjt("Q1", collector="c", base="b", emitter="e", device=device)
    return c


MEDIUM_POWER_NPN = ampplan.preset("medium-power NPN")


def test_medium_power_npn_at_a_dozen_microamperes_is_forward_active():
    # The case of issue 9 item 3: a medium-power NPN (I_S = 100 fA) carrying about 12 µA with
    # about 5.5 V across it. Its V_BE (about 0.48 V) is below the old fixed threshold of 0.5 V,
    # yet the junction plainly conducts: I_C / I_B is its β. Source for "forward-active": the
    # textbook definition of the mode (Sedra & Smith, Microelectronic Circuits, from memory):
    # emitter-base junction conducting, collector-base junction reverse biased.
    c = _stage(MEDIUM_POWER_NPN, 12.0, 820e3, 100e3, 330e3, 47e3)
    em = c.solve(model="ebers-moll")
    t = em.transistors["Q1"]
    assert 5e-6 < t.ic < 30e-6 and t.vbe < 0.5 and t.vce > 4.0
    assert t.ic / t.ib == pytest.approx(MEDIUM_POWER_NPN.beta, rel=0.05)
    assert t.region == "forward-active"
    assert c.solve(model="constant-drop").transistors["Q1"].region == "forward-active"
    # The check that decided it names the 100 nA threshold and holds with a margin in volts.
    conducts = t.checks[0]
    assert conducts.name == "V_BE >= V_BE(100 nA)" and conducts.holds and conducts.margin > 0.1


@pytest.mark.parametrize("celsius", [-55.0, 25.0, 150.0])
@pytest.mark.parametrize("role", sorted(ampplan.PRESETS))
def test_conduction_threshold_is_the_junction_voltage_at_100_nA(role, celsius):
    # Source: the junction law I = I_S (exp(V/(n V_T)) - 1) inverted at I = 100 nA, with I_S moved by
    # the textbook law (_saturation_current) and V_T from scipy.constants. A diode-connected
    # transistor (V_BC = 0, so V_CE = V_BE) held just below and just above that voltage must classify
    # as cutoff, then as conducting: forward-active where V_CE = V_BE >= V_CE(sat), else saturation.
    device = ampplan.preset(role)
    v_on = device.emission_coefficient * _thermal_voltage(celsius) * math.log1p(
        100e-9 / _saturation_current(device, celsius))
    regions = []
    for v in (v_on * (1 - 1e-6), v_on * (1 + 1e-6)):
        c = ampplan.Circuit()
        c.voltage_source("VD", "d", "gnd", device.sign * v)
        c.bjt("Q1", collector="d", base="d", emitter="gnd", device=device)
        t = c.solve(model="ebers-moll", temperature=celsius).transistors["Q1"]
        regions.append(t.region)
        if t.region != "saturation":       # saturation's checks are both on V_CE
            assert t.checks[0].limit == pytest.approx(v_on, rel=1e-9)
    assert regions == ["cutoff", "forward-active" if v_on >= device.vce_sat else "saturation"]


@st.composite
def ordinary_stages(draw):
    """An ordinary divider-biased stage with a preset device, designed for one region.

    Forward-active: the usual hand procedure (common practice, no source): V_E a tenth to a third
    of V_CC, a divider carrying 10 to 50 base currents, R_C from the chosen V_CE, I_C from 2 µA
    to 10 mA. Cutoff: the same divider with its open-circuit base voltage well below V_BE(on).
    Saturation: R_C too large for the collector current the base current asks for.
    """
    role = draw(st.sampled_from(sorted(ampplan.PRESETS)), label="preset")
    device = ampplan.preset(role)
    celsius = draw(st.floats(-55.0, 150.0), label="temperature")
    vcc = draw(st.floats(5.0, 30.0), label="VCC")
    mode = draw(st.sampled_from(["forward-active", "cutoff", "saturation"]), label="mode")
    ic = math.exp(draw(st.floats(math.log(2e-6), math.log(1e-2)), label="log I_C"))
    vbe = _vbe_on(device, celsius)
    ve = vcc * draw(st.floats(0.1, 0.3), label="V_E fraction")
    re = ve / ic
    i_div = ic / device.beta * draw(st.floats(10.0, 50.0), label="divider stiffness")
    if mode == "forward-active":
        vce = draw(st.floats(0.3, 0.7), label="V_CE fraction") * (vcc - ve)
        rc = (vcc - ve - vce) / ic
        vb = ve + vbe
    elif mode == "saturation":
        rc = draw(st.floats(4.0, 40.0), label="R_C excess") * (vcc - ve) / ic
        vb = ve + vbe
    else:
        rc = (vcc - ve) / ic
        vb = draw(st.floats(0.0, 1.0), label="base fraction") * max(vbe - 0.45, 0.0)
    r2 = max(vb, 1e-3) / i_div
    r1 = (vcc - vb) / i_div
    return device, celsius, _stage(device, vcc, r1, r2, rc, re), (rc + re) / re


def _comfortable(t, device, celsius, gain):
    """Constant-drop's region where its margins are comfortable (common practice, no source), else None.

    Forward-active: I_C at least 1 µA and V_CE above V_CE(sat) by 0.5 V plus what the models'
    difference in V_BE can move it: the two V_BE at this I_C (constant-drop's V_BE(on), and the
    junction law's n·V_T·ln(1 + I_C/I_S) with I_S at the temperature) differ by ΔV, which a stiff
    divider turns into a V_CE shift of ΔV·(R_C + R_E)/R_E (``gain``); allow half as much again.
    Cutoff: both
    junctions at least 0.45 V below V_BE(on) at the temperature (the constant-drop on-voltage is a
    fit good to a couple of tenths of a volt at milliamperes). Saturation: the forced beta I_C/I_B at
    most a quarter of β.
    """
    s = device.sign
    if t.region == "forward-active" and t.ic >= 1e-6:
        law = device.emission_coefficient * _thermal_voltage(celsius) * math.log1p(
            t.ic / _saturation_current(device, celsius))
        shift = 1.5 * abs(_vbe_on(device, celsius) - law) * gain
        if s * t.vce >= device.vce_sat + 0.5 + shift:
            return t.region
    if t.region == "cutoff":
        on = _vbe_on(device, celsius)
        if s * t.vbe <= on - 0.45 and s * (t.vbe - t.vce) <= on - 0.45:
            return t.region
    if t.region == "saturation" and t.ib > 0 and t.ic / t.ib <= device.beta / 4:
        return t.region
    return None


@settings(max_examples=150)
@given(stage=ordinary_stages())
def test_models_agree_on_region_where_constant_drop_margins_are_comfortable(stage):
    # Issue 9 item 3: both models give the same region wherever constant-drop's margins are
    # comfortable (_comfortable), over presets, polarities and the whole temperature range.
    device, celsius, circuit, gain = stage
    cd = circuit.solve(model="constant-drop", temperature=celsius).transistors["Q1"]
    region = _comfortable(cd, device, celsius, gain)
    assume(region is not None)
    em = circuit.solve(model="ebers-moll", temperature=celsius).transistors["Q1"]
    assert em.region == region, (em.region, em.ic, em.vbe, em.vce)


@settings(max_examples=60)
@given(stage=ordinary_stages())
def test_ebers_moll_region_follows_the_junction_currents(stage):
    # Source: the documented rule recomputed here from the reported voltages with I_S moved by the
    # textbook law and V_T from scipy.constants (cases within 1 µV of an edge are left out).
    device, celsius, circuit, _ = stage
    t = circuit.solve(model="ebers-moll", temperature=celsius).transistors["Q1"]
    s = device.sign
    v_be, v_bc, v_ce = s * t.vbe, s * (t.vbe - t.vce), s * t.vce
    nvt = device.emission_coefficient * _thermal_voltage(celsius)
    i_s = _saturation_current(device, celsius)
    on = nvt * math.log1p(100e-9 / i_s)
    assume(min(abs(v_be - on), abs(v_bc - on), abs(abs(v_ce) - device.vce_sat)) > 1e-6)
    conducts = i_s * math.expm1(v_be / nvt) >= 100e-9 or i_s * math.expm1(v_bc / nvt) >= 100e-9
    expected = ("cutoff" if not conducts else "forward-active" if v_ce >= device.vce_sat
                else "reverse-active" if v_ce <= -device.vce_sat else "saturation")
    assert t.region == expected


def test_check_table_names_every_region_of_both_models_in_both_polarities():
    # The shared table (ampplan.solver.regions) against the region definitions written out in
    # DESIGN §4 (constant-drop) and the API notes (Ebers–Moll), read back through a batch solve's
    # checks: each reported check name must be the one the definitions give for that region.
    expected = {
        ("constant-drop", "npn", "forward-active"): ("I_B > 0", "V_CE >= V_CE(sat)"),
        ("constant-drop", "pnp", "forward-active"): ("I_B > 0", "V_EC >= V_EC(sat)"),
        ("constant-drop", "npn", "cutoff"): ("V_BE < V_BE(on)", "V_BC < V_BC(on)"),
        ("constant-drop", "npn", "saturation"): ("I_B > 0", "I_C < beta*I_B"),
        ("ebers-moll", "npn", "forward-active"): ("V_BE >= V_BE(100 nA)", "V_CE >= V_CE(sat)"),
        ("ebers-moll", "pnp", "forward-active"): ("V_EB >= V_EB(100 nA)", "V_EC >= V_EC(sat)"),
        ("ebers-moll", "npn", "cutoff"): ("V_BE < V_BE(100 nA)", "V_BC < V_BC(100 nA)"),
        ("ebers-moll", "npn", "saturation"): ("V_CE < V_CE(sat)", "V_CE > -V_CE(sat)"),
    }
    # Base driven through 1 MΩ from a swept source: cutoff, forward-active, saturation.
    for (model, polarity, region), names in expected.items():
        device = ampplan.Transistor(polarity=polarity, beta=100.0)
        s = device.sign
        c = ampplan.Circuit()
        c.voltage_source("VCC", "vcc", "gnd", s * 10.0)
        c.voltage_source("VIN", "in", "gnd", 0.0)
        c.resistor("RB", "in", "b", 1e6)
        c.resistor("RC", "vcc", "c", 10e3)
        c.bjt("Q1", collector="c", base="b", emitter="gnd", device=device)
        op = c.solve(model=model, batch={"VIN": s * np.array([0.0, 2.0, 30.0])})
        t = op.transistors["Q1"]
        k = list(t.region).index(region)
        assert (str(t.checks[0].name[k]), str(t.checks[1].name[k])) == names, (model, polarity, region)


def test_region_codes_follow_the_region_names():
    # The codes index REGIONS (the Literal vocabulary of the result type), never a retyped list.
    from ampplan.solver import regions as rg
    assert [ampplan.solver.REGIONS[c] for c in (rg.CUTOFF, rg.ACTIVE, rg.SATURATION, rg.REVERSE)] == [
        "cutoff", "forward-active", "saturation", "reverse-active"]

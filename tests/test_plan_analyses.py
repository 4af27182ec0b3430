"""Plan analyses (issue 3 §2 and §5) against references from outside the project.

Sources used below, each named again beside its check:

- Hybrid-π small-signal formulas (g_m = I_C/V_T, r_π = β/g_m, r_o = V_A/I_C) and the single-stage
  gain, input and output resistance of the CE, degenerated CE, CC and CB stages: Sedra & Smith,
  *Microelectronic Circuits*, and Razavi, *Fundamentals of Microelectronics*, the BJT amplifier
  chapters (from memory). Every closed form is written exactly for the hybrid-π model (with β + 1
  where the usual approximation drops it) and re-derived in a comment where it is less common.
- Voltage-divider bias, exact Thevenin analysis: Sedra & Smith; Boylestad & Nashelsky, *Electronic
  Devices and Circuit Theory* (from memory).
- AC load line and swing: the load-line construction of the same books (from memory), with the
  emitter carrying I_C (1 + 1/β) as the plan's definition asks.
- Largest source amplitude: re-derived here by hand from the constant-drop model (V_BE fixed at
  V_BE(on), coupling and bypass capacitors held at their Q-point voltages).
- Direct-coupled chains: sympy's exact rational solution of the same constant-drop linear
  equations (tests/reference.py, written independently of ampplan).
- Physical constants: scipy.constants (CODATA) for V_T = kT/q.
- Ratings (0.25 W resistor, 1 V headroom, linear derating to 150 °C) and the 60 V DC
  safety extra-low-voltage limit: common practice, no source (the project's rules name them).

Circuit values are arbitrary inputs; no reference number is typed in.
"""

from __future__ import annotations

import math

import pytest
import sympy
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from scipy import constants

import ampplan
import reference as ref
from ampplan import errors
from ampplan.circuit import Resistor
from reference import GROUND, C, Q, R, V

#: Thermal voltage at 25 °C from physical constants (scipy.constants, CODATA): V_T = kT/q.
VT = constants.k * (25.0 + constants.zero_Celsius) / constants.e
VBE_ON, VCE_SAT = 0.7, 0.2          # the constant-drop model's defaults (common practice, no source)
RTOL = 1e-9                          # closed forms against a linear solve: rounding only


def par(*rs):
    """Resistors in parallel, ohms (``math.inf`` is an open, 0 a short)."""
    if any(r == 0 for r in rs):
        return 0.0
    g = sum(0.0 if math.isinf(r) else 1.0 / r for r in rs)
    return math.inf if g == 0 else 1.0 / g


def close(actual, expected, rtol=RTOL):
    return math.isclose(actual, expected, rel_tol=rtol, abs_tol=0.0)


def hybrid_pi(ic, beta, early=math.inf):
    """(g_m, r_π, r_o) of the hybrid-π model (Sedra & Smith; Razavi — from memory)."""
    gm = ic / VT
    return gm, beta / gm, early / ic


def divider(polarity, near, far):
    """rb1/rb2 for a divider with ``near`` from the base to the emitter-side rail, ``far`` to the other.

    An NPN's emitter side is the lower rail; a PNP hangs the mirrored way (issue 3 §1), so its
    emitter side is the supply.
    """
    return dict(rb1=far, rb2=near) if polarity == "npn" else dict(rb1=near, rb2=far)


def divider_qpoint(span, near, far, rc, re_total, beta, vbe=VBE_ON):
    """Exact constant-drop Q-point of divider bias, in the transistor's own frame.

    Source: Sedra & Smith; Boylestad & Nashelsky "exact analysis" (from memory):
    I_B = (V_Th - V_BE) / (R_Th + (β + 1) R_E), V_Th measured from the emitter-side rail,
    |V_CE| = span - I_C R_C - I_E R_E.
    """
    v_th = span * near / (near + far)
    r_th = par(near, far)
    ib = (v_th - vbe) / (r_th + (beta + 1.0) * re_total)
    ic, ie = beta * ib, (beta + 1.0) * ib
    return {"ib": ib, "ic": ic, "ie": ie, "vce": span - ic * (rc or 0.0) - ie * re_total}


def single_stage_plan(stage, *, supply=12.0, negative=0.0, rs=600.0, rl=10e3, load="capacitor", **kw):
    plan = ampplan.Plan(supply=supply, negative_supply=negative, source_resistance=rs,
                        load_resistance=rl, **kw)
    plan.add(stage, coupling="capacitor")
    plan.load_coupling = load
    return plan


def frame_vce(t):
    """|V_CE| in the transistor's own frame (V_EC for a PNP)."""
    return (1 if t.polarity == "npn" else -1) * t.vce


POLARITIES = ("npn", "pnp")


# ---------------------------------------------------------------------------------------------
# Q-points of the single stages (the small-signal tests below take I_C from the result itself)
# ---------------------------------------------------------------------------------------------

@pytest.mark.parametrize("polarity", POLARITIES)
@pytest.mark.parametrize("kind", ["ce-bypassed", "ce-partly", "cc", "cb"])
def test_single_stage_qpoint_matches_divider_formula(kind, polarity):
    # Source: exact Thevenin divider-bias analysis (Sedra & Smith; Boylestad & Nashelsky, from memory).
    beta = 120.0
    q = ampplan.Transistor(polarity=polarity, beta=beta)
    near, far = 10e3, 39e3
    if kind == "ce-bypassed":
        stage = ampplan.CommonEmitter(**divider(polarity, near, far), rc=3.9e3, re_bypassed=1.2e3, device=q)
        rc, re_total = 3.9e3, 1.2e3
    elif kind == "ce-partly":
        stage = ampplan.CommonEmitter(**divider(polarity, near, far), rc=3.9e3, re=270.0, re_bypassed=1e3,
                                      device=q)
        rc, re_total = 3.9e3, 1270.0
    elif kind == "cc":
        stage = ampplan.CommonCollector(**divider(polarity, near, far), re=2.2e3, device=q)
        rc, re_total = None, 2.2e3
    else:
        stage = ampplan.CommonBase(**divider(polarity, near, far), rc=3.9e3, re=1.5e3, device=q)
        rc, re_total = 3.9e3, 1.5e3
    res = single_stage_plan(stage).solve()
    t = res.stages[0].transistor
    hand = divider_qpoint(12.0, near, far, rc, re_total, beta)
    assert t.region == "forward-active"
    assert close(t.ic, hand["ic"]) and close(t.ib, hand["ib"]) and close(t.ie, hand["ie"])
    assert close(frame_vce(t), hand["vce"])
    # Source: the contract's sign convention (DESIGN §4): textbook currents positive for both polarities.
    assert t.ic > 0 and t.ib > 0


# ---------------------------------------------------------------------------------------------
# Midband gain, input and output resistance of single stages (hybrid-π closed forms)
# ---------------------------------------------------------------------------------------------

@pytest.mark.parametrize("polarity", POLARITIES)
def test_ce_fully_bypassed_finite_early_voltage(polarity):
    beta, early, rs, rl, rc = 150.0, 80.0, 600.0, 10e3, 4.7e3
    near, far = 10e3, 47e3
    q = ampplan.Transistor(polarity=polarity, beta=beta, early_voltage=early)
    res = single_stage_plan(ampplan.CommonEmitter(**divider(polarity, near, far), rc=rc, re_bypassed=1e3,
                                                  device=q), rs=rs, rl=rl).solve()
    s = res.stages[0]
    gm, rpi, ro = hybrid_pi(s.transistor.ic, beta, early)
    # Source: Sedra & Smith / Razavi, CE with the emitter at AC ground (from memory):
    # A_v = -g_m (r_o || R_C || R_L), R_in = R_B1 || R_B2 || r_π, R_out = R_C || r_o.
    a_v = -gm * par(ro, rc, rl)
    r_in = par(near, far, rpi)
    r_out = par(rc, ro)
    assert close(s.gain, a_v)
    assert close(s.input_resistance, r_in)
    assert close(s.output_resistance, r_out)
    # Plan definitions (issue 3 §1): res.gain = v(load)/EMF = R_in/(R_in + R_s) · A_v (input divider).
    assert close(res.gain, r_in / (r_in + rs) * a_v)
    assert close(res.input_resistance, r_in) and close(res.output_resistance, r_out)


@pytest.mark.parametrize("polarity", POLARITIES)
def test_ce_partly_bypassed_exact_beta_plus_one(polarity):
    beta, rs, rl, rc, re, re_b = 100.0, 1e3, 8.2e3, 3.3e3, 150.0, 1e3
    near, far = 12e3, 56e3
    q = ampplan.Transistor(polarity=polarity, beta=beta)
    res = single_stage_plan(ampplan.CommonEmitter(**divider(polarity, near, far), rc=rc, re=re,
                                                  re_bypassed=re_b, device=q), rs=rs, rl=rl).solve()
    s = res.stages[0]
    gm, rpi, _ = hybrid_pi(s.transistor.ic, beta)
    # Source: Sedra & Smith / Razavi, CE with emitter degeneration, exact hybrid-π form with r_o = ∞
    # (from memory): A_v = -β (R_C || R_L) / (r_π + (β + 1) R_E),  R_in = R_B || (r_π + (β + 1) R_E),
    # R_out = R_C.
    a_v = -beta * par(rc, rl) / (rpi + (beta + 1.0) * re)
    r_in = par(near, far, rpi + (beta + 1.0) * re)
    assert close(s.gain, a_v)
    assert close(s.input_resistance, r_in)
    assert close(s.output_resistance, rc)
    assert close(res.gain, r_in / (r_in + rs) * a_v)


def _degenerated_ce_sympy(gm, rpi, ro, re, r_load):
    """Gain and base input resistance of a CE with unbypassed R_E and finite r_o.

    Source: sympy solving the hybrid-π nodal equations, written here (v_b = 1 V):
    node e: v_e/R_E = (1 - v_e)/r_π + g_m (1 - v_e) + (v_c - v_e)/r_o;
    node c: v_c/R_L' + g_m (1 - v_e) + (v_c - v_e)/r_o = 0;  i_b = (1 - v_e)/r_π.
    """
    ve, vc = sympy.symbols("ve vc")
    gm_, rpi_, ro_, re_, rl_ = (sympy.Rational(x) for x in (gm, rpi, ro, re, r_load))
    eqs = [sympy.Eq(ve / re_, (1 - ve) / rpi_ + gm_ * (1 - ve) + (vc - ve) / ro_),
           sympy.Eq(vc / rl_ + gm_ * (1 - ve) + (vc - ve) / ro_, 0)]
    sol = sympy.solve(eqs, [ve, vc], dict=True)[0]
    ib = (1 - sol[ve]) / rpi_
    return float(sol[vc]), float(1 / ib)


@pytest.mark.parametrize("polarity", POLARITIES)
def test_ce_partly_bypassed_finite_early_voltage(polarity):
    beta, early, rs, rl, rc, re, re_b = 200.0, 50.0, 2.2e3, 22e3, 6.8e3, 330.0, 1.5e3
    near, far = 15e3, 68e3
    q = ampplan.Transistor(polarity=polarity, beta=beta, early_voltage=early)
    res = single_stage_plan(ampplan.CommonEmitter(**divider(polarity, near, far), rc=rc, re=re,
                                                  re_bypassed=re_b, device=q), rs=rs, rl=rl).solve()
    s = res.stages[0]
    gm, rpi, ro = hybrid_pi(s.transistor.ic, beta, early)
    a_v, r_base = _degenerated_ce_sympy(gm, rpi, ro, re, par(rc, rl))
    assert close(s.gain, a_v)
    assert close(s.input_resistance, par(near, far, r_base))
    # Source: Sedra & Smith, output resistance of the degenerated CE (from memory) in its exact form,
    # re-derived here: a test current i_x into the collector leaves the emitter through
    # R_x = R_E || (r_π + R_b) (R_b = R_s || R_B, source zeroed); v_be = -i_x R_x r_π/(r_π + R_b);
    # v_x = i_x R_x + r_o (i_x - g_m v_be)  =>  R_o = R_x + r_o (1 + g_m R_x r_π/(r_π + R_b));
    # the stage adds R_C in parallel. With R_b = 0 this is the book's r_o + (1 + g_m r_o)(R_E || r_π).
    r_b = par(rs, near, far)
    r_x = par(re, rpi + r_b)
    r_o_q = r_x + ro * (1.0 + gm * r_x * rpi / (rpi + r_b))
    assert close(s.output_resistance, par(rc, r_o_q))


@pytest.mark.parametrize("polarity", POLARITIES)
def test_cc_emitter_follower_finite_early_voltage(polarity):
    beta, early, rs, rl, re = 90.0, 60.0, 4.7e3, 2.2e3, 1.8e3
    near, far = 33e3, 27e3
    q = ampplan.Transistor(polarity=polarity, beta=beta, early_voltage=early)
    res = single_stage_plan(ampplan.CommonCollector(**divider(polarity, near, far), re=re, device=q),
                            rs=rs, rl=rl).solve()
    s = res.stages[0]
    gm, rpi, ro = hybrid_pi(s.transistor.ic, beta, early)
    # Source: Sedra & Smith / Razavi, emitter follower, exact hybrid-π (from memory); the collector
    # is at AC ground so r_o sits from emitter to ground: R' = R_E || R_L || r_o,
    # A_v = (β + 1) R' / (r_π + (β + 1) R'),  R_in = R_B || (r_π + (β + 1) R'),
    # R_out = R_E || r_o || (r_π + R_s || R_B) / (β + 1).
    r1 = par(re, rl, ro)
    a_v = (beta + 1.0) * r1 / (rpi + (beta + 1.0) * r1)
    r_in = par(near, far, rpi + (beta + 1.0) * r1)
    r_out = par(re, ro, (rpi + par(rs, near, far)) / (beta + 1.0))
    assert close(s.gain, a_v)
    assert close(s.input_resistance, r_in)
    assert close(s.output_resistance, r_out)
    assert close(res.gain, r_in / (r_in + rs) * a_v)
    assert 0 < s.gain < 1   # a follower: common practice, no source


@pytest.mark.parametrize("early", [math.inf, 70.0])
@pytest.mark.parametrize("polarity", POLARITIES)
def test_cb_stage(polarity, early):
    beta, rs, rl, rc, re = 110.0, 50.0, 10e3, 5.6e3, 2.2e3
    near, far = 10e3, 33e3
    q = ampplan.Transistor(polarity=polarity, beta=beta, early_voltage=early)
    res = single_stage_plan(ampplan.CommonBase(**divider(polarity, near, far), rc=rc, re=re, device=q),
                            rs=rs, rl=rl).solve()
    s = res.stages[0]
    gm, rpi, ro = hybrid_pi(s.transistor.ic, beta, early)
    r_load = par(rc, rl)
    # Source: Razavi, common-base stage with r_o (from memory), base at AC ground:
    # A_v = (1 + g_m r_o) R_L' / (r_o + R_L') (= g_m R_L' when r_o = ∞);
    # looking into the emitter: r_π || (r_o + R_L')/(1 + g_m r_o), so R_in = R_E || r_π || that
    # (= R_E || r_π/(β + 1) when r_o = ∞);
    # looking into the collector: R_x + r_o (1 + g_m R_x) with R_x = R_E || R_s || r_π, R_out = R_C || that.
    if math.isinf(ro):
        a_v, r_in_e, r_out_q = gm * r_load, par(rpi, rpi / beta), math.inf
    else:
        a_v = (1.0 + gm * ro) * r_load / (ro + r_load)
        r_in_e = par(rpi, (ro + r_load) / (1.0 + gm * ro))
        r_x = par(re, rs, rpi)
        r_out_q = r_x + ro * (1.0 + gm * r_x)
    r_in = par(re, r_in_e)
    assert close(s.gain, a_v)
    assert close(s.input_resistance, r_in)
    assert close(s.output_resistance, par(rc, r_out_q))
    assert close(res.gain, r_in / (r_in + rs) * a_v)
    if math.isinf(early):
        # Source: the textbook form r_e = r_π/(β + 1) = α/g_m (Sedra & Smith, from memory).
        assert close(s.input_resistance, par(re, beta / (beta + 1.0) / gm))


# ---------------------------------------------------------------------------------------------
# Load lines and swing
# ---------------------------------------------------------------------------------------------

@pytest.mark.parametrize("polarity", POLARITIES)
def test_ce_swing_against_load_line(polarity):
    beta, rs, rl, rc, re, re_b = 150.0, 600.0, 10e3, 4.7e3, 220.0, 820.0
    near, far = 10e3, 47e3
    q = ampplan.Transistor(polarity=polarity, beta=beta)
    res = single_stage_plan(ampplan.CommonEmitter(**divider(polarity, near, far), rc=rc, re=re,
                                                  re_bypassed=re_b, device=q), rs=rs, rl=rl).solve()
    s = res.stages[0]
    t = s.transistor
    vce, ic = frame_vce(t), t.ic
    # Source: AC load line of the capacitor-coupled CE (Sedra & Smith; Boylestad & Nashelsky, from
    # memory), emitter current I_C(1 + 1/β): R_ac = R_C || R_L + R_E,unbypassed (1 + 1/β); the output
    # (collector) takes the R_C || R_L share of each V_CE excursion.
    r_load = par(rc, rl)
    r_ac = r_load + re * (1.0 + 1.0 / beta)
    assert close(s.load_lines.ac.resistance, r_ac)
    # DC load line: capacitors open, so R_L is gone and the whole emitter resistor counts.
    assert close(s.load_lines.dc.resistance, rc + (re + re_b) * (1.0 + 1.0 / beta))
    assert close(s.swing.toward_saturation, (vce - VCE_SAT) * r_load / r_ac)
    assert close(s.swing.toward_cutoff, ic * r_ac * r_load / r_ac)
    assert s.swing.peak == min(s.swing.toward_saturation, s.swing.toward_cutoff)
    # Margins: volts above V_CE(sat) and amperes above cutoff (issue 3 §2).
    assert close(s.saturation_margin, vce - VCE_SAT) and close(s.cutoff_margin, ic)


@pytest.mark.parametrize("polarity", POLARITIES)
def test_cc_swing_against_load_line(polarity):
    beta, rs, rl, re = 80.0, 1e3, 1e3, 1.5e3
    near, far = 22e3, 22e3
    q = ampplan.Transistor(polarity=polarity, beta=beta)
    res = single_stage_plan(ampplan.CommonCollector(**divider(polarity, near, far), re=re, device=q),
                            rs=rs, rl=rl).solve()
    s = res.stages[0]
    t = s.transistor
    # Source: emitter-follower AC load line (Sedra & Smith, from memory): R_ac = (R_E || R_L)(1 + 1/β);
    # the output is the emitter, so all of the V_CE excursion reaches it: toward saturation
    # V_CEQ - V_CE(sat); toward cutoff I_EQ (R_E || R_L).
    r_ac = par(re, rl) * (1.0 + 1.0 / beta)
    assert close(s.load_lines.ac.resistance, r_ac)
    assert close(s.swing.toward_saturation, frame_vce(t) - VCE_SAT)
    assert close(s.swing.toward_cutoff, t.ic * r_ac)
    assert close(s.swing.toward_cutoff, t.ie * par(re, rl))


def _sweep_closed_form(polarity, i_b, vce, beta, rs, r_bias, r_emitter, r_collector, r_pi):
    """Source excursions at which a single stage leaves forward-active, constant-drop model.

    Re-derived here: capacitors hold their Q-point voltages; the bias is the constant-drop one and
    the excursion about it follows the hybrid-π model (V_BE moves by r_π·ΔI_B, r_π = β·V_T/I_CQ;
    Sedra & Smith, hybrid-π section, from memory), so for an EMF step e the base sees the Thevenin
    source e R_B/(R_B + R_s) behind R_B || R_s; the base current moves by k e with
    k = (R_B/(R_B + R_s)) / (R_B || R_s + r_π + (β + 1) R_e,ac); I_C by β k e; and V_CE by
    -k e (β R_c,ac + (β + 1) R_e,ac). Saturation when V_CE falls by V_CEQ - V_CE(sat); cutoff when
    the base current falls by I_BQ. For a PNP a positive EMF step lowers |I_C|.
    Returns {"positive": (volts, region), "negative": (volts, region)}.
    """
    k = (r_bias / (r_bias + rs)) / (par(r_bias, rs) + r_pi + (beta + 1.0) * r_emitter)
    e_sat = (vce - VCE_SAT) / (k * (beta * r_collector + (beta + 1.0) * r_emitter))
    e_cut = i_b / k
    if polarity == "npn":
        return {"positive": (e_sat, "saturation"), "negative": (e_cut, "cutoff")}
    return {"positive": (e_cut, "cutoff"), "negative": (e_sat, "saturation")}


@pytest.mark.parametrize("polarity", POLARITIES)
@pytest.mark.parametrize("rs", [0.0, 2.2e3])
def test_ce_max_source_amplitude_matches_constant_drop_closed_form(polarity, rs):
    beta, rl, rc, re, re_b = 150.0, 10e3, 4.7e3, 220.0, 820.0
    near, far = 10e3, 47e3
    q = ampplan.Transistor(polarity=polarity, beta=beta)
    res = single_stage_plan(ampplan.CommonEmitter(**divider(polarity, near, far), rc=rc, re=re,
                                                  re_bypassed=re_b, device=q), rs=rs, rl=rl).solve()
    t = res.stages[0].transistor
    expected = _sweep_closed_form(polarity, t.ib, frame_vce(t), beta, rs, par(near, far), re, par(rc, rl),
                                  beta * VT / t.ic)
    # Source: the closed form above (re-derived by hand: constant-drop bias, hybrid-π excursion).
    assert math.isclose(res.clipping.positive, expected["positive"][0], rel_tol=1e-6)
    assert math.isclose(res.clipping.negative, expected["negative"][0], rel_tol=1e-6)
    assert res.clipping.positive_region == expected["positive"][1]
    assert res.clipping.negative_region == expected["negative"][1]
    first = min(expected.values())
    assert math.isclose(res.max_source_amplitude, first[0], rel_tol=1e-6)
    assert res.limiting_stage == "s1"


@pytest.mark.parametrize("polarity", POLARITIES)
def test_cc_max_source_amplitude_matches_constant_drop_closed_form(polarity):
    beta, rs, rl, re = 80.0, 1e3, 1e3, 1.5e3
    near, far = 22e3, 22e3
    q = ampplan.Transistor(polarity=polarity, beta=beta)
    res = single_stage_plan(ampplan.CommonCollector(**divider(polarity, near, far), re=re, device=q),
                            rs=rs, rl=rl).solve()
    t = res.stages[0].transistor
    # Source: the same hand derivation with the emitter load R_E || R_L and no collector resistor.
    expected = _sweep_closed_form(polarity, t.ib, frame_vce(t), beta, rs, par(near, far), par(re, rl), 0.0,
                                  beta * VT / t.ic)
    assert math.isclose(res.clipping.positive, expected["positive"][0], rel_tol=1e-6)
    assert math.isclose(res.clipping.negative, expected["negative"][0], rel_tol=1e-6)
    assert res.clipping.positive_region == expected["positive"][1]
    assert res.clipping.negative_region == expected["negative"][1]
    assert math.isclose(res.max_source_amplitude, min(expected.values())[0], rel_tol=1e-6)


# ---------------------------------------------------------------------------------------------
# Chains: the limiting stage the load-line formulas predict
# ---------------------------------------------------------------------------------------------

def _ce(beta, rpi, re, r_collector_load):
    """Degenerated CE, exact hybrid-π with r_o = ∞ (Sedra & Smith / Razavi, from memory)."""
    return -beta * r_collector_load / (rpi + (beta + 1.0) * re), rpi + (beta + 1.0) * re


def _cc(beta, rpi, r_emitter_load):
    """Emitter follower, exact hybrid-π with r_o = ∞ (Sedra & Smith / Razavi, from memory)."""
    r_base = rpi + (beta + 1.0) * r_emitter_load
    return (beta + 1.0) * r_emitter_load / r_base, r_base


def _ce_swing(t, beta, re, r_load):
    """Load-line swing of a CE at its collector (see test_ce_swing_against_load_line)."""
    r_ac = r_load + re * (1.0 + 1.0 / beta)
    return min((frame_vce(t) - VCE_SAT) * r_load / r_ac, t.ic * r_load)


def _cc_swing(t, beta, r_load):
    """Load-line swing of a follower at its emitter (see test_cc_swing_against_load_line)."""
    return min(frame_vce(t) - VCE_SAT, t.ic * (1.0 + 1.0 / beta) * r_load)


def _assert_prediction(res, gains_from_source, peaks, ids):
    """Limiting stage = argmin over stages of peak/|gain from source| (issue 3 §5), when not a tie."""
    estimates = [p / abs(g) for p, g in zip(peaks, gains_from_source)]
    order = sorted(range(len(estimates)), key=estimates.__getitem__)
    # Test design, not a check of ampplan: the prediction must not be close to a tie.
    assert estimates[order[1]] > 1.5 * estimates[order[0]], estimates
    assert res.limiting_stage == ids[order[0]]
    assert close(res.max_source_amplitude_estimate, estimates[order[0]])
    for s, peak in zip(res.stages, peaks):
        assert close(s.swing.peak, peak)


@pytest.mark.parametrize("layout", ["ce-ce, second limits", "ce-cc, first limits"])
def test_two_stage_limiting_stage(layout):
    beta, rs = 150.0, 600.0
    q = ampplan.Transistor(beta=beta)
    plan = ampplan.Plan(supply=12.0, source_resistance=rs, load_resistance=10e3)
    s1 = dict(rb1=47e3, rb2=10e3, rc=4.7e3, re=330.0, re_bypassed=680.0)
    if layout == "ce-ce, second limits":
        s2 = dict(rb1=47e3, rb2=10e3, rc=4.7e3, re=100.0, re_bypassed=1e3)
        plan.add(ampplan.CommonEmitter(**s1, device=q))
        plan.add(ampplan.CommonEmitter(**s2, device=q))
    else:
        s1 = dict(rb1=33e3, rb2=10e3, rc=3.3e3, re=220.0, re_bypassed=3.3e3)   # a small I_C: little swing
        s2 = dict(rb1=22e3, rb2=22e3, re=2.2e3)
        plan.add(ampplan.CommonEmitter(**s1, device=q))
        plan.add(ampplan.CommonCollector(**s2, device=q))
    res = plan.solve()
    assert res.all_forward_active
    t1, t2 = (s.transistor for s in res.stages)
    _, rpi1, _ = hybrid_pi(t1.ic, beta)
    _, rpi2, _ = hybrid_pi(t2.ic, beta)
    rb_1, rb_2 = par(s1["rb1"], s1["rb2"]), par(s2["rb1"], s2["rb2"])
    if layout == "ce-ce, second limits":
        a2, rbase2 = _ce(beta, rpi2, s2["re"], par(s2["rc"], 10e3))
        peak2 = _ce_swing(t2, beta, s2["re"], par(s2["rc"], 10e3))
    else:
        a2, rbase2 = _cc(beta, rpi2, par(s2["re"], 10e3))
        peak2 = _cc_swing(t2, beta, par(s2["re"], 10e3))
    rin2 = par(rb_2, rbase2)
    a1, rbase1 = _ce(beta, rpi1, s1["re"], par(s1["rc"], rin2))
    rin1 = par(rb_1, rbase1)
    g1 = rin1 / (rin1 + rs) * a1
    peak1 = _ce_swing(t1, beta, s1["re"], par(s1["rc"], rin2))
    # Source: cascade of the single-stage closed forms, each stage loaded by the next one's R_in
    # (Sedra & Smith / Razavi, from memory).
    assert close(res.stages[0].gain, a1) and close(res.stages[1].gain, a2)
    assert close(res.stages[1].input_resistance, rin2)
    assert close(res.gain, g1 * a2)
    _assert_prediction(res, [g1, g1 * a2], [peak1, peak2], ["s1", "s2"])


def test_three_stage_limiting_stage_heavily_loaded_follower():
    beta, rs, rl = 120.0, 1e3, 150.0
    q = ampplan.Transistor(beta=beta)
    plan = ampplan.Plan(supply=15.0, source_resistance=rs, load_resistance=rl)
    s1 = dict(rb1=68e3, rb2=12e3, rc=5.6e3, re=470.0, re_bypassed=1e3)
    s2 = dict(rb1=56e3, rb2=10e3, rc=3.3e3, re=330.0, re_bypassed=680.0)
    s3 = dict(re=2.2e3)
    plan.add(ampplan.CommonEmitter(**s1, device=q), coupling="capacitor")
    plan.add(ampplan.CommonEmitter(**s2, device=q), coupling="capacitor")
    plan.add(ampplan.CommonCollector(rb1=None, rb2=None, **s3, device=q), coupling="direct")
    res = plan.solve()
    assert res.all_forward_active
    t1, t2, t3 = (s.transistor for s in res.stages)
    rpi = [hybrid_pi(t.ic, beta)[1] for t in (t1, t2, t3)]
    # Source: cascade of the exact single-stage forms (Sedra & Smith / Razavi, from memory); the
    # direct-coupled follower has no bias network, so its input is r_π + (β + 1)(R_E || R_L).
    a3, rin3 = _cc(beta, rpi[2], par(s3["re"], rl))
    a2, rbase2 = _ce(beta, rpi[1], s2["re"], par(s2["rc"], rin3))
    rin2 = par(s2["rb1"], s2["rb2"], rbase2)
    a1, rbase1 = _ce(beta, rpi[0], s1["re"], par(s1["rc"], rin2))
    rin1 = par(s1["rb1"], s1["rb2"], rbase1)
    g1 = rin1 / (rin1 + rs) * a1
    g2, g3 = g1 * a2, g1 * a2 * a3
    assert close(res.stages[2].input_resistance, rin3)
    assert close(res.gain, g3)
    # Source: the follower's output resistance with the collector on the rail (Sedra & Smith, from
    # memory): R_E || (r_π + R_out,2)/(β + 1), and R_out,2 = R_C2 (r_o = ∞, looking back into stage 2).
    assert close(res.stages[1].output_resistance, s2["rc"])
    assert close(res.output_resistance, par(s3["re"], (rpi[2] + s2["rc"]) / (beta + 1.0)))
    peaks = [_ce_swing(t1, beta, s1["re"], par(s1["rc"], rin2)),
             _ce_swing(t2, beta, s2["re"], par(s2["rc"], rin3)),
             _cc_swing(t3, beta, par(s3["re"], rl))]
    _assert_prediction(res, [g1, g2, g3], peaks, ["s1", "s2", "s3"])


# ---------------------------------------------------------------------------------------------
# Direct-coupled two-stage chains against sympy
# ---------------------------------------------------------------------------------------------

def _chain_elements(second, rails):
    """Plain description (tests/reference.py) of a CE followed by a direct-coupled CE or CC.

    Returns the elements and the element values the plan is built from.
    """
    vcc, vee = rails
    lower = "vee" if vee != 0 else GROUND
    v = dict(rs=600.0, rb1=82e3, rb2=15e3, rc1=5.6e3, re1=270.0, re1b=1.2e3, rl=4.7e3, beta=140.0)
    els = [V("VCC", "vcc", GROUND, vcc), V("VS", "emf", GROUND, 0.0), R("RS", "emf", "so", v["rs"]),
           C("C1", "so", "b1"), R("RB1", "vcc", "b1", v["rb1"]), R("RB2", "b1", lower, v["rb2"]),
           R("RC1", "vcc", "c1", v["rc1"]), R("RE1", "e1", "x1", v["re1"]), R("RE1B", "x1", lower, v["re1b"]),
           C("CE1", "x1", GROUND), Q("Q1", "c1", "b1", "e1", beta=v["beta"])]
    if vee != 0:
        els.insert(1, V("VEE", "vee", GROUND, vee))
    if second == "ce":
        v.update(rc2=1.5e3, re2=3.3e3)
        els += [R("RC2", "vcc", "c2", v["rc2"]), R("RE2", "e2", lower, v["re2"]),
                Q("Q2", "c2", "c1", "e2", beta=v["beta"]), C("CL", "c2", "out"), R("RL", "out", GROUND, v["rl"])]
    else:
        v.update(re2=2.7e3)
        els += [R("RE2", "e2", lower, v["re2"]), Q("Q2", "vcc", "c1", "e2", beta=v["beta"]),
                C("CL", "e2", "out"), R("RL", "out", GROUND, v["rl"])]
    return els, v


def _chain_plan(second, rails, v, polarity="npn"):
    q = ampplan.Transistor(polarity=polarity, beta=v["beta"])
    plan = ampplan.Plan(supply=max(rails), negative_supply=min(rails), source_resistance=v["rs"],
                        load_resistance=v["rl"])
    bias = dict(rb1=v["rb1"], rb2=v["rb2"]) if polarity == "npn" else dict(rb1=v["rb2"], rb2=v["rb1"])
    plan.add(ampplan.CommonEmitter(**bias, rc=v["rc1"], re=v["re1"], re_bypassed=v["re1b"], device=q))
    if second == "ce":
        plan.add(ampplan.CommonEmitter(rc=v["rc2"], re=v["re2"], device=q), coupling="direct")
    else:
        plan.add(ampplan.CommonCollector(re=v["re2"], device=q), coupling="direct")
    plan.load_coupling = "capacitor"
    return plan


def _node_map(plan, second, mirrored=False):
    """Reference node -> plan node, read from the compiled circuit's transistor terminals."""
    c = plan.compile().circuit
    q1, q2 = c.element("s1_q"), c.element("s2_q")
    m = {"vcc": "vcc", "vee": "vee", "emf": "emf", "so": "source_out", "b1": q1.base, "c1": q1.collector,
         "e1": q1.emitter, "x1": c.element("s1_re_bypassed").a, "e2": q2.emitter, "out": "load"}
    if mirrored:
        m["vcc"], m["vee"] = "vee", "vcc"
    if second == "ce":
        m["c2"] = q2.collector
    return m


@pytest.mark.parametrize("rails", [(12.0, 0.0), (9.0, -9.0)], ids=["single-rail", "split-rail"])
@pytest.mark.parametrize("second", ["ce", "cc"])
def test_direct_coupled_chain_equals_sympy(second, rails):
    els, v = _chain_elements(second, rails)
    plan = _chain_plan(second, rails, v)
    res = plan.solve()
    assert [s.region for s in res.stages] == ["forward-active", "forward-active"]
    # Source: sympy exact rational solution of the same constant-drop equations (tests/reference.py).
    exact = ref.constant_drop_exact(els, {"Q1": "forward-active", "Q2": "forward-active"})
    assert ref.is_consistent(exact, rtol=0.0)
    op = res.operating_point
    scale = max(abs(x) for x in rails)
    for node, volts in exact["v"].items():
        if node == GROUND:
            continue
        got = op.v[_node_map(plan, second)[node]]
        assert abs(got - float(volts)) <= 1e-9 * max(abs(float(volts)), scale), node
    for name, s in zip(("Q1", "Q2"), res.stages):
        for key in ("ic", "ib", "ie"):
            assert close(getattr(s.transistor, key), float(exact["transistors"][name][key])), (name, key)
    # Midband: cascade of the exact hybrid-π forms (Sedra & Smith / Razavi, from memory), r_o = ∞.
    beta, rs, rl = v["beta"], v["rs"], v["rl"]
    rpi1 = hybrid_pi(res.stages[0].transistor.ic, beta)[1]
    rpi2 = hybrid_pi(res.stages[1].transistor.ic, beta)[1]
    if second == "ce":
        a2, rin2 = _ce(beta, rpi2, v["re2"], par(v["rc2"], rl))
    else:
        a2, rin2 = _cc(beta, rpi2, par(v["re2"], rl))
    a1, rbase1 = _ce(beta, rpi1, v["re1"], par(v["rc1"], rin2))
    rin1 = par(v["rb1"], v["rb2"], rbase1)
    assert close(res.stages[1].input_resistance, rin2)
    assert close(res.stages[0].output_resistance, v["rc1"])
    assert close(res.gain, rin1 / (rin1 + rs) * a1 * a2)


@pytest.mark.parametrize("second", ["ce", "cc"])
def test_direct_coupled_pnp_chain_equals_sympy_mirror(second):
    # Source: sympy exact solution of the complementary circuit (reference.mirror: every source
    # negated, every NPN a PNP); the plan's PNP stages hang the mirrored way with rb1 and rb2 swapped.
    rails = (9.0, -9.0)
    els, v = _chain_elements(second, rails)
    mirrored = ref.mirror(els)
    plan = _chain_plan(second, rails, v, polarity="pnp")
    res = plan.solve()
    exact = ref.constant_drop_exact(mirrored, {"Q1": "forward-active", "Q2": "forward-active"})
    assert ref.is_consistent(exact, rtol=0.0)
    m = _node_map(plan, second, mirrored=True)
    for node, volts in exact["v"].items():
        if node == GROUND:
            continue
        assert abs(res.operating_point.v[m[node]] - float(volts)) <= 1e-9 * 9.0, node
    for name, s in zip(("Q1", "Q2"), res.stages):
        assert close(s.transistor.ic, float(exact["transistors"][name]["ic"]))


# ---------------------------------------------------------------------------------------------
# Dissipation, supply current, power balance, cautions
# ---------------------------------------------------------------------------------------------

def _dissipation_plan():
    # Split supply; NPN CE, direct-coupled PNP CE (level shift), direct-coupled NPN follower driving a
    # DC-coupled load: DC flows in every branch and both polarities are present.
    q = ampplan.Transistor(beta=120.0)
    plan = ampplan.Plan(supply=9.0, negative_supply=-9.0, source_resistance=1e3, load_resistance=2.2e3,
                        load_coupling="direct")
    plan.add(ampplan.CommonEmitter(rb1=39e3, rb2=56e3, rc=2.2e3, re=680.0, re_bypassed=3.3e3, device=q))
    plan.add(ampplan.CommonEmitter(rc=3.3e3, re=2.2e3, device=ampplan.Transistor(polarity="pnp", beta=90.0,
                                                                                early_voltage=60.0)),
             coupling="direct")
    plan.add(ampplan.CommonCollector(re=3.9e3, device=q), coupling="direct")
    return plan


def _terminal_power(v, q, t):
    """Σ V_terminal · I_into_terminal (the power a three-terminal device absorbs; circuit theory)."""
    s = 1 if q.device.polarity == "npn" else -1
    return s * (v[q.collector] * t.ic + v[q.base] * t.ib - v[q.emitter] * t.ie)


def test_dissipation_and_power_balance():
    plan = _dissipation_plan()
    res = plan.solve()
    assert res.all_forward_active
    compiled = plan.compile()
    circuit, op = compiled.circuit, res.operating_point
    v = op.v
    total = 0.0
    for s in res.stages:
        q = circuit.element(f"{s.id}_q")
        t = s.transistor
        # Source: P = V_CE I_C + V_BE I_B with textbook signs (for a PNP V_EC I_C + V_EB I_B), equal to
        # Σ V·I over the terminals (circuit theory, from memory).
        sign = 1 if t.polarity == "npn" else -1
        assert close(s.dissipation, sign * (t.vce * t.ic + t.vbe * t.ib))
        assert close(s.dissipation, _terminal_power(v, q, t))
        assert s.dissipation > 0
        total += s.dissipation
        for name, watts in s.resistor_power.items():
            r = circuit.element(f"{s.id}_{name}")
            # Source: Joule's law P = V²/R from the node voltages.
            assert close(watts, (v[r.a] - v[r.b]) ** 2 / r.resistance), (s.id, name)
    assert set(res.stages[0].resistor_power) == {"rb1", "rb2", "rc", "re", "re_bypassed"}
    assert set(res.stages[1].resistor_power) == {"rc", "re"}
    assert set(res.stages[2].resistor_power) == {"re"}
    # Every resistor of the compiled circuit (stages and the plan's own), by Joule's law.
    resistors = [e for e in circuit.elements if isinstance(e, Resistor)]
    total += sum((v[r.a] - v[r.b]) ** 2 / r.resistance for r in resistors
                 if not any(r.name.startswith(f"{s.id}_") for s in res.stages))
    total += sum(sum(s.resistor_power.values()) for s in res.stages)

    # Source: KCL at each supply node: the current a rail delivers is the sum of the currents its
    # branches draw (resistors from node voltages, transistor terminals with textbook signs).
    def drawn(node):
        out = 0.0
        for r in resistors:
            if r.a == node:
                out += (v[r.a] - v[r.b]) / r.resistance
            elif r.b == node:
                out += (v[r.b] - v[r.a]) / r.resistance
        for s in res.stages:
            q, t = circuit.element(f"{s.id}_q"), s.transistor
            sign = 1 if t.polarity == "npn" else -1
            out += sign * ((q.collector == node) * t.ic + (q.base == node) * t.ib - (q.emitter == node) * t.ie)
        return out

    i_pos, i_neg = drawn("vcc"), drawn("vee")
    assert close(res.supply_current, i_pos)
    # Source: energy conservation (Tellegen): supply power = Σ of all dissipations (the 0 V signal
    # source delivers nothing).
    assert close(res.supply_power, 9.0 * i_pos + (-9.0) * i_neg)
    assert close(res.supply_power, total)


def test_resistor_rating_caution_default_quarter_watt():
    # A heavy stage: its collector resistor dissipates more than 0.25 W (the default rating; common
    # practice, no source).
    q = ampplan.Transistor(beta=100.0)
    rc, re, near, far = 150.0, 82.0, 1e3, 3.3e3
    plan = single_stage_plan(ampplan.CommonEmitter(rb1=far, rb2=near, rc=rc, re_bypassed=re, device=q),
                             supply=24.0)
    assert plan.resistor_power_rating == 0.25
    res = plan.solve()
    s = res.stages[0]
    hand = divider_qpoint(24.0, near, far, rc, re, 100.0)
    # Source: Joule's law on the hand Q-point (I_C² R_C).
    p_rc = hand["ic"] ** 2 * rc
    assert p_rc > 0.25 and close(s.resistor_power["rc"], p_rc)
    over = {name for name, p in s.resistor_power.items() if p > 0.25}
    for name in s.resistor_power:
        mentioned = any(f"s1.{name}:" in c for c in res.cautions)
        assert mentioned == (name in over), name
    plan.resistor_power_rating = 1.0
    assert not any("resistor rating" in c for c in plan.solve().cautions)


@pytest.mark.parametrize("rating, fires", [("max_power", True), ("max_power", False),
                                           ("max_collector_current", True), ("max_collector_current", False),
                                           ("max_vce", True), ("max_vce", False)])
def test_transistor_rating_cautions(rating, fires):
    near, far, rc, re = 10e3, 47e3, 4.7e3, 1e3
    hand = divider_qpoint(12.0, near, far, rc, re, 100.0)
    # Source: the hand Q-point (divider formula) and P = V_CE I_C + V_BE I_B.
    actual = {"max_power": hand["vce"] * hand["ic"] + VBE_ON * hand["ib"], "max_collector_current": hand["ic"],
              "max_vce": hand["vce"]}[rating]
    limit = actual * (0.8 if fires else 1.25)
    q = ampplan.Transistor(beta=100.0, **{rating: limit})
    res = single_stage_plan(ampplan.CommonEmitter(rb1=far, rb2=near, rc=rc, re_bypassed=re, device=q)).solve()
    words = {"max_power": "dissipates", "max_collector_current": "I_C", "max_vce": "V_CE"}[rating]
    hits = [c for c in res.cautions if c.startswith("s1:") and "rating" in c and words in c]
    assert bool(hits) == fires, res.cautions


def test_power_rating_derated_with_temperature():
    # Linear derating from 25 °C to zero at a 150 °C junction: common practice, no source.
    near, far, rc, re = 10e3, 47e3, 4.7e3, 1e3
    hand = divider_qpoint(12.0, near, far, rc, re, 100.0)
    power = hand["vce"] * hand["ic"] + VBE_ON * hand["ib"]
    q = ampplan.Transistor(beta=100.0, max_power=power / 0.7)
    stage = ampplan.CommonEmitter(rb1=far, rb2=near, rc=rc, re_bypassed=re, device=q)
    cool = single_stage_plan(stage, temperature=25.0).solve()
    hot = single_stage_plan(stage, temperature=87.5).solve()   # derated to half the rating
    assert not any("dissipates" in c for c in cool.cautions)
    assert any(c.startswith("s1:") and "dissipates" in c for c in hot.cautions)


@pytest.mark.parametrize("rails, fires", [((48.0, 0.0), False), ((60.0, 0.0), False), ((70.0, 0.0), True),
                                          ((35.0, -35.0), True), ((24.0, -24.0), False)])
def test_supply_beyond_safety_extra_low_voltage(rails, fires):
    # 60 V DC limit of the safety extra-low-voltage range (DESIGN §5, IEC 61140 usage; the limit
    # applies between any two conductors, so a ±35 V split counts as 70 V): common practice, no source.
    q = ampplan.Transistor(beta=100.0)
    plan = ampplan.Plan(supply=rails[0], negative_supply=rails[1], load_resistance=100e3)
    plan.add(ampplan.CommonEmitter(rb1=470e3, rb2=47e3, rc=22e3, re_bypassed=4.7e3, device=q))
    res = plan.solve()
    hits = [c for c in res.cautions if "60 V" in c]
    assert bool(hits) == fires
    if fires:
        text = hits[0].lower()
        assert "local" in text and "code" in text and "licensed" in text


def test_min_headroom_caution():
    near, far, rc, re = 10e3, 33e3, 3.9e3, 1e3
    hand = divider_qpoint(12.0, near, far, rc, re, 100.0)
    headroom = hand["vce"] - VCE_SAT
    assert 0.5 < headroom < 5.0            # test design: forward-active with a modest margin
    stage = ampplan.CommonEmitter(rb1=far, rb2=near, rc=rc, re_bypassed=re, device=ampplan.Transistor())
    # Default threshold 1 V: common practice, no source.
    assert ampplan.Plan().min_headroom == 1.0
    for threshold, fires in ((headroom + 0.3, True), (headroom - 0.3, False)):
        res = single_stage_plan(stage, min_headroom=threshold).solve()
        assert close(res.stages[0].saturation_margin, headroom)
        assert any(c.startswith("s1:") and "headroom" in c for c in res.cautions) == fires


def test_saturated_stage_caution_and_zero_amplitude():
    # Base resistor from the supply, no emitter resistor, R_C too large: saturated by the hand check
    # (Sedra & Smith, from memory): β I_B R_C exceeds V_CC - V_CE(sat).
    vcc, rb, rc, beta = 12.0, 100e3, 10e3, 100.0
    assert beta * (vcc - VBE_ON) / rb * rc > vcc - VCE_SAT
    plan = single_stage_plan(ampplan.CommonEmitter(rb1=rb, rc=rc, device=ampplan.Transistor(beta=beta)))
    res = plan.solve()
    s = res.stages[0]
    assert s.region == "saturation" and not res.all_forward_active
    # Forced beta = I_C/I_B with I_C = (V_CC - V_CE(sat))/R_C, I_B = (V_CC - V_BE)/R_B (same source).
    assert close(s.transistor.beta_forced, ((vcc - VCE_SAT) / rc) / ((vcc - VBE_ON) / rb))
    assert any(c.startswith("s1:") and "saturation" in c for c in res.cautions)
    assert res.max_source_amplitude == 0.0 and res.limiting_stage == "s1"
    assert s.swing.peak == 0.0


# ---------------------------------------------------------------------------------------------
# The plan API contract (issue 3 §1) and bad input
# ---------------------------------------------------------------------------------------------

def test_contract_as_written_in_issue():
    q = ampplan.Transistor(polarity="npn", beta=150)
    plan = ampplan.Plan(supply=12.0, negative_supply=0.0, source_resistance=600.0,
                        load_resistance=10e3, temperature=25.0)
    assert plan.add(ampplan.CommonEmitter(rb1=47e3, rb2=10e3, rc=4.7e3, re=220.0, re_bypassed=820.0, device=q),
                    coupling="capacitor") == "s1"
    assert plan.add(ampplan.CommonEmitter(rb1=None, rb2=None, rc=2.2e3, re=470.0, device=q),
                    coupling="direct") == "s2"
    assert plan.add(ampplan.CommonCollector(rb1=None, rb2=None, re=1e3, device=q), coupling="direct") == "s3"
    plan.load_coupling = "capacitor"
    assert plan.load_coupling == "capacitor"
    for model in ("constant-drop", "ebers-moll"):
        res = plan.solve(model=model)
        assert res.model == model
        s = res.stages[0]
        assert s.transistor.region in ("cutoff", "forward-active", "saturation", "reverse-active")
        for x in (s.transistor.ic, s.transistor.ib, s.transistor.ie, s.transistor.vbe, s.transistor.vce,
                  s.gain, s.input_resistance, s.output_resistance, s.swing.toward_saturation,
                  s.swing.toward_cutoff, s.swing.peak, s.dissipation, res.gain, res.input_resistance,
                  res.output_resistance, res.max_source_amplitude, res.supply_current):
            assert isinstance(x, float)
        assert s.transistor.checks
        assert all(isinstance(w, float) for w in s.resistor_power.values()) and "rc" in s.resistor_power
        assert res.input_resistance == res.stages[0].input_resistance
        assert res.output_resistance == res.stages[-1].output_resistance
        assert res.limiting_stage in (None, "s1", "s2", "s3")
        assert isinstance(res.cautions, tuple) and all(isinstance(c, str) for c in res.cautions)
        assert [x.id for x in res.stages] == ["s1", "s2", "s3"]
        # Text and HTML forms exist (issue 3: a readable text form and an HTML form).
        assert "s1" in repr(res) and "<table" in res._repr_html_()
    plan.set("s1.rc", 3.3e3)
    assert plan.get("s1.rc") == 3.3e3
    assert plan.compile().circuit.element("s1_rc").resistance == 3.3e3
    assert plan.get("s2.device.beta") == 150
    plan.set("s2.device.beta", 200.0)
    assert plan.get("s2.device.beta") == 200.0 and plan.get("s1.device.beta") == 150
    assert plan.get("s2.coupling") == "direct" and plan.get("supply") == 12.0
    plan.load_coupling = "direct"
    assert plan.load_coupling == "direct"


def _plan_with_stage():
    plan = ampplan.Plan(load_resistance=10e3)
    plan.add(ampplan.CommonEmitter(rb1=47e3, rb2=10e3, rc=4.7e3, re_bypassed=1e3))
    return plan


@pytest.mark.parametrize("action, error, words", [
    (lambda p: p.add(ampplan.CommonEmitter(rb1=47e3, rb2=10e3), coupling="transformer"),
     errors.UnknownModelError, ["coupling", "transformer"]),
    (lambda p: setattr(p, "load_coupling", "inductive"), errors.UnknownModelError, ["load_coupling", "inductive"]),
    (lambda p: p.set("s1.coupling", "optical"), errors.UnknownModelError, ["s1.coupling", "optical"]),
    (lambda p: ampplan.CommonEmitter(rb1=47e3, rb2=10e3, rc=-4.7e3), errors.InvalidValueError,
     ["CommonEmitter.rc", "-4700"]),
    (lambda p: ampplan.CommonCollector(re=0.0), errors.InvalidValueError, ["CommonCollector.re"]),
    (lambda p: p.set("s1.re_bypassed", -1e3), errors.InvalidValueError, ["re_bypassed"]),
    (lambda p: ampplan.Plan(source_resistance=-50.0), errors.InvalidValueError, ["source_resistance"]),
    (lambda p: ampplan.Plan(load_resistance=-1.0), errors.InvalidValueError, ["load_resistance"]),
    (lambda p: p.get("s7.rc"), errors.UnknownNameError, ["s7"]),
    (lambda p: p.set("s7.rc", 1e3), errors.UnknownNameError, ["s7"]),
    (lambda p: p.get("s1.rq"), errors.UnknownNameError, ["rq"]),
    (lambda p: p.set("s1.rq", 1e3), errors.UnknownNameError, ["rq"]),
    (lambda p: p.get("s1.device.gain"), errors.UnknownNameError, ["gain"]),
    (lambda p: p.set("s1.device.gain", 3.0), errors.UnknownNameError, ["gain"]),
    (lambda p: p.get("voltage"), errors.UnknownNameError, ["voltage"]),
    (lambda p: p.add(ampplan.CommonEmitter(rb1=None, rb2=None, rc=2.2e3, re=470.0), coupling="capacitor"),
     errors.InvalidValueError, ["s2", "bias"]),
    (lambda p: p.add(ampplan.CommonCollector(re=1e3), coupling="capacitor"), errors.InvalidValueError,
     ["s2", "bias"]),
    (lambda p: p.solve(model="quadratic"), errors.UnknownModelError, ["quadratic"]),
    (lambda p: ampplan.CommonEmitter(rb1=47e3, rb2=10e3, device="npn"), errors.InvalidValueError, ["device"]),
], ids=["coupling", "load-coupling", "set-coupling", "negative-rc", "zero-re", "set-negative",
        "negative-source-resistance", "negative-load", "get-unknown-stage", "set-unknown-stage",
        "get-unknown-parameter", "set-unknown-parameter", "get-unknown-device-parameter",
        "set-unknown-device-parameter", "unknown-plan-parameter", "ce-no-base-bias", "cc-no-base-bias",
        "unknown-model", "device-not-transistor"])
def test_bad_input_names_the_culprit(action, error, words):
    # Source: the project's rule (RULES.md): bad input gets a clear error naming the culprit.
    plan = _plan_with_stage()
    with pytest.raises(error) as info:
        action(plan)
    assert isinstance(info.value, errors.AmpplanError)
    for w in words:
        assert w in str(info.value), (w, str(info.value))


def test_failed_set_leaves_plan_unchanged():
    plan = _plan_with_stage()
    with pytest.raises(errors.InvalidValueError):
        plan.set("s1.rc", -1.0)
    assert plan.get("s1.rc") == 4.7e3


# ---------------------------------------------------------------------------------------------
# PNP mirrors NPN; CustomStage equals its template; the two device models agree
# ---------------------------------------------------------------------------------------------

def _mirror_plans(rails):
    """The same chain built of NPN and of PNP stages; the PNP one hangs mirrored (rb1 <-> rb2)."""
    plans = []
    for polarity in POLARITIES:
        q = ampplan.Transistor(polarity=polarity, beta=130.0, early_voltage=90.0)
        plan = ampplan.Plan(supply=rails[0], negative_supply=rails[1], source_resistance=1e3,
                            load_resistance=4.7e3)
        plan.add(ampplan.CommonEmitter(**divider(polarity, 15e3, 56e3), rc=3.9e3, re=180.0, re_bypassed=1e3,
                                       device=q))
        plan.add(ampplan.CommonCollector(re=2.2e3, device=q), coupling="direct")
        plan.add(ampplan.CommonBase(**divider(polarity, 10e3, 27e3), rc=2.7e3, re=1.2e3, device=q))
        plans.append(plan)
    return plans


@pytest.mark.parametrize("rails", [(12.0, 0.0), (6.0, -6.0)], ids=["single-rail", "split-rail"])
def test_pnp_mirrors_npn(rails):
    # Source: circuit symmetry (from memory): the complementary circuit with the rails exchanged has
    # the same |currents|, mirrored voltages and the same small-signal behaviour.
    npn, pnp = (p.solve() for p in _mirror_plans(rails))
    assert npn.all_forward_active and pnp.all_forward_active
    for a, b in zip(npn.stages, pnp.stages):
        assert a.region == b.region
        for key in ("ic", "ib", "ie"):
            assert close(getattr(a.transistor, key), getattr(b.transistor, key)), key
        assert close(a.transistor.vce, -b.transistor.vce) and close(a.transistor.vbe, -b.transistor.vbe)
        for key in ("gain", "input_resistance", "output_resistance", "dissipation"):
            assert close(getattr(a, key), getattr(b, key)), (a.id, key)
        assert close(a.swing.toward_saturation, b.swing.toward_saturation)
        assert close(a.swing.toward_cutoff, b.swing.toward_cutoff)
    assert close(npn.gain, pnp.gain) and close(npn.supply_power, pnp.supply_power)
    assert npn.limiting_stage == pnp.limiting_stage
    assert math.isclose(npn.max_source_amplitude, pnp.max_source_amplitude, rel_tol=1e-6)
    # Positive and negative source excursions exchange roles.
    assert math.isclose(npn.clipping.positive, pnp.clipping.negative, rel_tol=1e-6)
    assert math.isclose(npn.clipping.negative, pnp.clipping.positive, rel_tol=1e-6)
    if rails[1] == -rails[0]:
        # A split symmetric supply maps every node voltage v to -v (the two rails trade places).
        rail = {"vcc": "vee", "vee": "vcc"}
        for node, volts in npn.operating_point.v.items():
            assert abs(pnp.operating_point.v[rail.get(node, node)] + volts) <= 1e-9 * rails[0], node


def _custom_ce(polarity, rb_near, rb_far, rc, re, re_b, device, lower="lower"):
    """A CE built from raw elements on the CustomStage rails (``supply``, ``lower``, ``gnd``).

    ``lower="gnd"`` ties the lower rail to ground by name (the same node when the plan has no
    negative supply).
    """
    emitter_rail, collector_rail = (lower, "supply") if polarity == "npn" else ("supply", lower)
    c = ampplan.Circuit()
    c.resistor("rb_far", collector_rail, "in", rb_far)
    c.resistor("rb_near", "in", emitter_rail, rb_near)
    c.resistor("rc", collector_rail, "c", rc)
    c.resistor("re", "e", "ex", re)
    c.resistor("re_bypassed", "ex", emitter_rail, re_b)
    c.capacitor("c_bypass", "ex", GROUND)
    c.bjt("q", collector="c", base="in", emitter="e", device=device)
    return ampplan.CustomStage(circuit=c, input="in", output="c", transistor="q")


@pytest.mark.parametrize("lower", ["lower", "gnd"])
@pytest.mark.parametrize("position", [1, 2])
@pytest.mark.parametrize("polarity", POLARITIES)
def test_custom_stage_equals_template(polarity, position, lower):
    # Source: DESIGN §3 / issue 3 §1 (a custom stage must work everywhere a template does): the same
    # elements give the same answers to rounding.
    q = ampplan.Transistor(polarity=polarity, beta=160.0, early_voltage=100.0)
    values = dict(rb_near=10e3, rb_far=47e3, rc=4.7e3, re=220.0, re_b=820.0)
    results = []
    for custom in (False, True):
        plan = ampplan.Plan(supply=12.0, source_resistance=600.0, load_resistance=10e3)
        if position == 2:
            plan.add(ampplan.CommonEmitter(**divider(polarity, 12e3, 47e3), rc=3.3e3, re=330.0,
                                           re_bypassed=1e3, device=q))
        if custom:
            plan.add(_custom_ce(polarity, device=q, lower=lower, **values))
        else:
            plan.add(ampplan.CommonEmitter(**divider(polarity, values["rb_near"], values["rb_far"]),
                                           rc=values["rc"], re=values["re"], re_bypassed=values["re_b"],
                                           device=q))
        plan.add(ampplan.CommonCollector(re=2.2e3, device=q), coupling="direct")
        results.append(plan.solve())
    template, custom = results
    for a, b in zip(template.stages, custom.stages):
        assert a.region == b.region
        for key in ("gain", "input_resistance", "output_resistance", "saturation_margin", "cutoff_margin",
                    "dissipation"):
            assert close(getattr(a, key), getattr(b, key)), (a.id, key)
        assert close(a.swing.toward_saturation, b.swing.toward_saturation)
        assert close(a.swing.toward_cutoff, b.swing.toward_cutoff)
        assert close(a.load_lines.ac.resistance, b.load_lines.ac.resistance)
        assert close(a.load_lines.dc.resistance, b.load_lines.dc.resistance)
    assert close(template.gain, custom.gain)
    assert template.limiting_stage == custom.limiting_stage
    assert math.isclose(template.max_source_amplitude, custom.max_source_amplitude, rel_tol=1e-6)
    assert close(template.supply_current, custom.supply_current)


def test_custom_stage_parameters_by_element_name():
    q = ampplan.Transistor()
    plan = ampplan.Plan(load_resistance=10e3)
    plan.add(_custom_ce("npn", 10e3, 47e3, 4.7e3, 220.0, 820.0, q, lower="gnd"))
    plan.set("s1.rc", 3.3e3)
    assert plan.get("s1.rc") == 3.3e3
    plan.set("s1.device.beta", 250.0)
    assert plan.get("s1.device.beta") == 250.0
    with pytest.raises(errors.UnknownNameError) as info:
        plan.set("s1.rz", 1e3)
    assert "rz" in str(info.value)


@pytest.mark.parametrize("which", ["ce-partly", "cc", "cb", "chain"])
def test_ebers_moll_close_to_constant_drop_when_well_biased(which):
    # Common practice, no source: for a stage biased well inside forward-active, the constant-drop
    # hand model and the Ebers–Moll model agree on regions, and on gains to about 10 %.
    q = ampplan.Transistor(beta=150.0, early_voltage=100.0)
    plan = ampplan.Plan(supply=12.0, source_resistance=600.0, load_resistance=10e3)
    if which == "ce-partly":
        plan.add(ampplan.CommonEmitter(rb1=47e3, rb2=10e3, rc=4.7e3, re=220.0, re_bypassed=820.0, device=q))
    elif which == "cc":
        plan.add(ampplan.CommonCollector(rb1=22e3, rb2=22e3, re=2.2e3, device=q))
    elif which == "cb":
        plan.add(ampplan.CommonBase(rb1=33e3, rb2=10e3, rc=3.9e3, re=1.5e3, device=q))
    else:
        plan.add(ampplan.CommonEmitter(rb1=82e3, rb2=15e3, rc=5.6e3, re=270.0, re_bypassed=1.2e3, device=q))
        plan.add(ampplan.CommonCollector(re=2.7e3, device=q), coupling="direct")
    cd, em = plan.solve(model="constant-drop"), plan.solve(model="ebers-moll")
    assert cd.all_forward_active
    assert [s.region for s in cd.stages] == [s.region for s in em.stages]
    for a, b in zip(cd.stages, em.stages):
        assert math.isclose(a.gain, b.gain, rel_tol=0.10), (a.id, a.gain, b.gain)
        assert math.isclose(a.input_resistance, b.input_resistance, rel_tol=0.10)
        assert math.isclose(a.transistor.ic, b.transistor.ic, rel_tol=0.10)
    assert math.isclose(cd.gain, em.gain, rel_tol=0.10)


# ---------------------------------------------------------------------------------------------
# A property over random degenerated CE stages
# ---------------------------------------------------------------------------------------------

@settings(max_examples=15)
@given(polarity=st.sampled_from(POLARITIES),
       beta=st.floats(40.0, 400.0), rs=st.one_of(st.just(0.0), st.floats(1.0, 5e3)), rl=st.floats(1e3, 100e3),
       rc=st.floats(1e3, 10e3), re=st.floats(47.0, 1e3), re_b=st.floats(100.0, 3e3),
       near=st.floats(4.7e3, 47e3), ratio=st.floats(2.0, 8.0))
def test_random_degenerated_ce_matches_closed_forms(polarity, beta, rs, rl, rc, re, re_b, near, ratio):
    far = near * ratio
    hand = divider_qpoint(12.0, near, far, rc, re + re_b, beta)
    assume(hand["ib"] > 0 and hand["vce"] > VCE_SAT + 0.3)      # forward-active with room, by hand
    q = ampplan.Transistor(polarity=polarity, beta=beta)
    res = single_stage_plan(ampplan.CommonEmitter(**divider(polarity, near, far), rc=rc, re=re,
                                                  re_bypassed=re_b, device=q), rs=rs, rl=rl).solve()
    s = res.stages[0]
    t = s.transistor
    # Source: divider Q-point, exact (Sedra & Smith; Boylestad & Nashelsky, from memory).
    assert t.region == "forward-active" and close(t.ic, hand["ic"]) and close(frame_vce(t), hand["vce"])
    # Source: degenerated CE, exact hybrid-π, r_o = ∞ (Sedra & Smith / Razavi, from memory).
    _, rpi, _ = hybrid_pi(t.ic, beta)
    a_v, r_base = _ce(beta, rpi, re, par(rc, rl))
    assert close(s.gain, a_v) and close(s.input_resistance, par(near, far, r_base))
    assert close(s.output_resistance, rc)
    # Source: the constant-drop clipping closed form re-derived above.
    expected = _sweep_closed_form(polarity, t.ib, frame_vce(t), beta, rs, par(near, far), re, par(rc, rl),
                                  beta * VT / t.ic)
    assert math.isclose(res.max_source_amplitude, min(expected.values())[0], rel_tol=1e-6)


@pytest.mark.parametrize("polarity", POLARITIES)
def test_fully_bypassed_ce_from_an_ideal_source_clips_where_the_load_lines_say(polarity):
    # Regression: with V_BE held at V_BE(on) (r_π = 0) the held-capacitor sweep of a fully bypassed
    # CE driven from an ideal source had no forward-active solution and reported ~0 V. The sweep
    # carries the hybrid-π r_π about the Q-point, so it must agree with the closed form above
    # (R_e,ac = 0, R_s = 0) and with the load-line estimate min(swing)/|gain| (issue 3 §5).
    beta, rl, rc, re_b = 150.0, 10e3, 4.7e3, 1e3
    near, far = 10e3, 47e3
    q = ampplan.Transistor(polarity=polarity, beta=beta)
    res = single_stage_plan(ampplan.CommonEmitter(**divider(polarity, near, far), rc=rc, re_bypassed=re_b,
                                                  device=q), rs=0.0, rl=rl).solve()
    t = res.stages[0].transistor
    expected = _sweep_closed_form(polarity, t.ib, frame_vce(t), beta, 0.0, par(near, far), 0.0, par(rc, rl),
                                  beta * VT / t.ic)
    assert math.isclose(res.clipping.positive, expected["positive"][0], rel_tol=1e-6)
    assert math.isclose(res.clipping.negative, expected["negative"][0], rel_tol=1e-6)
    assert math.isclose(res.max_source_amplitude, res.max_source_amplitude_estimate, rel_tol=1e-6)


@pytest.mark.parametrize("early_voltage", [math.inf, 80.0])
def test_constant_drop_sweep_agrees_with_the_load_lines_over_a_chain(early_voltage):
    # Issue 3 §2/§5: the quasi-static sweep of the constant-drop chain (exact: piecewise linear with
    # the hybrid-π increments) and the load-line figure min over stages of swing peak / |v(out)/EMF|
    # must give the same first clip, r_o included (it sits across the controlled source on both).
    q = ampplan.Transistor(beta=180.0, early_voltage=early_voltage)
    plan = ampplan.Plan(supply=9.0, source_resistance=1e3, load_resistance=22e3)
    plan.add(ampplan.CommonEmitter(rb1=68e3, rb2=12e3, rc=3.9e3, re=100.0, re_bypassed=680.0, device=q))
    plan.add(ampplan.CommonCollector(re=2.2e3, device=q), coupling="direct")
    res = plan.solve()
    assert math.isclose(res.max_source_amplitude, res.max_source_amplitude_estimate, rel_tol=1e-6)

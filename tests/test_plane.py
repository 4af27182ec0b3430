"""The canvas's plane data (ampplan.analyses.plane) against the load-line construction.

Sources, each named again beside its check:

- Load lines, Q-point and swing along the AC load line: the load-line construction of Sedra &
  Smith, *Microelectronic Circuits*, and Boylestad & Nashelsky, *Electronic Devices and Circuit
  Theory*, the BJT biasing and amplifier chapters (from memory): the DC line meets the V_CE axis at
  V_CE,Q + I_C,Q·R_DC and the I_C axis at I_C,Q + V_CE,Q/R_DC; along the AC line the operating point
  reaches the forward-active edge after V_CE,Q − V_CE(sat) volts and cutoff after I_C,Q·R_AC volts;
  the symmetric swing is the smaller of the two.
- DC load resistance of a divider-biased CE stage: R_C + R_E·(β+1)/β in the convention that the
  emitter carries I_C(1 + 1/β) (same books, from memory; the exact β + 1 form).
- Power rating hyperbola I_C·V_CE = P and linear derating to zero at 150 °C: common practice, no
  source.
- Chain view: the midband gain from the source EMF to the load is the chain gain the plan reports
  (an independent incremental solve), and the stage that clips first meets its demand exactly
  (constant-drop: the load-line estimate equals the clipping sweep).
"""

from __future__ import annotations

import math

import pytest

import ampplan
from ampplan.analyses.plane import chain_plane, plan_planes, stage_plane
from ampplan.live import ObservablePlan

REL = 1e-9


def ce_plan(polarity="npn", rc=3.9e3, re=270.0, re_bypassed=1e3, load=10e3, max_power=0.5, temperature=25.0):
    q = ampplan.Transistor(polarity=polarity, beta=150.0, max_power=max_power)
    divider = dict(rb1=82e3, rb2=15e3) if polarity == "npn" else dict(rb1=15e3, rb2=82e3)
    plan = ampplan.Plan(supply=12.0, source_resistance=600.0, load_resistance=load, temperature=temperature,
                        coupling_capacitance=1e-5, bypass_capacitance=1e-4)
    plan.add(ampplan.CommonEmitter(**divider, rc=rc, re=re, re_bypassed=re_bypassed, device=q))
    return plan


def on_line(segment, q_v, q_i, resistance):
    """Both ends of ``segment`` lie on I = q_i − (V − q_v)/R."""
    for v, i in zip(segment.v, segment.i):
        assert math.isclose(i, q_i - (v - q_v) / resistance, rel_tol=1e-9, abs_tol=1e-15)


@pytest.mark.parametrize("polarity", ["npn", "pnp"])
def test_load_lines_through_the_qpoint_and_clipped_to_the_box(polarity):
    plan = ce_plan(polarity)
    res = plan.solve()
    s = res.stages[0]
    p = stage_plane(s, res.temperature, plan.stage("s1").device)
    t = s.transistor
    # PNP in V_EC: every panel reads in the first quadrant (the module's frame).
    assert p.q_v == pytest.approx(abs(t.vce), rel=REL) and p.q_v > 0 and p.q_i > 0
    assert p.voltage_label == ("V_CE" if polarity == "npn" else "V_EC")
    beta = 150.0
    # Sedra & Smith / Boylestad (from memory): R_DC = R_C + R_E,total·(β+1)/β.
    assert p.dc_resistance == pytest.approx(3.9e3 + (270.0 + 1e3) * (beta + 1) / beta, rel=1e-9)
    on_line(p.dc_line, p.q_v, p.q_i, p.dc_resistance)
    on_line(p.ac_line, p.q_v, p.q_i, p.ac_resistance)
    # The DC line meets both axes inside the box: V_CE,Q + I_C,Q·R_DC and I_C,Q + V_CE,Q/R_DC.
    assert p.dc_line.v1 == pytest.approx(p.q_v + p.q_i * p.dc_resistance, rel=REL) and p.dc_line.i1 == 0
    assert p.dc_line.v0 == 0 and p.dc_line.i0 == pytest.approx(p.q_i + p.q_v / p.dc_resistance, rel=REL)
    for seg in (p.dc_line, p.ac_line):
        assert all(0 <= v <= p.v_max * (1 + 1e-12) for v in seg.v)
        assert all(0 <= i <= p.i_max * (1 + 1e-12) for i in seg.i)


@pytest.mark.parametrize("rc, side", [(3.9e3, "cutoff"), (8.2e3, "saturation")])
def test_swing_segments_reach_each_limit_and_name_the_limiting_side(rc, side):
    plan = ce_plan(rc=rc)
    res = plan.solve()
    s = res.stages[0]
    p = stage_plane(s, res.temperature)
    vce_sat = plan.stage("s1").device.vce_sat
    assert p.saturation_edge == pytest.approx(vce_sat, rel=1e-9)
    # Toward saturation the point reaches V_CE(sat) after V_CE,Q − V_CE(sat) volts along the AC line.
    assert p.swing_toward_saturation.v1 == pytest.approx(vce_sat, rel=1e-9)
    on_line(p.swing_toward_saturation, p.q_v, p.q_i, p.ac_resistance)
    # Toward cutoff it reaches I_C = 0 after I_C,Q·R_AC volts.
    assert p.swing_toward_cutoff.i1 == pytest.approx(0.0, abs=1e-15)
    assert p.swing_toward_cutoff.v1 == pytest.approx(p.q_v + p.q_i * p.ac_resistance, rel=1e-9)
    dv_sat, dv_cut = p.q_v - vce_sat, p.q_i * p.ac_resistance
    assert p.limiting_side == ("saturation" if dv_sat < dv_cut else "cutoff") == side
    # The usable swing is symmetric about the Q-point and as wide as the smaller excursion.
    half = min(dv_sat, dv_cut)
    assert p.usable_swing.v0 == pytest.approx(p.q_v - half, rel=1e-9)
    assert p.usable_swing.v1 == pytest.approx(p.q_v + half, rel=1e-9)
    on_line(p.usable_swing, p.q_v, p.q_i, p.ac_resistance)
    # The output-node swings are the stage result's own.
    assert p.output_swing_toward_saturation == s.swing.toward_saturation
    assert p.output_swing_toward_cutoff == s.swing.toward_cutoff
    assert side in p.title and "forward-active" in p.title


def test_power_curve_is_the_derated_rating_hyperbola():
    # A rating small enough to cross the panel; 75 °C derates it linearly to zero at 150 °C
    # (common practice, no source): 0.02 W × (150 − 75)/(150 − 25).
    plan = ce_plan(max_power=0.02, temperature=75.0)
    res = plan.solve()
    p = stage_plane(res.stages[0], res.temperature, plan.stage("s1").device)
    rating = 0.02 * (150 - 75) / (150 - 25)
    assert p.power_rating == pytest.approx(rating, rel=1e-12)
    assert len(p.power_v) > 10
    for v, i in zip(p.power_v, p.power_i):
        assert v * i == pytest.approx(rating, rel=1e-12)
        assert i <= p.i_max * (1 + 1e-12) and v <= p.v_max * (1 + 1e-12)


def test_no_power_curve_without_a_rating_or_off_the_chart():
    plan = ce_plan(max_power=None)
    res = plan.solve()
    assert stage_plane(res.stages[0], 25.0, plan.stage("s1").device).power_v == ()
    plan = ce_plan(max_power=50.0)  # far above every point of the panel
    res = plan.solve()
    p = stage_plane(res.stages[0], 25.0, plan.stage("s1").device)
    assert p.power_rating == 50.0 and p.power_v == ()


def test_stage_out_of_forward_active_has_no_swing_and_says_so():
    plan = ce_plan(rc=47e3)  # far too large: the stage saturates
    res = plan.solve()
    p = stage_plane(res.stages[0], 25.0)
    assert p.region == "saturation" and p.limiting_side is None
    assert math.isnan(p.usable_swing.v0)
    assert "saturation" in p.title and "caution" in p.title


def test_chain_view_against_the_chain_gain_and_the_clipping_stage():
    live = ObservablePlan.demo()
    plan, res = live.plan, live.result
    chain = chain_plane(res, plan.source_resistance)
    # The last stage drives the load (capacitor shorted at midband): its gain from the source is
    # the chain gain the plan reports.
    assert chain.gain_from_source[-1] == pytest.approx(abs(res.gain), rel=1e-9)
    # The largest source amplitude demands exactly the swing the limiting stage has (constant-drop:
    # the sweep equals the load-line estimate); every other stage has room to spare.
    k = chain.sids.index(res.limiting_stage)
    assert chain.demanded[k] == pytest.approx(chain.available[k], rel=1e-6)
    for j, sid in enumerate(chain.sids):
        assert chain.demanded[j] <= chain.available[j] * (1 + 1e-6), sid
    assert res.limiting_stage in chain.title


def test_plan_planes_one_panel_per_stage_in_order():
    live = ObservablePlan.demo()
    planes = plan_planes(live.result, live.plan)
    assert [p.sid for p in planes.stages] == list(live.plan.stage_ids)
    assert planes.stage("s2").polarity == "pnp" and planes.stage("s2").voltage_label == "V_EC"
    with pytest.raises(KeyError):
        planes.stage("s9")

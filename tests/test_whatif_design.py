"""Design to a target, with E-series snapping.

Sources: the fixed-bias common-emitter stage solved by hand (I_B = (V_CC − V_BE)/R_B,
I_C = β·I_B, V_CE = V_CC − I_C·R_C; Sedra & Smith, *Microelectronic Circuits*, the BJT chapter,
from memory), the quadratic formula for a dissipation target reached twice, IEC 60063 for the
standard values, and every design re-solved on its own with ``plan.solve()``.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from ampplan import eseries
from ampplan.errors import InvalidValueError, TargetNotReachedError, UnknownModelError, UnknownNameError

from test_whatif_sweep import demo_plan
from test_whatif_tolerance import BETA, RB, RC, VBE, VCC, VCE_SAT, fixed_bias_plan


def test_collector_resistor_for_a_vce_by_hand():
    plan = fixed_bias_plan(rb=2.2e6)
    ic = BETA * (VCC - VBE) / 2.2e6
    result = plan.design("s1.rc", ("s1.vce", 5.0))
    assert result.exact == pytest.approx((VCC - 5.0) / ic, rel=1e-9)
    assert result.achieved == pytest.approx(5.0, rel=1e-9)
    assert result.roots == (result.exact,) and result.snapped is None
    assert result.plan.get("s1.rc") == result.exact and result.result["s1.vce"] == pytest.approx(5.0, rel=1e-9)
    assert plan.get("s1.rc") == RC  # the plan passed in never changes


def test_snapped_value_is_the_neighbour_that_lands_closer_by_re_solving_both():
    plan = demo_plan()
    before = plan.get("s1.rc")
    result = plan.design("s1.rc", ("s1.vce", 5.0), series="E24")
    assert plan.get("s1.rc") == before
    below, above = eseries.neighbours(result.exact, "E24")
    assert {v for v, _ in result.neighbours} == {below, above}
    achieved = {}
    for value in (below, above):
        trial = plan.copy()
        trial.set("s1.rc", value)
        achieved[value] = trial.solve()["s1.vce"]
    best = min(achieved, key=lambda v: abs(achieved[v] - 5.0))
    assert result.snapped == best and result.achieved_snapped == pytest.approx(achieved[best], rel=1e-12)
    assert result.plan.get("s1.rc") == best
    # The exact value, re-solved on its own, reaches the target.
    trial = plan.copy()
    trial.set("s1.rc", result.exact)
    assert trial.solve()["s1.vce"] == pytest.approx(5.0, rel=1e-9)
    json.dumps(result.to_dict(), allow_nan=False)
    assert "E24: " in repr(result) and "Design" in result._repr_html_()


@pytest.mark.parametrize("address, target", [("s1.rb2", ("s1.ic", 1e-3)), ("s1.re_bypassed", ("gain", 100.0)),
                                             ("supply", ("s3.vce", 9.0))])
def test_other_targets_re_solved(address, target):
    plan = demo_plan()
    result = plan.design(address, target)
    trial = plan.copy()
    trial.set(address, result.exact)
    assert trial.solve()[target[0]] == pytest.approx(target[1], rel=1e-8)


def test_symmetric_swing_centres_the_q_point():
    plan = demo_plan()
    result = plan.design("s1.rc", "s1.symmetric_swing", series="E12")
    trial = plan.copy()
    trial.set("s1.rc", result.exact)
    solved = trial.solve()
    assert solved["s1.swing_to_saturation"] == pytest.approx(solved["s1.swing_to_cutoff"], rel=1e-8)
    assert abs(result.achieved) < 1e-8 * solved["s1.swing"]
    assert result.snapped in eseries.neighbours(result.exact, "E12")


def test_symmetric_swing_by_hand_and_never_in_saturation():
    # Fixed bias, no load, infinite Early voltage: the AC load line is the DC one, so the swing
    # toward saturation is V_CE − V_CE(sat) and toward cutoff I_C·R_C. Equal when
    # R_C = (V_CC − V_CE(sat)) / (2·I_C), I_C = β·(V_CC − V_BE)/R_B (Sedra & Smith, the BJT chapter,
    # from memory). The bounds reach far into saturation (R_C above (V_CC − V_CE(sat))/I_C), where
    # both swings are 0: a difference of 0 there is no centred Q-point and must not count as a root.
    plan = fixed_bias_plan(rb=2.2e6)
    ic = BETA * (VCC - VBE) / 2.2e6
    assert plan.get("s1.device.early_voltage") == math.inf
    result = plan.design("s1.rc", "s1.symmetric_swing", bounds=(100.0, 1e6))
    assert result.roots == (result.exact,)
    assert result.exact == pytest.approx((VCC - VCE_SAT) / (2 * ic), rel=1e-9)
    assert result.result["s1.region"] == "forward-active"


def test_symmetric_swing_of_a_later_stage_keeps_it_forward_active():
    # In the demo, raising s1.rc far enough saturates the direct-coupled s2 (both its swings 0).
    # The centred Q-point of s2 must come from forward-active samples only, and so must the E24
    # neighbour chosen: re-solved, its two swings differ by little and it is forward-active.
    plan = demo_plan()
    result = plan.design("s1.rc", "s2.symmetric_swing", series="E24")
    for value in (result.exact, *result.roots):
        trial = plan.copy()
        trial.set("s1.rc", value)
        solved = trial.solve()
        assert solved["s2.region"] == "forward-active"
        assert solved["s2.swing_to_saturation"] == pytest.approx(solved["s2.swing_to_cutoff"], rel=1e-8)
    snapped = result.plan.solve()
    assert snapped["s2.region"] == "forward-active" and snapped["s2.swing"] > 0


def test_a_target_reached_twice_reports_both_roots():
    # P = I_C·V_CE + I_B·V_BE with V_CE = V_CC − I_C·R_C: R_C·I² − (V_CC + V_BE/β)·I + P = 0, two
    # collector currents (quadratic formula), each set by R_B = β·(V_CC − V_BE)/I_C.
    plan = fixed_bias_plan(rb=2.2e6)
    power = 2.5e-3
    a, b = RC, -(VCC + VBE / BETA)
    disc = math.sqrt(b * b - 4 * a * power)
    currents = sorted(((-b - disc) / (2 * a), (-b + disc) / (2 * a)))
    expected = sorted(BETA * (VCC - VBE) / i for i in currents)
    result = plan.design("s1.rb1", ("s1.dissipation", power), bounds=(100e3, 10e6))
    assert len(result.roots) == 2
    np.testing.assert_allclose(result.roots, expected, rtol=1e-8)
    # The root nearest the plan's 2.2 MΩ (in ratio) is the one used.
    assert result.exact == min(result.roots, key=lambda r: abs(math.log(r / 2.2e6)))
    assert "also reached at" in repr(result)


def test_target_out_of_reach_is_reported():
    with pytest.raises(TargetNotReachedError, match=r"design s1.rc: no value in .* reaches s1.vce = 50 .*spans"):
        demo_plan().design("s1.rc", ("s1.vce", 50.0))


@pytest.mark.parametrize("address, target, options, error, message", [
    ("s1.rc", ("s1.region", 1.0), {}, InvalidValueError, r"design target 's1.region' is a word"),
    ("s1.rc", ("s1.vce",), {}, InvalidValueError, r"design target: give \(result address, value\)"),
    ("s1.rc", ("s1.vce", math.nan), {}, InvalidValueError, r"design target s1.vce: the value must be a finite"),
    ("s1.rc", ("s1.vcee", 5.0), {}, UnknownNameError, r"'s1.vcee'"),
    ("s1.rc", "s1.symmetric", {}, InvalidValueError, r"a named target is '<stage id>.symmetric_swing'"),
    ("s1.rc", "s9.symmetric_swing", {}, UnknownNameError, r"design target 's9.symmetric_swing': .*no stage 's9'"),
    ("s1.rc", ("s1.vce", 5.0), {"bounds": (5e3, 1e3)}, InvalidValueError, r"design bounds for s1.rc: need finite low < high"),
    ("s1.rc", ("s1.vce", 5.0), {"bounds": (-1.0, 1e3)}, InvalidValueError, r"design bounds for s1.rc: .*-1"),
    ("s1.rc", ("s1.vce", 5.0), {"bounds": 3}, InvalidValueError, r"design bounds: give \(low, high\)"),
    ("s1.rc", ("s1.vce", 5.0), {"series": "E7"}, UnknownModelError, r"unknown E-series 'E7'"),
    ("s1.rc", ("s1.vce", 5.0), {"model": "lookup-table"}, UnknownModelError, r"model must be one of"),
    ("s1.coupling", ("s1.vce", 5.0), {}, InvalidValueError, r"design s1.coupling: holds a word"),
    ("s2.rb1", ("s1.vce", 5.0), {}, InvalidValueError, r"design s2.rb1: is not fitted"),
])
def test_bad_design_input_is_named(address, target, options, error, message):
    with pytest.raises(error, match=message):
        demo_plan().design(address, target, **options)


def test_negative_values_need_bounds_and_have_no_series():
    plan = demo_plan()
    plan.negative_supply = -3.0
    with pytest.raises(InvalidValueError, match=r"design negative_supply: its value is -3, so no default bounds"):
        plan.design("negative_supply", ("s1.vce", 6.0))
    with pytest.raises(InvalidValueError, match=r"the exact value .* is not positive, so it has no E24 neighbour"):
        plan.design("negative_supply", ("s1.vce", 7.0), bounds=(-6.0, -0.5), series="E24")


@pytest.mark.parametrize("side", ["low", "high"])
def test_a_target_reached_exactly_at_a_bound(side):
    # R_C = (V_CC − 5 V)/I_C puts V_CE at 5 V (fixed bias by hand, Sedra & Smith, the BJT chapter,
    # from memory). With that value as one end of the bounds, the end itself is the answer, whatever
    # the last bit of rounding on the residual there.
    plan = fixed_bias_plan(rb=2.2e6)
    rc = (VCC - 5.0) / (BETA * (VCC - VBE) / 2.2e6)
    bounds = (rc, 1e5) if side == "low" else (1e3, rc)
    result = plan.design("s1.rc", ("s1.vce", 5.0), bounds=bounds)
    assert result.roots == (result.exact,)
    assert result.exact == pytest.approx(rc, rel=1e-12)
    assert result.achieved == pytest.approx(5.0, rel=1e-9)
    narrow = plan.design("s1.rc", ("s1.vce", 5.0), bounds=(rc, rc * (1 + 1e-7)))
    assert narrow.roots == (narrow.exact,) and narrow.exact == pytest.approx(rc, rel=1e-12)

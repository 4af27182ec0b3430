"""Result objects (text, HTML, JSON-ready dicts), the status vocabulary, plan-level ratings and
custom-stage node naming.

Most checks here are behaviour checks (a JSON encoder accepts the dict, HTML is escaped, a bad
name raises a named error). Numeric checks name their source beside them:

- Straight-line algebra of the load line through the Q-point, I_C = I_CQ - (V_CE - V_CEQ)/R
  (the load-line construction of Sedra & Smith and Boylestad & Nashelsky, from memory).
- Joule's law P = V²/R = I²R, and conservation of energy (the power the supplies deliver equals
  the power every resistor and transistor dissipates; Tellegen's theorem, from memory).
- Transistor dissipation P = V_CE·I_C + V_BE·I_B (terminal power of a three-terminal device,
  from memory).
- Ratings (0.25 W resistor, linear derating to a 150 °C junction, the 60 V DC safety
  extra-low-voltage limit, -2 mV/K V_BE drift): common practice, no source.
"""

from __future__ import annotations

import dataclasses
import json
import math

import numpy as np
import pytest

import ampplan
from ampplan import errors
from ampplan.analyses import chain, dissipation, results
from ampplan.analyses.results import Clipping, LoadLine, Swing
from ampplan.circuit import GROUND, Resistor
from ampplan.cli import main
from ampplan.devices import REFERENCE_TEMPERATURE
from ampplan.plan import LOAD_RESISTOR, NEGATIVE_SUPPLY, SOURCE_RESISTOR, SUPPLY
from ampplan.solver import result as solver_result
from ampplan.solver.result import STATUSES, Check, Status
from ampplan.units import format_quantity as fq


def strict_json(x) -> str:
    """JSON text, refusing NaN and infinities as the JSON standard does."""
    return json.dumps(x, allow_nan=False, ensure_ascii=False)


def base_driven_circuit():
    """V_B drives an NPN base through R_B; R_C from a 10 V supply; emitter on ground."""
    c = ampplan.Circuit()
    c.voltage_source("VCC", "vcc", GROUND, 10.0)
    c.voltage_source("VB", "vb", GROUND, 2.0)
    c.resistor("RB", "vb", "b", 100e3)
    c.resistor("RC", "vcc", "c", 4.7e3)
    c.bjt("Q1", collector="c", base="b", emitter=GROUND, device=ampplan.Transistor())
    return c


def divider_ce_plan(**plan_values):
    plan = ampplan.Plan(supply=12.0, source_resistance=600.0, load_resistance=10e3, **plan_values)
    plan.add(ampplan.CommonEmitter(rb1=47e3, rb2=10e3, rc=4.7e3, re=220.0, re_bypassed=820.0,
                                   device=ampplan.Transistor()))
    return plan


def grounded_port_stage(output="e"):
    """A follower whose collector sits on the supply and whose emitter is bypassed to ground:
    both ends of the collector-emitter port are grounded for the signal, so its AC load line
    has R = 0 (vertical)."""
    c = ampplan.Circuit()
    c.resistor("rb_far", "supply", "in", 47e3)
    c.resistor("rb_near", "in", "lower", 10e3)
    c.resistor("re", "e", "lower", 1e3)
    c.capacitor("c_bypass", "e", GROUND)
    c.bjt("q", collector="supply", base="in", emitter="e", device=ampplan.Transistor())
    return ampplan.CustomStage(circuit=c, input="in", output=output, transistor="q")


# ------------------------------------------------------------------------------------------------
# 1. Load lines with R = 0, and JSON-safe dicts
# ------------------------------------------------------------------------------------------------

def test_load_line_crossings_follow_the_straight_line():
    # Source: load-line algebra, I_C = I_CQ - (V_CE - V_CEQ)/R (from memory).
    line = LoadLine(resistance=2.5e3, q_vce=4.0, q_ic=2e-3)
    assert line.slope == pytest.approx(-1 / 2.5e3, rel=1e-15)
    assert line.vce_at_zero_current == pytest.approx(4.0 + 2e-3 * 2.5e3, rel=1e-15)
    assert line.ic_at_zero_vce == pytest.approx(2e-3 + 4.0 / 2.5e3, rel=1e-15)
    assert line.endpoints == ((line.vce_at_zero_current, 0.0), (0.0, line.ic_at_zero_vce))


def test_vertical_load_line_has_infinite_slope_and_no_zero_vce_crossing():
    line = LoadLine(resistance=0.0, q_vce=5.0, q_ic=1e-3)
    assert line.slope == -math.inf
    assert line.ic_at_zero_vce == math.inf
    assert line.vce_at_zero_current == 5.0                  # the line is V_CE = V_CEQ
    assert LoadLine(0.0, -5.0, 1e-3).ic_at_zero_vce == -math.inf
    assert math.isnan(LoadLine(0.0, 0.0, 1e-3).ic_at_zero_vce)   # the line lies on the axis
    d = line.to_dict()
    strict_json(d)
    assert d["slope"] is None and d["ic_at_zero_vce"] is None and d["resistance"] == 0.0
    assert "∞" in repr(line)


def test_numpy_zero_resistance_does_not_warn():
    # pytest turns warnings into errors: a numpy 0.0 must not reach a numpy division.
    line = LoadLine(np.float64(0.0), np.float64(5.0), np.float64(1e-3))
    assert line.slope == -math.inf and line.ic_at_zero_vce == math.inf


def test_stage_with_both_port_ends_grounded_serialises():
    plan = ampplan.Plan(supply=12.0)
    plan.add(grounded_port_stage())
    res = plan.solve()
    stage = res.stages[0]
    assert stage.load_lines.ac.resistance == 0.0
    assert stage.load_lines.ac.slope == -math.inf
    strict_json(stage.to_dict())
    strict_json(res.to_dict())
    repr(stage), stage._repr_html_(), repr(res), res._repr_html_()


def test_cli_json_with_a_vertical_load_line(tmp_path, capsys):
    plan = ampplan.Plan(supply=12.0)
    plan.add(grounded_port_stage())
    path = tmp_path / "grounded.json"
    plan.save(path)
    main(["check", str(path), "--json"])
    out, err = capsys.readouterr()
    data = json.loads(out)
    assert data["stages"][0]["load_lines"]["ac"]["slope"] is None, err


def test_operating_point_dict_is_json_safe_in_cutoff():
    c = base_driven_circuit()
    c.remove("VB")
    c.voltage_source("VB", "vb", GROUND, 0.0)           # no base drive: cutoff, I_B = 0
    op = c.solve()
    t = op.transistors["Q1"]
    assert t.region == "cutoff" and math.isnan(t.beta_forced)
    d = op.to_dict()
    strict_json(d)
    assert d["transistors"]["Q1"]["beta_forced"] is None
    strict_json(t.to_dict())
    for check in t.checks:
        strict_json(check.to_dict())


def test_batched_operating_point_dict_is_json_safe():
    op = base_driven_circuit().solve(batch={"VB": [0.0, 2.0, 3.0]})
    assert op.transistors["Q1"].region[0] == "cutoff"
    d = op.to_dict()
    strict_json(d)
    assert d["transistors"]["Q1"]["beta_forced"][0] is None
    assert d["status"] == ["ok", "ok", "ok"]


def test_every_result_type_has_a_json_ready_dict():
    res = divider_ce_plan().solve()
    stage = res.stages[0]
    objects = [res, stage, stage.transistor, stage.transistor.checks[0], stage.load_lines, stage.load_lines.ac,
               stage.swing, res.clipping, res.operating_point,
               Clipping(math.inf, math.nan, None, None, None, None), Swing(math.nan, 1.0)]
    for obj in objects:
        strict_json(obj.to_dict())


# ------------------------------------------------------------------------------------------------
# 2. Text and HTML forms
# ------------------------------------------------------------------------------------------------

def test_reprs_lead_with_what_a_designer_reads():
    res = divider_ce_plan().solve()
    stage = res.stages[0]
    t = stage.transistor
    assert repr(t).startswith("TransistorResult(s1_q npn: forward-active, I_C=")
    check = t.checks[-1]
    assert repr(check).startswith(f"Check({check.name} holds, margin ")
    assert " V" in repr(check)                                  # a V_… check is in volts
    assert repr(stage).startswith("StageResult(s1 common-emitter: forward-active, I_C=")
    assert repr(stage.load_lines).startswith("LoadLines(DC ")
    assert repr(stage.load_lines.ac).startswith("LoadLine(")
    assert repr(stage.swing).startswith(f"Swing({results._fmt(stage.swing.peak, 'V')} peak")
    assert repr(res.clipping).startswith("Clipping(+")
    assert res.clipping.positive_stage in repr(res.clipping)
    assert repr(Clipping(math.inf, math.inf, None, None, None, None)) == (
        "Clipping(+: no clipping within the sweep; -: no clipping within the sweep)")
    # The existing forms keep working.
    assert repr(res).startswith("PlanResult(constant-drop, 1 stage(s), all forward-active)")
    assert repr(res.operating_point).startswith("OperatingPoint(constant-drop)")
    assert "<table" in res._repr_html_() and "<table" in res.operating_point._repr_html_()


def test_failing_check_and_batch_check_reprs():
    assert "FAILS" in repr(Check("I_B > 0", -1e-6, 0.0, False, -1e-6))
    assert " A" in repr(Check("I_B > 0", -1e-6, 0.0, False, -1e-6))     # an I_… check is in amperes
    op = base_driven_circuit().solve(batch={"VB": [0.0, 2.0, 3.0]})
    for check in op.transistors["Q1"].checks:
        assert "of 3" in repr(check)
        check._repr_html_()


def test_every_result_type_has_escaped_html():
    res = divider_ce_plan().solve()
    stage = res.stages[0]
    for obj in (stage, stage.transistor, stage.load_lines, stage.load_lines.ac, stage.swing, res.clipping,
                stage.transistor.checks[0], res, res.operating_point):
        text = obj._repr_html_()
        assert text.startswith("<") and "<table" in text, type(obj).__name__
    # Check names hold ">" and "<": they must arrive escaped.
    check_html = Check("V_CE >= V_CE(sat)", 5.0, 0.2, True, 4.8)._repr_html_()
    assert "V_CE &gt;= V_CE(sat)" in check_html and "V_CE >=" not in check_html
    assert "&gt;" in stage.transistor._repr_html_()
    marked = dataclasses.replace(stage, cautions=("<b>R & C</b>",), kind="<custom>")
    text = marked._repr_html_()
    assert "&lt;b&gt;R &amp; C&lt;/b&gt;" in text and "<b>R" not in text and "&lt;custom&gt;" in text
    clipping = Clipping(1.0, 2.0, "<s1>", "s1", "saturation", "cutoff")
    assert "&lt;s1&gt;" in clipping._repr_html_()


def test_one_formatting_helper():
    # Every figure of a result goes through one formatter, ampplan.units.format_quantity: the
    # analyses' helper prints exactly what it prints, for scalars and for batch summaries.
    for value, unit in ((4700.0, "Ω"), (946.1e-6, "A"), (-math.inf, "Ω"), (3.388e-21, "A"), (0.0, "V")):
        assert results._fmt(value, unit) == fq(value, unit)
    assert results._fmt(math.nan, "V") == "—" and results._fmt(None) == "—"
    # An all-NaN batch field (every sample failed) prints without a numpy warning.
    assert results._fmt(np.array([math.nan, math.nan]), "A") == "—"


def test_zero_gain_never_prints_as_negative_zero():
    assert results._gain(-0.0) == "0" and results._gain(0.0) == "0"
    assert results._gain(-12.345678) == "-12.35"
    res = divider_ce_plan().solve()
    stage = dataclasses.replace(res.stages[0], gain=-0.0)
    zeroed = dataclasses.replace(res, stages=(stage,), gain=-0.0)
    assert "gain=0," in repr(stage)
    for text in (zeroed.table(), zeroed.summary(), zeroed._repr_html_(), stage._repr_html_()):
        assert "-0 " not in text and "-0<" not in text and not text.rstrip().endswith("-0")
    assert "  0 V/V" in zeroed.summary()


# ------------------------------------------------------------------------------------------------
# 3. Status vocabulary, sample(), stage()
# ------------------------------------------------------------------------------------------------

def test_status_vocabulary_is_one_literal():
    from typing import get_args
    assert STATUSES == get_args(Status)
    assert set(STATUSES) == {"ok", "no-consistent-region", "no-convergence", "assumption-fails", "singular"}
    assert "Status" in solver_result.__all__ and "STATUSES" in solver_result.__all__


def test_statuses_the_solver_reports_are_in_the_vocabulary():
    c = base_driven_circuit()
    assert c.solve().status in STATUSES
    # Imposing cutoff on a driven transistor: the assumption fails at the solution.
    assert c.solve(assume={"Q1": "cutoff"}).status == "assumption-fails"
    batch = c.solve(batch={"VB": [0.0, 2.0]})
    assert set(np.asarray(batch.status).tolist()) <= set(STATUSES)


def test_sample_of_a_single_solve_is_refused():
    op = base_driven_circuit().solve()
    with pytest.raises(errors.InvalidValueError, match="single solve, not a batch"):
        op.sample(0)


@pytest.mark.parametrize("k", [3, -4, 1.0, True, "0"])
def test_sample_out_of_range_or_not_an_integer_is_refused(k):
    op = base_driven_circuit().solve(batch={"VB": [0.0, 2.0, 3.0]})
    with pytest.raises(errors.InvalidValueError, match="OperatingPoint.sample: k must be an integer"):
        op.sample(k)


def test_sample_counts_from_the_end_like_a_list():
    op = base_driven_circuit().solve(batch={"VB": [0.0, 2.0, 3.0]})
    last, third = op.sample(-1), op.sample(2)
    assert last.v == third.v and last.transistors["Q1"].ic == third.transistors["Q1"].ic
    assert op.sample(np.int64(0)).transistors["Q1"].region == "cutoff"


def test_plan_result_stage_names_the_missing_stage():
    res = divider_ce_plan().solve()
    assert res.stage("s1") is res.stages[0]
    with pytest.raises(errors.UnknownNameError) as info:
        res.stage("s7")
    assert str(info.value) == "the result has no stage 's7'; its stages are s1"


# ------------------------------------------------------------------------------------------------
# 4. Dissipation constants and wording
# ------------------------------------------------------------------------------------------------

def test_derating_starts_at_the_reference_temperature():
    # Linear derating from the 25 °C rating to zero at the junction limit (common practice, no source).
    middle = (REFERENCE_TEMPERATURE + dissipation.JUNCTION_LIMIT) / 2
    assert dissipation.derated_power(0.5, REFERENCE_TEMPERATURE) == 0.5
    assert dissipation.derated_power(0.5, REFERENCE_TEMPERATURE - 40.0) == 0.5
    assert dissipation.derated_power(0.5, middle) == pytest.approx(0.25, rel=1e-12)
    assert dissipation.derated_power(0.5, dissipation.JUNCTION_LIMIT + 1.0) == 0.0


def test_supply_caution_quotes_the_limit_constant(monkeypatch):
    # 60 V DC safety extra-low-voltage limit (common practice, no source).
    text = dissipation.supply_cautions(70.0, 0.0)[0]
    assert "beyond the 60 V DC safety extra-low-voltage range" in text and "licensed practice" in text
    assert dissipation.supply_cautions(30.0, -30.0) == []
    monkeypatch.setattr(dissipation, "SAFETY_EXTRA_LOW_VOLTAGE_DC", 48.0)
    assert "beyond the 48 V DC" in dissipation.supply_cautions(50.0, 0.0)[0]


def test_transistor_cautions_document_their_units():
    doc = dissipation.transistor_cautions.__doc__
    assert "edge : float" in doc and "headroom : float" in doc and "volts" in doc and "Celsius" in doc


# ------------------------------------------------------------------------------------------------
# 5. Chain: the plan's own resistors, a custom stage's other transistors, the supplies, the edge
# ------------------------------------------------------------------------------------------------

def follower_into_load_plan(rl, rs=0.0):
    """An emitter follower directly coupled to the load, so DC flows in the load."""
    plan = ampplan.Plan(supply=12.0, source_resistance=rs, load_resistance=rl, load_coupling="direct")
    plan.add(ampplan.CommonCollector(rb1=1e3, rb2=1e3, re=1e3, device=ampplan.Transistor()))
    return plan


def test_load_resistor_over_its_rating_is_cautioned():
    res = follower_into_load_plan(rl=47.0).solve()
    op = res.operating_point
    # Source: Joule's law, P = V²/R, from the voltage across the load.
    load = op.circuit.element(LOAD_RESISTOR)
    expected = (op.v[load.a] - op.v[load.b]) ** 2 / 47.0
    assert expected > 0.25
    assert res.resistor_power[LOAD_RESISTOR] == pytest.approx(expected, rel=1e-12)
    sentence = (f"{LOAD_RESISTOR}: dissipates {fq(res.resistor_power[LOAD_RESISTOR], 'W')}, "
                "above the 250 mW resistor rating.")
    assert sentence in res.cautions
    assert res.to_dict()["resistor_power"][LOAD_RESISTOR] == res.resistor_power[LOAD_RESISTOR]


def test_load_resistor_within_its_rating_is_quiet():
    res = follower_into_load_plan(rl=10e3).solve()
    assert res.resistor_power[LOAD_RESISTOR] < 0.25
    assert not any(c.startswith(LOAD_RESISTOR) for c in res.cautions)


def test_source_resistor_power_and_absent_resistors():
    res = follower_into_load_plan(rl=10e3, rs=1e3).solve()
    op = res.operating_point
    # Source: Joule's law, P = V²/R across the source resistor (direct coupling: base current flows).
    assert res.resistor_power[SOURCE_RESISTOR] == pytest.approx(
        (op.v["emf"] - op.v["source_out"]) ** 2 / 1e3, rel=1e-9)
    plan = ampplan.Plan(supply=12.0)                    # ideal source, no load: neither resistor exists
    plan.add(ampplan.CommonEmitter(rb1=470e3, rc=4.7e3, device=ampplan.Transistor()))
    assert plan.solve().resistor_power == {}


@pytest.mark.parametrize("negative", [0.0, -6.0])
def test_supply_figures_balance_the_dissipated_power(negative):
    plan = ampplan.Plan(supply=12.0, negative_supply=negative, source_resistance=600.0, load_resistance=47.0,
                        load_coupling="direct")
    plan.add(ampplan.CommonCollector(rb1=10e3, rb2=10e3, re=1e3, device=ampplan.Transistor()))
    res = plan.solve()
    op = res.operating_point
    assert res.supply_current == op.i[SUPPLY]
    # Source: conservation of energy (Tellegen's theorem, from memory): the supplies deliver what the
    # resistors (I²R, Joule's law) and the transistors dissipate.
    dissipated = sum(op.i[e.name] ** 2 * e.resistance for e in op.circuit.of_kind(Resistor))
    dissipated += sum(t.power for t in op.transistors.values())
    assert res.supply_power == pytest.approx(dissipated, rel=1e-9)
    assert (NEGATIVE_SUPPLY in op.i) == (negative != 0)


def two_transistor_stage(device2, base2_far=10e3):
    """A CE stage (reported transistor q) beside a follower q2 from a divider into 100 Ω."""
    c = ampplan.Circuit()
    c.resistor("rb_far", "supply", "in", 47e3)
    c.resistor("rb_near", "in", "lower", 10e3)
    c.resistor("rc", "supply", "c", 4.7e3)
    c.resistor("re", "e", "lower", 1e3)
    c.bjt("q", collector="c", base="in", emitter="e", device=ampplan.Transistor())
    c.resistor("rb2_far", "supply", "b2", base2_far)
    c.resistor("rb2_near", "b2", "lower", 10e3)
    c.resistor("re2", "e2", "lower", 100.0)
    c.bjt("q2", collector="supply", base="b2", emitter="e2", device=device2)
    return ampplan.CustomStage(circuit=c, input="in", output="c", transistor="q")


def test_custom_stage_other_transistor_gets_the_rating_checks():
    device2 = ampplan.Transistor(max_power=0.1, max_collector_current=0.01, max_vce=5.0)
    plan = ampplan.Plan(supply=12.0, resistor_power_rating=10.0)
    plan.add(two_transistor_stage(device2))
    res = plan.solve()
    t2 = res.operating_point.transistors["s1_q2"]
    v = res.operating_point.v
    # Source: terminal power of the transistor, P = V_CE·I_C + V_BE·I_B (from memory).
    power = (v["vcc"] - v["s1.e2"]) * t2.ic + (v["s1.b2"] - v["s1.e2"]) * t2.ib
    assert t2.power == pytest.approx(power, rel=1e-9) and power > 0.1
    cautions = res.stages[0].cautions
    assert (f"s1: transistor s1_q2 dissipates {fq(t2.power, 'W')}, above its 100 mW rating; it may overheat."
            in cautions)
    assert f"s1: I_C of transistor s1_q2 {fq(t2.ic, 'A')} exceeds the 10 mA rating." in cautions
    assert f"s1: |V_CE| of transistor s1_q2 {fq(abs(t2.vce), 'V')} exceeds the 5 V rating." in cautions
    assert all(c in res.cautions for c in cautions)


def test_custom_stage_other_transistor_region_caution_keeps_its_detail():
    plan = ampplan.Plan(supply=12.0, resistor_power_rating=10.0)
    plan.add(two_transistor_stage(ampplan.Transistor(), base2_far=1e9))   # q2's base near the lower rail
    res = plan.solve()
    assert res.operating_point.transistors["s1_q2"].region == "cutoff"
    assert ("s1: transistor s1_q2 is in cutoff, not forward-active (no collector current)."
            in res.stages[0].cautions)


@pytest.mark.parametrize("temperature", [-20.0, 25.0, 85.0])
def test_vcb_zero_edge_is_the_solvers_vbe_at_temperature(temperature):
    device = ampplan.Transistor(vbe_temperature_coefficient=-2.2e-3)
    edge = chain.forward_active_edge(device, "constant-drop", "vcb-zero", temperature)
    # Source: linear V_BE drift, V_BE(T) = V_BE(25 °C) + dV_BE/dT·(T - 25 °C) (common practice, no source).
    assert edge == pytest.approx(0.7 - 2.2e-3 * (temperature - 25.0), abs=1e-15)
    c = base_driven_circuit()
    c.remove("Q1")
    c.bjt("Q1", collector="c", base="b", emitter=GROUND, device=device)
    op = c.solve(temperature=temperature, active_edge="vcb-zero")
    assert op.transistors["Q1"].region == "forward-active"
    assert op.transistors["Q1"].vbe == pytest.approx(edge, abs=1e-12)
    assert chain.forward_active_edge(device, "constant-drop", "vce-sat", temperature) == device.vce_sat


# ------------------------------------------------------------------------------------------------
# 6. Custom stages: rails refused as ports, private nodes kept apart
# ------------------------------------------------------------------------------------------------

@pytest.mark.parametrize("rail", ["supply", "lower", "gnd"])
@pytest.mark.parametrize("port", ["input", "output"])
def test_custom_stage_refuses_a_rail_as_input_or_output(port, rail):
    c = ampplan.Circuit()
    c.resistor("rb", "supply", "in", 470e3)
    c.resistor("rc", "supply", "out", 4.7e3)
    c.resistor("rl", "lower", "in", 1e6)
    c.bjt("q", collector="out", base="in", emitter=GROUND, device=ampplan.Transistor())
    ports = {"input": "in", "output": "out", port: rail}
    with pytest.raises(errors.InvalidValueError, match=rf"CustomStage\.{port}: '{rail}' is a rail node"):
        ampplan.CustomStage(circuit=c, transistor="q", **ports)


def test_plan_file_with_a_rail_input_names_the_json_path():
    from ampplan.record import plan_from_dict, plan_to_dict
    plan = ampplan.Plan(supply=12.0)
    plan.add(grounded_port_stage())
    data = plan_to_dict(plan)
    data["stages"][0]["input"] = "supply"
    with pytest.raises(errors.PlanFileError, match=r"stages\[0\]\.input: 'supply' is a rail node"):
        plan_from_dict(data)


def ce_stage_with_collector_named(collector):
    c = ampplan.Circuit()
    c.resistor("rb_far", "supply", "b", 47e3)
    c.resistor("rb_near", "b", "lower", 10e3)
    c.resistor("rc", "supply", collector, 4.7e3)
    c.resistor("re", "e", "lower", 1e3)
    c.capacitor("c_bypass", "e", GROUND)
    c.bjt("q", collector=collector, base="b", emitter="e", device=ampplan.Transistor())
    return ampplan.CustomStage(circuit=c, input="b", output=collector, transistor="q")


def test_private_node_named_in_stays_apart_from_the_coupling_node():
    answers = []
    for collector in ("in", "c"):
        plan = ampplan.Plan(supply=12.0, source_resistance=600.0, load_resistance=10e3)
        plan.add(ce_stage_with_collector_named(collector))
        compiled = plan.compile()
        nodes = set(compiled.circuit.nodes)
        assert "s1_in" in nodes and f"s1.{collector}" in nodes
        assert compiled.stages[0].output == f"s1.{collector}"
        answers.append(plan.solve())
    named_in, named_c = answers
    # The node's name must not change the circuit.
    for key in ("gain", "input_resistance", "output_resistance"):
        assert getattr(named_in.stages[0], key) == pytest.approx(getattr(named_c.stages[0], key), rel=1e-12)
    assert named_in.gain == pytest.approx(named_c.gain, rel=1e-12)


def test_base_bias_defaults_and_template_emitter_variants_still_build():
    # has_base_bias now comes from the base class for CommonBase and CustomStage.
    assert ampplan.CommonBase().has_base_bias() and grounded_port_stage().has_base_bias()
    plan = ampplan.Plan(supply=12.0)
    plan.add(ampplan.CommonBase(c_base=None))
    plan.add(grounded_port_stage(), coupling="capacitor")
    assert plan.stage_ids == ("s1", "s2")
    # The emitter network with re only, re_bypassed only, both, or neither (emitter on the rail).
    for re, re_b in ((220.0, None), (None, 820.0), (220.0, 820.0), (None, None)):
        p = ampplan.Plan(supply=12.0)
        p.add(ampplan.CommonEmitter(rb1=470e3, rc=4.7e3, re=re, re_bypassed=re_b))
        built = p.compile().stages[0]
        names = set(built.elements)
        assert ("s1_re" in names) == (re is not None) and ("s1_re_bypassed" in names) == (re_b is not None)


def _latch():
    """Two cross-coupled common-emitter stages: the textbook circuit with more than one DC operating
    point (Sedra & Smith, bistable multivibrator, from memory)."""
    c = ampplan.Circuit()
    c.voltage_source("VCC", "vcc", GROUND, 5.0)
    c.resistor("RC1", "vcc", "c1", 1e3)
    c.resistor("RC2", "vcc", "c2", 1e3)
    c.resistor("RB1", "c2", "b1", 10e3)
    c.resistor("RB2", "c1", "b2", 10e3)
    c.bjt("Q1", collector="c1", base="b1", emitter=GROUND, device=ampplan.Transistor())
    c.bjt("Q2", collector="c2", base="b2", emitter=GROUND, device=ampplan.Transistor())
    return c


def test_alternatives_behave_as_a_tuple_of_operating_points():
    # Source: the OperatingPoint docstring: alternatives is a sequence of OperatingPoint, found on
    # first use, equal to (and pickled as) a tuple. The latch has other consistent points.
    import pickle
    op = _latch().solve(model="constant-drop")
    alternatives = op.alternatives
    assert len(alternatives) >= 1
    as_tuple = tuple(alternatives)
    assert all(isinstance(a, solver_result.OperatingPoint) for a in as_tuple)
    assert alternatives == as_tuple and alternatives[0] is as_tuple[0] and alternatives != as_tuple[:-1]
    assert alternatives != "not a sequence of points"
    restored = pickle.loads(pickle.dumps(alternatives))   # NaN fields (forced beta in cutoff) defeat ==
    assert type(restored) is tuple and [repr(p) for p in restored] == [repr(p) for p in as_tuple]
    assert repr(alternatives) == repr(as_tuple)
    assert "other consistent operating point(s)" in repr(op)
    assert len(op.to_dict()["alternatives"]) == len(as_tuple)


def test_field_types_say_which_fields_are_arrays_in_a_batch():
    # Source: the result annotations (issue 6 §5): a field typed Figure, Text or Flag is a float,
    # str or bool in a single solve and an ndarray of shape (S,) in a batch; every other field keeps
    # its type. Checked on the real results of both models.
    import typing
    scalar_of = {solver_result.Figure: float, solver_result.Text: str, solver_result.Flag: bool}
    c = _latch()
    for model in ("constant-drop", "ebers-moll"):
        single = c.solve(model=model)
        batch = c.solve(model=model, batch={"RC2": np.array([1e3, 1.2e3, 1.5e3])})
        for cls, one, many in [(solver_result.OperatingPoint, single, batch),
                               (solver_result.TransistorResult, single.transistors["Q1"], batch.transistors["Q1"]),
                               (solver_result.Check, single.transistors["Q1"].checks[0],
                                batch.transistors["Q1"].checks[0])]:
            hints = typing.get_type_hints(cls, vars(solver_result))
            for name, hint in hints.items():
                if hint in scalar_of:
                    assert isinstance(getattr(one, name), scalar_of[hint]), (model, cls.__name__, name)
                    assert isinstance(getattr(many, name), np.ndarray), (model, cls.__name__, name)
                    assert getattr(many, name).shape == (3,), (model, cls.__name__, name)
        for mapping in ("v", "i"):
            assert all(isinstance(value, float) for value in getattr(single, mapping).values())
            assert all(np.shape(value) == (3,) for value in getattr(batch, mapping).values())

"""Plan sweeps against single solves.

Source: the definition in issue 8 — every sample of a sweep equals ``plan.copy()`` with those
values set and solved on its own, to 1e-9 relative for constant-drop and 1e-6 for Ebers–Moll —
checked against the reference in ``tests/whatif_reference.py``, which solves every sample one by
one with ``plan.solve()`` and none of the what-if code.
"""

from __future__ import annotations

import importlib.resources
import json

import numpy as np
import pytest

import ampplan
from ampplan.analyses.addresses import result_addresses
from ampplan.errors import InvalidValueError, NoConsistentRegionError, ConvergenceError, UnknownModelError, UnknownNameError

from whatif_reference import assert_matches, check_rule, single_solves

RTOL = {"constant-drop": 1e-9, "ebers-moll": 1e-6}


def demo_plan():
    with importlib.resources.as_file(importlib.resources.files("ampplan") / "data/demo_plan.json") as path:
        return ampplan.Plan.load(path)


def forced_collector_plan():
    """A stage whose collector is fed by a current source IX with the base current fixed at
    (10 - 0.7) V / 1 MΩ = 9.3 µA: above β·I_B = 0.93 mA no operating point exists (the collector
    current of a transistor cannot exceed β·I_B; Sedra & Smith, *Microelectronic Circuits*, from
    memory), so such a sample fails in either model."""
    c = ampplan.Circuit()
    c.resistor("RB", "supply", "b", 1e6)
    c.current_source("IX", "supply", "c", 0.5e-3)
    c.bjt("q", "c", "b", "gnd", ampplan.Transistor(beta=100.0))
    plan = ampplan.Plan(supply=10.0)
    plan.add(ampplan.CustomStage(circuit=c, input="b", output="c", transistor="q"))
    return plan


@pytest.mark.parametrize("model", ["constant-drop", "ebers-moll"])
def test_sweep_equals_single_solves(model):
    plan = demo_plan()
    # s1.rc from far below to far above its value: s1 and s2 move between forward-active and
    # saturation, so the regions and the limiting stage change along the sweep.
    values = {"s1.rc": np.geomspace(1e3, 60e3, 6), "s2.device.beta": np.linspace(40.0, 400.0, 6),
              "temperature": np.linspace(-10.0, 70.0, 6)}
    sweep = plan.sweep(values, model=model)
    assert len(sweep) == 6
    addresses = result_addresses(plan.stage_ids)
    table, cautions, results = single_solves(plan, values, model, addresses)
    assert_matches(sweep, table, rtol=RTOL[model], atol=1e-15)
    # The sweep really leaves forward-active: s2 saturates and s3 cuts off along it.
    assert set(sweep["s2.region"]) > {"forward-active"} and set(sweep["s3.region"]) > {"forward-active"}
    expected = [check_rule(r) for r in results]
    assert sweep.passed().tolist() == expected
    assert sweep.caution_fired.tolist() == [bool(c) for c in cautions]
    assert sweep.sample(2)["s1.vce"] == pytest.approx(table["s1.vce"][2], rel=RTOL[model])
    assert sweep["s1.rc"] is sweep.values["s1.rc"]


@pytest.mark.parametrize("model, status", [("constant-drop", "no-consistent-region"),
                                           ("ebers-moll", "no-convergence")])
def test_failed_sample_gets_its_status_and_the_others_are_unaffected(model, status):
    plan = forced_collector_plan()
    values = {"s1.IX": np.array([0.5e-3, 5e-3, 0.2e-3])}
    sweep = plan.sweep(values, model=model)
    assert sweep["status"].tolist() == ["ok", status, "ok"]
    for address in ("s1.ic", "s1.vce", "gain", "supply_current"):
        assert np.isnan(sweep[address][1])
    assert sweep["s1.region"][1] == "unsolved" and sweep["limiting_stage"][1] == ""
    table, _, results = single_solves(plan, values, model, result_addresses(plan.stage_ids))
    assert results[1] is None  # the single solve raised
    assert_matches(sweep, table, rtol=RTOL[model], atol=1e-15)
    assert sweep.passed().tolist() == [False, False, False]  # saturated, failed, saturated
    with pytest.raises((NoConsistentRegionError, ConvergenceError)):
        sweep.sample(1)


def test_grid_is_every_combination_first_address_slowest():
    plan = demo_plan()
    sweep = plan.sweep({"supply": [10.0, 14.0], "s3.re": [1e3, 1.5e3, 2.2e3]}, grid=True)
    assert len(sweep) == 6
    assert sweep["supply"].tolist() == [10.0, 10.0, 10.0, 14.0, 14.0, 14.0]
    assert sweep["s3.re"].tolist() == [1e3, 1.5e3, 2.2e3] * 2
    table, _, _ = single_solves(plan, sweep.values, "constant-drop", ["s3.ic", "supply_power"])
    assert_matches(sweep, table, rtol=1e-9)


def test_plan_passed_in_is_unchanged_and_plan_of_sets_the_values():
    plan = demo_plan()
    before = plan.get("s1.rc")
    sweep = plan.sweep({"s1.rc": [3.3e3, 6.8e3]})
    assert plan.get("s1.rc") == before
    assert sweep.plan_of(1).get("s1.rc") == 6.8e3 and sweep.plan_of(-1).get("s1.rc") == 6.8e3
    json.dumps(sweep.to_dict(), allow_nan=False)
    assert sweep.to_dict()["results"]["s1.region"] == sweep["s1.region"].tolist()
    assert "PlanSweep(constant-drop, 2 samples" in repr(sweep) and "Plan sweep" in sweep._repr_html_()


@pytest.mark.parametrize("values, error, message", [
    ({"s1.coupling": ["direct"]}, InvalidValueError, r"sweep s1.coupling: holds a word .* topology"),
    ({"load_coupling": [1.0]}, InvalidValueError, r"sweep load_coupling: holds a word"),
    ({"s2.rb1": [1e3]}, InvalidValueError, r"sweep s2.rb1: is not fitted in this plan"),
    ({"s1.device": [1.0]}, InvalidValueError, r"sweep s1.device: is a whole transistor"),
    ({"s1.device.polarity": ["pnp"]}, InvalidValueError, r"sweep s1.device.polarity: holds a word"),
    ({"s1.rc": [1e3, 2e3], "s1.re": [100.0]}, InvalidValueError, r"as many values .*s1.rc: 2, s1.re: 1"),
    ({"s1.rc": [1e3, float("nan")]}, InvalidValueError, r"sweep s1.rc\[1\]: must be a finite number"),
    ({"s1.rc": [1e3, -4.7e3]}, InvalidValueError, r"sweep s1.rc\[1\]: .*-4700"),
    ({"s1.rc": []}, InvalidValueError, r"sweep s1.rc: values must be a non-empty 1-D array"),
    ({"s1.rc": [[1e3]]}, InvalidValueError, r"sweep s1.rc: values must be a non-empty 1-D array"),
    ({"s1.rc": ["big"]}, InvalidValueError, r"sweep s1.rc: values must be numbers"),
    # numpy would read True as 1.0 (1 Ω) and refuse 10**400 with a raw OverflowError.
    ({"s1.rc": [True, 2e3]}, InvalidValueError, r"sweep s1.rc: values must be numbers, not true/false"),
    ({"s1.rc": np.array([True])}, InvalidValueError, r"sweep s1.rc: values must be numbers, not true/false"),
    ({"s1.rc": [10 ** 400]}, InvalidValueError, r"sweep s1.rc: values must be numbers"),
    ({}, InvalidValueError, r"sweep: values must be a non-empty dict"),
    ([("s1.rc", [1.0])], InvalidValueError, r"sweep: values must be a non-empty dict"),
    ({"s1.rcc": [1e3]}, UnknownNameError, r"s1.rcc"),
    ({"s9.rc": [1e3]}, UnknownNameError, r"no stage 's9'"),
])
def test_bad_sweeps_are_refused_naming_the_address(values, error, message):
    with pytest.raises(error, match=message):
        demo_plan().sweep(values)


def test_zero_source_resistance_is_a_topology_change():
    plan = demo_plan()
    with pytest.raises(InvalidValueError, match=r"sweep source_resistance: a value of 0 removes the element"):
        plan.sweep({"source_resistance": [0.0, 1e3]})
    plan.source_resistance = 0.0
    with pytest.raises(InvalidValueError, match=r"sweep source_resistance: is 0 in this plan"):
        plan.sweep({"source_resistance": [1e3]})


def test_bad_model_and_bad_reads():
    plan = demo_plan()
    with pytest.raises(UnknownModelError, match=r"model must be one of constant-drop, ebers-moll, got 'lookup-table'"):
        plan.sweep({"s1.rc": [1e3]}, model="lookup-table")
    sweep = plan.sweep({"s1.rc": [1e3, 2e3]})
    with pytest.raises(UnknownNameError, match=r"'s1.vc'.*did you mean 'vce'"):
        sweep["s1.vc"]
    for bad in (2, -3, 1.0, True):
        with pytest.raises(InvalidValueError, match=r"PlanSweep: sample index must be an integer from 0 to 1"):
            sweep.sample(bad)


def test_sweep_longer_than_one_solver_block_equals_single_solves():
    # 5,000 samples is more than the constant-drop solver takes in one block for the demo's circuit
    # (a block is sized to memory), and s1.rb2 from 1 Ω to 1 GΩ drives s1 and s2 through cutoff and
    # saturation, so some samples need the region search's enumeration step. Source: the definition
    # in issue 8 (every sample equals its single solve), a sample of them solved one by one.
    plan = demo_plan()
    values = {"s1.rb2": np.geomspace(1.0, 1e9, 5000)}
    sweep = plan.sweep(values)
    assert sweep.ok.all()
    regions = sweep["s1.region"]
    changes = np.flatnonzero(regions[1:] != regions[:-1])
    picked = np.unique(np.concatenate([np.arange(0, 5000, 499), changes, changes + 1, [4999]]))
    subset = {"s1.rb2": values["s1.rb2"][picked]}
    table, _, _ = single_solves(plan, subset, "constant-drop", result_addresses(plan.stage_ids))
    for address, expected in table.items():
        column = sweep[address][picked]
        if address.endswith(("region", "limiting_stage", "status")):
            assert column.tolist() == ["" if v is None else str(v) for v in expected], address
        else:
            np.testing.assert_allclose(column, np.array(expected, dtype=float), rtol=1e-9, atol=1e-15,
                                       equal_nan=True, err_msg=address)
    assert {"cutoff", "saturation", "forward-active"} <= set(regions)


@pytest.mark.parametrize("address, values", [("min_headroom", [0.5, 3.0, 3.5, 6.0]),
                                             ("resistor_power_rating", [1e-3, 0.01, 0.25])])
def test_sweep_of_a_value_only_the_analyses_read_equals_single_solves(address, values):
    # min_headroom and resistor_power_rating change no element of the circuit, only which cautions
    # fire; the sweep still has one sample per value. Source: issue 8's definition, each sample
    # solved on its own with plan.solve(), and the check rule of ampplan check.
    plan = demo_plan()
    batch = {address: np.array(values)}
    sweep = plan.sweep(batch)
    assert len(sweep) == len(values)
    table, cautions, results = single_solves(plan, batch, "constant-drop", result_addresses(plan.stage_ids))
    assert_matches(sweep, table, rtol=1e-9, atol=1e-15)
    assert sweep.caution_fired.tolist() == [bool(c) for c in cautions]
    assert sweep.passed().tolist() == [check_rule(r) for r in results]
    assert len(set(sweep.passed().tolist())) == 2  # the value decides the verdict along the sweep


def test_a_long_sweep_is_solved_chunk_by_chunk_and_equals_one_solve(monkeypatch):
    # The working memory of a batched solve grows with its samples (about 5 kB each for the demo),
    # so a long sweep must go through the batched solver a chunk at a time. Source: the definition
    # in issue 8 (each sample equals its own solve); here the whole sweep against one batch.
    from ampplan.analyses.whatif import sweeps
    plan = demo_plan()
    values = np.geomspace(1e3, 60e3, 25)
    whole = plan.sweep({"s1.rc": values})
    sizes = []
    solve = sweeps.analyse_plan

    def counted(*args, batch, **kwargs):
        sizes.append(len(batch["s1.rc"]))
        return solve(*args, batch=batch, **kwargs)
    monkeypatch.setattr(sweeps, "CHUNK", 10)
    monkeypatch.setattr(sweeps, "analyse_plan", counted)
    chunked = plan.sweep({"s1.rc": values})
    assert sizes == [10, 10, 5]
    for address in result_addresses(plan.stage_ids):
        words = whole[address].dtype.kind == "U"
        assert np.array_equal(chunked[address], whole[address], equal_nan=not words), address
    assert np.array_equal(chunked.passed(), whole.passed())
    assert chunked.to_dict() == whole.to_dict()


def test_a_grid_too_large_is_refused_before_it_is_made():
    # 10^4 · 10^4 · 10^3 = 10^11 samples would need terabytes; refused by count, naming the limit.
    axis = np.linspace(1e3, 2e3, 10_000)
    with pytest.raises(InvalidValueError, match=r"sweep: the grid has 100000000000 samples, more than 10000000"):
        demo_plan().sweep({"s1.rc": axis, "s1.re": axis / 10, "supply": np.linspace(10, 14, 1000)}, grid=True)

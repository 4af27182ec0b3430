"""Batched plans (issue 6 item 2): every sample of ``plan.solve(batch=...)`` against the single solve
of that plan, failed samples, the address map, and bad batches.

Reference: the single solve of ``plan.copy()`` with the sample's values set one by one through
``plan.set`` (itself checked against textbook formulas, sympy and the bisected sweep in
test_plan_analyses.py and test_plan_fast.py). Tolerances: 1e-9 relative for constant-drop (the
same linear equations, solved another way), 1e-6 for Ebers–Moll (Newton's tolerance).
"""

from __future__ import annotations

import dataclasses
import math
from pathlib import Path

import numpy as np
import pytest

import ampplan
from ampplan import errors
from ampplan.analyses.chain import analyse_compiled

DEMO = Path(ampplan.__file__).parent / "data" / "demo_plan.json"

#: Values per sample: nominal, spread, and samples that push a stage out of forward-active
#: (s2.rc large saturates s2; a weak s1 β with a large s1.rc saturates s1) or fire cautions.
SAMPLES = {
    "s1.rc": [4.7e3, 3.9e3, 5.6e3, 4.7e3, 9.0e3, 4.7e3, 4.7e3],
    "s2.rc": [3.9e3, 3.3e3, 4.7e3, 20e3, 3.9e3, 3.9e3, 3.9e3],
    "s2.device.beta": [200.0, 120.0, 300.0, 200.0, 200.0, 60.0, 200.0],
    "supply": [12.0, 11.0, 13.0, 12.0, 12.0, 12.0, 65.0],
    "temperature": [25.0, 0.0, 50.0, 25.0, 25.0, 25.0, 25.0],
    "s3.device.early_voltage": [100.0, 50.0, math.inf, 100.0, 100.0, 100.0, 100.0],
    "min_headroom": [1.0, 1.0, 1.0, 1.0, 1.0, 4.0, 1.0],
    "resistor_power_rating": [0.25, 0.25, 0.25, 0.25, 0.25, 0.001, 0.25],
}
SIZE = 7


def demo():
    return ampplan.Plan.load(DEMO)


def single(plan, i, model):
    p = plan.copy()
    for address, values in SAMPLES.items():
        p.set(address, values[i])
    return p.solve(model=model)


def close(a, b, rtol):
    if a is None or b is None:
        return a is b
    if isinstance(a, str) or isinstance(b, str):
        return a == b
    a, b = float(a), float(b)
    if math.isnan(a) or math.isnan(b):
        return math.isnan(a) and math.isnan(b)
    if math.isinf(a) or math.isinf(b):
        return a == b
    return abs(a - b) <= rtol * max(abs(a), abs(b)) + 1e-300


def pick(value, i):
    item = value[i]
    return item.item() if isinstance(item, np.generic) else item


def assert_sample_equals(batch, i, one, rtol, dc_load_lines=True):
    """Every figure of sample ``i`` of ``batch`` equals the single result ``one`` (but the DC load
    lines' slopes when the batch left them out: NaN there)."""
    chain = ("gain", "input_resistance", "output_resistance", "max_source_amplitude", "limiting_stage",
             "max_source_amplitude_estimate", "supply_current", "supply_power", "temperature")
    for name in chain:
        assert close(pick(getattr(batch, name), i), getattr(one, name), rtol), (i, name)
    for side in ("positive", "negative"):
        for suffix in ("", "_stage", "_region"):
            field = side + suffix
            assert close(pick(getattr(batch.clipping, field), i), getattr(one.clipping, field), rtol), (i, field)
    for name, p in one.resistor_power.items():
        assert close(batch.resistor_power[name][i], p, rtol), (i, name)
    assert batch.status[i] == "ok"
    assert bool(batch.all_forward_active[i]) == one.all_forward_active
    for sb, so in zip(batch.stages, one.stages):
        assert sb.id == so.id
        for name in ("gain", "input_resistance", "output_resistance", "saturation_margin", "cutoff_margin",
                     "dissipation"):
            assert close(pick(getattr(sb, name), i), getattr(so, name), rtol), (i, sb.id, name)
        for name in ("toward_saturation", "toward_cutoff"):
            assert close(getattr(sb.swing, name)[i], getattr(so.swing, name), rtol), (i, sb.id, name)
        for which in ("dc", "ac"):
            for name in ("resistance", "q_vce", "q_ic"):
                got = getattr(getattr(sb.load_lines, which), name)[i]
                if which == "dc" and name == "resistance" and not dc_load_lines:
                    assert math.isnan(got), (i, sb.id)
                    continue
                assert close(got, getattr(getattr(so.load_lines, which), name), rtol), (i, sb.id, which, name)
        for name in ("ic", "ib", "vce", "vbe", "power"):
            assert close(getattr(sb.transistor, name)[i], getattr(so.transistor, name), rtol), (i, sb.id, name)
        assert sb.transistor.region[i] == so.transistor.region
        for name, p in so.resistor_power.items():
            assert close(sb.resistor_power[name][i], p, rtol), (i, sb.id, name)
        assert sb.cautions[i] == so.cautions
        assert bool(sb.cautions.any[i]) == bool(so.cautions)
    assert batch.cautions[i] == one.cautions
    assert bool(batch.cautions.any[i]) == bool(one.cautions)


@pytest.mark.parametrize("model,rtol", [("constant-drop", 1e-9), ("ebers-moll", 1e-6)])
def test_every_sample_equals_its_single_solve(model, rtol):
    plan = demo()
    res = plan.solve(model=model, batch={k: np.array(v) for k, v in SAMPLES.items()})
    assert res.batch_size == SIZE
    regions = {str(r) for s in res.stages for r in s.transistor.region}
    assert "saturation" in regions                      # the comparison covers a stage out of forward-active
    assert res.cautions.any.any() and not res.cautions.any.all()
    for i in range(SIZE):
        assert_sample_equals(res, i, single(plan, i, model), rtol)


def test_a_batch_without_dc_load_lines_equals_single_solves_in_every_other_figure():
    # What the what-if tools ask for (solve_table: no result address reads the DC load lines).
    from ampplan.analyses.chain import analyse_plan
    plan = demo()
    res = analyse_plan(plan, batch={k: np.array(v) for k, v in SAMPLES.items()}, dc_load_lines=False)
    for i in range(SIZE):
        assert_sample_equals(res, i, single(plan, i, "constant-drop"), 1e-9, dc_load_lines=False)


def test_scalars_broadcast_and_plan_is_unchanged():
    plan = demo()
    before = plan.copy().compile().circuit.element("s1_rc").resistance
    res = plan.solve(batch={"s1.rc": [3.9e3, 4.7e3], "supply": 12.0})
    assert res.batch_size == 2
    assert plan.compile().circuit.element("s1_rc").resistance == before
    assert close(res.gain[1], plan.solve().gain, 1e-9)


def test_a_failed_sample_carries_its_status_and_nan_and_spares_the_others():
    plan = demo()
    compiled = plan.compile()
    batch, _ = compiled.batch_keys({"s1.rc": np.array([3.9e3, 4.7e3, 5.6e3])})
    op = compiled.circuit.solve(batch=batch)
    # A sample the solver could not settle: its status and NaN numbers, as the solver reports one.
    status = op.status.copy()
    status[1] = "no-consistent-region"
    nan_v = {k: np.where(np.arange(3) == 1, np.nan, v) for k, v in op.v.items()}
    nan_i = {k: np.where(np.arange(3) == 1, np.nan, v) for k, v in op.i.items()}
    transistors = {n: dataclasses.replace(t, region=np.where(np.arange(3) == 1, "unsolved", t.region),
                                          **{f: np.where(np.arange(3) == 1, np.nan, getattr(t, f))
                                             for f in ("ic", "ib", "ie", "vbe", "vce", "beta_forced", "power")})
                   for n, t in op.transistors.items()}
    failed = dataclasses.replace(op, status=status, v=nan_v, i=nan_i, transistors=transistors)
    res = analyse_compiled(compiled, failed, batch=batch)
    assert list(res.status) == ["ok", "no-consistent-region", "ok"]
    for value in (res.gain, res.max_source_amplitude, res.supply_current, res.stages[0].gain,
                  res.stages[0].swing.toward_cutoff, res.stages[2].input_resistance):
        assert math.isnan(value[1])
    assert res.limiting_stage[1] is None and res.cautions[1] == () and not res.cautions.any[1]
    for i, rc in ((0, 3.9e3), (2, 5.6e3)):
        p = plan.copy()
        p.set("s1.rc", rc)
        assert_sample_equals(res, i, p.solve(), 1e-9)


def test_address_map_names_element_and_batch_key():
    compiled = demo().compile()
    a = compiled.addresses
    assert (a["s1.rc"].element, a["s1.rc"].key, a["s1.rc"].unit) == ("s1_rc", "s1_rc", "Ω")
    assert (a["s2.device.beta"].element, a["s2.device.beta"].key) == ("s2_q", "s2_q.beta")
    assert (a["supply"].element, a["supply"].key) == ("supply", "supply")
    assert (a["temperature"].element, a["temperature"].key) == (None, "temperature")
    assert a["min_headroom"].key is None
    assert "s2.rb1" not in a              # not fitted in the demo: varying it would change the circuit
    for where in a.values():
        if where.element is not None:
            compiled.circuit.element(where.element)     # every element named exists


def test_result_addresses_read_batches():
    res = demo().solve(batch={"s1.rc": [3.9e3, 4.7e3]})
    assert res["s1.ic"].shape == (2,) and list(res["s1.region"]) == ["forward-active"] * 2
    assert res["gain"].shape == (2,) and res["limiting_stage"].shape == (2,)


@pytest.mark.parametrize("batch,error,words", [
    ({"s9.rc": [1e3]}, errors.UnknownNameError, ["s9.rc"]),
    ({"s1.rcc": [1e3]}, errors.InvalidValueError, ["s1.rcc"]),
    ({"suply": [12.0]}, errors.UnknownNameError, ["suply", "supply"]),
    ({"s1.coupling": ["direct"]}, errors.InvalidValueError, ["s1.coupling", "cannot vary"]),
    ({"s2.rb1": [1e3]}, errors.InvalidValueError, ["s2.rb1", "cannot vary"]),
    ({"coupling_capacitance": [1e-6]}, errors.InvalidValueError, ["coupling_capacitance"]),
    ({"s1.rc": [4.7e3, -1.0]}, errors.InvalidValueError, ["s1.rc", "sample 1"]),
    ({"s2.device.beta": [100.0, float("nan")]}, errors.InvalidValueError, ["s2.device.beta"]),
    ({"temperature": [25.0, -300.0]}, errors.InvalidValueError, ["temperature"]),
    ({"s1.rc": [4.7e3, 3.9e3], "supply": [12.0, 11.0, 10.0]}, errors.InvalidValueError, ["differ in length"]),
    ({"s1.rc": []}, errors.InvalidValueError, ["s1.rc"]),
    ({"s1.rc": "4k7"}, errors.InvalidValueError, ["s1.rc"]),
    ({3: [1.0]}, errors.InvalidValueError, ["plan addresses"]),
    ([("s1.rc", [1e3])], errors.InvalidValueError, ["dict"]),
])
def test_bad_batches_name_the_address(batch, error, words):
    with pytest.raises(error) as info:
        demo().solve(batch=batch)
    for word in words:
        assert word in str(info.value)
    assert "s1_rc" not in str(info.value) and "s2_q" not in str(info.value)

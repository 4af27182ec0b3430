"""One set of rules for every number ampplan takes in, whichever door it comes through.

Sources: RULES.md and STYLE.md ("bad input gets a clear error naming the culprit, never a raw
traceback"; "validate enumerated options first; raise, never assert; every raise has a test";
"parameters as data: validation, the docstring and the plan-file schema come from one
declaration"); the transistor contract's defaults (``vbc_on`` None means "same as vbe_on");
the constant-drop reverse-active equations (V_BC = V_BC(on), emitter current β_R·I_B: Sedra &
Smith, *Microelectronic Circuits*, the BJT modes of operation, from memory) solved independently
by sympy in ``tests/reference.py``.
"""

from __future__ import annotations

import dataclasses
import inspect
import math
import typing

import numpy as np
import pytest

from ampplan.solver.assembly import layout_of
import ampplan
import reference as ref
from ampplan import errors
from ampplan.circuit import RESISTANCE_RANGE, VALUE_BOUNDS, Bjt, Capacitor, Resistor
from ampplan.devices import DEVICE_UNITS, OPTIONAL_PARAMETERS, PARAMETERS, Transistor
from ampplan.plan import PLAN_PARAMETERS, Plan
from ampplan.record import PLAN_SCHEMA
from ampplan.stages import TEMPLATES, CommonBase, CommonCollector, CommonEmitter, CustomStage
from ampplan.validation import bounds_text, check_number, check_samples, shown
from reference import GROUND, Q, R, V


def _raises(exc_class, words, action):
    """Run ``action``; it must raise ``exc_class`` whose message holds every word and no numpy repr."""
    with pytest.raises(exc_class) as info:
        action()
    message = str(info.value)
    for word in words:
        assert word in message, f"{word!r} not in: {message}"
    assert "np.float64" not in message and "np.str_" not in message, message
    return message


# ------------------------------------------------------------------------------------------------
# The validator itself
# ------------------------------------------------------------------------------------------------

@pytest.mark.parametrize("value, words", [
    pytest.param(None, ["x is required (a hint)"], id="none"),
    pytest.param(True, ["x must be a number, got True"], id="bool"),
    pytest.param(np.bool_(False), ["x must be a number, got False"], id="numpy-bool"),
    pytest.param("4.7", ["x must be a number, got '4.7'"], id="text"),
    pytest.param([1.0], ["x must be a single number, got [1.0]"], id="list"),
    pytest.param(np.array([1.0, 2.0]), ["x must be a single number"], id="array"),
    pytest.param(1 + 2j, ["x must be a number"], id="complex"),
    pytest.param(math.nan, ["x must be finite, got nan"], id="nan"),
    pytest.param(math.inf, ["x must be finite, got inf"], id="inf"),
    pytest.param(10 ** 400, ["x must be finite"], id="huge-int"),
    pytest.param(np.float64(-2.5), ["x must be > 0 V and <= 10 V, got -2.5"], id="below"),
    pytest.param(0.0, ["x must be > 0 V and <= 10 V, got 0"], id="at-exclusive-minimum"),
    pytest.param(10.5, ["x must be > 0 V and <= 10 V, got 10.5"], id="above"),
])
def test_check_number_refuses(value, words):
    _raises(errors.InvalidValueError, words, lambda: check_number(
        value, "x", minimum=0.0, maximum=10.0, unit="V", required="a hint"))


def test_check_number_accepts_and_returns_floats():
    for value in (3, 3.0, np.float32(3.0), np.int64(3), np.array(3.0)):
        number = check_number(value, "x", minimum=0.0)
        assert number == 3.0 and type(number) is float
    assert check_number(None, "x", optional=True) is None
    assert check_number(math.inf, "x", minimum=0.0, may_be_infinite=True) == math.inf
    assert check_number(0.0, "x", minimum=0.0, minimum_inclusive=True) == 0.0


@pytest.mark.parametrize("value, words", [
    pytest.param(None, ["b must be a number or a 1-D array of numbers, got None"], id="none"),
    pytest.param("1k", ["got '1k'"], id="text"),
    pytest.param(True, ["got True"], id="bool"),
    pytest.param({"a": 1}, ["a number or a 1-D array"], id="dict"),
    pytest.param([1.0, [2.0, 3.0]], ["a number or a 1-D array"], id="ragged"),
    pytest.param([[1.0, 2.0]], ["got shape (1, 2)"], id="two-dimensional"),
    pytest.param([1.0, "a"], ["b must be a number, got 'a' at sample 1"], id="text-in-list"),
    pytest.param([1.0, None], ["b must be a number, got None at sample 1"], id="none-in-list"),
    pytest.param([True, False], ["got True at sample 0"], id="bools"),
    pytest.param(np.array([1.0, 2.0, -1.0]), ["b must be > 0, got -1 at sample 2"], id="below"),
    pytest.param([1.0, math.nan], ["b must be finite, got nan at sample 1"], id="nan"),
    pytest.param(-1.0, ["b must be > 0, got -1"], id="scalar"),
])
def test_check_samples_refuses(value, words):
    message = _raises(errors.InvalidValueError, words, lambda: check_samples(value, "b", minimum=0.0))
    if not isinstance(value, (list, np.ndarray)):
        assert "sample" not in message


def test_check_samples_returns_float_arrays():
    assert check_samples(3, "b").shape == ()
    out = check_samples([1, 2, 3], "b", minimum=0.0)
    assert out.dtype == float and out.tolist() == [1.0, 2.0, 3.0]


def test_numbers_print_plainly():
    assert shown(np.float64(1e-09)) == "1e-09"
    assert shown(-4700.0) == "-4700"
    assert shown(np.str_("a")) == "'a'"
    assert shown(np.bool_(True)) == "True"
    assert bounds_text() == "finite"
    assert bounds_text(RESISTANCE_RANGE[0], RESISTANCE_RANGE[1], True, "Ω") == ">= 1 µΩ and <= 1 TΩ"


# ------------------------------------------------------------------------------------------------
# 1. Transistor parameters
# ------------------------------------------------------------------------------------------------

@pytest.mark.parametrize("value, words", [
    pytest.param("abc", ["beta", "must be a number, got 'abc'"], id="text"),
    pytest.param("150", ["beta", "must be a number, got '150'"], id="numeric-text"),
    pytest.param(True, ["beta", "must be a number, got True"], id="bool"),
    pytest.param(None, ["beta", "is required", "vbc_on, max_power"], id="none"),
    pytest.param([1, 2], ["beta", "must be a single number, got [1, 2]"], id="list"),
    pytest.param(np.array([1.0, 2.0]), ["beta", "must be a single number"], id="array"),
    pytest.param(np.float64(-1.0), ["beta", "must be > 0, got -1"], id="numpy-negative"),
])
def test_transistor_refuses_non_numbers(value, words):
    _raises(errors.InvalidValueError, words, lambda: Transistor(beta=value))


def test_transistor_refuses_a_polarity_that_is_not_a_word():
    _raises(errors.UnknownModelError, ["polarity", "[1]"], lambda: Transistor(polarity=[1]))


def test_transistor_units_in_messages():
    _raises(errors.InvalidValueError, ["vbe_on", "must be > 0 V and <= 10 V, got -0.5"], lambda: Transistor(vbe_on=-0.5))


def test_none_only_on_fields_annotated_optional():
    hints = typing.get_type_hints(Transistor)
    annotated = {name for name, hint in hints.items() if type(None) in typing.get_args(hint)}
    assert OPTIONAL_PARAMETERS == annotated == {"vbc_on", "max_power", "max_collector_current", "max_vce"}
    for name in PARAMETERS:
        if name in OPTIONAL_PARAMETERS:
            assert getattr(Transistor(**{name: None}), name) is None
        else:
            _raises(errors.InvalidValueError, [name, "is required"], lambda: Transistor(**{name: None}))


def test_transistor_stores_floats():
    t = Transistor(beta=150, vbe_on=np.float64(0.65), max_power=np.int64(1))
    for name in PARAMETERS:
        value = getattr(t, name)
        assert value is None or type(value) is float, (name, type(value))
    assert t.beta == 150.0


@pytest.mark.parametrize("value", ["abc", "150", True, None, [1, 2]], ids=["text", "numeric-text", "bool", "none",
                                                                             "list"])
def test_plan_set_of_a_device_parameter_refuses_non_numbers(value):
    plan = Plan()
    plan.add(CommonEmitter(rb1=47e3, rb2=10e3))
    _raises(errors.InvalidValueError, ["beta"], lambda: plan.set("s1.device.beta", value))
    assert plan.get("s1.device.beta") == 100.0


def test_device_units_declared_for_every_parameter():
    assert set(DEVICE_UNITS) == set(PARAMETERS)
    # SI: volts, amperes, watts, electron-volts for the band gap, V/K for a drift (from memory).
    assert DEVICE_UNITS["saturation_current"] == "A" and DEVICE_UNITS["max_power"] == "W"
    assert DEVICE_UNITS["bandgap_energy"] == "eV" and DEVICE_UNITS["vbe_temperature_coefficient"] == "V/K"
    assert DEVICE_UNITS["beta"] == "" and DEVICE_UNITS["emission_coefficient"] == ""


# ------------------------------------------------------------------------------------------------
# 2. vbc_on None means "same as vbe_on", resolved where the numbers are built
# ------------------------------------------------------------------------------------------------

def _reverse_active_circuit(device: Transistor) -> ampplan.Circuit:
    """Collector on ground, emitter fed from the supply: the transistor runs reverse-active."""
    c = ampplan.Circuit()
    c.voltage_source("VCC", "vcc", GROUND, 10.0)
    c.resistor("RB", "vcc", "b", 100e3)
    c.resistor("RE", "vcc", "e", 1e3)
    c.bjt("Q1", collector=GROUND, base="b", emitter="e", device=device)
    return c


REVERSE_ACTIVE = [V("VCC", "vcc", GROUND, 10.0), R("RB", "vcc", "b", 100e3), R("RE", "vcc", "e", 1e3)]


def test_vbc_on_stays_none_and_follows_vbe_on():
    t = Transistor().replace(vbe_on=0.6)
    assert Transistor().vbc_on is None and t.vbc_on is None
    assert Transistor(vbc_on=0.5).replace(vbe_on=0.6).vbc_on == 0.5
    # Reverse-active: V_B - V_C = V_BC(on), here V_BE(on) (vbc_on unset); emitter current β_R I_B.
    # Reference: the same equations solved exactly by sympy, vbc_on resolved by tests/reference.py.
    exact = ref.constant_drop_exact(REVERSE_ACTIVE + [Q("Q1", GROUND, "b", "e", vbe_on=0.6)],
                                    {"Q1": "reverse-active"})
    op = _reverse_active_circuit(t).solve(assume={"Q1": "reverse-active"})
    assert op.status == "ok"
    assert op.v["b"] == pytest.approx(float(exact["v"]["b"]), abs=1e-12) and float(exact["v"]["b"]) == 0.6
    assert op.v["e"] == pytest.approx(float(exact["v"]["e"]), rel=1e-12)


def test_vbc_on_follows_a_batch_of_vbe_on_unless_the_batch_sets_it():
    c = _reverse_active_circuit(Transistor())
    op = c.solve(assume={"Q1": "reverse-active"}, batch={"Q1.vbe_on": [0.55, 0.65]})
    assert op.v["b"].tolist() == pytest.approx([0.55, 0.65], abs=1e-12)
    op = c.solve(assume={"Q1": "reverse-active"}, batch={"Q1.vbe_on": [0.55, 0.65], "Q1.vbc_on": 0.5})
    assert op.v["b"].tolist() == pytest.approx([0.5, 0.5], abs=1e-12)
    # An explicit vbc_on in the device wins over vbe_on as well.
    params = layout_of(_reverse_active_circuit(Transistor(vbc_on=0.45))).parameters(batch={"Q1.vbe_on": [0.6]})
    assert params.device["vbc_on"].tolist() == [[0.45]]


def test_vbc_on_follows_vbe_on_set_through_the_plan():
    plan = Plan()
    plan.add(CommonEmitter(rb1=47e3, rb2=10e3, rc=4.7e3, re=1e3))
    plan.set("s1.device.vbe_on", 0.6)
    assert plan.get("s1.device.vbc_on") is None
    params = layout_of(plan.compile().circuit).parameters()
    assert params.device["vbc_on"].tolist() == params.device["vbe_on"].tolist() == [[0.6]]


# ------------------------------------------------------------------------------------------------
# 3. Circuit.add validates like the element methods
# ------------------------------------------------------------------------------------------------

@pytest.mark.parametrize("element, words", [
    pytest.param(Resistor("RX", "a", GROUND, -5.0), ["RX", "resistance", "got -5"], id="negative-resistor"),
    pytest.param(Resistor("RX", "a", GROUND, "1k"), ["RX", "must be a number"], id="text-resistor"),
    pytest.param(Resistor("R.X", "a", GROUND, 1e3), ["R.X", "must not contain '.'"], id="dotted-name"),
    pytest.param(Resistor("RX", "", GROUND, 1e3), ["RX", "a node"], id="empty-node"),
    pytest.param(Capacitor("CX", "a", GROUND, -1e-6), ["CX", "capacitance", "> 0 F"], id="negative-capacitor"),
    pytest.param(Bjt("QX", "c", "b", GROUND, "npn"), ["QX", "device must be an ampplan.Transistor"], id="bjt"),
])
def test_add_validates_like_the_methods(element, words):
    c = ampplan.Circuit()
    _raises(errors.InvalidValueError, words, lambda: c.add(element))
    assert c.elements == ()


def test_add_refuses_what_is_not_an_element():
    _raises(errors.InvalidValueError, ["cannot add a str"], lambda: ampplan.Circuit().add("R1"))


def test_add_keeps_a_valid_element():
    c = ampplan.Circuit()
    c.add(Resistor("RX", "a", GROUND, 1e3))
    assert c.element("RX") == Resistor("RX", "a", GROUND, 1e3)


def _custom_plan() -> Plan:
    c = ampplan.Circuit()
    c.resistor("r_top", "supply", "in", 100e3)
    c.resistor("r_bottom", "in", "lower", 22e3)
    c.resistor("r_load", "supply", "out", 4.7e3)
    c.resistor("r_emitter", "e", "gnd", 1e3)
    c.bjt("q", "out", "in", "e", Transistor())
    plan = Plan()
    plan.add(CustomStage(circuit=c, input="in", output="out", transistor="q"))
    return plan


def test_custom_stage_value_set_through_the_plan_is_validated():
    plan = _custom_plan()
    _raises(errors.InvalidValueError, ["r_load", "resistance", "got -5"], lambda: plan.set("s1.r_load", -5))
    _raises(errors.InvalidValueError, ["r_load", "must be a number"], lambda: plan.set("s1.r_load", True))
    assert plan.get("s1.r_load") == 4.7e3


# ------------------------------------------------------------------------------------------------
# 4. Batch input
# ------------------------------------------------------------------------------------------------

def _batch_circuit():
    c = ampplan.Circuit()
    c.voltage_source("VCC", "vcc", GROUND, 10.0)
    c.resistor("RB", "vcc", "b", 470e3)
    c.resistor("RC", "vcc", "c", 2.2e3)
    c.bjt("Q1", "c", "b", GROUND, Transistor())
    return c


@pytest.mark.parametrize("batch, words", [
    pytest.param([("RC", [1e3])], ["batch must be a dict", "list"], id="list"),
    pytest.param({5: [1.0]}, ["batch keys must be names", "5"], id="number-key"),
    pytest.param({"RC": "1k"}, ["batch['RC']", "resistance", "got '1k'"], id="text-value"),
    pytest.param({"Q1.beta": ["a"]}, ["batch['Q1.beta']", "beta", "got 'a' at sample 0"], id="text-sample"),
    pytest.param({"Q1.beta": [100.0, True]}, ["batch['Q1.beta']", "got True at sample 1"], id="bool-sample"),
    pytest.param({"Q1.vbc_on": [None]}, ["batch['Q1.vbc_on']", "got None at sample 0"], id="none-sample"),
    pytest.param({"Q1.polarity": ["npn", "pnp"]}, ["'Q1.polarity'", "polarity cannot vary in a batch"],
                 id="polarity"),
    pytest.param({"temperature": [25.0, -300.0]}, ["batch['temperature']", ">= -55 °C and <= 150 °C", "got -300 at sample 1"],
                 id="temperature-sample"),
    pytest.param({"RC": np.array([1e3, 1e-9])}, ["batch['RC']", ">= 1 µΩ and <= 1 TΩ", "got 1e-09 at sample 1"],
                 id="tiny-resistor"),
    pytest.param({"RC": [[1e3, 2e3]]}, ["batch['RC']", "shape (1, 2)"], id="two-dimensional"),
    pytest.param({"RC": [1e3, [2e3]]}, ["batch['RC']", "1-D array"], id="ragged"),
])
def test_bad_batch(batch, words):
    c = _batch_circuit()
    _raises(errors.InvalidValueError, words, lambda: c.solve(batch=batch))


def test_batch_keys_are_checked_before_values():
    # STYLE.md: names (closed vocabularies) first. A bad value does not hide a misspelt key.
    c = _batch_circuit()
    _raises(errors.UnknownNameError, ["RCC"], lambda: c.solve(batch={"RC": "bad", "RCC": [1.0]}))


@pytest.mark.parametrize("temperature, words", [
    pytest.param("hot", ["temperature must be a number, got 'hot'"], id="text"),
    pytest.param(-300.0, ["temperature must be >= -55 °C and <= 150 °C, got -300"], id="below-absolute-zero"),
    pytest.param([25.0], ["temperature must be a single number"], id="list"),
    pytest.param(None, ["temperature is required"], id="none"),
])
def test_bad_temperature(temperature, words):
    _raises(errors.InvalidValueError, words, lambda: _batch_circuit().solve(temperature=temperature))


# ------------------------------------------------------------------------------------------------
# 5. Resistances: one range, RESISTANCE_RANGE, for stages, plans, circuits and the schema
# ------------------------------------------------------------------------------------------------

def test_stage_resistances_take_the_circuit_range():
    low, high = RESISTANCE_RANGE
    for kind, cls in TEMPLATES.items():
        for p in cls.PARAMETERS:
            if p.unit == "Ω":
                assert (p.minimum, p.minimum_inclusive, p.maximum) == (low, True, high), (kind, p.name)
                schema = PLAN_SCHEMA["$defs"][f"stage.{kind}"]["properties"][p.name]
                number = next(s for s in schema.get("anyOf", [schema]) if s.get("type") == "number")
                assert (number["minimum"], number["maximum"]) == (low, high), (kind, p.name)
    assert VALUE_BOUNDS[Resistor]["minimum"] == low and VALUE_BOUNDS[Resistor]["maximum"] == high
    load = PLAN_PARAMETERS["load_resistance"]
    assert (load.minimum, load.minimum_inclusive, load.maximum) == (low, True, high)
    assert PLAN_PARAMETERS["source_resistance"].maximum == high


@pytest.mark.parametrize("make, words", [
    pytest.param(lambda: CommonEmitter(rb1=47e3, rb2=10e3, rc=1e-9), ["CommonEmitter.rc", "got 1e-09"], id="tiny-rc"),
    pytest.param(lambda: CommonCollector(re=1e13), ["CommonCollector.re", "<= 1 TΩ"], id="huge-re"),
    pytest.param(lambda: CommonBase(rb1=1e-7), ["CommonBase.rb1", ">= 1 µΩ"], id="tiny-rb1"),
    pytest.param(lambda: Plan(load_resistance=1e-9), ["Plan.load_resistance", ">= 1 µΩ"], id="tiny-load"),
    pytest.param(lambda: Plan(source_resistance=1e-9), ["Plan.source_resistance", "0 (an ideal source) or >= 1 µΩ"],
                 id="tiny-source"),
    pytest.param(lambda: Plan(source_resistance=1e13), ["Plan.source_resistance", "<= 1 TΩ"], id="huge-source"),
])
def test_resistance_out_of_range(make, words):
    _raises(errors.InvalidValueError, words, make)


def test_resistance_range_ends_are_allowed():
    low, high = RESISTANCE_RANGE
    stage = CommonEmitter(rb1=high, rb2=low, rc=low, re=high)
    plan = Plan(source_resistance=0.0, load_resistance=low)
    plan.add(stage)
    assert plan.get("s1.rc") == low and Plan(source_resistance=low).source_resistance == low
    c = ampplan.Circuit()
    c.resistor("RLOW", "a", GROUND, low)
    c.resistor("RHIGH", "a", GROUND, high)


# ------------------------------------------------------------------------------------------------
# 7. Plan addresses: get and set cover the same ones; unit()
# ------------------------------------------------------------------------------------------------

def _plan() -> Plan:
    plan = Plan(description="two stages")
    plan.add(CommonEmitter(rb1=47e3, rb2=10e3, rc=4.7e3, re=1e3))
    plan.add(CommonCollector(re=1e3), coupling="direct")
    return plan


def test_get_device_and_description():
    plan = _plan()
    assert plan.get("s1.device") is plan.stage("s1").device
    assert plan.get("description") == "two stages"
    plan.set("description", "changed")
    assert plan.get("description") == "changed" == plan.description
    device = Transistor(beta=50.0)
    plan.set("s2.device", device)
    assert plan.get("s2.device") == device


@pytest.mark.parametrize("action, error, words", [
    pytest.param(lambda p: p.set("description", 5), errors.InvalidValueError, ["description", "text"],
                 id="description-not-text"),
    pytest.param(lambda p: setattr(p, "description", None), errors.InvalidValueError, ["description"],
                 id="description-attribute"),
    pytest.param(lambda p: p.set("s1.device", "npn"), errors.InvalidValueError, ["device", "Transistor"],
                 id="device-not-a-transistor"),
    pytest.param(lambda p: p.get(5), errors.UnknownNameError, ["address", "5"], id="address-not-text"),
    pytest.param(lambda p: p.get("suply"), errors.UnknownNameError, ["suply", "did you mean 'supply'"],
                 id="misspelt-plan-parameter"),
    pytest.param(lambda p: p.set("s1.coupling", 3), errors.UnknownModelError, ["s1.coupling", "3"],
                 id="coupling-not-a-word"),
])
def test_bad_addresses_and_values(action, error, words):
    plan = _plan()
    _raises(error, words, lambda: action(plan))
    assert plan.description == "two stages"


def test_plan_description_must_be_text():
    _raises(errors.InvalidValueError, ["Plan.description", "int"], lambda: Plan(description=5))


def test_set_keeps_a_capacitor_coupled_stage_biased():
    plan = _plan()
    plan.set("s1.rb1", None)
    message = _raises(errors.InvalidValueError, ["s1", "needs its own base bias"], lambda: plan.set("s1.rb2", None))
    assert plan.get("s1.rb2") == 10e3 and plan.get("s1.rb1") is None    # unchanged by the refusal
    # The same words plan.add uses for the same stage.
    bare = CommonEmitter(rb1=None, rb2=None, rc=4.7e3, re=1e3)
    fresh = Plan()
    add_message = _raises(errors.InvalidValueError, [], lambda: fresh.add(bare))
    assert message == add_message
    # A direct-coupled stage takes its bias from the one before it.
    plan.set("s2.rb1", None)
    assert plan.get("s2.rb1") is None


@pytest.mark.parametrize("address, unit", [
    ("supply", "V"), ("negative_supply", "V"), ("source_resistance", "Ω"), ("load_resistance", "Ω"),
    ("temperature", "°C"), ("resistor_power_rating", "W"), ("coupling_capacitance", "F"),
    ("s1.rc", "Ω"), ("s1.rb2", "Ω"), ("s2.re", "Ω"),
    ("s1.device.beta", ""), ("s1.device.vbe_on", "V"), ("s1.device.saturation_current", "A"),
    ("s1.device.max_power", "W"), ("s1.device.bandgap_energy", "eV"),
    ("s1.device.vbe_temperature_coefficient", "V/K"),
])
def test_unit_of_an_address(address, unit):
    assert _plan().unit(address) == unit


def test_unit_of_every_declared_address():
    plan = _plan()
    for name, p in PLAN_PARAMETERS.items():
        assert plan.unit(name) == p.unit
    for p in CommonEmitter.PARAMETERS:
        assert plan.unit(f"s1.{p.name}") == p.unit
    for name in PARAMETERS:
        assert plan.unit(f"s1.device.{name}") == DEVICE_UNITS[name]


def test_unit_of_custom_stage_elements():
    plan = _custom_plan()
    assert plan.unit("s1.r_load") == "Ω"
    _raises(errors.InvalidValueError, ["'q' is a transistor"], lambda: plan.stage("s1").unit("q"))


@pytest.mark.parametrize("address, error, words", [
    ("load_coupling", errors.InvalidValueError, ["load_coupling", "holds a word"]),
    ("description", errors.InvalidValueError, ["description", "holds a word"]),
    ("s1.coupling", errors.InvalidValueError, ["s1.coupling", "holds a word"]),
    ("s1.device.polarity", errors.InvalidValueError, ["polarity", "holds a word"]),
    ("s1.device", errors.InvalidValueError, ["s1.device", "holds a transistor"]),
    ("s1.rq", errors.UnknownNameError, ["rq"]),
    ("s1.device.gain", errors.UnknownNameError, ["gain"]),
    ("s9.rc", errors.UnknownNameError, ["s9"]),
])
def test_unit_refuses(address, error, words):
    _raises(error, words, lambda: _plan().unit(address))


def test_stage_unit_of_an_unknown_parameter():
    _raises(errors.UnknownNameError, ["CommonEmitter", "'rq'"], lambda: CommonEmitter().unit("rq"))


def test_every_element_field_is_added_through_its_method():
    # Circuit.add passes an element's fields, in order, to the method for its kind: the two must
    # name the same things in the same order.
    from ampplan.circuit import CurrentSource, VoltageSource
    for cls, method in ((Resistor, "resistor"), (VoltageSource, "voltage_source"),
                        (CurrentSource, "current_source"), (Capacitor, "capacitor"), (Bjt, "bjt")):
        fields = [f.name for f in dataclasses.fields(cls)]
        params = list(inspect.signature(getattr(ampplan.Circuit, method)).parameters)[1:]
        assert fields == params, cls

"""API misuse: every public entry point, given a value of the wrong kind, raises a class from
``ampplan.errors`` (never a raw TypeError, AttributeError, KeyError or numpy error).

The table lists each entry point with a call that puts the value under test in one argument;
every entry point gets every value of ``WRONG`` (None, numbers, a bool, text, a list, a dict, a
tuple, bytes, a numpy array, a bare object, NaN). Some of them are right for some arguments (a
number for a resistance); those calls must simply succeed or fail with an ampplan error. The
failures are gathered and reported all at once, by entry point.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import ampplan
from ampplan import Circuit, CommonBase, CommonCollector, CommonEmitter, CustomStage, Plan, Transistor, preset
from ampplan.errors import AmpplanError, InvalidValueError, UnknownModelError, UnknownNameError
from ampplan.record import load_plan, parse_plan_text, plan_from_dict, plan_to_dict, save_plan
from ampplan.units import format_quantity, parse_quantity

WRONG = [None, 1, 1.5, True, "x", ["a"], {"a": 1}, ("a",), b"x", np.array([1.0, 2.0]), object(), math.nan]


def circuit() -> Circuit:
    c = Circuit()
    c.voltage_source("V", "a", "gnd", 5.0)
    c.resistor("R", "a", "c", 1e3)
    c.resistor("RB", "a", "b", 1e5)
    c.bjt("Q", "c", "b", "gnd", Transistor())
    return c


def custom() -> CustomStage:
    return CustomStage(circuit=circuit(), input="b", output="c", transistor="Q")


def plan() -> Plan:
    p = Plan()
    p.add(CommonEmitter(rb1=1e5, rb2=2e4))
    return p


ENTRY_POINTS = {
    "Circuit.resistor(name)": lambda v: Circuit().resistor(v, "a", "b", 1.0),
    "Circuit.resistor(node)": lambda v: Circuit().resistor("r", v, "b", 1.0),
    "Circuit.resistor(value)": lambda v: Circuit().resistor("r", "a", "b", v),
    "Circuit.voltage_source(value)": lambda v: Circuit().voltage_source("v", "a", "b", v),
    "Circuit.current_source(value)": lambda v: Circuit().current_source("i", "a", "b", v),
    "Circuit.capacitor(value)": lambda v: Circuit().capacitor("c", "a", "b", v),
    "Circuit.bjt(device)": lambda v: Circuit().bjt("q", "a", "b", "c", v),
    "Circuit.add": lambda v: Circuit().add(v),
    "Circuit.remove": lambda v: circuit().remove(v),
    "Circuit.element": lambda v: circuit().element(v),
    "Circuit.of_kind": lambda v: circuit().of_kind(v),
    "Circuit.solve(model)": lambda v: circuit().solve(model=v),
    "Circuit.solve(temperature)": lambda v: circuit().solve(temperature=v),
    "Circuit.solve(batch)": lambda v: circuit().solve(batch=v),
    "Circuit.solve(batch value)": lambda v: circuit().solve(batch={"R": v}),
    "Circuit.solve(active_edge)": lambda v: circuit().solve(active_edge=v),
    "Circuit.solve(assume)": lambda v: circuit().solve(assume=v),
    "Circuit.solve(assume region)": lambda v: circuit().solve(assume={"Q": v}),
    "Circuit.solve(warm_start)": lambda v: circuit().solve(batch={"R": [1e3, 2e3]}, warm_start=v),
    "ampplan.solver.solve(circuit)": lambda v: ampplan.solver.solve(v),
    "Transistor(polarity)": lambda v: Transistor(polarity=v),
    "Transistor(beta)": lambda v: Transistor(beta=v),
    "Transistor.replace": lambda v: Transistor().replace(vbe_on=v),
    "preset": lambda v: preset(v),
    "CommonEmitter(rc)": lambda v: CommonEmitter(rc=v),
    "CommonCollector(re)": lambda v: CommonCollector(re=v),
    "CommonBase(c_base)": lambda v: CommonBase(c_base=v),
    "CommonEmitter(device)": lambda v: CommonEmitter(device=v),
    "CommonEmitter.replace": lambda v: CommonEmitter().replace(rc=v),
    "CommonEmitter.unit": lambda v: CommonEmitter().unit(v),
    "CustomStage(circuit)": lambda v: CustomStage(circuit=v),
    "CustomStage(input)": lambda v: CustomStage(circuit=circuit(), input=v, output="c", transistor="Q"),
    "CustomStage(transistor)": lambda v: CustomStage(circuit=circuit(), input="b", output="c", transistor=v),
    "CustomStage.replace": lambda v: custom().replace(R=v),
    "CustomStage.unit": lambda v: custom().unit(v),
    "Plan(supply)": lambda v: Plan(supply=v),
    "Plan(load_coupling)": lambda v: Plan(load_coupling=v),
    "Plan(description)": lambda v: Plan(description=v),
    "Plan.add(stage)": lambda v: Plan().add(v),
    "Plan.add(coupling)": lambda v: Plan().add(CommonEmitter(rb1=1e5), coupling=v),
    "Plan.add(id)": lambda v: Plan().add(CommonEmitter(rb1=1e5), id=v),
    "Plan.remove": lambda v: plan().remove(v),
    "Plan.move(id)": lambda v: plan().move(v, 0),
    "Plan.move(position)": lambda v: plan().move("s1", v),
    "Plan.stage": lambda v: plan().stage(v),
    "Plan.get": lambda v: plan().get(v),
    "Plan.set(address)": lambda v: plan().set(v, 1.0),
    "Plan.set(value)": lambda v: plan().set("s1.rc", v),
    "Plan.set(coupling)": lambda v: plan().set("s1.coupling", v),
    "Plan.set(device)": lambda v: plan().set("s1.device", v),
    "Plan.set(device parameter)": lambda v: plan().set("s1.device.beta", v),
    "Plan.set(polarity)": lambda v: plan().set("s1.device.polarity", v),
    "Plan.set(load_coupling)": lambda v: plan().set("load_coupling", v),
    "Plan.set(description)": lambda v: plan().set("description", v),
    "Plan.unit": lambda v: plan().unit(v),
    "Plan.solve(model)": lambda v: plan().solve(model=v),
    "Plan.solve(active_edge)": lambda v: plan().solve(active_edge=v),
    "Plan.load": lambda v: Plan.load(v),
    "save_plan(plan)": lambda v: save_plan(v, "unused.json"),
    "plan_to_dict(plan)": lambda v: plan_to_dict(v),
    "plan_to_dict(description)": lambda v: plan_to_dict(plan(), description=v),
    "plan_from_dict": lambda v: plan_from_dict(v),
    "parse_plan_text": lambda v: parse_plan_text(v),
    "parse_quantity": lambda v: parse_quantity(v),
    "format_quantity": lambda v: format_quantity(v),
}


def test_every_entry_point_refuses_wrong_kinds_with_an_ampplan_error(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)                 # save_plan may write "unused.json" for a valid plan
    raw = []
    for name, call in ENTRY_POINTS.items():
        for value in WRONG:
            try:
                call(value)
            except AmpplanError:
                pass
            except Exception as exc:  # noqa: BLE001 - the point is to catch every other class
                raw.append(f"{name} with {type(value).__name__}: {type(exc).__name__}: {exc}")
    assert not raw, "raw exceptions escaped:\n" + "\n".join(raw)


@pytest.mark.parametrize("call, error, words", [
    # The two found by the robustness campaign, with their messages.
    (lambda: circuit().solve(assume=["Q"]), InvalidValueError, "assume must map each transistor's name to a region"),
    (lambda: circuit().solve(assume={"Q": ["forward-active"]}), UnknownModelError, "unknown region"),
    (lambda: circuit().solve(warm_start="no"), InvalidValueError, "warm_start must be True or False, got 'no'"),
    (lambda: ampplan.solver.solve("circuit"), InvalidValueError, "solve expects an ampplan Circuit, got str"),
    (lambda: circuit().element(["Q"]), UnknownNameError, "an element name is text, got ['Q']"),
    (lambda: circuit().of_kind("Resistor"), InvalidValueError, "of_kind expects an element class"),
    (lambda: preset(["NPN"]), UnknownNameError, "no device preset named ['NPN']"),
    (lambda: CustomStage(circuit=circuit(), input=["b"], output="c", transistor="Q"), InvalidValueError,
     "CustomStage.input must be text"),
    (lambda: Plan(load_coupling=np.array(["direct"])), UnknownModelError, "Plan.load_coupling must be one of"),
    (lambda: plan_to_dict(plan(), description=3), InvalidValueError, "description must be text, got 3"),
    (lambda: parse_plan_text(b"{}"), ampplan.errors.PlanFileError, "plan-file text must be a str, got bytes"),
    (lambda: format_quantity([1.0]), InvalidValueError, "format_quantity expects a number, got list"),
])
def test_misuse_messages_name_the_culprit(call, error, words):
    with pytest.raises(error) as info:
        call()
    assert words in str(info.value)


@pytest.mark.parametrize("element", ["resistor", "capacitor", "current_source"])
def test_elements_from_ground_to_ground_alone_are_refused(element):
    # Found by the campaign: a circuit whose only element runs from gnd to gnd has no unknowns.
    c = Circuit()
    getattr(c, element)("X", "gnd", "gnd", *([] if element == "capacitor" else [1.0]))
    for model in ("constant-drop", "ebers-moll"):
        with pytest.raises(InvalidValueError, match=r"every element of the circuit \('X'\) has all its terminals"):
            c.solve(model=model)


def test_a_resistor_from_ground_to_ground_beside_a_real_circuit_carries_no_current():
    # Kirchhoff's current law: an element whose ends are one node carries no current, so the rest
    # of the circuit solves as without it (Ohm's law: 5 V across 1 kΩ is 5 mA).
    c = Circuit()
    c.voltage_source("V", "a", "gnd", 5.0)
    c.resistor("R", "a", "gnd", 1e3)
    c.resistor("RG", "gnd", "gnd", 1.0)
    op = c.solve()
    assert op.i["RG"] == 0.0 and op.i["V"] == pytest.approx(5e-3, rel=1e-12)

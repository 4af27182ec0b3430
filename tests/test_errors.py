"""Bad input gets its own ampplan.errors class and a message naming the culprit (issue 2 §6).

Source for every check here: issue 2 §6 and the API notes' error list (each error its own class
under ampplan.errors, all subclasses of AmpplanError, messages naming the element or node), and
RULES.md ("bad input gets a clear error naming the culprit, never a raw traceback").
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import ampplan
import reference as ref
from ampplan import errors
from reference import GROUND, C, I, Q, R, V

ALL_CLASSES = ["InvalidValueError", "UnknownModelError", "DuplicateNameError", "UnknownNameError",
               "FloatingNodeError", "VoltageSourceLoopError", "NoConsistentRegionError", "ConvergenceError"]


@pytest.mark.parametrize("name", ALL_CLASSES)
def test_every_error_class_is_an_ampplan_error(name):
    # Source: API notes: "All subclass AmpplanError".
    assert issubclass(getattr(errors, name), errors.AmpplanError)


def _raises_naming(exc_class, culprits, build_and_solve):
    """Run ``build_and_solve`` (description and solve both count) and check class and message."""
    with pytest.raises(exc_class) as info:
        build_and_solve()
    message = str(info.value)
    for culprit in culprits:
        assert culprit in message, f"{culprit!r} not named in: {message}"
    return info.value


# -- values ---------------------------------------------------------------------------------------

@pytest.mark.parametrize("resistance", [0.0, -4.7e3, math.nan, math.inf, -math.inf],
                         ids=["zero", "negative", "nan", "inf", "minus-inf"])
def test_bad_resistance(resistance):
    def go():
        c = ampplan.Circuit()
        c.voltage_source("VCC", "vcc", GROUND, 12.0)
        c.resistor("RLOAD", "vcc", GROUND, resistance)
        c.solve()
    _raises_naming(errors.InvalidValueError, ["RLOAD"], go)


@pytest.mark.parametrize("kind", ["voltage", "current"])
@pytest.mark.parametrize("value", [math.nan, math.inf], ids=["nan", "inf"])
def test_non_finite_source(kind, value):
    def go():
        c = ampplan.Circuit()
        c.resistor("R1", "a", GROUND, 1e3)
        if kind == "voltage":
            c.voltage_source("VBAD", "a", GROUND, value)
        else:
            c.current_source("VBAD", GROUND, "a", value)
        c.solve()
    _raises_naming(errors.InvalidValueError, ["VBAD"], go)


@pytest.mark.parametrize("parameter, value", [("beta", 0.0), ("beta", -50.0), ("beta", math.nan),
                                              ("saturation_current", 0.0), ("early_voltage", -10.0),
                                              ("vbe_on", math.inf)])
def test_bad_transistor_parameter(parameter, value):
    _raises_naming(errors.InvalidValueError, [parameter], lambda: ampplan.Transistor(**{parameter: value}))


def test_unknown_polarity():
    _raises_naming(errors.UnknownModelError, ["nqn"], lambda: ampplan.Transistor(polarity="nqn"))


def test_unknown_model():
    c = ref.to_circuit([V("VCC", "vcc", GROUND, 5.0), R("R1", "vcc", GROUND, 1e3)])
    _raises_naming(errors.UnknownModelError, ["square-law"], lambda: c.solve(model="square-law"))


def test_unknown_active_edge():
    c = ref.to_circuit([V("VCC", "vcc", GROUND, 5.0), R("R1", "vcc", GROUND, 1e3)])
    _raises_naming(errors.UnknownModelError, ["halfway"], lambda: c.solve(active_edge="halfway"))


# -- names ------------------------------------------------------------------------------------------

@pytest.mark.parametrize("second", ["resistor", "voltage_source", "current_source", "capacitor", "bjt"])
def test_duplicate_names(second):
    def go():
        c = ampplan.Circuit()
        c.resistor("RDUP", "a", GROUND, 1e3)
        if second == "bjt":
            c.bjt("RDUP", collector="a", base="b", emitter=GROUND, device=ampplan.Transistor())
        elif second == "capacitor":
            c.capacitor("RDUP", "a", GROUND)
        else:
            getattr(c, second)("RDUP", "a", GROUND, 1.0)
    _raises_naming(errors.DuplicateNameError, ["RDUP"], go)


# -- topology ---------------------------------------------------------------------------------------

FLOATING = {
    # node reached only through a capacitor
    "capacitor": ([V("VCC", "vcc", GROUND, 5.0), R("R1", "vcc", GROUND, 1e3), C("C1", "vcc", "island")],
                  ["island"]),
    # node reached only through a current source
    "current-source": ([V("VCC", "vcc", GROUND, 5.0), R("R1", "vcc", GROUND, 1e3), I("I1", GROUND, "pump", 1e-3)],
                       ["pump"]),
    # node reached through a capacitor and a current source only
    "capacitor-and-current-source": ([V("VCC", "vcc", GROUND, 5.0), R("R1", "vcc", GROUND, 1e3),
                                      C("C1", "vcc", "mid"), I("I1", "vcc", "mid", 1e-3)], ["mid"]),
    # a resistor island with no path to the rest
    "island": ([V("VCC", "vcc", GROUND, 5.0), R("R1", "vcc", GROUND, 1e3), R("R2", "x", "y", 1e3)], ["x"]),
}


@pytest.mark.parametrize("case", list(FLOATING))
@pytest.mark.parametrize("model", ["constant-drop", "ebers-moll"])
def test_floating_node(case, model):
    elements, culprits = FLOATING[case]
    _raises_naming(errors.FloatingNodeError, culprits, lambda: ref.to_circuit(elements).solve(model=model))


@pytest.mark.parametrize("terminal", ["base", "emitter"])
def test_terminal_held_only_through_a_capacitor_is_not_reported_forward_active(terminal):
    # A coupling capacitor with the base bias resistor forgotten, or an emitter bypass capacitor with
    # the emitter resistor forgotten: no DC current can flow into that terminal. Either the node is
    # named as having no DC path (issue 2 §6), or the transistor is reported off; forward-active
    # needs I_B > 0 (API notes, constant-drop semantics), which cannot hold with I_B = 0.
    if terminal == "base":
        elements = [V("VCC", "vcc", GROUND, 10.0), V("VIN", "in", GROUND, 1.0), C("CIN", "in", "b"),
                    R("RC", "vcc", "c", 1e3), Q("Q1", "c", "b", GROUND)]
        node = "b"
    else:
        elements = [V("VCC", "vcc", GROUND, 10.0), R("RB", "vcc", "b", 100e3), R("RC", "vcc", "c", 1e3),
                    Q("Q1", "c", "b", "e"), C("CE", "e", GROUND)]
        node = "e"
    try:
        op = ref.to_circuit(elements).solve(model="constant-drop")
    except errors.FloatingNodeError as exc:
        assert node in str(exc)
        return
    t = op.transistors["Q1"]
    assert t.region == "cutoff", f"reported {t.region} with I_B = {t.ib!r}, I_C = {t.ic!r}: {t.checks}"


@pytest.mark.parametrize("elements, names", [
    ([V("V1", "a", GROUND, 5.0), V("V2", "a", GROUND, 3.0), R("R1", "a", GROUND, 1e3)], ["V1", "V2"]),
    ([V("V1", "a", GROUND, 5.0), V("V2", "b", "a", 3.0), V("V3", "b", GROUND, 8.0), R("R1", "b", GROUND, 1e3)],
     ["V1", "V2", "V3"]),
], ids=["parallel-pair", "loop-of-three"])
@pytest.mark.parametrize("model", ["constant-drop", "ebers-moll"])
def test_voltage_source_loop(elements, names, model):
    # The pair contradicts itself; the loop of three agrees (V3 = V1 + V2) yet leaves its currents
    # undetermined. Both are loops of voltage sources.
    _raises_naming(errors.VoltageSourceLoopError, names, lambda: ref.to_circuit(elements).solve(model=model))


# -- no solution --------------------------------------------------------------------------------------

def _forced_collector(current):
    """A current source pushes ``current`` into the collector of a transistor whose base current is
    fixed at (10 - 0.7) V / 1 MOhm = 9.3 uA: beyond beta I_B = 0.93 mA no operating point exists (the
    collector current of a transistor cannot exceed beta I_B; Sedra & Smith, from memory)."""
    return [V("VCC", "vcc", GROUND, 10.0), R("RB", "vcc", "b", 1e6), I("IX", "vcc", "c", current),
            Q("Q1", "c", "b", GROUND, beta=100.0)]


def test_no_consistent_region():
    elements = _forced_collector(5e-3)
    # Source: our own enumeration of all four regions finds none consistent either.
    assert ref.constant_drop_enumerate(elements) == []
    exc = _raises_naming(errors.NoConsistentRegionError, ["Q1"],
                         lambda: ref.to_circuit(elements).solve(model="constant-drop"))
    # Issue 2 §6: say which assignments came closest and which check failed.
    assert exc.closest, "closest assignments missing"
    for assignment, failed in exc.closest:
        assert set(assignment) == {"Q1"}
        assert failed and "Q1" in failed
    assert "saturation" in str(exc)


def test_non_convergence():
    # With no Early effect, no finite collector voltage carries more than about beta I_B, so Newton
    # must give up within its bounded iterations (issue 2 §4) with a ConvergenceError naming the circuit's
    # transistors. Source: our scipy reference does not converge on it either.
    elements = _forced_collector(5e-3)
    assert not ref.ebers_moll_root(elements)["converged"]
    exc = _raises_naming(errors.ConvergenceError, ["Q1"],
                         lambda: ref.to_circuit(elements).solve(model="ebers-moll"))
    assert exc.iterations > 0


@pytest.mark.parametrize("model, status", [("constant-drop", "no-consistent-region"),
                                           ("ebers-moll", "no-convergence")])
def test_batch_bad_sample_gets_status_and_nan_while_single_raises(model, status):
    # Source: issue 2 §5: a failed sample gets a status and NaN fields; the others carry on and equal
    # their single solves; a single solve of the failed sample raises.
    currents = np.array([0.5e-3, 5e-3, 0.2e-3])
    circuit = ref.to_circuit(_forced_collector(0.5e-3))
    op = circuit.solve(model=model, batch={"IX": currents})
    assert list(op.status) == ["ok", status, "ok"]
    for node in ("b", "c"):
        assert math.isnan(op.v[node][1])
    t = op.transistors["Q1"]
    for field in ("ic", "ib", "ie", "vbe", "vce"):
        assert math.isnan(getattr(t, field)[1]), field
    for k in (0, 2):
        single = ref.to_circuit(_forced_collector(currents[k])).solve(model=model)
        assert op.v["c"][k] == pytest.approx(single.v["c"], rel=1e-9)
        assert t.ic[k] == pytest.approx(single.transistors["Q1"].ic, rel=1e-9)
        assert str(t.region[k]) == single.transistors["Q1"].region
    with pytest.raises((errors.NoConsistentRegionError, errors.ConvergenceError)):
        ref.to_circuit(_forced_collector(currents[1])).solve(model=model)


# -- batch keys ---------------------------------------------------------------------------------------

BATCH_CIRCUIT = [V("VCC", "vcc", GROUND, 10.0), R("RB", "vcc", "b", 470e3), R("RC", "vcc", "c", 2.2e3),
                 Q("Q1", "c", "b", GROUND)]


@pytest.mark.parametrize("key", ["RX", "Q9.beta", "Q1.nonsense", "Q1"])
@pytest.mark.parametrize("model", ["constant-drop", "ebers-moll"])
def test_unknown_batch_key(key, model):
    c = ref.to_circuit(BATCH_CIRCUIT)
    _raises_naming(errors.UnknownNameError, [key], lambda: c.solve(model=model, batch={key: [1.0, 2.0]}))


@pytest.mark.parametrize("key, values", [("RC", [2.2e3, -1.0]), ("RC", [2.2e3, math.nan]),
                                         ("VCC", [10.0, math.inf]), ("Q1.beta", [100.0, 0.0])])
def test_bad_batch_value(key, values):
    c = ref.to_circuit(BATCH_CIRCUIT)
    _raises_naming(errors.InvalidValueError, [key], lambda: c.solve(batch={key: values}))


def test_batch_arrays_of_different_lengths():
    c = ref.to_circuit(BATCH_CIRCUIT)
    _raises_naming(errors.AmpplanError, ["RC", "VCC"], lambda: c.solve(batch={"RC": [1e3, 2e3], "VCC": [5.0, 6.0, 7.0]}))


def test_batch_whose_later_sample_fails_its_warm_start():
    # Regression: sample 0 solves, sample 1 has no operating point (a current source pulls
    # 10 µA out of the base, which no region allows: issue 2 §5, a failed sample gets a status).
    # Both models must report it per sample, in either order, without raising.
    for model, status in (("constant-drop", "no-consistent-region"), ("ebers-moll", "no-convergence")):
        for order in ([-1e-5, 1e-5], [1e-5, -1e-5]):
            c = ampplan.Circuit()
            c.voltage_source("V", "vcc", "gnd", 5.0)
            c.current_source("I", "b", "gnd", 1e-5)
            c.resistor("RC", "vcc", "c", 1e3)
            c.bjt("Q", "c", "b", "gnd", ampplan.Transistor())
            op = c.solve(model=model, batch={"I": order})
            bad = order.index(1e-5)
            assert op.status[bad] == status and op.status[1 - bad] == "ok"
            assert math.isnan(op.transistors["Q"].ic[bad])


def test_circuit_without_transistors_solves_and_empty_circuit_is_refused():
    # A plain divider (Ohm's law: 5 V at the midpoint of two equal resistors on 10 V) solves with
    # both models; an empty circuit is refused with a clear message, not a numpy error.
    c = ampplan.Circuit()
    c.voltage_source("V", "vcc", "gnd", 10.0)
    c.resistor("R1", "vcc", "m", 1e3)
    c.resistor("R2", "m", "gnd", 1e3)
    for model in ("constant-drop", "ebers-moll"):
        assert math.isclose(c.solve(model=model).v["m"], 5.0, rel_tol=1e-12)
    with pytest.raises(errors.InvalidValueError, match="empty"):
        ampplan.Circuit().solve()


def test_junction_held_far_forward_by_ideal_sources_is_no_operating_point():
    # An ideal 4.5 V source straight across a base-emitter junction has no physical answer: the
    # Ebers–Moll solve must say so rather than report amperes on exp()'s linear continuation.
    c = ampplan.Circuit()
    c.voltage_source("V", "vcc", "gnd", 10.0)
    c.voltage_source("VB", "b", "gnd", 4.5)
    c.resistor("RC", "vcc", "c", 1e3)
    c.bjt("Q", "c", "b", "gnd", ampplan.Transistor())
    with pytest.raises(errors.ConvergenceError, match="only a source with too little series resistance"):
        c.solve(model="ebers-moll")
    op = c.solve(model="ebers-moll", batch={"VB": [0.6, 4.5]})
    assert list(op.status) == ["ok", "no-convergence"]

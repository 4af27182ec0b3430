"""Declarations: stage templates and plan values are ordinary dataclasses, each number declared
once as a :class:`~ampplan.stages.Parameter` in its field's metadata, with hard bounds and a
typical range for controls.

Outside references: the ``mypy`` type checker (it must see the fields, their types and their
defaults, as an editor would) and the standard library's ``dataclasses`` and ``inspect``. The
typical ranges themselves are common practice, no source; what is checked is that they exist for
every number and sit inside the hard bounds.
"""

from __future__ import annotations

import dataclasses
import inspect
import math
import os
import subprocess
import sys
import textwrap
import typing
from pathlib import Path

import pytest

import ampplan
from ampplan import CommonBase, CommonCollector, CommonEmitter, Plan
from ampplan.devices import PARAMETER_BOUNDS, PARAMETER_MAXIMA, PARAMETERS, TYPICAL_RANGES, Transistor
from ampplan.plan import PLAN_PARAMETERS, PlanValues
from ampplan.stages import PARAMETER_KEY, TEMPLATES, CustomStage

TEMPLATE_CLASSES = [cls for cls in TEMPLATES.values() if cls is not CustomStage]


@pytest.mark.parametrize("cls", [*TEMPLATE_CLASSES, PlanValues], ids=lambda c: c.__name__)
def test_every_number_is_a_declared_dataclass_field(cls):
    assert dataclasses.is_dataclass(cls) and cls.__dataclass_params__.frozen
    fields = [f for f in dataclasses.fields(cls) if f.name != "device"]
    undeclared = [f.name for f in fields if PARAMETER_KEY not in f.metadata]
    assert undeclared == [], f"{cls.__name__} fields without a Parameter: {undeclared}"
    declared = cls.PARAMETERS if cls is not PlanValues else tuple(PLAN_PARAMETERS.values())
    assert [p.name for p in declared] == [f.name for f in fields]
    # The signature an editor shows: every field, with the declared default.
    signature = inspect.signature(cls)
    for p in declared:
        assert signature.parameters[p.name].default == p.default, (cls.__name__, p.name)
        hint = typing.get_type_hints(cls)[p.name]
        assert (type(None) in typing.get_args(hint)) == p.optional, (cls.__name__, p.name)


def _all_parameters():
    for cls in TEMPLATE_CLASSES:
        for p in cls.PARAMETERS:
            yield f"{cls.__name__}.{p.name}", p.typical, p.minimum, p.maximum, p.minimum_inclusive, p.scale, p.default
    for p in PLAN_PARAMETERS.values():
        yield f"Plan.{p.name}", p.typical, p.minimum, p.maximum, p.minimum_inclusive, p.scale, p.default
    for name in PARAMETERS:
        low, inclusive = PARAMETER_BOUNDS.get(name, (-math.inf, False))
        default = getattr(Transistor(), name)
        yield (f"Transistor.{name}", TYPICAL_RANGES.get(name), low, PARAMETER_MAXIMA.get(name, math.inf), inclusive,
               "log" if low == 0 else "linear", default)


@pytest.mark.parametrize("where, typical, minimum, maximum, inclusive, scale, default",
                         list(_all_parameters()), ids=lambda v: v if isinstance(v, str) else "")
def test_every_number_has_a_typical_range_inside_its_bounds(where, typical, minimum, maximum, inclusive, scale,
                                                           default):
    assert typical is not None, f"{where} has no typical range"
    low, high = typical
    assert low < high, where
    assert (low >= minimum if inclusive else low > minimum) and high <= maximum, where
    if scale == "log":
        assert low > 0, f"{where}: a log-scale control needs a positive low end"


def test_device_typical_table_covers_exactly_the_numeric_parameters():
    assert set(TYPICAL_RANGES) == set(PARAMETERS)


def test_plan_values_validate_as_the_plan_does():
    with pytest.raises(ampplan.errors.InvalidValueError, match="Plan.supply: must be > 0 V"):
        PlanValues(supply=-1.0)
    with pytest.raises(ampplan.errors.InvalidValueError, match="must be 0 \\(an ideal source\\) or >= 1 µΩ"):
        PlanValues(source_resistance=1e-9)
    plan = Plan(supply=15.0)
    assert plan.values == PlanValues(supply=15.0)
    plan.supply = 9.0
    assert plan.values.supply == 9.0


@pytest.mark.parametrize("stage, name", [(CommonEmitter(rb1=100e3, rb2=22e3, re_bypassed=1e3), "c_bypass"),
                                         (CommonBase(), "c_base")])
def test_plan_bypass_capacitance_reaches_every_bypass_capacitor(stage, name):
    # Both bypass capacitors declare the plan value that stands in for them when left None; the
    # compiled circuit must carry it (the common-base base capacitor used to be left at None).
    plan = Plan(bypass_capacitance=47e-6, coupling_capacitance=10e-6)
    plan.add(stage)
    capacitor = plan.compile().circuit.element(f"s1_{name}")
    assert capacitor.capacitance == 47e-6
    plan.set(f"s1.{name}", 100e-6)                    # a value of the stage's own wins
    assert plan.compile().circuit.element(f"s1_{name}").capacitance == 100e-6


TYPE_CHECK = textwrap.dedent("""
    from ampplan import CommonBase, CommonCollector, CommonEmitter
    from ampplan.plan import PlanValues
    stage = CommonEmitter(rc=4.7e3, rb1=None)
    reveal_type(stage.rc)
    reveal_type(stage.rb1)
    reveal_type(CommonCollector().re)
    reveal_type(CommonBase().c_base)
    reveal_type(PlanValues().load_resistance)
    CommonEmitter(rc="4.7k")
    CommonEmitter(r_c=4.7e3)
""")


def test_a_type_checker_sees_the_declarations(tmp_path):
    # mypy reads the source as an editor does: it must know each field's type and default and
    # refuse a wrong type or a misspelt name (a class made at run time would be opaque to it).
    (tmp_path / "check.py").write_text(TYPE_CHECK, encoding="utf-8")
    proc = subprocess.run([sys.executable, "-m", "mypy", "--no-incremental", "--follow-imports=silent",
                           "--ignore-missing-imports", "--cache-dir", str(tmp_path / "cache"), "check.py"],
                          capture_output=True, text=True, cwd=tmp_path, timeout=600,
                          env={**os.environ, "MYPYPATH": str(Path(ampplan.__file__).parent.parent)})
    out = proc.stdout
    revealed = [line.split('Revealed type is "')[1].rstrip('"') for line in out.splitlines() if "Revealed type" in line]
    assert revealed == ["builtins.float", "builtins.float | None", "builtins.float", "builtins.float | None",
                        "builtins.float | None"] or revealed == ["float", "float | None", "float", "float | None",
                                                                 "float | None"], out
    assert 'Argument "rc" to "CommonEmitter" has incompatible type "str"; expected "float"' in out, out
    assert 'Unexpected keyword argument "r_c" for "CommonEmitter"' in out, out


def test_custom_stage_keeps_its_own_copy_of_the_circuit():
    c = ampplan.Circuit()
    c.resistor("rb", "supply", "in", 100e3)
    c.resistor("rc", "supply", "out", 4.7e3)
    c.resistor("re", "e", "gnd", 1e3)
    c.bjt("q", "out", "in", "e", Transistor())
    stage = CustomStage(circuit=c, input="in", output="out", transistor="q")
    c.remove("rb")                                  # a change to the caller's circuit ...
    c.resistor("rx", "in", "gnd", 1.0)
    assert stage.parameters() == {"rb": 100e3, "rc": 4.7e3, "re": 1e3}   # ... does not reach the stage
    changed = stage.replace(rc=2.2e3)                # changes go through replace, validated
    assert changed.parameters()["rc"] == 2.2e3 and stage.parameters()["rc"] == 4.7e3

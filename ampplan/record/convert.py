"""Plan <-> plain dict in the plan-file layout; the way in goes through the plan's constructors."""

from __future__ import annotations

import math
import numbers
import re

from ..circuit import Circuit
from ..devices import FIELDS as DEVICE_FIELDS
from ..devices import Transistor
from ..errors import AmpplanError, InvalidValueError, PlanFileError
from ..plan import PLAN_PARAMETERS, Plan
from ..stages import TEMPLATES, CustomStage
from ..validation import MAX_TEXT_LENGTH, check_text
from .messages import problems_text
from .schema import ELEMENT_TYPES, FORMAT, INFINITY, VERSION, field_kinds, validate_plan_dict

__all__ = ["plan_to_dict", "plan_from_dict"]


# ------------------------------------------------------------------------------------------------
# Plan -> dict
# ------------------------------------------------------------------------------------------------

def _out(value):
    """A value as written to a file: floats as they are, infinity as the string ``"inf"``."""
    if isinstance(value, numbers.Real) and not isinstance(value, bool):
        value = float(value)  # an int or numpy scalar given to a constructor is written as a float
        if math.isinf(value) and value > 0:
            return INFINITY
    return value


def _device_to_dict(device: Transistor) -> dict:
    return {name: _out(value) for name, value in device.to_dict().items()}


def _element_to_dict(element) -> dict:
    kind = next(k for k, (cls, _m) in ELEMENT_TYPES.items() if isinstance(element, cls))
    out = {"type": kind, "name": element.name, "nodes": []}
    for name, (base, _nullable) in field_kinds(type(element)).items():
        value = getattr(element, name)
        if name == "name":
            continue
        if base is str:
            out["nodes"].append(value)
        elif base is Transistor:
            out["device"] = _device_to_dict(value)
        else:
            out["value"] = _out(value)
    return out


def _stage_to_dict(sid: str, stage, coupling: str) -> dict:
    out = {"id": sid, "kind": stage.kind, "coupling": coupling}
    if isinstance(stage, CustomStage):
        out.update(input=stage.input, output=stage.output, transistor=stage.transistor,
                   elements=[_element_to_dict(e) for e in stage.circuit.elements])
        return out
    out.update({name: _out(value) for name, value in stage.parameters().items()})
    out["device"] = _device_to_dict(stage.device)
    return out


def plan_to_dict(plan: Plan, description: str | None = None) -> dict:
    """The plan as a plain, JSON-ready dict in the plan-file layout (format version :data:`VERSION`).

    Parameters
    ----------
    plan : Plan
    description : str, optional
        Free text stored as the file's ``description``; None takes ``plan.description`` (left out
        when empty).

    Returns
    -------
    dict
        Floats in SI units, ``"inf"`` for infinity, None for "not fitted".
    """
    if not isinstance(plan, Plan):
        raise InvalidValueError(f"plan_to_dict expects an ampplan Plan, got {type(plan).__name__}")
    out = {"format": FORMAT, "version": VERSION}
    description = plan.description if description is None else description
    check_text(description, "description", maximum_length=MAX_TEXT_LENGTH, empty=True)
    if description:
        out["description"] = description
    for name in PLAN_PARAMETERS:
        out[name] = _out(getattr(plan, name))
    out["load_coupling"] = plan.load_coupling
    out["stages"] = [_stage_to_dict(sid, stage, coupling)
                     for sid, stage, coupling in zip(plan.stage_ids, plan.stages, plan.couplings)]
    return out


# ------------------------------------------------------------------------------------------------
# dict -> Plan, through the constructors
# ------------------------------------------------------------------------------------------------

def _value(raw):
    """A file value as the constructors take it: ``"inf"`` -> infinity (they make numbers floats)."""
    return math.inf if raw == INFINITY else raw


def _relabel(error: Exception, path: tuple, owners: tuple[str, ...]) -> tuple[tuple, str]:
    """A constructor's message re-addressed to the JSON path.

    ``"CommonEmitter.rc: must be > 0 Ω"`` at ``("stages", 1)`` becomes ``stages[1].rc: must be ...``;
    ``"Transistor parameter beta must be > 0"`` becomes ``...device.beta: must be > 0``.
    """
    message = str(error)
    match = re.match(r"Transistor parameter (\w+) (.*)$", message, re.S)
    if match:
        return path + (match.group(1),), match.group(2)
    for owner in owners:
        match = re.match(rf"{re.escape(owner)}\.(\w+):? (.*)$", message, re.S)
        if match:
            return path + (match.group(1),), match.group(2)
        if message.startswith(owner + ": "):
            return path, message[len(owner) + 2:]
    return path, message


class _Problem(Exception):
    """One constructor refusal, already addressed by JSON path (internal)."""

    def __init__(self, path: tuple, message: str):
        super().__init__(message)
        self.path, self.message = path, message


def _device_from(raw: dict, path: tuple) -> Transistor:
    try:
        return Transistor(**{name: _value(raw[name]) for name in DEVICE_FIELDS})
    except AmpplanError as exc:
        raise _Problem(*_relabel(exc, path, ("Transistor",))) from None


#: How the circuit's messages name an element's value ("resistance must be > 0").
_VALUE_WORDS = tuple(name for cls, _m in ELEMENT_TYPES.values() for name, (base, _n) in field_kinds(cls).items()
                     if base is not str and base is not Transistor)


def _custom_from(raw: dict, path: tuple) -> CustomStage:
    circuit = Circuit()
    for k, element in enumerate(raw["elements"]):
        where = path + ("elements", k)
        _cls, method = ELEMENT_TYPES[element["type"]]
        last = _device_from(element["device"], where + ("device",)) if "device" in element \
            else _value(element["value"])
        try:
            getattr(circuit, method)(element["name"], *element["nodes"], last)
        except AmpplanError as exc:
            at, message = _relabel(exc, where, (element["name"],))
            if at == where and "value" in element and message.startswith(_VALUE_WORDS):
                at = where + ("value",)
            raise _Problem(at, message) from None
    try:
        return CustomStage(circuit=circuit, input=raw["input"], output=raw["output"], transistor=raw["transistor"])
    except AmpplanError as exc:
        raise _Problem(*_relabel(exc, path, ("CustomStage",))) from None


def _stage_from(raw: dict, path: tuple):
    cls = TEMPLATES[raw["kind"]]
    if cls is CustomStage:
        return _custom_from(raw, path)
    device = _device_from(raw["device"], path + ("device",))
    try:
        return cls(**{p.name: _value(raw[p.name]) for p in cls.PARAMETERS}, device=device)
    except AmpplanError as exc:
        raise _Problem(*_relabel(exc, path, (cls.__name__,))) from None


def plan_from_dict(data, source: str = "<plan>") -> Plan:
    """Build a :class:`Plan` from a parsed plan file (see the module notes for the layout).

    Parameters
    ----------
    data : dict
        As :func:`json.loads` returns it.
    source : str
        Name used in error messages (the file path, when there is one).

    Raises
    ------
    PlanFileError
        Not a plan file, a newer format version, or bad values; the message names ``source`` and
        the JSON path of every problem found.
    """
    validate_plan_dict(data, source)
    problems: list[tuple[tuple, str]] = []
    # Each plan value through its own validated setter, so that every bad one is reported.
    scratch = Plan()
    for name in (*PLAN_PARAMETERS, "load_coupling"):
        try:
            setattr(scratch, name, _value(data[name]))
        except AmpplanError as exc:
            problems.append(_relabel(exc, (name,), (f"Plan.{name}", "Plan")))
    stages = []
    for k, raw in enumerate(data["stages"]):
        try:
            stages.append(_stage_from(raw, ("stages", k)))
        except _Problem as problem:
            problems.append((problem.path, problem.message))
    if problems:
        raise PlanFileError(problems_text(source, problems, data))
    try:
        plan = Plan(**{name: _value(data[name]) for name in PLAN_PARAMETERS}, load_coupling=data["load_coupling"],
                    description=data.get("description", ""))
    except AmpplanError as exc:
        raise PlanFileError(f"{source}: {exc}") from None
    # A version-1 file has no ids: its stages get "s1", "s2" ... by position, as they had then.
    ids = [raw.get("id", f"s{k + 1}") for k, raw in enumerate(data["stages"])]
    for k, (stage, raw, sid) in enumerate(zip(stages, data["stages"], ids)):
        try:
            plan.add(stage, coupling=raw["coupling"], id=sid)
        except AmpplanError as exc:
            owner = f"stage id {sid!r}"
            path = ("stages", k, "id") if str(exc).startswith(owner) else ("stages", k)
            problems.append(_relabel(exc, path, (owner, sid)))
    if problems:
        raise PlanFileError(problems_text(source, problems, data))
    return plan

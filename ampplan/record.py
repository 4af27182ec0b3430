"""Plan files: a plan as versioned JSON, validated on the way in, written atomically.

A plan file is one JSON object::

    {"format": "ampplan-plan", "version": 1, "description": "...",
     "supply": 12.0, "negative_supply": 0.0, ..., "load_coupling": "capacitor",
     "stages": [{"kind": "common-emitter", "coupling": "capacitor", "rb1": 47000.0, ...,
                 "device": {"polarity": "npn", "beta": 150.0, ..., "early_voltage": "inf"}}]}

Rules of the format (version 1):

* Every value is in SI base units (ohms, farads, volts, amperes, watts); ``temperature`` is in
  degrees Celsius, as in :class:`ampplan.plan.Plan`.
* The file states every value: each plan value (:data:`ampplan.plan.PLAN_PARAMETERS` and
  ``load_coupling``), each declared parameter of each stage, and each field of each transistor.
  Nothing is filled in from a default, so a recorded design does not change when a default does.
  ``null`` stands for "not fitted" or "not chosen" where the parameter allows None.
  Only ``description`` (free text) may be left out.
* JSON has no infinity, so an infinite transistor value (``early_voltage`` of a device without the
  Early effect, say) is written as the string ``"inf"``. NaN and the non-standard literals
  ``NaN``/``Infinity`` are refused.
* A custom stage lists its circuit elements: ``{"type": "resistor", "name": "r1",
  "nodes": ["supply", "out"], "value": 4700.0}``; a transistor has ``"device"`` in place of
  ``"value"`` and its nodes are collector, base, emitter.

Reading never evaluates or unpickles anything: the text goes through :func:`json.loads` only,
after a size check. The JSON Schema :data:`PLAN_SCHEMA` is generated from the stage templates'
parameter declarations, the plan's declared values and the :class:`~ampplan.devices.Transistor`
fields; it is checked with the ``jsonschema`` library and its findings are reported in our own
words with the JSON path of each bad value (``stages[1].rc: must be > 0 Ω, got -4700``).
"""

from __future__ import annotations

import dataclasses
import difflib
import json
import math
import numbers
import os
import re
import secrets
import typing
from pathlib import Path

import jsonschema

from .circuit import Bjt, Capacitor, Circuit, CurrentSource, Resistor, VoltageSource
from .devices import _BOUNDS as DEVICE_BOUNDS
from .devices import _MAY_BE_INFINITE as DEVICE_MAY_BE_INFINITE
from .devices import FIELDS as DEVICE_FIELDS
from .devices import Transistor
from .errors import AmpplanError, PlanFileError
from .plan import COUPLINGS, PLAN_PARAMETERS, Plan
from .stages import TEMPLATES, CustomStage

__all__ = ["FORMAT", "VERSION", "MAX_FILE_BYTES", "PLAN_SCHEMA", "ELEMENT_TYPES", "save_plan", "load_plan",
           "read_plan_file", "plan_to_dict", "plan_from_dict", "validate_plan_dict"]

#: Value of the ``format`` field of every plan file.
FORMAT = "ampplan-plan"
#: Newest format version this ampplan writes and reads.
VERSION = 1
#: Larger files are refused before they are parsed (a plan is a few kilobytes).
MAX_FILE_BYTES = 1 << 20
#: How an infinite value is spelt in a plan file (JSON has no infinity).
INFINITY = "inf"
#: At most this many problems are listed in one error message.
MAX_PROBLEMS = 12

#: Custom-stage element types: file name -> (circuit element class, Circuit method that adds one).
ELEMENT_TYPES: dict[str, tuple[type, str]] = {
    "resistor": (Resistor, "resistor"),
    "capacitor": (Capacitor, "capacitor"),
    "voltage_source": (VoltageSource, "voltage_source"),
    "current_source": (CurrentSource, "current_source"),
    "transistor": (Bjt, "bjt"),
}

_TOP_LEVEL = "top level"


# ================================================================================================
# The schema, generated from the declarations
# ================================================================================================

def _number(lower=None, inclusive=False, upper=None, unit="", nullable=False, infinite=False, help_=""):
    """Schema of one number; ``unit`` is our own annotation, read back by the error messages."""
    schema = {"type": "number"}
    if lower is not None:
        schema["minimum" if inclusive else "exclusiveMinimum"] = lower
    if upper is not None and math.isfinite(upper):
        schema["maximum"] = upper
    if unit:
        schema["unit"] = unit
    branches = [schema]
    if infinite:
        branches.append({"const": INFINITY})
    if nullable:
        branches.append({"type": "null"})
    out = schema if len(branches) == 1 else {"anyOf": branches}
    if help_:
        out = {**out, "description": help_}
    return out


def _field_kinds(cls) -> dict[str, tuple[object, bool]]:
    """Field name -> (base type, None allowed) from a dataclass's resolved annotations."""
    out = {}
    for name, hint in typing.get_type_hints(cls).items():
        args = typing.get_args(hint)
        nullable = type(None) in args
        base = next((a for a in args if a is not type(None)), hint) if nullable else hint
        out[name] = (base, nullable)
    return out


def _device_schema() -> dict:
    """Every Transistor field, typed from its annotation, bounded by the devices module's bounds."""
    properties = {}
    for name, (base, nullable) in _field_kinds(Transistor).items():
        if typing.get_origin(base) is typing.Literal:
            properties[name] = {"enum": list(typing.get_args(base))}
            continue
        low, inclusive = DEVICE_BOUNDS.get(name, (None, False))
        properties[name] = _number(low, inclusive, nullable=nullable, infinite=name in DEVICE_MAY_BE_INFINITE)
    return {"type": "object", "properties": properties, "required": list(DEVICE_FIELDS),
            "additionalProperties": False}


def _stage_schema(cls) -> dict:
    properties = {"kind": {"const": cls.kind}, "coupling": {"enum": list(COUPLINGS)}}
    for p in cls.PARAMETERS:
        properties[p.name] = _number(p.minimum, False, p.maximum, p.unit, nullable=p.optional,
                                     help_=f"{p.help} ({p.unit})")
    properties["device"] = {"$ref": "#/$defs/device"}
    return {"type": "object", "properties": properties, "required": list(properties),
            "additionalProperties": False}


def _element_schema(kind: str, cls: type) -> dict:
    properties = {"type": {"const": kind}, "name": {"type": "string", "minLength": 1}}
    terminals = []
    for name, (base, nullable) in _field_kinds(cls).items():
        if name == "name":
            continue
        if base is str:
            terminals.append(name)
        elif base is Transistor:
            properties["device"] = {"$ref": "#/$defs/device"}
        else:
            properties["value"] = _number(nullable=nullable, help_=f"{name} (SI units)")
    properties["nodes"] = {"type": "array", "items": {"type": "string", "minLength": 1},
                           "minItems": len(terminals), "maxItems": len(terminals), "terminals": terminals,
                           "description": "terminal nodes in order: " + ", ".join(terminals)}
    return {"type": "object", "properties": properties, "required": list(properties),
            "additionalProperties": False}


def _custom_stage_schema() -> dict:
    dispatch = [{"if": {"properties": {"type": {"const": kind}}, "required": ["type"]},
                 "then": {"$ref": f"#/$defs/element.{kind}"}} for kind in ELEMENT_TYPES]
    element = {"type": "object", "required": ["type"],
               "properties": {"type": {"enum": list(ELEMENT_TYPES)}}, "allOf": dispatch}
    names = {f.name for f in dataclasses.fields(CustomStage)}
    properties = {"kind": {"const": CustomStage.kind}, "coupling": {"enum": list(COUPLINGS)}}
    for name in ("input", "output", "transistor"):
        if name in names:
            properties[name] = {"type": "string", "minLength": 1}
    properties["elements"] = {"type": "array", "items": element}
    return {"type": "object", "properties": properties, "required": list(properties),
            "additionalProperties": False}


def _plan_value_schema(name: str) -> dict:
    unit, lower, optional, help_ = PLAN_PARAMETERS[name]
    return _number(lower, False, unit=unit, nullable=optional, help_=help_)


def _build_schema() -> dict:
    defs = {"device": _device_schema()}
    stage_dispatch = []
    for kind, cls in TEMPLATES.items():
        defs[f"stage.{kind}"] = _custom_stage_schema() if cls is CustomStage else _stage_schema(cls)
        stage_dispatch.append({"if": {"properties": {"kind": {"const": kind}}, "required": ["kind"]},
                               "then": {"$ref": f"#/$defs/stage.{kind}"}})
    for kind, (cls, _method) in ELEMENT_TYPES.items():
        defs[f"element.{kind}"] = _element_schema(kind, cls)
    properties = {
        "format": {"const": FORMAT},
        "version": {"type": "integer", "minimum": 1, "maximum": VERSION},
        "description": {"type": "string", "description": "free text about the plan"},
    }
    for name in PLAN_PARAMETERS:
        properties[name] = _plan_value_schema(name)
    properties["load_coupling"] = {"enum": list(COUPLINGS), "description": "how the load meets the last stage"}
    properties["stages"] = {"type": "array", "items": {
        "type": "object", "required": ["kind"], "properties": {"kind": {"enum": list(TEMPLATES)}},
        "allOf": stage_dispatch}}
    return {
        "$schema": "https://json-schema.org/draft/2020-12/schema",
        "title": f"ampplan plan file, format version {VERSION}",
        "type": "object",
        "properties": properties,
        "required": [name for name in properties if name != "description"],
        "additionalProperties": False,
        "$defs": defs,
    }


#: JSON Schema (draft 2020-12) of a version-1 plan file, generated from the declarations.
PLAN_SCHEMA: dict = _build_schema()
jsonschema.Draft202012Validator.check_schema(PLAN_SCHEMA)
_VALIDATOR = jsonschema.Draft202012Validator(PLAN_SCHEMA)


# ================================================================================================
# Plan -> dict
# ================================================================================================

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
    for name, (base, _nullable) in _field_kinds(type(element)).items():
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


def _stage_to_dict(stage, coupling: str) -> dict:
    out = {"kind": stage.kind, "coupling": coupling}
    if isinstance(stage, CustomStage):
        out.update(input=stage.input, output=stage.output, transistor=stage.transistor,
                   elements=[_element_to_dict(e) for e in stage.circuit.elements])
        return out
    out.update({name: _out(value) for name, value in stage.parameters().items()})
    out["device"] = _device_to_dict(stage.device)
    return out


def plan_to_dict(plan: Plan, description: str | None = None) -> dict:
    """The plan as a plain, JSON-ready dict in the plan-file layout (format version 1).

    Parameters
    ----------
    plan : Plan
    description : str, optional
        Free text stored as the file's ``description``; left out when None.

    Returns
    -------
    dict
        Floats in SI units, ``"inf"`` for infinity, None for "not fitted".
    """
    if not isinstance(plan, Plan):
        raise TypeError(f"plan_to_dict expects an ampplan Plan, got {type(plan).__name__}")
    out = {"format": FORMAT, "version": VERSION}
    if description is not None:
        out["description"] = str(description)
    for name in PLAN_PARAMETERS:
        out[name] = _out(getattr(plan, name))
    out["load_coupling"] = plan.load_coupling
    out["stages"] = [_stage_to_dict(stage, coupling) for stage, coupling in zip(plan.stages, plan.couplings)]
    return out


# ================================================================================================
# Validation: our own words for the schema's findings
# ================================================================================================

def _path_text(path) -> str:
    """``("stages", 1, "rc")`` -> ``"stages[1].rc"``; the empty path is the top level."""
    text = ""
    for part in path:
        if isinstance(part, int):
            text += f"[{part}]"
        elif re.fullmatch(r"[A-Za-z_][A-Za-z0-9_]*", part):
            text += f".{part}" if text else part
        else:
            text += f"[{json.dumps(part, ensure_ascii=False)}]"
    return text or _TOP_LEVEL


def _shown(value) -> str:
    """A JSON value as the user wrote it, shortened."""
    if isinstance(value, float) and value.is_integer() and abs(value) < 1e16:
        text = repr(value)  # keeps "-4700.0" distinct from an integer only where it matters
        text = text[:-2] if text.endswith(".0") else text
    elif isinstance(value, (dict, list)):
        text = {dict: "an object", list: "a list"}[type(value)]
        return text
    else:
        text = json.dumps(value, ensure_ascii=False)
    return text if len(text) <= 60 else text[:57] + "..."


def _bound_text(schema: dict) -> str:
    unit = schema.get("unit", "")
    parts = []
    if "exclusiveMinimum" in schema:
        parts.append(f"> {schema['exclusiveMinimum']:g}")
    if "minimum" in schema:
        parts.append(f">= {schema['minimum']:g}")
    if "maximum" in schema:
        parts.append(f"<= {schema['maximum']:g}")
    text = " and ".join(parts)
    return f"{text} {unit}".strip() if text else ""


def _expectation(schema: dict) -> str:
    """What a subschema accepts, in words: ``a number > 0 Ω, "inf" or null``."""
    if "anyOf" in schema:
        words = [_expectation(s) for s in schema["anyOf"]]
        return ", ".join(words[:-1]) + " or " + words[-1] if len(words) > 1 else words[0]
    if "const" in schema:
        return json.dumps(schema["const"])
    if "enum" in schema:
        return "one of " + ", ".join(json.dumps(v) for v in schema["enum"])
    kind = schema.get("type")
    words = {"number": "a number", "integer": "a whole number", "string": "text", "null": "null",
             "object": "an object", "array": "a list", "boolean": "true or false"}
    if isinstance(kind, list):
        return " or ".join(words.get(k, k) for k in kind)
    text = words.get(kind, "a value")
    bound = _bound_text(schema)
    return f"{text} {bound}" if bound else text


def _did_you_mean(name, choices) -> str:
    close = difflib.get_close_matches(str(name), [str(c) for c in choices], n=2)
    return f"; did you mean {' or '.join(repr(c) for c in close)}?" if close else ""


def _messages(error: jsonschema.ValidationError) -> list[tuple[tuple, str]]:
    """(path, message) pairs for one schema error."""
    path = tuple(error.absolute_path)
    keyword, schema, instance = error.validator, error.schema, error.instance
    if keyword == "required":
        missing = [k for k in error.validator_value if isinstance(instance, dict) and k not in instance]
        return [(path, f"missing key {k!r}") for k in missing]
    if keyword == "additionalProperties":
        known = schema.get("properties", {})
        return [(path, f"unknown key {k!r}{_did_you_mean(k, known)}") for k in instance if k not in known]
    if keyword in ("exclusiveMinimum", "minimum", "maximum", "exclusiveMaximum"):
        return [(path, f"must be {_bound_text(schema)}, got {_shown(instance)}")]
    if keyword == "anyOf":
        number = next((s for s in schema["anyOf"] if s.get("type") == "number"), None)
        if number is not None and isinstance(instance, (int, float)) and not isinstance(instance, bool):
            return [(path, f"must be {_bound_text(number)}, got {_shown(instance)}")]
        return [(path, f"must be {_expectation(schema)}, got {_shown(instance)}")]
    if keyword in ("enum", "const"):
        choices = error.validator_value if keyword == "enum" else [error.validator_value]
        return [(path, f"must be {_expectation(schema)}, got {_shown(instance)}"
                 f"{_did_you_mean(instance, choices) if isinstance(instance, str) else ''}")]
    if keyword == "type":
        return [(path, f"must be {_expectation({'type': error.validator_value})}, got {_shown(instance)}")]
    if keyword in ("minItems", "maxItems") and "terminals" in schema:
        names = schema["terminals"]
        return [(path, f"must list {len(names)} nodes ({', '.join(names)}), got {len(instance)}")]
    if keyword == "minLength":
        return [(path, "must not be empty")]
    return [(path, error.message)]


def _document_order(data, path) -> tuple:
    """Sort key placing a path where its value sits in the file."""
    key, node = [], data
    for part in path:
        if isinstance(node, dict):
            keys = list(node)
            key.append(keys.index(part) if part in keys else len(keys))
            node = node.get(part)
        elif isinstance(node, list) and isinstance(part, int):
            key.append(part)
            node = node[part] if part < len(node) else None
        else:
            key.append(0)
            node = None
    return tuple(key)


class _Object(dict):
    """A JSON object that remembers keys it saw twice (json.loads would silently keep the last)."""
    duplicates: tuple = ()


def _object_pairs(pairs):
    obj = _Object()
    seen = []
    for key, value in pairs:
        if key in obj:
            seen.append(key)
        obj[key] = value
    obj.duplicates = tuple(dict.fromkeys(seen))
    return obj


def _walk_numbers(value, path=()):
    """(path, message) for duplicate keys and numbers that are not finite floats."""
    if isinstance(value, dict):
        for key in getattr(value, "duplicates", ()):
            yield path, f"key {key!r} appears more than once"
        for key, item in value.items():
            yield from _walk_numbers(item, path + (key,))
    elif isinstance(value, list):
        for k, item in enumerate(value):
            yield from _walk_numbers(item, path + (k,))
    elif isinstance(value, (int, float)) and not isinstance(value, bool):
        try:
            finite = math.isfinite(float(value))
        except OverflowError:
            finite = False
        if not finite:
            yield path, "number too large (beyond the ±1.8e308 range of a float)"


def _problems_text(source: str, problems: list[tuple[tuple, str]], data) -> str:
    ordered = sorted(dict.fromkeys((tuple(p), m) for p, m in problems),
                     key=lambda pm: (_document_order(data, pm[0]), pm[1]))
    lines = [f"{_path_text(p)}: {m}" for p, m in ordered]
    if len(lines) == 1:
        return f"{source}: {lines[0]}"
    shown = lines[:MAX_PROBLEMS]
    more = len(lines) - len(shown)
    tail = [f"  ... and {more} more"] if more else []
    return "\n".join([f"{source}: {len(lines)} problems"] + ["  " + line for line in shown] + tail)


def _check_header(data, source: str) -> None:
    """Reject what is not a plan file at all, or is one of a newer version, before anything else."""
    if not isinstance(data, dict):
        raise PlanFileError(f"{source}: a plan file holds one JSON object at the top level, "
                            f"got {_shown(data) if not isinstance(data, list) else 'a list'}")
    if "format" not in data:
        raise PlanFileError(f"{source}: format: missing; this is not an ampplan plan file "
                            f"(expected \"format\": \"{FORMAT}\")")
    if data["format"] != FORMAT:
        raise PlanFileError(f"{source}: format: expected \"{FORMAT}\", got {_shown(data['format'])}; "
                            "this is not an ampplan plan file")
    version = data.get("version")
    if "version" not in data:
        raise PlanFileError(f"{source}: version: missing (this ampplan reads format versions 1 to {VERSION})")
    if isinstance(version, bool) or not isinstance(version, int):
        raise PlanFileError(f"{source}: version: must be a whole number, got {_shown(version)}")
    if version > VERSION:
        raise PlanFileError(f"{source}: written by a newer ampplan (format version {version}; "
                            f"this ampplan reads up to {VERSION})")
    if version < 1:
        raise PlanFileError(f"{source}: version: must be between 1 and {VERSION}, got {version}")


def validate_plan_dict(data, source: str = "<plan>") -> None:
    """Check a parsed plan file against :data:`PLAN_SCHEMA`.

    Raises
    ------
    PlanFileError
        Naming ``source`` and the JSON path of every bad value (the first :data:`MAX_PROBLEMS`).
    """
    _check_header(data, source)
    problems = list(_walk_numbers(data))
    for error in _VALIDATOR.iter_errors(data):
        problems += _messages(error)
    if problems:
        raise PlanFileError(_problems_text(source, problems, data))


# ================================================================================================
# dict -> Plan, through the constructors
# ================================================================================================

def _value(raw):
    """A file value as the constructors take it: ``"inf"`` -> infinity, numbers as floats."""
    if raw == INFINITY:
        return math.inf
    if isinstance(raw, int) and not isinstance(raw, bool):
        return float(raw)
    return raw


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


def _device_from(raw: dict, path: tuple) -> Transistor:
    try:
        return Transistor(**{name: _value(raw[name]) for name in DEVICE_FIELDS})
    except AmpplanError as exc:
        raise _Problem(*_relabel(exc, path, ("Transistor",))) from None


#: How the circuit's messages name an element's value ("resistance must be > 0").
_VALUE_WORDS = tuple(name for cls, _m in ELEMENT_TYPES.values() for name, (base, _n) in _field_kinds(cls).items()
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


class _Problem(Exception):
    """One constructor refusal, already addressed by JSON path (internal)."""

    def __init__(self, path: tuple, message: str):
        super().__init__(message)
        self.path, self.message = path, message


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
        raise PlanFileError(_problems_text(source, problems, data))
    try:
        plan = Plan(**{name: _value(data[name]) for name in PLAN_PARAMETERS}, load_coupling=data["load_coupling"])
    except AmpplanError as exc:
        raise PlanFileError(f"{source}: {exc}") from None
    for k, (stage, raw) in enumerate(zip(stages, data["stages"])):
        try:
            plan.add(stage, coupling=raw["coupling"])
        except AmpplanError as exc:
            problems.append(_relabel(exc, ("stages", k), (f"s{k + 1}",)))
    if problems:
        raise PlanFileError(_problems_text(source, problems, data))
    return plan


# ================================================================================================
# Files
# ================================================================================================

class _Constant(ValueError):
    """Raised by the parser on NaN / Infinity literals (internal)."""


def _refuse_constant(name):
    raise _Constant(name)


def _line_column(text: str, index: int) -> tuple[int, int]:
    line = text.count("\n", 0, index) + 1
    return line, index - (text.rfind("\n", 0, index) + 1) + 1


def parse_plan_text(text: str, source: str = "<plan>"):
    """Parse plan-file text with :func:`json.loads` only; no other evaluation happens.

    Raises
    ------
    PlanFileError
        Malformed JSON (with line and column), or a ``NaN``/``Infinity`` literal.
    """
    try:
        return json.loads(text, parse_constant=_refuse_constant, object_pairs_hook=_object_pairs)
    except _Constant as exc:
        # The decoder does not say where; find the literal outside of strings.
        match = next(m for m in re.finditer(r'"(?:[^"\\]|\\.)*"|(-?Infinity|NaN)', text) if m.group(1))
        line, column = _line_column(text, match.start(1))
        raise PlanFileError(f"{source}: line {line} column {column}: {exc} is not allowed in a plan file "
                            f"(JSON has no {exc}; write \"{INFINITY}\" for an infinite value)") from None
    except json.JSONDecodeError as exc:
        at_end = exc.pos >= len(text.rstrip())
        hint = " (the file ends too soon: truncated?)" if at_end else ""
        raise PlanFileError(f"{source}: not valid JSON: line {exc.lineno} column {exc.colno}: {exc.msg}{hint}") \
            from None
    except (ValueError, RecursionError) as exc:  # an integer too long to convert, nesting too deep
        raise PlanFileError(f"{source}: not a readable plan file: {exc}") from None


def read_plan_file(path) -> dict:
    """Read, parse and validate a plan file; returns the plain dict (nothing is constructed).

    Raises
    ------
    PlanFileError
        Naming the path: unreadable, larger than :data:`MAX_FILE_BYTES`, not UTF-8, malformed
        JSON, not a plan file, a newer version, or invalid values.
    """
    source = os.fspath(path)
    try:
        with open(source, "rb") as f:
            size = os.fstat(f.fileno()).st_size
            if size > MAX_FILE_BYTES:
                raise PlanFileError(f"{source}: file is {size} bytes, larger than the {MAX_FILE_BYTES} bytes "
                                    "a plan file may be; refusing to read it")
            raw = f.read(MAX_FILE_BYTES + 1)
    except OSError as exc:
        raise PlanFileError(f"{source}: cannot read the plan file: {exc.strerror or exc}") from None
    if len(raw) > MAX_FILE_BYTES:
        raise PlanFileError(f"{source}: file is larger than the {MAX_FILE_BYTES} bytes a plan file may be; "
                            "refusing to read it")
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise PlanFileError(f"{source}: not UTF-8 text (byte {exc.start}); a plan file is JSON in UTF-8") from None
    data = parse_plan_text(text, source)
    validate_plan_dict(data, source)
    return data


def load_plan(path) -> Plan:
    """Read a plan file written by :func:`save_plan` (or by hand).

    Parameters
    ----------
    path : str or os.PathLike

    Returns
    -------
    Plan

    Raises
    ------
    PlanFileError
        Naming the path and, for bad values, the JSON path of each.
    """
    return plan_from_dict(read_plan_file(path), source=os.fspath(path))


def save_plan(plan: Plan, path, description: str | None = None) -> None:
    """Write ``plan`` to ``path`` as a plan file, atomically.

    The JSON goes to a temporary file in the same directory, which is flushed, synced to disk
    and then renamed over ``path`` (:func:`os.replace`). If anything fails, ``path`` keeps its
    old content (or stays absent) and the temporary file is removed.

    Parameters
    ----------
    plan : Plan
    path : str or os.PathLike
    description : str, optional
        Free text for the file's ``description``.

    Raises
    ------
    PlanFileError
        Naming the path, when the file cannot be written.
    """
    target = Path(os.fspath(path))
    data = plan_to_dict(plan, description)
    directory = target.parent
    temporary = directory / f".{target.name}.{secrets.token_hex(6)}.tmp"
    try:
        # 0o666 less the umask, like any new file; an existing file keeps its permissions.
        fd = os.open(temporary, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)
    except OSError as exc:
        raise PlanFileError(f"{target}: cannot write the plan file: {exc.strerror or exc}") from None
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as f:
            json.dump(data, f, indent=2, ensure_ascii=False, allow_nan=False)
            f.write("\n")
            f.flush()
            os.fsync(f.fileno())
        try:
            os.chmod(temporary, os.stat(target).st_mode & 0o7777)
        except FileNotFoundError:
            pass
        os.replace(temporary, target)
    except BaseException as exc:
        try:
            os.unlink(temporary)
        except OSError:
            pass
        if isinstance(exc, Exception):  # an interrupt passes through, after the clean-up
            reason = (exc.strerror if isinstance(exc, OSError) else None) or str(exc) or type(exc).__name__
            raise PlanFileError(f"{target}: cannot write the plan file: {reason}; "
                                "the file was left as it was") from exc
        raise
    _sync_directory(directory)


def _sync_directory(directory: Path) -> None:
    """Make the rename durable where the platform allows (POSIX); best effort."""
    if os.name != "posix":
        return
    try:
        fd = os.open(directory, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)

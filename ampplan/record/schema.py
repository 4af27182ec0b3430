"""The plan-file JSON Schema, generated from the declarations, and validation against it.

Nothing is retyped here: stage parameters come from each template's :class:`~ampplan.stages.Parameter`
rows, plan values from :data:`ampplan.plan.PLAN_PARAMETERS`, transistor fields from the
:class:`~ampplan.devices.Transistor` dataclass (types from its annotations, bounds from the devices
module, units from its DEVICE_UNITS), custom-stage elements from the circuit element dataclasses
and their VALUE_BOUNDS.
"""

from __future__ import annotations

import dataclasses
import math
import typing

import jsonschema

from ..circuit import VALUE_BOUNDS, Bjt, Capacitor, CurrentSource, Resistor, VoltageSource
from ..devices import DEVICE_UNITS, Transistor
from ..devices import MAY_BE_INFINITE as DEVICE_MAY_BE_INFINITE
from ..devices import PARAMETER_BOUNDS as DEVICE_BOUNDS
from ..devices import PARAMETER_MAXIMA as DEVICE_MAXIMA
from ..devices import FIELDS as DEVICE_FIELDS
from ..errors import PlanFileError
from ..plan import COUPLINGS, MAX_STAGE_ID_LENGTH, MAX_STAGES, PLAN_PARAMETERS
from ..validation import MAX_NAME_LENGTH, MAX_TEXT_LENGTH, unencodable
from ..stages import TEMPLATES, CustomStage
from .messages import messages_for, problems_text, shown

__all__ = ["FORMAT", "VERSION", "INFINITY", "ELEMENT_TYPES", "PLAN_SCHEMA", "PLAN_SCHEMAS", "field_kinds",
           "validate_plan_dict", "LongNumber", "MAX_LIST_LENGTH", "MAX_NUMBER_LENGTH"]

#: Value of the ``format`` field of every plan file.
FORMAT = "ampplan-plan"
#: Newest format version this ampplan writes and reads. Version 2 gives every stage an ``id``;
#: version 1 (no ids: a stage's id followed its position) is still read, see :mod:`.convert`.
VERSION = 2
#: How an infinite value is spelt in a plan file (JSON has no infinity).
INFINITY = "inf"

#: Custom-stage element types: file name -> (circuit element class, Circuit method that adds one).
ELEMENT_TYPES: dict[str, tuple[type, str]] = {
    "resistor": (Resistor, "resistor"),
    "capacitor": (Capacitor, "capacitor"),
    "voltage_source": (VoltageSource, "voltage_source"),
    "current_source": (CurrentSource, "current_source"),
    "transistor": (Bjt, "bjt"),
}


def _number(lower=None, inclusive=False, upper=None, unit="", nullable=False, infinite=False, help_=""):
    """Schema of one number; ``unit`` is our own annotation, read back by the error messages."""
    schema = {"type": "number"}
    if lower is not None and math.isfinite(lower):
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


def field_kinds(cls) -> dict[str, tuple[object, bool]]:
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
    for name, (base, nullable) in field_kinds(Transistor).items():
        if typing.get_origin(base) is typing.Literal:
            properties[name] = {"enum": list(typing.get_args(base))}
            continue
        low, inclusive = DEVICE_BOUNDS.get(name, (None, False))
        properties[name] = _number(low, inclusive, DEVICE_MAXIMA.get(name), unit=DEVICE_UNITS[name], nullable=nullable,
                                   infinite=name in DEVICE_MAY_BE_INFINITE)
    return {"type": "object", "properties": properties, "required": list(DEVICE_FIELDS),
            "additionalProperties": False}


def _stage_header(kind: str, version: int) -> dict:
    """The keys every stage starts with: its id (from version 2), kind and coupling."""
    properties = {}
    if version >= 2:
        properties["id"] = {"type": "string", "minLength": 1, "maxLength": MAX_STAGE_ID_LENGTH,
                            "description": "the stage's id: a letter, then letters, digits or '_'"}
    properties.update(kind={"const": kind}, coupling={"enum": list(COUPLINGS)})
    return properties


def _stage_schema(cls, version: int) -> dict:
    properties = _stage_header(cls.kind, version)
    for p in cls.PARAMETERS:
        properties[p.name] = _number(p.minimum, p.minimum_inclusive, p.maximum, p.unit, nullable=p.optional,
                                     help_=f"{p.help} ({p.unit})")
    properties["device"] = {"$ref": "#/$defs/device"}
    return {"type": "object", "properties": properties, "required": list(properties),
            "additionalProperties": False}


def _element_schema(kind: str, cls: type) -> dict:
    properties = {"type": {"const": kind}, "name": {"type": "string", "minLength": 1}}
    terminals = []
    for name, (base, nullable) in field_kinds(cls).items():
        if name == "name":
            continue
        if base is str:
            terminals.append(name)
        elif base is Transistor:
            properties["device"] = {"$ref": "#/$defs/device"}
        else:
            bounds = VALUE_BOUNDS[cls]
            properties["value"] = _number(bounds.get("minimum"), bounds.get("minimum_inclusive", False),
                                          bounds.get("maximum"), bounds["unit"], nullable=nullable,
                                          help_=f"{name} ({bounds['unit']})")
    properties["nodes"] = {"type": "array", "items": {"type": "string", "minLength": 1},
                           "minItems": len(terminals), "maxItems": len(terminals), "terminals": terminals,
                           "description": "terminal nodes in order: " + ", ".join(terminals)}
    return {"type": "object", "properties": properties, "required": list(properties),
            "additionalProperties": False}


def _custom_stage_schema(version: int) -> dict:
    dispatch = [{"if": {"properties": {"type": {"const": kind}}, "required": ["type"]},
                 "then": {"$ref": f"#/$defs/element.{kind}"}} for kind in ELEMENT_TYPES]
    element = {"type": "object", "required": ["type"],
               "properties": {"type": {"enum": list(ELEMENT_TYPES)}}, "allOf": dispatch}
    names = {f.name for f in dataclasses.fields(CustomStage)}
    properties = _stage_header(CustomStage.kind, version)
    for name in ("input", "output", "transistor"):
        if name in names:
            properties[name] = {"type": "string", "minLength": 1}
    properties["elements"] = {"type": "array", "items": element}
    return {"type": "object", "properties": properties, "required": list(properties),
            "additionalProperties": False}


def _plan_value_schema(name: str) -> dict:
    p = PLAN_PARAMETERS[name]
    return _number(p.minimum, p.minimum_inclusive, upper=p.maximum, unit=p.unit, nullable=p.optional, help_=p.help)


def _build_schema(version: int = VERSION) -> dict:
    defs = {"device": _device_schema()}
    stage_dispatch = []
    for kind, cls in TEMPLATES.items():
        defs[f"stage.{kind}"] = _custom_stage_schema(version) if cls is CustomStage else _stage_schema(cls, version)
        stage_dispatch.append({"if": {"properties": {"kind": {"const": kind}}, "required": ["kind"]},
                               "then": {"$ref": f"#/$defs/stage.{kind}"}})
    for kind, (cls, _method) in ELEMENT_TYPES.items():
        defs[f"element.{kind}"] = _element_schema(kind, cls)
    properties = {
        "format": {"const": FORMAT},
        "version": {"const": version},
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
        "title": f"ampplan plan file, format version {version}",
        "type": "object",
        "properties": properties,
        "required": [name for name in properties if name != "description"],
        "additionalProperties": False,
        "$defs": defs,
    }


#: JSON Schema (draft 2020-12) of each plan-file version this ampplan reads, generated from the
#: declarations; version 1 differs only in having no stage ids.
PLAN_SCHEMAS: dict[int, dict] = {version: _build_schema(version) for version in range(1, VERSION + 1)}
#: The schema of the version this ampplan writes.
PLAN_SCHEMA: dict = PLAN_SCHEMAS[VERSION]
_VALIDATORS = {version: jsonschema.Draft202012Validator(schema) for version, schema in PLAN_SCHEMAS.items()}


#: Longest list a plan file may hold anywhere but ``stages``: a custom stage's elements (a stage
#: is a handful of parts; hundreds are room to spare).
MAX_LIST_LENGTH = 500
#: Most characters a number may be written with: a float needs at most 17 significant digits
#: and an exponent, so 40 is room to spare; longer ones are refused before they are converted
#: (Python's int() takes time quadratic in the digits and refuses beyond 4300 of them).
MAX_NUMBER_LENGTH = 40


class LongNumber(str):
    """A number too long to convert, kept as its text by the parser so that its path can be named."""


def _early_problems(value, path=()):
    """(path, message) for what must be refused before the schema looks at it.

    Long lists, long text and long numbers, so that a file of 100,000 stages or a 5,000-digit
    integer is refused at once (and by its JSON path) instead of after a long validation; and text
    UTF-8 cannot encode (a JSON escape such as ``"\\ud800"`` gives a lone surrogate, which no file
    or terminal can hold), so that no later message repeats it. Does not descend into a list that
    is too long.
    """
    if isinstance(value, LongNumber):
        yield path, (f"a number written with {len(value)} characters; a plan file's numbers have at most "
                     f"{MAX_NUMBER_LENGTH}")
    elif isinstance(value, str):
        limit = MAX_TEXT_LENGTH if path == ("description",) else MAX_NAME_LENGTH
        if len(value) > limit:
            yield path, f"text of {len(value)} characters; at most {limit} are allowed here"
        elif unencodable(value) is not None:
            yield path, _unencodable_text("text", value)
    elif isinstance(value, dict):
        for key, item in value.items():
            if len(key) > MAX_NAME_LENGTH:
                yield path, f"a key of {len(key)} characters; keys have at most {MAX_NAME_LENGTH}"
            elif unencodable(key) is not None:
                yield path, _unencodable_text("a key", key)
            else:
                yield from _early_problems(item, path + (key,))
    elif isinstance(value, list):
        limit = MAX_STAGES if path == ("stages",) else MAX_LIST_LENGTH
        if len(value) > limit:
            what = "stages" if path == ("stages",) else "items"
            yield path, f"{len(value)} {what}; a plan file holds at most {limit} here"
            return
        for k, item in enumerate(value):
            yield from _early_problems(item, path + (k,))


def _walk_numbers(value, path=()):
    """(path, message) for duplicate keys and numbers that are not finite floats.

    Duplicate keys are known to objects the plan-file parser made (``duplicates``, see
    :mod:`.files`); a number like ``1e400`` parses to infinity, which no schema keyword catches.
    """
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


def _unencodable_text(what: str, text: str) -> str:
    bad = unencodable(text)
    escaped = text.encode("utf-8", "backslashreplace").decode("ascii", "backslashreplace")
    shown_text = escaped if len(escaped) <= 40 else escaped[:37] + "..."
    return (f"{what} holding a character that cannot be written as UTF-8 (U+{ord(text[bad]):04X}, a lone "
            f"surrogate, at position {bad}): \"{shown_text}\"")


def _check_header(data, source: str) -> None:
    """Reject what is not a plan file at all, or is one of a newer version, before anything else."""
    if not isinstance(data, dict):
        raise PlanFileError(f"{source}: a plan file holds one JSON object at the top level, "
                            f"got {shown(data) if not isinstance(data, list) else 'a list'}")
    if "format" not in data:
        raise PlanFileError(f"{source}: format: missing; this is not an ampplan plan file "
                            f"(expected \"format\": \"{FORMAT}\")")
    if data["format"] != FORMAT:
        raise PlanFileError(f"{source}: format: expected \"{FORMAT}\", got {shown(data['format'])}; "
                            "this is not an ampplan plan file")
    version = data.get("version")
    readable = f"format version {VERSION}" if VERSION == 1 else f"format versions 1 to {VERSION}"
    if "version" not in data:
        raise PlanFileError(f"{source}: version: missing (this ampplan reads {readable})")
    if isinstance(version, bool) or not isinstance(version, int):
        raise PlanFileError(f"{source}: version: must be a whole number, got {shown(version)}")
    if version > VERSION:
        raise PlanFileError(f"{source}: written by a newer ampplan (format version {version}; "
                            f"this ampplan reads up to {VERSION})")
    if version < 1:
        raise PlanFileError(f"{source}: version: got {version}; this ampplan reads {readable}")


def validate_plan_dict(data, source: str = "<plan>") -> None:
    """Check a parsed plan file against :data:`PLAN_SCHEMA`.

    Raises
    ------
    PlanFileError
        Naming ``source`` and the JSON path of every bad value (the first :data:`~.messages.MAX_PROBLEMS`).
    """
    _check_header(data, source)
    problems = list(_early_problems(data))
    if problems:  # too big, or unprintable: not validated further
        raise PlanFileError(problems_text(source, problems, data))
    try:
        problems = list(_walk_numbers(data))
        for error in _VALIDATORS[data["version"]].iter_errors(data):
            problems += messages_for(error)
    except RecursionError:
        raise PlanFileError(f"{source}: values are nested too deeply to be a plan file") from None
    if problems:
        raise PlanFileError(problems_text(source, problems, data))

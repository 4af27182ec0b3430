"""Our own words for what the schema finds: every problem named by its JSON path.

``jsonschema`` reports in its own vocabulary ("-4700 is less than or equal to the minimum of 0");
a designer reads ``stages[1].rc: must be > 0 Ω, got -4700``. The schema carries a ``unit``
annotation on each number (an unknown keyword to JSON Schema, ignored by validators) so that
messages can state it, and a ``terminals`` annotation on a custom element's node list.
"""

from __future__ import annotations

import difflib
import json
import math
import re

import jsonschema

from ..validation import bounds_text

__all__ = ["MAX_PROBLEMS", "TOP_LEVEL", "path_text", "shown", "messages_for", "problems_text"]

#: At most this many problems are listed in one error message.
MAX_PROBLEMS = 12
#: How the empty JSON path (the file's outer object) is named in messages.
TOP_LEVEL = "top level"


def path_text(path) -> str:
    """``("stages", 1, "rc")`` -> ``"stages[1].rc"``; the empty path is the top level."""
    text = ""
    for part in path:
        if isinstance(part, int):
            text += f"[{part}]"
        elif re.fullmatch(r"[A-Za-z_][A-Za-z0-9_]*", part):
            text += f".{part}" if text else part
        else:
            text += f"[{json.dumps(part, ensure_ascii=False)}]"
    return text or TOP_LEVEL


def shown(value) -> str:
    """A JSON value for a message, shortened; whole floats without ".0", as a person types them."""
    if isinstance(value, dict):
        return "an object"
    if isinstance(value, list):
        return "a list"
    if isinstance(value, float) and value.is_integer() and abs(value) < 1e16:
        return str(int(value))
    try:
        text = json.dumps(value, ensure_ascii=False)
    except (TypeError, ValueError):  # not a JSON value at all (given to plan_from_dict by a caller)
        text = f"a {type(value).__name__}"
    return text if len(text) <= 60 else text[:57] + "..."


def _bound_text(schema: dict) -> str:
    """A number schema's bounds in the words the constructors use (:func:`ampplan.validation.bounds_text`)."""
    if not any(k in schema for k in ("exclusiveMinimum", "minimum", "maximum")):
        return ""
    inclusive = "minimum" in schema
    return bounds_text(schema.get("minimum", schema.get("exclusiveMinimum", -math.inf)),
                       schema.get("maximum", math.inf), inclusive, schema.get("unit", ""))


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


def messages_for(error: jsonschema.ValidationError) -> list[tuple[tuple, str]]:
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
        return [(path, f"must be {_bound_text(schema)}, got {shown(instance)}")]
    if keyword == "anyOf":
        number = next((s for s in schema["anyOf"] if s.get("type") == "number"), None)
        if number is not None and isinstance(instance, (int, float)) and not isinstance(instance, bool):
            return [(path, f"must be {_bound_text(number)}, got {shown(instance)}")]
        return [(path, f"must be {_expectation(schema)}, got {shown(instance)}")]
    if keyword in ("enum", "const"):
        choices = error.validator_value if keyword == "enum" else [error.validator_value]
        return [(path, f"must be {_expectation(schema)}, got {shown(instance)}"
                 f"{_did_you_mean(instance, choices) if isinstance(instance, str) else ''}")]
    if keyword == "type":
        return [(path, f"must be {_expectation({'type': error.validator_value})}, got {shown(instance)}")]
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


def problems_text(source: str, problems: list[tuple[tuple, str]], data) -> str:
    ordered = sorted(dict.fromkeys((tuple(p), m) for p, m in problems),
                     key=lambda pm: (_document_order(data, pm[0]), pm[1]))
    lines = [f"{path_text(p)}: {m}" for p, m in ordered]
    if len(lines) == 1:
        return f"{source}: {lines[0]}"
    shown = lines[:MAX_PROBLEMS]
    more = len(lines) - len(shown)
    tail = [f"  ... and {more} more"] if more else []
    return "\n".join([f"{source}: {len(lines)} problems"] + ["  " + line for line in shown] + tail)

"""Plan files: a plan as versioned JSON, validated on the way in, written atomically.

A plan file is one JSON object::

    {"format": "ampplan-plan", "version": 2, "description": "...",
     "supply": 12.0, "negative_supply": 0.0, ..., "load_coupling": "capacitor",
     "stages": [{"id": "s1", "kind": "common-emitter", "coupling": "capacitor", "rb1": 47000.0, ...,
                 "device": {"polarity": "npn", "beta": 150.0, ..., "early_voltage": "inf"}}]}

Rules of the format (version 2):

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
* Each stage has its ``id`` (``"s1"``, or a name of the user's such as ``"input"``; see
  :meth:`ampplan.plan.Plan.add`), in chain order. Version 1 had no ids: a version-1 file still
  loads, its stages get ``"s1"``, ``"s2"`` ... by position, and a save writes it as version 2.
* A custom stage lists its circuit elements: ``{"type": "resistor", "name": "r1",
  "nodes": ["supply", "out"], "value": 4700.0}``; a transistor has ``"device"`` in place of
  ``"value"`` and its nodes are collector, base, emitter.

The package: :mod:`.schema` generates :data:`PLAN_SCHEMA` and validates against it,
:mod:`.messages` words its findings, :mod:`.convert` turns plans into dicts and back,
:mod:`.files` reads and writes.

Reading never evaluates or unpickles anything: the text goes through :func:`json.loads` only,
after a size check. The JSON Schema :data:`PLAN_SCHEMA` is generated from the stage templates'
parameter declarations, the plan's declared values and the :class:`~ampplan.devices.Transistor`
fields; it is checked with the ``jsonschema`` library and its findings are reported in our own
words with the JSON path of each bad value (``stages[1].rc: must be > 0 Ω, got -4700``).
"""

from .convert import plan_from_dict, plan_to_dict
from .files import MAX_FILE_BYTES, load_plan, parse_plan_text, read_plan_file, save_plan
from .messages import MAX_PROBLEMS
from .schema import ELEMENT_TYPES, FORMAT, INFINITY, PLAN_SCHEMA, PLAN_SCHEMAS, VERSION, validate_plan_dict

__all__ = ["FORMAT", "VERSION", "INFINITY", "MAX_FILE_BYTES", "MAX_PROBLEMS", "PLAN_SCHEMA", "PLAN_SCHEMAS",
           "ELEMENT_TYPES",
           "save_plan", "load_plan", "read_plan_file", "parse_plan_text", "plan_to_dict", "plan_from_dict",
           "validate_plan_dict"]

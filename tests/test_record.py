"""Plan files: exact round trips, a generated schema, clear errors for bad files, atomic writes.

Outside references used here:

* JSON text (RFC 8259, from memory): no NaN or Infinity literals; numbers are decimal text.
* Python's ``repr`` of a float is the shortest text that reads back to the same float (Python
  documentation, "Floating Point Arithmetic: Issues and Limitations", from memory), so floats
  written with :mod:`json` must come back bit for bit.
* The ``jsonschema`` library: the generated schema must be a valid draft 2020-12 schema, and every
  file we write must pass that library's own validation.
"""

from __future__ import annotations

import copy
import json
import math
import os
import stat
import tempfile
from pathlib import Path

import jsonschema
import pytest
from hypothesis import given
from hypothesis import strategies as st

from ampplan.solver.assembly import layout_of
from ampplan.circuit import Circuit
from ampplan.devices import FIELDS as DEVICE_FIELDS
from ampplan.devices import PRESETS, Transistor
from ampplan.errors import InvalidValueError, PlanFileError
from ampplan.plan import PLAN_PARAMETERS, Plan
from ampplan.record import (FORMAT, MAX_FILE_BYTES, MAX_PROBLEMS, PLAN_SCHEMA, PLAN_SCHEMAS, VERSION, load_plan,
                            plan_from_dict, plan_to_dict, read_plan_file, save_plan)
from ampplan.stages import TEMPLATES, CommonBase, CommonCollector, CommonEmitter, CustomStage


# ------------------------------------------------------------------------------------------------
# A plan touching every kind of stage and every kind of value (None, inf, PNP, custom elements).
# Values are round E-series numbers chosen only to exercise the file format.
# ------------------------------------------------------------------------------------------------

def every_kind_plan() -> Plan:
    npn = Transistor(polarity="npn", beta=150.0)                        # early_voltage = inf
    pnp = PRESETS["general-purpose small-signal PNP"]                   # ratings set, finite V_A
    odd = Transistor(polarity="npn", beta=80.0, vbe_on=0.65, vbc_on=0.55, early_voltage=75.0,
                     saturation_current=2.5e-15, max_power=0.3)
    plan = Plan(supply=15.0, negative_supply=-5.0, source_resistance=600.0, load_resistance=None,
                temperature=40.0, load_coupling="direct", resistor_power_rating=0.125, min_headroom=0.5,
                coupling_capacitance=4.7e-6, bypass_capacitance=None)
    plan.add(CommonEmitter(rb1=47e3, rb2=10e3, rc=4.7e3, re=220.0, re_bypassed=820.0, c_bypass=100e-6,
                           device=npn), coupling="capacitor")
    plan.add(CommonEmitter(rb1=None, rb2=None, rc=2.2e3, re=470.0, device=pnp), coupling="direct")
    plan.add(CommonBase(rb1=33e3, rb2=12e3, rc=3.3e3, re=1.5e3, device=odd), coupling="capacitor")
    c = Circuit()
    c.resistor("r_top", "supply", "in", 100e3)
    c.resistor("r_bottom", "in", "lower", 22e3)
    c.resistor("r_emitter", "out", "gnd", 1e3)
    c.capacitor("c_spare", "in", "gnd", None)
    c.current_source("i_bleed", "supply", "out", 1e-4)
    c.voltage_source("v_offset", "aux", "gnd", 1.5)
    c.resistor("r_aux", "aux", "gnd", 10e3)
    c.bjt("q", "supply", "in", "out", odd)
    plan.add(CustomStage(circuit=c, input="in", output="out", transistor="q"), coupling="capacitor")
    plan.add(CommonCollector(rb1=None, rb2=None, re=1e3, rc=None, device=npn), coupling="direct")
    return plan


@pytest.fixture
def document():
    """A valid plan file as a dict."""
    return plan_to_dict(every_kind_plan(), description="every kind of stage")


def write(path: Path, data) -> Path:
    path.write_text(json.dumps(data, indent=2, ensure_ascii=False), encoding="utf-8")
    return path


# ------------------------------------------------------------------------------------------------
# Round trips
# ------------------------------------------------------------------------------------------------

def test_round_trip_is_exact(tmp_path):
    plan = every_kind_plan()
    path = tmp_path / "plan.json"
    plan.description = "every kind of stage"
    save_plan(plan, path)
    loaded = load_plan(path)
    assert loaded.description == "every kind of stage"     # the description is kept on the plan
    assert plan_to_dict(loaded) == plan_to_dict(plan)
    # A second save writes the same bytes: nothing drifts on a load/save cycle.
    again = tmp_path / "again.json"
    save_plan(loaded, again)
    assert again.read_bytes() == path.read_bytes()


def test_plan_save_and_load_methods(tmp_path):
    plan = every_kind_plan()
    plan.save(tmp_path / "p.json")
    assert plan_to_dict(Plan.load(tmp_path / "p.json")) == plan_to_dict(plan)


def test_file_layout(tmp_path, document):
    save_plan(every_kind_plan(), tmp_path / "p.json")
    data = json.loads((tmp_path / "p.json").read_text(encoding="utf-8"))
    assert data["format"] == FORMAT and data["version"] == VERSION
    assert "description" not in data                     # only written when given
    assert data["stages"][0]["device"]["early_voltage"] == "inf"   # JSON has no infinity (RFC 8259)
    assert data["stages"][1]["device"]["polarity"] == "pnp"
    assert data["stages"][1]["rb1"] is None
    assert data["load_resistance"] is None
    custom = data["stages"][3]
    assert custom["kind"] == "custom" and custom["transistor"] == "q"
    assert [e["type"] for e in custom["elements"]] == ["resistor", "resistor", "resistor", "capacitor",
                                                      "current_source", "voltage_source", "resistor",
                                                      "transistor"]
    assert custom["elements"][-1]["nodes"] == ["supply", "in", "out"]    # collector, base, emitter
    assert "value" not in custom["elements"][-1] and "device" in custom["elements"][-1]


def test_infinity_comes_back_as_infinity(tmp_path):
    save_plan(every_kind_plan(), tmp_path / "p.json")
    plan = load_plan(tmp_path / "p.json")
    assert math.isinf(plan.stage("s1").device.early_voltage)
    assert plan.stage("s3").device.early_voltage == 75.0


# Python floats read back exactly from their repr (Python docs, floating point tutorial, from memory).
positive = st.floats(min_value=1e-6, max_value=1e9, allow_nan=False, allow_infinity=False)


@given(rc=positive, re=positive, rb1=positive, beta=st.floats(1.0, 1e3), supply=st.floats(0.1, 100.0),
       vbe=st.floats(0.1, 1.0), early=st.one_of(st.just(math.inf), positive))
def test_round_trip_of_arbitrary_floats_is_bit_exact(rc, re, rb1, beta, supply, vbe, early):
    plan = Plan(supply=supply)
    plan.add(CommonEmitter(rb1=rb1, rb2=None, rc=rc, re=re,
                           device=Transistor(beta=beta, vbe_on=vbe, early_voltage=early)))
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "p.json"
        save_plan(plan, path)
        loaded = load_plan(path)
    for address in ("supply", "s1.rc", "s1.re", "s1.rb1", "s1.device.beta", "s1.device.vbe_on",
                    "s1.device.early_voltage"):
        assert loaded.get(address) == plan.get(address), address
    assert plan_to_dict(loaded) == plan_to_dict(plan)


# ------------------------------------------------------------------------------------------------
# The schema: generated from the declarations, checked by jsonschema itself
# ------------------------------------------------------------------------------------------------

def test_schemas_are_valid_draft_2020_12():
    # Checked by the jsonschema library itself (the module no longer checks at import time).
    for schema in PLAN_SCHEMAS.values():
        jsonschema.Draft202012Validator.check_schema(schema)


def test_files_we_write_pass_jsonschema_directly(document):
    jsonschema.validate(json.loads(json.dumps(document)), PLAN_SCHEMA,
                        cls=jsonschema.Draft202012Validator)


def _bound_cases():
    """(template, parameter, value at a hard bound, value just beyond it) for every declared bound."""
    for kind, cls in TEMPLATES.items():
        for p in cls.PARAMETERS:
            if math.isfinite(p.maximum):
                yield kind, p.name, p.maximum, p.maximum * 1.001
            if p.minimum_inclusive:
                yield kind, p.name, p.minimum, p.minimum * 0.999 if p.minimum > 0 else -1e-3
            else:
                yield kind, p.name, None, p.minimum


@pytest.mark.parametrize("kind, name, inside, beyond", list(_bound_cases()))
def test_schema_holds_every_declared_bound(document, kind, name, inside, beyond):
    # jsonschema (an outside library) must accept a value at each declared bound and refuse one
    # just beyond it, at the parameter's path: the generated schema carries the declarations'
    # bounds, not only their names.
    k = next(i for i, stage in enumerate(document["stages"]) if stage["kind"] == kind)
    validator = jsonschema.Draft202012Validator(PLAN_SCHEMA)
    data = copy.deepcopy(document)
    if inside is not None:
        data["stages"][k][name] = inside
        assert not list(validator.iter_errors(data)), (kind, name, inside)
    data["stages"][k][name] = beyond
    assert any(tuple(e.absolute_path) == ("stages", k, name) or
               any(tuple(c.absolute_path) == ("stages", k, name) for c in (e.context or ()))
               for e in validator.iter_errors(data)), (kind, name, beyond)


def test_schema_requires_every_declared_value(document):
    validator = jsonschema.Draft202012Validator(PLAN_SCHEMA)
    for k, stage in enumerate(document["stages"]):
        for name in [n for n in stage if n != "kind"]:
            data = copy.deepcopy(document)
            del data["stages"][k][name]
            assert list(validator.iter_errors(data)), (k, name)
    for name in [*PLAN_PARAMETERS, "load_coupling", "stages"]:
        data = copy.deepcopy(document)
        del data[name]
        assert list(validator.iter_errors(data)), name
    data = copy.deepcopy(document)
    del data["description"]
    assert not list(validator.iter_errors(data))          # the one value that may be left out


# ------------------------------------------------------------------------------------------------
# Malformed files: a table with stable ids; each must name the file and the JSON path at fault.
# ------------------------------------------------------------------------------------------------

def _set(*path_and_value):
    *path, value = path_and_value

    def mutate(d):
        for key in path[:-1]:
            d = d[key]
        d[path[-1]] = value
    return mutate


def _drop(*path):
    def mutate(d):
        for key in path[:-1]:
            d = d[key]
        del d[path[-1]]
    return mutate


MALFORMED = [
    # id, mutation of a valid document, text (or texts) the message must contain
    ("negative-resistor", _set("stages", 1, "rc", -4700),
     "stages[1].rc: must be >= 1 µΩ and <= 1 TΩ, got -4700"),
    ("zero-resistor", _set("stages", 0, "re", 0), "stages[0].re: must be >= 1 µΩ and <= 1 TΩ, got 0"),
    ("negative-optional-resistor", _set("stages", 4, "rb1", -1.5),
     "stages[4].rb1: must be >= 1 µΩ and <= 1 TΩ, got -1.5"),
    # Resistances take their bounds from circuit.RESISTANCE_RANGE (1 µΩ to 1 TΩ) everywhere.
    ("tiny-resistor", _set("stages", 0, "rc", 1e-9), "stages[0].rc: must be >= 1 µΩ and <= 1 TΩ, got 1e-09"),
    ("huge-load", _set("load_resistance", 1e13),
     "load_resistance: must be >= 1 µΩ and <= 1 TΩ, got 10000000000000"),
    ("tiny-source-resistance", _set("source_resistance", 1e-9),
     "source_resistance: must be 0 (an ideal source) or >= 1 µΩ, got 1e-09"),
    ("text-for-number", _set("stages", 0, "rc", "4.7k"), 'stages[0].rc: must be a number, got "4.7k"'),
    ("boolean-for-number", _set("supply", True), "supply: must be a number, got true"),
    ("null-for-required", _set("stages", 0, "rc", None), "stages[0].rc: must be a number, got null"),
    ("list-for-number", _set("temperature", [25]), "temperature: must be a number, got a list"),
    ("missing-stage-field", _drop("stages", 0, "rc"), "stages[0]: missing key 'rc'"),
    ("missing-plan-field", _drop("supply"), "top level: missing key 'supply'"),
    ("missing-device-field", _drop("stages", 2, "device", "beta"), "stages[2].device: missing key 'beta'"),
    ("missing-device", _drop("stages", 0, "device"), "stages[0]: missing key 'device'"),
    ("missing-kind", _drop("stages", 1, "kind"), "stages[1]: missing key 'kind'"),
    ("unknown-stage-key", _set("stages", 0, "rcc", 1000), "stages[0]: unknown key 'rcc'; did you mean 'rc'?"),
    ("unknown-top-key", _set("suply", 12), "top level: unknown key 'suply'; did you mean 'supply'?"),
    ("unknown-device-key", _set("stages", 0, "device", "hfe", 100), "stages[0].device: unknown key 'hfe'"),
    ("unknown-kind", _set("stages", 0, "kind", "common-emiter"), 'stages[0].kind: must be one of'),
    ("bad-polarity", _set("stages", 0, "device", "polarity", "nnp"), 'stages[0].device.polarity: must be one of'),
    ("bad-coupling", _set("stages", 0, "coupling", "inductor"), "stages[0].coupling: must be one of"),
    ("bad-load-coupling", _set("load_coupling", 3), "load_coupling: must be one of"),
    ("negative-beta", _set("stages", 0, "device", "beta", -3), "stages[0].device.beta: must be > 0, got -3"),
    ("bad-infinity-word", _set("stages", 0, "device", "early_voltage", "infinite"),
     'stages[0].device.early_voltage: must be a number > 0 V or "inf", got "infinite"'),
    ("null-early-voltage", _set("stages", 0, "device", "early_voltage", None),
     "stages[0].device.early_voltage: must be a number > 0 V or \"inf\", got null"),
    ("infinite-resistor", _set("stages", 0, "rc", "inf"), 'stages[0].rc: must be a number, got "inf"'),
    ("temperature-below-absolute-zero", _set("temperature", -300), "temperature: must be >= -55 °C and <= 150 °C"),
    ("temperature-above-range", _set("temperature", 300), "temperature: must be >= -55 °C and <= 150 °C, got 300"),
    ("stages-not-a-list", _set("stages", {"s1": {}}), "stages: must be a list, got an object"),
    ("stage-not-an-object", _set("stages", 2, 7), "stages[2]: must be an object, got 7"),
    ("description-not-text", _set("description", 5), "description: must be text, got 5"),
    # Found by the constructors, re-addressed to the JSON path.
    ("positive-lower-rail", _set("negative_supply", 5), ("negative_supply: must be >= -10 kV and <= 0 V, got 5", "got 5")),
    ("zero-supply", _set("supply", 0), ("supply: must be > 0 V", "got 0")),
    ("negative-source-resistance", _set("source_resistance", -50), ("source_resistance: must be ", "got -50")),
    ("capacitor-coupled-without-bias", _set("stages", 1, "coupling", "capacitor"),
     "stages[1]: a capacitor-coupled CommonEmitter needs its own base bias"),
    ("common-base-without-divider", _set("stages", 2, "rb2", None), "stages[2]: CommonBase needs both rb1 and rb2"),
    # Custom stages.
    ("custom-element-type", _set("stages", 3, "elements", 0, "type", "diode"),
     'stages[3].elements[0].type: must be one of "resistor"'),
    ("custom-node-count", _set("stages", 3, "elements", 7, "nodes", ["a", "b"]),
     "stages[3].elements[7].nodes: must list 3 nodes (collector, base, emitter), got 2"),
    ("custom-negative-resistor", _set("stages", 3, "elements", 0, "value", -5),
     "stages[3].elements[0].value: must be >= 1 µΩ and <= 1 TΩ, got -5"),
    ("custom-transistor-without-device", _drop("stages", 3, "elements", 7, "device"),
     "stages[3].elements[7]: missing key 'device'"),
    ("custom-value-on-transistor", _set("stages", 3, "elements", 7, "value", 1.0),
     "stages[3].elements[7]: unknown key 'value'"),
    ("custom-unknown-output", _set("stages", 3, "output", "nowhere"),
     "stages[3].output: the stage circuit has no node 'nowhere'"),
    ("custom-unknown-transistor", _set("stages", 3, "transistor", "q9"),
     "stages[3].transistor: the stage circuit has no transistor 'q9'"),
    ("custom-duplicate-name", _set("stages", 3, "elements", 1, "name", "r_top"),
     "stages[3].elements[1]: an element named 'r_top' already exists"),
    ("custom-empty-node", _set("stages", 3, "elements", 0, "nodes", ["", "in"]),
     "stages[3].elements[0].nodes[0]: must not be empty"),
    # The header.
    ("wrong-format", _set("format", "some-other-format"),
     'format: expected "ampplan-plan", got "some-other-format"; this is not an ampplan plan file'),
    ("missing-format", _drop("format"), "format: missing; this is not an ampplan plan file"),
    ("newer-version", _set("version", VERSION + 1),
     f"written by a newer ampplan (format version {VERSION + 1}; this ampplan reads up to {VERSION})"),
    ("version-zero", _set("version", 0), "version: got 0; this ampplan reads format version"),
    ("version-as-text", _set("version", "1"), 'version: must be a whole number, got "1"'),
    ("missing-version", _drop("version"), "version: missing"),
]


@pytest.mark.parametrize("mutate, expected", [pytest.param(m, e, id=i) for i, m, e in MALFORMED])
def test_malformed_document(tmp_path, document, mutate, expected):
    data = copy.deepcopy(document)
    mutate(data)
    path = write(tmp_path / "bad.json", data)
    with pytest.raises(PlanFileError) as info:
        load_plan(path)
    message = str(info.value)
    assert str(path) in message
    for text in (expected,) if isinstance(expected, str) else expected:
        assert text in message
    assert "Traceback" not in message


RAW = [
    # id, file bytes, text the message must contain
    ("truncated", None, "not valid JSON: line"),
    ("empty", b"", "not valid JSON: line 1 column 1"),
    ("nan-literal", b'{"format": "ampplan-plan",\n "version": 1, "supply": NaN}',
     "line 2 column 26: NaN is not allowed in a plan file"),
    ("infinity-literal", b'{"format": "ampplan-plan", "supply": -Infinity}',
     "line 1 column 38: -Infinity is not allowed"),
    ("overflowing-number", None, "supply: number too large"),
    ("huge-integer", b'{"format": "ampplan-plan", "version": 1, "supply": ' + b"9" * 5000 + b"}",
     "supply: a number written with 5000 characters; a plan file's numbers have at most 40"),
    ("not-an-object", b"[1, 2, 3]", "a plan file holds one JSON object at the top level, got a list"),
    ("not-utf8", b'{"format": "ampplan-plan", "description": "\xff\xfe"}', "not UTF-8 text"),
    ("duplicate-key", None, "stages[0]: key 'rc' appears more than once"),
    ("trailing-garbage", None, "not valid JSON"),
    ("python-literal", b"{'format': 'ampplan-plan'}", "not valid JSON: line 1 column 2"),
    ("nested-too-deeply", b'{"format": "ampplan-plan", "version": 1, "description": ' + b"[" * 100_000
     + b"]" * 100_000 + b"}", "not a readable plan file"),
]


def _raw_bytes(case: str, document) -> bytes:
    text = json.dumps(document, indent=2, ensure_ascii=False)
    if case == "truncated":
        return text[: len(text) // 2].encode()
    if case == "overflowing-number":
        return text.replace('"supply": 15.0', '"supply": 1e400').encode()
    if case == "duplicate-key":
        return text.replace('"rc": 4700.0,', '"rc": 4700.0, "rc": 3300.0,', 1).encode()
    if case == "trailing-garbage":
        return (text + "\n}").encode()
    raise KeyError(case)


@pytest.mark.parametrize("case, content, expected", [pytest.param(i, c, e, id=i) for i, c, e in RAW])
def test_malformed_text(tmp_path, document, case, content, expected):
    path = tmp_path / "bad.json"
    path.write_bytes(content if content is not None else _raw_bytes(case, document))
    with pytest.raises(PlanFileError) as info:
        load_plan(path)
    assert str(path) in str(info.value)
    assert expected in str(info.value)


def test_truncated_file_says_where_and_why(tmp_path, document):
    path = tmp_path / "cut.json"
    path.write_text(json.dumps(document, indent=2)[:200], encoding="utf-8")
    message = str(pytest.raises(PlanFileError, load_plan, path).value)
    assert "line" in message and "column" in message and "truncated" in message


def test_huge_file_is_refused_before_parsing(tmp_path, document):
    data = dict(document, description="x" * MAX_FILE_BYTES)
    path = write(tmp_path / "huge.json", data)
    message = str(pytest.raises(PlanFileError, load_plan, path).value)
    assert str(path) in message and "larger than" in message and "refusing" in message


def test_every_problem_is_listed(tmp_path, document):
    data = copy.deepcopy(document)
    data["stages"][0]["rc"] = -1
    data["stages"][2]["re"] = "1k"
    data["supply"] = "12 V"
    data["stages"][1]["extra"] = 1
    message = str(pytest.raises(PlanFileError, load_plan, write(tmp_path / "p.json", data)).value)
    assert "4 problems" in message
    # In the order they appear in the file.
    order = [message.index(s) for s in ("supply:", "stages[0].rc:", "stages[1]: unknown key 'extra'",
                                        "stages[2].re:")]
    assert order == sorted(order)


def test_long_lists_of_problems_are_cut(tmp_path, document):
    data = copy.deepcopy(document)
    for name in list(data["stages"][0]["device"])[1:]:
        data["stages"][0]["device"][name] = "?"
    count = len(data["stages"][0]["device"]) - 1
    message = str(pytest.raises(PlanFileError, load_plan, write(tmp_path / "p.json", data)).value)
    assert f"{count} problems" in message
    assert f"... and {count - MAX_PROBLEMS} more" in message


def test_missing_file_and_directory(tmp_path):
    message = str(pytest.raises(PlanFileError, load_plan, tmp_path / "absent.json").value)
    assert str(tmp_path / "absent.json") in message and "cannot read" in message
    message = str(pytest.raises(PlanFileError, load_plan, tmp_path).value)
    assert message == f"{tmp_path}: not a regular file (a directory); a plan file is a regular file"


def test_plan_from_dict_names_its_source(document):
    data = copy.deepcopy(document)
    data["stages"][0]["rc"] = -4700
    message = str(pytest.raises(PlanFileError, plan_from_dict, data, source="pasted plan").value)
    assert message == "pasted plan: stages[0].rc: must be >= 1 µΩ and <= 1 TΩ, got -4700"


def test_read_plan_file_returns_the_validated_dict(tmp_path, document):
    path = write(tmp_path / "p.json", document)
    assert read_plan_file(path) == json.loads(path.read_text(encoding="utf-8"))


# ------------------------------------------------------------------------------------------------
# Atomic writes: a failed save changes nothing and leaves no temporary file
# ------------------------------------------------------------------------------------------------

def _original(tmp_path) -> tuple[Path, bytes]:
    path = tmp_path / "plan.json"
    path.write_text("original content, not even JSON\n", encoding="utf-8")
    return path, path.read_bytes()


def _boom(*args, **kwargs):
    raise OSError(28, "No space left on device")


@pytest.mark.parametrize("target", ["_write", "os.replace", "os.fsync"])
def test_failed_save_leaves_the_original(tmp_path, monkeypatch, target):
    path, before = _original(tmp_path)
    monkeypatch.setattr(f"ampplan.record.files.{target}", _boom)
    with pytest.raises(PlanFileError) as info:
        save_plan(every_kind_plan(), path)
    monkeypatch.undo()
    assert str(path) in str(info.value) and "No space left on device" in str(info.value)
    assert path.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["plan.json"]


def test_failed_save_of_a_new_file_creates_nothing(tmp_path, monkeypatch):
    def half_written(f, text):
        f.write(text[:30])
        raise ValueError("Out of range float values are not JSON compliant")
    monkeypatch.setattr("ampplan.record.files._write", half_written)
    with pytest.raises(PlanFileError):
        save_plan(every_kind_plan(), tmp_path / "new.json")
    assert list(tmp_path.iterdir()) == []


def test_interrupted_save_cleans_up_and_passes_the_interrupt_on(tmp_path, monkeypatch):
    path, before = _original(tmp_path)

    def interrupt(*args, **kwargs):
        raise KeyboardInterrupt
    monkeypatch.setattr("ampplan.record.files.os.replace", interrupt)
    with pytest.raises(KeyboardInterrupt):
        save_plan(every_kind_plan(), path)
    assert path.read_bytes() == before
    assert [p.name for p in tmp_path.iterdir()] == ["plan.json"]


def test_save_into_a_missing_directory(tmp_path):
    path = tmp_path / "no" / "such" / "dir" / "plan.json"
    message = str(pytest.raises(PlanFileError, save_plan, every_kind_plan(), path).value)
    assert str(path) in message and "cannot write" in message


def test_save_replaces_and_keeps_permissions(tmp_path):
    path, _ = _original(tmp_path)
    os.chmod(path, 0o640)
    save_plan(every_kind_plan(), path)
    assert stat.S_IMODE(os.stat(path).st_mode) == 0o640
    assert plan_to_dict(load_plan(path)) == plan_to_dict(every_kind_plan())
    assert [p.name for p in tmp_path.iterdir()] == ["plan.json"]


def test_save_refuses_a_non_plan(tmp_path):
    with pytest.raises(InvalidValueError, match="expects an ampplan Plan, got dict"):
        save_plan({"supply": 12}, tmp_path / "p.json")
    assert list(tmp_path.iterdir()) == []


# ------------------------------------------------------------------------------------------------
# Nothing unloadable is written; vbc_on "same as vbe_on" is kept as null
# ------------------------------------------------------------------------------------------------

def _plan_holding(value) -> Plan:
    """A plan whose stage holds an rc that skipped validation (as an object patched in memory would)."""
    plan = Plan()
    plan.add(CommonEmitter(rb1=47e3, rb2=10e3, rc=4.7e3, re=1e3))
    object.__setattr__(plan.stage("s1"), "rc", value)
    return plan


@pytest.mark.parametrize("value, expected", [
    pytest.param(1e-9, "stages[0].rc: must be >= 1 µΩ and <= 1 TΩ, got 1e-09", id="below-range"),
    pytest.param("4.7k", 'stages[0].rc: must be a number, got "4.7k"', id="text"),
])
def test_save_refuses_a_plan_that_would_not_load(tmp_path, value, expected):
    # A new file is not created, and an old one keeps its content (the check comes before writing).
    for path in (tmp_path / "new.json", _original(tmp_path)[0]):
        before = path.read_bytes() if path.exists() else None
        message = str(pytest.raises(PlanFileError, save_plan, _plan_holding(value), path).value)
        assert str(path) in message and "not written" in message and expected in message
        assert (path.read_bytes() if path.exists() else None) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["plan.json"]


def test_save_refuses_what_only_the_constructors_catch(tmp_path):
    # The schema allows rb1 = rb2 = null; plan.add does not, for a capacitor-coupled stage.
    plan = Plan()
    plan.add(CommonEmitter(rb1=47e3, rb2=10e3, rc=4.7e3, re=1e3))
    object.__setattr__(plan.stage("s1"), "rb1", None)
    object.__setattr__(plan.stage("s1"), "rb2", None)
    path = tmp_path / "p.json"
    message = str(pytest.raises(PlanFileError, save_plan, plan, path).value)
    assert str(path) in message and "stages[0]: a capacitor-coupled CommonEmitter needs its own base bias" in message
    assert not path.exists()


def test_vbc_on_same_as_vbe_on_is_stored_as_null(tmp_path):
    plan = Plan()
    plan.add(CommonEmitter(rb1=47e3, rb2=10e3, rc=4.7e3, re=1e3, device=Transistor().replace(vbe_on=0.65)))
    path = tmp_path / "p.json"
    save_plan(plan, path)
    data = json.loads(path.read_text(encoding="utf-8"))
    assert data["stages"][0]["device"]["vbc_on"] is None and data["stages"][0]["device"]["vbe_on"] == 0.65
    loaded = load_plan(path)
    assert loaded.get("s1.device.vbc_on") is None
    loaded.set("s1.device.vbe_on", 0.6)                       # still follows vbe_on after loading
    assert layout_of(loaded.compile().circuit).parameters().device["vbc_on"].tolist() == [[0.6]]

"""Stable stage ids: given once, kept through remove and move, stored in plan files (version 2).

The checks here are about bookkeeping, so their reference is the plan itself: a stage's values
before and after an edit, compared through its id; and the version-1 file written by the
previous format (``tests/data/plan_version_1.json``, the demo as version 1 stored it), which must
load with ids that follow positions and come back as version 2.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from ampplan import CommonCollector, CommonEmitter, Plan, Transistor
from ampplan.errors import DuplicateNameError, InvalidValueError, PlanFileError, UnknownNameError
from ampplan.plan import MAX_STAGES, check_stage_id
from ampplan.record import VERSION, load_plan, plan_from_dict, plan_to_dict, save_plan

VERSION_1_FILE = Path(__file__).parent / "data" / "plan_version_1.json"


def chain(n: int = 3) -> Plan:
    """n divider-biased common-emitter stages with different collector resistors (to tell them apart)."""
    plan = Plan(supply=12.0)
    for k in range(n):
        plan.add(CommonEmitter(rb1=100e3, rb2=22e3, rc=3.3e3 + 100.0 * k, re=1e3))
    return plan


def test_remove_keeps_the_other_ids():
    plan = chain(3)
    before = {sid: plan.get(f"{sid}.rc") for sid in plan.stage_ids}
    plan.remove("s1")
    assert plan.stage_ids == ("s2", "s3")
    # "s2" still names the stage it named before the removal (it used to become the old s3).
    assert {sid: plan.get(f"{sid}.rc") for sid in plan.stage_ids} == {"s2": before["s2"], "s3": before["s3"]}
    with pytest.raises(UnknownNameError, match="no stage 's1'; its stages are s2, s3"):
        plan.get("s1.rc")


def test_removed_ids_are_never_given_again():
    plan = chain(3)
    plan.remove("s3")
    plan.remove("s2")
    assert plan.add(CommonEmitter(rb1=100e3, rb2=22e3)) == "s4"


def test_move_changes_the_order_not_the_ids():
    plan = chain(3)
    rc = {sid: plan.get(f"{sid}.rc") for sid in plan.stage_ids}
    plan.move("s3", 0)
    assert plan.stage_ids == ("s3", "s1", "s2")
    plan.move("s1", -1)
    assert plan.stage_ids == ("s3", "s2", "s1")
    assert {sid: plan.get(f"{sid}.rc") for sid in plan.stage_ids} == rc
    # The compiled chain follows the new order: the source drives s3 first, and element names
    # carry the ids, not the positions.
    compiled = plan.compile()
    assert [nodes.transistor for nodes in compiled.stages] == ["s3_q", "s2_q", "s1_q"]
    assert compiled.circuit.element("s3_coupling").a == "emf"          # an ideal source: no source_out
    assert compiled.circuit.element("s1_coupling").a == "s2_c"
    result = plan.solve()
    assert [s.id for s in result.stages] == ["s3", "s2", "s1"]


@pytest.mark.parametrize("position, expected", [(1.0, "whole number"), (True, "whole number"),
                                                ("0", "whole number"), (3, "runs from 0 to 2"),
                                                (-4, "runs from 0 to 2")])
def test_move_refuses_a_bad_position(position, expected):
    plan = chain(3)
    with pytest.raises(InvalidValueError, match=expected):
        plan.move("s2", position)
    assert plan.stage_ids == ("s1", "s2", "s3")


def test_move_of_an_unknown_stage():
    with pytest.raises(UnknownNameError, match="no stage 's9'"):
        chain(2).move("s9", 0)


def test_ids_of_your_own():
    plan = Plan()
    assert plan.add(CommonEmitter(rb1=100e3, rb2=22e3), id="input") == "input"
    assert plan.add(CommonCollector(re=2.2e3), coupling="direct", id="buffer") == "buffer"
    assert plan.add(CommonCollector(re=1e3), coupling="direct") == "s1"
    plan.set("input.rc", 3.9e3)
    assert plan.stage("input").rc == 3.9e3
    circuit = plan.compile().circuit
    assert circuit.element("input_rc").resistance == 3.9e3
    assert circuit.element("buffer_q").base == "input_c"
    # An automatic id never lands on one given: "s5" given, the next automatic one is "s6".
    plan.add(CommonCollector(re=1e3), coupling="direct", id="s5")
    assert plan.add(CommonCollector(re=1e3), coupling="direct") == "s6"


@pytest.mark.parametrize("sid, error, expected", [
    (5, InvalidValueError, "a stage id is text"),
    (["input2"], InvalidValueError, "a stage id is text"),
    ("", InvalidValueError, "must be a letter followed by"),
    ("2nd", InvalidValueError, "must be a letter followed by"),
    ("in.put", InvalidValueError, "must be a letter followed by"),
    ("in put", InvalidValueError, "must be a letter followed by"),
    ("x" * 33, InvalidValueError, "at most 32 characters"),
    ("supply", InvalidValueError, "clashes with the plan's own name 'supply'"),
    ("load", InvalidValueError, "clashes with the plan's own name 'load'"),
    ("source", InvalidValueError, "clashes with the plan's own name 'source'"),
    ("negative", InvalidValueError, "clashes with the plan's own name 'negative_supply'"),
    ("gnd", InvalidValueError, "clashes with the plan's own name 'gnd'"),
    ("vcc_stage", InvalidValueError, "clashes with the plan's own name 'vcc'"),
    ("input", DuplicateNameError, "already has a stage with this id"),
    ("input_b", DuplicateNameError, "too close to the stage id 'input'"),
])
def test_bad_ids_are_refused_naming_the_id(sid, error, expected):
    plan = Plan()
    plan.add(CommonEmitter(rb1=100e3, rb2=22e3), id="input")
    with pytest.raises(error, match=expected):
        plan.add(CommonEmitter(rb1=100e3, rb2=22e3), id=sid)
    assert plan.stage_ids == ("input",)


def test_check_stage_id_accepts_an_identifier():
    assert check_stage_id("first_stage", taken=("input",)) == "first_stage"


def test_a_plan_holds_at_most_max_stages():
    plan = Plan()
    for _ in range(MAX_STAGES):
        plan.add(CommonCollector(re=1e3), coupling="direct")
    with pytest.raises(InvalidValueError, match=f"already holds {MAX_STAGES} stages"):
        plan.add(CommonCollector(re=1e3), coupling="direct")


# ------------------------------------------------------------------------------------------------
# Plan files
# ------------------------------------------------------------------------------------------------

def test_ids_are_stored_and_read_back(tmp_path):
    plan = chain(3)
    plan.remove("s1")
    plan.add(CommonEmitter(rb1=100e3, rb2=22e3, rc=1.5e3), id="driver")
    plan.move("driver", 0)
    save_plan(plan, tmp_path / "p.json")
    data = json.loads((tmp_path / "p.json").read_text(encoding="utf-8"))
    assert data["version"] == VERSION == 2
    assert [s["id"] for s in data["stages"]] == ["driver", "s2", "s3"]
    loaded = load_plan(tmp_path / "p.json")
    assert loaded.stage_ids == ("driver", "s2", "s3")
    assert loaded.get("driver.rc") == 1.5e3
    assert plan_to_dict(loaded) == plan_to_dict(plan)
    # Numbering continues after the highest "s<n>" of the file.
    assert loaded.add(CommonCollector(re=1e3), coupling="direct") == "s4"


def test_version_1_file_loads_with_ids_by_position_and_is_written_back_as_version_2(tmp_path):
    old = json.loads(VERSION_1_FILE.read_text(encoding="utf-8"))
    assert old["version"] == 1 and all("id" not in s for s in old["stages"])
    plan = load_plan(VERSION_1_FILE)
    assert plan.stage_ids == ("s1", "s2", "s3")
    for k, raw in enumerate(old["stages"], start=1):
        assert plan.get(f"s{k}.coupling") == raw["coupling"]
        assert plan.get(f"s{k}.rc") == raw["rc"]
        assert plan.get(f"s{k}.device.beta") == raw["device"]["beta"]
    save_plan(plan, tmp_path / "upgraded.json")
    new = json.loads((tmp_path / "upgraded.json").read_text(encoding="utf-8"))
    assert new["version"] == 2
    assert [s.pop("id") for s in new["stages"]] == ["s1", "s2", "s3"]
    del new["version"], old["version"]
    assert new == old          # nothing else changed


def _document(tmp_path, mutate) -> Path:
    data = plan_to_dict(chain(2))
    mutate(data)
    path = tmp_path / "p.json"
    path.write_text(json.dumps(data), encoding="utf-8")
    return path


@pytest.mark.parametrize("case, mutate, expected", [
    ("v2 without an id", lambda d: d["stages"][1].pop("id"), r"stages\[1\]: missing key 'id'"),
    ("v1 with an id", lambda d: d.update(version=1), r"stages\[0\]: unknown key 'id'"),
    ("duplicate ids", lambda d: d["stages"][1].update(id="s1"),
     r"stages\[1\]\.id: the plan already has a stage with this id"),
    ("id not an identifier", lambda d: d["stages"][0].update(id="first stage"),
     r"stages\[0\]\.id: must be a letter followed by"),
    ("id of a plan value", lambda d: d["stages"][0].update(id="temperature"),
     r"stages\[0\]\.id: clashes with the plan's own name 'temperature'"),
    ("id not text", lambda d: d["stages"][0].update(id=7), r"stages\[0\]\.id: must be text, got 7"),
    ("id too long", lambda d: d["stages"][0].update(id="a" * 40), r"stages\[0\]\.id: "),
])
def test_bad_ids_in_a_file_name_their_json_path(tmp_path, case, mutate, expected):
    path = _document(tmp_path, mutate)
    with pytest.raises(PlanFileError, match=expected):
        load_plan(path)


def test_plan_from_dict_of_a_version_1_dict():
    data = plan_to_dict(chain(2))
    data["version"] = 1
    for stage in data["stages"]:
        del stage["id"]
    assert plan_from_dict(data).stage_ids == ("s1", "s2")


def test_results_and_messages_use_the_ids():
    plan = Plan(supply=12.0)
    plan.add(CommonEmitter(rb1=100e3, rb2=22e3, rc=3.3e3, re=1e3, device=Transistor(beta=150.0)), id="front")
    plan.add(CommonCollector(re=2.2e3), coupling="direct", id="follower")
    result = plan.solve()
    assert [s.id for s in result.stages] == ["front", "follower"]
    plan.set("front.rb1", None)
    with pytest.raises(InvalidValueError, match="front: a capacitor-coupled CommonEmitter needs its own base"):
        plan.set("front.rb2", None)

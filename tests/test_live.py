"""The observable live plan (ampplan.live), without Jupyter.

What is checked against the outside: each result the live plan holds equals an independent
``plan.solve()`` of a copy of the same plan (the solver's own answer, itself checked against
textbook formulas and sympy elsewhere); the rest is behaviour (one solve per accepted value,
refusals leave the plan unchanged, unsettled plans keep the last good result, undo/redo,
observers), checked by counting and comparing plan files.
"""

from __future__ import annotations

import pytest

import ampplan
from ampplan import errors
from ampplan.live import Change, ObservablePlan
from ampplan.record import plan_to_dict


def state(plan):
    return plan_to_dict(plan)


def same_result(a, b):
    assert [s.transistor.ic for s in a.stages] == pytest.approx([s.transistor.ic for s in b.stages], rel=1e-12)
    assert a.gain == pytest.approx(b.gain, rel=1e-12)


@pytest.fixture
def live():
    return ObservablePlan.demo()


def test_demo_is_solved_once_and_agrees_with_a_plain_solve(live):
    assert live.solve_count == 1 and live.status.ok and live.result_is_current
    same_result(live.result, live.plan.copy().solve())
    assert live.stage_ids == ("s1", "s2", "s3")


def test_one_solve_per_accepted_value_and_the_result_follows(live):
    seen = []
    live.observe(seen.append)
    live.set("s1.rc", 3.3e3)
    assert live.solve_count == 2 and len(seen) == 1 and seen[0] is live.result
    assert live.plan.get("s1.rc") == 3.3e3
    same_result(live.result, live.plan.copy().solve())
    live.set("s1.rc", 3.3e3)  # the value it already holds: nothing to do
    assert live.solve_count == 2 and len(seen) == 1


def test_refused_value_leaves_the_plan_unchanged_and_is_reported(live):
    before, result = state(live.plan), live.result
    changes = []
    live.observe(changes.append, kind="change")
    with pytest.raises(errors.InvalidValueError, match="rc"):
        live.set("s1.rc", -4700.0)
    assert state(live.plan) == before and live.result is result and live.solve_count == 1
    assert live.status.kind == "refused" and live.status.address == "s1.rc" and "rc" in live.status.message
    assert changes[-1].status.kind == "refused" and not changes[-1].solved
    with pytest.raises(errors.UnknownNameError, match="s9"):
        live.set("s9.rc", 1e3)
    # A capacitor-coupled stage must keep its own base bias: s2 has none.
    with pytest.raises(errors.InvalidValueError, match="base bias"):
        live.set("s2.coupling", "capacitor")
    assert state(live.plan) == before and not live.can_undo


def test_unsettled_plan_keeps_the_last_good_result_with_a_status(live, monkeypatch):
    good = live.result
    solve = ampplan.Plan.solve

    def unsettled_when_rc_is_tiny(plan, *args, **kwargs):
        if plan.get("s1.rc") < 10.0:
            raise errors.NoConsistentRegionError("no consistent assignment (test double)")
        return solve(plan, *args, **kwargs)

    monkeypatch.setattr(ampplan.Plan, "solve", unsettled_when_rc_is_tiny)
    live.set("s1.rc", 1.0)
    assert live.plan.get("s1.rc") == 1.0  # the change is kept: nothing is lost
    assert live.result is good and not live.result_is_current
    assert live.status.kind == "unsettled" and "could not settle" in live.status.message
    live.undo()
    assert live.plan.get("s1.rc") == 4.7e3 and live.result_is_current and live.status.ok


def test_undo_redo_step_through_edits(live):
    original = state(live.plan)
    live.set("s1.rc", 3.3e3)
    live.set("s2.device.beta", 80.0)
    edited = state(live.plan)
    assert live.undo() and live.plan.get("s2.device.beta") == 200.0 and live.plan.get("s1.rc") == 3.3e3
    assert live.undo() and state(live.plan) == original and not live.can_undo
    assert live.undo() is False
    same_result(live.result, live.plan.copy().solve())
    assert live.redo() and live.redo() and state(live.plan) == edited and live.redo() is False
    same_result(live.result, live.plan.copy().solve())
    live.undo()
    live.set("s1.re", 220.0)  # a new edit clears what could be redone
    assert not live.can_redo


def test_plan_object_is_kept_through_undo(live):
    plan = live.plan
    live.set("supply", 15.0)
    live.undo()
    assert live.plan is plan and plan.supply == 12.0


def test_model_is_settable_resolves_and_undoes(live):
    live.model = "ebers-moll"
    assert live.result.model == "ebers-moll" and live.solve_count == 2
    live.undo()
    assert live.model == "constant-drop" and live.result.model == "constant-drop"
    with pytest.raises(errors.UnknownModelError, match="model"):
        live.model = "ideal"
    assert live.status.kind == "refused"


def test_add_and_remove_keep_stage_ids_and_resolve(live):
    changes = []
    live.observe(changes.append, kind="change")
    sid = live.add(ampplan.CommonCollector(re=2.2e3, device=ampplan.preset("general-purpose small-signal NPN")),
                   coupling="direct")
    assert sid == "s4" and live.stage_ids == ("s1", "s2", "s3", "s4")
    assert changes[-1].structure and changes[-1].solved and [s.id for s in live.result.stages][-1] == "s4"
    live.remove("s4")
    assert live.stage_ids == ("s1", "s2", "s3") and len(live.result.stages) == 3
    live.undo()
    assert live.stage_ids == ("s1", "s2", "s3", "s4")
    with pytest.raises(errors.UnknownNameError, match="s9"):
        live.remove("s9")
    with pytest.raises(errors.InvalidValueError, match="base bias"):
        live.add(ampplan.CommonCollector(re=1e3))  # capacitor-coupled without its own bias


def test_removing_every_stage_leaves_no_result(live):
    for sid in ("s3", "s2", "s1"):
        live.remove(sid)
    assert live.result is None and live.stage_ids == ()
    live.undo()
    assert live.stage_ids == ("s1",) and live.result is not None


def test_observer_that_raises_does_not_stop_the_others(live):
    seen = []

    def broken(result):
        raise RuntimeError("view broke")

    live.observe(broken)
    live.observe(seen.append)
    changes = []
    live.observe(changes.append, kind="change")
    live.set("s1.rc", 3.9e3)
    assert len(seen) == 1
    assert live.status.kind == "error" and "view broke" in live.status.message
    assert changes[-1].what == "error"
    live.unobserve(broken)
    live.set("s1.rc", 4.7e3)
    assert live.status.ok


def test_save_writes_the_live_plan(live, tmp_path):
    live.set("s1.rc", 5.6e3)
    live.save(tmp_path / "p.json")
    assert ampplan.Plan.load(tmp_path / "p.json").get("s1.rc") == 5.6e3


def test_refuses_what_is_not_a_plan_or_a_model():
    with pytest.raises(errors.InvalidValueError, match="Plan"):
        ObservablePlan("plan.json")
    plan = ampplan.Plan()
    plan.add(ampplan.CommonEmitter(rb1=82e3, rb2=15e3, rc=3.9e3, re=1e3))
    with pytest.raises(errors.UnknownModelError, match="model"):
        ObservablePlan(plan, model="lookup-table")
    with pytest.raises(errors.UnknownModelError, match="observe kind"):
        ObservablePlan(plan).observe(print, kind="everything")


def test_change_record_says_what_happened(live):
    changes = []
    live.observe(changes.append, kind="change")
    live.set("s1.rc", 3.3e3)
    live.refresh()
    assert [c.what for c in changes] == ["set", "refresh"]
    assert isinstance(changes[0], Change) and changes[0].address == "s1.rc" and changes[0].solved


def test_removing_a_middle_stage_keeps_the_other_ids_and_undo_puts_it_back(live):
    s3 = live.plan.stage("s3")
    live.remove("s2")
    assert live.stage_ids == ("s1", "s3") and live.plan.stage("s3") is s3
    assert [s.id for s in live.result.stages] == ["s1", "s3"]
    live.undo()
    assert live.stage_ids == ("s1", "s2", "s3")
    same_result(live.result, ObservablePlan.demo().result)
    # Ids are never reused: the next stage added is s4, not s2.
    live.remove("s3")
    assert live.add(ampplan.CommonCollector(re=1.8e3), coupling="direct") == "s4"


def test_move_keeps_ids_resolves_and_undoes(live):
    changes = []
    live.observe(changes.append, kind="change")
    live.add(ampplan.CommonEmitter(rb1=100e3, rb2=22e3, rc=4.7e3, re=1e3), id="pre")
    live.move("pre", 0)
    assert live.stage_ids == ("pre", "s1", "s2", "s3") and changes[-1].what == "move" and changes[-1].structure
    assert [s.id for s in live.result.stages] == list(live.stage_ids)
    live.undo()
    assert live.stage_ids == ("s1", "s2", "s3", "pre")
    with pytest.raises(errors.UnknownNameError, match="s9"):
        live.move("s9", 0)

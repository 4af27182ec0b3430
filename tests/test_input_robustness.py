"""Input robustness: absurd magnitudes, text no file can hold, oversized input, files that are not
files, and saves that were killed. Every case gets a clear ampplan error naming the culprit (or
exit status 2 from the command line), never a traceback, a hang or a silently wrong answer.

References: JSON text (RFC 8259, from memory: a string may hold any escaped code point, so
``"\\ud800"`` is valid JSON that decodes to a lone surrogate, which UTF-8 (RFC 3629, from memory)
cannot encode); POSIX (from memory): opening a FIFO for reading blocks until a writer opens it,
unless ``O_NONBLOCK`` is given, and a killed process's ``flock`` locks are released.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pytest

import ampplan
from ampplan import Circuit, CommonEmitter, Plan, Transistor
from ampplan.circuit import CURRENT_LIMIT, VOLTAGE_LIMIT
from ampplan.plan import SUPPLY_LIMIT
from ampplan.cli import main
from ampplan.errors import AmpplanError, InvalidValueError, PlanFileError
from ampplan.plan import MAX_STAGES
from ampplan.record import MAX_FILE_BYTES, load_plan, plan_to_dict, save_plan
from ampplan.record.schema import MAX_LIST_LENGTH, MAX_NUMBER_LENGTH
from ampplan.units import MAX_QUANTITY_LENGTH, parse_quantity
from ampplan.validation import MAX_NAME_LENGTH, MAX_TEXT_LENGTH

DEMO = Path(ampplan.__file__).parent / "data" / "demo_plan.json"


def demo_document() -> dict:
    return json.loads(DEMO.read_text(encoding="utf-8"))


def write(path: Path, data) -> Path:
    path.write_text(json.dumps(data, indent=2), encoding="utf-8")
    return path


def run(capsys, *argv):
    status = main(list(argv))
    out, err = capsys.readouterr()
    return status, out, err


# ------------------------------------------------------------------------------------------------
# Absurd magnitudes: refused by name, never an overflow (issue 9, item 5)
# ------------------------------------------------------------------------------------------------

@pytest.mark.parametrize("setting, expected", [
    ("supply=1e160", "Plan.supply: must be > 0 V and <= 10 kV, got 1e+160"),
    ("negative_supply=-1e300", "Plan.negative_supply: must be >= -10 kV and <= 0 V, got -1e+300"),
    ("s1.device.vce_sat=1e300", "vce_sat must be >= 0 V and <= 10 V, got 1e+300"),
    ("s1.device.vbe_on=1e300", "vbe_on must be > 0 V and <= 10 V, got 1e+300"),
    ("s1.device.vbc_on=50", "vbc_on must be > 0 V and <= 10 V, got 50"),
    ("s1.device.vbe_temperature_coefficient=1e300", "vbe_temperature_coefficient must be >= -100 mV/K"),
    ("min_headroom=1e300", "Plan.min_headroom: must be >= 0 V and <= 10 kV"),
])
def test_absurd_voltages_on_the_command_line_exit_2(capsys, setting, expected):
    status, out, err = run(capsys, "check", "--demo", "--set", setting)
    assert status == 2, out + err
    assert expected in err and "Traceback" not in err


@pytest.mark.parametrize("path, value", [
    (("supply",), 1e300), (("negative_supply",), -1e300), (("stages", 0, "device", "vce_sat"), 1e300),
    (("stages", 1, "device", "vbe_on"), 1e300),
])
def test_absurd_voltages_in_a_file_are_refused_with_their_path(tmp_path, path, value):
    data = demo_document()
    node = data
    for part in path[:-1]:
        node = node[part]
    node[path[-1]] = value
    message = str(pytest.raises(PlanFileError, load_plan, write(tmp_path / "p.json", data)).value)
    where = "".join(f"[{p}]" if isinstance(p, int) else ("." if k else "") + p for k, p in enumerate(path))
    assert f"{where}: must be" in message and "V" in message


@pytest.mark.parametrize("add, expected", [
    (lambda c: c.voltage_source("V2", "b", "gnd", 2 * VOLTAGE_LIMIT), "V2: voltage must be >= -1 MV"),
    (lambda c: c.voltage_source("V2", "b", "gnd", -1e300), "V2: voltage must be >= -1 MV"),
    (lambda c: c.current_source("I1", "gnd", "b", 2 * CURRENT_LIMIT), "I1: current must be >= -1 kA"),
])
def test_absurd_sources_are_refused_by_the_circuit(add, expected):
    c = Circuit()
    with pytest.raises(InvalidValueError, match=expected):
        add(c)


def test_absurd_source_in_a_batch_names_the_sample():
    c = Circuit()
    c.voltage_source("V", "a", "gnd", 1.0)
    c.resistor("R", "a", "gnd", 1e3)
    with pytest.raises(InvalidValueError, match="at sample 1"):
        c.solve(batch={"V": np.array([1.0, 1e300])})


def test_extreme_accepted_values_do_not_overflow():
    # The largest voltage, the smallest resistance and the largest current that are accepted:
    # Ohm's law (V = I R) and the power I^2 R must come back finite. 1 MV across 1 µΩ gives
    # 1e12 A and 1e18 W, both far inside the float range.
    c = Circuit()
    c.voltage_source("V", "a", "gnd", VOLTAGE_LIMIT)
    c.resistor("R", "a", "gnd", 1e-6)
    c.current_source("I", "gnd", "b", CURRENT_LIMIT)
    c.resistor("R2", "b", "gnd", 1e12)
    op = c.solve()
    assert op.v["b"] == pytest.approx(CURRENT_LIMIT * 1e12, rel=1e-9)      # Ohm's law
    assert np.isfinite(op.i["V"]) and np.isfinite(op.v["b"] ** 2 / 1e12)


def test_plan_at_the_voltage_limits_solves_without_overflow():
    plan = Plan(supply=SUPPLY_LIMIT, negative_supply=-SUPPLY_LIMIT, load_resistance=1e4)
    plan.add(CommonEmitter(rb1=1e6, rb2=1e6, rc=1e6, re=1e6))
    result = plan.solve()
    assert np.isfinite(result.supply_power)
    assert any("60 V" in c for c in result.cautions)        # the usual caution for supplies above 60 V


# ------------------------------------------------------------------------------------------------
# Text no file can hold: a lone surrogate (issue 9, item 6)
# ------------------------------------------------------------------------------------------------

def _with_surrogate(where: str) -> str:
    text = json.dumps(demo_document(), indent=2)
    if where == "description":
        return text.replace('"Invented demo:', '"Invented \\ud800 demo:', 1)
    if where == "kind":
        return text.replace('"common-emitter"', '"common-\\udcff"', 1)
    if where == "key":
        return text.replace('"supply":', '"supply": 12.0, "\\udc80":', 1)
    raise KeyError(where)


@pytest.mark.parametrize("where, expected", [
    ("description", "description: text holding a character that cannot be written as UTF-8 (U+D800"),
    ("kind", "stages[0].kind: text holding a character that cannot be written as UTF-8 (U+DCFF"),
    ("key", "top level: a key holding a character that cannot be written as UTF-8 (U+DC80"),
])
def test_lone_surrogate_in_a_file_is_refused_with_its_path(tmp_path, where, expected):
    path = tmp_path / "p.json"
    path.write_text(_with_surrogate(where), encoding="utf-8")
    message = str(pytest.raises(PlanFileError, load_plan, path).value)
    assert expected in message
    message.encode("utf-8")          # the message itself can be printed anywhere


def test_lone_surrogate_in_a_file_exits_2_with_parseable_json(tmp_path):
    path = tmp_path / "p.json"
    path.write_text(_with_surrogate("description"), encoding="utf-8")
    # A real process with strict UTF-8 output, as a CI job would run it.
    proc = subprocess.run([sys.executable, "-m", "ampplan", "check", str(path), "--json"], capture_output=True,
                          timeout=120, env={**os.environ, "PYTHONIOENCODING": "utf-8:strict"})
    assert proc.returncode == 2, proc.stderr
    data = json.loads(proc.stdout.decode("utf-8"))
    assert data["exit_status"] == 2 and "U+D800" in data["error"]
    assert b"Traceback" not in proc.stderr


def test_undecodable_command_line_bytes_exit_2_with_parseable_json():
    # Bytes that are not UTF-8 in argv arrive as lone surrogates (PEP 383, from memory).
    proc = subprocess.run([sys.executable, "-m", "ampplan", "check", "--demo", "--json",
                           b"--set", b"description=bad \xff byte"], capture_output=True, timeout=120,
                          env={**os.environ, "PYTHONIOENCODING": "utf-8:strict"})
    assert proc.returncode == 2, proc.stderr
    data = json.loads(proc.stdout.decode("utf-8"))
    assert "Plan.description holds a character that cannot be written as UTF-8" in data["error"]
    assert b"Traceback" not in proc.stderr


@pytest.mark.parametrize("make, expected", [
    (lambda: Plan(description="a \ud800 b"), "Plan.description holds a character"),
    (lambda: Circuit().resistor("r\udcff", "a", "b", 1.0), "resistor name"),
    (lambda: Circuit().resistor("r", "a\ud800", "b", 1.0), "r: a node holds a character"),
])
def test_lone_surrogate_through_the_api_is_refused(make, expected):
    with pytest.raises(InvalidValueError, match=expected):
        make()


# ------------------------------------------------------------------------------------------------
# Sizes checked before parsing (issue 9, items 9 and 12)
# ------------------------------------------------------------------------------------------------

def test_a_file_of_many_stages_is_refused_before_the_schema_looks(tmp_path, monkeypatch):
    data = demo_document()
    data["stages"] = [0] * 100_000
    path = write(tmp_path / "p.json", data)

    def never(*args, **kwargs):
        raise AssertionError("the schema validated a file that is too big")
    # Validating the 100,000 items one by one took tens of seconds; it must not happen at all.
    monkeypatch.setattr("ampplan.record.schema._VALIDATORS", {1: never, 2: never})
    message = str(pytest.raises(PlanFileError, load_plan, path).value)
    assert f"stages: 100000 stages; a plan file holds at most {MAX_STAGES} here" in message


def test_long_lists_and_text_are_refused_with_their_path(tmp_path):
    data = demo_document()
    data["description"] = "x" * (MAX_TEXT_LENGTH + 1)
    data["stages"][0]["kind"] = "k" * (MAX_NAME_LENGTH + 1)
    message = str(pytest.raises(PlanFileError, load_plan, write(tmp_path / "p.json", data)).value)
    assert f"description: text of {MAX_TEXT_LENGTH + 1} characters; at most {MAX_TEXT_LENGTH}" in message
    assert f"stages[0].kind: text of {MAX_NAME_LENGTH + 1} characters" in message
    data = demo_document()
    data["stages"][0] = {"kind": "custom", "elements": [{}] * (MAX_LIST_LENGTH + 1)}
    message = str(pytest.raises(PlanFileError, load_plan, write(tmp_path / "p.json", data)).value)
    assert f"stages[0].elements: {MAX_LIST_LENGTH + 1} items; a plan file holds at most {MAX_LIST_LENGTH}" in message


@pytest.mark.parametrize("number", ["9" * 5000, "1." + "0" * 5000, "-" + "1" * 100, "1" * 41])
def test_huge_numbers_in_a_file_are_named_by_their_path(tmp_path, number):
    text = json.dumps(demo_document(), indent=2).replace('"rc": 4700.0', f'"rc": {number}', 1)
    path = tmp_path / "p.json"
    path.write_text(text, encoding="utf-8")
    message = str(pytest.raises(PlanFileError, load_plan, path).value)
    assert (f"stages[0].rc: a number written with {len(number)} characters; a plan file's numbers have at "
            f"most {MAX_NUMBER_LENGTH}") in message


def test_numbers_of_ordinary_length_still_read():
    # 17 significant digits and an exponent: every float (IEEE 754 double, from memory).
    data = demo_document()
    data["stages"][0]["rc"] = 4700.000000000001
    assert ampplan.record.plan_from_dict(data).get("s1.rc") == 4700.000000000001


@pytest.mark.parametrize("setting", ["s1.rc=" + "9" * 20_000, "s1.rc=4." + "7" * 100 + "k"])
def test_long_set_values_are_refused_before_parsing(capsys, monkeypatch, setting):
    def never(*args, **kwargs):
        raise AssertionError("the engineering-notation parser was given an overlong value")
    # Parsing 20,000 digits took minutes; the parser must not see them at all.
    monkeypatch.setattr("ampplan.units.Quantity", never)
    status, out, err = run(capsys, "check", "--demo", "--set", setting)
    assert status == 2 and f"more than the {MAX_QUANTITY_LENGTH} a number needs" in err


def test_overlong_set_item_is_refused(capsys):
    status, out, err = run(capsys, "check", "--demo", "--set", "description=" + "x" * (MAX_TEXT_LENGTH + 200))
    assert status == 2 and "characters, more than the" in err


def test_parse_quantity_refuses_long_and_non_text():
    with pytest.raises(InvalidValueError, match="more than the 40"):
        parse_quantity("1" * 41)
    with pytest.raises(InvalidValueError, match="cannot read a list"):
        parse_quantity([1])
    assert parse_quantity("1" * 20 + "k") == 1.1111111111111111e22


# ------------------------------------------------------------------------------------------------
# Only regular files (issue 9, item 10)
# ------------------------------------------------------------------------------------------------

@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="FIFOs are POSIX")
def test_a_fifo_is_refused_without_blocking(tmp_path):
    fifo = tmp_path / "plan.json"
    os.mkfifo(fifo)
    # In a child process, so that a regression hangs only the child (killed by the timeout).
    code = f"from ampplan.cli import main; raise SystemExit(main(['check', {str(fifo)!r}]))"
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60)
    assert proc.returncode == 2
    assert "not a regular file (a FIFO)" in proc.stderr


@pytest.mark.parametrize("path, kind", [("dir", "a directory"), ("/dev/null", "a character device")])
def test_directories_and_devices_are_refused(tmp_path, path, kind):
    target = tmp_path if path == "dir" else Path(path)
    if not target.exists():
        pytest.skip(f"{path} does not exist here")
    message = str(pytest.raises(PlanFileError, load_plan, target).value)
    assert f"not a regular file ({kind})" in message


def test_save_over_a_directory_is_refused(tmp_path):
    (tmp_path / "p.json").mkdir()
    plan = Plan.load(DEMO)
    with pytest.raises(PlanFileError, match="not written: it is a directory"):
        save_plan(plan, tmp_path / "p.json")


@pytest.mark.parametrize("path", [None, 3, ["p.json"], "bad\0name.json"])
def test_paths_that_are_not_paths(tmp_path, path):
    with pytest.raises(PlanFileError, match="path"):
        load_plan(path)
    with pytest.raises(PlanFileError, match="path"):
        save_plan(Plan.load(DEMO), path)


# ------------------------------------------------------------------------------------------------
# Whatever save writes, load reads (issue 9, item 13)
# ------------------------------------------------------------------------------------------------

def test_description_limit_holds_in_the_plan():
    with pytest.raises(InvalidValueError, match=f"Plan.description must be at most {MAX_TEXT_LENGTH}"):
        Plan(description="x" * (MAX_TEXT_LENGTH + 1))


def test_longest_description_saves_and_loads(tmp_path):
    plan = Plan.load(DEMO)
    plan.description = "\U0001F50A" * MAX_TEXT_LENGTH          # 4 bytes each in UTF-8 (RFC 3629)
    save_plan(plan, tmp_path / "p.json")
    assert load_plan(tmp_path / "p.json").description == plan.description


def test_save_refuses_a_file_load_would_refuse_for_its_size(tmp_path, monkeypatch):
    plan = Plan.load(DEMO)
    monkeypatch.setattr("ampplan.record.files.MAX_FILE_BYTES", 1000)
    with pytest.raises(PlanFileError, match="would not load back: it takes .* bytes, more than the 1000"):
        save_plan(plan, tmp_path / "p.json")
    assert list(tmp_path.iterdir()) == []


def test_every_plan_limit_round_trips(tmp_path):
    plan = Plan(supply=SUPPLY_LIMIT, negative_supply=-SUPPLY_LIMIT, description="d" * MAX_TEXT_LENGTH)
    for _ in range(MAX_STAGES):
        plan.add(CommonEmitter(rb1=1e5, rb2=2e4, device=Transistor(vbe_on=10.0, vce_sat=10.0)))
    save_plan(plan, tmp_path / "p.json")
    assert (tmp_path / "p.json").stat().st_size <= MAX_FILE_BYTES
    assert plan_to_dict(load_plan(tmp_path / "p.json")) == plan_to_dict(plan)


# ------------------------------------------------------------------------------------------------
# Leftovers of killed saves are cleaned up by the next save (issue 9, item 14)
# ------------------------------------------------------------------------------------------------

@pytest.mark.skipif(os.name != "posix", reason="uses POSIX signals and file locks")
def test_temporaries_of_killed_saves_are_removed_by_the_next_save(tmp_path):
    target = tmp_path / "plan.json"
    # A child that saves with its final write blocked forever, so it dies holding its temporary.
    code = textwrap.dedent(f"""
        import sys, threading
        import ampplan.record.files as files
        from ampplan import Plan
        def stuck(f, text):
            f.write(text[:10]); f.flush()
            print("writing", flush=True)
            threading.Event().wait()
        files._write = stuck
        Plan.load({str(DEMO)!r}).save({str(target)!r})
    """)
    for _ in range(3):
        child = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE, text=True)
        try:
            assert child.stdout.readline().strip() == "writing"
        finally:
            child.send_signal(signal.SIGKILL)
            child.wait(timeout=60)
            child.stdout.close()
    # Each save removed the leftover of the one killed before it: one temporary is left, not three.
    leftovers = sorted(p.name for p in tmp_path.iterdir())
    assert len(leftovers) == 1 and leftovers[0].startswith(".plan.json.") and leftovers[0].endswith(".tmp")
    # Another plan's temporary and an unrelated file are not touched.
    (tmp_path / ".other.json.0123456789ab.tmp").write_text("x")
    (tmp_path / "notes.txt").write_text("x")
    save_plan(Plan.load(DEMO), target)
    assert sorted(p.name for p in tmp_path.iterdir()) == [".other.json.0123456789ab.tmp", "notes.txt", "plan.json"]


@pytest.mark.skipif(os.name != "posix", reason="uses file locks")
def test_a_temporary_being_written_is_left_alone(tmp_path):
    import fcntl
    busy = tmp_path / ".plan.json.0123456789ab.tmp"
    with open(busy, "w") as f:
        fcntl.flock(f.fileno(), fcntl.LOCK_EX)        # a save in progress holds its lock
        save_plan(Plan.load(DEMO), tmp_path / "plan.json")
        assert busy.exists()
    save_plan(Plan.load(DEMO), tmp_path / "plan.json")
    assert not busy.exists()

"""The ``ampplan`` command line: exit statuses, the table, ``--json``, ``--set``, bad input.

Reference figures come from the fixed-bias hand analysis (Boylestad & Nashelsky, *Electronic
Devices and Circuit Theory*, DC biasing chapter, from memory): with the constant-drop model,
I_B = (V_CC - V_BE) / R_B, I_C = beta I_B and V_CE = V_CC - I_C R_C while that leaves V_CE above
V_CE(sat); when beta I_B exceeds (V_CC - V_CE(sat)) / R_C the transistor saturates.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

import ampplan
from ampplan.cli import main
from ampplan.devices import Transistor
from ampplan.errors import ConvergenceError, InvalidValueError
from ampplan.plan import Plan
from ampplan.record import save_plan
from ampplan.stages import CommonEmitter

MODELS = ("constant-drop", "ebers-moll")
VCC, VBE, VCE_SAT, BETA, RC = 12.0, 0.7, 0.2, 100.0, 10e3     # fixed-bias example values


def fixed_bias_plan(rb: float) -> Plan:
    """One fixed-bias common-emitter stage: R_B from the supply to the base, emitter on ground."""
    plan = Plan(supply=VCC, load_resistance=None)
    plan.add(CommonEmitter(rb1=rb, rb2=None, rc=RC, re=None,
                           device=Transistor(beta=BETA, vbe_on=VBE, vce_sat=VCE_SAT)))
    return plan


@pytest.fixture
def saturated(tmp_path) -> Path:
    # R_B = R_C: beta I_B = 100 x 1.13 mA is far above (12 - 0.2) V / 10 kΩ = 1.18 mA, so saturation.
    path = tmp_path / "saturated.json"
    save_plan(fixed_bias_plan(rb=RC), path)
    return path


def run(capsys, *argv):
    status = main(list(argv))
    out, err = capsys.readouterr()
    return status, out, err


# ------------------------------------------------------------------------------------------------
# The demo: clean under both models
# ------------------------------------------------------------------------------------------------

@pytest.mark.parametrize("model", MODELS)
def test_demo_checks_clean(capsys, model):
    status, out, err = run(capsys, "check", "--demo", "--model", model)
    assert status == 0, out + err
    assert err == ""
    lines = out.splitlines()
    for sid in ("s1", "s2", "s3"):
        row = next(line for line in lines if line.split()[:1] == [sid])
        assert "forward-active" in row
    for heading in ("region", "I_C", "V_CE", "sat. margin", "cutoff margin", "swing pk", "gain", "R_in", "R_out"):
        assert heading in lines[next(k for k, line in enumerate(lines) if line.startswith("stage"))]
    assert "largest source amplitude" in out and "limited by" in out
    assert "cautions\n  none" in out
    assert lines[-1].startswith("OK:")


@pytest.mark.parametrize("model", MODELS)
def test_demo_json(capsys, model):
    status, out, err = run(capsys, "check", "--demo", "--json", "--model", model)
    data = json.loads(out)
    assert status == 0 and data["exit_status"] == 0
    assert data["model"] == model
    assert data["all_forward_active"] is True and data["cautions"] == []
    assert [s["id"] for s in data["stages"]] == ["s1", "s2", "s3"]
    for s in data["stages"]:
        assert s["transistor"]["region"] == "forward-active"
        # At least 1 V of V_CE above the saturation edge (common practice, no source).
        assert s["saturation_margin"] >= 1.0
    for key in ("gain", "input_resistance", "output_resistance", "max_source_amplitude", "limiting_stage",
                "supply_current"):
        assert data[key] is not None, key


def test_demo_plan_is_packaged():
    demo = Path(ampplan.__file__).parent / "data" / "demo_plan.json"
    data = json.loads(demo.read_text(encoding="utf-8"))
    assert data["format"] == "ampplan-plan" and data["description"]
    assert len(data["stages"]) == 3


# ------------------------------------------------------------------------------------------------
# A saturated plan, and --set
# ------------------------------------------------------------------------------------------------

def test_saturated_plan_exits_1(capsys, saturated):
    status, out, err = run(capsys, "check", str(saturated), "--json")
    data = json.loads(out)
    assert status == 1 and data["exit_status"] == 1
    assert data["stages"][0]["transistor"]["region"] == "saturation"
    assert data["all_forward_active"] is False
    assert data["cautions"]
    # In saturation V_CE sits at V_CE(sat) and I_C at (V_CC - V_CE(sat)) / R_C (constant-drop model).
    assert data["stages"][0]["transistor"]["vce"] == pytest.approx(VCE_SAT, abs=1e-9)
    assert data["stages"][0]["transistor"]["ic"] == pytest.approx((VCC - VCE_SAT) / RC, rel=1e-9)


def test_saturated_plan_table(capsys, saturated):
    status, out, err = run(capsys, "check", str(saturated))
    assert status == 1
    row = next(line for line in out.splitlines() if line.split()[:1] == ["!s1"])
    assert "saturation" in row
    assert out.splitlines()[-1].startswith("NOT OK: not forward-active: s1")


def test_set_moves_the_q_point(capsys, saturated):
    # R_B = 2.2 MΩ: I_B = 11.3 V / 2.2 MΩ, I_C = beta I_B = 514 uA, V_CE = 12 V - I_C R_C = 6.86 V.
    status, out, err = run(capsys, "check", str(saturated), "--json", "--set", "s1.rb1=2.2M")
    data = json.loads(out)
    assert status == 0, err
    t = data["stages"][0]["transistor"]
    ic = BETA * (VCC - VBE) / 2.2e6
    assert t["region"] == "forward-active"
    assert t["ic"] == pytest.approx(ic, rel=1e-9)
    assert t["vce"] == pytest.approx(VCC - ic * RC, rel=1e-9)


def test_set_applies_in_order_and_reads_words(capsys, saturated):
    # beta 50 with R_B = 1 MΩ: I_C = 50 x 11.3 uA = 565 uA.
    status, out, err = run(capsys, "check", str(saturated), "--json", "--set", "s1.rb1=2.2M",
                           "--set", "s1.rb1=1M", "--set", "s1.device.beta=50", "--set", "load_coupling=direct")
    assert status == 0, err
    t = json.loads(out)["stages"][0]["transistor"]
    assert t["ic"] == pytest.approx(50 * (VCC - VBE) / 1e6, rel=1e-9)


@pytest.mark.parametrize("setting, expected", [
    pytest.param("s1.rcc=4.7k", "has no parameter 'rcc'", id="unknown-parameter"),
    pytest.param("s9.rc=4.7k", "no stage 's9'", id="unknown-stage"),
    pytest.param("s1.rc=abc", "cannot read 'abc'", id="not-a-number"),
    pytest.param("s1.rc=-4.7k", "s1.rc", id="negative"),
    pytest.param("s1.rc", "expected ADDRESS=VALUE", id="no-equals"),
    pytest.param("s1.rc=", "expected ADDRESS=VALUE", id="no-value"),
    pytest.param("s1.coupling=wire", "must be one of capacitor, direct", id="bad-word"),
    pytest.param("s1.device.polarity=npx", "polarity must be one of", id="bad-polarity"),
    pytest.param("s1.rc=none", "is required", id="none-for-required"),
])
def test_bad_set_exits_2(capsys, saturated, setting, expected):
    status, out, err = run(capsys, "check", str(saturated), "--set", setting)
    assert status == 2
    assert out == ""
    assert err.startswith("ampplan: --set ") and expected in err, err
    assert "Traceback" not in err


@pytest.mark.parametrize("with_unit, without", [
    pytest.param("s1.rb1=2.2 MΩ", "s1.rb1=2.2M", id="megohm-spaced"),
    pytest.param("s1.rb1=2.2MOhm", "s1.rb1=2.2M", id="megohm-ascii"),
    pytest.param("s1.rc=4.7kΩ", "s1.rc=4.7k", id="kilohm"),
    pytest.param("s1.c_bypass=100uF", "s1.c_bypass=100u", id="microfarad"),
    pytest.param("supply=12V", "supply=12", id="volt"),
    pytest.param("temperature=85°C", "temperature=85", id="celsius"),
    pytest.param("s1.device.vbe_on=650mV", "s1.device.vbe_on=0.65", id="millivolt"),
    pytest.param("s1.device.saturation_current=10fA", "s1.device.saturation_current=1e-14", id="femtoampere"),
])
def test_set_reads_the_unit_of_the_address(capsys, saturated, with_unit, without):
    # SI prefixes (BIPM SI brochure, from memory): M = 1e6, k = 1e3, u = 1e-6, m = 1e-3, f = 1e-15.
    # The same value with and without its unit gives the same report.
    status, out, err = run(capsys, "check", str(saturated), "--json", "--set", "s1.rb1=2.2M", "--set", with_unit)
    assert err == "", err
    expected = run(capsys, "check", str(saturated), "--json", "--set", "s1.rb1=2.2M", "--set", without)
    assert (status, out) == expected[:2]


@pytest.mark.parametrize("setting, expected", [
    pytest.param("s1.rc=4.7kV", ["unexpected 'V'", "expected Ω or no unit"], id="volts-for-a-resistor"),
    pytest.param("supply=12Ω", ["unexpected 'Ω'", "expected V or no unit"], id="ohms-for-a-supply"),
    pytest.param("s1.device.beta=150A", ["unexpected 'A'", "expected no unit"], id="unit-on-a-gain"),
    pytest.param("s1.device.beta=True", ["cannot read 'True'"], id="bool-word"),
    pytest.param("s1.rc=1n", ["CommonEmitter.rc", ">= 1 µΩ", "got 1e-09"], id="below-resistance-range"),
    pytest.param("s1.device=general", ["s1.device is a whole transistor", "s1.device.beta="], id="whole-device"),
    pytest.param("s1.rb1=none", ["needs its own base bias"], id="clearing-the-bias"),
])
def test_set_refuses(capsys, saturated, setting, expected):
    status, out, err = run(capsys, "check", str(saturated), "--set", setting)
    assert status == 2 and out == ""
    assert err.startswith(f"ampplan: --set {setting}: ")
    for text in expected:
        assert text in err, err


def test_set_description_shows_in_the_report(capsys, saturated):
    status, out, err = run(capsys, "check", str(saturated), "--set", "description=bench copy")
    assert status == 1 and "\n  bench copy\n" in out


def test_plan_file_is_read_once(capsys, monkeypatch, saturated):
    import ampplan.cli
    calls = []
    real = ampplan.cli.read_plan_file

    def counting(path):
        calls.append(path)
        return real(path)
    monkeypatch.setattr(ampplan.cli, "read_plan_file", counting)
    status, out, err = run(capsys, "check", str(saturated))
    assert status == 1 and calls == [str(saturated)]


# ------------------------------------------------------------------------------------------------
# Bad input: exit 2, a message naming the file and JSON path, no traceback
# ------------------------------------------------------------------------------------------------

def test_bad_file_exits_2(capsys, tmp_path, saturated):
    data = json.loads(saturated.read_text(encoding="utf-8"))
    data["stages"][0]["rc"] = -4700
    bad = tmp_path / "bad.json"
    bad.write_text(json.dumps(data), encoding="utf-8")
    status, out, err = run(capsys, "check", str(bad))
    assert status == 2 and out == ""
    assert err.strip() == f"ampplan: {bad}: stages[0].rc: must be >= 1 µΩ and <= 1 TΩ, got -4700"


@pytest.mark.parametrize("content, expected", [
    pytest.param('{"format": "ampplan-plan", "version": 1, "supp', "not valid JSON: line 1", id="truncated"),
    pytest.param('{"format": "ampplan-plan", "version": 7}', "written by a newer ampplan (format version 7",
                 id="newer-version"),
    pytest.param('{"format": "sheet", "version": 1}', "this is not an ampplan plan file", id="wrong-format"),
    pytest.param('{"format": "ampplan-plan", "version": 1, "supply": NaN}', "NaN is not allowed", id="nan"),
])
def test_malformed_file_exits_2_with_json_error(capsys, tmp_path, content, expected):
    bad = tmp_path / "bad.json"
    bad.write_text(content, encoding="utf-8")
    status, out, err = run(capsys, "check", str(bad), "--json")
    assert status == 2
    assert expected in err and str(bad) in err
    data = json.loads(out)
    assert data["exit_status"] == 2 and expected in data["error"]


def test_huge_file_exits_2(capsys, tmp_path):
    bad = tmp_path / "huge.json"
    bad.write_text('{"description": "' + "x" * (1 << 20) + '"}', encoding="utf-8")
    status, out, err = run(capsys, "check", str(bad))
    assert status == 2 and "larger than" in err


@pytest.mark.parametrize("argv, expected", [
    pytest.param(["check"], "give a plan file to check, or --demo", id="no-plan"),
    pytest.param(["check", "x.json", "--demo"], "not both", id="plan-and-demo"),
    pytest.param(["check", "missing.json"], "missing.json: cannot read the plan file", id="missing-file"),
    pytest.param(["check", "--demo", "--model", "exact"], "invalid choice: 'exact'", id="bad-model"),
    pytest.param([], "usage: ampplan", id="no-command"),
    pytest.param(["inspect"], "invalid choice: 'inspect'", id="unknown-command"),
])
def test_usage_errors_exit_2(capsys, argv, expected):
    status, out, err = run(capsys, *argv)
    assert status == 2
    assert expected in err


def test_help_exits_0(capsys):
    status, out, err = run(capsys, "check", "--help")
    assert status == 0 and "--set ADDRESS=VALUE" in out


def test_solver_failure_exits_1(capsys, monkeypatch, saturated):
    def fail(self, **kwargs):
        raise ConvergenceError("Newton's method did not converge in 200 iterations")
    monkeypatch.setattr(Plan, "solve", fail)
    status, out, err = run(capsys, "check", str(saturated))
    assert status == 1
    assert "could not settle the plan" in err and "Traceback" not in err


def test_plan_refused_at_solve_time_exits_2(capsys, monkeypatch, saturated):
    def refuse(self, **kwargs):
        raise InvalidValueError("the plan has no stages; add one with plan.add(...)")
    monkeypatch.setattr(Plan, "solve", refuse)
    status, out, err = run(capsys, "check", str(saturated))
    assert status == 2 and "the plan has no stages" in err


# ------------------------------------------------------------------------------------------------
# As a program
# ------------------------------------------------------------------------------------------------

def _program(*args):
    root = str(Path(ampplan.__file__).resolve().parent.parent)
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(filter(None, [root, os.environ.get("PYTHONPATH")])))
    return subprocess.run([sys.executable, *args], capture_output=True, text=True, encoding="utf-8", env=env,
                          check=False)


def test_python_m_ampplan_cli_demo_json():
    done = _program("-m", "ampplan.cli", "check", "--demo", "--json")
    assert done.returncode == 0, done.stderr
    data = json.loads(done.stdout)
    assert data["exit_status"] == 0 and len(data["stages"]) == 3


def test_python_m_ampplan_bad_file(tmp_path):
    bad = tmp_path / "bad.json"
    bad.write_text("{", encoding="utf-8")
    done = _program("-m", "ampplan", "check", str(bad))
    assert done.returncode == 2
    assert "not valid JSON" in done.stderr and "Traceback" not in done.stderr

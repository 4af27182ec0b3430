"""``ampplan sweep``, ``ampplan tolerance`` and ``ampplan design``: exit statuses and bad input.

Source: the contract of issue 8 and the exit statuses of ``ampplan check`` (README: 0 all well,
1 not, 2 bad input with a message naming the culprit and no traceback); the numbers are checked
against the API, which the other test files check against single solves and hand formulas.
"""

from __future__ import annotations

import csv
import io
import json

import numpy as np
import pytest

import ampplan
from ampplan import cli_whatif, eseries
from ampplan.cli import main
from ampplan.record import save_plan

from test_whatif_sweep import demo_plan
from test_whatif_tolerance import fixed_bias_plan


def run(capsys, *argv):
    status = main(list(argv))
    out, err = capsys.readouterr()
    return status, out, err


# -- sweep -----------------------------------------------------------------------------------------

def test_sweep_table_and_exit_status(capsys):
    status, out, err = run(capsys, "sweep", "--demo", "--vary", "s1.rc=1k..60k:4log")
    assert err == ""
    assert "4 samples" in out and "s1.rc" in out and "s2.region" in out
    api = demo_plan().sweep({"s1.rc": np.geomspace(1e3, 60e3, 4)})
    assert status == (0 if api.passed().all() else 1)
    assert out.count("NOT OK") == int(np.sum(~api.passed()))


def test_sweep_json_and_csv_agree_with_the_api(capsys):
    status, out, _ = run(capsys, "sweep", "--demo", "--vary", "s1.rc=2k..8k:3", "--json")
    data = json.loads(out)
    api = demo_plan().sweep({"s1.rc": np.linspace(2e3, 8e3, 3)})
    assert data["values"]["s1.rc"] == [2e3, 5e3, 8e3]
    assert data["results"]["s1.vce"] == pytest.approx(api["s1.vce"].tolist(), rel=1e-12)
    assert data["exit_status"] == status
    status, out, _ = run(capsys, "sweep", "--demo", "--vary", "s1.rc=2k..8k:3", "--vary", "supply=10..14:2",
                         "--grid", "--csv", "--show", "s1.vce", "gain")
    rows = list(csv.DictReader(io.StringIO(out)))
    assert len(rows) == 6 and set(rows[0]) == {"s1.rc", "supply", "s1.vce", "gain", "passed"}
    assert [float(r["supply"]) for r in rows[:2]] == [10.0, 14.0]


@pytest.mark.parametrize("argv, message", [
    (["--vary", "s1.rc=1k..10k:3", "--vary", "s1.re=100..200:4"], r"as many values"),
    (["--vary", "s1.rc=1k-10k"], r"--vary s1.rc '1k-10k': expected LO..HI\[:N\]\[log\]"),
    (["--vary", "s1.rc=1k..10k:x"], r"N must be a whole number"),
    (["--vary", "s1.rc=-1k..10k:3log"], r"a log range needs positive ends"),
    (["--vary", "s1.rc=1kV..10k"], r"--vary s1.rc '1kV..10k': .*unexpected 'kV'|cannot read '1kV'"),
    (["--vary", "s1.rcc=1k..10k"], r"--vary s1.rcc=1k..10k: .*s1.rcc"),
    (["--vary", "s1.coupling=1..2"], r"--vary s1.coupling: holds a word .* changes the plan's topology"),
    (["--vary", "s3.rc=1k..2k"], r"--vary s3.rc: is not fitted in this plan"),
    (["--vary", "s1.rc"], r"--vary 's1.rc': expected ADDRESS=LO..HI"),
    (["--vary", "s1.rc=1k..10k", "--show", "s1.vc"], r"--show s1.vc: .*did you mean 'vce'"),
    ([], r"give at least one --vary"),
    # Three dots would read as 1 kΩ .. .10 kΩ (100 Ω): ambiguous, refused.
    (["--vary", "s1.rc=1k...10k"], r"--vary s1.rc '1k...10k': .*two dots"),
    (["--vary", "s1.rc=1k..10k:3", "--vary", "s1.rc=2k..3k:3"], r"--vary s1.rc: given twice"),
    # Refused before any array of that size is made.
    (["--vary", "s1.rc=1k..10k:99999999999999999999999"], r"--vary s1.rc: .*more than 10000000 samples"),
    (["--vary", "s1.rc=1k..10k:20000000"], r"--vary s1.rc: .*more than 10000000 samples"),
])
def test_sweep_bad_input_exits_2(capsys, argv, message):
    import re
    status, out, err = run(capsys, "sweep", "--demo", *argv)
    assert status == 2, out + err
    assert re.search(message, err) and "Traceback" not in err


# -- tolerance -------------------------------------------------------------------------------------

def test_tolerance_json_matches_the_api_and_min_yield_sets_the_exit_status(capsys):
    status, out, err = run(capsys, "tolerance", "--demo", "--samples", "40", "--seed", "3", "--resistors", "20%",
                           "--beta", "0.3..3", "--temperature=-20..80", "--json")
    assert status == 0 and err == ""
    data = json.loads(out)
    api = demo_plan().tolerance(samples=40, seed=3, resistors=0.2, beta=(0.3, 3.0), temperature=(-20.0, 80.0))
    assert data["yield"] == api.yield_fraction and 0 < api.yield_fraction < 1
    status, out, _ = run(capsys, "tolerance", "--demo", "--samples", "40", "--seed", "3", "--resistors", "0.2",
                         "--beta", "0.3..3", "--temperature=-20..80", "--min-yield", "0.999")
    assert status == 1 and "yield" in out and "NOT OK" in out
    status, out, _ = run(capsys, "tolerance", "--demo", "--samples", "40", "--seed", "3", "--resistors", "20%",
                         "--beta", "0.3..3", "--temperature=-20..80", "--min-yield", "0.01")
    assert status == 0 and "percentiles" in out and "most influential" in out


def test_tolerance_text_states_the_spreads_in_engineering_notation(capsys):
    # The demo's s1.rc is 4.7 kΩ (ampplan/data/demo_plan.json); ±5 % of it is 4.465 kΩ … 4.935 kΩ,
    # and the default V_BE(on) spread is ±10 mV about 0.7 V (Plan.tolerance's documented defaults).
    status, out, _ = run(capsys, "tolerance", "--demo", "--samples", "20", "--seed", "1",
                         "--required-amplitude", "10m")
    assert status in (0, 1)
    assert "  s1.rc: 4.465 kΩ … 4.935 kΩ" in out
    assert "  s1.device.vbe_on: 690 mV … 710 mV" in out
    assert "  temperature: 0 °C … 50 °C" in out
    assert "and handle 10 mV)" in out


@pytest.mark.parametrize("argv, message", [
    (["--resistors", "lots"], r"--resistors 'lots'"),
    (["--beta", "2"], r"--beta '2': expected LO..HI"),
    (["--beta", "0.5..2:4"], r"--beta '0.5..2:4': expected LO..HI only"),
    (["--min-yield", "1.5"], r"--min-yield 1.5: must be a fraction"),
    (["--samples", "0"], r"tolerance samples: must be a whole number >= 1"),
    (["--required-amplitude", "big"], r"--required-amplitude"),
    (["--beta", "2..1"], r"tolerance beta: need finite 0 < low <= high"),
])
def test_tolerance_bad_input_exits_2(capsys, argv, message):
    import re
    status, out, err = run(capsys, "tolerance", "--demo", "--samples", "5", *argv)
    assert status == 2, out + err
    assert re.search(message, err) and "Traceback" not in err


def test_ctrl_c_stops_cleanly(capsys, monkeypatch):
    def interrupted(*args, **kwargs):
        raise KeyboardInterrupt
    monkeypatch.setattr(ampplan.Plan, "tolerance", interrupted)
    status, out, err = run(capsys, "tolerance", "--demo", "--samples", "5")
    assert status == cli_whatif.EXIT_INTERRUPTED == 130
    assert "ampplan: interrupted" in err and "Traceback" not in err


class _Terminal(io.StringIO):
    def isatty(self):
        return True


def test_progress_bar_only_on_a_terminal_without_json():
    class Args:
        json = False
    update, close = cli_whatif._progress(Args(), io.StringIO())
    assert update is None  # not a terminal: quiet
    terminal = _Terminal()
    update, close = cli_whatif._progress(Args(), terminal)
    update(50, 100)
    close()
    assert "50/100" in terminal.getvalue()
    Args.json = True
    assert cli_whatif._progress(Args(), _Terminal())[0] is None


# -- design ----------------------------------------------------------------------------------------

def test_design_saves_the_snapped_plan(capsys, tmp_path):
    out_path = tmp_path / "designed.json"
    status, out, err = run(capsys, "design", "--demo", "s1.rc", "--target", "s1.vce=5", "--series", "E24",
                           "-o", str(out_path))
    api = demo_plan().design("s1.rc", ("s1.vce", 5.0), series="E24")
    designed = ampplan.Plan.load(out_path)
    assert designed.get("s1.rc") == api.snapped and api.snapped in eseries.series_values("E24", 1e3, 1e5)
    assert status == (0 if api.result.all_forward_active and not api.result.cautions else 1)
    assert "<- chosen" in out and "saved" in out


def test_design_symmetric_swing_and_json(capsys):
    status, out, _ = run(capsys, "design", "--demo", "s1.rc", "--target", "symmetric_swing", "--json")
    data = json.loads(out)
    assert data["target"] == "s1.symmetric_swing" and abs(data["achieved"]) < 1e-6
    assert data["exit_status"] == status
    status, out, _ = run(capsys, "design", "--demo", "s2.rc", "--target", "symmetric_swing", "--series", "E24")
    assert "s2.symmetric_swing = 0 V (centred to 1 nV" in out and "<- chosen" in out


def test_design_out_of_reach_exits_1(capsys, tmp_path):
    path = tmp_path / "fixed.json"
    save_plan(fixed_bias_plan(), path)
    status, out, err = run(capsys, "design", str(path), "s1.rc", "--target", "s1.vce=50")
    assert status == 1 and "no value in" in err and "Traceback" not in err


@pytest.mark.parametrize("argv, message", [
    (["s1.rc", "--target", "s1.vce"], r"--target 's1.vce': expected RESULT=VALUE"),
    (["s1.rc", "--target", "s1.vcx=5"], r"--target s1.vcx=5: .*did you mean 'vce'"),
    (["s1.rc", "--target", "s1.region=5"], r"s1.region is a word"),
    (["s1.rc", "--target", "s1.vce=five"], r"--target s1.vce=five: cannot read"),
    (["s1.rc", "--target", "s1.vce=5", "--series", "E7"], r"--series E7: choose one of E6, E12"),
    (["s1.rc", "--target", "s1.vce=5", "--bounds", "x"], r"--bounds 'x'"),
    (["s1.rcc", "--target", "s1.vce=5", "--bounds", "1k..2k"], r"s1.rcc"),
    (["s1.coupling", "--target", "s1.vce=5"], r"design s1.coupling: holds a word"),
    # symmetric_swing alone takes the stage of ADDRESS; supply belongs to no stage.
    (["supply", "--target", "symmetric_swing"], r"--target symmetric_swing: .*name the stage.*s1.symmetric_swing"),
])
def test_design_bad_input_exits_2(capsys, argv, message):
    import re
    status, out, err = run(capsys, "design", "--demo", *argv)
    assert status == 2, out + err
    assert re.search(message, err) and "Traceback" not in err


def test_design_unwritable_output_exits_2(capsys, tmp_path):
    status, out, err = run(capsys, "design", "--demo", "s1.rc", "--target", "s1.vce=5", "-o",
                           str(tmp_path / "missing" / "x.json"))
    assert status == 2 and "-o" in err


def test_vbe_on_spread_takes_its_unit(capsys):
    # Engineering notation "optionally with their unit" (issue 8): 20mV is 0.02 V, as --set reads it.
    status, out, err = run(capsys, "tolerance", "--demo", "--samples", "5", "--seed", "1", "--vbe-on", "20mV")
    assert status == 0 and err == ""
    assert "  s1.device.vbe_on: 680 mV … 720 mV" in out
    status, out, err = run(capsys, "tolerance", "--demo", "--samples", "5", "--vbe-on", "20mA")
    assert status == 2 and "--vbe-on '20mA'" in err and "Traceback" not in err

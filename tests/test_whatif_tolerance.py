"""Tolerance runs and corners.

Sources:

* reproducibility: the contract of issue 8 (same seed, same samples, whatever the chunking or the
  executor), checked by comparing runs;
* ``passed``: re-derived from single ``plan.solve()`` calls of the run's own samples with the rule
  of ``ampplan check`` exit 0 (README: every stage forward-active, no caution);
* the yield of a fixed-bias common-emitter stage against the hand formula of that circuit:
  I_B = (V_CC − V_BE)/R_B, I_C = β·I_B, V_CE = V_CC − I_C·R_C (Sedra & Smith, *Microelectronic
  Circuits*, the BJT chapter's fixed-bias example, from memory), so the stage saturates exactly
  above a β or a temperature that follows in closed form, and the expected yield follows from the
  uniform distribution;
* the distributions of the draws against scipy.stats (Kolmogorov–Smirnov tests).
"""

from __future__ import annotations

import concurrent.futures
import json
import math
import multiprocessing
import os

import numpy as np
import pytest
from scipy import stats

import ampplan
from ampplan.analyses.whatif import runs
from ampplan.errors import InvalidValueError, UnknownModelError

from test_whatif_sweep import demo_plan
from whatif_reference import check_rule

VCC, VBE, VCE_SAT, BETA, RB, RC = 12.0, 0.7, 0.2, 100.0, 1e6, 10e3
TC_VBE = -2e-3  # V/°C, the devices' default (common practice, no source)


def fixed_bias_plan(rb: float = RB):
    """R_B from the supply to the base, R_C to the collector, emitter on ground; no headroom caution
    (min_headroom 0), so a sample passes exactly while the stage is forward-active."""
    plan = ampplan.Plan(supply=VCC, min_headroom=0.0)
    plan.add(ampplan.CommonEmitter(rb1=rb, rb2=None, rc=RC, re=None,
                                   device=ampplan.Transistor(beta=BETA, vbe_on=VBE, vce_sat=VCE_SAT)))
    return plan


ONLY = dict(resistors=None, beta=None, vbe_on=None, temperature=None)


def test_same_seed_same_result_whatever_the_chunking_or_executor():
    plan = demo_plan()
    options = dict(samples=40, seed=12345, resistors=0.2, beta=(0.3, 3.0), temperature=(-20.0, 80.0))
    base = plan.tolerance(**options)
    runs_ = [plan.tolerance(**options, chunk_size=7), plan.tolerance(**options, chunk_size=40)]
    with concurrent.futures.ThreadPoolExecutor(2) as pool:
        runs_.append(plan.tolerance(**options, chunk_size=9, executor=pool))
    with concurrent.futures.ProcessPoolExecutor(2, mp_context=multiprocessing.get_context("spawn")) as pool:
        runs_.append(plan.tolerance(**options, chunk_size=16, executor=pool))
    runs_.append(plan.tolerance(**options, chunk_size=8, workers=2))     # the run's own worker processes
    for other in runs_:
        assert other.parameters.keys() == base.parameters.keys()
        for address in base.parameters:
            assert np.array_equal(other.parameters[address], base.parameters[address]), address
        assert np.array_equal(other.passed, base.passed)
        for address in ("s2.vce", "max_source_amplitude", "s3.region", "status"):
            assert np.array_equal(other.sweep[address], base.sweep[address]), address
    other_seed = plan.tolerance(**{**options, "seed": 12346})
    assert not np.array_equal(other_seed.parameters["s1.rc"], base.parameters["s1.rc"])
    assert 0 < base.yield_fraction < 1  # a run with both outcomes


def test_fresh_entropy_is_reported_and_reproduces_the_run():
    plan = fixed_bias_plan()
    first = plan.tolerance(samples=20)
    again = plan.tolerance(samples=20, seed=first.seed)
    assert np.array_equal(first.parameters["s1.rc"], again.parameters["s1.rc"])


def test_passed_is_the_check_rule_of_single_solves_of_its_own_samples():
    plan = demo_plan()
    result = plan.tolerance(samples=24, seed=7, resistors=0.25, beta=(0.3, 3.0), temperature=(-30.0, 90.0),
                            required_amplitude=0.012)
    assert 0 < result.passed.sum() < result.samples
    for i in range(result.samples):
        trial = plan.copy()
        for address, values in result.parameters.items():
            trial.set(address, float(values[i]))
        try:
            single = trial.solve()
        except ampplan.errors.AmpplanError:
            single = None
        assert bool(result.passed[i]) == check_rule(single, 0.012), i
        if single is not None:
            assert result.sweep["s2.vce"][i] == pytest.approx(single["s2.vce"], rel=1e-9)


def test_yield_of_a_temperature_spread_by_hand():
    # V_CE(T) = V_CC − β·R_C·(V_CC − V_BE − TC·(T − 25))/R_B falls as T rises; it reaches
    # V_CE(sat) at T*, so a sample passes exactly when its temperature is below T*.
    rb = 960e3
    t_star = 25.0 + ((VCC - (VCC - VCE_SAT) * rb / (BETA * RC)) - VBE) / TC_VBE
    lo, hi = 0.0, 100.0
    assert lo + 10 < t_star < hi - 10
    result = fixed_bias_plan(rb).tolerance(samples=4000, seed=3, **{**ONLY, "temperature": (lo, hi)},
                                         beta_temperature_coefficient=0.0)
    assert list(result.parameters) == ["temperature"]
    t = result.parameters["temperature"]
    assert np.array_equal(result.passed, t < t_star)  # every sample, counted by hand
    expected = (t_star - lo) / (hi - lo)
    # Binomial spread of the observed yield: within 4 standard deviations.
    assert abs(result.yield_fraction - expected) < 4 * math.sqrt(expected * (1 - expected) / result.samples)


def test_yield_of_a_beta_spread_by_hand():
    # The stage saturates above β* = (V_CC − V_CE(sat))·R_B / (R_C·(V_CC − V_BE)); β is drawn
    # uniformly in ln β over the factor range, so the yield is ln(β*/β_lo) / ln(β_hi/β_lo).
    beta_star = (VCC - VCE_SAT) * RB / (RC * (VCC - VBE))
    lo, hi = 0.5 * BETA, 2.0 * BETA
    result = fixed_bias_plan().tolerance(samples=4000, seed=4, **{**ONLY, "beta": (0.5, 2.0)})
    beta = result.parameters["s1.device.beta"]
    assert beta.min() >= lo and beta.max() <= hi
    assert np.array_equal(result.passed, beta < beta_star)
    expected = math.log(beta_star / lo) / math.log(hi / lo)
    assert abs(result.yield_fraction - expected) < 4 * math.sqrt(expected * (1 - expected) / result.samples)


def test_sensitivity_ranks_what_drives_a_margin():
    # V_CE = V_CC − β·R_C·(V_CC − V_BE)/R_B: with β spread 2:1, resistors 1 % and V_BE ±10 mV,
    # β drives the saturation margin most, downward; the values equal scipy.stats.spearmanr.
    result = fixed_bias_plan().tolerance(samples=400, seed=9, resistors=0.01, beta=(0.5, 1.0), vbe_on=0.01,
                                         temperature=None)
    assert result.passed.all()
    ranking = result.sensitivity["s1.saturation_margin"]
    assert ranking[0][0] == "s1.device.beta" and ranking[0][1] < -0.9
    assert [abs(rho) for _, rho in ranking] == sorted((abs(rho) for _, rho in ranking), reverse=True)
    margin = result.sweep["s1.saturation_margin"]
    for address, rho in ranking:
        assert rho == pytest.approx(stats.spearmanr(result.parameters[address], margin).statistic, abs=1e-9)


def test_draws_follow_their_distributions():
    # Kolmogorov–Smirnov against scipy.stats: uniform on ±t for resistors, log-uniform for β,
    # normal with σ = t/3 for the normal distribution (clipped at 6σ, far beyond these samples).
    plan = fixed_bias_plan()
    for distribution in ("uniform", "normal"):
        spreads = runs.spreads_of(plan, "constant-drop", resistors=0.05, beta=(0.5, 2.0), vbe_on=0.01,
                                  temperature=(0.0, 50.0), distribution=distribution,
                                  beta_temperature_coefficient=0.0)
        spec = runs.ToleranceSpec(spreads, entropy=99, distribution=distribution, model="constant-drop",
                                  beta_temperature_coefficient=0.0, required_amplitude=None)
        values = runs.draw(spec, 0, 20_000)
        relative = values["s1.rc"] / RC - 1.0
        log_beta = np.log(values["s1.device.beta"] / BETA)
        if distribution == "uniform":
            assert stats.kstest(relative, stats.uniform(-0.05, 0.1).cdf).pvalue > 1e-3
            assert stats.kstest(log_beta, stats.uniform(-math.log(2), 2 * math.log(2)).cdf).pvalue > 1e-3
            assert stats.kstest(values["temperature"], stats.uniform(0.0, 50.0).cdf).pvalue > 1e-3
        else:
            assert stats.kstest(relative, stats.norm(0.0, 0.05 / 3).cdf).pvalue > 1e-3
            assert stats.kstest(values["s1.device.vbe_on"] - VBE, stats.norm(0.0, 0.01 / 3).cdf).pvalue > 1e-3
    # Blocks are independent of where a chunk starts.
    assert np.array_equal(runs.draw(spec, 8000, 8500)["s1.rc"], runs.draw(spec, 0, 20_000)["s1.rc"][8000:8500])


def test_beta_follows_the_sampled_temperature():
    plan = fixed_bias_plan()
    result = plan.tolerance(samples=50, seed=5, **{**ONLY, "temperature": (0.0, 50.0)},
                            beta_temperature_coefficient=0.005)
    t, beta = result.parameters["temperature"], result.parameters["s1.device.beta"]
    np.testing.assert_allclose(beta, BETA * (1 + 0.005 * (t - 25.0)), rtol=1e-12)


def test_ebers_moll_varies_the_saturation_current_for_a_vbe_spread():
    # Same V_BE shift at the same current: I_S·exp(−ΔV/(n·V_T)) (exponential junction law,
    # V_T = kT/q from scipy.constants).
    from scipy import constants
    plan = fixed_bias_plan()
    result = plan.tolerance(samples=30, seed=6, **{**ONLY, "vbe_on": 0.02}, model="ebers-moll")
    v_t = constants.Boltzmann * (25.0 + constants.zero_Celsius) / constants.elementary_charge
    ratio = result.parameters["s1.device.saturation_current"] / plan.get("s1.device.saturation_current")
    shift = -np.log(ratio) * v_t
    assert shift.min() >= -0.02 - 1e-12 and shift.max() <= 0.02 + 1e-12 and np.ptp(shift) > 0.02


def test_worst_percentiles_and_summary():
    plan = demo_plan()
    result = plan.tolerance(samples=60, seed=8, resistors=0.2, beta=(0.3, 3.0), temperature=(-20.0, 80.0))
    worst = result.worst(5)
    assert len(worst) == 5
    failed = int(np.sum(~result.passed))
    assert [w.passed for w in worst] == sorted(w.passed for w in worst)  # failed ones first
    assert all(not w.passed for w in worst[:min(failed, 5)])
    passing = [w for w in worst if w.passed]
    assert [w.closeness for w in passing] == sorted(w.closeness for w in passing)
    for w in worst:
        assert w.parameters == {a: float(v[w.index]) for a, v in result.parameters.items()}
    p = result.percentiles["s2.saturation_margin"]
    values = result.sweep["s2.saturation_margin"]
    assert p[50] == pytest.approx(float(np.percentile(values[np.isfinite(values)], 50)))
    json.dumps(result.to_dict(), allow_nan=False)
    json.dumps(result.to_dict(samples=True), allow_nan=False)
    assert "yield" in repr(result) and "Tolerance run" in result._repr_html_()
    assert result.worst(0) == ()


def test_progress_and_interruption():
    plan = fixed_bias_plan()
    calls = []
    plan.tolerance(samples=30, seed=1, chunk_size=10, progress=lambda done, total: calls.append((done, total)))
    assert calls == [(10, 30), (20, 30), (30, 30)]

    def stop(done, total):
        raise KeyboardInterrupt
    with pytest.raises(KeyboardInterrupt):
        plan.tolerance(samples=30, seed=1, chunk_size=10, progress=stop)
    with concurrent.futures.ThreadPoolExecutor(1) as pool, pytest.raises(KeyboardInterrupt):
        plan.tolerance(samples=30, seed=1, chunk_size=10, progress=stop, executor=pool)
    with pytest.raises(KeyboardInterrupt):
        plan.tolerance(samples=30, seed=1, chunk_size=10, progress=stop, workers=2)


def test_worker_processes_only_for_large_runs_and_where_forking_is_safe():
    import threading
    large = runs.PARALLEL_SAMPLES
    assert runs.worker_count(large - 1, runs.CHUNK) == 1
    assert runs.worker_count(large, runs.CHUNK, workers=1) == 1
    assert runs.worker_count(30, 10, workers=8) == 3          # never more than the chunks
    if "fork" in multiprocessing.get_all_start_methods() and threading.active_count() == 1:
        assert runs.worker_count(large, runs.CHUNK) == len(os.sched_getaffinity(0))
    # Another thread alive (a Jupyter kernel has several): forking could copy a held lock, so no workers.
    release = threading.Event()
    other = threading.Thread(target=release.wait)
    other.start()
    try:
        assert runs.worker_count(large, runs.CHUNK) == 1
    finally:
        release.set()
        other.join()


@pytest.mark.parametrize("options, error, message", [
    ({"samples": 0}, InvalidValueError, r"tolerance samples: must be a whole number >= 1, got 0"),
    ({"samples": True}, InvalidValueError, r"tolerance samples"),
    ({"chunk_size": 0}, InvalidValueError, r"tolerance chunk_size"),
    ({"resistors": 1.5}, InvalidValueError, r"tolerance resistors: must be a number from 0 to below 1"),
    ({"resistors": 0.6, "distribution": "normal"}, InvalidValueError, r"tolerance resistors: .*below 0.5"),
    ({"beta": (2.0, 1.0)}, InvalidValueError, r"tolerance beta: need finite 0 < low <= high"),
    ({"beta": (0.0, 2.0)}, InvalidValueError, r"tolerance beta: need finite 0 < low"),
    ({"beta": 2.0}, InvalidValueError, r"tolerance beta: must be a \(low, high\) pair"),
    ({"vbe_on": -0.01}, InvalidValueError, r"tolerance vbe_on \(volts\)"),
    ({"temperature": (50.0, 0.0)}, InvalidValueError, r"tolerance temperature: need finite low <= high"),
    ({"temperature": (-300.0, 0.0), "beta_temperature_coefficient": 0.0}, InvalidValueError,
     r"tolerance temperature: .*temperature.*-300"),
    ({"temperature": (-200.0, 0.0)}, InvalidValueError, r"tolerance temperature -200 °C: the β temperature factor"),
    ({"distribution": "gauss"}, UnknownModelError, r"distribution must be one of uniform, normal, got 'gauss'"),
    ({"required_amplitude": -1.0}, InvalidValueError, r"tolerance required_amplitude"),
    ({"seed": -1}, InvalidValueError, r"tolerance seed"),
    ({"seed": 1.5}, InvalidValueError, r"tolerance seed"),
    ({"executor": object()}, InvalidValueError, r"tolerance executor: must be a concurrent.futures.Executor"),
    ({"progress": 3}, InvalidValueError, r"tolerance progress: must be callable"),
    ({"workers": 0}, InvalidValueError, r"tolerance workers: must be a whole number >= 1, got 0"),
    ({"beta_temperature_coefficient": math.nan}, InvalidValueError, r"tolerance beta_temperature_coefficient"),
    ({"model": "lookup-table"}, UnknownModelError, r"model must be one of"),
])
def test_bad_tolerance_options_are_named(options, error, message):
    with pytest.raises(error, match=message):
        fixed_bias_plan().tolerance(**{"samples": 5, **options})


def test_worst_refuses_a_bad_count():
    result = fixed_bias_plan().tolerance(samples=5, seed=1)
    with pytest.raises(InvalidValueError, match=r"worst: n must be a whole number >= 0, got -1"):
        result.worst(-1)


# -- corners ---------------------------------------------------------------------------------------

def test_corners_every_combination_and_the_worst_by_hand():
    plan = fixed_bias_plan()
    result = plan.corners(**{**ONLY, "beta": (0.5, 1.0), "temperature": (0.0, 50.0)},
                          beta_temperature_coefficient=0.0)
    assert result.exhaustive and len(result.passed) == 4
    # Worst saturation margin: β high and hot (V_BE lowest): V_CE − V_CE(sat) by the hand formula.
    vbe = VBE + TC_VBE * (50.0 - 25.0)
    vce = VCC - BETA * RC * (VCC - vbe) / RB
    assert vce > VCE_SAT  # still forward-active there
    expected = vce - VCE_SAT
    worst = result.worst_case["s1.saturation_margin"]
    assert worst.value == pytest.approx(expected, abs=1e-12)
    assert worst.parameters == {"s1.device.beta": pytest.approx(BETA), "temperature": 50.0}
    json.dumps(result.to_dict(), allow_nan=False)
    assert "CornersResult" in repr(result) and "Corners" in result._repr_html_()


def test_corner_subset_finds_the_monotonic_worst_case():
    plan = fixed_bias_plan()
    plan.set("s1.rb1", 3e6)  # forward-active at every corner: the margins are smooth and monotonic
    options = dict(resistors=0.1, beta=(0.5, 2.0), vbe_on=0.02, temperature=(0.0, 50.0))
    full = plan.corners(**options)
    subset = plan.corners(**options, max_corners=8)
    assert full.exhaustive and len(full.passed) == 2 ** 5
    assert not subset.exhaustive and len(subset.passed) < 2 ** 5
    for address in ("s1.saturation_margin", "s1.cutoff_margin"):
        assert subset.worst_case[address].value == pytest.approx(full.worst_case[address].value, rel=1e-12)


def test_every_corner_of_the_demo_by_default_and_its_worst_cases_re_solved():
    plan = demo_plan()
    full = plan.corners()                       # 16 varied values: 65,536 corners
    assert full.exhaustive and len(full.passed) == 2 ** 16
    subset = plan.corners(max_corners=4096)
    assert not subset.exhaustive and len(subset.passed) < 100
    for address, worst in full.worst_case.items():
        # The subset's corners are corners too: its worst can only be as low, never lower.
        assert subset.worst_case[address].value >= worst.value
        # Source: a single solve of the plan with that corner's values set one by one.
        single = plan.copy()
        for name, value in worst.parameters.items():
            single.set(name, value)
        assert single.solve()[address] == pytest.approx(worst.value, rel=1e-9, abs=1e-15)


def test_a_margin_no_corner_solves_is_reported_as_such(monkeypatch):
    from ampplan.analyses.whatif import extremes
    solved = extremes.solve_chunked

    def nothing_solves(plan, model, values):
        table = solved(plan, model, values)
        table["s1.swing"] = np.full(len(table["s1.swing"]), np.nan)
        return table

    monkeypatch.setattr(extremes, "solve_chunked", nothing_solves)
    result = fixed_bias_plan().corners(**{**ONLY, "beta": (0.5, 2.0)})
    worst = result.worst_case["s1.swing"]
    assert math.isnan(worst.value) and worst.index is None and worst.parameters == {}
    assert "worst s1.swing: nan no corner solved" in repr(result)
    assert "none solved" in result._repr_html_()
    assert json.loads(json.dumps(result.to_dict(), allow_nan=False))["worst_case"]["s1.swing"]["index"] is None


@pytest.mark.parametrize("options, message", [({"max_corners": 0}, r"corners max_corners"),
                                              ({"required_amplitude": 0.0}, r"corners required_amplitude")])
def test_bad_corner_options(options, message):
    with pytest.raises(InvalidValueError, match=message):
        fixed_bias_plan().corners(**options)


# -- extremes of the spreads -----------------------------------------------------------------------

def test_a_margin_constant_but_for_rounding_has_no_drivers():
    # With R_B2 = 1 Ω, s1's base sits at 12 V·1/(100 k + 1) ≈ 0.12 mV, far below V_BE(on): s1 is cut
    # off, so s2 (PNP, its base pulled to the supply through s1's R_C) and s3 (its base pulled to
    # ground through s2's R_C) are cut off too. By hand (cutoff: no current, Sedra & Smith, the BJT
    # chapter, from memory) s1's V_CE is the supply, 12 V, and its saturation margin 12 − 0.2 V in
    # every sample, whatever the resistors: a rank correlation of its rounding noise is no driver.
    plan = demo_plan()
    plan.set("s1.rb2", 1.0)
    result = plan.tolerance(samples=100, seed=4, **{**ONLY, "resistors": 0.05})
    margin = result.sweep["s1.saturation_margin"]
    assert set(result.sweep["s1.region"]) == set(result.sweep["s2.region"]) == {"cutoff"}
    np.testing.assert_allclose(margin, 12.0 - 0.2, rtol=1e-12)
    assert result.sensitivity["s1.saturation_margin"] == ()
    assert result.sensitivity["s2.saturation_margin"] == ()
    assert "s1.saturation_margin driven by" not in repr(result)


def test_a_run_where_no_sample_solves():
    # The collector current source asks 5 mA of a transistor whose β·I_B is at most
    # 225 · (10 − 0.69) V / 0.95 MΩ ≈ 2.2 mA (β 100 · 2 · (1 + 0.005·25) at 50 °C, R_B − 5 %): no
    # operating point in any sample (I_C cannot exceed β·I_B; Sedra & Smith, from memory).
    from test_whatif_sweep import forced_collector_plan
    plan = forced_collector_plan()
    plan.set("s1.IX", 5e-3)
    result = plan.tolerance(samples=20, seed=1)
    assert not result.sweep.ok.any() and result.yield_fraction == 0.0
    assert all(pairs == () for pairs in result.sensitivity.values())
    assert all(math.isnan(v) for p in result.percentiles.values() for v in p.values())
    assert [w.limiting for w in result.worst(3)] == ["status"] * 3
    json.dumps(result.to_dict(samples=True), allow_nan=False)


@pytest.mark.parametrize("options, message", [
    # A normal draw is clipped at ±6σ = ±2 half-ranges: 47.5 ± 2·102.5 °C leaves the models' range.
    ({"temperature": (-55.0, 150.0), "distribution": "normal"},
     r"tolerance temperature: a normal draw reaches -157.5 … 252.5 °C .*-55 °C and <= 150 °C"),
    # The β temperature factor 1 + 0.02·(T − 25) is negative below −25 °C, which a normal draw over
    # 0 … 50 °C reaches (25 ± 50 °C).
    ({"temperature": (0.0, 50.0), "distribution": "normal", "beta_temperature_coefficient": 0.02},
     r"tolerance temperature -25 °C: the β temperature factor"),
    # V_BE(on) 0.7 V ± 0.35 V · 2 (normal) goes below 0.
    ({"vbe_on": 0.35, "distribution": "normal"}, r"tolerance vbe_on: s1.device.vbe_on reaches 0 V .*must be > 0"),
])
def test_spreads_that_leave_the_valid_range_are_refused_before_solving(options, message):
    with pytest.raises(InvalidValueError, match=message):
        fixed_bias_plan().tolerance(samples=5, **{**ONLY, **options})


def test_a_spread_past_a_declared_bound_is_refused_for_runs_and_corners():
    plan = fixed_bias_plan()
    plan.set("s1.device.vbe_on", 0.3)
    with pytest.raises(InvalidValueError, match=r"tolerance vbe_on: s1.device.vbe_on reaches -100 mV"):
        plan.tolerance(samples=5, **{**ONLY, "vbe_on": 0.4})
    with pytest.raises(InvalidValueError, match=r"tolerance vbe_on: s1.device.vbe_on reaches -100 mV"):
        plan.corners(**{**ONLY, "vbe_on": 0.4})
    plan.set("s1.rb1", 1e12)  # the largest resistance a plan takes (1 TΩ)
    with pytest.raises(InvalidValueError, match=r"tolerance resistors: s1.rb1 reaches 1.05 TΩ"):
        plan.tolerance(samples=5, **{**ONLY, "resistors": 0.05})

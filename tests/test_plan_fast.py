"""Fast plan solves (issue 6 item 1) against the slow references they replace, and the messages and
not-applicable figures of issue 9 items 11 and 15.

References:

- The bisected quasi-static sweep (:func:`ampplan.analyses.sweep.clipping_sweep`): the previous
  way of finding the first clip, a batched solve of the held circuit at every step, bracketing
  and refining to a part in 10^9. The exact constant-drop answer (one incremental solve) and the
  Ebers–Moll bracketed search must agree with it to its own resolution. Its checks accept a margin
  down to -1e-9 of the largest voltage (or current) in the answer, so it reads the edge slightly
  late: 1e-6 relative covers that.
- One incremental circuit per figure (:func:`ampplan.analyses.smallsignal.solve_incremental`,
  which builds and solves a separate circuit for each): the one batched solve of every variant
  must give the same figures to 1e-9.
- Hybrid-π formulas for the clipping of a fully bypassed common-emitter (Sedra & Smith,
  *Microelectronic Circuits*, hybrid-π section, from memory) are in test_plan_analyses.py.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

import ampplan
from ampplan.analyses import chain
from ampplan.analyses.smallsignal import incremental_models, solve_incremental
from ampplan.analyses.sweep import clipping_sweep

DEMO = Path(ampplan.__file__).parent / "data" / "demo_plan.json"


def demo():
    return ampplan.Plan.load(DEMO)


def variants():
    """Plans the comparisons run over: the demo and changes that move which stage clips first."""
    out = {"demo": demo()}
    p = demo()
    p.set("s1.re", 47.0)                      # more gain in s1
    out["s1-high-gain"] = p
    p = demo()
    p.set("s3.re", 470.0)                     # a heavily loaded follower
    out["s3-heavy"] = p
    p = demo()
    p.set("source_resistance", 0.0)           # ideal source
    out["ideal-source"] = p
    p = demo()
    p.set("load_resistance", 1e3)
    p.set("s2.device.early_voltage", 30.0)
    out["low-early"] = p
    two = ampplan.Plan(supply=9.0, source_resistance=1e3, load_resistance=22e3)
    q = ampplan.Transistor(polarity="npn", beta=180.0, early_voltage=80.0)
    two.add(ampplan.CommonEmitter(rb1=68e3, rb2=12e3, rc=3.9e3, re=100.0, re_bypassed=680.0, device=q))
    two.add(ampplan.CommonCollector(re=2.2e3, device=q), coupling="direct")
    out["two-stage"] = two
    return out


def oracle(plan, model, active_edge="vce-sat"):
    """The bisected sweep at the plan's own Q-point."""
    compiled = plan.compile()
    op = compiled.circuit.solve(model=model, temperature=plan.temperature, active_edge=active_edge)
    span = max(abs(plan.supply), abs(plan.negative_supply))
    return clipping_sweep(op, compiled.source, compiled.transistor_stage, model, active_edge, span=span)


@pytest.mark.parametrize("name", list(variants()))
@pytest.mark.parametrize("model,active_edge", [("constant-drop", "vce-sat"), ("constant-drop", "vcb-zero"),
                                               ("ebers-moll", "vce-sat")])
def test_clipping_equals_the_bisected_sweep(name, model, active_edge):
    plan = variants()[name]
    res = plan.solve(model=model, active_edge=active_edge)
    ref = oracle(plan, model, active_edge)
    # Source: the bisected sweep (module docstring), to its resolution.
    for side in ("positive", "negative"):
        got, want = getattr(res.clipping, side), getattr(ref, side)
        assert math.isclose(got, want, rel_tol=1e-6) or (math.isinf(got) and math.isinf(want)), (side, got, want)
        assert getattr(res.clipping, f"{side}_stage") == getattr(ref, f"{side}_stage")
        assert getattr(res.clipping, f"{side}_region") == getattr(ref, f"{side}_region")


@pytest.mark.parametrize("name", list(variants()))
@pytest.mark.parametrize("model", ["constant-drop", "ebers-moll"])
def test_small_signal_figures_equal_one_circuit_per_figure(name, model):
    plan = variants()[name]
    res = plan.solve(model=model)
    compiled = plan.compile()
    op = res.operating_point
    models = incremental_models(op)
    drive = solve_incremental(op, models, excite=compiled.source)
    # Source: separate incremental circuits, one per figure (the previous implementation).
    assert math.isclose(res.gain, drive.v[compiled.load_node], rel_tol=1e-9)
    for k, (nodes, s) in enumerate(zip(compiled.stages, res.stages), start=1):
        upstream = {n: {nodes.input} for n, tag in compiled.owner.items() if tag < k}
        downstream = {n: {nodes.output} for n, tag in compiled.owner.items() if tag > k}
        r_in = solve_incremental(op, models, inject=nodes.input, ground=upstream).v[nodes.input]
        r_out = solve_incremental(op, models, inject=nodes.output, ground=downstream).v[nodes.output]
        assert math.isclose(s.input_resistance, r_in, rel_tol=1e-9)
        assert math.isclose(s.output_resistance, r_out, rel_tol=1e-9)
        assert math.isclose(s.gain, drive.v[nodes.output] / drive.v[nodes.input], rel_tol=1e-9)
        q = compiled.circuit.element(nodes.transistor)
        beta = models[q.name].beta_ac
        for which, caps in (("ac", "short"), ("dc", "open")):
            sol = solve_incremental(op, models, capacitors=caps, port=(q.name, 1.0 / beta))
            resistance = -q.device.sign * (sol.v[q.collector] - sol.v[q.emitter])
            assert math.isclose(getattr(s.load_lines, which).resistance, resistance, rel_tol=1e-9)


def test_exact_clipping_is_a_zero_of_the_check_it_names():
    """At the reported amplitude the forward-active branch of the held circuit sits on the edge."""
    plan = demo()
    res = plan.solve()
    compiled = plan.compile()
    op = res.operating_point
    from ampplan.analyses.sweep import held_capacitor_circuit, with_hybrid_pi
    held = with_hybrid_pi(held_capacitor_circuit(op), op, incremental_models(op))
    names = list(op.transistors)
    for side, sign in (("positive", 1.0), ("negative", -1.0)):
        step = sign * getattr(res.clipping, side)
        at = held.solve(batch={compiled.source: np.array([step])}, assume={n: "forward-active" for n in names})
        stage = getattr(res.clipping, f"{side}_stage")
        q = next(n for n in names if compiled.transistor_stage[n] == stage)
        check = 0 if getattr(res.clipping, f"{side}_region") == "cutoff" else 1
        margin = at.transistors[q].checks[check].margin[0]
        scale = abs(op.transistors[q].ib) if check == 0 else 1.0
        # Source: the constant-drop equations solved directly at that excursion (the edge itself).
        assert abs(margin) <= 1e-9 * scale


# -- issue 9 item 11: messages name the user's address, internal model resistances are not values --
@pytest.mark.parametrize("address,value", [("s1.device.beta", 1e12), ("s1.device.early_voltage", 1e-3),
                                           ("s3.device.beta", 1e12)])
def test_extreme_device_values_solve_without_internal_element_errors(address, value):
    plan = demo()
    plan.set(address, value)
    for model in ("constant-drop", "ebers-moll"):
        res = plan.solve(model=model)
        text = repr(res)
        assert "r_pi" not in text and "_q_r_" not in text
        assert res.max_source_amplitude >= 0.0


def test_batch_errors_name_the_plan_address():
    plan = demo()
    with pytest.raises(ampplan.errors.InvalidValueError, match=r"s1\.device\.beta") as info:
        plan.solve(batch={"s1.device.beta": np.array([100.0, -5.0])})
    assert "s1_q" not in str(info.value) and "sample" in str(info.value)
    with pytest.raises(ampplan.errors.InvalidValueError, match=r"s2\.rc") as info:
        plan.solve(batch={"s2.rc": [3.9e3, 0.0]})
    assert "s2_rc" not in str(info.value)


# -- issue 9 item 15: a stage out of forward-active --------------------------------------------------
def saturated_demo():
    plan = demo()
    plan.set("s2.rc", 20e3)              # s2 saturates (V_EC pinned at V_EC(sat))
    return plan


def test_small_signal_figures_of_a_stage_not_forward_active_are_not_applicable():
    res = saturated_demo().solve()
    s2 = res.stage("s2")
    assert s2.region == "saturation"
    assert math.isnan(s2.gain) and math.isnan(s2.input_resistance) and math.isnan(s2.output_resistance)
    assert math.isnan(res.gain)
    row = next(line for line in res.table().splitlines() if line.lstrip("! ").startswith("s2"))
    assert row.split()[-3:] == ["n/a", "n/a", "n/a"]
    d = res.to_dict()["stages"][1]
    assert d["gain"] is None and d["input_resistance"] is None
    # The forward-active neighbours keep their figures.
    assert math.isfinite(res.stage("s1").gain) and math.isfinite(res.stage("s3").input_resistance)


def test_amplitude_and_estimate_agree_when_a_stage_is_out():
    res = saturated_demo().solve()
    assert res.max_source_amplitude == 0.0 and res.max_source_amplitude_estimate == 0.0
    assert res.limiting_stage == "s2"
    summary = res.summary()
    assert "∞" not in summary
    assert "s2 is already in saturation" in summary
    assert "n/a" in summary.splitlines()[0]


# -- Ebers–Moll clipping: every path of the Newton search, and the grid search behind it ------------
def _no_newton(compiled, held, op, params, drive, system, todo, span, reach):
    """Newton finds nothing: every bracket goes to the grid search."""
    nothing = np.full((todo.size, 2), -1)
    return np.full((todo.size, 2), np.nan), nothing, nothing, np.zeros((todo.size, 2), dtype=bool)


@pytest.mark.parametrize("name", list(variants()))
def test_grid_search_alone_equals_the_bisected_sweep(name, monkeypatch):
    from ampplan.analyses import clipping
    monkeypatch.setattr(clipping, "newton_edges", _no_newton)
    plan = variants()[name]
    res = plan.solve(model="ebers-moll")
    ref = oracle(plan, "ebers-moll")
    # Source: the bisected sweep (module docstring), to its resolution.
    for side in ("positive", "negative"):
        got, want = getattr(res.clipping, side), getattr(ref, side)
        assert math.isclose(got, want, rel_tol=1e-6) or (math.isinf(got) and math.isinf(want)), (side, got, want)
        assert getattr(res.clipping, f"{side}_stage") == getattr(ref, f"{side}_stage")
        assert getattr(res.clipping, f"{side}_region") == getattr(ref, f"{side}_region")


def _wide_spread(count, seed):
    """The demo with every stage resistor within a factor of two and β from a fifth to five times
    nominal (a seeded generator: inputs only; the answers come from the bisected sweep)."""
    plan = demo()
    rng = np.random.default_rng(seed)
    batch = {}
    for address in ("s1.rb1", "s1.rb2", "s1.rc", "s1.re", "s1.re_bypassed", "s2.rc", "s2.re", "s2.re_bypassed",
                    "s3.re"):
        batch[address] = plan.get(address) * np.exp(rng.uniform(-0.7, 0.7, count))
    for sid in ("s1", "s2", "s3"):
        batch[f"{sid}.device.beta"] = plan.get(f"{sid}.device.beta") * np.exp(rng.uniform(-1.6, 1.6, count))
    return plan, batch


def test_every_path_of_the_newton_search_equals_the_bisected_sweep(monkeypatch):
    """Newton from the Q-point, Newton again from the circuit solved at the first-order edge, and
    the grid search for what Newton cannot settle: found in a batch of widely spread plans, each
    checked alone against the bisected sweep."""
    from ampplan.analyses import clipping
    from ampplan.solver import edges
    plan, batch = _wide_spread(1500, seed=5)
    seen = {"todo": None, "calls": [], "grid": []}
    newton_edges, solve, searched = clipping.newton_edges, edges.EdgeProblem.solve, clipping._searched

    def spy_newton(compiled, held, op, params, drive, system, todo, *rest):
        seen["todo"] = todo
        return newton_edges(compiled, held, op, params, drive, system, todo, *rest)

    def spy_solve(self, rows, *args, hold=None, **kw):
        seen["calls"].append((rows, hold is not None))
        return solve(self, rows, *args, hold=hold, **kw)

    def spy_searched(out, todo, *rest):
        seen["grid"].append(todo)
        return searched(out, todo, *rest)

    monkeypatch.setattr(clipping, "newton_edges", spy_newton)
    monkeypatch.setattr(edges.EdgeProblem, "solve", spy_solve)
    monkeypatch.setattr(clipping, "_searched", spy_searched)
    res = plan.solve(model="ebers-moll", batch=batch)
    todo = seen["todo"]
    retried = set(todo[np.concatenate([r for r, held in seen["calls"] if held])].tolist())
    grid = set(np.concatenate(seen["grid"]).tolist()) if seen["grid"] else set()
    later = set(todo[np.concatenate([r for r, held in seen["calls"][1:] if not held])].tolist())
    paths = {"retried": sorted(retried - grid), "grid search": sorted(grid),
             "first pin": sorted(set(todo.tolist()) - later - retried - grid)}
    assert all(paths.values()), {k: len(v) for k, v in paths.items()}
    for path, samples in paths.items():
        for k in samples[:2]:
            single = plan.copy()
            for address, values in batch.items():
                single.set(address, float(values[k]))
            ref = oracle(single, "ebers-moll")
            for side in ("positive", "negative"):
                got, want = float(getattr(res.clipping, side)[k]), getattr(ref, side)
                # Source: the bisected sweep of that plan alone, to its resolution.
                assert math.isclose(got, want, rel_tol=1e-6) or (math.isinf(got) and math.isinf(want)), \
                    (path, k, side, got, want)
                assert getattr(res.clipping, f"{side}_stage")[k] == getattr(ref, f"{side}_stage"), (path, k)
                assert getattr(res.clipping, f"{side}_region")[k] == getattr(ref, f"{side}_region"), (path, k)


def _two_common_emitters(rc1):
    """Two capacitor-coupled common-emitter stages: a positive excursion drives the first toward
    saturation and the second toward cutoff, and ``rc1`` moves which of the two comes first."""
    plan = ampplan.Plan(supply=12.0, source_resistance=600.0, load_resistance=10e3)
    q = ampplan.Transistor(polarity="npn", beta=150.0, early_voltage=90.0)
    plan.add(ampplan.CommonEmitter(rb1=82e3, rb2=15e3, rc=rc1, re=220.0, re_bypassed=1e3, device=q))
    plan.add(ampplan.CommonEmitter(rb1=47e3, rb2=10e3, rc=3.3e3, re=1e3, re_bypassed=None, device=q))
    return plan


@pytest.mark.parametrize("rc1, path", [
    (9.8e3, "the first-order order is wrong: the second stage's cutoff is pinned first, the first "
            "stage is past saturation there, so its saturation is pinned next"),
    (10e3, "the second stage's cutoff is never reached (the first saturates and stops driving it): "
           "Newton fails from the Q-point and from the first-order edge, the next check is pinned"),
])
def test_a_check_pinned_after_the_first_equals_the_bisected_sweep(rc1, path, monkeypatch):
    from ampplan.solver import edges
    calls = []
    solve = edges.EdgeProblem.solve

    def spy(self, rows, x, source, transistor, check, hold=None, **kw):
        calls.append((transistor.tolist(), check.tolist(), hold is not None))
        return solve(self, rows, x, source, transistor, check, hold=hold, **kw)

    monkeypatch.setattr(edges.EdgeProblem, "solve", spy)
    plan = _two_common_emitters(rc1)
    res = plan.solve(model="ebers-moll")
    # The path the parameter names (brackets: positive, then negative; checks: 0 cutoff, 1 saturation).
    assert calls[0][:2] == ([1, 1], [0, 1])
    assert calls[-1][:2] == ([0], [1]) and not calls[-1][2]
    assert any(held for _, _, held in calls) == (rc1 == 10e3), path
    ref = oracle(plan, "ebers-moll")
    assert res.clipping.positive_stage == ref.positive_stage == "s1"
    for side in ("positive", "negative"):
        got, want = getattr(res.clipping, side), getattr(ref, side)
        # Source: the bisected sweep (module docstring), to its resolution.
        assert math.isclose(got, want, rel_tol=1e-6), (side, got, want)
        assert getattr(res.clipping, f"{side}_stage") == getattr(ref, f"{side}_stage")
        assert getattr(res.clipping, f"{side}_region") == getattr(ref, f"{side}_region")

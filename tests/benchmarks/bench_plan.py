"""Plan benchmark: a script, not a test (``make bench`` runs it after the solver benchmark).

Prints, for the 3-stage demo plan (ampplan/data/demo_plan.json), CPU time (``time.process_time``):

(a) ``plan.solve()`` with each device model (median of repeated solves), beside its target
    (issue 6 item 1: under 10 ms constant-drop, under 30 ms Ebers–Moll) and beside the baseline
    measured in the same run: the previous implementation's way of finding the first clip, the
    bisected sweep of :func:`ampplan.analyses.sweep.clipping_sweep` (kept as the tests' oracle),
    timed on its own;
(b) a constant-drop plan batch of 100,000 samples (β, a resistor and the supply varied), solved in
    blocks so that memory stays bounded, beside the same samples through a loop of single
    ``plan.solve()`` calls extrapolated from a few.

Missing a target is reported, not failed: speed is measured here, never asserted in the tests.
Timings on a shared machine are noisy.
"""

from __future__ import annotations

import statistics
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

import ampplan  # noqa: E402
from ampplan.analyses.sweep import clipping_sweep  # noqa: E402

DEMO = Path(ampplan.__file__).parent / "data" / "demo_plan.json"
TARGETS_MS = {"constant-drop": 10.0, "ebers-moll": 30.0}
BATCH, BLOCK = 100_000, 10_000


def cpu_ms(call, repeat):
    times = []
    for _ in range(repeat):
        start = time.process_time()
        call()
        times.append((time.process_time() - start) * 1e3)
    return statistics.median(times)


def main():
    plan = ampplan.Plan.load(DEMO)
    print("plan.solve() of the 3-stage demo, CPU ms (median):")
    for model, target in TARGETS_MS.items():
        plan.solve(model=model)
        ms = cpu_ms(lambda: plan.solve(model=model), 20)
        compiled = plan.compile()
        op = compiled.circuit.solve(model=model, temperature=plan.temperature)
        sweep_ms = cpu_ms(lambda: clipping_sweep(op, compiled.source, compiled.transistor_stage, model,
                                                 span=plan.supply), 3)
        verdict = "met" if ms < target else "MISSED"
        print(f"  {model:13s} {ms:8.2f} ms   target < {target:g} ms: {verdict};"
              f"   bisected clipping sweep alone (previous way): {sweep_ms:7.1f} ms ({sweep_ms / ms:.1f}x the whole solve)")

    rng = np.random.default_rng(1)
    batch = {"s1.device.beta": rng.uniform(100.0, 400.0, BATCH), "s1.rc": rng.uniform(3.3e3, 5.6e3, BATCH),
             "supply": rng.uniform(10.0, 14.0, BATCH)}
    start = time.process_time()
    fa = 0
    for at in range(0, BATCH, BLOCK):
        res = plan.solve(batch={k: v[at:at + BLOCK] for k, v in batch.items()})
        fa += int(np.sum(res.all_forward_active))
    batch_s = time.process_time() - start
    loop_n = 20
    single = cpu_ms(lambda: plan.solve(), loop_n) / 1e3
    print(f"constant-drop plan batch, {BATCH:,} samples in blocks of {BLOCK:,}: {batch_s:.2f} s CPU "
          f"({fa:,} all forward-active); a loop of plan.solve() would take about {single * BATCH:.0f} s "
          f"(extrapolated from {loop_n}): {single * BATCH / batch_s:.0f}x")


if __name__ == "__main__":
    main()

"""The constant-drop region search on long circuits (issue 9 item 8).

The search must scale with the number of transistors, every answer it gives must be consistent,
and it must equal an independent reference wherever one exists. Sources, named again beside each
check:

- the region conditions of DESIGN §4, evaluated again by our own code (reference.region_checks) on
  the reported values;
- Kirchhoff's current law, recomputed from the reported values (conftest.kcl_imbalance);
- brute force over all 4**N assignments (reference.constant_drop_enumerate) and sympy exact
  rationals (reference.constant_drop_exact), for chains small enough for them;
- superposition of open circuits: capacitor-coupled stages share only the supply at DC, so a chain
  of them must give each stage the Q-point it has alone (checked in turn against sympy).
"""

from __future__ import annotations

import subprocess
import sys
import textwrap

import numpy as np
import pytest
from hypothesis import assume, given, note, settings
from hypothesis import strategies as st

import ampplan
import reference as ref
from ampplan import errors
from ampplan.solver import constant_drop as cd
from conftest import _hypothesis_draw, as_solution, compare, kcl_imbalance, regions_of


def _assert_consistent(op, elements):
    # Source: DESIGN §4's region conditions, evaluated by reference.region_checks on the reported
    # values (relative slack 1e-9), and KCL at every node to 1e-12 of the largest current.
    sol = as_solution(op)
    sol["checks"] = {e.name: ref.region_checks(e, sol, op.transistors[e.name].region)
                     for e in ref.transistors_of(elements)}
    assert ref.is_consistent(sol, rtol=1e-9), sol["checks"]
    net, scale = kcl_imbalance(op, elements)
    for node, imbalance in net.items():
        assert abs(imbalance) <= 1e-12 * scale[node], f"node {node}: {imbalance!r} A"


@settings(max_examples=30)
@given(data=st.data(), stages=st.integers(1, 15))
def test_chain_answer_is_consistent_and_equals_the_references(data, stages):
    # Chains of 1..15 complementary stages (2..30 transistors), direct-coupled so that every stage
    # loads and biases the next; random values, so some stages saturate or cut off.
    elements = ref.build_chain(_hypothesis_draw(data.draw), stages=stages)
    n_q = 2 * stages
    try:
        op = ref.to_circuit(elements).solve(model="constant-drop")
    except errors.NoConsistentRegionError:
        if n_q <= 4:
            # Source: brute force over every assignment (reference.constant_drop_enumerate).
            assert not ref.constant_drop_enumerate(elements), "ampplan found no region; brute force did"
        else:
            # Source: sympy exact solution of the regions the Ebers–Moll answer points to: if those
            # are consistent, a consistent assignment existed and the search missed it.
            em = ref.to_circuit(elements).solve(model="ebers-moll")
            exact = ref.constant_drop_exact(elements, regions_of(em))
            assert not ref.is_consistent(exact, rtol=1e-12), "ampplan found no region; the Ebers–Moll one holds"
        assume(False)
    note(f"{n_q} transistors: {op.method}")
    _assert_consistent(op, elements)
    if n_q <= 6:
        # Source: sympy exact rationals on the reported regions, equal to 1e-9.
        exact = ref.constant_drop_exact(elements, regions_of(op))
        assert exact is not None and ref.is_consistent(exact, rtol=1e-12), exact and exact["checks"]
        bad = compare(as_solution(op), exact, 1e-9, elements)
        assert not bad, "\n".join(bad)
    if n_q <= 4:
        # Source: brute force (reference.constant_drop_enumerate): the answer and every alternative
        # are among the consistent assignments, and a unique one has no alternatives.
        found = [r for r, _, _ in ref.constant_drop_enumerate(elements)]
        assert regions_of(op) in found
        assert all(regions_of(a) in found for a in op.alternatives)
        if len(found) == 1:
            assert not op.alternatives
    for alt in op.alternatives:
        _assert_consistent(alt, elements)


def _stage(draw, k: int) -> list:
    """Stage k: a divider-biased common-emitter stage on the supply ``vcc``, NPN or PNP (an emitter
    resistor toward its own rail), its base capacitor-coupled to the previous collector."""
    r = lambda name, lo, hi: draw(f"{name}_{k}", lo, hi, True)  # noqa: E731
    pnp = draw(f"pnp_{k}", 0.0, 1.0, False) < 0.5
    b, c, e = f"b{k}", f"c{k}", f"e{k}"
    high, low = (ref.GROUND, "vcc") if pnp else ("vcc", ref.GROUND)
    out = [ref.R(f"RB1_{k}", "vcc", b, r("RB1", 1e3, 1e6)), ref.R(f"RB2_{k}", b, ref.GROUND, r("RB2", 1e3, 1e6)),
           ref.R(f"RC_{k}", high, c, r("RC", 100.0, 1e5)), ref.R(f"RE_{k}", e, low, r("RE", 47.0, 1e4)),
           ref.Q(f"Q_{k}", c, b, e, polarity="pnp" if pnp else "npn", beta=r("beta", 30.0, 400.0))]
    if k:
        out.append(ref.C(f"CC_{k}", f"c{k - 1}", b))
    return out


@settings(max_examples=10)
@given(data=st.data(), stages=st.integers(2, 30))
def test_capacitor_coupled_chain_equals_its_stages_alone(data, stages):
    # Source: at DC the coupling capacitors are open, so each stage sees only the supply: a chain of
    # N such stages must give each stage its Q-point alone (superposition of open circuits), which
    # brute force over its four regions (reference.constant_drop_enumerate) and sympy's exact
    # rationals (reference.constant_drop_exact) give independently of ampplan.
    draw = _hypothesis_draw(data.draw)
    supply = [ref.V("VCC", "vcc", ref.GROUND, draw("VCC", 3.0, 30.0, False))]
    parts = [_stage(draw, k) for k in range(stages)]
    expected = {}
    for part in parts:
        alone = supply + [e for e in part if e.kind != "C"]
        found = ref.constant_drop_enumerate(alone)
        assume(len(found) == 1)
        expected[part[4].name] = (found[0][0][part[4].name],
                                  ref.constant_drop_exact(alone, found[0][0])["transistors"][part[4].name])
    elements = supply + [e for part in parts for e in part]
    op = ref.to_circuit(elements).solve(model="constant-drop")
    for name, (region, exact) in expected.items():
        t = op.transistors[name]
        assert t.region == region, name
        for field in ("ic", "ib", "vbe", "vce"):
            assert getattr(t, field) == pytest.approx(float(exact[field]), rel=1e-9, abs=1e-15), (name, field)
    _assert_consistent(op, elements)


@settings(max_examples=10)
@given(data=st.data(), stages=st.integers(3, 6), size=st.integers(2, 6))
def test_batch_of_a_chain_equals_its_single_solves(data, stages, size):
    # Source: issue 6 §2/§3: each batch sample equals the single solve of that sample (to 1e-9, the
    # issue's tolerance: both follow one search, and only the rounding of the assembled sums, whose
    # order depends on the batch size, differs), a failed one carries its status and NaN.
    draw = _hypothesis_draw(data.draw)
    elements = ref.build_chain(draw, stages=stages)
    names = [e.name for e in elements if e.kind == "R"][:6] + [e.name for e in ref.transistors_of(elements)][:2]
    batch = {}
    for name in names:
        if name.startswith("Q"):
            batch[f"{name}.beta"] = np.array([draw(f"{name}.beta[{k}]", 30.0, 400.0, True) for k in range(size)])
        else:
            batch[name] = np.array([draw(f"{name}[{k}]", 100.0, 1e6, True) for k in range(size)])
    op_b = ref.to_circuit(elements).solve(model="constant-drop", batch=batch)
    for k in range(size):
        sample = ref.with_changes(elements, {key: arr[k] for key, arr in batch.items()})
        try:
            op_1 = ref.to_circuit(sample).solve(model="constant-drop")
        except errors.NoConsistentRegionError:
            assert op_b.status[k] == "no-consistent-region"
            assert np.isnan(op_b.v[elements[1].nodes[0]][k])
            continue
        assert op_b.status[k] == "ok"
        got = op_b.sample(k)
        assert regions_of(got) == regions_of(op_1)
        bad = compare(as_solution(got), as_solution(op_1), 1e-9, sample)
        assert not bad, f"sample {k}:\n" + "\n".join(bad)


def test_long_chain_single_solve_finishes():
    # Issue 9 item 8: a long chain used to take minutes and gigabytes (the search listed every
    # assignment within two region changes). The timeout only guards against a hang.
    script = textwrap.dedent("""
        import sys
        import numpy as np
        sys.path.insert(0, "tests")
        import ampplan, reference as ref
        from importlib.resources import files
        demo = ampplan.Plan.load(files("ampplan") / "data" / "demo_plan.json")
        plan = ampplan.Plan(supply=12.0)
        for _ in range(40):
            plan.add(demo.stages[0])
        op = plan.compile().circuit.solve(model="constant-drop")
        assert {t.region for t in op.transistors.values()} == {"forward-active"}
        chain = ref.build_chain(ref.numpy_draw(np.random.default_rng([20261204, 1])), stages=15)
        try:
            ref.to_circuit(chain).solve(model="constant-drop")
        except ampplan.errors.NoConsistentRegionError:
            pass
        print("done")
    """)
    done = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip() == "done"


def _ladder(transistors: int = 0, resistors: int = 0) -> ampplan.Circuit:
    c = ampplan.Circuit()
    c.voltage_source("VCC", "vcc", "gnd", 12.0)
    for k in range(transistors):
        c.resistor(f"RB{k}", "vcc", f"b{k}", 100e3)
        c.resistor(f"RC{k}", "vcc", f"c{k}", 4.7e3)
        c.bjt(f"Q{k}", collector=f"c{k}", base=f"b{k}", emitter="gnd", device=ampplan.Transistor())
    for k in range(resistors):
        c.resistor(f"R{k}", "vcc" if k == 0 else f"n{k - 1}", f"n{k}", 1e3)
    if resistors:
        c.resistor("RL", f"n{resistors - 1}", "gnd", 1e3)
    return c


@pytest.mark.parametrize("assume_regions", [False, True], ids=["search", "assumed"])
def test_too_many_transistors_are_refused_before_solving(assume_regions):
    # Issue 9 item 8: refuse a circuit beyond the search's reach with a clear message, naming the count.
    n = cd.MAX_TRANSISTORS + 1
    c = _ladder(transistors=n)
    kwargs = {"assume": {f"Q{k}": "forward-active" for k in range(n)}} if assume_regions else {}
    with pytest.raises(errors.InvalidValueError, match=rf"{n} transistors.*at most {cd.MAX_TRANSISTORS}"):
        c.solve(model="constant-drop", **kwargs)


def test_too_large_a_system_is_refused_before_allocating():
    # Issue 9 item 8: a dense system above the solver's memory bound is refused, naming its size.
    unknowns = int((cd.MAX_MATRIX_BYTES / 8) ** 0.5)
    c = _ladder(resistors=unknowns)
    with pytest.raises(errors.InvalidValueError, match=r"unknowns .*MiB per sample"):
        c.solve(model="constant-drop")


def test_neighbours_are_every_assignment_within_the_distance():
    # Source: counting (combinatorics): 3 other regions per changed transistor, so 1 + 3N + 9·C(N, 2)
    # assignments within two changes, all distinct, each within the distance.
    centre = np.array([[1, 0, 2, 3, 1]], dtype=np.int8)
    near = cd.neighbours(centre, 2)[0]
    n = centre.shape[1]
    assert near.shape == (1 + 3 * n + 9 * n * (n - 1) // 2, n)
    assert len({row.tobytes() for row in near}) == near.shape[0]
    assert np.all(cd.hamming(near, centre[0]) <= 2)
    assert np.array_equal(near[0], centre[0])

"""The planned sparse elimination (ampplan.solver.sparse) against numpy.linalg.solve (LAPACK's
LU with partial pivoting) on the same matrices. Random matrices are inputs only (a seeded
generator); the expected answers come from numpy."""

from __future__ import annotations

import numpy as np
import pytest

from ampplan.analyses.chain import incremental_system
from ampplan.solver.sparse import RUN_THRESHOLD, Elimination


def _random_system(rng, n, density):
    pattern = rng.random((n, n)) < density
    pattern[np.arange(n), rng.permutation(n)] = True        # structurally regular
    rows, cols = np.nonzero(pattern)
    representative = rng.normal(size=rows.size) * np.exp(2.0 * rng.normal(size=rows.size))
    return rows, cols, representative


def _dense(n, rows, cols, values):
    a = np.zeros((n, n))
    a[rows, cols] = values
    return a


@pytest.mark.parametrize("seed", range(6))
def test_solutions_equal_lapack(seed):
    rng = np.random.default_rng(seed)
    for _ in range(20):
        n = int(rng.integers(1, 25))
        rows, cols, rep = _random_system(rng, n, rng.uniform(0.05, 0.4))
        plan = Elimination(n, rows, cols, rep)
        values = rep[:, None] * rng.uniform(0.8, 1.25, (rows.size, 6))
        rhs = rng.normal(size=(n, 6))
        x, ok = plan.solve(values, rhs)
        assert ok.all()
        for s in range(6):
            a = _dense(n, rows, cols, values[:, s])
            expected = np.linalg.solve(a, rhs[:, s])
            # Forward error within the condition number times a few rounding units.
            bound = 1e-13 * np.linalg.cond(a) * np.max(np.abs(expected)) + 1e-300
            assert np.max(np.abs(x[:, s] - expected)) <= bound


def test_several_right_hand_sides_equal_lapack():
    """One factorisation, several right-hand sides (the bordered Newton's two solves)."""
    rng = np.random.default_rng(21)
    for _ in range(10):
        n = int(rng.integers(2, 20))
        rows, cols, rep = _random_system(rng, n, rng.uniform(0.1, 0.4))
        plan = Elimination(n, rows, cols, rep)
        values = rep[:, None] * rng.uniform(0.8, 1.25, (rows.size, 5))
        first, second = rng.normal(size=(n, 5)), rng.normal(size=(n, 5))
        (x, y), ok = plan.solve_several(values, (first, second))
        assert ok.all()
        for s in range(5):
            a = _dense(n, rows, cols, values[:, s])
            for got, b in ((x, first), (y, second)):
                # Source: numpy.linalg.solve (LAPACK), within the condition number's bound.
                expected = np.linalg.solve(a, b[:, s])
                bound = 1e-13 * np.linalg.cond(a) * np.max(np.abs(expected)) + 1e-300
                assert np.max(np.abs(got[:, s] - expected)) <= bound
    # A sample whose planned pivot is zero is reported, with NaN in every answer.
    plan = Elimination(2, [0, 0, 1, 1], [0, 1, 0, 1], [2.0, 1.0, 1.0, 3.0])
    values = np.array([[2.0, 0.0], [1.0, 1.0], [1.0, 1.0], [3.0, 3.0]])
    (x, y), ok = plan.solve_several(values, (np.ones((2, 2)), np.zeros((2, 2))))
    assert ok.tolist() == [True, False]
    assert np.isnan(x[:, 1]).all() and np.isnan(y[:, 1]).all()
    singular = Elimination(3, [0, 1, 2, 0], [0, 0, 2, 2], [1.0, 2.0, 3.0, 4.0])
    (x,), ok = singular.solve_several(np.ones((4, 2)), (np.ones((3, 2)),))
    assert not ok.any() and np.isnan(x).all()


@pytest.mark.parametrize("seed", range(6))
def test_a_sparse_right_hand_side_and_a_few_wanted_unknowns_give_the_same_answers(seed):
    # With the right-hand side zero outside a few rows, the forward substitution leaves out the
    # terms that read a zero; with a few unknowns wanted, only what they depend on is computed.
    # The wanted answers must be those of the full elimination (equal, bit for bit up to the sign
    # of a zero) and of LAPACK.
    rng = np.random.default_rng(100 + seed)
    skipped = 0
    for _ in range(20):
        n = int(rng.integers(2, 25))
        rows, cols, rep = _random_system(rng, n, rng.uniform(0.05, 0.4))
        plan = Elimination(n, rows, cols, rep)
        values = rep[:, None] * rng.uniform(0.8, 1.25, (rows.size, 4))
        where = rng.choice(n, size=int(rng.integers(1, 3)), replace=False)
        wanted = rng.choice(n, size=int(rng.integers(1, n + 1)), replace=False)
        rhs = np.zeros((n, 4))
        rhs[where] = rng.normal(size=(where.size, 4))
        x_full, ok_full = plan.solve(values, rhs)
        x_rows, ok_rows = plan.solve(values, rhs, rhs_rows=where)
        x, ok = plan.solve(values, rhs, check_residual=False, rhs_rows=where, wanted=wanted)
        assert ok_full.all() and ok_rows.all() and ok.all()
        np.testing.assert_array_equal(x_rows, x_full)
        np.testing.assert_array_equal(x[wanted], x_full[wanted])
        schedule = plan.schedule_for(where, wanted)
        skipped += sum(t.size for _, p in plan._forward for t, _, _ in p) - sum(
            t.size for _, p in schedule.forward for t, _, _ in p)
        for s in range(4):
            a = _dense(n, rows, cols, values[:, s])
            expected = np.linalg.solve(a, rhs[:, s])
            bound = 1e-13 * np.linalg.cond(a) * np.max(np.abs(expected)) + 1e-300
            assert np.max(np.abs(x[wanted, s] - expected[wanted])) <= bound
    assert skipped > 0


@pytest.mark.parametrize("seed", range(4))
def test_the_register_program_repeats_the_in_place_elimination_bit_for_bit(seed):
    # Elimination.solve runs a value-numbered register program (ampplan.solver.program); its
    # answers must be those of the in-place elimination (factor, then substitute: the same
    # operations), bit for bit, signs of zeros included, and LAPACK's within the usual bound.
    # Several blocks that share most of their entries (as the incremental variants do, through
    # ``take``) give the value numbering repeated operations to merge.
    rng = np.random.default_rng(300 + seed)
    merged = 0
    for _ in range(8):
        b, copies = int(rng.integers(2, 12)), int(rng.integers(1, 4))
        rows, cols, rep = _random_system(rng, b, rng.uniform(0.1, 0.5))
        n, p = b * copies, rows.size
        all_rows = np.concatenate([rows + k * b for k in range(copies)])
        all_cols = np.concatenate([cols + k * b for k in range(copies)])
        # Every block reads the first block's values but for one entry of its own.
        take = np.concatenate([np.arange(p)] + [np.where(np.arange(p) == k % p, p + k - 1, np.arange(p))
                                                for k in range(1, copies)])
        plan = Elimination(n, all_rows, all_cols, np.concatenate([rep] * copies), block=b)
        typical = np.concatenate([rep, rep[np.arange(1, copies) % p]])
        values = typical[:, None] * rng.uniform(0.8, 1.25, (p + copies - 1, 5))
        rhs = np.zeros((n, 5))
        where = rng.choice(n, size=int(rng.integers(1, n + 1)), replace=False)
        rhs[where] = rng.normal(size=(where.size, 5))
        wanted = rng.choice(n, size=int(rng.integers(1, n + 1)), replace=False)
        for rhs_rows, want in ((None, None), (where, None), (where, wanted)):
            x, ok = plan.solve(values, rhs, check_residual=False, take=take, rhs_rows=rhs_rows, wanted=want)
            schedule = None if rhs_rows is None else plan.schedule_for(rhs_rows, want)
            factors = plan.factor(values, take, schedule=schedule)
            expected = plan.substitute(factors, rhs, schedule)
            multipliers = plan._multipliers if schedule is None else schedule.multipliers
            computed = expected if schedule is None or schedule.computed is None else expected[schedule.computed]
            expected_ok = plan._usable(factors, multipliers, (computed,))
            assert ok.tolist() == expected_ok.tolist()
            read = np.arange(n) if want is None else np.unique(want)
            got, exp = x[np.ix_(read, ok)], expected[np.ix_(read, ok)]
            assert np.array_equal(got.view(np.uint64), exp.view(np.uint64))
            assert np.isnan(x[:, ~ok]).all()
            for s in np.flatnonzero(ok):
                a = _dense(n, all_rows, all_cols, values[take, s])
                solution = np.linalg.solve(a, rhs[:, s])
                bound = 1e-12 * np.linalg.cond(a) * np.max(np.abs(solution)) + 1e-300
                assert np.max(np.abs(x[read, s] - solution[read])) <= bound
        merged += plan._program(None, None, take, values.shape[0]).repeated
    assert merged > 0


def test_wanted_unknowns_need_no_residual_test():
    rows, cols, rep = _random_system(np.random.default_rng(5), 6, 0.3)
    with pytest.raises(ValueError, match="residual test needs every unknown"):
        Elimination(6, rows, cols, rep).solve(rep[:, None], np.ones((6, 1)), wanted=[0])


def test_block_diagonal_equals_each_block_alone():
    rng = np.random.default_rng(11)
    block, count = 7, 4
    parts = [_random_system(rng, block, 0.3) for _ in range(count)]
    rows = np.concatenate([r + k * block for k, (r, _, _) in enumerate(parts)])
    cols = np.concatenate([c + k * block for k, (_, c, _) in enumerate(parts)])
    rep = np.concatenate([v for _, _, v in parts])
    values = rep[:, None] * rng.uniform(0.9, 1.1, (rep.size, 3))
    rhs = rng.normal(size=(block * count, 3))
    x, ok = Elimination(block * count, rows, cols, rep, block=block).solve(values, rhs)
    assert ok.all()
    for s in range(3):
        expected = np.linalg.solve(_dense(block * count, rows, cols, values[:, s]), rhs[:, s])
        np.testing.assert_allclose(x[:, s], expected, rtol=1e-10, atol=1e-12 * np.max(np.abs(expected)))


def test_a_sample_does_not_depend_on_its_batch_bit_for_bit():
    rng = np.random.default_rng(4)
    rows, cols, rep = _random_system(rng, 15, 0.25)
    plan = Elimination(15, rows, cols, rep)
    values = rep[:, None] * rng.uniform(0.8, 1.25, (rows.size, 9))
    rhs = rng.normal(size=(15, 9))
    together, _ = plan.solve(values, rhs)
    for s in range(9):
        alone, _ = plan.solve(values[:, s:s + 1], rhs[:, s:s + 1])
        assert np.array_equal(alone[:, 0], together[:, s])


def test_a_pivot_too_small_for_its_sample_is_reported():
    # Full 2×2 whose representative diagonal is largest: the first position is the pivot. A sample whose
    # pivot is zero, or so small that its multiplier exceeds 1/RUN_THRESHOLD, is not solved here;
    # the others are.
    plan = Elimination(2, [0, 0, 1, 1], [0, 1, 0, 1], [2.0, 1.0, 1.0, 3.0])
    assert plan.steps[0][:2] == (0, 0)
    small = 0.5 * RUN_THRESHOLD
    values = np.array([[2.0, 0.0, small], [1.0, 1.0, 1.0], [1.0, 1.0, 1.0], [3.0, 3.0, 3.0]])
    rhs = np.ones((2, 3))
    x, ok = plan.solve(values, rhs)
    assert ok.tolist() == [True, False, False]
    np.testing.assert_allclose(x[:, 0], np.linalg.solve([[2.0, 1.0], [1.0, 3.0]], [1.0, 1.0]), rtol=1e-14)


def test_a_singular_pattern_reports_every_sample():
    plan = Elimination(3, [0, 1, 2, 0], [0, 0, 2, 2], [1.0, 2.0, 3.0, 4.0])   # column 1 is empty
    assert plan.singular
    x, ok = plan.solve(np.ones((4, 5)), np.ones((3, 5)))
    assert not ok.any() and np.isnan(x).all()


def test_an_entry_outside_its_block_is_refused():
    with pytest.raises(ValueError, match="outside its diagonal block"):
        Elimination(4, [0, 1, 2, 3, 0], [0, 1, 2, 3, 3], np.ones(5), block=2)


def test_incremental_batch_equals_dense_solves(tmp_path):
    # The plan's incremental systems solved through the planned elimination (a batch) against the
    # same matrices solved densely by LAPACK, one per variant (numpy.linalg.solve), including
    # samples with a saturated stage (held transistor: the planned pivot vanishes, so the dense
    # path takes them) and a cut-off one.
    from pathlib import Path

    import ampplan
    from ampplan.analyses.incremental import transistor_models
    from ampplan.solver.assembly import layout_of
    plan = ampplan.Plan.load(Path(ampplan.__file__).parent / "data" / "demo_plan.json")
    compiled = plan.compile()
    batch = {"s2.rc": np.array([3.9e3, 20e3, 4.7e3, 3.3e3]), "s1.device.beta": np.array([200.0, 200.0, 50.0, 400.0]),
             "supply": np.array([12.0, 12.0, 3.0, 14.0])}
    circuit_batch, _ = compiled.batch_keys(batch)
    op = compiled.circuit.solve(batch=circuit_batch, temperature=compiled.temperature)
    params = layout_of(compiled.circuit).parameters(temperature=compiled.temperature, batch=circuit_batch)
    models = transistor_models(op, params)
    system = incremental_system(compiled)
    sparse = system.solve(params.conductance, models, shared=True)
    dense = system.solve(params.conductance, models, shared=False)
    assert np.array_equal(np.isnan(sparse), np.isnan(dense))
    finite = np.isfinite(dense)
    scale = np.max(np.abs(dense[finite]))
    assert np.max(np.abs(sparse[finite] - dense[finite])) <= 1e-12 * scale
    # Only a few unknowns wanted (as the analyses ask): those equal the full solve's, the rest NaN
    # in every sample, the ones solved densely (the saturated and cut-off ones) too.
    wanted = [(0, system.index["s1_in"]), (3, system.index["s2_c"]), (len(system.variants) - 1, 0)]
    few = system.solve(params.conductance, models, shared=True, wanted=wanted)
    for v, k in wanted:
        np.testing.assert_array_equal(few[:, v, k], sparse[:, v, k])
    regular = np.all(op.status == "ok") and np.array([str(r) == "forward-active" for s in ("s1_q", "s2_q", "s3_q")
                                                      for r in op.transistors[s].region]).reshape(3, -1).all(axis=0)
    assert regular.any() and (~regular).any() and np.isnan(few[:, 1, :]).all()
    kept = system.solve_wanted(params.conductance, models, wanted)
    for v, k in wanted:
        np.testing.assert_array_equal(kept[v, k], sparse[:, v, k])
    np.testing.assert_array_equal(kept.variant(0), few[:, 0, :])
    with pytest.raises(KeyError, match="unknown 0 of variant 1 was not asked for"):
        kept[1, 0]


def test_the_residual_test_rejects_an_unstable_answer(monkeypatch):
    # With the multiplier test switched off, a pivot of 1e-20 against entries of 1 gives x = (0, 1)
    # for [[1e-20, 1], [1, 1]]·x = (1, 2), whose true answer is close to (1, 1) (numpy's): the
    # residual test catches it, as linear.solve_batch's would.
    from ampplan.solver import sparse
    monkeypatch.setattr(sparse, "RUN_THRESHOLD", 1e-300)
    plan = Elimination(2, [0, 0, 1, 1], [0, 1, 0, 1], [2.0, 1.0, 1.0, 3.0])
    values = np.array([[2.0, 1e-20], [1.0, 1.0], [1.0, 1.0], [3.0, 1.0]])
    rhs = np.array([[1.0, 1.0], [2.0, 2.0]])
    x, ok = plan.solve(values, rhs)
    assert ok.tolist() == [True, False]
    np.testing.assert_allclose(x[:, 0], np.linalg.solve([[2.0, 1.0], [1.0, 3.0]], [1.0, 2.0]), rtol=1e-14)
    assert np.isnan(x[:, 1]).all()
    x, ok = plan.solve(values, rhs, check_residual=False)
    assert ok.tolist() == [True, True]            # only the residual test saw it
    assert np.max(np.abs(x[:, 1] - np.linalg.solve([[1e-20, 1.0], [1.0, 1.0]], [1.0, 2.0]))) > 0.5


def test_ebers_moll_batches_through_the_sparse_plan_agree_with_lapack(monkeypatch):
    # Newton's linear systems of a large batch go through the planned elimination, a small batch's
    # through LAPACK (numpy.linalg.solve); the same samples either way agree to Newton's tolerance.
    import ampplan
    from ampplan.solver import ebers_moll as em
    from ampplan.solver.assembly import layout_of

    def chain():
        c = ampplan.Circuit()
        c.voltage_source("VCC", "vcc", "gnd", 12.0)
        for name, a, b, r in [("R1", "vcc", "b1", 47e3), ("R2", "b1", "gnd", 10e3), ("RC1", "vcc", "c1", 4.7e3),
                              ("RE1", "e1", "gnd", 1e3), ("RC2", "vcc", "c2", 3.3e3), ("RE2", "e2", "gnd", 3.9e3)]:
            c.resistor(name, a, b, r)
        c.bjt("Q1", collector="c1", base="b1", emitter="e1", device=ampplan.Transistor())
        c.bjt("Q2", collector="c2", base="c1", emitter="e2", device=ampplan.Transistor())
        return c

    rng = np.random.default_rng(2)
    size = em.SPARSE_MIN_BATCH + 44
    batch = {"RC1": rng.uniform(2e3, 9e3, size), "Q2.beta": rng.uniform(50.0, 400.0, size)}
    circuit = chain()
    sparse = circuit.solve(model="ebers-moll", batch=batch)
    assert "ebers-moll" in layout_of(circuit).region_plans
    small = chain()
    few = {k: v[:8] for k, v in batch.items()}
    small.solve(model="ebers-moll", batch=few)
    assert "ebers-moll" not in layout_of(small).region_plans
    monkeypatch.setattr(em, "SPARSE_ORDER", -1)            # every batch through LAPACK
    dense = chain().solve(model="ebers-moll", batch=batch)
    for name in sparse.v:
        np.testing.assert_allclose(sparse.v[name], dense.v[name], rtol=1e-9, atol=1e-12)
    for name in sparse.transistors:
        np.testing.assert_allclose(sparse.transistors[name].ic, dense.transistors[name].ic, rtol=1e-9, atol=1e-15)

"""The lean path of a single constant-drop solve (RegionProblem._solve_one) against the batched
dense path (numpy.linalg.solve through linear.solve_batch) on the same stamped systems."""

from __future__ import annotations

import itertools

import numpy as np

import ampplan
from ampplan.solver import constant_drop as cd
from ampplan.solver.assembly import layout_of


def _chain():
    c = ampplan.Circuit()
    c.voltage_source("VCC", "vcc", "gnd", 12.0)
    for name, a, b, r in [("R1", "vcc", "b1", 47e3), ("R2", "b1", "gnd", 10e3), ("RC1", "vcc", "c1", 4.7e3),
                          ("RE1", "e1", "gnd", 1e3), ("RC2", "vcc", "c2", 3.3e3), ("RE2", "e2", "gnd", 3.9e3),
                          ("RE3", "e3", "gnd", 3.3e3)]:
        c.resistor(name, a, b, r)
    device = ampplan.Transistor(beta=150.0)
    c.bjt("Q1", collector="c1", base="b1", emitter="e1", device=device)
    c.bjt("Q2", collector="c2", base="c1", emitter="e2", device=ampplan.Transistor(polarity="pnp"))
    c.bjt("Q3", collector="vcc", base="c2", emitter="e3", device=device)
    return c


def test_one_system_equals_the_dense_batch_path_for_every_assignment():
    layout = layout_of(_chain())
    problem = cd.RegionProblem(layout, layout.parameters())
    one = np.zeros(1, dtype=np.intp)
    for assignment in itertools.product(range(4), repeat=3):
        regions = np.array([assignment], dtype=np.int8)
        x, ok = problem.solve(one, regions)
        x_dense, ok_dense = problem._solve_dense(one, regions)
        assert ok[0] == ok_dense[0], assignment
        np.testing.assert_allclose(x, x_dense, rtol=1e-13, atol=1e-16)
        again, _ = cd.RegionProblem(layout, layout.parameters()).solve(one, regions)   # the kept system
        assert np.array_equal(again, x, equal_nan=True)
    assert layout.stamped, "the stamped systems of the circuit's own parameters are kept"


def test_a_singular_system_is_reported_like_the_dense_path():
    # A Darlington pair's middle node meets only Q1's emitter and Q2's base: with both cut off,
    # nothing sets its voltage (a singular system).
    c = ampplan.Circuit()
    c.voltage_source("VCC", "vcc", "gnd", 12.0)
    c.resistor("R1", "vcc", "b", 100e3)
    c.resistor("R2", "b", "gnd", 10e3)
    c.resistor("RC", "vcc", "c", 4.7e3)
    c.resistor("RE", "e", "gnd", 1e3)
    c.bjt("Q1", collector="c", base="b", emitter="m", device=ampplan.Transistor())
    c.bjt("Q2", collector="c", base="m", emitter="e", device=ampplan.Transistor())
    layout = layout_of(c)
    problem = cd.RegionProblem(layout, layout.parameters())
    one = np.zeros(1, dtype=np.intp)
    cutoff = np.array([[cd.CUTOFF, cd.CUTOFF]], dtype=np.int8)
    x, ok = problem.solve(one, cutoff)
    _, ok_dense = problem._solve_dense(one, cutoff)
    assert not ok[0] and not ok_dense[0]
    assert np.isnan(x[0, :layout.size]).all()


def test_a_batch_parameter_set_is_not_kept():
    layout = layout_of(_chain())
    params = layout.parameters(batch={"RC1": [4.7e3]})
    before = len(layout.stamped)
    cd.RegionProblem(layout, params).solve(np.zeros(1, dtype=np.intp), np.ones((1, 3), dtype=np.int8))
    assert len(layout.stamped) == before



def _fields(op):
    """Every figure of an OperatingPoint, flattened (str, bool and float; NaN as a word, so equal)."""
    out = [op.model, op.status, op.method, op.iterations, op.temperature, *op.v.items(), *op.i.items()]
    for t in op.transistors.values():
        out += [t.name, t.polarity, t.region, t.ic, t.ib, t.ie, t.vbe, t.vce, t.beta_forced, t.power]
        for c in t.checks:
            out += [c.name, c.value, c.limit, c.holds, c.margin]
    out += op.unknowns.tolist()
    return [("nan" if isinstance(v, float) and v != v else v) for v in out]


def test_the_forward_active_shortcut_equals_the_full_search(monkeypatch):
    # A single solve whose start holds is reported straight from its first solve, with the checks
    # in plain floats (solver._single_at_start); the full search (constant_drop.search, then
    # RegionProblem.checks on arrays) must give the same result bit for bit, and where the start
    # fails the shortcut must step aside.
    import ampplan.solver as solver
    def npn_chain(rc1):
        c = _chain()
        c.remove("RC1")
        c.resistor("RC1", "vcc", "c1", rc1)
        return c

    def pnp_stage(rc):
        # A PNP common-emitter stage hanging from the supply (forward-active for the smaller rc).
        c = ampplan.Circuit()
        c.voltage_source("VCC", "vcc", "gnd", 12.0)
        c.resistor("R1", "vcc", "b", 10e3)
        c.resistor("R2", "b", "gnd", 47e3)
        c.resistor("RE", "vcc", "e", 1e3)
        c.resistor("RC", "c", "gnd", rc)
        c.bjt("Q1", collector="c", base="b", emitter="e", device=ampplan.Transistor(polarity="pnp"))
        return c

    compared = set()
    circuits = [npn_chain(r) for r in (4.7e3, 1e3, 40e3, 200e3)] + [pnp_stage(r) for r in (3.3e3, 100e3)]
    for edge in ("vce-sat", "vcb-zero"):
        for c in circuits:
            fast = c.solve(model="constant-drop", active_edge=edge)
            with monkeypatch.context() as m:
                m.setattr(solver, "_single_at_start", lambda *args: None)
                full = c.solve(model="constant-drop", active_edge=edge)
            assert _fields(fast) == _fields(full), (edge, c)
            assert len(fast.alternatives) == len(full.alternatives)
            compared.add(fast.method)
    assert compared >= {"forward-active start"} and len(compared) > 1, compared

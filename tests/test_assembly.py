"""Assembly of the linear equations by index scatter, against the dense stamp-pattern product it
replaced (numpy matrix products of per-element stamp patterns, the textbook modified nodal
analysis stamps: Vlach & Singhal, *Computer Methods for Circuit Analysis and Design*, the chapter
on modified nodal formulation, from memory)."""

from __future__ import annotations

import numpy as np
import pytest

import ampplan
from ampplan.solver.assembly import Scatter, layout_of


def _circuit():
    c = ampplan.Circuit()
    c.voltage_source("VCC", "vcc", "gnd", 12.0)
    c.voltage_source("VEE", "gnd", "vee", 5.0)
    c.current_source("IB", "gnd", "b1", 1e-6)
    for name, a, b, r in [("R1", "vcc", "b1", 47e3), ("R2", "b1", "gnd", 10e3), ("RC", "vcc", "c1", 4.7e3),
                          ("RE", "e1", "vee", 1e3), ("RL", "c1", "gnd", 22e3), ("RP", "c1", "c1x", 100.0),
                          ("RQ", "c1x", "c1", 220.0), ("RX", "c1x", "gnd", 1e3)]:
        c.resistor(name, a, b, r)
    c.bjt("Q1", collector="c1", base="b1", emitter="e1", device=ampplan.Transistor())
    c.bjt("Q2", collector="vee", base="c1x", emitter="e2", device=ampplan.Transistor(polarity="pnp"))
    c.resistor("RE2", "e2", "vcc", 2e3)
    return c


def _dense_reference(layout, params, reduced):
    """The former assembly: (S, elements) values times dense (elements, n·n) stamp patterns."""
    n_full = layout.size + 1
    keep = (np.concatenate([np.arange(layout.n_nodes + layout.n_vs), [layout.size]]) if reduced
            else np.arange(n_full))
    n = keep.size
    resistors = np.zeros((len(layout.resistors), n_full, n_full))
    for k, (a, b) in enumerate(zip(layout.r_a, layout.r_b)):
        resistors[k, a, a] += 1.0
        resistors[k, b, b] += 1.0
        resistors[k, a, b] -= 1.0
        resistors[k, b, a] -= 1.0
    volts = np.zeros((layout.n_vs, n_full))
    volts[np.arange(layout.n_vs), layout.vs_row] = 1.0
    amps = np.zeros((len(layout.current_sources), n_full))
    for k, (f, t) in enumerate(zip(layout.cs_from, layout.cs_to)):
        amps[k, f] -= 1.0
        amps[k, t] += 1.0
    pattern = resistors[:, keep][:, :, keep].reshape(len(layout.resistors), n * n)
    matrix = (params.conductance @ pattern).reshape(-1, n, n) + layout.structure[np.ix_(keep, keep)]
    rhs = params.voltage @ volts[:, keep] + params.current @ amps[:, keep]
    return matrix, rhs


@pytest.mark.parametrize("reduced", [False, True])
def test_scatter_assembly_equals_dense_product(reduced):
    c = _circuit()
    layout = layout_of(c)
    rng = np.random.default_rng(3)
    batch = {r.name: r.resistance * rng.uniform(0.5, 2.0, 64) for r in layout.resistors}
    batch["VCC"] = rng.uniform(5.0, 20.0, 64)
    batch["IB"] = rng.uniform(-1e-5, 1e-5, 64)
    params = layout.parameters(batch=batch)
    matrix, rhs = layout.assemble(params, reduced=reduced)
    ref_matrix, ref_rhs = _dense_reference(layout, params, reduced)
    np.testing.assert_allclose(matrix, ref_matrix, rtol=1e-15, atol=0.0)
    np.testing.assert_allclose(rhs, ref_rhs, rtol=1e-15, atol=0.0)


def test_scatter_sums_repeated_positions():
    # Terms that land on one position add up, each weighted; numpy's own add.at is the reference.
    rng = np.random.default_rng(5)
    position = rng.integers(0, 7, 40)
    source = rng.integers(0, 5, 40)
    weight = rng.normal(size=40)
    values = rng.normal(size=(9, 5))
    out = rng.normal(size=(9, 7))
    expected = out.copy()
    for t in range(40):
        np.add.at(expected, (slice(None), position[t]), values[:, source[t]] * weight[t])
    Scatter(position, source, weight)(values, out)
    np.testing.assert_allclose(out, expected, rtol=1e-13, atol=1e-13)


def test_scatter_without_terms_leaves_out_alone():
    out = np.ones((3, 4))
    Scatter(np.zeros(0), np.zeros(0), np.zeros(0))(np.ones((3, 0)), out)
    assert np.array_equal(out, np.ones((3, 4)))


def test_scatter_new_last_equals_adding_into_a_copy_of_the_base():
    rng = np.random.default_rng(8)
    position = rng.integers(0, 6, 30)
    source = rng.integers(0, 4, 30)
    weight = rng.normal(size=30)
    values = rng.normal(size=(4, 5))             # samples last
    base = rng.normal(size=9)                    # positions 6..8 get no term
    scatter = Scatter(position, source, weight)
    expected = np.repeat(base[:, None], 5, axis=1)
    for t in range(30):
        expected[position[t]] += values[source[t]] * weight[t]
    np.testing.assert_allclose(scatter.new_last(values, base), expected, rtol=1e-13, atol=1e-13)
    np.testing.assert_allclose(scatter.last(values, np.repeat(base[:, None], 5, axis=1)), expected,
                               rtol=1e-13, atol=1e-13)
    empty = Scatter(np.zeros(0), np.zeros(0), np.zeros(0))
    assert np.array_equal(empty.new_last(values, base), np.repeat(base[:, None], 5, axis=1))


def test_assembled_keeps_the_layout_s_own_parameters_read_only():
    layout = layout_of(_circuit())
    own = layout.parameters()
    first, rhs = layout.assembled(own)
    again, _ = layout.assembled(layout.parameters())
    assert again is first and not first.flags.writeable and not rhs.flags.writeable
    ref_matrix, ref_rhs = _dense_reference(layout, own, False)
    np.testing.assert_allclose(first, ref_matrix, rtol=1e-15, atol=0.0)
    np.testing.assert_allclose(rhs, ref_rhs, rtol=1e-15, atol=0.0)
    batch = layout.parameters(batch={"R1": [47e3, 50e3]})
    fresh, _ = layout.assembled(batch)
    assert fresh.flags.writeable and layout.assembled(batch)[0] is not fresh


@pytest.mark.parametrize("reduced", [False, True])
def test_entries_equal_the_dense_assembly_at_their_positions(reduced):
    c = _circuit()
    layout = layout_of(c)
    rng = np.random.default_rng(9)
    batch = {r.name: r.resistance * rng.uniform(0.5, 2.0, 16) for r in layout.resistors}
    batch["VCC"] = rng.uniform(5.0, 20.0, 16)
    batch["IB"] = rng.uniform(-1e-5, 1e-5, 16)
    params = layout.parameters(batch=batch)
    for scale, ladder in ((1.0, 0.0), (0.25, 1e-3)):
        matrix, rhs = _dense_reference(layout, params, reduced)
        m = matrix.shape[1] - 1
        matrix = matrix[:, :m, :m] + ladder * np.diag(np.r_[np.ones(layout.n_nodes), np.zeros(m - layout.n_nodes)])
        rows, cols = np.nonzero(np.any(matrix != 0.0, axis=0) | np.eye(m, dtype=bool))
        positions = rows * m + cols
        values, right = layout.entries(params, positions, reduced=reduced, source_scale=scale,
                                       ladder_conductance=ladder)
        np.testing.assert_allclose(values, matrix[:, rows, cols].T, rtol=1e-14, atol=0.0)
        np.testing.assert_allclose(right, scale * rhs[:, :m].T, rtol=1e-14, atol=0.0)
        some, some_right = layout.entries(params, positions, reduced=reduced, source_scale=scale,
                                          ladder_conductance=ladder, rows=np.array([3, 1, 3]))
        assert np.array_equal(some, values[:, [3, 1, 3]]) and np.array_equal(some_right, right[:, [3, 1, 3]])


def test_entries_refuse_positions_that_leave_out_a_stamp():
    # Node "a" is held by two sources only: no resistor stamps its diagonal, the ladder would.
    c = ampplan.Circuit()
    c.voltage_source("V1", "a", "gnd", 1.0)
    c.voltage_source("V2", "b", "a", 2.0)
    c.resistor("R", "b", "gnd", 1e3)
    layout = layout_of(c)
    params = layout.parameters()
    m = layout.size
    matrix, _ = _dense_reference(layout, params, False)
    rows, cols = np.nonzero(matrix[0, :m, :m] != 0.0)
    positions = rows * m + cols
    a = layout.index["a"]
    assert a * m + a not in positions
    values, right = layout.entries(params, positions)            # without the ladder, fine
    np.testing.assert_allclose(values[:, 0], matrix[0, rows, cols], rtol=1e-15)
    with pytest.raises(ValueError, match="diagonal"):
        layout.entries(params, positions, ladder_conductance=1e-3)
    with pytest.raises(ValueError, match="resistor stamps"):
        layout.entries(params, positions[positions != layout.index["b"] * (m + 1)])


def test_a_kept_temperature_is_not_validated_again_but_a_bad_one_still_is():
    from ampplan.errors import InvalidValueError
    layout = layout_of(_circuit())
    one = layout.parameters(1.0)
    assert layout.parameters(1.0) is one
    with pytest.raises(InvalidValueError, match="temperature"):
        layout.parameters(True)            # equal to 1.0 as a key, but not a temperature
    with pytest.raises(InvalidValueError, match="temperature"):
        layout.parameters(float("nan"))

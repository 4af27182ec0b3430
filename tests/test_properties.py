"""hypothesis properties of the region solver (issue 2 §7), for both device models.

- Kirchhoff's current law holds at every node to 1e-12 of the circuit's largest current, recomputed
  here from the reported node voltages, source currents and transistor currents.
- Every reported region satisfies all of its checks (and our own re-evaluation of them).
- The complementary (PNP-for-NPN, sources negated) circuit gives mirrored voltages and equal
  textbook currents.
- A batch equals the same samples solved one by one.
- The constant-drop and Ebers–Moll models agree on the region of a well-biased stage.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import assume, given, note
from hypothesis import strategies as st

import reference as ref
import ampplan
from ampplan import errors
from conftest import MODELS, as_solution, circuits, compare, kcl_imbalance, regions_of

model_st = st.sampled_from(MODELS)


def _solve_or_reject(elements, model, **kwargs):
    """ampplan's single solve; a failure is rejected only when our reference also finds no answer.

    Our enumeration knows the default active edge only; with another edge a failure is a failure.
    """
    if kwargs.get("active_edge", "vce-sat") != "vce-sat":
        return ref.to_circuit(elements).solve(model=model, **kwargs)
    try:
        return ref.to_circuit(elements).solve(model=model, **kwargs)
    except errors.NoConsistentRegionError:
        # Source: our brute-force enumeration (reference.constant_drop_enumerate).
        assert not ref.constant_drop_enumerate(elements), "ampplan found no region; our enumeration did"
        assume(False)
    except errors.ConvergenceError:
        # Source: scipy.optimize.root on our residual (reference.ebers_moll_root).
        assert not ref.ebers_moll_root(elements)["converged"], "ampplan did not converge; scipy did"
        assume(False)


@given(circuit=circuits(), model=model_st)
def test_kcl_holds_at_every_node(circuit, model):
    # Source: Kirchhoff's current law, recomputed here (conftest.kcl_imbalance) with resistor
    # currents from the node voltages; tolerance 1e-12 relative (issue 2 §7) to the largest current
    # in the circuit, or to the operands of the node's resistor currents when those are larger.
    topology, elements = circuit
    op = _solve_or_reject(elements, model)
    net, scale = kcl_imbalance(op, elements)
    for node, imbalance in net.items():
        assert abs(imbalance) <= 1e-12 * scale[node], f"node {node}: {imbalance!r} A of {scale[node]!r} A"
    # ampplan's own residual uses its reported resistor currents: same bound.
    assert op.kcl_residual() <= 1e-12 * max(scale.values())
    for e in ref.transistors_of(elements):
        t = op.transistors[e.name]
        coll, base, emit = e.nodes
        # Source: issue 2 §2: ie == ic + ib; vbe, vce are V(B) - V(E), V(C) - V(E).
        assert t.ie == pytest.approx(t.ic + t.ib, rel=1e-12, abs=1e-15 * max(scale.values()))
        assert t.vbe == pytest.approx(op.v[base] - op.v[emit], rel=1e-12, abs=1e-12)
        assert t.vce == pytest.approx(op.v[coll] - op.v[emit], rel=1e-12, abs=1e-12)
    assert op.v["gnd"] == 0.0
    # Source: API notes, OperatingPoint fields of a single solve.
    assert op.model == model and op.status == "ok" and op.batch_size is None
    # Source: API notes, op.i: a resistor's current flows from its node a to b, (V_a - V_b) / R; a
    # current source reports its own value.
    for e in elements:
        if e.kind == "R":
            a, b = e.nodes
            operand = (abs(op.v[a]) + abs(op.v[b])) / e.value
            assert abs(op.i[e.name] - (op.v[a] - op.v[b]) / e.value) <= 1e-12 * operand, e.name
        elif e.kind == "I":
            assert op.i[e.name] == e.value


@given(circuit=circuits(), model=model_st)
def test_power_balance(circuit, model):
    # Source: Tellegen's theorem (conservation of power in a network obeying KCL and KVL): the power the
    # sources deliver equals the power the resistors and transistors take. A transistor takes
    # P = sum over terminals of V x (current into the terminal) = s (V_CE I_C + V_BE I_B) with
    # textbook-signed currents (s = +1 NPN, -1 PNP).
    topology, elements = circuit
    op = _solve_or_reject(elements, model)
    delivered, taken, scale = 0.0, 0.0, 0.0
    for e in elements:
        if e.kind == "V":
            delivered += e.value * op.i[e.name]
            scale += abs(e.value * op.i[e.name])
        elif e.kind == "I":
            p = e.value * (op.v[e.nodes[1]] - op.v[e.nodes[0]])
            delivered += p
            scale += abs(p)
        elif e.kind == "R":
            a, b = e.nodes
            taken += (op.v[a] - op.v[b]) ** 2 / e.value
        elif e.kind == "Q":
            t = op.transistors[e.name]
            power = ref.sign(e) * (t.vce * t.ic + t.vbe * t.ib)
            assert t.power == pytest.approx(power, rel=1e-9, abs=1e-15 * max(scale, 1e-3)), e.name
            taken += power
    assert delivered == pytest.approx(taken, rel=1e-9, abs=1e-12 * max(scale, 1e-12))


def _assert_checks_hold(op, what):
    for name, t in op.transistors.items():
        assert t.checks, f"{what} {name}: no checks recorded"
        for check in t.checks:
            tiny = 1e-9 * max(1.0, abs(check.limit), abs(check.value))
            assert check.holds and check.margin >= -tiny, f"{what} {name} ({t.region}): {check}"


@given(circuit=circuits(), model=model_st)
def test_every_reported_region_satisfies_its_checks(circuit, model):
    # Source: DESIGN §4 / issue 2 §3: the solver reports a region only when all its checks hold.
    topology, elements = circuit
    op = _solve_or_reject(elements, model)
    _assert_checks_hold(op, "chosen")
    if model == "constant-drop":
        for alt in op.alternatives:
            _assert_checks_hold(alt, "alternative")
        # Source: our own evaluation of the constant-drop conditions (reference.region_checks)
        # on the reported values, against the contract's semantics (API notes).
        sol = as_solution(op)
        sol["checks"] = {e.name: ref.region_checks(e, sol, op.transistors[e.name].region)
                         for e in ref.transistors_of(elements)}
        assert ref.is_consistent(sol, rtol=1e-9), sol["checks"]
    else:
        # Source: the API notes' Ebers–Moll region thresholds, applied here (reference.em_region);
        # cases within 1 uV of a threshold are left out as ambiguous.
        for e in ref.transistors_of(elements):
            p, s, t = e.params(), ref.sign(e), op.transistors[e.name]
            # The conduction voltage n V_T ln(1 + 100 nA / I_S) inverts the junction law at 100 nA.
            on = p["emission_coefficient"] * ref.thermal_voltage(25.0) * math.log1p(100e-9 / p["saturation_current"])
            edges = [s * t.vbe - on, s * (t.vbe - t.vce) - on, s * t.vce - p["vce_sat"], s * t.vce + p["vce_sat"]]
            if min(abs(x) for x in edges) < 1e-6:
                continue
            assert t.region == ref.em_region(e, as_solution(op)), e.name


@given(circuit=circuits(), model=model_st)
def test_pnp_mirror_gives_mirrored_results(circuit, model):
    # Source: symmetry of both models under NPN <-> PNP with every source negated (DESIGN §4: PNP
    # mirrored with voltages and currents negated): node voltages change sign, textbook transistor
    # currents and regions stay the same.
    topology, elements = circuit
    op = _solve_or_reject(elements, model)
    mirrored = ref.mirror(elements)
    op_m = ref.to_circuit(mirrored).solve(model=model)
    note(f"regions {regions_of(op)} / mirror {regions_of(op_m)}")
    assert regions_of(op_m) == regions_of(op)
    expected = as_solution(op)
    expected["v"] = {n: -v for n, v in expected["v"].items()}
    expected["i"] = {k: -v for k, v in expected["i"].items()}
    expected["transistors"] = {k: {**t, "vbe": -t["vbe"], "vce": -t["vce"]} for k, t in expected["transistors"].items()}
    bad = compare(as_solution(op_m), expected, 1e-9, elements)
    assert not bad, "\n".join(bad)
    for name, t in op.transistors.items():
        assert op_m.transistors[name].polarity != t.polarity


@st.composite
def batches(draw):
    topology, elements = draw(circuits())
    size = draw(st.integers(2, 5), label="size")
    factor = st.floats(0.5, 2.0)
    values = {e.name: e.value for e in elements}
    beta = ref.transistors_of(elements)[0].params()["beta"]
    batch = {
        "RC": np.array([values["RC"] * draw(factor) for _ in range(size)]),
        "Q1.beta": np.array([beta * draw(factor) for _ in range(size)]),
        "VCC": np.array([values["VCC"] * draw(factor) for _ in range(size)]),
    }
    return topology, elements, batch


def _field(x, k):
    return x[k] if np.ndim(x) else x


@given(case=batches(), model=model_st)
def test_batch_equals_one_by_one(case, model):
    # Source: issue 2 §5: a batch of S parameter sets gives, per sample, what S single solves give;
    # compared to 1e-9 (a single solve that raises must be a non-"ok" sample with NaN fields).
    topology, elements, batch = case
    op_b = ref.to_circuit(elements).solve(model=model, batch=batch)
    size = len(batch["RC"])
    assert op_b.batch_size == size
    assert np.shape(op_b.status) == (size,)
    for k in range(size):
        sample = ref.with_changes(elements, {key: arr[k] for key, arr in batch.items()})
        try:
            op_1 = ref.to_circuit(sample).solve(model=model)
        except (errors.NoConsistentRegionError, errors.ConvergenceError):
            assert op_b.status[k] != "ok"
            assert all(math.isnan(_field(op_b.v[n], k)) for n in op_b.v if n != "gnd")
            continue
        assert op_b.status[k] == "ok", f"sample {k}: {op_b.status[k]}"
        for name, t in op_1.transistors.items():
            tb = op_b.transistors[name]
            assert np.shape(tb.ic) == (size,)
            assert str(tb.region[k]) == t.region, f"sample {k} {name}"
        got = {
            "v": {n: _field(v, k) for n, v in op_b.v.items()},
            "i": {n: _field(v, k) for n, v in op_b.i.items()},
            "transistors": {n: {f: _field(getattr(t, f), k) for f in ("ic", "ib", "ie", "vbe", "vce")}
                            for n, t in op_b.transistors.items()},
        }
        # Ebers–Moll: Newton stops once an iterate fits to 1e-9, and a batch sample starts from a
        # solved neighbour while a single solve starts from its own guess, so the two agree to
        # that tolerance of the circuit's voltages and currents (a cut-off junction's leakage
        # only to about 1e-12 of the largest current), not to the last bit.
        em = model == "ebers-moll"
        bad = compare(got, as_solution(op_1), 1e-9, sample, voltage_floor=1.0 if em else 1e-3,
                      current_floor=1e-3 if em else 1e-6)
        assert not bad, f"sample {k}:\n" + "\n".join(bad)


@st.composite
def well_biased_stages(draw):
    """A divider-biased common-emitter stage designed to a Q-point well inside forward-active.

    The design follows the usual hand procedure (common practice, no source): V_E about a tenth to a
    third of V_CC, a divider stiff enough that its current is at least ten base currents, R_C from
    the chosen V_CE. The test then keeps only stages whose constant-drop V_CE leaves room for the
    Ebers–Moll V_BE to differ from 0.7 V by up to 0.2 V.
    """
    vcc = draw(st.floats(6.0, 30.0), label="VCC")
    ic = math.exp(draw(st.floats(math.log(2e-4), math.log(1e-2))))
    beta = draw(st.floats(50.0, 400.0), label="beta")
    ve = vcc * draw(st.floats(0.1, 0.3), label="VE fraction")
    vce = draw(st.floats(0.3, 0.7), label="VCE fraction") * (vcc - ve)
    re = ve / ic
    rc = (vcc - ve - vce) / ic
    i_div = ic / beta * draw(st.floats(10.0, 50.0), label="divider stiffness")
    vb = ve + 0.7
    r2 = vb / i_div
    r1 = (vcc - vb) / (i_div + ic / beta)
    polarity = draw(st.sampled_from(["npn", "pnp"]), label="polarity")
    device = dict(polarity=polarity, beta=beta,
                  saturation_current=math.exp(draw(st.floats(math.log(1e-15), math.log(1e-13)))),
                  early_voltage=draw(st.sampled_from([math.inf, 50.0, 100.0, 200.0])))
    elements = [ref.V("VCC", "vcc", ref.GROUND, vcc), ref.R("R1", "vcc", "b", r1), ref.R("R2", "b", ref.GROUND, r2),
                ref.R("RC", "vcc", "c", rc), ref.R("RE", "e", ref.GROUND, re), ref.Q("Q1", "c", "b", "e", **device)]
    return ref.mirror([dataclass_npn(e) for e in elements]) if polarity == "pnp" else elements


def dataclass_npn(e):
    """The NPN version of an element (so that ``mirror`` makes the PNP stage)."""
    if e.kind == "Q":
        return ref.Element(e.kind, e.name, e.nodes, e.value, {**e.device, "polarity": "npn"})
    return e


@given(elements=well_biased_stages())
def test_models_agree_on_region_of_well_biased_stage(elements):
    # Source: DESIGN §4 / issue 2 §7: both models classify a well-biased stage alike. "Well biased"
    # here: constant-drop |V_CE| between 1 V + 0.2 V x (R_C + R_E)/R_E (room for V_BE to differ by
    # 0.2 V between the models) and |V_CC| - 1 V, and I_C between 0.1 mA and 20 mA (common practice,
    # no source).
    cd = ref.to_circuit(elements).solve(model="constant-drop")
    t = cd.transistors["Q1"]
    values = {e.name: e.value for e in elements}
    vcc = abs(values["VCC"])
    room = 1.0 + 0.2 * (values["RC"] + values["RE"]) / values["RE"]
    assume(t.region == "forward-active")
    assume(room <= abs(t.vce) <= vcc - 1.0 and 1e-4 <= t.ic <= 2e-2)
    em = ref.to_circuit(elements).solve(model="ebers-moll")
    assert em.transistors["Q1"].region == "forward-active"
    # The models differ only through V_BE: a stiff divider moves V_E by about the V_BE difference.
    assert em.transistors["Q1"].ic == pytest.approx(t.ic, rel=0.5)


@given(circuit=circuits())
def test_vcb_zero_active_edge_keeps_forward_active_collector_above_base(circuit):
    # Source: DESIGN §4: "a stricter active edge at V_CB = 0 where a designer wants one": with it,
    # every forward-active transistor has V_CB >= 0 (NPN frame), and the answer still obeys KCL and
    # its own checks.
    topology, elements = circuit
    op = _solve_or_reject(elements, "constant-drop", active_edge="vcb-zero")
    _assert_checks_hold(op, "chosen")
    net, scale = kcl_imbalance(op, elements)
    for node, imbalance in net.items():
        assert abs(imbalance) <= 1e-12 * scale[node], node
    for e in ref.transistors_of(elements):
        t = op.transistors[e.name]
        if t.region == "forward-active":
            assert ref.sign(e) * (t.vce - t.vbe) >= -1e-9 * max(1.0, abs(t.vce)), e.name


def test_independent_batch_equals_one_by_one_on_a_bistable_circuit():
    # Issue 2 §5 (batched equals one-by-one) where it is hardest: an emitter-coupled trigger swept
    # across its hysteresis window has two operating points there. With warm_start=False every
    # sample starts as a single solve does, so both models must agree sample by sample.
    q = ampplan.Transistor(beta=100.0)
    c = ampplan.Circuit()
    c.voltage_source("VCC", "vcc", "gnd", 12.0)
    c.voltage_source("VIN", "in", "gnd", 3.0)
    c.resistor("RS", "in", "b1", 1e3)
    c.resistor("RC1", "vcc", "c1", 4.7e3)
    c.resistor("RC2", "vcc", "c2", 2.2e3)
    c.resistor("R1", "c1", "b2", 10e3)
    c.resistor("R2", "b2", "gnd", 10e3)
    c.resistor("RE", "e", "gnd", 1e3)
    c.bjt("Q1", "c1", "b1", "e", q)
    c.bjt("Q2", "c2", "b2", "e", q)
    vin = np.linspace(0.0, 6.0, 25)
    for model in ("constant-drop", "ebers-moll"):
        batch = c.solve(model=model, batch={"VIN": vin}, warm_start=False)
        for k, v in enumerate(vin):
            one = c.copy()
            one.remove("VIN")
            one.voltage_source("VIN", "in", "gnd", float(v))
            single = one.solve(model=model)
            assert batch.transistors["Q1"].region[k] == single.transistors["Q1"].region, (model, v)
            assert math.isclose(batch.v["c2"][k], single.v["c2"], rel_tol=1e-9, abs_tol=1e-9), (model, v)

"""Independent reference solvers for ampplan's tests.

Nothing here imports ampplan's solver: a circuit is a plain list of :class:`Element`, and the
nodal equations are built again from that list, in this file, from the contract in the project's
API notes (DESIGN §4 and issue 2):

- :func:`constant_drop_exact` solves the linear equations of one region assignment of the
  constant-drop model in exact rational arithmetic with sympy (modified nodal analysis: node
  voltages, voltage-source currents and each transistor's base and collector current as unknowns).
- :func:`constant_drop_enumerate` walks every region assignment in floating point (numpy) and keeps
  the consistent ones; it supplies starting points and an independent view of which regions are
  consistent.
- :func:`ebers_moll_root` solves the Ebers–Moll (transport form, forward Early effect) KCL residual
  written here, with ``scipy.optimize.root``.

:func:`to_circuit` is the only place that touches ampplan: it turns the same plain description into
an ``ampplan.Circuit`` so that a test builds both sides from one list.

Sign conventions (the project's contract): a resistor's current flows from its first node to its
second; a voltage source's current is what it delivers out of its plus terminal; a current source
of value I carries I out of its ``from`` node into its ``to`` node; transistor currents carry
textbook signs (NPN: into collector and base, out of emitter; PNP reversed), so the current a
transistor draws out of its collector node is ``s * ic`` with ``s = +1`` for NPN and ``-1`` for PNP.
"""

from __future__ import annotations

import dataclasses
import itertools
import math
from dataclasses import dataclass, field

import numpy as np
import sympy
from scipy import constants, optimize
from sympy.polys.domains import QQ
from sympy.polys.matrices import DomainMatrix

GROUND = "gnd"
REGIONS = ("cutoff", "forward-active", "saturation", "reverse-active")

#: The contract's transistor defaults (API notes / issue 2 §2).
DEVICE_DEFAULTS = {
    "polarity": "npn",
    "beta": 100.0,
    "vbe_on": 0.7,
    "vce_sat": 0.2,
    "beta_reverse": 1.0,
    "vbc_on": None,
    "saturation_current": 1e-14,
    "early_voltage": math.inf,
    "emission_coefficient": 1.0,
}


# --------------------------------------------------------------------------------------------
# Plain circuit description
# --------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class Element:
    """One circuit element, described without ampplan.

    kind : "R" (resistor, ohms), "V" (voltage source, volts), "I" (current source, amperes),
        "C" (capacitor, open at DC) or "Q" (bipolar transistor).
    nodes : R, C: (a, b); V: (plus, minus); I: (from, to); Q: (collector, base, emitter).
    value : the element's value in SI units (unused for C and Q).
    device : Q only: transistor parameters (keys of :data:`DEVICE_DEFAULTS`); missing keys take
        the defaults.
    """
    kind: str
    name: str
    nodes: tuple
    value: float = 0.0
    device: dict = field(default_factory=dict)

    def params(self) -> dict:
        """Full transistor parameter set with defaults filled in and ``vbc_on`` resolved."""
        p = dict(DEVICE_DEFAULTS)
        p.update(self.device)
        if p["vbc_on"] is None:
            p["vbc_on"] = p["vbe_on"]
        return p


def R(name, a, b, ohms):
    return Element("R", name, (a, b), float(ohms))


def V(name, plus, minus, volts):
    return Element("V", name, (plus, minus), float(volts))


def I(name, from_node, to_node, amperes):  # noqa: E743 - the trade's letter for a current source
    return Element("I", name, (from_node, to_node), float(amperes))


def C(name, a, b):
    return Element("C", name, (a, b))


def Q(name, collector, base, emitter, **device):
    return Element("Q", name, (collector, base, emitter), 0.0, dict(device))


def nodes_of(elements) -> list:
    """Non-ground nodes in order of first use."""
    seen = []
    for e in elements:
        for n in e.nodes:
            if n != GROUND and n not in seen:
                seen.append(n)
    return seen


def transistors_of(elements) -> list:
    return [e for e in elements if e.kind == "Q"]


def with_changes(elements, changes: dict) -> list:
    """A copy with element values (``"RC": 2e3``) or device parameters (``"Q1.beta": 50``) changed."""
    out = []
    for e in elements:
        updates = {}
        if e.name in changes:
            updates["value"] = float(changes[e.name])
        dev = {k.split(".", 1)[1]: v for k, v in changes.items() if k.startswith(e.name + ".")}
        if dev:
            d = dict(e.device)
            d.update({k: (v if isinstance(v, str) else float(v)) for k, v in dev.items()})
            updates["device"] = d
        out.append(dataclasses.replace(e, **updates) if updates else e)
    return out


def mirror(elements) -> list:
    """The complementary circuit: every source negated, every NPN a PNP and vice versa."""
    out = []
    for e in elements:
        if e.kind in ("V", "I"):
            out.append(dataclasses.replace(e, value=-e.value))
        elif e.kind == "Q":
            d = dict(e.device)
            d["polarity"] = "pnp" if e.params()["polarity"] == "npn" else "npn"
            out.append(dataclasses.replace(e, device=d))
        else:
            out.append(e)
    return out


def to_circuit(elements):
    """The same description as an ``ampplan.Circuit`` (the only function here that uses ampplan)."""
    import ampplan

    c = ampplan.Circuit()
    for e in elements:
        if e.kind == "R":
            c.resistor(e.name, *e.nodes, e.value)
        elif e.kind == "V":
            c.voltage_source(e.name, *e.nodes, e.value)
        elif e.kind == "I":
            c.current_source(e.name, *e.nodes, e.value)
        elif e.kind == "C":
            c.capacitor(e.name, *e.nodes)
        elif e.kind == "Q":
            coll, base, emit = e.nodes
            c.bjt(e.name, collector=coll, base=base, emitter=emit,
                  device=ampplan.Transistor(**{**DEVICE_DEFAULTS, **e.device}))
        else:  # pragma: no cover - a bug in a test's description
            raise ValueError(f"unknown element kind {e.kind!r} for {e.name}")
    return c


def sign(element) -> int:
    return 1 if element.params()["polarity"] == "npn" else -1


# --------------------------------------------------------------------------------------------
# Constant-drop model: the linear equations of one region assignment
# --------------------------------------------------------------------------------------------

def _unknowns(elements):
    nodes = nodes_of(elements)
    index = {("v", n): k for k, n in enumerate(nodes)}
    for e in elements:
        if e.kind == "V":
            index[("i", e.name)] = len(index)
    for e in transistors_of(elements):
        index[("ib", e.name)] = len(index)
        index[("ic", e.name)] = len(index)
    return nodes, index


def _constant_drop_rows(elements, regions, num):
    """Rows (coefficients by unknown, right-hand side) of the region's linear equations.

    ``num`` turns a float into the number type (``sympy.Rational`` for exact, ``float``).
    KCL rows say: the sum of currents leaving the node through its elements is zero.
    """
    nodes, index = _unknowns(elements)
    kcl = {n: ({}, num(0)) for n in nodes}

    def leave(node, coeffs, const=0):
        """Add (sum coeffs*unknown + const) to the current leaving ``node``."""
        if node == GROUND:
            return
        row, c0 = kcl[node]
        for key, coef in coeffs.items():
            if key[0] == "v" and key[1] == GROUND:
                continue
            row[key] = row.get(key, num(0)) + coef
        kcl[node] = (row, c0 + const)

    def volt(node, coef):
        return {} if node == GROUND else {("v", node): coef}

    extra = []  # (coeffs, rhs)
    for e in elements:
        if e.kind == "R":
            a, b = e.nodes
            g = num(1) / num(e.value)
            leave(a, _add(volt(a, g), volt(b, -g)))
            leave(b, _add(volt(b, g), volt(a, -g)))
        elif e.kind == "V":
            plus, minus = e.nodes
            leave(plus, {("i", e.name): num(-1)})
            leave(minus, {("i", e.name): num(1)})
            extra.append((_add(volt(plus, num(1)), volt(minus, num(-1))), num(e.value)))
        elif e.kind == "I":
            frm, to = e.nodes
            leave(frm, {}, num(e.value))
            leave(to, {}, -num(e.value))
        elif e.kind == "Q":
            p = e.params()
            s = num(sign(e))
            coll, base, emit = e.nodes
            ib, ic = ("ib", e.name), ("ic", e.name)
            leave(coll, {ic: s})
            leave(base, {ib: s})
            leave(emit, {ic: -s, ib: -s})
            region = regions[e.name]
            if region == "cutoff":
                extra.append(({ib: num(1)}, num(0)))
                extra.append(({ic: num(1)}, num(0)))
            elif region == "forward-active":
                extra.append((_add(volt(base, s), volt(emit, -s)), num(p["vbe_on"])))
                extra.append(({ic: num(1), ib: -num(p["beta"])}, num(0)))
            elif region == "saturation":
                extra.append((_add(volt(base, s), volt(emit, -s)), num(p["vbe_on"])))
                extra.append((_add(volt(coll, s), volt(emit, -s)), num(p["vce_sat"])))
            elif region == "reverse-active":
                extra.append((_add(volt(base, s), volt(coll, -s)), num(p["vbc_on"])))
                extra.append(({ic: num(1), ib: num(1) + num(p["beta_reverse"])}, num(0)))
            else:  # pragma: no cover
                raise ValueError(f"unknown region {region!r}")
    rows = [(row, -c0) for row, c0 in kcl.values()] + extra
    return nodes, index, rows


def _add(a: dict, b: dict) -> dict:
    out = dict(a)
    for k, v in b.items():
        out[k] = out.get(k, 0) + v
    return out


def _assemble(elements, solution_of, num):
    """Derived quantities (all nodes, element currents, transistor results) from unknown values."""
    nodes = nodes_of(elements)
    v = {GROUND: num(0)}
    v.update({n: solution_of(("v", n)) for n in nodes})
    i = {}
    transistors = {}
    for e in elements:
        if e.kind == "R":
            a, b = e.nodes
            i[e.name] = (v[a] - v[b]) / num(e.value)
        elif e.kind == "V":
            i[e.name] = solution_of(("i", e.name))
        elif e.kind == "I":
            i[e.name] = num(e.value)
        elif e.kind == "Q":
            coll, base, emit = e.nodes
            ib, ic = solution_of(("ib", e.name)), solution_of(("ic", e.name))
            transistors[e.name] = {
                "ib": ib, "ic": ic, "ie": ib + ic,
                "vbe": v[base] - v[emit], "vce": v[coll] - v[emit],
            }
    return {"v": v, "i": i, "transistors": transistors}


def constant_drop_exact(elements, regions: dict):
    """Exact solution of one region assignment's linear equations (sympy rationals).

    Parameters
    ----------
    elements : list of Element
    regions : dict of transistor name -> region name

    Returns
    -------
    dict or None
        ``{"v": {node: Rational}, "i": {element: Rational}, "transistors": {name: {"ib", "ic",
        "ie", "vbe", "vce"}}, "checks": {name: [(check, margin, strict)]}}``; None when the
        equations are singular (no unique solution for that assignment).
    """
    nodes, index, rows = _constant_drop_rows(elements, regions, sympy.Rational)
    n = len(index)
    assert len(rows) == n, "the region equations must be square"
    a = [[QQ.from_sympy(row.get(key, sympy.Integer(0))) for key in index] for row, _ in rows]
    b = [[QQ.from_sympy(rhs)] for _, rhs in rows]
    mat = DomainMatrix(a, (n, n), QQ)
    if mat.rank() < n:
        return None
    x = mat.lu_solve(DomainMatrix(b, (n, 1), QQ)).to_Matrix()
    keys = list(index)
    solution = {k: x[j, 0] for j, k in enumerate(keys)}
    out = _assemble(elements, lambda k: solution[k], sympy.Rational)
    out["checks"] = {e.name: region_checks(e, out, regions[e.name], sympy.Rational)
                     for e in transistors_of(elements)}
    return out


def region_checks(element, solution, region, num=float):
    """The constant-drop conditions of ``region`` (issue 2 §3 / DESIGN §4), NPN frame.

    Returns a list of ``(name, margin, strict)``: the condition holds when ``margin > 0``
    (strict) or ``margin >= 0``.
    """
    p = element.params()
    s = num(sign(element))
    t = solution["transistors"][element.name]
    vbe, vce = s * t["vbe"], s * t["vce"]
    vbc = vbe - vce
    ib, ic = t["ib"], t["ic"]
    if region == "cutoff":
        return [("V_BE < V_BE(on)", num(p["vbe_on"]) - vbe, True),
                ("V_BC < V_BC(on)", num(p["vbc_on"]) - vbc, True)]
    if region == "forward-active":
        return [("I_B > 0", ib, True), ("V_CE >= V_CE(sat)", vce - num(p["vce_sat"]), False)]
    if region == "saturation":
        return [("I_B > 0", ib, True), ("I_C < beta I_B", num(p["beta"]) * ib - ic, True)]
    if region == "reverse-active":
        return [("I_B > 0", ib, True), ("V_CE <= -V_CE(sat)", -num(p["vce_sat"]) - vce, False)]
    raise ValueError(region)  # pragma: no cover


def constant_drop_float(elements, regions: dict):
    """The same equations as :func:`constant_drop_exact`, solved in floating point (numpy)."""
    nodes, index, rows = _constant_drop_rows(elements, regions, float)
    keys = list(index)
    a = np.array([[row.get(k, 0.0) for k in keys] for row, _ in rows], dtype=float)
    b = np.array([rhs for _, rhs in rows], dtype=float)
    if np.linalg.matrix_rank(a) < len(keys):
        return None
    x = np.linalg.solve(a, b)
    solution = dict(zip(keys, x))
    out = _assemble(elements, lambda k: float(solution[k]), float)
    out["checks"] = {e.name: region_checks(e, out, regions[e.name]) for e in transistors_of(elements)}
    return out


def current_scale(solution) -> float:
    """Largest current magnitude in a solution (amperes), for relative tolerances."""
    values = [abs(float(x)) for x in solution["i"].values()]
    for t in solution["transistors"].values():
        values += [abs(float(t["ic"])), abs(float(t["ib"])), abs(float(t["ie"]))]
    return max(values + [1e-300])


def is_consistent(solution, rtol=1e-9) -> bool:
    """True when every check of every transistor holds (within a relative slack ``rtol``)."""
    if solution is None:
        return False
    i_scale = current_scale(solution)
    v_scale = max(abs(float(x)) for x in solution["v"].values()) or 1.0
    for checks in solution["checks"].values():
        for name, margin, _strict in checks:
            slack = rtol * (i_scale if name.startswith("I_") else v_scale)
            if float(margin) < -slack:
                return False
    return True


def constant_drop_enumerate(elements, rtol=1e-9):
    """Every consistent region assignment, by brute force over 4**N (floating point; small N only).

    Returns a list of ``(regions, solution, min_margin)`` sorted by ``min_margin`` (largest first),
    where ``min_margin`` is the smallest check margin relative to its scale.
    """
    names = [e.name for e in transistors_of(elements)]
    found = []
    for combo in itertools.product(REGIONS, repeat=len(names)):
        regions = dict(zip(names, combo))
        sol = constant_drop_float(elements, regions)
        if is_consistent(sol, rtol):
            i_scale = current_scale(sol)
            v_scale = max(abs(x) for x in sol["v"].values()) or 1.0
            worst = min(float(m) / (i_scale if n.startswith("I_") else v_scale)
                        for checks in sol["checks"].values() for n, m, _ in checks)
            found.append((regions, sol, worst))
    found.sort(key=lambda item: -item[2])
    return found


# --------------------------------------------------------------------------------------------
# Ebers–Moll model: our own KCL residual, solved with scipy.optimize.root
# --------------------------------------------------------------------------------------------

def thermal_voltage(temperature_c: float) -> float:
    """k·T/q from scipy.constants (CODATA), T in degrees Celsius."""
    return constants.k * (temperature_c + constants.zero_Celsius) / constants.e


def ebers_moll_currents(p, vbe, vbc, v_t):
    """Transport-form Ebers–Moll with forward Early effect (the API notes' equations), NPN frame.

    Returns ``(ic, ib)`` and their partial derivatives ``((dic/dvbe, dic/dvbc), (dib/dvbe,
    dib/dvbc))``. Exponents are capped at 200 so that a wild trial point of the root finder does not
    overflow; no solution lies anywhere near the cap.
    """
    i_s, bf, br = p["saturation_current"], p["beta"], p["beta_reverse"]
    va, nvt = p["early_voltage"], p["emission_coefficient"] * v_t
    eb = np.exp(min(vbe / nvt, 200.0))
    ec = np.exp(min(vbc / nvt, 200.0))
    early = 1.0 - vbc / va
    it = i_s * (eb - ec) * early
    ic = it - (i_s / br) * (ec - 1.0)
    ib = (i_s / bf) * (eb - 1.0) + (i_s / br) * (ec - 1.0)
    dit_dbe = i_s * eb / nvt * early
    dit_dbc = -i_s * ec / nvt * early - i_s * (eb - ec) / va
    dic = (dit_dbe, dit_dbc - (i_s / br) * ec / nvt)
    dib = ((i_s / bf) * eb / nvt, (i_s / br) * ec / nvt)
    return ic, ib, dic, dib


def _em_system(elements, v_t, shunt_conductance=0.0):
    nodes = nodes_of(elements)
    index = {("v", n): k for k, n in enumerate(nodes)}
    for e in elements:
        if e.kind == "V":
            index[("i", e.name)] = len(index)
    n = len(index)

    def fun(x):
        def vn(node):
            return 0.0 if node == GROUND else x[index[("v", node)]]

        f = np.zeros(n)
        jac = np.zeros((n, n))

        def leave(node, value, grads=()):
            if node == GROUND:
                return
            r = index[("v", node)]
            f[r] += value
            for other, g in grads:
                if other != GROUND:
                    jac[r, index[("v", other)] if isinstance(other, str) else other] += g

        for node in nodes:
            r = index[("v", node)]
            f[r] += shunt_conductance * x[r]
            jac[r, r] += shunt_conductance
        for e in elements:
            if e.kind == "R":
                a, b = e.nodes
                g = 1.0 / e.value
                cur = (vn(a) - vn(b)) * g
                leave(a, cur, [(a, g), (b, -g)])
                leave(b, -cur, [(a, -g), (b, g)])
            elif e.kind == "V":
                plus, minus = e.nodes
                k = index[("i", e.name)]
                leave(plus, -x[k], [(k, -1.0)])
                leave(minus, x[k], [(k, 1.0)])
                f[k] = vn(plus) - vn(minus) - e.value
                if plus != GROUND:
                    jac[k, index[("v", plus)]] += 1.0
                if minus != GROUND:
                    jac[k, index[("v", minus)]] -= 1.0
            elif e.kind == "I":
                frm, to = e.nodes
                leave(frm, e.value)
                leave(to, -e.value)
            elif e.kind == "Q":
                s = sign(e)
                coll, base, emit = e.nodes
                vbe = s * (vn(base) - vn(emit))
                vbc = s * (vn(base) - vn(coll))
                ic, ib, (dic_be, dic_bc), (dib_be, dib_bc) = ebers_moll_currents(e.params(), vbe, vbc, v_t)
                # d(vbe)/dV_B = s, d(vbe)/dV_E = -s, d(vbc)/dV_B = s, d(vbc)/dV_C = -s; the current
                # leaving each node carries another factor s, and s*s = 1.
                dic = [(base, dic_be + dic_bc), (emit, -dic_be), (coll, -dic_bc)]
                dib = [(base, dib_be + dib_bc), (emit, -dib_be), (coll, -dib_bc)]
                die = [(node, -(gc + gb)) for (node, gc), (_, gb) in zip(dic, dib)]
                leave(coll, s * ic, dic)
                leave(base, s * ib, dib)
                leave(emit, -s * (ic + ib), die)
        return f, jac

    return nodes, index, fun


def _em_solution(elements, index, x, v_t):
    def lookup(key):
        return float(x[index[key]])

    v = {GROUND: 0.0}
    v.update({n: lookup(("v", n)) for n in nodes_of(elements)})
    i, transistors = {}, {}
    for e in elements:
        if e.kind == "R":
            i[e.name] = (v[e.nodes[0]] - v[e.nodes[1]]) / e.value
        elif e.kind == "V":
            i[e.name] = lookup(("i", e.name))
        elif e.kind == "I":
            i[e.name] = e.value
        elif e.kind == "Q":
            s = sign(e)
            coll, base, emit = e.nodes
            ic, ib, _, _ = ebers_moll_currents(e.params(), s * (v[base] - v[emit]), s * (v[base] - v[coll]), v_t)
            transistors[e.name] = {"ic": float(ic), "ib": float(ib), "ie": float(ic + ib),
                                   "vbe": v[base] - v[emit], "vce": v[coll] - v[emit]}
    return {"v": v, "i": i, "transistors": transistors}


def _root(fun, x0):
    """scipy.optimize.root on our residual and Jacobian, then Newton polishing.

    Levenberg–Marquardt (MINPACK lmder) re-evaluates the Jacobian at every step, which suits the
    exponential junction laws; the hybrid method (hybr) is the second try.
    """
    best = None
    for method, options in (("lm", {"xtol": 1e-15, "ftol": 1e-15, "maxiter": 5000}),
                            ("hybr", {"xtol": 1e-14, "maxfev": 2000})):
        sol = optimize.root(lambda x: fun(x)[0], x0, jac=lambda x: fun(x)[1], method=method,
                            options=options)
        x = sol.x
        for _ in range(3):  # plain Newton steps from a point already at the root: squeeze the rounding
            f, jac = fun(x)
            try:
                step = np.linalg.solve(jac, f)
            except np.linalg.LinAlgError:
                break
            if not np.all(np.isfinite(step)):
                break
            x = x - step
        norm = np.max(np.abs(fun(x)[0]))
        if best is None or norm < best[0]:
            best = (norm, x)
        if norm < 1e-13:
            break
    return best[1]


def _residual_ok(fun, x, elements, index):
    f, _ = fun(x)
    if not np.all(np.isfinite(f)):
        return False
    k_rows = [index[("v", n)] for n in nodes_of(elements)]
    v_rows = [k for k in range(len(f)) if k not in k_rows]
    # Currents are checked against the largest current in the circuit, voltage constraints in volts.
    kcl_scale = max(np.max(np.abs(x[v_rows])) if v_rows else 0.0, 1e-12)
    return (np.max(np.abs(f[k_rows]), initial=0.0) <= 1e-11 * kcl_scale + 1e-18
            and np.max(np.abs(f[v_rows]), initial=0.0) <= 1e-9)


def ebers_moll_root(elements, temperature=25.0, start=None):
    """Solve our own Ebers–Moll nodal equations with ``scipy.optimize.root``.

    Parameters
    ----------
    elements : list of Element
    temperature : float
        Degrees Celsius; sets V_T only (parameters are taken as given at that temperature).
    start : dict of node -> volts, optional
        Starting node voltages. By default the best consistent constant-drop solution from
        :func:`constant_drop_enumerate` (our own), else all zeros.

    Returns
    -------
    dict
        Same layout as :func:`constant_drop_exact` (floats), plus ``"start"`` naming where the root
        finder started and ``"converged"`` (bool).
    """
    v_t = thermal_voltage(temperature)
    nodes, index, fun = _em_system(elements, v_t)
    starts = []
    if start is not None:
        starts.append(("given", start, {}))
    else:
        for regions, sol, _ in constant_drop_enumerate(elements)[:2]:
            starts.append(("constant-drop " + ",".join(regions.values()), sol["v"], sol["i"]))
        starts.append(("zeros", {}, {}))
    for label, volts, currents in starts:
        x0 = np.zeros(len(index))
        for key, k in index.items():
            src = volts if key[0] == "v" else currents
            x0[k] = float(src.get(key[1], 0.0))
        x = _root(fun, x0)
        if not _residual_ok(fun, x, elements, index):
            # Our own continuation: a conductance from every node to ground, stepped down to zero.
            x = x0
            for shunt_conductance in [1e-2, 1e-3, 1e-4, 1e-5, 1e-6, 1e-7, 1e-8, 1e-9, 1e-10, 1e-12, 0.0]:
                x = _root(_em_system(elements, v_t, shunt_conductance)[2], x)
        if _residual_ok(fun, x, elements, index):
            out = _em_solution(elements, index, x, v_t)
            out.update(start=label, converged=True)
            return out
    out = _em_solution(elements, index, x, v_t)
    out.update(start="none", converged=False)
    return out


def em_region(element, solution, temperature_c: float = 25.0) -> str:
    """Region of an Ebers–Moll solution by the API notes' rule (ampplan.solver.regions).

    A junction conducts when the current it injects, I_S (exp(V / (n V_T)) - 1), is at least
    100 nA; cutoff when neither conducts; else forward-active when V_CE >= V_CE(sat),
    reverse-active when V_CE <= -V_CE(sat), saturation otherwise. The parameters are taken as
    given at ``temperature_c`` (only V_T is moved; use it at 25 °C or with scaled parameters).
    """
    p = element.params()
    s = sign(element)
    t = solution["transistors"][element.name]
    vbe, vce = s * t["vbe"], s * t["vce"]
    vbc = vbe - vce
    nvt = p["emission_coefficient"] * thermal_voltage(temperature_c)

    def conducts(v):
        return p["saturation_current"] * math.expm1(min(v / nvt, 700.0)) >= 100e-9

    if not conducts(vbe) and not conducts(vbc):
        return "cutoff"
    if vce >= p["vce_sat"]:
        return "forward-active"
    if vce <= -p["vce_sat"]:
        return "reverse-active"
    return "saturation"


# --------------------------------------------------------------------------------------------
# Circuit families for random tests (plain descriptions; values come from the caller)
# --------------------------------------------------------------------------------------------

TOPOLOGIES = ("divider-ce", "fixed-bias", "ce-follower", "complementary", "current-tail",
              "diff-pair", "reversed")


def build(topology: str, draw) -> list:
    """A circuit of one family with values from ``draw(name, low, high, log)``.

    Every family has a supply ``VCC``, a transistor ``Q1`` and a resistor ``RC`` (the batch tests
    vary exactly these). ``draw`` is a hypothesis draw or a numpy generator with fixed entropy.
    """
    def r(name, lo=220.0, hi=1e6):
        return draw(name, lo, hi, True)

    def dev(prefix, polarity="npn"):
        va = draw(prefix + ".early_voltage", 20.0, 400.0, True)
        return dict(
            polarity=polarity,
            beta=draw(prefix + ".beta", 20.0, 500.0, True),
            vbe_on=draw(prefix + ".vbe_on", 0.6, 0.8, False),
            vce_sat=draw(prefix + ".vce_sat", 0.1, 0.3, False),
            beta_reverse=draw(prefix + ".beta_reverse", 0.2, 5.0, True),
            saturation_current=draw(prefix + ".saturation_current", 1e-16, 1e-13, True),
            early_voltage=math.inf if va > 300.0 else va,
            emission_coefficient=draw(prefix + ".emission_coefficient", 1.0, 1.3, False),
        )

    vcc = draw("VCC", 3.0, 30.0, True)
    if topology == "divider-ce":
        return [V("VCC", "vcc", GROUND, vcc), R("R1", "vcc", "b", r("R1")), R("R2", "b", GROUND, r("R2")),
                R("RC", "vcc", "c", r("RC")), R("RE", "e", GROUND, r("RE", 47.0, 1e5)),
                C("CE", "e", GROUND), Q("Q1", "c", "b", "e", **dev("Q1"))]
    if topology == "fixed-bias":
        return [V("VCC", "vcc", GROUND, vcc), R("RB", "vcc", "b", r("RB", 1e3, 1e7)),
                R("RC", "vcc", "c", r("RC")), R("RE", "e", GROUND, r("RE", 10.0, 1e4)),
                Q("Q1", "c", "b", "e", **dev("Q1"))]
    if topology == "ce-follower":
        return [V("VCC", "vcc", GROUND, vcc), R("R1", "vcc", "b1", r("R1")), R("R2", "b1", GROUND, r("R2")),
                R("RC", "vcc", "c1", r("RC")), R("RE", "e1", GROUND, r("RE", 47.0, 1e5)),
                Q("Q1", "c1", "b1", "e1", **dev("Q1")),
                Q("Q2", "vcc", "c1", "e2", **dev("Q2")), R("RE2", "e2", GROUND, r("RE2", 100.0, 1e5)),
                C("CO", "e2", "out"), R("RL", "out", GROUND, r("RL"))]
    if topology == "complementary":
        return [V("VCC", "vcc", GROUND, vcc), R("R1", "vcc", "b1", r("R1")), R("R2", "b1", GROUND, r("R2")),
                R("RC", "vcc", "c1", r("RC")), R("RE", "e1", GROUND, r("RE", 47.0, 1e5)),
                Q("Q1", "c1", "b1", "e1", **dev("Q1")),
                Q("Q2", "c2", "c1", "e2", **dev("Q2", "pnp")), R("RE2", "vcc", "e2", r("RE2", 47.0, 1e5)),
                R("RC2", "c2", GROUND, r("RC2"))]
    if topology == "current-tail":
        return [V("VCC", "vcc", GROUND, vcc), V("VEE", "vee", GROUND, -draw("VEE", 3.0, 15.0, True)),
                R("RB", "b", GROUND, r("RB", 100.0, 1e5)), R("RC", "vcc", "c", r("RC", 100.0, 1e5)),
                I("IEE", "e", "vee", draw("IEE", 1e-5, 1e-2, True)), Q("Q1", "c", "b", "e", **dev("Q1"))]
    if topology == "diff-pair":
        return [V("VCC", "vcc", GROUND, vcc), V("VEE", "vee", GROUND, -draw("VEE", 3.0, 15.0, True)),
                V("VIN", "in", GROUND, draw("VIN", -0.5, 0.5, False)),
                R("RB1", "in", "b1", r("RB1", 100.0, 1e5)), R("RB2", "b2", GROUND, r("RB2", 100.0, 1e5)),
                R("RC", "vcc", "c1", r("RC", 100.0, 1e5)), R("RC2", "vcc", "c2", r("RC2", 100.0, 1e5)),
                R("RT", "tail", "vee", r("RT", 100.0, 1e5)),
                Q("Q1", "c1", "b1", "tail", **dev("Q1")), Q("Q2", "c2", "b2", "tail", **dev("Q2"))]
    if topology == "reversed":
        # Collector and emitter swapped on the board: the emitter is pulled up, the collector down.
        return [V("VCC", "vcc", GROUND, vcc), R("RB", "vcc", "b", r("RB", 1e3, 1e7)),
                R("RE", "vcc", "e", r("RE", 220.0, 1e5)), R("RC", "c", GROUND, r("RC", 220.0, 1e5)),
                Q("Q1", "c", "b", "e", **dev("Q1"))]
    raise ValueError(topology)  # pragma: no cover


def build_chain(draw, stages: int = 3) -> list:
    """``stages`` complementary stages in cascade (2 transistors each: NPN then PNP), direct coupling
    from each stage's output through a series resistor into the next stage's divider.

    Too many transistors for :func:`constant_drop_enumerate`; used where ampplan's region search
    (not its full enumeration) is exercised.
    """
    vcc = draw("VCC", 6.0, 30.0, True)
    out = [V("VCC", "vcc", GROUND, vcc)]
    previous = None
    for k in range(1, stages + 1):
        def r(name, lo=220.0, hi=1e6):
            return draw(f"{name}_{k}", lo, hi, True)

        def dev(name, polarity):
            return dict(polarity=polarity, beta=draw(f"{name}.beta", 30.0, 400.0, True),
                        saturation_current=draw(f"{name}.saturation_current", 1e-16, 1e-13, True),
                        early_voltage=draw(f"{name}.early_voltage", 30.0, 300.0, True))

        b, c1, e1, c2, e2 = (f"{x}{k}" for x in ("b", "c", "e", "cp", "ep"))
        out += [R(f"R1_{k}", "vcc", b, r("R1")), R(f"R2_{k}", b, GROUND, r("R2")),
                R("RC" if k == 1 else f"RC_{k}", "vcc", c1, r("RC")), R(f"RE_{k}", e1, GROUND, r("RE", 47.0, 1e5)),
                Q(f"Q{2 * k - 1}", c1, b, e1, **dev(f"Q{2 * k - 1}", "npn")),
                Q(f"Q{2 * k}", c2, c1, e2, **dev(f"Q{2 * k}", "pnp")),
                R(f"RE2_{k}", "vcc", e2, r("RE2", 47.0, 1e5)), R(f"RC2_{k}", c2, GROUND, r("RC2"))]
        if previous is not None:
            out.append(R(f"RS_{k}", previous, b, r("RS")))
        previous = c2
    return out


def numpy_draw(rng):
    """A ``draw`` for :func:`build` from a numpy Generator with fixed entropy."""
    def draw(_name, lo, hi, log):
        if log:
            return float(np.exp(rng.uniform(np.log(lo), np.log(hi))))
        return float(rng.uniform(lo, hi))
    return draw

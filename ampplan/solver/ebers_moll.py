"""Ebers–Moll device equations and the batched, damped Newton solver built on them.

Equations (transport form with forward Early effect; Gray & Meyer, *Analysis and Design of
Analog Integrated Circuits*, bipolar large-signal model, from memory), in the NPN frame where
v_be = V(B) - V(E) and v_bc = V(B) - V(C) (a PNP uses V(E) - V(B) and V(C) - V(B) and reverses
every terminal current):

    e_be = exp(v_be / (n·V_T)),   e_bc = exp(v_bc / (n·V_T)),   V_T = k·T/q
    i_t  = I_S · (e_be - e_bc) · (1 - v_bc / V_A)
    i_c  = i_t - (I_S / β_R) · (e_bc - 1)
    i_b  = (I_S / β_F) · (e_be - 1) + (I_S / β_R) · (e_bc - 1)
    i_e  = i_c + i_b

Newton's method runs on the same unknowns as the constant-drop model (node voltages, source
currents, I_B and I_C per transistor), so Kirchhoff's law stays linear and holds to rounding at
every iterate; only the two device rows per transistor are linearised. Each junction voltage is
limited between iterates (logarithmic steps above the critical voltage where the exponential
turns steep), and exponents above 80 continue linearly so nothing overflows.

When plain Newton fails, two fallbacks follow in order: a conductance ladder (a conductance from
every node to ground, 1 mS stepped down tenfold to zero) and source stepping (every source
scaled 0 → 1 in twenty steps). Every loop is bounded.
"""

from __future__ import annotations

import numpy as np

from ..devices import scaled_to_temperature, thermal_voltage
from .linear import solve_batch

#: Exponent beyond which exp() continues as a straight line (keeps far iterates finite).
EXP_LIMIT = 80.0
MAX_ITERATIONS = 150
LADDER_ITERATIONS = 60
LADDER = (1e-3, 1e-4, 1e-5, 1e-6, 1e-7, 1e-8, 1e-9, 1e-10, 1e-11, 1e-12, 0.0)
SOURCE_STEPS = 20
RELATIVE_TOLERANCE = 1e-9
VOLTAGE_TOLERANCE = 1e-9    # volts
CURRENT_TOLERANCE = 1e-15   # amperes


def _exp(arg):
    """exp(arg) and its derivative, continued linearly above EXP_LIMIT."""
    clipped = np.minimum(arg, EXP_LIMIT)
    e = np.exp(clipped)
    return e * (1.0 + np.maximum(arg - EXP_LIMIT, 0.0)), e


def device_currents(v_be, v_bc, dev, v_t):
    """Ebers–Moll terminal currents and their derivatives, NPN frame.

    Parameters
    ----------
    v_be, v_bc : ndarray, shape (S, N)
        Junction voltages, volts.
    dev : dict of str -> ndarray (S, N)
        Device parameters at the solve temperature.
    v_t : ndarray, shape (S, 1)
        Thermal voltage, volts.

    Returns
    -------
    i_b, i_c : ndarray (S, N)
        Amperes, textbook signs.
    d : dict of ndarray (S, N)
        ``"b_be"``, ``"b_bc"``, ``"c_be"``, ``"c_bc"``: ∂i_b/∂v_be ... siemens.
    """
    nvt = dev["emission_coefficient"] * v_t
    i_s = dev["saturation_current"]
    e_be, de_be = _exp(v_be / nvt)
    e_bc, de_bc = _exp(v_bc / nvt)
    de_be = de_be / nvt
    de_bc = de_bc / nvt
    inv_va = 1.0 / dev["early_voltage"]          # 0 for an infinite Early voltage
    q = 1.0 - v_bc * inv_va
    ib_f, ib_r = i_s / dev["beta"], i_s / dev["beta_reverse"]
    i_t = i_s * (e_be - e_bc) * q
    i_c = i_t - ib_r * (e_bc - 1.0)
    i_b = ib_f * (e_be - 1.0) + ib_r * (e_bc - 1.0)
    dt_be = i_s * de_be * q
    dt_bc = -i_s * de_bc * q - i_s * (e_be - e_bc) * inv_va
    d = {"b_be": ib_f * de_be, "b_bc": ib_r * de_bc, "c_be": dt_be, "c_bc": dt_bc - ib_r * de_bc}
    return i_b, i_c, d


def _limit_junction(v_new, v_old, nvt, v_crit):
    """Limit a junction-voltage step where the exponential is steep (logarithmic step)."""
    steep = (v_new > v_crit) & (np.abs(v_new - v_old) > 2.0 * nvt)
    with np.errstate(invalid="ignore", divide="ignore"):
        arg = 1.0 + (v_new - v_old) / nvt
        from_on = np.where(arg > 0, v_old + nvt * np.log(np.where(arg > 0, arg, 1.0)), v_crit)
        from_off = nvt * np.log(np.where(v_new > 0, v_new / nvt, 1.0))
    limited = np.where(v_old > 0, from_on, from_off)
    return np.where(steep, limited, v_new)


class NewtonProblem:
    """The Ebers–Moll equations of one layout for S samples, ready for Newton iterations."""

    def __init__(self, layout, params):
        self.layout = layout
        self.params = params
        temperature = params.temperature[:, None]
        self.dev = scaled_to_temperature(params.device, temperature)
        self.v_t = thermal_voltage(temperature)
        nvt = self.dev["emission_coefficient"] * self.v_t
        self.nvt = nvt
        self.v_crit = nvt * np.log(nvt / (np.sqrt(2.0) * self.dev["saturation_current"]))
        n = layout.size
        self.abs_tol = np.concatenate([np.full(layout.n_nodes, VOLTAGE_TOLERANCE),
                                       np.full(n - layout.n_nodes, CURRENT_TOLERANCE)])

    def junctions(self, x, rows=slice(None)):
        """NPN-frame v_be and v_bc, shape (S', N), from unknowns x of shape (S', size + 1)."""
        lay = self.layout
        s = lay.sign
        return s * (x[:, lay.q_b] - x[:, lay.q_e]), s * (x[:, lay.q_b] - x[:, lay.q_c])

    def newton(self, rows, x, v_old, gmin=0.0, scale=1.0, max_iterations=MAX_ITERATIONS):
        """Newton iterations on the samples ``rows`` (index array), from iterate ``x``.

        Parameters
        ----------
        rows : ndarray of int, shape (S',)
        x : ndarray, shape (S', size + 1)
            Starting unknowns; the last column is ground and stays 0.
        v_old : tuple of ndarray (S', N)
            Junction voltages the previous step used (for limiting).

        Returns
        -------
        x, v_old, converged (bool (S',)), iterations (int (S',))
        """
        lay = self.layout
        params = _take(self.params, rows)
        base, rhs0 = lay.assemble(params, source_scale=scale, gmin=gmin)
        dev = {k: v[rows] for k, v in self.dev.items()}
        v_t, nvt, v_crit = self.v_t[rows], self.nvt[rows], self.v_crit[rows]
        abs_tol = self.abs_tol
        n = lay.size
        s = lay.sign
        device_rows = np.concatenate([lay.q_ib, lay.q_ic])
        converged = np.zeros(len(rows), dtype=bool)
        iterations = np.zeros(len(rows), dtype=int)
        active = np.arange(len(rows))
        vbe_old, vbc_old = v_old
        x = x.copy()
        gathered = None
        for _ in range(max_iterations):
            if active.size == 0:
                break
            if gathered is None or gathered.size != active.size:
                # Gather the still-active samples once per change of the active set; between
                # changes only the device rows of the work arrays are rewritten.
                gathered = active
                work_matrix, work_rhs = base[active], rhs0[active]
                d_act = {k: v[active] for k, v in dev.items()}
                vt_act, nvt_act, crit_act = v_t[active], nvt[active], v_crit[active]
            else:
                work_matrix[:, device_rows, :] = 0.0
                work_rhs[:, device_rows] = rhs0[active][:, device_rows]
            xa = x[active]
            vbe_raw, vbc_raw = self.junctions(xa)
            vbe = _limit_junction(vbe_raw, vbe_old[active], nvt_act, crit_act)
            vbc = _limit_junction(vbc_raw, vbc_old[active], nvt_act, crit_act)
            was_limited = np.any((vbe != vbe_raw) | (vbc != vbc_raw), axis=1)
            i_b, i_c, d = device_currents(vbe, vbc, d_act, vt_act)
            _stamp_device(work_matrix, work_rhs, lay, s, vbe, vbc, i_b, i_c, d)
            x_new, ok = solve_batch(work_matrix[:, :n, :n], work_rhs[:, :n])
            step = np.abs(x_new - xa[:, :n])
            small = np.all(step <= RELATIVE_TOLERANCE * np.maximum(np.abs(x_new), np.abs(xa[:, :n])) + abs_tol,
                           axis=1)
            done = ok & small & ~was_limited
            iterations[active] += 1
            x[active, :n] = np.where(ok[:, None], x_new, xa[:, :n])
            vbe_old[active], vbc_old[active] = vbe, vbc
            converged[active[done]] = True
            # A singular or non-finite iterate ends that sample's attempt; a fallback takes over.
            keep = ~done & ok
            if not np.all(keep):
                active = active[keep]
                gathered = None
        return x, (vbe_old, vbc_old), converged, iterations


def _stamp_device(matrix, rhs, lay, s, vbe, vbc, i_b, i_c, d):
    """Write the linearised device rows  i - (∂i/∂v_be)·v_be - (∂i/∂v_bc)·v_bc = i0 - ... ."""
    for row, col_i, g_be, g_bc, i0 in ((lay.q_ib, lay.q_ib, d["b_be"], d["b_bc"], i_b),
                                       (lay.q_ic, lay.q_ic, d["c_be"], d["c_bc"], i_c)):
        matrix[:, row, col_i] += 1.0
        # v_be = s·(V_B - V_E) and v_bc = s·(V_B - V_C); each terminal is its own statement so
        # that shorted terminals (a diode-connected transistor) add up.
        matrix[:, row, lay.q_b] -= s * (g_be + g_bc)
        matrix[:, row, lay.q_e] += s * g_be
        matrix[:, row, lay.q_c] += s * g_bc
        rhs[:, row] += i0 - g_be * vbe - g_bc * vbc


def _take(params, rows):
    from ..circuit import Parameters
    return Parameters(conductance=params.conductance[rows], voltage=params.voltage[rows],
                      current=params.current[rows], device={k: v[rows] for k, v in params.device.items()},
                      temperature=params.temperature[rows])


def solve_newton(layout, params, x0=None):
    """Solve the Ebers–Moll equations for every sample.

    Parameters
    ----------
    layout : ampplan.circuit.Layout
    params : ampplan.circuit.Parameters
        S samples.
    x0 : ndarray, shape (S, size + 1), optional
        Starting unknowns (the constant-drop all-forward-active answer is a good one); rows with
        NaN start from zero.

    Returns
    -------
    x : ndarray, shape (S, size + 1)
        Unknowns (NaN rows where every attempt failed); last column is ground.
    converged : ndarray of bool, shape (S,)
    iterations : ndarray of int, shape (S,)
    method : ndarray of str, shape (S,)
        ``"newton"``, ``"conductance ladder"`` or ``"source stepping"``.
    """
    problem = NewtonProblem(layout, params)
    s_count = params.size
    n_q = layout.n_bjt
    if x0 is None:
        x0 = np.zeros((s_count, layout.size + 1))
    else:
        x0 = np.where(np.all(np.isfinite(x0), axis=1, keepdims=True), x0, 0.0)
    # Junction voltages "used last" start no higher than the constant-drop on-voltages, so a
    # starting point with a junction driven hard forward is approached in limited steps.
    vbe0, vbc0 = problem.junctions(x0)
    v0 = (np.minimum(vbe0, problem.dev["vbe_on"]), np.minimum(vbc0, problem.dev["vbc_on"]))
    every = np.arange(s_count)
    x, v_old, converged, iterations = problem.newton(every, x0, v0)
    method = np.where(converged, "newton", "").astype(object)

    left = every[~converged]
    if left.size:
        # Conductance ladder: each rung starts from the previous rung's answer.
        xl = np.zeros((left.size, layout.size + 1))
        vl = (np.zeros((left.size, n_q)), np.zeros((left.size, n_q)))
        alive = np.ones(left.size, dtype=bool)
        for g in LADDER:
            idx = np.flatnonzero(alive)
            xs, vs, ok, its = problem.newton(left[idx], xl[idx], (vl[0][idx], vl[1][idx]), gmin=g,
                                             max_iterations=LADDER_ITERATIONS)
            xl[idx], vl[0][idx], vl[1][idx] = xs, vs[0], vs[1]
            iterations[left[idx]] += its
            alive[idx[~ok]] = False
        x[left[alive]] = xl[alive]
        converged[left[alive]] = True
        method[left[alive]] = "conductance ladder"
        left = left[~alive]
    if left.size:
        xl = np.zeros((left.size, layout.size + 1))
        vl = (np.zeros((left.size, n_q)), np.zeros((left.size, n_q)))
        alive = np.ones(left.size, dtype=bool)
        for scale in np.linspace(0.0, 1.0, SOURCE_STEPS + 1):
            idx = np.flatnonzero(alive)
            xs, vs, ok, its = problem.newton(left[idx], xl[idx], (vl[0][idx], vl[1][idx]), scale=scale,
                                             max_iterations=LADDER_ITERATIONS)
            xl[idx], vl[0][idx], vl[1][idx] = xs, vs[0], vs[1]
            iterations[left[idx]] += its
            alive[idx[~ok]] = False
        x[left[alive]] = xl[alive]
        converged[left[alive]] = True
        method[left[alive]] = "source stepping"
    x[~converged] = np.nan
    return x, converged, iterations, method.astype(str)


def classify(layout, params, x):
    """Regions of an Ebers–Moll solution, with the checks that decided them.

    Thresholds (NPN frame, documented in DESIGN §4): a junction conducts when its voltage is at
    least its constant-drop on-voltage less 0.2 V (0.5 V for the default 0.7 V). Neither
    conducting: cutoff. Otherwise forward-active when V_CE >= V_CE(sat), reverse-active when
    V_CE <= -V_CE(sat), saturation in between.

    Returns
    -------
    regions : ndarray of int, shape (S, N)
        Codes into ``REGIONS``.
    checks : tuple (names, values, limits, margins), each ndarray (S, N, 2)
    """
    dev = scaled_to_temperature(params.device, params.temperature[:, None])
    s = layout.sign
    v_be = s * (x[:, layout.q_b] - x[:, layout.q_e])
    v_bc = s * (x[:, layout.q_b] - x[:, layout.q_c])
    v_ce = v_be - v_bc
    on_be = dev["vbe_on"] - CONDUCTION_MARGIN
    on_bc = dev["vbc_on"] - CONDUCTION_MARGIN
    sat = dev["vce_sat"]
    be, bc = v_be >= on_be, v_bc >= on_bc
    regions = np.where(~be & ~bc, 0, np.where(v_ce >= sat, 1, np.where(v_ce <= -sat, 3, 2)))
    npn = s > 0
    names = np.empty(regions.shape + (2,), dtype=object)
    values = np.empty(regions.shape + (2,))
    limits = np.empty(regions.shape + (2,))
    sign_of = np.empty(regions.shape + (2,))     # +1: value >= limit wanted; -1: value < limit
    cases = {
        0: (("V_BE < V_BE(on) - 0.2 V", "V_EB < V_EB(on) - 0.2 V", v_be, on_be, -1),
            ("V_BC < V_BC(on) - 0.2 V", "V_CB < V_CB(on) - 0.2 V", v_bc, on_bc, -1)),
        1: (("V_BE >= V_BE(on) - 0.2 V", "V_EB >= V_EB(on) - 0.2 V", v_be, on_be, 1),
            ("V_CE >= V_CE(sat)", "V_EC >= V_EC(sat)", v_ce, sat, 1)),
        2: (("V_CE < V_CE(sat)", "V_EC < V_EC(sat)", v_ce, sat, -1),
            ("V_CE > -V_CE(sat)", "V_EC > -V_EC(sat)", v_ce, -sat, 1)),
        3: (("V_BC >= V_BC(on) - 0.2 V", "V_CB >= V_CB(on) - 0.2 V", v_bc, on_bc, 1),
            ("V_CE <= -V_CE(sat)", "V_EC <= -V_EC(sat)", v_ce, -sat, -1)),
    }
    for code, pair in cases.items():
        here = regions == code
        for k, (n_npn, n_pnp, value, limit, direction) in enumerate(pair):
            names[..., k] = np.where(here, np.where(npn, n_npn, n_pnp), names[..., k])
            values[..., k] = np.where(here, value, values[..., k])
            limits[..., k] = np.where(here, limit, limits[..., k])
            sign_of[..., k] = np.where(here, direction, sign_of[..., k])
    margins = np.where(sign_of > 0, values - limits, limits - values)
    return regions, (names, values, limits, margins)


#: Volts below the constant-drop on-voltage at which a junction counts as conducting.
CONDUCTION_MARGIN = 0.2

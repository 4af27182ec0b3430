"""Where the chain first clips: the smallest source-EMF excursion, each sign, at which a transistor
leaves forward-active, the coupling and bypass capacitors held at their Q-point voltages.

**Constant-drop model: exact, from one incremental solve.** With each forward-active transistor's
hybrid-π r_π and r_o about the Q-point added to the constant-drop equations (the augmentation
:func:`ampplan.analyses.sweep.with_hybrid_pi` writes out as circuit elements), the chain on its
all-forward-active branch is linear in the EMF, and its increments are exactly the midband
incremental solve driven by the source (capacitors held = shorts for increments). Every
forward-active check (I_B > 0, V_CE above the edge) is then a straight line in the EMF
excursion δ: margin(δ) = margin(0) + δ·slope. The first check to reach zero in each direction
gives the clipping amplitude, which transistor leaves and the region it enters (cutoff when its
I_B reaches zero, saturation when its V_CE reaches the edge). This is what the bisected sweep of
:mod:`.sweep` converges to; the tests keep that sweep as the oracle.

**Ebers–Moll model: Newton to each edge, a bracketed search behind it.** The first edge in each
direction is found by Newton's method on the held circuit bordered by the forward-active check
that leaves (:mod:`.clipping_newton`, :mod:`ampplan.solver.edges`): the check is chosen from the
drive solve's first-order edges and every other check is verified at the answer; the excursion
is exact to Newton's tolerance, a part in 10^9 or better, all samples and both directions in
one batched bordered Newton. What that cannot settle (a margin that does not move
monotonically, no check left to pin) is searched on the held circuit as before: a coarse
logarithmic grid of excursions (one batched solve) brackets the first excursion at which a
transistor is out of forward-active; each bracket is then narrowed to a part in 10^9 of the
excursion by regula falsi (Illinois variant) on the margins of the leaving transistor's
forward-active checks, each step confirmed by a solve just below and just above its estimate,
with bisection where the margins say nothing useful. The margins come from the quantities the
checks test (V_BE, V_CE, V_BC, I_C, I_B, identified at the Q-point), so they are known on both
sides of the edge. The samples searched and both directions go through one batched solve per
step, every point Newton-started from its own constant-drop answer (the points of a step lie
too far apart for one to start the others).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..circuit import Capacitor, Circuit, UnionFind, VoltageSource
from .clipping_newton import newton_edges

__all__ = ["ClipArrays", "clipping_batch", "COARSE_STEPS", "RELATIVE_TOLERANCE"]

#: Ebers–Moll coarse grid: steps per direction.
COARSE_STEPS = 12
#: The coarse grid's steps about the load-line estimate, in units of it.
NEAR_ESTIMATE = np.array([0.7, 0.85, 0.95, 1.0, 1.05, 1.15, 1.4, 2.0])
#: The Ebers–Moll clipping amplitude is exact to this fraction of the excursion (the grid
#: search narrows its bracket to it; Newton's answer is tighter).
RELATIVE_TOLERANCE = 1e-9
#: Secant and bisection steps at most (each halves the bracket at worst: 2^-60 is far below 1e-9).
MAX_STEPS = 60
#: Largest excursion searched, in units of the span (the largest rail magnitude).
REACH = 10.0


@dataclass
class ClipArrays:
    """Clipping of S samples: amplitudes (volts, ``inf`` when nothing clips within ``REACH``·span,
    NaN when undetermined) and, per direction, the stage and the region entered (object arrays of
    str or None)."""
    positive: np.ndarray
    negative: np.ndarray
    positive_stage: np.ndarray
    negative_stage: np.ndarray
    positive_region: np.ndarray
    negative_region: np.ndarray

    def amplitude(self):
        """The smaller of the two directions and the stage that limits it (arrays of shape (S,))."""
        with np.errstate(invalid="ignore"):
            positive_first = self.positive <= self.negative
        return (np.where(positive_first, self.positive, self.negative),
                np.where(positive_first, self.positive_stage, self.negative_stage))


def clipping_batch(compiled, op, params, drive, system, regions, ib, vce, edges, stage_of, span, active_edge,
                   batch, estimate) -> ClipArrays:
    """Clipping of every sample of a plan's operating point.

    Parameters
    ----------
    compiled : CompiledPlan
    op : OperatingPoint
    params : Parameters
        The values ``op`` was solved with (S samples).
    drive : ndarray, shape (S, size)
        The midband incremental solve driven by 1 V of source EMF (unknowns of ``system``).
    system : IncrementalSystem
    regions : ndarray of str, shape (S, N)
    ib, vce : ndarray, shape (S, N)
        Q-point I_B (textbook sign) and V_CE (signed), per transistor in layout order.
    edges : ndarray, shape (S, N)
        V_CE (transistor frame) where forward-active ends.
    stage_of : list of str or None
        Stage id of each transistor.
    span : ndarray, shape (S,)
        Largest rail magnitude, volts; nothing beyond ``REACH``·span is searched.
    active_edge : str
    batch : dict or None
        The circuit batch ``op`` was solved with.
    estimate : ndarray, shape (S,)
        The load-line estimate of the clipping amplitude (guides the Ebers–Moll search).
    """
    s_count, n_q = regions.shape
    stages = np.array(list(stage_of) + [None], dtype=object)
    out = ClipArrays(np.full(s_count, np.nan), np.full(s_count, np.nan), *(np.full(s_count, None, dtype=object)
                                                                           for _ in range(4)))
    solved = ~np.any(regions == "unsolved", axis=1) & (np.asarray(op.status) == "ok")
    solved = np.broadcast_to(solved, (s_count,))
    not_active = regions != "forward-active"
    out_now = solved & np.any(not_active, axis=1)
    if np.any(out_now):
        who = np.argmax(not_active[out_now], axis=1)
        for name in ("positive", "negative"):
            getattr(out, name)[out_now] = 0.0
            getattr(out, f"{name}_stage")[out_now] = stages[who]
            getattr(out, f"{name}_region")[out_now] = regions[out_now, who]
    todo = np.flatnonzero(solved & ~out_now)
    if todo.size == 0 or n_q == 0:
        return out
    if op.model == "constant-drop":
        _exact(out, todo, drive, system, ib, vce, edges, stages, span)
    else:
        _newton(out, todo, compiled, op, params, drive, system, stages, span, active_edge, batch, estimate)
    return out


def _newton(out, todo, compiled, op, params, drive, system, stages, span, active_edge, batch, estimate):
    """Ebers–Moll: Newton to each edge (:mod:`.clipping_newton`); the grid search for the rest."""
    cached = compiled.cache.get("held")
    if cached is None:
        cached = compiled.cache["held"] = held_circuit(compiled.circuit)
    amount, who, check, found = newton_edges(compiled, cached[0], op, params, drive, system, todo, span, REACH)
    entered = np.array(["cutoff", "saturation"], dtype=object)
    for side, name in enumerate(("positive", "negative")):
        hit = found[:, side] & np.isfinite(amount[:, side])
        getattr(out, name)[todo] = amount[:, side]
        getattr(out, f"{name}_stage")[todo] = np.where(hit, stages[np.maximum(who[:, side], 0)], None)
        getattr(out, f"{name}_region")[todo] = np.where(hit, entered[np.maximum(check[:, side], 0)], None)
    rest = todo[~found.all(axis=1)]
    if rest.size:
        _searched(out, rest, compiled, op, params, stages, span, active_edge, batch, estimate)


def _exact(out, todo, drive, system, ib, vce, edges, stages, span):
    """Constant-drop: each check's margin over its slope (see the module docstring)."""
    layout = system.layout
    sign = layout.sign
    n = system.size

    def pick(columns):
        """Columns of the drive for the samples ``todo``; ground (index ``n``) reads 0."""
        columns = np.asarray(columns, dtype=np.intp)
        out = drive.take(np.minimum(columns, n - 1), axis=1)[todo]
        out[:, columns == n] = 0.0
        return out

    at = lambda names: [system.index[name] for name in names]  # noqa: E731
    d_ib = pick(system.q_ib)
    d_vce = sign * (pick(at(q.collector for q in layout.bjts)) - pick(at(q.emitter for q in layout.bjts)))
    margins = np.stack([ib[todo], sign * vce[todo] - edges[todo]], axis=-1)           # (K, N, 2)
    slopes = np.stack([d_ib, d_vce], axis=-1)
    singular = ~np.all(np.isfinite(slopes), axis=(1, 2))
    reach = REACH * span[todo]
    regions_entered = np.array(["cutoff", "saturation", None], dtype=object)
    for name, direction in (("positive", 1.0), ("negative", -1.0)):
        slope = direction * slopes
        with np.errstate(all="ignore"):
            step = np.where(slope < 0, np.maximum(margins, 0.0) / np.where(slope < 0, -slope, 1.0), np.inf)
        flat = step.reshape(todo.size, -1)
        first = np.argmin(flat, axis=1)
        amount = flat[np.arange(todo.size), first]
        clips = np.isfinite(amount) & (amount <= reach)
        who, check = np.divmod(first, 2)
        getattr(out, name)[todo] = np.where(singular, np.nan, np.where(clips, amount, np.inf))
        getattr(out, f"{name}_stage")[todo] = np.where(clips & ~singular, stages[who], None)
        getattr(out, f"{name}_region")[todo] = np.where(clips & ~singular, regions_entered[check], None)


def held_circuit(circuit: Circuit) -> tuple[Circuit, list]:
    """``circuit`` with every capacitor replaced by a voltage source of the same name (its value is
    set per sample through the batch), and the names of those sources. A capacitor whose nodes
    voltage sources already tie together is left out: it would close a loop and holds nothing new."""
    held = Circuit()
    ties = UnionFind()
    for e in circuit.elements:
        if isinstance(e, VoltageSource):
            ties.union(e.plus, e.minus)
    names = []
    for e in circuit.elements:
        if isinstance(e, Capacitor):
            if ties.union(e.a, e.b):
                held.voltage_source(e.name, e.a, e.b, 0.0)
                names.append(e.name)
        else:
            held.add(e)
    return held, names


def _searched(out, todo, compiled, op, params, stages, span, active_edge, batch, estimate):
    """Ebers–Moll, what Newton leaves: coarse grid, then safeguarded secant steps on the held circuit
    (module docstring)."""
    cached = compiled.cache.get("held")
    if cached is None:
        cached = compiled.cache["held"] = held_circuit(compiled.circuit)
    held, caps = cached
    circuit = compiled.circuit
    source = compiled.source
    names = list(op.transistors)
    n_q = len(names)
    v = lambda name: np.broadcast_to(np.asarray(op.v[name], dtype=float), (params.size,))  # noqa: E731
    cap_volts = {c: v(circuit.element(c).a) - v(circuit.element(c).b) for c in caps}
    capacitors = {e.name for e in circuit.of_kind(Capacitor)}
    base_batch = {k: np.broadcast_to(np.asarray(a, dtype=float), (params.size,)) for k, a in (batch or {}).items()
                  if k not in capacitors}
    emf = base_batch.get(source, np.broadcast_to(float(circuit.element(source).voltage), (params.size,)))

    sign = np.array([circuit.element(n).device.sign for n in names], dtype=float)

    def quantities(res, size):
        """Per transistor the quantities a region check may test: frame V_BE, V_CE, V_BC, I_C, I_B."""
        t = [res.transistors[n] for n in names]
        q = lambda attr: np.stack([np.broadcast_to(np.asarray(getattr(x, attr), dtype=float), (size,))  # noqa: E731
                                   for x in t], axis=1)
        vbe, vce = sign * q("vbe"), sign * q("vce")
        return np.stack([vbe, vce, vbe - vce, q("ic"), q("ib")], axis=-1)          # (K, N, 5)

    # Which quantity each forward-active check tests, and its limit and direction, read off the
    # Q-point (forward-active): the check's value is one of the quantities above.
    q0 = quantities(op, params.size)
    values = np.stack([np.stack([np.broadcast_to(np.asarray(c.value, dtype=float), (params.size,))
                                 for c in op.transistors[n].checks], axis=-1) for n in names], axis=1)
    limits = np.stack([np.stack([np.broadcast_to(np.asarray(c.limit, dtype=float), (params.size,))
                                 for c in op.transistors[n].checks], axis=-1) for n in names], axis=1)
    q_margins = np.stack([np.stack([np.broadcast_to(np.asarray(c.margin, dtype=float), (params.size,))
                                    for c in op.transistors[n].checks], axis=-1) for n in names], axis=1)
    match = np.abs(q0[:, :, None, :] - values[..., None]) <= 1e-12 * np.maximum(1.0, np.abs(values[..., None]))
    quantity = np.where(match.any(axis=-1), np.argmax(match, axis=-1), -1)             # (S, N, 2)
    direction_of = np.where(np.isclose(q_margins, values - limits, rtol=1e-9, atol=1e-15), 1.0, -1.0)

    def margins_at(samples, q):
        """Margins of the forward-active checks at solutions ``q`` (NaN where a check's quantity is unknown)."""
        which = quantity[samples]
        picked = np.take_along_axis(q, np.maximum(which, 0), axis=2)
        return np.where(which >= 0, direction_of[samples] * (picked - limits[samples]), np.nan)

    def evaluate(samples, steps, warm_start=True):
        """Solve the held circuit for (sample, excursion) pairs: all forward-active?, the margins
        of the forward-active checks (K, N, 2), the first transistor out (or -1) and its region."""
        keys = {k: a[samples] for k, a in base_batch.items()}
        keys.update({c: cap_volts[c][samples] for c in caps})
        keys[source] = emf[samples] + steps
        res = held.solve(model=op.model, temperature=compiled.temperature, active_edge=active_edge, batch=keys,
                         warm_start=warm_start)
        region = np.stack([np.asarray(res.transistors[n].region) for n in names], axis=1)
        failed = np.asarray(res.status) != "ok"
        leaving = (region != "forward-active") | failed[:, None]
        first = np.where(leaving.any(axis=1), np.argmax(leaving, axis=1), -1)
        entered = region[np.arange(len(samples)), np.maximum(first, 0)]
        return ~leaving.any(axis=1), margins_at(samples, quantities(res, len(samples))), first, entered

    k = todo.size
    # Brackets: one per (sample, direction), directions interleaved.
    sample = np.repeat(todo, 2)
    direction = np.tile([1.0, -1.0], k)
    reach = REACH * span[sample]
    # The coarse grid: where the load lines put the edge (their estimate is exact to first order),
    # with a few logarithmic steps below it in case something leaves earlier; a second grid out to
    # REACH·span where nothing has left by twice the estimate.
    guide = estimate[sample]
    guided = np.isfinite(guide) & (guide > 0) & (2.0 * guide < reach)
    below = np.geomspace(1e-6, 0.5, COARSE_STEPS - len(NEAR_ESTIMATE))
    steps = np.where(guided[:, None], guide[:, None] * np.concatenate([below, NEAR_ESTIMATE])[None, :],
                     reach[:, None] * np.geomspace(1e-7, 1.0, COARSE_STEPS)[None, :])
    fa, margins, first, entered = evaluate(np.repeat(sample, COARSE_STEPS), (direction[:, None] * steps).ravel(),
                                           warm_start=False)
    fa = fa.reshape(-1, COARSE_STEPS)
    margins = margins.reshape(-1, COARSE_STEPS, n_q, 2)
    first, entered = first.reshape(-1, COARSE_STEPS), entered.reshape(-1, COARSE_STEPS)
    further = np.flatnonzero(fa.all(axis=1) & guided)
    if further.size:
        # From twice the estimate (the last guided step, forward-active) out to REACH·span.
        more = np.geomspace(steps[further, -1], reach[further], COARSE_STEPS, axis=1)
        g = COARSE_STEPS - 1
        fa_m, m_m, first_m, entered_m = evaluate(np.repeat(sample[further], g), (direction[further, None] * more[:, 1:]).ravel())
        steps[further] = more
        fa[further, 1:] = fa_m.reshape(-1, g)
        margins[further] = np.concatenate([margins[further, -1:], m_m.reshape(-1, g, n_q, 2)], axis=1)
        first[further, 1:] = first_m.reshape(-1, g)
        entered[further, 1:] = entered_m.reshape(-1, g)
    hit = ~fa
    has = hit.any(axis=1)
    h = np.argmax(hit, axis=1)
    rows = np.arange(sample.size)
    low = np.where(h > 0, steps[rows, np.maximum(h - 1, 0)], 0.0)
    high = steps[rows, h]
    m_low = np.where((h > 0)[:, None, None], margins[rows, np.maximum(h - 1, 0)], q_margins[sample])
    m_high = margins[rows, h]
    who, region = first[rows, h], entered[rows, h]
    kept = np.zeros(sample.size, dtype=int)      # +1: the low end kept last step, -1: the high end
    open_ = np.flatnonzero(has)
    tau = 0.25 * RELATIVE_TOLERANCE
    f_low = np.full(sample.size, np.nan)
    f_high = np.full(sample.size, np.nan)

    def leaver_margin(m, rows_):
        """The smaller forward-active margin of the transistor that leaves, per bracket."""
        return np.min(m[np.arange(len(rows_)), np.maximum(who[rows_], 0)], axis=-1)

    f_low[open_] = leaver_margin(m_low[open_], open_)
    f_high[open_] = leaver_margin(m_high[open_], open_)
    for _ in range(MAX_STEPS):
        open_ = open_[(high[open_] - low[open_]) > RELATIVE_TOLERANCE * high[open_]]
        if open_.size == 0:
            break
        a, b = low[open_], high[open_]
        fa_, fb_ = f_low[open_], f_high[open_]
        # Regula falsi with the Illinois halving of an end kept twice (Dowell & Jarratt 1971, from
        # memory); bisection where the margins say nothing useful.
        with np.errstate(all="ignore"):
            fa_ = fa_ * 0.5 ** np.maximum(kept[open_] - 1, 0)
            fb_ = fb_ * 0.5 ** np.maximum(-kept[open_] - 1, 0)
            guess = a + fa_ * (b - a) / (fa_ - fb_)
        useful = np.isfinite(guess) & (fa_ >= 0) & (fb_ < 0) & (guess > a) & (guess < b)
        guess = np.where(useful, guess, 0.5 * (a + b))
        lo = np.maximum(guess * (1.0 - tau), a + 0.25 * (guess - a))
        hi = np.minimum(guess * (1.0 + tau), b - 0.25 * (b - guess))
        pair_steps = np.stack([lo, hi], axis=1) * direction[open_][:, None]
        fa2, m2, first2, entered2 = evaluate(np.repeat(sample[open_], 2), pair_steps.ravel(), warm_start=False)
        fa2, m2 = fa2.reshape(-1, 2), m2.reshape(-1, 2, n_q, 2)
        first2, entered2 = first2.reshape(-1, 2), entered2.reshape(-1, 2)
        both_in = fa2[:, 0] & fa2[:, 1]
        split = fa2[:, 0] & ~fa2[:, 1]
        both_out = ~fa2[:, 0]
        i = open_[both_in]
        low[i], m_low[i] = hi[both_in], m2[both_in, 1]
        kept[i] = np.where(kept[i] < 0, kept[i] - 1, -1)
        i = open_[split]
        low[i], m_low[i] = lo[split], m2[split, 0]
        high[i], m_high[i], who[i], region[i] = hi[split], m2[split, 1], first2[split, 1], entered2[split, 1]
        i = open_[both_out]
        high[i], m_high[i], who[i], region[i] = lo[both_out], m2[both_out, 0], first2[both_out, 0], entered2[both_out, 0]
        kept[i] = np.where(kept[i] > 0, kept[i] + 1, 1)
        f_low[open_] = leaver_margin(m_low[open_], open_)
        f_high[open_] = leaver_margin(m_high[open_], open_)
    amount = np.where(has, 0.5 * (low + high), np.inf)
    stage = np.where(has, stages[np.where(who >= 0, who, n_q)], None)
    region = np.where(has, region, None).astype(object)
    for name, part in (("positive", slice(0, None, 2)), ("negative", slice(1, None, 2))):
        getattr(out, name)[todo] = amount[part]
        getattr(out, f"{name}_stage")[todo] = stage[part]
        getattr(out, f"{name}_region")[todo] = region[part]


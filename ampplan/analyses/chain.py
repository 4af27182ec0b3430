"""The analyses of a plan, all on the one circuit it compiles to, for one operating point or a batch.

Definitions (issue contract):

* a stage's **gain** is v(output)/v(input) at midband with everything before and after it in place;
* its **input resistance** is what the source or the previous stage sees looking into its input
  node, bias network included (everything upstream of the port is cut away and 1 A injected);
* its **output resistance** is what the next stage or the load sees looking back into its output
  node with the source EMF zeroed and everything before it in place (everything downstream cut);
* its **swing** is read off its own AC load line, the rest of the circuit as its linear load;
* the chain's **max_source_amplitude** is where the first transistor leaves forward-active as the
  source EMF moves away from its Q-point, the coupling and bypass capacitors held at their Q-point
  voltages (:mod:`.clipping`).

The small-signal figures of a stage whose transistor is not forward-active are not applicable
(NaN): a saturated or cut-off stage amplifies nothing, whatever its linearisation says.

Everything is computed for S samples at once (S = 1 for a single solve): one batched solve of
all incremental systems (:class:`.incremental.IncrementalSystem`), array arithmetic for the rest.
Everything the analyses need from the plan comes from its :class:`~ampplan.plan.CompiledPlan`.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from ..devices import scaled_to_temperature
from ..solver.assembly import layout_of
from .clipping import clipping_batch
from .dissipation import (SAFETY_EXTRA_LOW_VOLTAGE_DC, BatchCautions, resistor_cautions, supply_cautions,
                          transistor_cautions, transistor_flags)
from .incremental import IncrementalSystem, Variant, transistor_models
from .results import Clipping, LoadLine, LoadLines, PlanResult, StageResult, Swing

__all__ = ["analyse_plan", "analyse_compiled", "incremental_system"]


def analyse_plan(plan, model: str = "constant-drop", active_edge: str = "vce-sat", batch: dict | None = None,
                 dc_load_lines: bool = True) -> PlanResult:
    """Compile, solve once (one batched solve for ``batch``), and analyse a plan.

    Parameters
    ----------
    plan : ampplan.Plan
    model, active_edge : str
        As for :func:`ampplan.solver.solve`.
    batch : dict of str -> array_like of shape (S,), optional
        Plan addresses (``"s1.rc"``, ``"s2.device.beta"``, ``"supply"``, ``"temperature"``) to
        their values per sample; see :meth:`ampplan.plan.CompiledPlan.batch_keys`.
    dc_load_lines : bool
        As for :func:`analyse_compiled`.
    """
    compiled = plan.compile()
    circuit_batch, plan_values = compiled.batch_keys(batch) if batch is not None else (None, {})
    op = compiled.circuit.solve(model=model, temperature=compiled.temperature, active_edge=active_edge,
                                batch=circuit_batch)
    return analyse_compiled(compiled, op, active_edge, batch=circuit_batch, plan_values=plan_values,
                            dc_load_lines=dc_load_lines)


def incremental_system(compiled, dc_load_lines: bool = True) -> IncrementalSystem:
    """The incremental solves of a compiled plan: the source drive, then per stage its
    input-resistance cut, output-resistance cut, AC load-line port and (with ``dc_load_lines``)
    DC load-line port; :func:`variant_of` numbers them.

    They depend on the circuit's topology only, so they are kept (a few at a time) for every
    compiled plan of the same topology: a slider that moves a value re-solves without rebuilding them.
    """
    cached = compiled.cache.get(("incremental", dc_load_lines))
    if cached is None:
        owner = compiled.owner
        index = {q.name: j for j, q in enumerate(layout_of(compiled.circuit).bjts)}
        variants = [Variant(excite=compiled.source)]
        for k, nodes in enumerate(compiled.stages, start=1):
            upstream = {name: frozenset({nodes.input}) for name, tag in owner.items() if tag < k}
            downstream = {name: frozenset({nodes.output}) for name, tag in owner.items() if tag > k}
            variants += [Variant(inject=nodes.input, ground=upstream), Variant(inject=nodes.output, ground=downstream),
                         Variant(capacitors="short", port=index[nodes.transistor])]
            if dc_load_lines:
                variants.append(Variant(capacitors="open", port=index[nodes.transistor]))
        key = (_topology(compiled.circuit), tuple((v.capacitors, v.excite, v.inject, tuple(sorted(
            (k, tuple(sorted(n))) for k, n in v.ground.items())), v.port) for v in variants))
        cached = _SYSTEMS.get(key)
        if cached is None:
            cached = IncrementalSystem(compiled.circuit, variants)
            _SYSTEMS[key] = cached
            while len(_SYSTEMS) > _SYSTEMS_KEPT:
                _SYSTEMS.pop(next(iter(_SYSTEMS)))
        compiled.cache[("incremental", dc_load_lines)] = cached
    return cached


def variant_of(k: int, dc_load_lines: bool = True) -> tuple:
    """Indices into :func:`incremental_system`'s variants for stage ``k`` (0-based): input cut,
    output cut, AC port and DC port (None without ``dc_load_lines``). The drive is variant 0."""
    per = 4 if dc_load_lines else 3
    first = 1 + per * k
    return first, first + 1, first + 2, (first + 3 if dc_load_lines else None)


#: Incremental systems by topology, oldest first; at most _SYSTEMS_KEPT are kept.
_SYSTEMS: dict = {}
_SYSTEMS_KEPT = 16


def _topology(circuit) -> tuple:
    """What an incremental system depends on: each element's kind, name, nodes and polarity."""
    out = []
    for e in circuit.elements:
        device = getattr(e, "device", None)
        nodes = tuple(getattr(e, f) for f in ("a", "b", "plus", "minus", "from_node", "to_node", "collector",
                                              "base", "emitter") if hasattr(e, f))
        out.append((type(e).__name__, e.name, nodes, device.sign if device is not None else 0))
    return tuple(out)


def _ratio(a, b):
    """a / b where b is finite and non-zero, NaN elsewhere (arrays)."""
    good = (b != 0) & np.isfinite(b)
    with np.errstate(all="ignore"):
        return np.where(good, a / np.where(good, b, 1.0), np.nan)


def forward_active_edges(model: str, active_edge: str, device: dict) -> np.ndarray:
    """V_CE (transistor frame) where forward-active ends, volts, shape (S, N).

    ``device`` holds the parameters at the solve temperature (:func:`ampplan.devices.scaled_to_temperature`).
    With ``active_edge="vcb-zero"`` (constant-drop) the edge is V_CB = 0, i.e. V_CE = V_BE(on);
    otherwise V_CE(sat).
    """
    if model == "constant-drop" and active_edge == "vcb-zero":
        return device["vbe_on"]
    return device["vce_sat"]


def forward_active_edge(device, model: str, active_edge: str, temperature: float) -> float:
    """V_CE (transistor frame) where forward-active ends for one transistor, volts.

    With ``active_edge="vcb-zero"`` (constant-drop) the edge is V_CB = 0, i.e. V_CE = V_BE(on) at
    ``temperature`` (degrees Celsius), moved by :func:`ampplan.devices.scaled_to_temperature`
    exactly as the solver moves it; otherwise V_CE(sat).
    """
    parameters = {k: np.array([[float(v)]]) for k, v in device.to_dict().items() if k != "polarity" and v is not None}
    parameters.setdefault("vbc_on", parameters["vbe_on"])  # None means "as vbe_on"
    return float(forward_active_edges(model, active_edge, scaled_to_temperature(parameters, temperature))[0, 0])


def analyse_compiled(compiled, op, active_edge: str = "vce-sat", batch: dict | None = None,
                     plan_values: dict | None = None, dc_load_lines: bool = True) -> PlanResult:
    """Analyses of a compiled plan at its operating point ``op`` (single or batched).

    Parameters
    ----------
    compiled : ampplan.plan.CompiledPlan
    op : OperatingPoint
        ``compiled.circuit`` solved (with ``batch`` for a batch).
    active_edge : str
    batch : dict, optional
        The circuit batch ``op`` was solved with (keys of :meth:`CompiledPlan.batch_keys`).
    plan_values : dict, optional
        Analysis values varied per sample (``"min_headroom"``, ``"resistor_power_rating"``).
    dc_load_lines : bool
        Solve the DC load lines' ports. False leaves them out (their slopes NaN): a caller that
        keeps only result addresses (:func:`ampplan.analyses.whatif.sweeps.solve_table`), none
        of which reads them, spares 3 of the 13 incremental solves of a 3-stage plan.

    Returns
    -------
    PlanResult
        Floats for a single solve; arrays of shape (S,) over the samples for a batch.
    """
    single = op.batch_size is None
    circuit = compiled.circuit
    layout = layout_of(circuit)
    # A batch's values as it was solved with them (the same as building them again from ``batch``).
    params = op.parameters if op.parameters is not None else layout.parameters(temperature=compiled.temperature,
                                                                               batch=batch)
    s_count = params.size
    plan_values = plan_values or {}
    headroom_asked = np.broadcast_to(plan_values.get("min_headroom", compiled.min_headroom), (s_count,))
    rating = np.broadcast_to(plan_values.get("resistor_power_rating", compiled.resistor_power_rating), (s_count,))

    names = [q.name for q in layout.bjts]
    q_at = {n: j for j, n in enumerate(names)}
    arr = lambda value: np.broadcast_to(np.asarray(value, dtype=float), (s_count,))  # noqa: E731
    regions = np.stack([np.broadcast_to(np.asarray(op.transistors[n].region), (s_count,)) for n in names], axis=1)
    ic = np.stack([arr(op.transistors[n].ic) for n in names], axis=1)
    ib = np.stack([arr(op.transistors[n].ib) for n in names], axis=1)
    vce = np.stack([arr(op.transistors[n].vce) for n in names], axis=1)
    sign = layout.sign
    dev = scaled_to_temperature(params.device, params.temperature[:, None])
    edges = forward_active_edges(op.model, active_edge, dev)
    active = regions == "forward-active"

    models = transistor_models(op, params)
    port_beta = np.where(np.isfinite(models.beta_ac) & (models.beta_ac > 0), models.beta_ac, params.device["beta"])
    system = incremental_system(compiled, dc_load_lines)
    # A single solve: (S, V, size); a batch computes and keeps only the entries read below.
    if single:
        x = system.solve(params.conductance, models, port_beta=port_beta, shared=False)
        unknown, drive_x = (lambda v, k: x[:, v, k]), x[:, 0]
    else:
        kept = system.solve_wanted(params.conductance, models, _read_unknowns(compiled, system, dc_load_lines),
                                   port_beta=port_beta)
        unknown, drive_x = (lambda v, k: kept[v, k]), kept.variant(0)
    index = system.index
    node = lambda v, name: unknown(v, index[name]) if name in index and index[name] < system.size \
        else np.zeros(s_count)  # noqa: E731  (ground)
    drive = 0

    resistor_at = _resistor_index(layout)
    stage_figures = []
    for k, nodes in enumerate(compiled.stages):
        j = q_at[nodes.transistor]
        s = sign[j]
        v_in, v_out, v_ac, v_dc = variant_of(k, dc_load_lines)
        fa = active[:, j]
        not_applicable = lambda a: np.where(fa, a, np.nan)  # noqa: E731
        gain = not_applicable(_ratio(node(drive, nodes.output), node(drive, nodes.input)))
        r_in = not_applicable(node(v_in, nodes.input))
        r_out = not_applicable(node(v_out, nodes.output))
        q = circuit.element(nodes.transistor)
        dvce_ac = s * (node(v_ac, q.collector) - node(v_ac, q.emitter))
        dvce_dc = (s * (node(v_dc, q.collector) - node(v_dc, q.emitter)) if v_dc is not None
                   else np.full(s_count, np.nan))
        q_vce, q_ic = s * vce[:, j], ic[:, j]
        edge = edges[:, j]
        # A saturated constant-drop transistor sits exactly on the edge; keep rounding out of the margin
        # (and a failed sample's NaN in it).
        margin = np.where(np.abs(q_vce - edge) <= 1e-12 * np.maximum(1.0, np.abs(q_vce)), 0.0, q_vce - edge)
        r_ac = -dvce_ac
        to_output = np.abs(_ratio(node(v_ac, nodes.output), dvce_ac))
        with np.errstate(invalid="ignore"):
            toward_saturation = np.where(fa, np.maximum(q_vce - edge, 0.0) * to_output, 0.0)
            toward_cutoff = np.where(fa, np.maximum(q_ic, 0.0) * r_ac * to_output, 0.0)
        failed = ~np.isfinite(q_ic)
        toward_saturation[failed], toward_cutoff[failed] = np.nan, np.nan
        resistor_power = {}
        prefix = f"{compiled.stage_ids[k]}_"
        for name in nodes.elements:
            r = resistor_at.get(name)
            if r is not None:
                resistor_power[name[len(prefix):] if name.startswith(prefix) else name] = (
                    arr(op.i[name]) ** 2 / params.conductance[:, r])
        stage_figures.append(dict(
            j=j, gain=gain, r_in=r_in, r_out=r_out, dc=-dvce_dc, ac=r_ac, q_vce=q_vce, q_ic=q_ic, edge=edge,
            margin=margin, swing=(toward_saturation, toward_cutoff), resistor_power=resistor_power,
            drive_out=node(drive, nodes.output), fa=fa))

    # Load-line estimate of the largest source amplitude: min over stages of swing / |v(out)/EMF|.
    estimate = np.full(s_count, np.inf)
    for f in stage_figures:
        from_source = np.abs(f["drive_out"])
        peak = np.minimum(*f["swing"])
        with np.errstate(all="ignore"):
            estimate = np.where(from_source > 0, np.minimum(estimate, peak / np.where(from_source > 0, from_source, 1.0)),
                                estimate)
    all_active = np.all(active, axis=1)
    estimate = np.where(all_active, estimate, 0.0)      # a stage already out passes nothing unclipped

    stage_of = [compiled.transistor_stage.get(n) for n in names]
    source_at = {e.name: k for k, e in enumerate(layout.voltage_sources)}
    supply_v = params.voltage[:, [source_at[n] for n in compiled.supplies]]
    span = np.max(np.abs(supply_v), axis=1)
    clip = clipping_batch(compiled, op, params, drive_x, system, regions, ib, vce, edges, stage_of, span,
                          active_edge, batch, estimate)

    supply_current = arr(op.i[compiled.supplies[0]])
    supply_power = sum(supply_v[:, k] * arr(op.i[n]) for k, n in enumerate(compiled.supplies))
    plan_resistor_power = {n: arr(op.i[n]) ** 2 / params.conductance[:, resistor_at[n]]
                           for n in compiled.plan_resistors}
    chain_gain = np.where(all_active, node(drive, compiled.load_node), np.nan)
    status = np.broadcast_to(np.asarray(op.status), (s_count,))

    if single:
        return _single_result(compiled, op, stage_figures, clip, estimate, chain_gain, supply_current,
                              supply_power, plan_resistor_power, dev, edges)
    return _batch_result(compiled, op, stage_figures, clip, estimate, chain_gain, supply_current, supply_power,
                         plan_resistor_power, status, dev, edges, params, headroom_asked, rating, supply_v)


def _read_unknowns(compiled, system, dc_load_lines: bool) -> list:
    """The (variant, unknown) pairs of the incremental solves that :func:`analyse_compiled` reads:
    all of the drive (the gains read a few nodes of it, and the clipping of either model reads
    what it needs of every transistor); per stage, its input node (input cut), its output node
    (output cut), its transistor's collector and emitter and its output (AC port) and its
    collector and emitter (DC port)."""
    index, size = system.index, system.size
    out = [(0, k) for k in range(size)]

    def add(variant, nodes):
        out.extend((variant, index[name]) for name in nodes if name in index and index[name] < size)

    for k, nodes in enumerate(compiled.stages):
        v_in, v_out, v_ac, v_dc = variant_of(k, dc_load_lines)
        q = compiled.circuit.element(nodes.transistor)
        add(v_in, [nodes.input])
        add(v_out, [nodes.output])
        add(v_ac, [q.collector, q.emitter, nodes.output])
        if v_dc is not None:
            add(v_dc, [q.collector, q.emitter])
    return out


def _resistor_index(layout) -> dict:
    return {r.name: k for k, r in enumerate(layout.resistors)}


def _single_result(compiled, op, stage_figures, clip, estimate, chain_gain, supply_current, supply_power,
                   plan_resistor_power, dev, edges) -> PlanResult:
    """The PlanResult of a single solve: floats, the cautions in words."""
    circuit = compiled.circuit
    first = lambda a: float(a[0])  # noqa: E731
    stages, cautions = [], []
    names = list(op.transistors)
    for k, (nodes, f) in enumerate(zip(compiled.stages, stage_figures)):
        sid = compiled.stage_ids[k]
        t = op.transistors[nodes.transistor]
        device = circuit.element(nodes.transistor).device
        edge = first(f["edge"])
        power = {n: first(p) for n, p in f["resistor_power"].items()}
        stage_cautions = transistor_cautions(sid, t, device, edge, compiled.min_headroom, op.temperature)
        stage_cautions += resistor_cautions({f"{sid}.{n}": p for n, p in power.items()},
                                            compiled.resistor_power_rating)
        # A custom stage's other transistors get the region and rating checks; the headroom asked
        # for is the reported transistor's (a diode-connected one, say, never has it).
        for other in nodes.elements:
            if other in op.transistors and other != nodes.transistor:
                stage_cautions += transistor_cautions(
                    sid, op.transistors[other], circuit.element(other).device,
                    float(edges[0, names.index(other)]), None, op.temperature, name=other)
        cautions += stage_cautions
        q_vce, q_ic = first(f["q_vce"]), first(f["q_ic"])
        stages.append(StageResult(
            id=sid, kind=compiled.kinds[k], transistor=t, gain=first(f["gain"]),
            input_resistance=first(f["r_in"]), output_resistance=first(f["r_out"]),
            swing=Swing(first(f["swing"][0]), first(f["swing"][1])),
            load_lines=LoadLines(dc=LoadLine(first(f["dc"]), q_vce, q_ic), ac=LoadLine(first(f["ac"]), q_vce, q_ic)),
            saturation_margin=first(f["margin"]), cutoff_margin=q_ic, dissipation=t.power, resistor_power=power,
            input_node=nodes.input, output_node=nodes.output, cautions=tuple(stage_cautions)))
    plan_power = {n: first(p) for n, p in plan_resistor_power.items()}
    cautions += resistor_cautions(plan_power, compiled.resistor_power_rating)
    cautions += supply_cautions(compiled.supply, compiled.negative_supply)
    clipping = Clipping(first(clip.positive), first(clip.negative), clip.positive_stage[0], clip.negative_stage[0],
                        clip.positive_region[0], clip.negative_region[0])
    amplitude, limiting = clip.amplitude()
    return PlanResult(
        model=op.model, stages=tuple(stages), gain=first(chain_gain),
        input_resistance=stages[0].input_resistance, output_resistance=stages[-1].output_resistance,
        max_source_amplitude=first(amplitude), limiting_stage=limiting[0], clipping=clipping,
        max_source_amplitude_estimate=first(estimate), supply_current=first(supply_current),
        supply_power=first(supply_power), cautions=tuple(cautions), operating_point=op,
        temperature=op.temperature, resistor_power=plan_power)


def _sample_transistor(t, i: int):
    """Sample ``i`` of a batched TransistorResult, as a single solve reports it."""
    pick = lambda a: a[i].item() if isinstance(a, np.ndarray) else a  # noqa: E731
    checks = tuple(dataclasses.replace(c, **{f.name: pick(getattr(c, f.name)) for f in dataclasses.fields(c)})
                   for c in t.checks)
    values = {f.name: pick(getattr(t, f.name)) for f in dataclasses.fields(t) if f.name != "checks"}
    return dataclasses.replace(t, checks=checks, **values)


def _sample_device(device, params, j: int, i: int):
    """Transistor ``j``'s parameters in sample ``i`` (the ratings and beta the cautions read)."""
    values = {}
    for name in ("beta", "max_power", "max_collector_current", "max_vce"):
        v = float(params.device[name][i, j])
        values[name] = None if math.isnan(v) else v
    return device.replace(**values)


def _batch_result(compiled, op, stage_figures, clip, estimate, chain_gain, supply_current, supply_power,
                  plan_resistor_power, status, dev, edges, params, headroom_asked, rating, supply_v) -> PlanResult:
    """The PlanResult of a batch: every figure an array of shape (S,), cautions as flags per sample."""
    circuit = compiled.circuit
    layout = layout_of(circuit)
    names = [q.name for q in layout.bjts]
    q_at = {n: j for j, n in enumerate(names)}
    s_count = params.size
    temperature = params.temperature
    stages, flags, renders = [], {}, []

    def transistor_flag_set(key, name, headroom):
        t, j = op.transistors[name], q_at[name]
        sign = layout.sign[j]
        ratings = {r: params.device[r][:, j] for r in ("max_power", "max_collector_current", "max_vce")}
        return transistor_flags(key, np.asarray(t.region), sign * np.asarray(t.vce), edges[:, j], headroom,
                                np.asarray(t.power), np.asarray(t.ic), np.asarray(t.vce), ratings, temperature)

    for k, (nodes, f) in enumerate(zip(compiled.stages, stage_figures)):
        sid = compiled.stage_ids[k]
        t = op.transistors[nodes.transistor]
        stage_flags = transistor_flag_set(sid, nodes.transistor, headroom_asked)
        with np.errstate(invalid="ignore"):
            stage_flags.update({f"{sid}.{n}.power": p > rating for n, p in f["resistor_power"].items()})
        others = [o for o in nodes.elements if o in op.transistors and o != nodes.transistor]
        for other in others:
            stage_flags.update(transistor_flag_set(f"{sid}.{other}", other, None))

        def render(i, k=k, nodes=nodes, f=f, sid=sid, others=others):
            if status[i] != "ok":
                return ()
            device = _sample_device(circuit.element(nodes.transistor).device, params, q_at[nodes.transistor], i)
            out = transistor_cautions(sid, _sample_transistor(op.transistors[nodes.transistor], i), device,
                                      float(f["edge"][i]), float(headroom_asked[i]), float(temperature[i]))
            out += resistor_cautions({f"{sid}.{n}": float(p[i]) for n, p in f["resistor_power"].items()},
                                     float(rating[i]))
            for other in others:
                j = q_at[other]
                out += transistor_cautions(sid, _sample_transistor(op.transistors[other], i),
                                           _sample_device(circuit.element(other).device, params, j, i),
                                           float(edges[i, j]), None, float(temperature[i]), name=other)
            return tuple(out)

        flags.update(stage_flags)
        renders.append(render)
        stages.append(StageResult(
            id=sid, kind=compiled.kinds[k], transistor=t, gain=f["gain"], input_resistance=f["r_in"],
            output_resistance=f["r_out"], swing=Swing(f["swing"][0], f["swing"][1]),
            load_lines=LoadLines(dc=LoadLine(f["dc"], f["q_vce"], f["q_ic"]), ac=LoadLine(f["ac"], f["q_vce"], f["q_ic"])),
            saturation_margin=f["margin"], cutoff_margin=f["q_ic"], dissipation=np.asarray(t.power),
            resistor_power=f["resistor_power"], input_node=nodes.input, output_node=nodes.output,
            cautions=BatchCautions(stage_flags, s_count, render)))
    with np.errstate(invalid="ignore"):
        plan_flags = {f"{n}.power": p > rating for n, p in plan_resistor_power.items()}
    positive = supply_v[:, 0]
    negative = supply_v[:, 1] if supply_v.shape[1] > 1 else np.zeros(s_count)
    plan_flags["supply.safety"] = ((positive - negative > SAFETY_EXTRA_LOW_VOLTAGE_DC)
                                   | (np.maximum(np.abs(positive), np.abs(negative)) > SAFETY_EXTRA_LOW_VOLTAGE_DC))
    plan_flags = {key: flag & (status == "ok") for key, flag in plan_flags.items()}
    flags.update(plan_flags)

    def render_all(i):
        out = [c for render in renders for c in render(i)]
        if status[i] == "ok":
            out += resistor_cautions({n: float(p[i]) for n, p in plan_resistor_power.items()}, float(rating[i]))
            out += supply_cautions(float(positive[i]), float(negative[i]))
        return tuple(out)

    amplitude, limiting = clip.amplitude()
    return PlanResult(
        model=op.model, stages=tuple(stages), gain=chain_gain, input_resistance=stages[0].input_resistance,
        output_resistance=stages[-1].output_resistance, max_source_amplitude=amplitude, limiting_stage=limiting,
        clipping=Clipping(clip.positive, clip.negative, clip.positive_stage, clip.negative_stage,
                          clip.positive_region, clip.negative_region),
        max_source_amplitude_estimate=estimate, supply_current=supply_current, supply_power=supply_power,
        cautions=BatchCautions(flags, s_count, render_all), operating_point=op, temperature=temperature,
        resistor_power=plan_resistor_power, status=status)

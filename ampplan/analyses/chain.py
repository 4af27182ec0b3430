"""The analyses of a plan, all on the one circuit it compiles to and the one operating point.

Definitions (issue contract):

* a stage's **gain** is v(output)/v(input) at midband with everything before and after it in place;
* its **input resistance** is what the source or the previous stage sees looking into its input
  node, bias network included (everything upstream of the port is cut away and 1 A injected);
* its **output resistance** is what the next stage or the load sees looking back into its output
  node with the source EMF zeroed and everything before it in place (everything downstream cut);
* its **swing** is read off its own AC load line, the rest of the circuit as its linear load;
* the chain's **max_source_amplitude** comes from the quasi-static sweep (:mod:`.sweep`).
"""

from __future__ import annotations

import math

from ..circuit import Resistor
from ..devices import scaled_to_temperature
from ..plan import LOAD_RESISTOR, NEGATIVE_SUPPLY, SOURCE_RESISTOR, SUPPLY
from .dissipation import resistor_cautions, supply_cautions, transistor_cautions
from .results import LoadLine, LoadLines, PlanResult, StageResult, Swing
from .smallsignal import incremental_models, solve_incremental
from .sweep import clipping_sweep

__all__ = ["analyse_plan", "analyse_compiled"]


def analyse_plan(plan, model: str = "constant-drop", active_edge: str = "vce-sat") -> PlanResult:
    """Compile, solve once, and analyse a plan (see the module docstring for the definitions)."""
    compiled = plan.compile()
    op = compiled.circuit.solve(model=model, temperature=plan.temperature, active_edge=active_edge)
    return analyse_compiled(plan, compiled, op, active_edge)


def forward_active_edge(device, model: str, active_edge: str, temperature: float) -> float:
    """V_CE (transistor frame) where forward-active ends, volts.

    With ``active_edge="vcb-zero"`` (constant-drop) the edge is V_CB = 0, i.e. V_CE = V_BE(on) at
    ``temperature`` (degrees Celsius), moved by :func:`ampplan.devices.scaled_to_temperature`
    exactly as the solver moves it; otherwise V_CE(sat).
    """
    if model == "constant-drop" and active_edge == "vcb-zero":
        parameters = {k: float(v) for k, v in device.to_dict().items() if k != "polarity" and v is not None}
        parameters.setdefault("vbc_on", parameters["vbe_on"])  # None means "as vbe_on"
        return float(scaled_to_temperature(parameters, temperature)["vbe_on"])
    return device.vce_sat


def _ratio(a: float, b: float) -> float:
    return a / b if b != 0 and math.isfinite(b) else math.nan


def analyse_compiled(plan, compiled, op, active_edge: str = "vce-sat") -> PlanResult:
    """Analyses of a compiled plan at its operating point ``op`` (no further DC solve but the sweep)."""
    circuit = compiled.circuit
    models = incremental_models(op)
    drive = solve_incremental(op, models, excite=compiled.source)
    owner = compiled.owner
    stages, cautions, estimate = [], [], math.inf
    transistor_stage = {}
    ids = plan.stage_ids
    for name, tag in owner.items():
        if name in op.transistors:
            transistor_stage[name] = ids[int(round(tag)) - 1]
    for k, (nodes, stage) in enumerate(zip(compiled.stages, plan.stages), start=1):
        sid = ids[k - 1]
        t = op.transistors[nodes.transistor]
        q = circuit.element(nodes.transistor)
        device = q.device
        s = device.sign
        upstream = {name: {nodes.input} for name, tag in owner.items() if tag < k}
        downstream = {name: {nodes.output} for name, tag in owner.items() if tag > k}
        r_in = solve_incremental(op, models, inject=nodes.input, ground=upstream).v[nodes.input]
        r_out = solve_incremental(op, models, inject=nodes.output, ground=downstream).v[nodes.output]
        gain = _ratio(drive.v[nodes.output], drive.v[nodes.input])

        # Load lines: the transistor becomes a test excitation I_C = 1 A with I_B = I_C/β, so the
        # emitter carries I_C(1 + 1/β) as it does in forward-active.
        beta = models[q.name].beta_ac
        if not (isinstance(beta, float) and math.isfinite(beta) and beta > 0):
            beta = device.beta
        lines = {}
        for which, caps in (("ac", "short"), ("dc", "open")):
            sol = solve_incremental(op, models, capacitors=caps, port=(q.name, 1.0 / beta))
            dvce = s * (sol.v[q.collector] - sol.v[q.emitter])
            lines[which] = (sol, dvce)
        q_vce, q_ic = s * t.vce, t.ic
        edge = forward_active_edge(device, op.model, active_edge, op.temperature)
        # A saturated constant-drop transistor sits exactly on the edge; keep rounding out of the margin.
        headroom = q_vce - edge if abs(q_vce - edge) > 1e-12 * max(1.0, abs(q_vce)) else 0.0
        load_lines = LoadLines(dc=LoadLine(-lines["dc"][1], q_vce, q_ic), ac=LoadLine(-lines["ac"][1], q_vce, q_ic))
        to_output = abs(_ratio(lines["ac"][0].v[nodes.output], lines["ac"][1]))
        if t.region == "forward-active":
            swing = Swing(toward_saturation=max(q_vce - edge, 0.0) * to_output,
                          toward_cutoff=max(q_ic, 0.0) * load_lines.ac.resistance * to_output)
        else:
            swing = Swing(0.0, 0.0)
        stage_gain_from_source = abs(drive.v[nodes.output])
        if stage_gain_from_source > 0:
            estimate = min(estimate, swing.peak / stage_gain_from_source)

        prefix = f"{sid}_"
        resistor_power = {}
        for name in nodes.elements:
            element = circuit.element(name)
            if isinstance(element, Resistor):
                resistor_power[name[len(prefix):] if name.startswith(prefix) else name] = (
                    op.i[name] ** 2 * element.resistance)
        stage_cautions = transistor_cautions(sid, t, device, edge, plan.min_headroom, op.temperature)
        stage_cautions += resistor_cautions({f"{sid}.{n}": p for n, p in resistor_power.items()},
                                            plan.resistor_power_rating)
        # A custom stage's other transistors get the region and rating checks; the headroom asked
        # for is the reported transistor's (a diode-connected one, say, never has it).
        for other in nodes.elements:
            if other in op.transistors and other != nodes.transistor:
                other_device = circuit.element(other).device
                stage_cautions += transistor_cautions(
                    sid, op.transistors[other], other_device,
                    forward_active_edge(other_device, op.model, active_edge, op.temperature), None,
                    op.temperature, name=other)
        cautions += stage_cautions
        stages.append(StageResult(
            id=sid, kind=stage.kind, transistor=t, gain=gain, input_resistance=r_in, output_resistance=r_out,
            swing=swing, load_lines=load_lines, saturation_margin=headroom, cutoff_margin=q_ic,
            dissipation=t.power, resistor_power=resistor_power, input_node=nodes.input,
            output_node=nodes.output, cautions=tuple(stage_cautions)))

    clipping = clipping_sweep(op, compiled.source, transistor_stage, op.model, active_edge,
                              span=max(abs(plan.supply), abs(plan.negative_supply)), models=models)
    if clipping.positive <= clipping.negative:
        amplitude, limiting = clipping.positive, clipping.positive_stage
    else:
        amplitude, limiting = clipping.negative, clipping.negative_stage
    # The plan's own resistors (source and load) are rated like the stages' ones.
    plan_resistor_power = {name: op.i[name] ** 2 * circuit.element(name).resistance
                           for name in (SOURCE_RESISTOR, LOAD_RESISTOR) if name in op.i}
    cautions += resistor_cautions(plan_resistor_power, plan.resistor_power_rating)
    cautions += supply_cautions(plan.supply, plan.negative_supply)
    supplies = [e for e in circuit.elements if getattr(e, "voltage", None) is not None
                and e.name in (SUPPLY, NEGATIVE_SUPPLY)]
    supply_power = sum(e.voltage * op.i[e.name] for e in supplies)
    return PlanResult(
        model=op.model, stages=tuple(stages), gain=drive.v[compiled.load_node],
        input_resistance=stages[0].input_resistance, output_resistance=stages[-1].output_resistance,
        max_source_amplitude=amplitude, limiting_stage=limiting, clipping=clipping,
        max_source_amplitude_estimate=estimate, supply_current=op.i[SUPPLY], supply_power=supply_power,
        cautions=tuple(cautions), operating_point=op, temperature=op.temperature,
        resistor_power=plan_resistor_power)

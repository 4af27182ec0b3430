"""What the canvas draws, as plain data: each stage's I_C–V_CE plane and the chain's swing budget.

This module decides *what* is on the picture (load lines clipped to a view box, the limits, the
swing along the AC load line, the rated-power curve, the words of each panel's title); the
notebook's bokeh canvas and the static matplotlib picture only decide *how* to draw it, so the two
cannot disagree. Everything is read from a :class:`~ampplan.analyses.results.PlanResult`; nothing
here solves.

Frame: every panel reads the same way. An NPN is drawn in V_CE and I_C; a PNP in V_EC and the
collector current out of its collector (the frame :class:`~ampplan.analyses.results.LoadLine`
already uses), so a forward-active Q-point is in the first quadrant for both. Units are SI (volts,
amperes, watts); scaling for display is the renderer's business.

Swing along the AC load line (the load-line construction of Sedra & Smith, *Microelectronic
Circuits*, and Boylestad & Nashelsky, the BJT biasing chapters, from memory): from the Q-point the
operating point can move down the line until V_CE reaches the forward-active edge (toward
saturation) or up it until I_C reaches zero (toward cutoff). The largest symmetric swing is the
smaller of the two excursions; the side that reaches its limit first is the *limiting side*.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..units import format_quantity
from .dissipation import derated_power
from .results import LoadLine, PlanResult, StageResult

__all__ = ["Segment", "StagePlane", "ChainPlane", "PlanPlanes", "stage_plane", "chain_plane", "plan_planes",
           "POWER_CURVE_POINTS"]

#: Points on the rated-power hyperbola I_C = P / V_CE inside the view box.
POWER_CURVE_POINTS = 64
#: Room left around the furthest feature of a panel (fraction of the extent).
_MARGIN = 0.08


@dataclass(frozen=True)
class Segment:
    """A straight piece from (v0, i0) to (v1, i1), volts and amperes in the transistor's frame."""
    v0: float
    i0: float
    v1: float
    i1: float

    @property
    def v(self) -> tuple:
        return (self.v0, self.v1)

    @property
    def i(self) -> tuple:
        return (self.i0, self.i1)


_EMPTY = Segment(math.nan, math.nan, math.nan, math.nan)


@dataclass(frozen=True)
class StagePlane:
    """One stage's I_C–V_CE panel.

    Attributes
    ----------
    sid, kind, polarity, region : str
    voltage_label, current_label : str
        ``"V_CE"``/``"I_C"`` for an NPN, ``"V_EC"``/``"I_C"`` (out of the collector) for a PNP.
    q_v, q_i : float
        The Q-point, volts and amperes (transistor frame).
    v_max, i_max : float
        The view box: volts from 0 to ``v_max``, amperes from 0 to ``i_max`` (both > 0). Every
        line below is clipped to it.
    dc_line, ac_line : Segment
        The DC and AC load lines through the Q-point, clipped to the view box.
    dc_resistance, ac_resistance : float
        Ohms seen by the collector-emitter port (the inverse of minus each line's slope).
    saturation_edge : float
        V_CE (V_EC) where forward-active ends, volts: V_CE(sat), or V_BE(on) with the stricter
        V_CB = 0 edge. The strip from 0 to it is the saturation limit.
    swing_toward_saturation, swing_toward_cutoff : Segment
        From the Q-point along the AC load line to the saturation edge and to I_C = 0 (each
        clipped to the view box); NaN when the stage is not forward-active.
    usable_swing : Segment
        The symmetric part of the two: the Q-point ± the smaller excursion, along the AC line.
    limiting_side : {"saturation", "cutoff"} or None
        Which limit the symmetric swing meets first; None out of forward-active.
    output_swing_toward_saturation, output_swing_toward_cutoff : float
        The same excursions as volts peak at the stage's output node (``StageResult.swing``).
    power_rating : float or None
        The transistor's power rating at the plan temperature (derated), watts; None without one.
    power_v, power_i : tuple of float
        The hyperbola I_C = P / V_CE inside the view box (empty when it stays outside it or there
        is no rating).
    dissipation : float
        The transistor's power at the Q-point, watts.
    cautions : tuple of str
    title : str
        One line in words: the stage, its region and, when any, how many cautions and the first.
    """
    sid: str
    kind: str
    polarity: str
    region: str
    voltage_label: str
    current_label: str
    q_v: float
    q_i: float
    v_max: float
    i_max: float
    dc_line: Segment
    ac_line: Segment
    dc_resistance: float
    ac_resistance: float
    saturation_edge: float
    swing_toward_saturation: Segment
    swing_toward_cutoff: Segment
    usable_swing: Segment
    limiting_side: str | None
    output_swing_toward_saturation: float
    output_swing_toward_cutoff: float
    power_rating: float | None
    power_v: tuple
    power_i: tuple
    dissipation: float
    cautions: tuple = ()
    title: str = ""


@dataclass(frozen=True)
class ChainPlane:
    """The chain view: the peak swing each stage must pass at the largest source amplitude.

    The demanded peak at stage k's output is the source amplitude times |v(out_k) / EMF|, the
    midband gain from the source EMF to that node: the input divider R_in / (R_in + R_source)
    times the stage gains up to k. A stage whose demand meets what it has is the one that clips
    first (with the constant-drop model the two are equal there, by construction of the
    load-line estimate).

    Attributes
    ----------
    sids : tuple of str
    demanded : tuple of float
        Volts peak at each stage output at ``source_amplitude``.
    available : tuple of float
        Volts peak each stage passes unclipped (``StageResult.swing.peak``).
    gain_from_source : tuple of float
        |v(out_k) / EMF| per stage, V/V.
    source_amplitude : float
        The largest source amplitude (volts peak) used for the demand; NaN when nothing clips.
    limiting_stage : str or None
    title : str
    """
    sids: tuple
    demanded: tuple
    available: tuple
    gain_from_source: tuple
    source_amplitude: float
    limiting_stage: str | None
    title: str = ""


@dataclass(frozen=True)
class PlanPlanes:
    """Every stage's panel plus the chain view: everything the canvas and the picture draw."""
    stages: tuple
    chain: ChainPlane
    model: str = ""
    notes: tuple = field(default_factory=tuple)

    def stage(self, sid: str) -> StagePlane:
        for s in self.stages:
            if s.sid == sid:
                return s
        raise KeyError(sid)


def _finite(*values) -> list:
    return [float(v) for v in values if v is not None and math.isfinite(v)]


def _clip_line(resistance: float, q_v: float, q_i: float, v_max: float, i_max: float) -> Segment:
    """The load line of ``resistance`` through (q_v, q_i) within [0, v_max] × [0, i_max].

    The line is I = q_i - (V - q_v) / R; R = 0 is vertical, R = inf horizontal.
    """
    if not (math.isfinite(q_v) and math.isfinite(q_i)) or math.isnan(resistance):
        return _EMPTY
    if resistance == 0:
        return Segment(q_v, 0.0, q_v, i_max)
    if math.isinf(resistance):
        return Segment(0.0, q_i, v_max, q_i)
    # Upper-left end: V = 0, unless the line leaves through the top of the box first.
    i_at_zero = q_i + q_v / resistance
    v0, i0 = (0.0, i_at_zero) if i_at_zero <= i_max else (q_v - (i_max - q_i) * resistance, i_max)
    # Lower-right end: I = 0, unless it leaves through the right side first.
    v_at_zero = q_v + q_i * resistance
    v1, i1 = (v_at_zero, 0.0) if v_at_zero <= v_max else (v_max, q_i - (v_max - q_v) / resistance)
    return Segment(v0, i0, v1, i1)


def _point_on_line(line: LoadLine, dv: float) -> tuple:
    """The point ``dv`` volts to the right of the Q-point along ``line`` (I falls as V rises)."""
    r = float(line.resistance)
    if r == 0:
        return float(line.q_vce), math.nan
    return float(line.q_vce) + dv, float(line.q_ic) - dv / r


def stage_plane(stage: StageResult, temperature: float = 25.0, device=None) -> StagePlane:
    """The panel of one solved stage.

    Parameters
    ----------
    stage : StageResult
    temperature : float
        Degrees Celsius, for derating the power rating.
    device : Transistor, optional
        The stage's transistor parameters, for its ``max_power``; without it no power curve.
    """
    t = stage.transistor
    lines = stage.load_lines
    q_v, q_i = float(lines.dc.q_vce), float(lines.dc.q_ic)
    edge = q_v - float(stage.saturation_margin)
    forward = t.region == "forward-active"
    pnp = t.polarity == "pnp"

    # Excursions along the AC load line, volts of V_CE (transistor frame).
    r_ac = float(lines.ac.resistance)
    dv_saturation = max(q_v - edge, 0.0)
    dv_cutoff = max(q_i, 0.0) * r_ac if math.isfinite(r_ac) else math.inf

    rating = None
    if device is not None and device.max_power is not None and math.isfinite(device.max_power):
        rating = derated_power(device.max_power, temperature)

    # The view box: every feature that has a place, plus a margin; the power curve may leave it.
    v_extent = _finite(lines.dc.vce_at_zero_current, lines.ac.vce_at_zero_current, q_v, edge * 4)
    i_extent = _finite(lines.dc.ic_at_zero_vce, q_i * 2)
    if forward and dv_saturation > 0 and r_ac > 0:
        i_extent += _finite(q_i + dv_saturation / r_ac)
    v_max = max(v_extent + [1.0 if not v_extent else 0.0]) * (1 + _MARGIN)
    i_max = max(i_extent + [1e-3 if not i_extent else 0.0]) * (1 + _MARGIN)
    v_max = v_max if v_max > 0 else 1.0
    i_max = i_max if i_max > 0 else 1e-3

    if forward:
        sat_v, sat_i = _point_on_line(lines.ac, -dv_saturation)
        cut_v, cut_i = _point_on_line(lines.ac, dv_cutoff) if math.isfinite(dv_cutoff) else (v_max, q_i)
        toward_saturation = Segment(q_v, q_i, sat_v, min(sat_i, i_max) if not math.isnan(sat_i) else i_max)
        toward_cutoff = Segment(q_v, q_i, min(cut_v, v_max), cut_i)
        half = min(dv_saturation, dv_cutoff)
        lo_v, lo_i = _point_on_line(lines.ac, -half)
        hi_v, hi_i = _point_on_line(lines.ac, half)
        usable = Segment(lo_v, lo_i, hi_v, hi_i)
        limiting = "saturation" if dv_saturation <= dv_cutoff else "cutoff"
    else:
        toward_saturation = toward_cutoff = usable = _EMPTY
        limiting = None

    power_v: tuple = ()
    power_i: tuple = ()
    if rating is not None and rating > 0:
        # I = P / V enters the box where V >= P / i_max.
        v_start = max(rating / i_max, 1e-12)
        if v_start < v_max:
            v = np.geomspace(v_start, v_max, POWER_CURVE_POINTS)
            power_v, power_i = tuple(float(x) for x in v), tuple(float(x) for x in rating / v)

    cautions = tuple(stage.cautions)
    title = f"{stage.id} {stage.kind} ({t.polarity.upper()}): {t.region}"
    if cautions:
        title += f"; {len(cautions)} caution{'s' if len(cautions) != 1 else ''}: {cautions[0]}"
    elif forward:
        title += f"; swing limited by {limiting}"
    return StagePlane(
        sid=stage.id, kind=stage.kind, polarity=t.polarity, region=t.region,
        voltage_label="V_EC" if pnp else "V_CE", current_label="I_C",
        q_v=q_v, q_i=q_i, v_max=v_max, i_max=i_max,
        dc_line=_clip_line(float(lines.dc.resistance), q_v, q_i, v_max, i_max),
        ac_line=_clip_line(r_ac, q_v, q_i, v_max, i_max),
        dc_resistance=float(lines.dc.resistance), ac_resistance=r_ac, saturation_edge=edge,
        swing_toward_saturation=toward_saturation, swing_toward_cutoff=toward_cutoff, usable_swing=usable,
        limiting_side=limiting, output_swing_toward_saturation=float(stage.swing.toward_saturation),
        output_swing_toward_cutoff=float(stage.swing.toward_cutoff), power_rating=rating,
        power_v=power_v, power_i=power_i, dissipation=float(stage.dissipation), cautions=cautions, title=title)


def _source_divider(result: PlanResult, source_resistance: float) -> float:
    r_in = float(result.input_resistance)
    if source_resistance == 0:
        return 1.0
    if math.isinf(r_in):
        return 1.0
    return r_in / (r_in + source_resistance)


def chain_plane(result: PlanResult, source_resistance: float = 0.0) -> ChainPlane:
    """The chain view of a solved plan (see :class:`ChainPlane`).

    Parameters
    ----------
    result : PlanResult
    source_resistance : float
        The plan's source resistance, ohms (the divider into the first stage).
    """
    gain = _source_divider(result, source_resistance)
    gains, available = [], []
    for s in result.stages:
        gain *= float(s.gain)
        gains.append(abs(gain))
        available.append(float(s.swing.peak))
    amplitude = float(result.max_source_amplitude)
    if not math.isfinite(amplitude):
        amplitude = math.nan
    demanded = tuple(amplitude * g for g in gains)
    limiting = result.limiting_stage
    if limiting is None:
        title = "chain: no stage clips within the sweep"
    else:
        title = (f"chain: the largest source amplitude is {format_quantity(amplitude, 'V')} peak; "
                 f"{limiting} clips first")
    return ChainPlane(sids=tuple(s.id for s in result.stages), demanded=demanded, available=tuple(available),
                      gain_from_source=tuple(gains), source_amplitude=amplitude, limiting_stage=limiting,
                      title=title)


def plan_planes(result: PlanResult, plan=None) -> PlanPlanes:
    """Every panel of a solved plan.

    Parameters
    ----------
    result : PlanResult
    plan : Plan, optional
        The plan that was solved, for each stage's power rating and the source resistance; without
        it the panels have no power curve and the chain view assumes an ideal source.
    """
    devices = {}
    source_resistance = 0.0
    if plan is not None:
        devices = dict(zip(plan.stage_ids, (s.device for s in plan.stages)))
        source_resistance = float(plan.source_resistance)
    stages = tuple(stage_plane(s, result.temperature, devices.get(s.id)) for s in result.stages)
    return PlanPlanes(stages=stages, chain=chain_plane(result, source_resistance), model=result.model)

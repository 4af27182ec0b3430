"""Result types of the plan analyses: plain frozen dataclasses with text, HTML and dict forms."""

from __future__ import annotations

import html
import math
from dataclasses import dataclass, field

from ..solver.result import TransistorResult, _plain
from ..units import format_quantity

__all__ = ["LoadLine", "LoadLines", "Swing", "Clipping", "StageResult", "PlanResult"]


def _q(value, unit=""):
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "—"
    if isinstance(value, float) and math.isinf(value):
        return ("-" if value < 0 else "") + "∞" + (f" {unit}" if unit else "")
    return format_quantity(value, unit)


def _gain(value) -> str:
    return f"{value:.4g}" if value is not None and math.isfinite(value) else _q(value)


@dataclass(frozen=True)
class LoadLine:
    """A straight load line through the Q-point on the I_C–V_CE plane.

    Voltages and currents are in the transistor's own frame: V_CE and I_C for an NPN, V_EC and
    the collector current out of the collector for a PNP, so a forward-active Q-point is in the
    first quadrant either way.

    Attributes
    ----------
    resistance : float
        Ohms the collector-emitter port sees (the inverse of minus the slope).
    q_vce, q_ic : float
        The Q-point, volts and amperes.
    vce_at_zero_current : float
        Where the line meets I_C = 0 (volts).
    ic_at_zero_vce : float
        Where the line meets V_CE = 0 (amperes).
    """
    resistance: float
    q_vce: float
    q_ic: float

    @property
    def slope(self) -> float:
        """dI_C/dV_CE along the line, siemens (negative)."""
        return -1.0 / self.resistance

    @property
    def vce_at_zero_current(self) -> float:
        return self.q_vce + self.q_ic * self.resistance

    @property
    def ic_at_zero_vce(self) -> float:
        return self.q_ic + self.q_vce / self.resistance

    @property
    def endpoints(self) -> tuple:
        """((V_CE, 0), (0, I_C)): the two axis crossings, ready to plot."""
        return ((self.vce_at_zero_current, 0.0), (0.0, self.ic_at_zero_vce))

    def to_dict(self) -> dict:
        return {"resistance": self.resistance, "q_vce": self.q_vce, "q_ic": self.q_ic, "slope": self.slope,
                "vce_at_zero_current": self.vce_at_zero_current, "ic_at_zero_vce": self.ic_at_zero_vce}


@dataclass(frozen=True)
class LoadLines:
    """DC load line (capacitors open) and AC load line (capacitors shorted) of one stage."""
    dc: LoadLine
    ac: LoadLine

    def to_dict(self) -> dict:
        return {"dc": self.dc.to_dict(), "ac": self.ac.to_dict()}


@dataclass(frozen=True)
class Swing:
    """Peak output swing of one stage along its AC load line, volts at the stage output node.

    Attributes
    ----------
    toward_saturation : float
        Output excursion at which V_CE falls to the forward-active edge.
    toward_cutoff : float
        Output excursion at which I_C falls to zero.
    peak : float
        The smaller of the two: the largest symmetric peak the stage passes unclipped.
    """
    toward_saturation: float
    toward_cutoff: float

    @property
    def peak(self) -> float:
        return min(self.toward_saturation, self.toward_cutoff)

    def to_dict(self) -> dict:
        return {"toward_saturation": self.toward_saturation, "toward_cutoff": self.toward_cutoff,
                "peak": self.peak}


@dataclass(frozen=True)
class Clipping:
    """Where the chain first clips, from the quasi-static sweep of the source EMF.

    Attributes
    ----------
    positive, negative : float
        Smallest positive / negative EMF excursion (magnitude, volts) at which a transistor leaves
        forward-active; ``inf`` when none does within the sweep range.
    positive_stage, negative_stage : str or None
        Stage id of that transistor.
    positive_region, negative_region : str or None
        The region it enters.
    """
    positive: float
    negative: float
    positive_stage: str | None
    negative_stage: str | None
    positive_region: str | None
    negative_region: str | None

    def to_dict(self) -> dict:
        return {k: _plain(getattr(self, k)) for k in
                ("positive", "negative", "positive_stage", "negative_stage", "positive_region", "negative_region")}


@dataclass(frozen=True)
class StageResult:
    """One stage of a solved plan.

    Attributes
    ----------
    id, kind : str
        ``"s1"`` ... and the template kind (``"common-emitter"`` ...).
    transistor : TransistorResult
        The stage transistor's bias (region, currents, voltages, checks).
    gain : float
        Midband v(output)/v(input), with the neighbours in place (V/V).
    input_resistance, output_resistance : float
        Midband, ohms (see :func:`ampplan.analyses.chain.analyse_plan`).
    swing : Swing
    load_lines : LoadLines
    saturation_margin : float
        Volts of V_CE above the forward-active edge (frame of the transistor; negative when past it).
    cutoff_margin : float
        Amperes of I_C above zero.
    dissipation : float
        Transistor power, watts.
    resistor_power : dict of str -> float
        Watts per resistor of the stage, by its template name (``"rc"``, ``"rb1"`` ...).
    input_node, output_node : str
    cautions : tuple of str
    """
    id: str
    kind: str
    transistor: TransistorResult
    gain: float
    input_resistance: float
    output_resistance: float
    swing: Swing
    load_lines: LoadLines
    saturation_margin: float
    cutoff_margin: float
    dissipation: float
    resistor_power: dict
    input_node: str = ""
    output_node: str = ""
    cautions: tuple = ()

    @property
    def region(self) -> str:
        return self.transistor.region

    def __repr__(self) -> str:
        t = self.transistor
        return (f"StageResult({self.id} {self.kind}: {t.region}, I_C={_q(t.ic, 'A')}, V_CE={_q(t.vce, 'V')}, "
                f"headroom={_q(self.saturation_margin, 'V')}, swing={_q(self.swing.peak, 'V')} peak, "
                f"gain={self.gain:.4g}, R_in={_q(self.input_resistance, 'Ω')}, "
                f"R_out={_q(self.output_resistance, 'Ω')})")

    def to_dict(self) -> dict:
        return {"id": self.id, "kind": self.kind, "transistor": self.transistor.to_dict(), "gain": self.gain,
                "input_resistance": self.input_resistance, "output_resistance": self.output_resistance,
                "swing": self.swing.to_dict(), "load_lines": self.load_lines.to_dict(),
                "saturation_margin": self.saturation_margin, "cutoff_margin": self.cutoff_margin,
                "dissipation": self.dissipation, "resistor_power": dict(self.resistor_power),
                "input_node": self.input_node, "output_node": self.output_node, "cautions": list(self.cautions)}


@dataclass(frozen=True)
class PlanResult:
    """A solved plan: every stage plus the chain figures.

    Attributes
    ----------
    model : str
    stages : tuple of StageResult
    gain : float
        Midband v(load)/source EMF (V/V).
    input_resistance, output_resistance : float
        The first stage's input and the last stage's output resistance, ohms.
    max_source_amplitude : float
        Smallest source-EMF excursion, either sign, at which a transistor leaves forward-active,
        by the quasi-static sweep (volts; 0 when a stage is already out; inf when nothing clips).
    limiting_stage : str or None
        Id of the stage whose transistor leaves first.
    clipping : Clipping
        Both directions of the sweep in detail.
    max_source_amplitude_estimate : float
        The same figure from the load lines: min over stages of swing peak / |v(out)/EMF|.
    supply_current : float
        Current the positive supply delivers, amperes.
    supply_power : float
        Power all DC supplies deliver, watts.
    cautions : tuple of str
        Plain sentences; empty when all is well.
    operating_point : OperatingPoint
        The solver's answer for the compiled circuit.
    """
    model: str
    stages: tuple
    gain: float
    input_resistance: float
    output_resistance: float
    max_source_amplitude: float
    limiting_stage: str | None
    clipping: Clipping
    max_source_amplitude_estimate: float
    supply_current: float
    supply_power: float
    cautions: tuple
    operating_point: object = field(repr=False, compare=False, default=None)
    temperature: float = 25.0

    @property
    def all_forward_active(self) -> bool:
        return all(s.transistor.region == "forward-active" for s in self.stages)

    def stage(self, sid: str) -> StageResult:
        for s in self.stages:
            if s.id == sid:
                return s
        raise KeyError(sid)

    def table(self) -> str:
        """A fixed-width text table a designer reads at a glance; ``!`` marks a stage out of
        forward-active or with a caution."""
        rows = [("stage", "kind", "region", "I_C", "V_CE", "sat. margin", "cutoff margin", "swing pk", "gain",
                 "R_in", "R_out")]
        for s in self.stages:
            t = s.transistor
            flag = "!" if (t.region != "forward-active" or s.cautions) else " "
            rows.append((f"{flag}{s.id}", s.kind, t.region, _q(t.ic, "A"), _q(t.vce, "V"),
                         _q(s.saturation_margin, "V"), _q(s.cutoff_margin, "A"), _q(s.swing.peak, "V"),
                         _gain(s.gain), _q(s.input_resistance, "Ω"), _q(s.output_resistance, "Ω")))
        widths = [max(len(row[k]) for row in rows) for k in range(len(rows[0]))]
        right = set(range(3, len(widths)))

        def line(row):
            return "  ".join(c.rjust(w) if k in right else c.ljust(w)
                             for k, (c, w) in enumerate(zip(row, widths))).rstrip()

        out = [line(rows[0]), "  ".join("-" * w for w in widths)] + [line(row) for row in rows[1:]]
        if any(row[0].startswith("!") for row in rows[1:]):
            out.append("(! out of forward-active or with a caution)")
        return "\n".join(out)

    def summary(self) -> str:
        """The chain figures, one per line."""
        gain = self.gain
        decibels = f" ({20 * math.log10(abs(gain)):.1f} dB)" if gain and math.isfinite(gain) else ""
        if self.limiting_stage:
            amplitude = f"{_q(self.max_source_amplitude, 'V')} peak, limited by {self.limiting_stage}"
        else:
            amplitude = f"{_q(self.max_source_amplitude, 'V')} (no stage clips)"
        figures = [
            ("gain (load / source EMF)", f"{_gain(gain)} V/V{decibels}"),
            ("input resistance", _q(self.input_resistance, "Ω")),
            ("output resistance", _q(self.output_resistance, "Ω")),
            ("largest source amplitude", amplitude),
            ("  load-line estimate", f"{_q(self.max_source_amplitude_estimate, 'V')} peak"),
            ("supply current", _q(self.supply_current, "A")),
            ("supply power", _q(self.supply_power, "W")),
        ]
        width = max(len(name) for name, _ in figures)
        return "\n".join(f"  {name.ljust(width)}  {value}" for name, value in figures)

    def __repr__(self) -> str:
        out = [f"PlanResult({self.model}, {len(self.stages)} stage(s), "
               f"{'all forward-active' if self.all_forward_active else 'NOT all forward-active'})",
               self.table(), "chain", self.summary(), "cautions"]
        out += [f"  - {c}" for c in self.cautions] or ["  none"]
        return "\n".join(out)

    def _repr_html_(self) -> str:
        e = html.escape
        head = ("stage", "kind", "region", "I_C", "V_CE", "headroom", "swing pk", "gain", "R_in", "R_out")
        rows = []
        for s in self.stages:
            t = s.transistor
            cells = (s.id, s.kind, t.region, _q(t.ic, "A"), _q(t.vce, "V"), _q(s.saturation_margin, "V"),
                     _q(s.swing.peak, "V"), f"{s.gain:.4g}", _q(s.input_resistance, "Ω"),
                     _q(s.output_resistance, "Ω"))
            style = "" if t.region == "forward-active" else " style='font-weight:bold'"
            rows.append(f"<tr{style}>" + "".join(f"<td>{e(c)}</td>" for c in cells) + "</tr>")
        cautions = "".join(f"<li>{e(c)}</li>" for c in self.cautions)
        summary = "<br>".join(e(line) for line in self.summary().splitlines())
        return (f"<div><strong>Plan result ({e(self.model)})</strong><table><thead><tr>"
                + "".join(f"<th>{e(h)}</th>" for h in head) + "</tr></thead><tbody>" + "".join(rows)
                + f"</tbody></table><p>{summary}</p>"
                + (f"<p>Cautions:</p><ul>{cautions}</ul>" if cautions else "<p>No cautions.</p>") + "</div>")

    def to_dict(self) -> dict:
        """Plain, JSON-ready dict; infinities and NaN become None (e.g. no stage clips)."""
        return _json_safe(self._fields_dict())

    def _fields_dict(self) -> dict:
        return {"model": self.model, "temperature": self.temperature,
                "all_forward_active": self.all_forward_active,
                "stages": [s.to_dict() for s in self.stages], "gain": self.gain,
                "input_resistance": self.input_resistance, "output_resistance": self.output_resistance,
                "max_source_amplitude": self.max_source_amplitude, "limiting_stage": self.limiting_stage,
                "clipping": self.clipping.to_dict(),
                "max_source_amplitude_estimate": self.max_source_amplitude_estimate,
                "supply_current": self.supply_current, "supply_power": self.supply_power,
                "cautions": list(self.cautions)}


def _json_safe(x):
    if isinstance(x, dict):
        return {k: _json_safe(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_json_safe(v) for v in x]
    if isinstance(x, float) and not math.isfinite(x):
        return None
    return x

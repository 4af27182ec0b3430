"""Result types of the plan analyses: plain frozen dataclasses with text, HTML and dict forms."""

from __future__ import annotations

import html
import math
from dataclasses import dataclass, field

import numpy as np

from ..devices import REFERENCE_TEMPERATURE
from ..errors import UnknownNameError
from .addresses import read_result
from ..solver.result import TransistorResult, _fmt, _json_safe, _plain
from ..units import format_call

__all__ = ["LoadLine", "LoadLines", "Swing", "Clipping", "StageResult", "PlanResult", "STAGE_COLUMNS"]


def _gain(value) -> str:
    """A gain (V/V) to four significant digits; zero prints as ``0``, never ``-0``."""
    if value is None or not math.isfinite(value):
        return _fmt(value)
    return "0" if value == 0 else f"{value:.4g}"


#: Shown for a small-signal figure of a stage that is not forward-active.
NOT_APPLICABLE = "n/a"


def _small_signal(stage, text: str) -> str:
    """``text``, or "n/a" where the stage's transistor is not forward-active (its small-signal
    figures describe no amplifier)."""
    return text if stage.transistor.region == "forward-active" else NOT_APPLICABLE


def _html_table(rows, head=None) -> str:
    """An HTML table of already-formatted cells, every cell escaped."""
    e = html.escape
    thead = "<thead><tr>" + "".join(f"<th>{e(h)}</th>" for h in head) + "</tr></thead>" if head else ""
    body = "".join("<tr>" + "".join(f"<td>{e(str(c))}</td>" for c in row) + "</tr>" for row in rows)
    return f"<table>{thead}<tbody>{body}</tbody></table>"


def _flag(stage) -> str:
    return "!" if (stage.transistor.region != "forward-active" or stage.cautions) else " "


#: The per-stage columns, declared once for the text table, the HTML table and the stage views:
#: (header, the JSON field of StageResult.to_dict it shows, cell text of a stage). Both margins
#: appear, each in its own unit: volts to the saturation edge, amperes to cutoff.
STAGE_COLUMNS = (
    ("stage", "id", lambda s: s.id),
    ("kind", "kind", lambda s: s.kind),
    ("region", "transistor.region", lambda s: s.transistor.region),
    ("I_C", "transistor.ic", lambda s: _fmt(s.transistor.ic, "A")),
    ("V_CE", "transistor.vce", lambda s: _fmt(s.transistor.vce, "V")),
    ("sat. margin", "saturation_margin", lambda s: _fmt(s.saturation_margin, "V")),
    ("cutoff margin", "cutoff_margin", lambda s: _fmt(s.cutoff_margin, "A")),
    ("swing pk", "swing.peak", lambda s: _fmt(s.swing.peak, "V")),
    ("gain", "gain", lambda s: _small_signal(s, _gain(s.gain))),
    ("R_in", "input_resistance", lambda s: _small_signal(s, _fmt(s.input_resistance, "Ω"))),
    ("R_out", "output_resistance", lambda s: _small_signal(s, _fmt(s.output_resistance, "Ω"))),
)


_LOAD_LINE_HEAD = ("R", "Q-point V_CE", "Q-point I_C", "V_CE at I_C = 0", "I_C at V_CE = 0")


@dataclass(frozen=True)
class LoadLine:
    """A straight load line through the Q-point on the I_C–V_CE plane.

    Voltages and currents are in the transistor's own frame: V_CE and I_C for an NPN, V_EC and
    the collector current out of the collector for a PNP, so a forward-active Q-point is in the
    first quadrant either way.

    Attributes
    ----------
    resistance : float
        Ohms the collector-emitter port sees (the inverse of minus the slope). 0 when the
        collector and the emitter are both grounded for the signal: the line is then vertical.
    q_vce, q_ic : float
        The Q-point, volts and amperes.
    slope : float
        dI_C/dV_CE, siemens: ``-1/resistance``, ``-inf`` for a vertical line.
    vce_at_zero_current : float
        Where the line meets I_C = 0 (volts).
    ic_at_zero_vce : float
        Where the line meets V_CE = 0 (amperes); for a vertical line ``±inf`` (the sign of
        ``q_vce``: it never meets the axis), NaN when it lies on the axis (``q_vce == 0``).
    """
    resistance: float
    q_vce: float
    q_ic: float

    @property
    def slope(self) -> float:
        """dI_C/dV_CE along the line, siemens (negative; ``-inf`` when ``resistance == 0``)."""
        r = float(self.resistance)
        return -math.inf if r == 0 else -1.0 / r

    @property
    def vce_at_zero_current(self) -> float:
        # Python floats: inf·0 is NaN without a numpy warning.
        return float(self.q_vce) + float(self.q_ic) * float(self.resistance)

    @property
    def ic_at_zero_vce(self) -> float:
        r, vce = float(self.resistance), float(self.q_vce)
        if r == 0:
            return math.copysign(math.inf, vce) if vce != 0 else math.nan
        return float(self.q_ic) + vce / r

    @property
    def endpoints(self) -> tuple:
        """((V_CE, 0), (0, I_C)): the two axis crossings, ready to plot."""
        return ((self.vce_at_zero_current, 0.0), (0.0, self.ic_at_zero_vce))

    def __repr__(self) -> str:
        return format_call("LoadLine", [
            f"{_fmt(self.resistance, 'Ω')} through the Q-point V_CE={_fmt(self.q_vce, 'V')}",
            f"I_C={_fmt(self.q_ic, 'A')}; meets the V_CE axis at {_fmt(self.vce_at_zero_current, 'V')}",
            f"the I_C axis at {_fmt(self.ic_at_zero_vce, 'A')}"])

    def _html_rows(self) -> list:
        return [_fmt(self.resistance, "Ω"), _fmt(self.q_vce, "V"), _fmt(self.q_ic, "A"),
                _fmt(self.vce_at_zero_current, "V"), _fmt(self.ic_at_zero_vce, "A")]

    def _repr_html_(self) -> str:
        return "<div><strong>Load line</strong>" + _html_table([self._html_rows()], _LOAD_LINE_HEAD) + "</div>"

    def to_dict(self) -> dict:
        """Plain, JSON-ready dict; infinities and NaN become None (a vertical line's slope, say)."""
        return _json_safe({"resistance": self.resistance, "q_vce": self.q_vce, "q_ic": self.q_ic,
                           "slope": self.slope, "vce_at_zero_current": self.vce_at_zero_current,
                           "ic_at_zero_vce": self.ic_at_zero_vce})


@dataclass(frozen=True)
class LoadLines:
    """DC load line (capacitors open) and AC load line (capacitors shorted) of one stage."""
    dc: LoadLine
    ac: LoadLine

    def __repr__(self) -> str:
        return (f"LoadLines(DC {_fmt(self.dc.resistance, 'Ω')}, AC {_fmt(self.ac.resistance, 'Ω')}, "
                f"Q-point V_CE={_fmt(self.dc.q_vce, 'V')}, I_C={_fmt(self.dc.q_ic, 'A')})")

    def _repr_html_(self) -> str:
        rows = [["DC", *self.dc._html_rows()], ["AC", *self.ac._html_rows()]]
        return "<div><strong>Load lines</strong>" + _html_table(rows, ("", *_LOAD_LINE_HEAD)) + "</div>"

    def to_dict(self) -> dict:
        """Plain, JSON-ready dict (see :meth:`LoadLine.to_dict`)."""
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

    def __repr__(self) -> str:
        return (f"Swing({_fmt(self.peak, 'V')} peak; toward saturation {_fmt(self.toward_saturation, 'V')}, "
                f"toward cutoff {_fmt(self.toward_cutoff, 'V')})")

    def _repr_html_(self) -> str:
        rows = [[_fmt(self.peak, "V"), _fmt(self.toward_saturation, "V"), _fmt(self.toward_cutoff, "V")]]
        return ("<div><strong>Output swing</strong>"
                + _html_table(rows, ("peak", "toward saturation", "toward cutoff")) + "</div>")

    def to_dict(self) -> dict:
        """Plain, JSON-ready dict; NaN becomes None."""
        return _json_safe({"toward_saturation": self.toward_saturation, "toward_cutoff": self.toward_cutoff,
                           "peak": self.peak})


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

    def _direction(self, sign: str) -> str:
        name = "positive" if sign == "+" else "negative"
        amount, sid, region = (getattr(self, f"{name}{suffix}") for suffix in ("", "_stage", "_region"))
        if sid is None:
            return f"{sign}: no clipping within the sweep" if not math.isnan(amount) else f"{sign}: not swept"
        if amount == 0:
            return f"{sign}: {sid} is already in {region}"
        return f"{sign}{_fmt(amount, 'V')}: {sid} enters {region}"

    def __repr__(self) -> str:
        return f"Clipping({self._direction('+')}; {self._direction('-')})"

    def _repr_html_(self) -> str:
        rows = [[name, _fmt(getattr(self, name), "V"), getattr(self, f"{name}_stage") or "—",
                 getattr(self, f"{name}_region") or "—"] for name in ("positive", "negative")]
        return ("<div><strong>Clipping (source EMF excursion)</strong>"
                + _html_table(rows, ("direction", "EMF", "stage", "enters")) + "</div>")

    def to_dict(self) -> dict:
        """Plain, JSON-ready dict; infinities (nothing clips) and NaN become None."""
        return _json_safe({k: _plain(getattr(self, k)) for k in
                           ("positive", "negative", "positive_stage", "negative_stage", "positive_region",
                            "negative_region")})


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
        cells = {head: cell(self) for head, _, cell in STAGE_COLUMNS}
        items = [f"{head}={cells[head]}" for head in ("I_C", "V_CE", "sat. margin", "cutoff margin")]
        items.append(f"swing={cells['swing pk']} peak ({_fmt(self.swing.toward_saturation, 'V')} to saturation, "
                     f"{_fmt(self.swing.toward_cutoff, 'V')} to cutoff)")
        items += [f"{head}={cells[head]}" for head in ("gain", "R_in", "R_out")]
        return format_call("StageResult", [f"{self.id} {self.kind}: {self.region}", *items])

    def _repr_html_(self) -> str:
        e = html.escape
        figures = [(head, cell(self)) for head, _, cell in STAGE_COLUMNS[2:]]
        figures.insert(6, ("toward saturation / cutoff", f"{_fmt(self.swing.toward_saturation, 'V')} / "
                                                        f"{_fmt(self.swing.toward_cutoff, 'V')}"))
        figures.append(("dissipation", _fmt(self.dissipation, "W")))
        power = [(name, _fmt(p, "W")) for name, p in self.resistor_power.items()]
        cautions = "".join(f"<li>{e(c)}</li>" for c in self.cautions)
        return (f"<div><strong>Stage {e(self.id)} ({e(self.kind)})</strong>" + _html_table(figures)
                + (_html_table(power, ("resistor", "power")) if power else "")
                + (f"<p>Cautions:</p><ul>{cautions}</ul>" if cautions else "<p>No cautions.</p>") + "</div>")

    def to_dict(self) -> dict:
        """Plain, JSON-ready dict; infinities and NaN become None (forced beta in cutoff, say)."""
        return _json_safe({
            "id": self.id, "kind": self.kind, "transistor": self.transistor.to_dict(), "gain": self.gain,
            "input_resistance": self.input_resistance, "output_resistance": self.output_resistance,
            "swing": self.swing.to_dict(), "load_lines": self.load_lines.to_dict(),
            "saturation_margin": self.saturation_margin, "cutoff_margin": self.cutoff_margin,
            "dissipation": self.dissipation, "resistor_power": dict(self.resistor_power),
            "input_node": self.input_node, "output_node": self.output_node, "cautions": list(self.cautions)})


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
    temperature : float
        Degrees Celsius.
    resistor_power : dict of str -> float
        Watts in the plan's own resistors, by element name (``"source_resistance"``,
        ``"load_resistance"``; only those the plan has). The stages' resistors are on each
        :attr:`StageResult.resistor_power`.
    status : str or ndarray of str
        ``"ok"``, or per sample of a batch the solver's status (a failed sample has NaN figures).

    A batch (``plan.solve(batch=...)``) gives the same fields as arrays of shape (S,) over the
    samples (stage ids and regions as arrays of str, ``None`` where nothing clips), and the
    cautions as a :class:`~ampplan.analyses.dissipation.BatchCautions` (flags per sample, the
    sentences of one sample on demand).
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
    temperature: float = REFERENCE_TEMPERATURE
    resistor_power: dict = field(default_factory=dict)
    status: object = "ok"

    @property
    def batch_size(self) -> int | None:
        """Number of samples of a batch; None for a single solve."""
        return None if np.ndim(self.gain) == 0 else int(np.shape(self.gain)[0])

    @property
    def all_forward_active(self):
        """Every stage forward-active (a bool array over the samples of a batch)."""
        out = np.all([np.asarray(s.transistor.region) == "forward-active" for s in self.stages], axis=0)
        return bool(out) if self.batch_size is None else out

    def __getitem__(self, address: str):
        """The figure at a result address (``"s1.vce"``, ``"gain"``; see :mod:`.addresses`)."""
        return read_result(self, address)

    def stage(self, sid: str) -> StageResult:
        """The result of stage ``sid`` (``"s1"`` ...); UnknownNameError listing the ids otherwise."""
        for s in self.stages:
            if s.id == sid:
                return s
        raise UnknownNameError(f"the result has no stage {sid!r}; its stages are "
                               f"{', '.join(s.id for s in self.stages) or 'none'}")

    def table(self) -> str:
        """A fixed-width text table a designer reads at a glance; ``!`` marks a stage out of
        forward-active or with a caution."""
        rows = [tuple(head for head, _, _ in STAGE_COLUMNS)]
        rows += [(_flag(s) + s.id,) + tuple(cell(s) for _, _, cell in STAGE_COLUMNS[1:]) for s in self.stages]
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
        figures = self.chain_figures()
        width = max(len(name) for name, _ in figures)
        return "\n".join(f"  {name.ljust(width)}  {value}" for name, value in figures)

    def chain_figures(self) -> list:
        """The chain figures as (label, text) pairs, the one source of the text summary and the
        HTML table (for a batch, each figure's range over the samples)."""
        if self.batch_size is not None:
            return self._batch_figures()
        gain = self.gain
        decibels = f" ({20 * math.log10(abs(gain)):.1f} dB)" if gain and math.isfinite(gain) else ""
        out = [s for s in self.stages if s.transistor.region != "forward-active"]
        estimate = f"{_fmt(self.max_source_amplitude_estimate, 'V')} peak"
        if out:
            # A stage already out of forward-active passes no signal unclipped: both figures say so.
            gain_text = f"{NOT_APPLICABLE} ({', '.join(s.id for s in out)} not forward-active)"
            amplitude = (f"0 V: {out[0].id} is already in {out[0].transistor.region}, "
                         "so no signal passes unclipped")
            estimate = "0 V (likewise, from the load lines)"
        elif self.limiting_stage:
            gain_text = f"{_gain(gain)} V/V{decibels}"
            amplitude = f"{_fmt(self.max_source_amplitude, 'V')} peak, limited by {self.limiting_stage}"
        else:
            gain_text = f"{_gain(gain)} V/V{decibels}"
            amplitude = f"{_fmt(self.max_source_amplitude, 'V')} (no stage clips)"
        first, last = self.stages[0], self.stages[-1]
        figures = [
            ("gain (load / source EMF)", gain_text),
            ("input resistance", _small_signal(first, _fmt(self.input_resistance, "Ω"))),
            ("output resistance", _small_signal(last, _fmt(self.output_resistance, "Ω"))),
            ("largest source amplitude", amplitude),
            ("  load-line estimate", estimate),
            ("supply current", _fmt(self.supply_current, "A")),
            ("supply power", _fmt(self.supply_power, "W")),
        ]
        return figures

    def _batch_figures(self) -> list:
        """The chain figures of a batch: each as its range over the samples."""
        status = np.asarray(self.status)
        figures = [
            ("samples", f"{status.size} ({int(np.sum(status == 'ok'))} solved, "
                        f"{int(np.sum(self.all_forward_active))} all forward-active)"),
            ("gain (load / source EMF)", f"{_fmt(self.gain)} V/V"),
            ("input resistance", _fmt(self.input_resistance, "Ω")),
            ("output resistance", _fmt(self.output_resistance, "Ω")),
            ("largest source amplitude", _fmt(self.max_source_amplitude, "V")),
            ("  limited by", _fmt(np.asarray([str(s) for s in self.limiting_stage]))),
            ("supply current", _fmt(self.supply_current, "A")),
            ("supply power", _fmt(self.supply_power, "W")),
            ("samples with cautions", str(int(np.sum(self.cautions.any)))),
        ]
        return figures

    def __repr__(self) -> str:
        if self.batch_size is not None:
            return (f"PlanResult({self.model}, batch of {self.batch_size}, {len(self.stages)} stage(s))\n"
                    + self.summary())
        out = [f"PlanResult({self.model}, {len(self.stages)} stage(s), "
               f"{'all forward-active' if self.all_forward_active else 'NOT all forward-active'})",
               self.table(), "chain", self.summary(), "cautions"]
        out += [f"  - {c}" for c in self.cautions] or ["  none"]
        return "\n".join(out)

    def _repr_html_(self) -> str:
        e = html.escape
        head = tuple(h for h, _, _ in STAGE_COLUMNS)
        rows = []
        for s in self.stages:
            style = "" if s.transistor.region == "forward-active" and not s.cautions else " style='font-weight:bold'"
            rows.append(f"<tr{style}>" + "".join(f"<td>{e(cell(s))}</td>" for _, _, cell in STAGE_COLUMNS) + "</tr>")
        cautions = "".join(f"<li>{e(c)}</li>" for c in self.cautions)
        summary = _html_table([(name.strip(), value) for name, value in self.chain_figures()])
        return (f"<div><strong>Plan result ({e(self.model)})</strong><table><thead><tr>"
                + "".join(f"<th>{e(h)}</th>" for h in head) + "</tr></thead><tbody>" + "".join(rows)
                + f"</tbody></table><p><strong>Chain</strong></p>{summary}"
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
                "resistor_power": dict(self.resistor_power), "cautions": list(self.cautions)}

"""HTML of the live views and of the static record: plain functions of a plan and its result.

Shared by the widgets (:mod:`.views`), the static record and the command line's report, and free
of any widget library. Every value is shown in engineering notation; every text is escaped.
"""

from __future__ import annotations

import html
import math

from ..devices import PRESETS
from ..plan import PLAN_PARAMETERS
from ..units import format_quantity as fq

__all__ = ["stage_result_html", "summary_html", "status_html", "stage_values", "plan_values", "table",
           "preset_of", "REGION_WORDS", "CUSTOM_DEVICE", "STALE_HTML"]

#: The region of a transistor in words, as a designer reads it.
REGION_WORDS = {
    "forward-active": "forward-active: amplifying",
    "saturation": "SATURATED: both junctions forward-biased, no gain",
    "cutoff": "CUT OFF: no collector current",
    "reverse-active": "REVERSE-ACTIVE: collector and emitter swapped",
}
#: The preset choice when the stage's transistor is not one of the presets.
CUSTOM_DEVICE = "custom (the values below)"
#: Said above a view that shows the last good result of a plan that has changed since.
STALE_HTML = ("<p style='color:#a01a1a'><b>Last good result</b>: the plan as it is now did not settle; "
              "undo, or change a value.</p>")
#: The plan values shown in the plan editor and the report.
PLAN_VALUES = ("supply", "negative_supply", "source_resistance", "load_resistance", "temperature",
               "resistor_power_rating", "min_headroom")


def _e(text) -> str:
    return html.escape(str(text))


def table(rows, head=None) -> str:
    """A two-or-more-column HTML table of already formatted cells (every cell escaped)."""
    thead = ("<thead><tr>" + "".join(f"<th style='text-align:left'>{_e(h)}</th>" for h in head)
             + "</tr></thead>") if head else ""
    body = "".join("<tr>" + f"<th style='text-align:left;padding-right:1em'>{_e(row[0])}</th>"
                   + "".join(f"<td style='padding-right:1em'>{_e(c)}</td>" for c in row[1:]) + "</tr>"
                   for row in rows)
    return f"<table>{thead}<tbody>{body}</tbody></table>"


def gain_text(g) -> str:
    """A gain in V/V with its size in dB."""
    if g is None or not math.isfinite(g):
        return fq(g)
    db = f" ({20 * math.log10(abs(g)):.1f} dB)" if g != 0 else ""
    return f"{g:.4g} V/V{db}"


def cautions_html(cautions) -> str:
    if not cautions:
        return "<p>No cautions.</p>"
    return "<p><b>Cautions:</b></p><ul>" + "".join(f"<li>{_e(c)}</li>" for c in cautions) + "</ul>"


def preset_of(device) -> str:
    """The role of the preset equal to ``device``, or :data:`CUSTOM_DEVICE`."""
    for role, transistor in PRESETS.items():
        if transistor == device:
            return role
    return CUSTOM_DEVICE


def status_html(status, model: str) -> str:
    """A live plan's :class:`~ampplan.live.Status` in words (the ``ampplan-status`` line)."""
    if status.kind == "ok":
        return f"<span style='color:#1b5e20'>✓ solved ({_e(model)} model)</span>"
    words = {"refused": "refused (the plan is unchanged)",
             "unsettled": "not settled — the views show the last good result",
             "error": "a view failed"}[status.kind]
    return f"<span style='color:#a01a1a'><b>⚠ {_e(words)}</b>: {_e(status.message)}</span>"


def stage_result_html(plan, result, sid: str, current: bool = True) -> str:
    """One stage's result in words and figures: region, I_C, V_CE (V_EC for a PNP), both
    margins, the swing toward each limit, gain, R_in / R_out, dissipation, cautions."""
    if sid not in plan.stage_ids:
        return f"<p>Stage {_e(sid)} is no longer in the plan.</p>"
    if result is None or sid not in [s.id for s in result.stages]:
        return f"<p>Stage {_e(sid)} has no result yet.</p>"
    s = result.stage(sid)
    t = s.transistor
    pnp = t.polarity == "pnp"
    rows = [("region", REGION_WORDS.get(t.region, t.region)),
            ("I_C", fq(t.ic, "A")),
            ("V_EC" if pnp else "V_CE", fq(-t.vce if pnp else t.vce, "V")),
            ("headroom to saturation", fq(s.saturation_margin, "V")),
            ("margin to cutoff (I_C)", fq(s.cutoff_margin, "A")),
            ("swing toward saturation", f"{fq(s.swing.toward_saturation, 'V')} peak at the output"),
            ("swing toward cutoff", f"{fq(s.swing.toward_cutoff, 'V')} peak at the output"),
            ("gain v(out)/v(in)", gain_text(s.gain)),
            ("R_in / R_out", f"{fq(s.input_resistance, 'Ω')} / {fq(s.output_resistance, 'Ω')}"),
            ("dissipation", fq(s.dissipation, "W"))]
    return ("" if current else STALE_HTML) + table(rows) + cautions_html(s.cautions)


def summary_html(result, current: bool = True) -> str:
    """The chain figures: gain in V/V and dB, R_in, R_out, the largest source amplitude and the
    stage that limits it, supply current and power, the stages' regions, the model, cautions."""
    if result is None:
        return "<p>No result: the plan has not been solved.</p>"
    r = result
    if r.limiting_stage:
        amplitude = f"{fq(r.max_source_amplitude, 'V')} peak, limited by {r.limiting_stage}"
    else:
        amplitude = "no stage clips within the sweep"
    rows = [("gain (load / source EMF)", gain_text(r.gain)),
            ("input resistance", fq(r.input_resistance, "Ω")),
            ("output resistance", fq(r.output_resistance, "Ω")),
            ("largest source amplitude", amplitude),
            ("supply current", fq(r.supply_current, "A")),
            ("supply power", fq(r.supply_power, "W")),
            ("stages", ", ".join(f"{s.id} {s.region}" for s in r.stages)),
            ("model", r.model)]
    return ("" if current else STALE_HTML) + table(rows) + cautions_html(r.cautions)


def stage_values(plan, sid: str) -> list:
    """(name, value in engineering notation) of a stage's inputs: its parameters, device, coupling."""
    stage = plan.stage(sid)
    rows = [("stage", f"{sid} ({stage.kind})")]
    rows += [(name, "not fitted" if value is None else fq(value, stage.unit(name)))
             for name, value in stage.parameters().items()]
    device = stage.device
    rows += [("device", f"{preset_of(device)} ({device.polarity.upper()}, β {device.beta:g})"),
             ("coupling", plan.get(f"{sid}.coupling"))]
    return rows


def plan_values(plan) -> list:
    """(name, value) of the plan's own values."""
    rows = [(name, fq(plan.get(name), PLAN_PARAMETERS[name].unit)) for name in PLAN_VALUES]
    rows.append(("load_coupling", plan.load_coupling))
    return rows

"""``ampplan report``: one standalone HTML file that reads offline: the plan's tables, the canvas
picture (a PNG inside the file), the cautions and the safety note. No script, no stylesheet or
image from anywhere else, no network.

The picture is the notebook's static picture (:func:`ampplan.notebook.picture.draw_png`, matplotlib,
imported when a report is written), drawn from the analyses' plane data.
"""

from __future__ import annotations

import base64
import html
import os
import tempfile

from . import __version__
from .analyses.plane import plan_planes
from .notebook import tables

__all__ = ["report_html", "write_report", "SAFETY_NOTE"]

#: The safety note every report ends with (the README's, in short).
SAFETY_NOTE = (
    "ampplan computes DC bias, not safety. A supply above 60 V DC is outside the safety extra-low-voltage "
    "range: such a circuit can hurt or kill, and building or testing it calls for the insulation, enclosures "
    "and procedures that local electrical codes require. Transistors and resistors that dissipate more than "
    "their rating get hot enough to burn and can fail or start fires: check the dissipation figures against "
    "the parts' ratings, with temperature derating. Beyond low-voltage, low-power bench work, follow local "
    "codes and licensed professional practice rather than this program. The cautions above are a reminder, "
    "not an approval.")

_STYLE = """
body { font-family: sans-serif; max-width: 1100px; margin: 1.5em auto; color: #111; line-height: 1.35; }
table { border-collapse: collapse; margin: 0.4em 0 0.8em; }
th, td { border-bottom: 1px solid #ddd; padding: 2px 8px 2px 0; font-size: 92%; vertical-align: top; }
.stage { display: flex; gap: 2.5em; flex-wrap: wrap; }
.verdict-ok { color: #1b5e20; } .verdict-not-ok { color: #a01a1a; }
img { max-width: 100%; border: 1px solid #ccc; }
.safety { border-left: 4px solid #a01a1a; padding: 0.3em 1em; background: #fbf3f3; }
"""


def _e(text) -> str:
    return html.escape(str(text))


def verdict(result) -> tuple[bool, str]:
    """(all well, the verdict in words): every stage forward-active and no caution fired."""
    out = [s.id for s in result.stages if s.region != "forward-active"]
    if not out and not result.cautions:
        return True, "OK: every stage forward-active, no cautions"
    reasons = ([f"not forward-active: {', '.join(out)}"] if out else []) + (
        [f"{len(result.cautions)} caution{'s' if len(result.cautions) != 1 else ''}"] if result.cautions else [])
    return False, "NOT OK: " + "; ".join(reasons)


def report_html(plan, result, label: str) -> str:
    """The whole report as one HTML document (see the module docstring).

    Parameters
    ----------
    plan : Plan
    result : PlanResult
        ``plan`` solved.
    label : str
        What the plan is called in the heading (its file name, say).
    """
    from .notebook.picture import draw_png

    png = base64.b64encode(draw_png(plan_planes(result, plan), dpi=90)).decode("ascii")
    ok, words = verdict(result)
    parts = [
        "<!DOCTYPE html>", "<html lang='en'><head><meta charset='utf-8'>",
        f"<title>ampplan report: {_e(label)}</title><style>{_STYLE}</style></head><body>",
        f"<h1>ampplan report: {_e(label)}</h1>",
        f"<p>{_e(result.model)} model, {result.temperature:g} °C; ampplan {_e(__version__)}.</p>",
    ]
    if plan.description:
        parts.append(f"<p><i>{_e(plan.description)}</i></p>")
    parts += [f"<p class='{'verdict-ok' if ok else 'verdict-not-ok'}'><b>{_e(words)}</b></p>",
              "<h2>Plan</h2>", tables.table(tables.plan_values(plan)),
              "<h2>Chain</h2>", tables.summary_html(result),
              "<h2>Canvas</h2>",
              "<p>Each stage on its own I_C–V_CE plane (V_EC for a PNP): DC load line (solid), AC load line "
              "(dashed), Q-point, saturation strip and cutoff edge (grey), the usable swing along the AC load "
              "line (thick) with its limiting end (triangle), the rated-power curve (dotted) where it falls "
              "inside the panel; last, the swing each stage has against the swing the chain demands of it at "
              "the largest source amplitude.</p>",
              f"<p><img alt='The canvas: every stage on its I_C-V_CE plane, and the chain view' "
              f"src='data:image/png;base64,{png}'></p>",
              "<h2>Stages</h2>"]
    for sid in plan.stage_ids:
        stage = plan.stage(sid)
        parts += [f"<h3>Stage {_e(sid)}: {_e(stage.kind)}</h3><div class='stage'>",
                  "<div><p>Values</p>" + tables.table(tables.stage_values(plan, sid)) + "</div>",
                  "<div><p>Result</p>" + tables.stage_result_html(plan, result, sid) + "</div></div>"]
    parts += ["<h2>Cautions</h2>", tables.cautions_html(result.cautions),
              "<h2>Safety</h2>", f"<p class='safety'>{_e(SAFETY_NOTE)}</p>", "</body></html>"]
    return "\n".join(parts)


def write_report(plan, result, path, label: str) -> None:
    """Write :func:`report_html` to ``path`` atomically (a temporary file renamed over it)."""
    text = report_html(plan, result, label)
    folder = os.path.dirname(os.path.abspath(path))
    handle, temporary = tempfile.mkstemp(dir=folder, prefix=".ampplan-report-", suffix=".html")
    try:
        with os.fdopen(handle, "w", encoding="utf-8") as out:
            out.write(text)
        # mkstemp makes the file private; a report is an ordinary file (mode from the umask).
        mask = os.umask(0)
        os.umask(mask)
        os.chmod(temporary, 0o666 & ~mask)
        os.replace(temporary, path)
    except BaseException:
        if os.path.exists(temporary):
            os.unlink(temporary)
        raise

"""How the what-if views look, shared by their bokeh views (:mod:`.whatif`) and their static
pictures (PNG drawn in-process by matplotlib, here), both from the plain data of
:mod:`ampplan.analyses.whatif.pictures`.

This module imports neither bokeh nor matplotlib at import time (matplotlib inside the drawing
functions, through its object-oriented API and the Agg canvas only, as :mod:`.picture`).
"""

from __future__ import annotations

import io
import math

from .look import COLOURS

__all__ = ["display_scale", "SPAN_COLOURS", "SWEEP_COLOURS", "HISTOGRAM_COLOURS", "span_colour",
           "sweep_png", "tolerance_png", "axis_label", "y_limits", "span_label",
           "span_middle", "log_ticks"]

#: Shading of the spans of a sweep, by what they mark (the canvas's limit bands' greys, and a
#: light purple where the plan does not solve); each span is also stated in words.
SPAN_COLOURS = {"saturation": COLOURS["saturation"], "cutoff": COLOURS["cutoff"], "no solution": "#d9b3cc"}
#: Curve, marker and "now" line of the sweep.
SWEEP_COLOURS = {"curve": COLOURS["dc"], "now": COLOURS["qpoint"], "marker": COLOURS["ac"]}
#: Histogram bars: passing samples, failing samples (hatched too), the plan as it is (a line).
HISTOGRAM_COLOURS = {"passed": COLOURS["cloud"], "failed": COLOURS["cloud_failed"], "nominal": COLOURS["qpoint"]}

_PREFIXES = ((1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"), (1e-6, "µ"), (1e-9, "n"))


def span_label(span) -> str:
    """A span's short name on the picture: ``"s2 saturation"``, ``"no solution"``."""
    return f"{span.sid} {span.what}" if span.sid else span.what


def span_middle(span, log: bool) -> float:
    return math.sqrt(span.lo * span.hi) if log and span.lo > 0 else (span.lo + span.hi) / 2


def log_ticks(lo: float, hi: float) -> list:
    """Ticks of a logarithmic axis from ``lo`` to ``hi`` (display units): 1, 2, 5 in each decade,
    or every mantissa 1 … 9 when that gives fewer than four, so a designer reads 1 k, 2 k, 5 k, 10 k
    rather than a decade's end alone; empty when even that gives fewer than three."""
    if not (lo > 0 and hi > lo and math.isfinite(hi)):
        return []
    for mantissas in ((1, 2, 5), (1, 2, 3, 4, 5, 6, 7, 8, 9)):
        ticks = [m * 10.0 ** k for k in range(math.floor(math.log10(lo)), math.ceil(math.log10(hi)) + 1)
                 for m in mantissas]
        ticks = [float(f"{t:.6g}") for t in ticks if lo * (1 - 1e-9) <= t <= hi * (1 + 1e-9)]
        if len(ticks) >= 4:
            break
    return ticks if len(ticks) >= 3 else []   # a narrow range: the plotting library's own ticks


def span_colour(what: str) -> str:
    return SPAN_COLOURS.get(what, SPAN_COLOURS["saturation"])


def display_scale(values, unit: str) -> tuple:
    """(factor, unit label) to show ``values`` (SI) with an SI prefix: values × factor read in the
    label's unit, the largest magnitude between 1 and 1000. A ratio (unit ``""``) reads in V/V and
    °C is never prefixed."""
    if unit == "":
        return 1.0, "V/V"
    if unit == "°C":
        return 1.0, unit
    finite = [abs(v) for v in values if v is not None and math.isfinite(v)]
    top = max(finite) if finite else 0.0
    if top == 0.0:
        return 1.0, unit
    for size, prefix in _PREFIXES:
        if top >= size:
            return 1.0 / size, prefix + unit
    return 1e9, "n" + unit


def y_limits(values) -> tuple:
    """(low, high) of a value axis holding ``values`` with a margin; a flat curve gets ±5 % of its
    value (so rounding noise is not blown up to fill the panel)."""
    finite = [v for v in values if v is not None and math.isfinite(v)]
    if not finite:
        return 0.0, 1.0
    low, high = min(finite), max(finite)
    pad = 0.08 * (high - low)
    if pad <= 1e-6 * max(abs(low), abs(high)):
        pad = 0.05 * max(abs(low), abs(high)) or 1.0
    return low - pad, high + pad


def axis_label(name: str, unit_label: str) -> str:
    return f"{name} ({unit_label})" if unit_label else name


#: Colours of the static pictures' palette: plots of a few flat colours read the same with 64, and
#: the PNG is about a quarter of the size (a saved notebook must stay small).
PALETTE = 64


def _png(figure, dpi: int) -> bytes:
    from PIL import Image

    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", dpi=dpi, pil_kwargs={"compress_level": 1})
    image = Image.open(io.BytesIO(buffer.getvalue())).convert("RGB")
    small = io.BytesIO()
    image.quantize(colors=PALETTE, method=Image.Quantize.MEDIANCUT).save(small, format="PNG", optimize=True)
    return small.getvalue()


def _wrap(text: str, width: int) -> str:
    import textwrap
    return "\n".join(textwrap.wrap(text, width)) or " "


def sweep_png(picture, stale: bool = False, dpi: int = 80) -> bytes:
    """The sweep view as a PNG: one panel per curve, sharing the swept axis, spans shaded."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.ticker import NullFormatter

    rows = len(picture.curves)
    figure = Figure(figsize=(7.0, 0.6 + 2.0 * rows), dpi=dpi)
    FigureCanvasAgg(figure)
    axes = figure.subplots(rows, 1, squeeze=False, sharex=True,
                           gridspec_kw=dict(left=0.12, right=0.97, top=1 - 0.45 / (0.6 + 2.0 * rows),
                                            bottom=0.55 / (0.6 + 2.0 * rows), hspace=0.35))[:, 0]
    x_factor, x_unit = display_scale(picture.x, picture.unit)
    xs = [v * x_factor for v in picture.x]
    for ax, curve in zip(axes, picture.curves):
        factor, unit = display_scale(curve.y, curve.unit)
        for span in picture.spans:
            ax.axvspan(span.lo * x_factor, span.hi * x_factor, color=span_colour(span.what), alpha=0.45,
                       linewidth=0, hatch="//" if span.sid is None else None)
        ax.plot(xs, [y * factor for y in curve.y], color=SWEEP_COLOURS["curve"], linewidth=1.6)
        ax.axvline(picture.current * x_factor, color=SWEEP_COLOURS["now"], linestyle="--", linewidth=1.0)
        if math.isfinite(curve.current):
            ax.plot([picture.current * x_factor], [curve.current * factor], "o", color=SWEEP_COLOURS["marker"],
                    markersize=7, zorder=5)
        ax.set_ylabel(axis_label(curve.address, unit), fontsize=8)
        ax.set_ylim(*y_limits([y * factor for y in curve.y] + [curve.current * factor]))
        ax.ticklabel_format(axis="y", useOffset=False)
        ax.grid(True, linewidth=0.3, alpha=0.6)
        if picture.log:
            ax.set_xscale("log")
            ticks = log_ticks(xs[0], xs[-1])
            if ticks:
                ax.set_xticks(ticks, [f"{t:g}" for t in ticks])
                ax.xaxis.set_minor_formatter(NullFormatter())
        ax.set_xlim(xs[0], xs[-1])
        if stale:
            ax.set_facecolor(COLOURS["stale"])
    for span in picture.spans:   # each span named on the top panel (and in words beside the picture)
        axes[0].text(span_middle(span, picture.log) * x_factor, 0.97, span_label(span), fontsize=7, ha="center",
                     va="top", transform=axes[0].get_xaxis_transform(), clip_on=True,
                     bbox=dict(facecolor="white", alpha=0.75, linewidth=0, pad=1))
    axes[-1].set_xlabel(axis_label(picture.address, x_unit))
    title = ("STALE: " if stale else "") + picture.title
    figure.suptitle(_wrap(title, 90), fontsize=9, x=0.02, ha="left")
    return _png(figure, dpi)


def tolerance_png(picture, dpi: int = 80, columns: int = 3) -> bytes:
    """The tolerance view's histograms as a PNG (passing samples stacked under failing ones)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    count = len(picture.histograms)
    columns = min(columns, count)
    rows = math.ceil(count / columns)
    figure = Figure(figsize=(3.4 * columns, 0.5 + 2.3 * rows), dpi=dpi)
    FigureCanvasAgg(figure)
    axes = figure.subplots(rows, columns, squeeze=False,
                           gridspec_kw=dict(left=0.07, right=0.98, top=1 - 0.55 / (0.5 + 2.3 * rows),
                                            bottom=0.45 / (0.5 + 2.3 * rows), wspace=0.3, hspace=0.75)).ravel()
    for ax, h in zip(axes, picture.histograms):
        factor, unit = display_scale(h.edges, h.unit)
        edges = [e * factor for e in h.edges]
        widths = [b - a for a, b in zip(edges[:-1], edges[1:])]
        ax.bar(edges[:-1], h.passed, widths, align="edge", color=HISTOGRAM_COLOURS["passed"], label="pass")
        ax.bar(edges[:-1], h.failed, widths, bottom=h.passed, align="edge", color=HISTOGRAM_COLOURS["failed"],
               hatch="xx", edgecolor="white", linewidth=0, label="fail")
        if math.isfinite(h.nominal):
            ax.axvline(h.nominal * factor, color=HISTOGRAM_COLOURS["nominal"], linestyle="--", linewidth=1.0,
                       label="plan as it is")
        ax.set_title(axis_label(h.address, unit), fontsize=8, loc="left")
        ax.tick_params(labelsize=7)
        ax.grid(True, axis="y", linewidth=0.3, alpha=0.6)
    handles, labels = axes[0].get_legend_handles_labels()
    figure.legend(handles, labels, fontsize=7, loc="upper right", ncol=3, frameon=False)
    for ax in axes[count:]:
        ax.set_visible(False)
    figure.suptitle(_wrap(picture.title + f": yield {100 * picture.yield_fraction:.1f} %", 95), fontsize=9,
                    x=0.02, ha="left")
    return _png(figure, dpi)

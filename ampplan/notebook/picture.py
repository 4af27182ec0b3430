"""The static picture of the canvas: a PNG drawn in-process by matplotlib from the same layers the
bokeh canvas draws (:mod:`.look`), for the design record (saved notebooks, the HTML report).

matplotlib is imported when a picture is first drawn, never at import time, and only through its
object-oriented API with the Agg canvas (no pyplot, no global backend state).
"""

from __future__ import annotations

import io
import math

from ..analyses.plane import PlanPlanes
from .look import STALE_NOTE, chain_layers, current_scale, stage_layers

__all__ = ["draw_png", "COLUMNS"]

#: Panels per row of the picture.
COLUMNS = 3
_DASH = {"solid": "-", "dashed": "--", "dotted": ":"}
_MARKER = {"circle": "o", "triangle": "^", "x": "x"}


def _draw_stage(ax, plane, stale: bool, cloud=None):
    scale, unit = current_scale(plane.i_max)
    for layer in stage_layers(plane, cloud):
        if not layer.x:
            continue
        if layer.kind == "band":
            ax.fill(layer.x, layer.y, color=layer.colour, alpha=0.45, linewidth=0, label=layer.label)
        elif layer.kind == "line":
            ax.plot(layer.x, layer.y, _DASH[layer.dash], color=layer.colour, linewidth=layer.width * 0.8,
                    label=layer.label, solid_capstyle="butt")
        else:
            ax.plot(layer.x, layer.y, linestyle="none", marker=_MARKER[layer.marker], color=layer.colour,
                    markersize=layer.width * 0.8, label=layer.label or None, alpha=layer.alpha,
                    markeredgewidth=0 if layer.marker == "circle" and layer.alpha < 1 else None,
                    zorder=3 if layer.name.startswith("cloud") else 5)
    ax.set_xlim(0.0, plane.v_max)
    ax.set_ylim(-0.04 * plane.i_max * scale, plane.i_max * scale)
    ax.set_xlabel(f"{plane.voltage_label} (V)")
    ax.set_ylabel(f"{plane.current_label} ({unit})")
    title = _wrap(plane.title, 44)
    if stale:
        title = STALE_NOTE + "\n" + title
        ax.set_facecolor("#eeeeee")
    ax.set_title(title, fontsize=8, loc="left")
    ax.grid(True, linewidth=0.3, alpha=0.6)
    ax.legend(fontsize=6, loc="upper right", framealpha=0.85)


def _draw_chain(ax, chain, stale: bool):
    have, need = chain_layers(chain)
    width = 0.38
    ax.bar([x - width / 2 for x in have.x], have.y, width, color=have.colour, label=have.label)
    ax.bar([x + width / 2 for x in need.x], need.y, width, color=need.colour, label=need.label, hatch="//",
           edgecolor="white")
    ax.set_xticks(list(have.x), list(chain.sids))
    ax.set_ylabel("volts peak at the stage output")
    title = _wrap(chain.title, 44)
    if stale:
        title = STALE_NOTE + "\n" + title
        ax.set_facecolor("#eeeeee")
    ax.set_title(title, fontsize=8, loc="left")
    # Headroom above the tallest bar for the legend, so that it never covers a bar.
    top = max([*have.y, *need.y, 1e-3])
    ax.set_ylim(0.0, top * 1.45)
    ax.legend(fontsize=6, loc="upper center", framealpha=0.85)
    ax.grid(True, axis="y", linewidth=0.3, alpha=0.6)


def _wrap(text: str, width: int) -> str:
    import textwrap
    return "\n".join(textwrap.wrap(text, width)) or " "


def draw_png(planes: PlanPlanes, stale: bool = False, dpi: int = 80, clouds=None) -> bytes:
    """The whole canvas as PNG bytes: one panel per stage, then the chain view.

    Parameters
    ----------
    planes : PlanPlanes
        From :func:`ampplan.analyses.plane.plan_planes`.
    stale : bool
        Grey the panels and say so in each title (the plan as it is did not settle).
    dpi : int
        Dots per inch (the picture is 4.2 × 3.6 inches per panel).
    clouds : dict of str -> StageCloud, optional
        A tolerance run's sampled Q-points per stage id, drawn on each panel.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    count = len(planes.stages) + 1
    columns = min(COLUMNS, count)
    rows = math.ceil(count / columns)
    # Fixed margins rather than a layout engine: the titles and labels have a known size, and
    # measuring every text for a constrained layout cost more than the drawing itself.
    figure = Figure(figsize=(4.2 * columns, 3.6 * rows), dpi=dpi)
    FigureCanvasAgg(figure)
    axes = figure.subplots(rows, columns, squeeze=False,
                           gridspec_kw=dict(left=0.07 / columns * 3, right=0.98, bottom=0.08 / rows * 2,
                                            top=1 - 0.11 / rows * 2, wspace=0.3, hspace=0.42 * rows / 2))
    axes = axes.ravel()
    for ax, plane in zip(axes, planes.stages):
        _draw_stage(ax, plane, stale, (clouds or {}).get(plane.sid))
    _draw_chain(axes[len(planes.stages)], planes.chain, stale)
    for ax in axes[count:]:
        ax.set_visible(False)
    buffer = io.BytesIO()
    # Flat colours compress well even at the fastest level; the default level took longer than
    # drawing.
    figure.savefig(buffer, format="png", dpi=dpi, pil_kwargs={"compress_level": 1})
    return _palette_png(buffer.getvalue())


#: Colours kept in the saved picture: flat fills, a few line colours and the text's anti-aliasing.
PALETTE_COLOURS = 128


def _palette_png(png: bytes) -> bytes:
    """The picture with a palette of :data:`PALETTE_COLOURS` colours: about a third of the bytes
    (each view's picture is stored in the notebook once per refresh point), no visible change."""
    from PIL import Image  # Pillow comes with matplotlib

    image = Image.open(io.BytesIO(png)).convert("RGB").quantize(colors=PALETTE_COLOURS,
                                                                method=Image.Quantize.MEDIANCUT)
    out = io.BytesIO()
    image.save(out, format="PNG", optimize=True)
    return out.getvalue()

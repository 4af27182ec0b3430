"""One description of what the canvas draws, shared by its two renderers.

The bokeh canvas (:mod:`.canvas`) and the static matplotlib picture (:mod:`.picture`) both draw the
layers returned here, with the same colours, line styles and labels, from the analyses' plane data
(:mod:`ampplan.analyses.plane`). Neither renderer computes anything of its own.

Palette: our own choice, checked to stay apart for the common colour-vision deficiencies by
keeping the hues far apart in lightness as well as hue (deep blue, orange, bluish green, reddish
purple, near-black); every layer is also told apart by its line style or marker, and the region
and cautions are written in each panel's title, never shown by colour alone.

This module imports neither bokeh nor matplotlib.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from ..analyses.plane import ChainPlane, StagePlane
from ..units import format_quantity

__all__ = ["Layer", "COLOURS", "stage_layers", "chain_layers", "current_scale", "STALE_NOTE",
           "LAYER_NAMES", "KEY", "key_html", "cloud_layers"]

#: Colours by what they mark (hex RGB).
COLOURS = {
    "dc": "#1b4f8c",          # deep blue, solid
    "ac": "#d4740f",          # orange, dashed
    "qpoint": "#111111",      # near-black dot
    "swing": "#138a6e",       # bluish green, thick
    "limit": "#b0307a",       # reddish purple triangle at the limiting end
    "power": "#6b4c9a",       # violet, dotted
    "saturation": "#9a9a9a",  # grey band
    "cutoff": "#c8c8c8",      # light grey band
    "available": "#138a6e",
    "demanded": "#d4740f",
    "stale": "#e6e6e6",
    "cloud": "#3d7fc4",        # mid blue dots: tolerance samples that pass
    "cloud_failed": "#b0307a",  # reddish purple crosses: samples that fail
    "cloud_stale": "#9a9a9a",   # grey: a run made before the latest edit
}

#: The layers of a stage panel, in drawing order (their data sources are ampplan-<sid>-<name>).
LAYER_NAMES = ("saturation", "cutoff", "cloud", "cloud_failed", "power", "dc", "ac", "swing", "limit", "qpoint")

#: Said in every panel's title while the canvas shows the last good result of a changed plan.
STALE_NOTE = "LAST GOOD RESULT (the plan as it is now did not settle)"


@dataclass(frozen=True)
class Layer:
    """One thing to draw: a band, a line or markers, in display units (volts, scaled current).

    Attributes
    ----------
    name : str
        What it is (one of :data:`LAYER_NAMES`, or ``"chain"``).
    kind : {"band", "line", "markers"}
    x, y : tuple of float
        Band: the polygon's corners. Line: its points. Markers: the points.
    text : tuple of str
        One hover text per point, in engineering notation.
    colour : str
    dash : {"solid", "dashed", "dotted"}
    width : float
        Line width or marker size, in points.
    marker : str
        ``"circle"``, ``"triangle"`` or ``"x"`` for markers.
    label : str
        Legend text.
    alpha : float
        Opacity (the tolerance clouds are translucent, so dense parts read darker).
    """
    name: str
    kind: str
    x: tuple
    y: tuple
    text: tuple
    colour: str
    dash: str = "solid"
    width: float = 2.0
    marker: str = "circle"
    label: str = ""
    alpha: float = 1.0


def current_scale(i_max: float) -> tuple[float, str]:
    """(factor, axis unit) so that currents up to ``i_max`` amperes read in µA, mA or A."""
    if not math.isfinite(i_max) or i_max >= 1.0:
        return 1.0, "A"
    if i_max >= 1e-3:
        return 1e3, "mA"
    return 1e6, "µA"


def _next_decade(x: float) -> float:
    """The power of ten at or above ``x`` (> 0), times ten."""
    if not (math.isfinite(x) and x > 0):
        return 1.0
    return 10.0 ** (math.ceil(math.log10(x)) + 1)


def _point_text(plane: StagePlane, what: str, v: float, i: float) -> str:
    return (f"{what}: {plane.voltage_label} = {format_quantity(v, 'V')}, "
            f"{plane.current_label} = {format_quantity(i, 'A')}")


def _line(plane, name, segment, scale, label, what):
    if segment is None or math.isnan(segment.v0):
        return Layer(name, "line", (), (), (), COLOURS[name], label=label)
    xs, ys = segment.v, segment.i
    return Layer(name, "line", tuple(xs), tuple(y * scale for y in ys),
                 tuple(_point_text(plane, what, v, i) for v, i in zip(xs, ys)), COLOURS[name],
                 dash="dashed" if name == "ac" else "solid", width=2.0, label=label)


def cloud_layers(plane: StagePlane, cloud=None) -> tuple:
    """The two cloud layers of a stage panel: a tolerance run's sampled Q-points that pass (dots)
    and that fail (crosses), from a :class:`~ampplan.analyses.whatif.pictures.StageCloud`, scaled
    like the panel; both empty without a run. A run made before the latest edit is grey and says so."""
    scale, _ = current_scale(plane.i_max)
    if cloud is None or not cloud.v:
        return (Layer("cloud", "markers", (), (), (), COLOURS["cloud"], width=3.0, label="", alpha=0.35),
                Layer("cloud_failed", "markers", (), (), (), COLOURS["cloud_failed"], width=5.0, marker="x",
                      label="", alpha=0.7))
    shown = len(cloud.v)
    of = f" of {cloud.total} drawn" if shown < cloud.total else ""
    when = ", earlier plan" if cloud.stale else ""
    layers = []
    for name, keep, marker, width, alpha in (("cloud", True, "circle", 3.0, 0.35),
                                              ("cloud_failed", False, "x", 5.0, 0.7)):
        points = [(v, i) for v, i, p in zip(cloud.v, cloud.i, cloud.passed) if p == keep]
        colour = COLOURS["cloud_stale"] if cloud.stale else COLOURS[name]
        label = f"tolerance samples, {'pass' if keep else 'fail'} ({len(points)}{of}{when})" if points else ""
        layers.append(Layer(name, "markers", tuple(v for v, _ in points), tuple(i * scale for _, i in points),
                            ("",) * len(points), colour, width=width, marker=marker, label=label, alpha=alpha))
    return tuple(layers)


def stage_layers(plane: StagePlane, cloud=None) -> tuple:
    """The layers of one stage's panel (see :data:`LAYER_NAMES`), currents scaled by
    :func:`current_scale` of the panel's ``i_max``; ``cloud`` a tolerance run's samples of the stage
    (:func:`cloud_layers`)."""
    scale, _ = current_scale(plane.i_max)
    # The bands reach past the panel to the next decade, so they do not move while a value is
    # dragged (each renderer clips them to its axes).
    v_max, i_top = _next_decade(plane.v_max), _next_decade(plane.i_max * scale)
    edge = max(plane.saturation_edge, 0.0)
    low = -i_top
    layers = [
        Layer("saturation", "band", (0.0, edge, edge, 0.0), (low, low, i_top, i_top),
              (f"saturation: {plane.voltage_label} below {format_quantity(plane.saturation_edge, 'V')}",) * 4,
              COLOURS["saturation"], label=f"saturation ({plane.voltage_label} < "
                                           f"{format_quantity(plane.saturation_edge, 'V')})"),
        Layer("cutoff", "band", (0.0, v_max, v_max, 0.0), (low, low, 0.0, 0.0),
              ("cutoff: I_C = 0",) * 4, COLOURS["cutoff"], label="cutoff (I_C = 0)"),
        *cloud_layers(plane, cloud),
    ]
    if plane.power_v:
        rating = format_quantity(plane.power_rating, "W")
        layers.append(Layer("power", "line", tuple(plane.power_v), tuple(i * scale for i in plane.power_i),
                            tuple(f"rated power {rating}: {plane.voltage_label} = {format_quantity(v, 'V')}, "
                                  f"I_C = {format_quantity(i, 'A')}" for v, i in zip(plane.power_v, plane.power_i)),
                            COLOURS["power"], dash="dotted", width=2.0, label=f"rated power {rating}"))
    else:
        layers.append(Layer("power", "line", (), (), (), COLOURS["power"], dash="dotted",
                            label="rated power (off the chart)" if plane.power_rating else "no power rating"))
    layers.append(_line(plane, "dc", plane.dc_line, scale,
                        f"DC load line {format_quantity(plane.dc_resistance, 'Ω')}", "DC load line end"))
    layers.append(_line(plane, "ac", plane.ac_line, scale,
                        f"AC load line {format_quantity(plane.ac_resistance, 'Ω')}", "AC load line end"))
    swing = plane.usable_swing
    if math.isnan(swing.v0):
        layers.append(Layer("swing", "line", (), (), (), COLOURS["swing"], width=6.0, label="no swing"))
        layers.append(Layer("limit", "markers", (), (), (), COLOURS["limit"], width=11.0, marker="triangle",
                            label="limiting end"))
    else:
        peak = min(plane.output_swing_toward_saturation, plane.output_swing_toward_cutoff)
        layers.append(Layer("swing", "line", swing.v, tuple(i * scale for i in swing.i),
                            tuple(_point_text(plane, "symmetric swing end", v, i) for v, i in zip(swing.v, swing.i)),
                            COLOURS["swing"], width=6.0,
                            label=f"usable swing {format_quantity(peak, 'V')} peak at the output"))
        end = plane.swing_toward_saturation if plane.limiting_side == "saturation" else plane.swing_toward_cutoff
        toward = (plane.output_swing_toward_saturation if plane.limiting_side == "saturation"
                  else plane.output_swing_toward_cutoff)
        layers.append(Layer("limit", "markers", (end.v1,), (end.i1 * scale,),
                            (f"limits first: {plane.limiting_side} after {format_quantity(toward, 'V')} peak "
                             f"at the output; " + _point_text(plane, "edge", end.v1, end.i1),),
                            COLOURS["limit"], width=11.0, marker="triangle",
                            label=f"limiting side: {plane.limiting_side}"))
    layers.append(Layer("qpoint", "markers", (plane.q_v,), (plane.q_i * scale,),
                        (_point_text(plane, f"Q-point ({plane.region})", plane.q_v, plane.q_i)
                         + f", dissipation {format_quantity(plane.dissipation, 'W')}",),
                        COLOURS["qpoint"], width=9.0, label="Q-point"))
    return tuple(layers)


def chain_layers(chain: ChainPlane) -> tuple:
    """Two bar layers of the chain view: the swing each stage has and the swing demanded of it
    at the largest source amplitude (volts peak at each stage output; x is the stage's index)."""
    index = tuple(float(k) for k in range(len(chain.sids)))
    have = Layer("available", "markers", index, tuple(chain.available),
                 tuple(f"{sid} passes {format_quantity(v, 'V')} peak" for sid, v in zip(chain.sids, chain.available)),
                 COLOURS["available"], label="swing the stage has")
    need = Layer("demanded", "markers", index, tuple(0.0 if math.isnan(v) else v for v in chain.demanded),
                 tuple(f"{sid} must pass {format_quantity(v, 'V')} peak at the largest source amplitude"
                       for sid, v in zip(chain.sids, chain.demanded)),
                 COLOURS["demanded"], label="swing demanded at the largest source amplitude")
    return have, need


#: The key of a stage panel: what each layer means, in the panels' drawing style (symbol, words).
KEY = (
    ("dc", "━━", "DC load line"),
    ("ac", "╍╍", "AC load line"),
    ("qpoint", "●", "Q-point"),
    ("swing", "▬▬", "usable swing along the AC load line"),
    ("limit", "▲", "the side that limits it"),
    ("power", "┈┈", "rated power"),
    ("saturation", "▨", "saturation (hatched) and cutoff (grey) edges"),
    ("cloud", "•", "tolerance samples that pass"),
    ("cloud_failed", "✕", "and fail (after live.tolerance_view)"),
)


def key_html() -> str:
    """One line of HTML naming every layer of a stage panel with its colour and symbol (the bokeh
    panels carry no legend of their own: it would cover the load lines)."""
    import html
    items = [f"<span style='color:{COLOURS[name]};font-weight:bold'>{symbol}</span>&nbsp;{html.escape(words)}"
             for name, symbol, words in KEY]
    return ("<div class='ampplan-canvas-key' style='font-size:85%;line-height:1.6'>"
            + " &nbsp;·&nbsp; ".join(items) + "; hover over a point for its values.</div>")

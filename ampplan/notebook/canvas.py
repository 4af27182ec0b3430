"""The bokeh canvas: one panel per stage (its I_C–V_CE plane) and the chain view, in one layout.

Figures are made once per stage and kept; an edit replaces each data source's ``.data`` in one step
(all columns at once, as plain lists) and sets the titles and ranges, and never rebuilds a figure.
Only what changed is sent: every property or data change is one message to the browser, so a
source whose data is the same, a title that says the same, and a range that still holds the
panel are left alone (the axes also stay put while a slider moves, unless the panel outgrows
them or shrinks to less than half of them).
Adding or removing a stage adds or drops that stage's figure from the layout. Data sources are
named ``ampplan-<sid>-<layer>`` (``ampplan-s1-qpoint``) and ``ampplan-chain-<layer>``, so a browser
can find them with ``Bokeh.documents[i].get_model_by_name(...)``.
"""

from __future__ import annotations

import numpy as np
from bokeh.layouts import column, row
from bokeh.models import ColumnDataSource, FactorRange, HoverTool, Legend, LegendItem, Range1d
from bokeh.transform import dodge
from bokeh.plotting import figure

from ..analyses.plane import PlanPlanes, StagePlane
from .look import COLOURS, LAYER_NAMES, STALE_NOTE, chain_layers, current_scale, stage_layers

__all__ = ["Canvas", "PANEL_WIDTH", "PANEL_HEIGHT", "COLUMNS"]

PANEL_WIDTH, PANEL_HEIGHT = 330, 300
#: Panels per row.
COLUMNS = 3
_EMPTY = {"x": [], "y": [], "text": []}


def _wrap(text: str, width: int = 48) -> str:
    import textwrap
    return "\n".join(textwrap.wrap(text, width)) or " "


def _data(layer) -> dict:
    # Plain lists, not numpy arrays: a layer has a handful of points (the power curve a few dozen),
    # and every numpy column would travel to the browser as a binary buffer of its own, two comm
    # messages each, where lists ride inside the one patch message.
    return {"x": [float(v) for v in layer.x], "y": [float(v) for v in layer.y], "text": list(layer.text)}


#: Relative difference below which a coordinate counts as unchanged: the solver's rounding moves
#: values by a few parts in 1e16 between solves of the same operating point.
_SAME = 1e-12


def _same_data(old: dict, new: dict) -> bool:
    if old.keys() != new.keys():
        return False
    for key, value in new.items():
        before = old[key]
        if len(before) != len(value):
            return False
        if key == "text" or key == "x" and len(value) and isinstance(value[0], str):
            if list(before) != list(value):
                return False
        elif not np.allclose(np.asarray(before, dtype=float), value, rtol=_SAME, atol=0.0, equal_nan=True):
            return False
    return True


def _put(source: ColumnDataSource, data: dict) -> None:
    """Replace ``source.data`` in one step, unless it already holds the same."""
    if not _same_data(source.data, data):
        source.data = data


def _set(model, **properties) -> None:
    """Set the properties that differ from the model's (each change is a message)."""
    changed = {k: v for k, v in properties.items() if getattr(model, k) != v}
    if changed:
        model.update(**changed)


def _hold(current_start: float, current_end: float, low: float, high: float) -> tuple:
    """A range that holds [low, high]: the current one while it does and is not more than twice as
    wide, else the new extent."""
    width = current_end - current_start
    if current_start <= low and high <= current_end and (high - low) >= 0.5 * width:
        return current_start, current_end
    return low, high


class _StagePanel:
    """One stage's figure and its named data sources."""

    def __init__(self, sid: str):
        self.sid = sid
        # No toolbar tools but hover: every model in the document costs time on every change.
        self.figure = figure(width=PANEL_WIDTH, height=PANEL_HEIGHT, toolbar_location=None, tools="",
                             x_range=Range1d(0, 1), y_range=Range1d(0, 1), name=f"ampplan-{sid}-panel")
        self.figure.title.text_font_size = "9pt"
        self.sources = {name: ColumnDataSource(data=dict(_EMPTY), name=f"ampplan-{sid}-{name}")
                        for name in LAYER_NAMES}
        self.renderers = {}
        f, s = self.figure, self.sources
        self.renderers["saturation"] = f.patch("x", "y", source=s["saturation"], color=COLOURS["saturation"],
                                               alpha=0.45, hatch_pattern="/", hatch_color="#666666",
                                               hatch_alpha=0.5)
        self.renderers["cutoff"] = f.patch("x", "y", source=s["cutoff"], color=COLOURS["cutoff"], alpha=0.6)
        # A tolerance run's sampled Q-points (empty until one is run; see Canvas.set_clouds).
        self.renderers["cloud"] = f.scatter("x", "y", source=s["cloud"], color=COLOURS["cloud"], size=4,
                                            alpha=0.35, line_color=None)
        self.renderers["cloud_failed"] = f.scatter("x", "y", source=s["cloud_failed"], color=COLOURS["cloud_failed"],
                                                   size=6, marker="x", alpha=0.7)
        self.renderers["power"] = f.line("x", "y", source=s["power"], color=COLOURS["power"], line_width=2,
                                         line_dash="dotted")
        self.renderers["dc"] = f.line("x", "y", source=s["dc"], color=COLOURS["dc"], line_width=2)
        self.renderers["ac"] = f.line("x", "y", source=s["ac"], color=COLOURS["ac"], line_width=2,
                                      line_dash="dashed")
        self.renderers["swing"] = f.line("x", "y", source=s["swing"], color=COLOURS["swing"], line_width=6,
                                         line_cap="butt")
        self.renderers["limit"] = f.scatter("x", "y", source=s["limit"], color=COLOURS["limit"], size=13,
                                            marker="triangle")
        self.renderers["qpoint"] = f.scatter("x", "y", source=s["qpoint"], color=COLOURS["qpoint"], size=10)
        f.add_tools(HoverTool(renderers=[self.renderers[n] for n in ("qpoint", "limit", "swing", "dc", "ac",
                                                                      "power")],
                              tooltips=[("", "@text")]))

    def update(self, plane: StagePlane, stale: bool, cloud=None):
        scale, unit = current_scale(plane.i_max)
        for layer in stage_layers(plane, cloud):
            _put(self.sources[layer.name], _data(layer))
            if layer.name.startswith("cloud") and layer.x:
                glyph = self.renderers[layer.name].glyph
                _set(glyph, fill_color=layer.colour, line_color=None if layer.marker == "circle" else layer.colour)
        f = self.figure
        if unit != getattr(self, "_unit", None):  # another scale: the old range means nothing
            f.y_range.update(start=0.0, end=0.0)
            self._unit = unit
        _set(f.x_range, **dict(zip(("start", "end"), _hold(f.x_range.start, f.x_range.end, 0.0, plane.v_max))))
        top = plane.i_max * scale
        _set(f.y_range, **dict(zip(("start", "end"), _hold(f.y_range.start, f.y_range.end, -0.04 * top, top))))
        _set(f.xaxis[0], axis_label=f"{plane.voltage_label} (V)")
        _set(f.yaxis[0], axis_label=f"{plane.current_label} ({unit})")
        _set(f.title, text=_wrap((STALE_NOTE + ": " if stale else "") + plane.title))
        _set(f, background_fill_color=COLOURS["stale"] if stale else "#ffffff")


class _ChainPanel:
    """The chain view: for each stage, the swing it has beside the swing the chain demands of it at
    the largest source amplitude (two bars per stage, the legend below the plot, clear of them)."""

    def __init__(self):
        self.figure = figure(width=PANEL_WIDTH, height=PANEL_HEIGHT + 50, toolbar_location=None, tools="",
                             x_range=FactorRange(factors=[]), y_range=Range1d(0, 1), name="ampplan-chain-panel")
        self.figure.title.text_font_size = "9pt"
        self.sources = {name: ColumnDataSource(data={"x": [], "y": [], "text": []}, name=f"ampplan-chain-{name}")
                        for name in ("available", "demanded")}
        have = self.figure.vbar(x=dodge("x", -0.2, range=self.figure.x_range), top="y", width=0.38,
                                source=self.sources["available"], color=COLOURS["available"])
        need = self.figure.vbar(x=dodge("x", 0.2, range=self.figure.x_range), top="y", width=0.38,
                                source=self.sources["demanded"], color=COLOURS["demanded"], hatch_pattern="/",
                                hatch_color="#ffffff")
        legend = Legend(items=[LegendItem(label="swing the stage has", renderers=[have]),
                               LegendItem(label="swing demanded at the largest source amplitude",
                                          renderers=[need])],
                        label_text_font_size="7pt", spacing=0, padding=2, margin=4)
        self.figure.add_layout(legend, "below")
        self.figure.xgrid.grid_line_color = None
        self.figure.yaxis.axis_label = "volts peak at the stage output"
        self.figure.add_tools(HoverTool(renderers=[have, need], tooltips=[("", "@text")]))

    def update(self, planes: PlanPlanes, stale: bool):
        chain = planes.chain
        have, need = chain_layers(chain)
        _set(self.figure.x_range, factors=list(chain.sids))
        for name, layer in (("available", have), ("demanded", need)):
            _put(self.sources[name], {"x": list(chain.sids), "y": [float(v) for v in layer.y],
                                      "text": list(layer.text)})
        top = max([*have.y, *need.y, 1e-3]) * 1.15
        _set(self.figure.y_range, **dict(zip(("start", "end"),
                                             _hold(self.figure.y_range.start, self.figure.y_range.end, 0.0, top))))
        _set(self.figure.title, text=_wrap((STALE_NOTE + ": " if stale else "") + chain.title))
        _set(self.figure, background_fill_color=COLOURS["stale"] if stale else "#ffffff")


class Canvas:
    """Every stage's panel and the chain view in one bokeh layout (shown through jupyter_bokeh).

    Attributes
    ----------
    layout : bokeh.models.Column
        The root model.
    panels : dict of str -> _StagePanel
        By stage id; each keeps its figure and its data sources for the life of the stage.
    """

    def __init__(self):
        self.panels: dict[str, _StagePanel] = {}
        self.chain = _ChainPanel()
        self.layout = column(children=[], name="ampplan-canvas-layout")
        self._order: tuple = ()
        #: A tolerance run's samples per stage id (StageCloud), drawn on each panel; see set_clouds.
        self.clouds: dict = {}
        self._last = None

    def source(self, sid: str, layer: str) -> ColumnDataSource:
        """The data source of one layer of one stage (``canvas.source("s1", "qpoint")``)."""
        return self.panels[sid].sources[layer]

    def update(self, planes: PlanPlanes, stale: bool = False) -> None:
        """Bring every panel to ``planes``: data replaced in one step per source; figures for new
        stages made, those of removed stages dropped."""
        order = tuple(p.sid for p in planes.stages)
        for sid in order:
            if sid not in self.panels:
                self.panels[sid] = _StagePanel(sid)
        for sid in [s for s in self.panels if s not in order]:
            del self.panels[sid]
        self._last = (planes, stale)
        for plane in planes.stages:
            self.panels[plane.sid].update(plane, stale, self.clouds.get(plane.sid))
        self.chain.update(planes, stale)
        if order != self._order:
            figures = [self.panels[sid].figure for sid in order] + [self.chain.figure]
            self.layout.children = [row(children=figures[k:k + COLUMNS]) for k in range(0, len(figures), COLUMNS)]
            self._order = order

    def set_clouds(self, clouds) -> None:
        """Draw a tolerance run's sampled Q-points (a sequence of StageCloud; empty to clear them)
        on every stage's panel; only the cloud sources change."""
        self.clouds = {c.sid: c for c in clouds}
        if self._last is not None:
            self.update(*self._last)

    def grey(self, note: str) -> None:
        """Grey every panel and say why in its title (the result shown is not the plan's)."""
        for panel in [*self.panels.values(), self.chain]:
            panel.figure.background_fill_color = COLOURS["stale"]
            if not panel.figure.title.text.startswith(STALE_NOTE):
                panel.figure.title.text = _wrap(f"{STALE_NOTE}: {note}; " + panel.figure.title.text.replace("\n", " "))

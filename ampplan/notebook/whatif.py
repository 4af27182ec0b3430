"""The what-if views of a live plan: a sweep view that follows every edit, and a tolerance view run
on demand whose sampled Q-points appear as clouds on the canvas.

Both render plain data computed below the notebook layer
(:mod:`ampplan.analyses.whatif.pictures`): bokeh figures in a widget (through
:class:`.bokehwidget.BatchedBokehModel`, one message per refresh) and, as their static record, an
HTML table and a PNG drawn by matplotlib from the same data (:mod:`.whatif_picture`).

Bokeh data sources are named for the browser: ``ampplan-sweep<N>-curve-<k>``,
``ampplan-sweep<N>-marker-<k>`` (the plan's current value on curve k), ``ampplan-sweep<N>-spans``;
``ampplan-tolerance-hist-<k>``. N counts the sweep views of the process from 1.

A saved notebook keeps every widget's state, bokeh documents included, and must stay small: the
views use as few bokeh models as they can (no selection or muted copies of the glyphs, lines
across a figure as annotations, one renderer per histogram).
"""

from __future__ import annotations

import html
import itertools
import math
import time

import ipywidgets as widgets
from bokeh.layouts import column, row
from bokeh.models import ColumnDataSource, FixedTicker, HoverTool, LabelSet, Range1d, Span
from bokeh.plotting import figure

from ..analyses.whatif.pictures import stale_clouds, sweep_picture, tolerance_picture
from ..errors import AmpplanError
from ..record.convert import plan_to_dict
from ..units import format_quantity
from .record import StaticRecord, html_block
from .tables import status_html as _status_words
from .whatif_picture import (HISTOGRAM_COLOURS, SWEEP_COLOURS, axis_label, display_scale, log_ticks, span_colour,
                             span_label, span_middle, sweep_png, tolerance_png, y_limits)

__all__ = ["SweepView", "ToleranceView", "Records", "HISTOGRAM_KEY"]

#: The key of the histograms (the bokeh figures carry no legend: it would cover the bars).
HISTOGRAM_KEY = (f"<div class='ampplan-tolerance-key' style='font-size:85%'>Histograms: "
                 f"<span style='color:{HISTOGRAM_COLOURS['passed']};font-weight:bold'>■</span> samples that "
                 f"pass, <span style='color:{HISTOGRAM_COLOURS['failed']};font-weight:bold'>▩</span> samples that "
                 f"fail (stacked, crossed), <span style='color:{HISTOGRAM_COLOURS['nominal']}'>┆</span> the plan "
                 "as it is.</div>")

_SERIAL = itertools.count(1)
_WIDTH = 620


def _e(text) -> str:
    return html.escape(str(text))


def _lean(renderer):
    """No glyph copies for selection (nothing is selectable) or muting (no legend to mute from)."""
    renderer.nonselection_glyph = None
    renderer.muted_glyph = None
    return renderer


def _r(value: float) -> float:
    """A value sent to the browser, to 7 significant digits: plenty for a picture, and the saved
    widget state of a notebook holds half the characters."""
    return float(f"{value:.7g}")


def _put(source, data: dict) -> None:
    if dict(source.data) != data:
        source.data = data


class Records:
    """A view's static record: an HTML part and a PNG part, each its own display output refreshed
    in place (see :class:`.record.StaticRecord`)."""

    def __init__(self, html_render, png_render):
        self.parts = (StaticRecord(html_render), StaticRecord(png_render))

    @property
    def shown(self) -> bool:
        return any(p.shown for p in self.parts)

    def show(self) -> None:
        for part in self.parts:
            part.show()

    def refresh(self) -> None:
        for part in self.parts:
            part.refresh()

    def _flush(self) -> None:
        for part in self.parts:
            if part.shown:
                part._flush()


#: In a live JupyterLab page the two static outputs right after a what-if view (its HTML and its
#: picture) would show everything twice: this rule, carried by the view, hides them. Where the view
#: does not render (a saved notebook without a kernel, nbconvert's HTML, a code host) the rule is
#: not on the page and the records show (as the other live views do, :data:`.views.LIVE_STYLE`).
LIVE_STYLE = ("<style>.jp-OutputArea-child:has(.ampplan-whatif-view) + .jp-OutputArea-child, "
              ".jp-OutputArea-child:has(.ampplan-whatif-view) + .jp-OutputArea-child + .jp-OutputArea-child "
              "{display: none;}</style>")


_STYLE: list = []


class _WhatIfView(widgets.VBox):
    record: Records

    def _start(self, children) -> None:
        # One hidden style widget shared by every what-if view (each widget is saved with the notebook).
        if not _STYLE:
            _STYLE.append(widgets.HTML(LIVE_STYLE, layout=widgets.Layout(display="none")))
        self._style = _STYLE[0]
        super().__init__(children=[*children, self._style])
        self.add_class("ampplan-whatif-view")

    def _ipython_display_(self):
        from IPython.display import display

        from .resources import ensure_bokehjs
        ensure_bokehjs()
        display(self._repr_mimebundle_(), raw=True)
        self.record.show()


class SweepView(_WhatIfView):
    """Curves of chosen results against one plan value, the plan's current value marked, the spans
    where a stage leaves forward-active shaded and stated in words; re-swept after every edit.

    Made by :meth:`ampplan.notebook.LivePlan.sweep_view`.

    Attributes
    ----------
    picture : SweepPicture
        The latest plain data drawn.
    sweep_seconds : float
        Wall time of the latest refresh's sweep (the batched solve and the picture data).
    """

    def __init__(self, live, address: str, lo, hi, n: int = 200, show=None):
        from .bokehwidget import BatchedBokehModel

        self.live = live
        self.address, self.lo, self.hi, self.n = address, lo, hi, n
        self.serial = next(_SERIAL)
        self.show = show
        self.picture = self._compute()  # raises, naming the culprit, before any widget is made
        self.show = tuple(c.address for c in self.picture.curves)
        self.refresh_count = 0
        self.stale = False
        name = f"ampplan-sweep{self.serial}"
        self.now = []   # one vertical line per figure at the plan's current value
        self.spans = ColumnDataSource(data={"x0": [], "x1": [], "xm": [], "label": [], "colour": [], "text": []},
                                      name=f"{name}-spans")
        self.curves, self.markers, self.figures = [], [], []
        x_range = Range1d(0, 1)
        for k, curve in enumerate(self.picture.curves):
            f = figure(width=_WIDTH, height=150 if k < len(self.picture.curves) - 1 else 175,
                       x_axis_type="log" if self.picture.log else "linear", x_range=x_range, y_range=Range1d(0, 1),
                       toolbar_location=None, tools="", name=f"{name}-figure-{k}")
            f.title.text_font_size = "9pt"
            strips = _lean(f.vstrip(x0="x0", x1="x1", source=self.spans, fill_color="colour", fill_alpha=0.45,
                                    line_color=None))
            now = Span(location=0.0, dimension="height", line_color=SWEEP_COLOURS["now"], line_dash="dashed",
                       line_width=1, name=f"{name}-now-{k}")
            f.add_layout(now)
            self.now.append(now)
            src = ColumnDataSource(data={"x": [], "y": []}, name=f"{name}-curve-{k}")
            mark = ColumnDataSource(data={"x": [], "y": [], "text": []}, name=f"{name}-marker-{k}")
            line = _lean(f.line("x", "y", source=src, color=SWEEP_COLOURS["curve"], line_width=2))
            dot = _lean(f.scatter("x", "y", source=mark, color=SWEEP_COLOURS["marker"], size=9))
            f.add_tools(HoverTool(renderers=[dot, strips], tooltips=[("", "@text")]))
            f.add_tools(HoverTool(renderers=[line], tooltips=[("", "(@x, @y)")], mode="vline"))
            if k == 0:   # each span named on the top panel (and in words under the view)
                f.add_layout(LabelSet(x="xm", y=4, y_units="screen", text="label", source=self.spans,
                                      text_font_size="8pt", text_align="center", text_color="#333333",
                                      background_fill_color="#ffffff", background_fill_alpha=0.75))
            self.curves.append(src)
            self.markers.append(mark)
            self.figures.append(f)
        self.x_range = x_range
        if self.picture.log:
            x_factor = display_scale(self.picture.x, self.picture.unit)[0]
            ticks = log_ticks(self.picture.x[0] * x_factor, self.picture.x[-1] * x_factor)
            if ticks:
                for f in self.figures:
                    f.xaxis.ticker = FixedTicker(ticks=ticks, minor_ticks=[])
        self.bokeh_layout = column(children=self.figures, name=f"{name}-layout")
        self._draw()
        self.plot = BatchedBokehModel(self.bokeh_layout)
        self.plot.add_class("ampplan-sweep-plot")
        self.words = widgets.HTML("")
        self.words.add_class("ampplan-sweep-words")
        self.status = widgets.HTML("")
        self.status.add_class("ampplan-status")
        self._start([self.status, self.plot, self.words])
        self.add_class("ampplan-sweep")
        self.add_class(f"ampplan-sweep{self.serial}")
        self.record = Records(self._record_html, self._record_png)
        self._texts()

    # -- computing --------------------------------------------------------------------------
    def _compute(self):
        live = self.live
        start = time.perf_counter()
        picture = sweep_picture(live.plan, self.address, self.lo, self.hi, self.n,
                                self.show, model=live.model,
                                result=live.result if live.result_is_current else None)
        self.sweep_seconds = time.perf_counter() - start
        return picture

    def refresh(self, change=None) -> None:
        """Re-sweep the live plan as it is now and redraw (an observer of every change)."""
        if change is not None and change.status.kind == "refused":
            return  # the plan did not change
        try:
            self.picture = self._compute()
        except AmpplanError as exc:
            # The swept value may be gone (its stage removed, its part no longer fitted): keep the
            # last curves, greyed, and say why; this is no failure of the view.
            self.stale = True
            self._grey(True)
            self.status.value = (f"<span style='color:#a01a1a'><b>⚠ The sweep cannot be redrawn</b>: {_e(exc)}; "
                                 "it shows the last sweep, greyed.</span>")
            self.record.refresh()
            return
        self.stale = False
        with self.plot.batch():
            self._draw()
            self._grey(False)
        self._texts()
        self.refresh_count += 1
        self.record.refresh()

    # -- drawing ----------------------------------------------------------------------------
    def _draw(self) -> None:
        p = self.picture
        x_factor, x_unit = display_scale(p.x, p.unit)
        xs = [v * x_factor for v in p.x]
        if (self.x_range.start, self.x_range.end) != (xs[0], xs[-1]):
            self.x_range.update(start=xs[0], end=xs[-1])
        _put(self.spans, {"x0": [s.lo * x_factor for s in p.spans], "x1": [s.hi * x_factor for s in p.spans],
                          "xm": [span_middle(s, p.log) * x_factor for s in p.spans],
                          "label": [span_label(s) for s in p.spans],
                          "colour": [span_colour(s.what) for s in p.spans], "text": [s.text for s in p.spans]})
        for now in self.now:
            if now.location != _r(p.current * x_factor):
                now.location = _r(p.current * x_factor)
        last = len(p.curves) - 1
        for k, (curve, f) in enumerate(zip(p.curves, self.figures)):
            factor, unit = display_scale(curve.y, curve.unit)
            ys = [y * factor for y in curve.y]
            _put(self.curves[k], {"x": [_r(x) for x in xs], "y": [_r(y) if math.isfinite(y) else math.nan for y in ys]})
            finite = [y for y in ys if math.isfinite(y)]
            if math.isfinite(curve.current):
                finite.append(curve.current * factor)
                text = (f"now: {p.address} = {format_quantity(p.current, p.unit)}, "
                        f"{curve.address} = {format_quantity(curve.current, curve.unit)}")
                _put(self.markers[k], {"x": [p.current * x_factor], "y": [curve.current * factor], "text": [text]})
            else:
                _put(self.markers[k], {"x": [], "y": [], "text": []})
            low, high = y_limits(finite)
            if (f.y_range.start, f.y_range.end) != (low, high):
                f.y_range.update(start=low, end=high)
            title = axis_label(curve.address, unit)
            if f.title.text != title:
                f.title.text = title
            f.yaxis.axis_label = unit
            if k == last:
                f.xaxis.axis_label = axis_label(p.address, x_unit)

    def _grey(self, grey: bool) -> None:
        colour = "#e6e6e6" if grey else "#ffffff"
        for f in self.figures:
            if f.background_fill_color != colour:
                f.background_fill_color = colour

    def _texts(self) -> None:
        p = self.picture
        self.words.value = (f"<b>Sweep</b>: {_e(p.title)}<ul style='margin:2px 0'>"
                            + "".join(f"<li>{_e(w)}</li>" for w in p.words) + "</ul>")
        self.status.value = _status_words(self.live.status, self.live.model)

    def _record_html(self) -> dict:
        p = self.picture
        rows = "".join(f"<tr><td>{_e(c.address)}</td><td>{_e(format_quantity(c.current, c.unit))}</td>"
                       f"<td>{_e(format_quantity(min(c.y, default=math.nan), c.unit))} … "
                       f"{_e(format_quantity(max(c.y, default=math.nan), c.unit))}</td></tr>"
                       for c in p.curves)
        body = (f"<b>Sweep</b>: {_e(p.title)}<table><thead><tr><th>result</th><th>now ({_e(p.address)} = "
                f"{_e(format_quantity(p.current, p.unit))})</th><th>over the sweep</th></tr></thead>"
                f"<tbody>{rows}</tbody></table><ul>" + "".join(f"<li>{_e(w)}</li>" for w in p.words) + "</ul>")
        return {"text/html": html_block(body, "Static record of the sweep (latest state)"),
                "text/plain": p.title + "\n" + "\n".join(p.words)}

    def _record_png(self) -> dict:
        return {"image/png": sweep_png(self.picture, stale=self.stale),
                "text/plain": "Static picture of the sweep: " + self.picture.title}


class ToleranceView(_WhatIfView):
    """A tolerance run of the live plan, on demand: the yield, each margin's histogram, the
    sensitivity ranking, and the sampled Q-points as clouds on the canvas.

    Made by :meth:`ampplan.notebook.LivePlan.tolerance_view`, which runs it once; the button runs
    it again on the plan as it is then. A progress bar follows the run; interrupting the kernel
    stops it cleanly (the previous run stays shown).

    Attributes
    ----------
    run : ToleranceResult or None
        The latest complete run.
    picture : TolerancePicture or None
    run_seconds : float
        Wall time of the latest complete run (the batched solves and the picture data).
    """

    def __init__(self, live, options: dict):
        from .bokehwidget import BatchedBokehModel

        self.live = live
        self.options = dict(options)
        self.run = None
        self.picture = None
        self.stale = False
        self._ran_on = None  # (plan file dict, model) of the latest run
        self.run_seconds = math.nan
        self.button = widgets.Button(description="Run again with the plan as it is now",
                                     layout=widgets.Layout(width="320px"))
        self.button.add_class("ampplan-tolerance-run")
        self.button.on_click(lambda _: self.rerun())
        self.progress = widgets.IntProgress(value=0, min=0, max=1, description="samples",
                                            layout=widgets.Layout(width="420px"))
        self.progress.add_class("ampplan-tolerance-progress")
        self.summary = widgets.HTML("")
        self.summary.add_class("ampplan-tolerance-summary")
        self.status = widgets.HTML("")
        self.status.add_class("ampplan-status")
        self.sources, self.nominals, self.figures = [], [], []
        self.bokeh_layout = None
        self.plot = None
        self.record = Records(self._record_html, self._record_png)
        self._start([widgets.HBox([self.button, self.progress]), self.status, self.summary])
        self.add_class("ampplan-tolerance")
        self._batched = BatchedBokehModel

    # -- running ----------------------------------------------------------------------------
    def rerun(self, **options) -> bool:
        """Run again on the plan as it is now (with ``options`` replacing the earlier ones);
        False when interrupted."""
        from ..analyses.whatif import tolerance

        options = {**self.options, **options}
        live = self.live
        with live._lock:  # a consistent copy: no edit lands half-way
            plan = live.plan.copy()
            model = options.get("model") or live.model
            nominal = live.result if live.result_is_current and model == live.model else None
        arguments = {k: v for k, v in options.items() if k != "model"}
        samples = arguments.get("samples", 10_000)
        chunk = max(200, min(5_000, int(samples) // 20 if isinstance(samples, int) else 1_000))
        self.progress.max = samples if isinstance(samples, int) and samples > 0 else 1
        self.progress.value = 0
        self.progress.bar_style = "info"

        def progress(done, total):
            self.progress.value = done
            self.progress.description = f"{done}/{total}"

        self.button.disabled = True
        start = time.perf_counter()
        try:
            run = tolerance(plan, model=model, chunk_size=chunk, progress=progress, **arguments)
        except KeyboardInterrupt:
            self.progress.bar_style = "warning"
            self.status.value = ("<span style='color:#a01a1a'><b>Interrupted</b> after "
                                 f"{self.progress.value} of {self.progress.max} samples; "
                                 + ("the previous run is still shown.</span>" if self.run is not None
                                    else "nothing to show yet.</span>"))
            return False
        finally:
            self.button.disabled = False
        self.options = options
        self.run = run
        self._ran_on = (plan_to_dict(plan), model)
        self.picture = tolerance_picture(run, nominal)
        self.run_seconds = time.perf_counter() - start
        self.progress.bar_style = "success"
        self.stale = False
        self._draw()
        live._set_clouds(self.picture.clouds)
        self._say_done()
        self.record.refresh()
        return True

    def _say_done(self, again: str = "") -> None:
        run = self.run
        self.status.value = (f"<span style='color:#1b5e20'>✓ {run.samples} samples in {self.run_seconds:.2f} s "
                             f"({_e(run.model)} model){again}</span>")

    def refresh(self, change=None) -> None:
        """After an edit of the live plan: the run shown is of the plan before it (say so once),
        until an edit (an undo, say) brings the plan back to the one that was run."""
        if self.run is None or change is None or change.status.kind == "refused":
            return
        live = self.live
        now = (plan_to_dict(live.plan), self.options.get("model") or live.model)
        if now == self._ran_on:
            if self.stale:
                self.stale = False
                self._say_done("; the plan is back to the one that was run")
                live._set_clouds(self.picture.clouds)
                self.record.refresh()
            return
        if self.stale:
            return
        self.stale = True
        self.status.value = ("<span style='color:#8a5a00'><b>The plan changed since this run</b> "
                             f"({_e(change.what)} {_e(change.address or '')}); the clouds and figures are of the "
                             "plan before it. Press the button to run again.</span>")
        self.live._set_clouds(stale_clouds(self.picture.clouds))
        self.record.refresh()

    # -- drawing ----------------------------------------------------------------------------
    def _make_figures(self) -> None:
        figures = []
        for k, h in enumerate(self.picture.histograms):
            f = figure(width=230, height=170, toolbar_location=None, tools="", name=f"ampplan-tolerance-figure-{k}")
            f.title.text_font_size = "8pt"
            # Passing counts from 0, failing ones stacked on them: one quad per bin and kind.
            src = ColumnDataSource(data={"left": [], "right": [], "bottom": [], "top": [], "colour": [], "hatch": []},
                                   name=f"ampplan-tolerance-hist-{k}")
            nominal = Span(location=0.0, dimension="height", line_color=HISTOGRAM_COLOURS["nominal"],
                           line_dash="dashed", line_width=1.5, visible=False, name=f"ampplan-tolerance-nominal-{k}")
            _lean(f.quad(left="left", right="right", bottom="bottom", top="top", source=src, fill_color="colour",
                         line_color=None, hatch_pattern="hatch", hatch_color="#ffffff"))
            f.add_layout(nominal)
            self.sources.append(src)
            self.nominals.append(nominal)
            figures.append(f)
        self.figures = figures
        self.bokeh_layout = column(children=[row(children=figures[k:k + 3]) for k in range(0, len(figures), 3)],
                                   name="ampplan-tolerance-layout")

    def _draw(self) -> None:
        p = self.picture
        if self.plot is None or len(self.figures) != len(p.histograms):
            self.sources, self.nominals = [], []
            self._make_figures()
            self._fill()
            self.plot = self._batched(self.bokeh_layout)
            self.plot.add_class("ampplan-tolerance-plot")
            self.children = [self.children[0], self.status, self.summary, self.plot, self._style]
        else:
            with self.plot.batch():
                self._fill()
        self.summary.value = self._summary_html()

    def _fill(self) -> None:
        for h, f, src, nominal in zip(self.picture.histograms, self.figures, self.sources, self.nominals):
            factor, unit = display_scale(h.edges, h.unit)
            edges = [e * factor for e in h.edges]
            left, right = [_r(e) for e in edges[:-1]], [_r(e) for e in edges[1:]]
            bins = len(h.passed)
            _put(src, {"left": left * 2, "right": right * 2, "bottom": [0] * bins + list(h.passed),
                       "top": list(h.passed) + [a + b for a, b in zip(h.passed, h.failed)],
                       "colour": [HISTOGRAM_COLOURS["passed"]] * bins + [HISTOGRAM_COLOURS["failed"]] * bins,
                       "hatch": [" "] * bins + ["x"] * bins})
            if math.isfinite(h.nominal):
                nominal.update(location=_r(h.nominal * factor), visible=True)
            else:
                nominal.visible = False
            f.title.text = axis_label(h.address, unit)

    def _summary_html(self) -> str:
        p = self.picture
        rows = "".join(f"<tr><td>{_e(address)}</td><td>"
                       + ", ".join(f"{_e(name)} ({rho:+.2f})" for name, rho in pairs) + "</td></tr>"
                       for address, pairs in p.sensitivity if pairs)
        return (f"<p style='margin:2px 0'><b>{_e(p.title)}</b></p><ul style='margin:2px 0'>"
                + "".join(f"<li>{_e(w)}</li>" for w in p.words) + "</ul>" + HISTOGRAM_KEY
                + "<table><thead><tr><th>margin</th><th>driven most by (Spearman rank correlation)</th></tr></thead>"
                f"<tbody>{rows}</tbody></table>")

    def _record_html(self) -> dict:
        if self.picture is None:
            return {"text/plain": "no tolerance run yet"}
        note = " (of the plan before a later edit)" if self.stale else ""
        return {"text/html": html_block(self._summary_html(), f"Static record of the tolerance run{note}"),
                "text/plain": "\n".join(self.picture.words + self.picture.drivers)}

    def _record_png(self) -> dict:
        if self.picture is None:
            return {"text/plain": "no tolerance run yet"}
        return {"image/png": tolerance_png(self.picture), "text/plain": "Static picture of the tolerance run: "
                + self.picture.title}

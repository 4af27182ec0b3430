"""``%load_ext ampplan``: BokehJS from the local Jupyter server, and ampplan's display hooks.

``load_ipython_extension(ip)`` (reached through ``ampplan.load_ipython_extension``, which imports
this module only when IPython calls it, so ``import ampplan`` stays light):

1. displays the BokehJS loader (``ensure_bokehjs``): served by ampplan's Jupyter server extension,
   or inlined with a one-line notice where that extension is absent;
2. puts bokeh's own notebook state into Jupyter mode, so ``bokeh.plotting.show(fig)`` shows a
   figure in the notebook with the BokehJS just loaded instead of writing an HTML file;
3. registers a formatter so that a bokeh layout left as a cell's value renders live through
   jupyter_bokeh (after the loader) instead of as a table of its properties;
4. calls ``ampplan.notebook.register_display_hooks(ip)`` when the notebook package defines it
   (the live views' own formatters).
"""

from __future__ import annotations

from .resources import ensure_bokehjs

#: Mime type of an ipywidgets view; jupyter_bokeh's BokehModel is such a widget.
WIDGET_MIME = "application/vnd.jupyter.widget-view+json"


def _bokeh_layout_bundle(obj, include=None, exclude=None):
    """Mime bundle of a bokeh layout shown live through jupyter_bokeh, BokehJS loaded first."""
    from jupyter_bokeh import BokehModel

    ensure_bokehjs()
    return BokehModel(obj)._repr_mimebundle_(include=include, exclude=exclude)


def _no_html(obj):
    return None


def register_display_hooks(ip) -> None:
    """Register ampplan's display hooks on the IPython shell ``ip``."""
    from bokeh.io.state import curstate

    curstate().output_notebook("jupyter")
    formatters = ip.display_formatter
    formatters.mimebundle_formatter.for_type_by_name("bokeh.models.layouts", "LayoutDOM", _bokeh_layout_bundle)
    # bokeh's own text/html for a model is a table of its properties: not a record of anything.
    formatters.formatters["text/html"].for_type_by_name("bokeh.models.layouts", "LayoutDOM", _no_html)
    from .. import notebook

    extra = getattr(notebook, "register_display_hooks", None)
    if callable(extra):
        extra(ip)


def load_ipython_extension(ip) -> None:
    """Entry point of ``%load_ext ampplan``: load BokehJS, then register the display hooks."""
    ensure_bokehjs()
    register_display_hooks(ip)

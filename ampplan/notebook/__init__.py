"""The notebook face of ampplan: live plan, stage editors, canvas, static record.

::

    %load_ext ampplan                  # BokehJS from the local Jupyter server; display hooks
    from ampplan import notebook as nb
    live = nb.LivePlan.demo()          # or nb.LivePlan(ampplan.Plan.load("frontend.json"))
    live.editor("s1")                  # one cell per stage
    live.canvas()
    live.summary()

Imported only on demand (``from ampplan import notebook``); ``import ampplan`` alone loads none of
ipywidgets, bokeh, jupyter_bokeh, IPython or matplotlib. Even this package loads the widget
libraries only when ``LivePlan`` is first used, so the static picture (:mod:`.picture`,
matplotlib only) and the HTML tables (:mod:`.tables`) serve the command line's report without
them. ``ampplan.notebook.resources`` gets BokehJS onto the page; ``ampplan.notebook.extension`` is
what ``%load_ext ampplan`` runs.
"""

from __future__ import annotations

__all__ = ["LivePlan"]


def __getattr__(name):
    if name == "LivePlan":
        from .liveplan import LivePlan
        return LivePlan
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")

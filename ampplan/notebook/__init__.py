"""The notebook face of ampplan: live plan, stage editors, canvas, static record.

Imported only on demand (``from ampplan import notebook``); ``import ampplan`` alone loads none of
ipywidgets, bokeh, jupyter_bokeh or IPython. ``ampplan.notebook.resources`` gets BokehJS onto the
page; ``ampplan.notebook.extension`` is what ``%load_ext ampplan`` runs.
"""

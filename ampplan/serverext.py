"""Jupyter server extension: the installed bokeh's own BokehJS, served by the local Jupyter server.

The notebook face loads BokehJS from ``<base_url>ampplan/bokehjs/js/<file>`` (see
``ampplan.notebook.resources``), never from a CDN and never inlined into the notebook. This module
adds that route to a running jupyter_server, also under a server base URL, with jupyter_server's
own static-file handler (caching, ranges, path checks) over ``bokeh.util.paths.static_path()``.

Enabled for every server of an environment by ``etc/jupyter/jupyter_server_config.d/ampplan.json``
(placed by ``pip install``; the Makefile places it for editable installs), or on one server with
``--ServerApp.jpserver_extensions=ampplan.serverext=True``.

It imports nothing from ``ampplan.notebook`` (ipywidgets and friends stay out of the server), and
tells the kernels the server starts that the route exists through the ``AMPPLAN_BOKEHJS_ROUTE``
environment variable, which kernels inherit from the server process.
"""

from __future__ import annotations

import json
import os

#: Path of the route below the server's base URL (no leading slash, trailing slash).
ROUTE = "ampplan/bokehjs/"

#: Environment variable the extension sets in the server process; kernels inherit it.
ENV_VAR = "AMPPLAN_BOKEHJS_ROUTE"


def _jupyter_server_extension_points():
    """Entry point jupyter_server looks for when ``ampplan.serverext`` is enabled."""
    return [{"module": "ampplan.serverext"}]


def bokeh_static_path() -> str:
    """Folder of the installed bokeh's static files (``js/bokeh.min.js`` and its siblings)."""
    from bokeh.util.paths import static_path

    return str(static_path())


def route_marker(bokeh_version: str) -> str:
    """Value of ``AMPPLAN_BOKEHJS_ROUTE``: the route and the bokeh version the server serves."""
    return json.dumps({"route": ROUTE, "bokeh": bokeh_version})


def _load_jupyter_server_extension(serverapp) -> None:
    """Add ``<base_url>ampplan/bokehjs/(.*)`` to ``serverapp``'s web application."""
    import bokeh
    from jupyter_server.base.handlers import FileFindHandler
    from jupyter_server.utils import url_path_join

    web_app = serverapp.web_app
    pattern = url_path_join(web_app.settings["base_url"], ROUTE, "(.*)")
    web_app.add_handlers(".*$", [(pattern, FileFindHandler, {"path": [bokeh_static_path()]})])
    os.environ[ENV_VAR] = route_marker(bokeh.__version__)
    serverapp.log.info("ampplan: BokehJS %s served at %s", bokeh.__version__, pattern)


# The name older jupyter_server / notebook versions call.
load_jupyter_server_extension = _load_jupyter_server_extension

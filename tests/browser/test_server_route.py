"""ampplan's Jupyter server extension serves the installed bokeh's own BokehJS (no browser needed).

Checked on a jupyter_server started by the test on 127.0.0.1: the route answers with the same bytes
as bokeh's files (``bokeh.util.paths.static_path()``), also under a server base URL, whether the
extension is enabled by the packaged config file or on the command line; a server without the
extension answers 404 there (what the loader turns into its error message).
"""

from __future__ import annotations

import pathlib

import pytest

pytest.importorskip("jupyter_server")
pytest.importorskip("bokeh")

from .servers import start_server  # noqa: E402

from ampplan import serverext  # noqa: E402


@pytest.mark.parametrize("base_url, enable", [("/", "config"), ("/jh/user/designer/", "option")])
def test_route_serves_bokehs_own_files(tmp_path, base_url, enable):
    server = start_server(tmp_path, tmp_path, lab=False, base_url=base_url, enable=enable)
    try:
        static = pathlib.Path(serverext.bokeh_static_path())
        for rel in ("js/bokeh.min.js", "js/bokeh-widgets.min.js", "js/bokeh-tables.min.js"):
            status, body = server.get(serverext.ROUTE + rel + "?v=1")
            assert status == 200, rel
            assert body == (static / rel).read_bytes(), rel
        assert server.get(serverext.ROUTE + "js/no-such-file.js")[0] == 404
        # nothing outside bokeh's static folder
        assert server.get(serverext.ROUTE + "../../__init__.py")[0] in (403, 404)
        assert "ampplan.serverext | extension was successfully loaded" in server.log()
    finally:
        server.stop()
    assert server.process.poll() is not None


def test_without_the_extension_the_route_is_absent(tmp_path):
    server = start_server(tmp_path, tmp_path, lab=False, enable="none")
    try:
        assert server.get(serverext.ROUTE + "js/bokeh.min.js")[0] == 404
    finally:
        server.stop()

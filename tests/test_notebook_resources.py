"""BokehJS reaches the page from the local Jupyter server: the loader, the mode choice, the
``%load_ext ampplan`` entry point and the server extension's route.

The route is checked against the installed bokeh's own files (bytes equal) on a jupyter_server the
test starts on 127.0.0.1, with and without a base URL; the loader's browser behaviour is checked in
tests/browser/.
"""

from __future__ import annotations

import json
import os
import pathlib
import subprocess
import sys
import tomllib
import zipfile

import pytest

pytest.importorskip("bokeh")
pytest.importorskip("IPython")

import bokeh  # noqa: E402

from ampplan import serverext  # noqa: E402
from ampplan.notebook import resources  # noqa: E402

ROOT = pathlib.Path(__file__).resolve().parents[1]
CONFIG_FILE = ROOT / "jupyter-config" / "jupyter_server_config.d" / "ampplan.json"


@pytest.fixture
def clean_env(monkeypatch):
    for name in (resources.MODE_VAR, serverext.ENV_VAR, "JPY_PARENT_PID", "VSCODE_PID", "VSCODE_CWD",
                 "COLAB_RELEASE_TAG"):
        monkeypatch.delenv(name, raising=False)
    monkeypatch.setitem(resources._state, "inline_sent", False)
    return monkeypatch


@pytest.fixture
def displayed(monkeypatch):
    """Everything ensure_bokehjs displays, as (bundle, raw) pairs."""
    import IPython.display

    shown = []
    monkeypatch.setattr(IPython.display, "display", lambda obj, raw=False: shown.append((obj, raw)))
    return shown


# ---------------------------------------------------------------------------------------------
# The loader script
# ---------------------------------------------------------------------------------------------

def test_loader_fetches_the_installed_bokeh_from_the_route_synchronously():
    bundle = resources.loader_bundle()
    assert set(bundle) == {resources.LOAD_MIME, resources.JS_MIME}
    script = bundle[resources.JS_MIME]
    assert bundle[resources.LOAD_MIME] == script
    assert json.dumps(bokeh.__version__) in script
    assert '"ampplan/bokehjs/"' in script and '"js/bokeh.min.js"' in script
    assert 'xhr.open("GET", url, false)' in script            # synchronous: no race with the view
    assert "jupyter-config-data" in script and "baseUrl" in script
    assert "xhr.status !== 200" in script
    # never a CDN, never BokehJS itself: the output stays a few kilobytes
    assert "http://" not in script and "https://" not in script
    assert len(script) < 4000


def test_loader_files_exist_in_the_installed_bokeh():
    static = pathlib.Path(serverext.bokeh_static_path())
    for rel in resources.component_files():
        assert (static / rel).is_file()


def test_unknown_component_is_named():
    with pytest.raises(resources.BokehJSUnavailable, match="'bokeh-nonesuch'"):
        resources.component_files(["bokeh", "bokeh-nonesuch"])


# ---------------------------------------------------------------------------------------------
# Which mode
# ---------------------------------------------------------------------------------------------

def test_mode_server_under_the_extension(clean_env):
    clean_env.setenv(serverext.ENV_VAR, serverext.route_marker(bokeh.__version__))
    assert resources.bokehjs_mode()[0] == "server"


def test_mode_inline_when_the_server_serves_another_bokeh(clean_env):
    clean_env.setenv(serverext.ENV_VAR, serverext.route_marker("0.0.1"))
    mode, reason = resources.bokehjs_mode()
    assert mode == "inline" and "0.0.1" in reason


def test_mode_inline_under_a_jupyter_server_without_the_extension(clean_env):
    # The kernel's parent (JPY_PARENT_PID) is this test process: pretend its command is a server.
    clean_env.setenv("JPY_PARENT_PID", str(os.getpid()))
    clean_env.setattr(resources, "_parent_command", lambda: "/venv/bin/python /venv/bin/jupyter-lab --port 8888")
    mode, reason = resources.bokehjs_mode()
    assert mode == "inline" and "without ampplan's server extension" in reason


def test_mode_inline_under_other_hosts(clean_env):
    clean_env.setenv("VSCODE_PID", "1234")
    assert resources.bokehjs_mode() == ("inline", "VS Code")


def test_mode_server_when_headless(clean_env):
    # nbclient / nbconvert --execute: the parent is no Jupyter server and no page runs the loader.
    clean_env.setenv("JPY_PARENT_PID", str(os.getpid()))
    assert resources.bokehjs_mode()[0] == "server"


def test_mode_forced_and_bad_value(clean_env):
    clean_env.setenv(resources.MODE_VAR, "inline")
    assert resources.bokehjs_mode()[0] == "inline"
    clean_env.setenv(resources.MODE_VAR, "cdn")
    with pytest.raises(ValueError, match="AMPPLAN_BOKEHJS='cdn'"):
        resources.bokehjs_mode()


# ---------------------------------------------------------------------------------------------
# ensure_bokehjs
# ---------------------------------------------------------------------------------------------

def test_ensure_server_displays_the_small_loader_each_time(clean_env, displayed):
    assert resources.ensure_bokehjs() == "server"
    assert resources.ensure_bokehjs() == "server"
    assert [raw for _, raw in displayed] == [True, True]
    assert all(set(b) == {resources.LOAD_MIME, resources.JS_MIME} for b, _ in displayed)


def test_ensure_inline_once_with_a_notice(clean_env, displayed, capsys):
    clean_env.setenv(resources.MODE_VAR, "inline")
    assert resources.ensure_bokehjs() == "inline"
    assert resources.ensure_bokehjs() == "inline"
    notice = capsys.readouterr().out.strip().splitlines()
    assert len(notice) == 1 and "inlined" in notice[0]
    assert len(displayed) == 1
    code = displayed[0][0][resources.JS_MIME]
    # the real BokehJS, from the installed bokeh's file
    core = (pathlib.Path(serverext.bokeh_static_path()) / "js" / "bokeh.min.js").read_text(encoding="utf-8")
    assert core.strip()[:2000] in code and len(code) > 1_000_000


# ---------------------------------------------------------------------------------------------
# %load_ext ampplan in a real kernel (nbclient), and import ampplan stays light
# ---------------------------------------------------------------------------------------------

def test_load_ext_in_a_kernel(monkeypatch):
    nbformat = pytest.importorskip("nbformat")
    nbclient = pytest.importorskip("nbclient")
    monkeypatch.setenv("PYTHONPATH", str(ROOT))
    for name in (resources.MODE_VAR, serverext.ENV_VAR):
        monkeypatch.delenv(name, raising=False)
    nb = nbformat.v4.new_notebook(cells=[
        nbformat.v4.new_code_cell("%load_ext ampplan"),
        nbformat.v4.new_code_cell("from bokeh.plotting import figure\nfigure(width=200, height=150)"),
    ])
    nbclient.NotebookClient(nb, timeout=120, kernel_name="python3").execute()
    first = [o for o in nb.cells[0].outputs if o.output_type == "display_data"]
    assert len(first) == 1 and set(first[0].data) == {resources.LOAD_MIME, resources.JS_MIME}
    # a bokeh figure left as a cell's value renders live through jupyter_bokeh, loader first
    outputs = nb.cells[1].outputs
    assert [o.output_type for o in outputs] == ["display_data", "execute_result"]
    assert "application/vnd.jupyter.widget-view+json" in outputs[1].data
    assert "text/html" not in outputs[1].data


def test_import_ampplan_does_not_import_the_notebook_layer():
    code = ("import sys, ampplan; assert callable(ampplan.load_ipython_extension); "
            "print([m for m in ('ampplan.notebook', 'IPython', 'bokeh', 'jupyter_server') if m in sys.modules])")
    done = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True, timeout=60)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip() == "[]"


def test_server_extension_imports_no_widget_library():
    code = ("import sys, ampplan.serverext as s; s._jupyter_server_extension_points(); "
            "print([m for m in ('ampplan.notebook', 'ipywidgets', 'jupyter_bokeh', 'IPython') if m in sys.modules])")
    done = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True, timeout=60)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip() == "[]"


# ---------------------------------------------------------------------------------------------
# Enabling the server extension: the config file, both ways of installing
# ---------------------------------------------------------------------------------------------

def test_config_file_enables_the_extension_and_is_declared_as_data_file():
    config = json.loads(CONFIG_FILE.read_text())
    assert config == {"ServerApp": {"jpserver_extensions": {"ampplan.serverext": True}}}
    with open(ROOT / "pyproject.toml", "rb") as handle:
        data_files = tomllib.load(handle)["tool"]["setuptools"]["data-files"]
    assert data_files["etc/jupyter/jupyter_server_config.d"] == [
        str(CONFIG_FILE.relative_to(ROOT))]
    makefile = (ROOT / "Makefile").read_text()   # editable installs skip data-files
    assert "etc/jupyter/jupyter_server_config.d/ampplan.json" in makefile


def test_regular_install_places_the_config_file(tmp_path):
    """A wheel (what `pip install .` installs) carries the file into <prefix>/etc/jupyter/..."""
    pytest.importorskip("setuptools")
    done = subprocess.run([sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation",
                           "--quiet", "-w", str(tmp_path), str(ROOT)],
                          capture_output=True, text=True, timeout=300,
                          env={**os.environ, "PIP_NO_INDEX": "1"})
    assert done.returncode == 0, done.stderr[-2000:]
    (wheel,) = tmp_path.glob("ampplan-*.whl")
    with zipfile.ZipFile(wheel) as archive:
        names = archive.namelist()
        target = [n for n in names if n.endswith("data/etc/jupyter/jupyter_server_config.d/ampplan.json")]
        assert target, names
        assert json.loads(archive.read(target[0])) == json.loads(CONFIG_FILE.read_text())
        assert "ampplan/serverext.py" in names
    # Installing that wheel into a prefix puts the file where jupyter_core looks for a
    # environment's configuration (<sys.prefix>/etc/jupyter for the running environment).
    prefix = tmp_path / "prefix"
    # --ignore-installed: never uninstall the development environment's own ampplan on the way.
    done = subprocess.run([sys.executable, "-m", "pip", "install", "--no-deps", "--no-index", "--quiet",
                           "--ignore-installed", "--prefix", str(prefix), str(wheel)], capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr[-2000:]
    placed = prefix / "etc" / "jupyter" / "jupyter_server_config.d" / "ampplan.json"
    assert json.loads(placed.read_text()) == json.loads(CONFIG_FILE.read_text())
    from jupyter_core.paths import jupyter_config_path

    assert os.path.join(sys.prefix, "etc", "jupyter") in jupyter_config_path()

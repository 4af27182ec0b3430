"""BokehJS on the page before any canvas: loaded from the local Jupyter server, never a CDN.

``ensure_bokehjs()`` displays one small loader output (mime types
``application/vnd.bokehjs_load.v0+json``, rendered by jupyter_bokeh's lab extension, and
``application/javascript`` for other front ends). Its script

1. returns at once when ``window.Bokeh.version`` is the installed bokeh's and the wanted components
   are already loaded;
2. otherwise reads the server's base URL from the page's ``jupyter-config-data`` element, fetches
   each BokehJS file from ampplan's server-extension route (``<base_url>ampplan/bokehjs/js/...``,
   see ``ampplan.serverext``) with a *synchronous* XMLHttpRequest and evaluates it globally, so
   that no canvas output can be rendered before BokehJS is there (bokeh's own asynchronous loader
   races jupyter_bokeh's view);
3. throws an error naming the URL and the HTTP status when the route answers anything but 200.

The output is a few kilobytes, so an executed notebook stays small. Where ampplan's server
extension is absent (a Jupyter server without it, another notebook host), BokehJS is inlined
instead, once per kernel, with a one-line notice: see ``bokehjs_mode``.

This module imports bokeh and IPython only when called.
"""

from __future__ import annotations

import json
import os
import sys
from typing import Literal, Sequence

from ..serverext import ENV_VAR, ROUTE

#: BokehJS components the live canvas needs, in load order (file ``js/<name>.min.js``).
COMPONENTS: tuple[str, ...] = ("bokeh", "bokeh-widgets", "bokeh-tables")

#: Environment variable that forces a mode: ``server`` or ``inline``.
MODE_VAR = "AMPPLAN_BOKEHJS"

LOAD_MIME = "application/vnd.bokehjs_load.v0+json"
JS_MIME = "application/javascript"

Mode = Literal["server", "inline"]

# Command-line words of processes that are Jupyter servers (a kernel's parent, JPY_PARENT_PID).
_SERVER_WORDS = ("jupyter-lab", "jupyter-notebook", "jupyter-server", "jupyterhub-singleuser",
                 "jupyter_server", "jupyterlab", "voila")

_state = {"inline_sent": False}


class BokehJSUnavailable(RuntimeError):
    """The notebook face cannot find BokehJS to offer the page."""


def bokeh_version() -> str:
    """Version of the bokeh installed beside this kernel."""
    import bokeh

    return bokeh.__version__


def _parent_command() -> str:
    """Command line of the process that started this kernel (``JPY_PARENT_PID``), or ``""``."""
    pid = os.environ.get("JPY_PARENT_PID", "")
    if not pid.isdigit():
        return ""
    try:
        import psutil

        return " ".join(psutil.Process(int(pid)).cmdline())
    except Exception:  # psutil missing, process gone or not ours to read: no evidence either way
        try:
            with open(f"/proc/{pid}/cmdline", "rb") as handle:
                return handle.read().replace(b"\0", b" ").decode(errors="replace")
        except OSError:
            return ""


def _interactive_host() -> str | None:
    """Name of a live notebook front end other than ampplan's server extension, or None.

    Evidence, in order: this kernel was started by a Jupyter server process (which, since the
    extension's environment variable is missing, does not have ampplan's extension enabled); the
    VS Code or Colab front ends' own environment. A kernel driven headless (nbclient,
    ``jupyter nbconvert --execute``, papermill) matches none of these: no page runs the loader there,
    so the small server loader is the right output for the record.
    """
    command = _parent_command()
    if any(word in command for word in _SERVER_WORDS):
        return "a Jupyter server without ampplan's server extension"
    if "google.colab" in sys.modules or "COLAB_RELEASE_TAG" in os.environ:
        return "Colab"
    if "VSCODE_PID" in os.environ or "VSCODE_CWD" in os.environ:
        return "VS Code"
    return None


def bokehjs_mode() -> tuple[Mode, str]:
    """How BokehJS reaches the page here, and why: ``("server" | "inline", reason)``.

    ``AMPPLAN_BOKEHJS=server|inline`` forces a mode. Otherwise ``server`` when the kernel was
    started by a Jupyter server with ampplan's extension serving the same bokeh version (the
    extension puts ``AMPPLAN_BOKEHJS_ROUTE`` into the environment kernels inherit), ``inline``
    when another interactive host is detected or the server serves another bokeh version, and
    ``server`` for headless execution (the loader is inert there and keeps the record small).

    Raises
    ------
    ValueError
        ``AMPPLAN_BOKEHJS`` holds something other than ``server`` or ``inline``.
    """
    forced = os.environ.get(MODE_VAR, "").strip().lower()
    if forced:
        if forced not in ("server", "inline"):
            raise ValueError(f"{MODE_VAR}={os.environ[MODE_VAR]!r}: expected 'server' or 'inline'")
        return forced, f"{MODE_VAR}={forced}"  # type: ignore[return-value]
    marker = os.environ.get(ENV_VAR)
    if marker:
        try:
            served = json.loads(marker).get("bokeh")
        except (ValueError, AttributeError):
            served = None
        mine = bokeh_version()
        if served != mine:
            return "inline", f"the Jupyter server serves bokeh {served}, this kernel has bokeh {mine}"
        return "server", "ampplan's Jupyter server extension"
    host = _interactive_host()
    if host:
        return "inline", host
    return "server", "no live front end detected (headless execution)"


def component_files(components: Sequence[str] = COMPONENTS) -> list[str]:
    """Paths of the wanted BokehJS files below the static folder, checked to exist there.

    Raises
    ------
    BokehJSUnavailable
        A component names no file of the installed bokeh.
    """
    from ..serverext import bokeh_static_path

    static = bokeh_static_path()
    files = []
    for name in components:
        rel = f"js/{name}.min.js"
        if not os.path.isfile(os.path.join(static, rel)):
            raise BokehJSUnavailable(f"BokehJS component {name!r}: no file {rel} in the installed bokeh "
                                     f"({static}); components: bokeh, bokeh-widgets, bokeh-tables, bokeh-gl")
        files.append(rel)
    return files


_LOADER = r"""(function (host) {
  "use strict";
  var want = %(version)s, files = %(files)s, route = %(route)s;
  var seen = window.__ampplan_bokehjs = window.__ampplan_bokehjs || {};
  var have = window.Bokeh && window.Bokeh.version === want;
  if (have && files.every(function (f) { return seen[want + "/" + f]; })) { return; }
  var config = document.getElementById("jupyter-config-data");
  if (!config) { return; }  /* not a Jupyter page (a static HTML export): nothing to render */
  function fail(message) {  /* shown in the output (not only in the console), then thrown */
    if (host && host.appendChild) {
      var note = document.createElement("pre");
      note.className = "ampplan-bokehjs-error";
      note.textContent = message;
      host.appendChild(note);
    }
    throw new Error(message);
  }
  var base = "/";
  try { base = JSON.parse(config.textContent).baseUrl || "/"; } catch (e) { /* keep "/" */ }
  if (base.charAt(base.length - 1) !== "/") { base += "/"; }
  files.forEach(function (file, k) {
    if (k === 0 && have) { seen[want + "/" + file] = true; return; }
    if (seen[want + "/" + file]) { return; }
    var url = base + route + file + "?v=" + encodeURIComponent(want);
    var xhr = new XMLHttpRequest();
    xhr.open("GET", url, false);
    try { xhr.send(null); } catch (e) { fail("ampplan: could not fetch BokehJS from " + url + ": " + e); }
    if (xhr.status !== 200) {
      fail("ampplan: BokehJS " + file + " from " + url + " answered HTTP " + xhr.status +
           ": ampplan's Jupyter server extension (ampplan.serverext) is not enabled on this server." +
           " Enable it with: jupyter server extension enable ampplan.serverext");
    }
    (0, eval)(xhr.responseText + "\n//# sourceURL=" + url);
    seen[want + "/" + file] = true;
  });
  if (!window.Bokeh || window.Bokeh.version !== want) {
    fail("ampplan: BokehJS loaded from " + base + route + " is " +
         (window.Bokeh ? window.Bokeh.version : "missing") + ", the kernel's bokeh is " + want);
  }
})((typeof element !== "undefined" && element) ||
   (document.currentScript && document.currentScript.parentNode) || null);
"""


def loader_script(components: Sequence[str] = COMPONENTS, version: str | None = None) -> str:
    """The loader's JavaScript for ``components`` of bokeh ``version`` (default: the installed one)."""
    version = version or bokeh_version()
    return _LOADER % {"version": json.dumps(version), "files": json.dumps(component_files(components)),
                      "route": json.dumps(ROUTE)}


def loader_bundle(components: Sequence[str] = COMPONENTS) -> dict:
    """The mime bundle of the server loader output."""
    script = loader_script(components)
    return {LOAD_MIME: script, JS_MIME: script}


def inline_bundle(components: Sequence[str] = COMPONENTS) -> dict:
    """The mime bundle of the inline fallback: BokehJS itself (several megabytes)."""
    from bokeh.resources import Resources

    code = "\n".join(Resources(mode="inline", components=list(components)).js_raw)
    return {LOAD_MIME: code, JS_MIME: code}


def ensure_bokehjs(components: Sequence[str] = COMPONENTS) -> Mode:
    """Make BokehJS available to the page before the next canvas output; return the mode used.

    Safe to call before every canvas display. In ``server`` mode each call displays the small
    loader, whose script returns at once when the page already has this BokehJS (so a canvas cell
    run again after a page reload still finds it). In ``inline`` mode BokehJS is displayed once per
    kernel, after a one-line notice saying why.

    Raises
    ------
    BokehJSUnavailable
        A requested component is not part of the installed bokeh.
    ValueError
        ``AMPPLAN_BOKEHJS`` holds an unknown mode.
    """
    from IPython.display import display

    components = tuple(components)
    component_files(components)  # fail early, naming the culprit
    mode, reason = bokehjs_mode()
    if mode == "server":
        display(loader_bundle(components), raw=True)
        return mode
    if not _state["inline_sent"]:
        print(f"ampplan: BokehJS is inlined into this notebook (several MB) because of {reason}; "
              f"ampplan's Jupyter server extension serves it instead where it is enabled.")
        display(inline_bundle(components), raw=True)
        _state["inline_sent"] = True
    return mode

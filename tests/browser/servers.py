"""Jupyter servers the tests start on 127.0.0.1 with a token, in throw-away folders, and stop by PID.

HOME, TMPDIR and every JUPYTER_* / IPYTHONDIR folder of the server (and so of its kernels) point
into the test's own temporary folder, so nothing is written to the user's home (Jupyter, IPython,
npm and Chromium all write there otherwise).
"""

from __future__ import annotations

import json
import os
import pathlib
import secrets
import shutil
import socket
import subprocess
import sys
import time
import urllib.error
import urllib.request
from dataclasses import dataclass, field

ROOT = pathlib.Path(__file__).resolve().parents[2]
BIN = pathlib.Path(sys.executable).parent
CONFIG_FILE = ROOT / "jupyter-config" / "jupyter_server_config.d" / "ampplan.json"
LAB_OVERRIDES = ROOT / "jupyter-config" / "lab-settings" / "overrides.json"


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def isolated_env(folder: pathlib.Path) -> dict:
    """Environment whose HOME, TMPDIR, Jupyter and IPython folders are all under ``folder``."""
    env = dict(os.environ)
    for name in list(env):
        if name.startswith(("JUPYTER", "JPY_")) or name in ("AMPPLAN_BOKEHJS", "AMPPLAN_BOKEHJS_ROUTE"):
            del env[name]
    dirs = {"HOME": "home", "TMPDIR": "tmp", "JUPYTER_CONFIG_DIR": "config", "JUPYTER_DATA_DIR": "data",
            "JUPYTER_RUNTIME_DIR": "runtime", "JUPYTERLAB_SETTINGS_DIR": "lab-settings",
            "JUPYTERLAB_WORKSPACES_DIR": "lab-workspaces", "IPYTHONDIR": "ipython"}
    for name, sub in dirs.items():
        path = folder / sub
        path.mkdir(parents=True, exist_ok=True)
        env[name] = str(path)
    env["JUPYTER_PLATFORM_DIRS"] = "1"
    env["PYTHONPATH"] = str(ROOT)          # the kernels import this checkout's ampplan
    env["PATH"] = f"{BIN}{os.pathsep}{env.get('PATH', '')}"
    return env


@dataclass
class Server:
    """A running Jupyter server: ``url`` ends with the base URL's slash."""

    process: subprocess.Popen
    url: str
    token: str
    root_dir: pathlib.Path
    log_path: pathlib.Path
    children: list = field(default_factory=list)

    def get(self, path: str, token: bool = True):
        """(status, body bytes) of GET ``url + path``."""
        request = urllib.request.Request(self.url + path)
        if token:
            request.add_header("Authorization", f"token {self.token}")
        try:
            with urllib.request.urlopen(request, timeout=30) as answer:
                return answer.status, answer.read()
        except urllib.error.HTTPError as error:
            return error.code, error.read()

    def request(self, method: str, path: str) -> int:
        request = urllib.request.Request(self.url + path, method=method)
        request.add_header("Authorization", f"token {self.token}")
        try:
            with urllib.request.urlopen(request, timeout=30) as answer:
                return answer.status
        except urllib.error.HTTPError as error:
            return error.code

    def log(self) -> str:
        return self.log_path.read_text(errors="replace")

    def stop(self) -> None:
        """Shut down kernels through the API, SIGTERM the server, then end any child left, by PID."""
        try:
            import psutil

            self.children = psutil.Process(self.process.pid).children(recursive=True)
        except Exception:
            self.children = []
        try:
            status, body = self.get("api/sessions")
            if status == 200:
                for session in json.loads(body):
                    self.request("DELETE", f"api/sessions/{session['id']}")
            status, body = self.get("api/kernels")
            if status == 200:
                for kernel in json.loads(body):
                    self.request("DELETE", f"api/kernels/{kernel['id']}")
        except OSError:
            pass
        self.process.terminate()
        try:
            self.process.wait(timeout=20)
        except subprocess.TimeoutExpired:
            self.process.kill()
            self.process.wait(timeout=10)
        for child in self.children:
            try:
                if child.is_running():
                    child.kill()
            except Exception:
                pass


def start_server(folder: pathlib.Path, root_dir: pathlib.Path, *, lab: bool = True, base_url: str = "/",
                 enable: str = "config", windowing: str = "contentVisibility") -> Server:
    """Start ``jupyter lab`` (or ``jupyter server``) on 127.0.0.1 with a token.

    ``enable`` says how ampplan's server extension is enabled: ``"config"`` (the packaged
    jupyter_server_config.d file in the server's config folder, as ``pip install`` places it),
    ``"option"`` (``--ServerApp.jpserver_extensions=ampplan.serverext=True``) or ``"none"`` (disabled
on the command line, which wins over every config file).
    """
    env = isolated_env(folder)
    config = pathlib.Path(env["JUPYTER_CONFIG_DIR"])
    extra = []
    if enable == "config":
        (config / "jupyter_server_config.d").mkdir(parents=True, exist_ok=True)
        shutil.copy(CONFIG_FILE, config / "jupyter_server_config.d" / "ampplan.json")
    elif enable == "option":
        extra.append("--ServerApp.jpserver_extensions=ampplan.serverext=True")
    elif enable == "none":
        # The environment's own config (a `pip install`, or the Makefile's copy) enables it: turn it off.
        extra.append("--ServerApp.jpserver_extensions=ampplan.serverext=False")
    else:
        raise ValueError(f"enable={enable!r}")
    if lab:
        settings = pathlib.Path(env["JUPYTERLAB_SETTINGS_DIR"])
        for plugin, values in json.loads(LAB_OVERRIDES.read_text()).items():
            package, name = plugin.split(":")
            target = settings / package / f"{name}.jupyterlab-settings"
            target.parent.mkdir(parents=True, exist_ok=True)
            if plugin.endswith("notebook-extension:tracker"):
                values = {**values, "windowingMode": windowing}
            target.write_text(json.dumps(values))
    port = free_port()
    token = secrets.token_hex(16)
    command = [str(BIN / "jupyter"), "lab" if lab else "server", "--no-browser", "--ip=127.0.0.1",
               f"--port={port}", "--ServerApp.port_retries=0", f"--ServerApp.root_dir={root_dir}",
               f"--IdentityProvider.token={token}", f"--ServerApp.base_url={base_url}", *extra]
    if os.geteuid() == 0:
        command.append("--allow-root")
    if lab:
        command += ["--LabApp.news_url=None", "--LabApp.check_for_updates_class=jupyterlab.NeverCheckForUpdate",
                    "--LabApp.extension_manager=readonly", "--LabApp.expose_app_in_browser=True"]
    log_path = folder / ("lab.log" if lab else "server.log")
    log = open(log_path, "wb")
    process = subprocess.Popen(command, stdout=log, stderr=subprocess.STDOUT, stdin=subprocess.DEVNULL,
                               env=env, cwd=root_dir)
    log.close()
    server = Server(process, f"http://127.0.0.1:{port}{base_url}", token, root_dir, log_path)
    deadline = time.monotonic() + 90
    while time.monotonic() < deadline:
        if process.poll() is not None:
            raise RuntimeError(f"jupyter exited with {process.returncode}:\n{server.log()[-3000:]}")
        try:
            if server.get("api/status")[0] == 200:
                return server
        except OSError:
            pass
        time.sleep(0.25)
    server.stop()
    raise RuntimeError(f"jupyter did not answer within 90 s:\n{server.log()[-3000:]}")

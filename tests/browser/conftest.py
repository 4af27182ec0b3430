"""Fixtures of the browser tests: Debian's Chromium driven by Playwright, JupyterLab started here.

Chromium is found at ``/usr/bin/chromium`` (or ``chromium`` / ``chromium-browser`` on PATH, or
``AMPPLAN_CHROMIUM``). Without it, or without Playwright, the tests marked ``browser`` skip with
the reason, unless ``AMPPLAN_REQUIRE_BROWSER=1`` (set by .ci/run), where they fail.
``playwright install`` is never used: it downloads browsers, which cannot be done here.
"""

from __future__ import annotations

import os

import pytest

from .chromium import CHROMIUM_ARGS, find_chromium
from .servers import isolated_env, start_server


def browser_required() -> bool:
    return os.environ.get("AMPPLAN_REQUIRE_BROWSER", "") == "1"


def _unavailable(reason: str):
    if browser_required():
        pytest.fail(f"AMPPLAN_REQUIRE_BROWSER=1 but {reason}", pytrace=False)
    pytest.skip(reason)


def pytest_addoption(parser):
    parser.addoption("--screenshot-to", default=None,
                     help="write the canvas picture captured in JupyterLab to this PNG (make screenshot)")


@pytest.fixture(scope="session")
def chromium_path():
    path = find_chromium()
    if not path:
        _unavailable("no Chromium found (install Debian's: apt-get install -y chromium)")
    try:
        import playwright.sync_api  # noqa: F401
    except ImportError:
        _unavailable("the playwright package is not installed (pip install -e '.[test]')")
    return path


@pytest.fixture(scope="session")
def browser_home(tmp_path_factory):
    """Throw-away HOME/TMPDIR/Jupyter folders for everything the browser tests start."""
    return tmp_path_factory.mktemp("browser-home")


@pytest.fixture(scope="session")
def browser(chromium_path, browser_home):
    """A headless Chromium; Playwright's driver and the browser write only into ``browser_home``."""
    from playwright.sync_api import sync_playwright

    env = isolated_env(browser_home / "chromium")
    saved = {name: os.environ.get(name) for name in ("HOME", "TMPDIR")}
    os.environ.update(HOME=env["HOME"], TMPDIR=env["TMPDIR"])   # the driver's own temp files
    try:
        manager = sync_playwright().start()
        chromium = manager.chromium.launch(executable_path=chromium_path, headless=True, args=CHROMIUM_ARGS,
                                           env={k: v for k, v in env.items() if isinstance(v, str)})
    finally:
        for name, value in saved.items():
            if value is None:
                os.environ.pop(name, None)
            else:
                os.environ[name] = value
    yield chromium
    chromium.close()
    manager.stop()


@pytest.fixture(scope="session")
def lab(chromium_path, browser_home):
    """JupyterLab on 127.0.0.1 with a token, the extension enabled by its packaged config file, the
    shipped notebook windowing setting; stopped by PID at the end of the session."""
    root = browser_home / "notebooks"
    root.mkdir()
    server = start_server(browser_home / "lab", root, lab=True)
    yield server
    server.stop()

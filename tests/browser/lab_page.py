"""Driving a notebook in JupyterLab through Playwright: open, run all, read BokehJS data, time keys.

Shared by the browser tests, ``make screenshot`` and tests/benchmarks/bench_browser.py. Selectors
and waits follow the recipe in the shared reference notes (JupyterLab 4.6, ipywidgets 8,
jupyter_bokeh 4): wait for the app's own readiness promises rather than for "kernel idle" alone,
and read bokeh's data through ``Bokeh.documents`` (the canvas lives in shadow roots).
"""

from __future__ import annotations

import json
import secrets
import time

#: The current notebook widget is restored, revealed, its file loaded and its kernel session ready.
JS_NOTEBOOK_READY = """async (name) => {
  if (!window.jupyterapp) { return false; }
  await window.jupyterapp.restored;
  const w = window.jupyterapp.shell.currentWidget;
  if (!w || !w.context || !w.context.path.endsWith(name)) { return false; }
  await w.revealed; await w.context.ready; await w.sessionContext.ready;
  return true;
}"""

#: Execution count prompts of every code cell, and whether the kernel is idle.
JS_RUN_STATE = """() => {
  const w = window.jupyterapp.shell.currentWidget;
  const cells = w.content.widgets.filter(c => c.model.type === 'code');
  return {counts: cells.map(c => c.model.executionCount), status: w.sessionContext.session
          ? w.sessionContext.session.kernel.status : 'none'};
}"""

#: The data of the bokeh model named ``name`` (columns as plain arrays), or null.
JS_SOURCE_DATA = """(name) => {
  if (!window.Bokeh) { return null; }
  for (const doc of Bokeh.documents) {
    const m = doc.get_model_by_name(name);
    if (m) {
      const d = m.data instanceof Map ? Object.fromEntries(m.data) : m.data;
      const out = {};
      for (const k of Object.keys(d)) { out[k] = Array.from(d[k], v => (typeof v === 'number' ? v : String(v))); }
      return out;
    }
  }
  return null;
}"""

#: Times from a keydown on ``handle`` to the data-change signal of every listed bokeh source:
#: installs listeners once; window.__ampplan_times collects [keydown time, change time] pairs.
JS_INSTALL_TIMER = """(names) => {
  const state = window.__ampplan_timer = {down: null, times: []};
  document.addEventListener('keydown', () => { state.down = performance.now(); }, true);
  for (const doc of Bokeh.documents) {
    for (const name of names) {
      const m = doc.get_model_by_name(name);
      if (m) {
        m.connect(m.properties.data.change, () => {
          if (state.down !== null) { state.times.push(performance.now() - state.down); state.down = null; }
        });
      }
    }
  }
  return true;
}"""


def open_notebook(page, server, name: str, timeout: float = 120_000) -> None:
    """Open ``name`` (relative to the server's root) in its own workspace and wait until ready."""
    workspace = "t" + secrets.token_hex(6)
    page.goto(f"{server.url}lab/workspaces/{workspace}/tree/{name}?token={server.token}", timeout=timeout)
    page.wait_for_selector(".jp-NotebookPanel .jp-Notebook-ExecutionIndicator[data-status='idle']",
                           timeout=timeout)
    page.wait_for_function(JS_NOTEBOOK_READY, arg=name, timeout=timeout)


def run_all(page, timeout: float = 300_000) -> None:
    """Run every cell (Run menu, Run All Cells) and wait until each has run and the kernel is idle."""
    page.click(".lm-MenuBar-itemLabel:text-is('Run')")
    page.click(".lm-Menu li.lm-Menu-item[data-command='runmenu:run-all']")
    page.wait_for_function(f"() => {{ const s = ({JS_RUN_STATE})(); "
                           "return s.counts.length > 0 && s.counts.every(c => c !== null) && s.status === 'idle'; }",
                           timeout=timeout, polling=200)


def source_data(page, name: str):
    return page.evaluate(JS_SOURCE_DATA, name)


def wait_source(page, name: str, timeout: float = 60_000) -> None:
    page.wait_for_function(f"() => ({JS_SOURCE_DATA})({json.dumps(name)}) !== null", timeout=timeout)


JS_CLEAN = "() => !window.jupyterapp.shell.currentWidget.context.model.dirty"


def save(page, timeout: float = 120_000) -> None:
    """Save the open notebook and wait until it is clean.

    A static record refreshed late (the views rewrite theirs a second after the last change, later
    on a loaded machine) makes the notebook dirty again after a save, so the save is repeated until
    one leaves it clean.
    """
    from playwright.sync_api import TimeoutError as PlaywrightTimeout

    deadline = time.monotonic() + timeout / 1000
    while True:
        page.evaluate("window.jupyterapp.commands.execute('docmanager:save')")
        try:
            page.wait_for_function(JS_CLEAN, timeout=20_000, polling=200)
            return
        except PlaywrightTimeout:
            if time.monotonic() > deadline:
                raise


JS_KERNEL_IDLE = """() => {
  const w = window.jupyterapp.shell.currentWidget;
  return w.sessionContext.session.kernel.status === 'idle';
}"""


def wait_kernel_idle(page, quiet_s: float = 0.3, timeout: float = 120_000) -> None:
    """Wait until the kernel has been idle for ``quiet_s`` (all work of the last message done)."""
    deadline = time.monotonic() + timeout / 1000
    while time.monotonic() < deadline:
        page.wait_for_function(JS_KERNEL_IDLE, timeout=timeout, polling=20)
        time.sleep(quiet_s)
        if page.evaluate(JS_KERNEL_IDLE):
            return
    raise TimeoutError("the kernel did not become idle")


def press_and_time(page, handle_selector: str, sources: list[str], presses: int, key_cycle=("ArrowRight",),
                   timeout: float = 60_000) -> tuple[list[float], list[float]]:
    """Press keys on a slider handle; return in-page times (ms) from keydown to bokeh data change,
    and wall times (ms) from the press until the kernel was idle again.

    Before each press the kernel is idle (so every time is one round trip, browser → kernel →
    solve → views → BokehJS, not a wait behind the previous press's remaining work).
    """
    page.evaluate(JS_INSTALL_TIMER, sources)
    handle = page.locator(handle_selector).first
    handle.focus()
    busy = []
    for k in range(presses):
        wait_kernel_idle(page)
        before = page.evaluate("() => window.__ampplan_timer.times.length")
        start = time.perf_counter()
        handle.press(key_cycle[k % len(key_cycle)])
        page.wait_for_function(f"() => window.__ampplan_timer.times.length > {before}", timeout=timeout,
                               polling="raf")
        wait_kernel_idle(page, quiet_s=0.05)
        busy.append((time.perf_counter() - start) * 1000 - 50)
    return list(page.evaluate("() => window.__ampplan_timer.times")), busy


JS_KERNEL_PRINT = """async (code) => {
  const kernel = jupyterapp.shell.currentWidget.sessionContext.session.kernel;
  let out = '';
  const future = kernel.requestExecute({code, silent: false, store_history: false});
  future.onIOPub = (msg) => { if (msg.header.msg_type === 'stream') { out += msg.content.text; } };
  await future.done;
  return out;
}"""


def kernel_print(page, code: str) -> str:
    """What ``code`` prints, run in the open notebook's kernel (not added to any cell)."""
    return page.evaluate(JS_KERNEL_PRINT, code)


def screenshot_element(page, selector: str, path: str) -> None:
    """A PNG of one element (scrolled into view first; JupyterLab's panel scrolls, not the page)."""
    # The file browser takes a third of the width: close it so that the whole canvas fits.
    page.evaluate("() => jupyterapp.shell.collapseLeft()")
    page.wait_for_timeout(300)
    target = page.locator(selector).first
    target.scroll_into_view_if_needed()
    page.wait_for_timeout(300)
    target.screenshot(path=path)

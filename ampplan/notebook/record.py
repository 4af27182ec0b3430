"""The static record kept beside every live view: HTML tables and the canvas picture, shown with a
display id and refreshed in place on every change, so that a saved notebook reads without a kernel.

The record of a view is one display output (``text/html``, or ``image/png`` with ``text/plain``)
whose display id the view keeps; :meth:`StaticRecord.refresh` rewrites it wherever it was shown
(nbclient and JupyterLab both rewrite the stored output in place). Refreshes are merged so that
the picture (a few hundred milliseconds to draw) never holds the kernel up more than once:

* during a cell's code, every record that changed is rewritten once, when the cell ends (IPython's
  ``post_run_cell`` event), however many edits the cell made;
* during a widget event (a slider being dragged), the latest state is drawn
  :data:`DEFER_SECONDS` after the last event;
* outside a kernel, at once.
"""

from __future__ import annotations

import asyncio
import html
import uuid
from typing import Callable

__all__ = ["StaticRecord", "in_widget_event", "STATIC_CLASS", "DEFER_SECONDS"]

#: CSS class of the static record's HTML (browser tests use it to tell the record from the views).
STATIC_CLASS = "ampplan-static"
#: How long a refresh from a widget event waits for the next event before drawing, seconds.
DEFER_SECONDS = 1.0


def _shell():
    try:
        from IPython import get_ipython
    except ImportError:  # pragma: no cover - IPython comes with ipywidgets
        return None
    return get_ipython()


def _handling() -> str | None:
    """The type of the kernel message being handled (``"execute_request"``, ``"comm_msg"``), if any."""
    kernel = getattr(_shell(), "kernel", None)
    if kernel is None:
        return None
    try:
        parent = kernel.get_parent("shell") or {}
    except TypeError:  # older kernels take no channel
        parent = kernel.get_parent() or {}
    return parent.get("header", {}).get("msg_type")


def in_widget_event() -> bool:
    """True while the kernel handles a widget message (not the code of a cell)."""
    return _handling() == "comm_msg"


#: Records to rewrite when the running cell ends.
_AT_CELL_END: dict = {}
_HOOKED = []


def _flush_at_cell_end(*_):
    pending = list(_AT_CELL_END.values())
    _AT_CELL_END.clear()
    for record in pending:
        record._flush()


def _defer_to_cell_end(record) -> bool:
    shell = _shell()
    if shell is None or not hasattr(shell, "events"):
        return False
    if not _HOOKED:
        shell.events.register("post_run_cell", _flush_at_cell_end)
        _HOOKED.append(shell)
    _AT_CELL_END[record.display_id] = record
    return True


class StaticRecord:
    """One display output that follows a live view.

    Parameters
    ----------
    render : callable
        Returns the output's mime bundle (a dict of mime type to data) for the view as it is now.
    """

    def __init__(self, render: Callable[[], dict]):
        self._render = render
        self.display_id = f"ampplan-{uuid.uuid4().hex}"
        self.shown = False
        self._pending = None
        self.refresh_count = 0

    def bundle(self) -> dict:
        """The mime bundle as it is now."""
        return self._render()

    def show(self) -> None:
        """Display the record here (once per place; later refreshes update every place)."""
        from IPython.display import display
        display(self.bundle(), raw=True, display_id=self.display_id)
        self.shown = True

    def refresh(self) -> None:
        """Rewrite the record wherever it was shown, merged with other refreshes (see above)."""
        if not self.shown:
            return
        handling = _handling()
        if handling == "execute_request" and _defer_to_cell_end(self):
            return
        if handling == "comm_msg":
            try:
                loop = asyncio.get_running_loop()
            except RuntimeError:
                loop = None
            if loop is not None:
                if self._pending is not None:
                    self._pending.cancel()
                self._pending = loop.call_later(DEFER_SECONDS, self._flush)
                return
        self._flush()

    def _flush(self) -> None:
        from IPython.display import update_display
        self._pending = None
        update_display(self.bundle(), raw=True, display_id=self.display_id)
        self.refresh_count += 1


def html_block(body: str, title: str) -> str:
    """Wrap a static record's HTML: a small heading that says what it is."""
    return (f"<div class='{STATIC_CLASS}'><p style='margin:2px 0;font-size:85%;color:#555'>"
            f"{html.escape(title)}</p>{body}</div>")

"""The canvas's widget: jupyter_bokeh's ``BokehModel`` that sends one message per edit.

jupyter_bokeh sends every change of the bokeh document as its own ``PATCH-DOC`` message (three
comm messages, plus two per binary buffer), and BokehJS applies and repaints each one. An edit of
the plan changes a dozen or more sources, titles and ranges, so the browser worked through some
hundred comm messages per key press. :meth:`BatchedBokehModel.batch` holds the changes made inside
it and sends them as one ``PATCH-DOC`` message with all the events, which BokehJS applies in one
step (``Document.apply_json_patch`` takes a list of events; the receiver collects the buffers the
header announces).

BokehJS also sends every change it applied back to the kernel (jupyter_bokeh's view re-sends the
changes it held while applying a patch). The canvas has no tool that changes anything (hover only),
so a change of a property this widget itself sent is such an echo: it is dropped before it is
decoded, instead of being decoded and set to the value it already has.
"""

from __future__ import annotations

from contextlib import contextmanager

from bokeh.protocol import Protocol
from jupyter_bokeh import BokehModel

__all__ = ["BatchedBokehModel"]


class BatchedBokehModel(BokehModel):
    """A ``BokehModel`` whose changes inside :meth:`batch` reach the browser as one message.

    Outside :meth:`batch` it behaves as jupyter_bokeh's own (one message per change).

    Attributes
    ----------
    messages_sent : int
        ``PATCH-DOC`` messages sent so far (tests and benchmarks read it).
    """

    def __init__(self, model, **kwargs):
        self._held: list | None = None
        self.messages_sent = 0
        self.echoes_dropped = 0
        self._sent: set = set()  # (model id, property) pairs this widget has sent
        super().__init__(model, **kwargs)

    @contextmanager
    def batch(self):
        """Hold every document change made inside, then send them all as one message."""
        if self._held is not None:  # already batching: the outer batch sends
            yield
            return
        self._held = []
        try:
            yield
        finally:
            events, self._held = self._held, None
            if events:
                self._send_patch(events)

    def _document_patched(self, event) -> None:
        if event.setter is self:
            return
        if self._held is not None:
            self._held.append(event)
            return
        self._send_patch([event])

    def _send_patch(self, events: list) -> None:
        # The same framing as jupyter_bokeh's own _document_patched, for a list of events.
        import json

        for event in events:
            model, attr = getattr(event, "model", None), getattr(event, "attr", None)
            if model is not None and attr is not None:
                self._sent.add((model.id, attr))
        msg = Protocol().create("PATCH-DOC", events)
        self.send({"msg": "patch", "payload": msg.header_json})
        self.send({"msg": "patch", "payload": msg.metadata_json})
        self.send({"msg": "patch", "payload": msg.content_json})
        for buffer in msg.buffers:
            self.send({"msg": "patch", "payload": json.dumps(buffer.ref)})
            self.send({"msg": "patch"}, [buffer.to_bytes()])
        self.messages_sent += 1

    def _sync_model(self, _model, content: dict, _buffers: list) -> None:
        if (content.get("event") == "jsevent" and content.get("kind") == "ModelChanged"
                and (content.get("model", {}).get("id"), content.get("attr")) in self._sent):
            self.echoes_dropped += 1
            return
        super()._sync_model(_model, content, _buffers)

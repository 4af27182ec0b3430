"""The canvas widget sends one bokeh patch per edit, and bokeh itself can apply it.

Outside reference: bokeh's own ``Document.apply_json_patch`` (the Python twin of what BokehJS runs
in the browser) applies the message the widget sent to a copy of the document taken before the
edit; the copy must then hold exactly what the canvas holds.
"""

from __future__ import annotations

import json

import pytest

pytest.importorskip("ipywidgets")
pytest.importorskip("bokeh")
pytest.importorskip("jupyter_bokeh")

from bokeh.document import Document  # noqa: E402
from bokeh.models import ColumnDataSource  # noqa: E402

from ampplan import notebook as nb  # noqa: E402


@pytest.fixture
def canvas():
    live = nb.LivePlan.demo()
    view = live.canvas()
    sent = []
    view.plot.send = lambda content, buffers=None: sent.append((content, buffers))
    return live, view, sent


def patches(sent):
    """The PATCH-DOC messages in what was sent: each is header, metadata, content (+ buffers)."""
    found, k = [], 0
    while k < len(sent):
        header = json.loads(sent[k][0]["payload"])
        assert header["msgtype"] == "PATCH-DOC"
        content = json.loads(sent[k + 2][0]["payload"])
        found.append((header, content))
        k += 3 + 2 * header.get("num_buffers", 0)
    return found


def plain(data) -> dict:
    return json.loads(json.dumps(dict(data)))


def named_sources(doc) -> dict:
    return {m.name: m for m in doc.models if isinstance(m, ColumnDataSource) and m.name}


def test_an_edit_reaches_the_browser_as_one_patch_that_bokeh_applies(canvas):
    live, view, sent = canvas
    doc = view.canvas.layout.document
    copy = Document.from_json(doc.to_json())
    live.set("s1.rc", 5.6e3)
    [(header, content)] = patches(sent)
    assert header.get("num_buffers", 0) == 0  # plain lists ride inside the message
    assert len(content["events"]) > 5          # every source, title and range of the edit
    copy.apply_json_patch(content)
    ours, theirs = named_sources(doc), named_sources(copy)
    assert ours.keys() == theirs.keys()
    for name, source in ours.items():
        # JSON has no tuples: the chain's (stage, "has") factors come back as lists.
        assert plain(theirs[name].data) == plain(source.data), name


def test_an_edit_that_changes_nothing_on_the_canvas_sends_nothing(canvas):
    live, view, sent = canvas
    live.set("s1.rc", live.get("s1.rc"))
    assert sent == []


def test_outside_a_batch_each_change_is_its_own_message(canvas):
    live, view, sent = canvas
    source = view.canvas.source("s1", "qpoint")
    source.data = {"x": [1.0], "y": [2.0], "text": ["a"]}
    view.canvas.panels["s1"].figure.title.text = "another title"
    assert len(patches(sent)) == 2


def test_the_browser_echo_of_a_sent_change_is_dropped_undecoded(canvas):
    live, view, sent = canvas
    live.set("s1.rc", 5.6e3)
    source = view.canvas.source("s1", "qpoint")
    data = dict(source.data)
    # BokehJS re-sends what it applied; "new" is not even decodable here, so decoding would fail.
    view.plot._sync_model(view.plot, {"event": "jsevent", "kind": "ModelChanged", "model": {"id": source.id},
                                      "attr": "data", "new": {"type": "not-a-type"}}, [])
    assert view.plot.echoes_dropped == 1
    assert dict(source.data) == data


def test_other_messages_from_the_browser_still_reach_bokeh(canvas, monkeypatch):
    live, view, sent = canvas
    from jupyter_bokeh import BokehModel
    seen = []
    monkeypatch.setattr(BokehModel, "_sync_model", lambda self, m, content, b: seen.append(content))
    figure = view.canvas.panels["s1"].figure
    view.plot._sync_model(view.plot, {"event": "jsevent", "kind": "ModelChanged", "model": {"id": figure.id},
                                      "attr": "inner_width", "new": 300}, [])
    assert len(seen) == 1 and view.plot.echoes_dropped == 0

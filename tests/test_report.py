"""``ampplan report`` and the static picture.

Outside references: the PNG signature and chunk layout of the PNG specification (ISO/IEC 15948),
read back with matplotlib's own PNG reader; the report's numbers are compared with an independent
``plan.solve()`` of the same plan; "standalone and offline" is checked by parsing the HTML with the
standard library's html.parser and refusing any script, any external reference and any URL that
is not a data: URL.
"""

from __future__ import annotations

import io
import json
from html.parser import HTMLParser

import pytest

matplotlib = pytest.importorskip("matplotlib")

import ampplan  # noqa: E402
from ampplan.analyses.plane import plan_planes  # noqa: E402
from ampplan.cli import main  # noqa: E402
from ampplan.live import ObservablePlan  # noqa: E402
from ampplan.notebook.picture import draw_png  # noqa: E402
from ampplan.report import SAFETY_NOTE  # noqa: E402
from ampplan.units import format_quantity  # noqa: E402

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # ISO/IEC 15948, the file signature


def read_png(data: bytes):
    from matplotlib import image
    return image.imread(io.BytesIO(data), format="png")


class Audit(HTMLParser):
    """Every tag and every URL-bearing attribute of a document."""

    def __init__(self):
        super().__init__()
        self.tags, self.urls, self.text = [], [], []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        for name, value in attrs:
            if name in ("src", "href", "action", "data", "srcset", "poster") and value is not None:
                self.urls.append(value)

    def handle_data(self, data):
        self.text.append(data)


def test_picture_is_a_png_with_one_panel_per_stage_and_the_chain():
    live = ObservablePlan.demo()
    png = draw_png(plan_planes(live.result, live.plan), dpi=50)
    assert png[:8] == PNG_SIGNATURE
    pixels = read_png(png)
    # Three stages and the chain view: two rows of three 4.2 × 3.6 inch panels at 50 dpi.
    assert pixels.shape[:2] == (round(2 * 3.6 * 50), round(3 * 4.2 * 50))
    stale = draw_png(plan_planes(live.result, live.plan), stale=True, dpi=50)
    assert stale != png


def test_report_of_the_demo_is_standalone_and_offline(tmp_path, capsys):
    out = tmp_path / "report.html"
    status = main(["report", "--demo", "-o", str(out)])
    assert status == 0, capsys.readouterr().err
    assert "wrote" in capsys.readouterr().out
    text = out.read_text(encoding="utf-8")
    audit = Audit()
    audit.feed(text)
    assert "script" not in audit.tags and "link" not in audit.tags and "iframe" not in audit.tags
    assert audit.urls and all(u.startswith("data:image/png;base64,") for u in audit.urls)
    assert "http://" not in text and "https://" not in text and "@import" not in text
    # The numbers are those of an independent solve of the same plan.
    result = ObservablePlan.demo().plan.solve()
    body = "".join(audit.text)
    for needed in (format_quantity(result.supply_current, "A"), format_quantity(result.stages[0].transistor.ic, "A"),
                   f"limited by {result.limiting_stage}", "No cautions.", SAFETY_NOTE[:60]):
        assert needed in body, needed
    # The picture inside is a PNG.
    import base64
    png = base64.b64decode(audit.urls[0].split(",", 1)[1])
    assert png[:8] == PNG_SIGNATURE and read_png(png).shape[0] > 100


def test_report_of_a_plan_file_with_cautions_and_another_model(tmp_path, capsys):
    plan = ObservablePlan.demo().plan
    plan.set("s1.rc", 47e3)  # saturates s1: a caution and a stage out of forward-active
    plan.save(tmp_path / "p.json")
    out = tmp_path / "r.html"
    status = main(["report", str(tmp_path / "p.json"), "-o", str(out), "--model", "ebers-moll"])
    assert status == 1
    text = out.read_text(encoding="utf-8")
    assert "ebers-moll model" in text and "NOT OK" in text and "Cautions:" in text
    result = plan.solve(model="ebers-moll")
    audit = Audit()
    audit.feed(text)
    body = "".join(audit.text)
    assert result.cautions and all(c in body for c in result.cautions)


@pytest.mark.parametrize("argv, words", [
    (["report", "--demo"], "required"),                        # no -o
    (["report", "-o", "x.html"], "give a plan file"),
    (["report", "missing.json", "-o", "x.html"], "missing.json"),
    (["report", "--demo", "-o", "x.html", "--set", "s1.rc=-4k7"], "s1.rc"),
])
def test_report_bad_input_exits_2_with_a_message(tmp_path, capsys, monkeypatch, argv, words):
    monkeypatch.chdir(tmp_path)
    assert main(argv) == 2
    assert words in capsys.readouterr().err
    assert not (tmp_path / "x.html").exists()


def test_report_into_a_missing_folder_is_bad_input(tmp_path, capsys):
    assert main(["report", "--demo", "-o", str(tmp_path / "no" / "such" / "r.html")]) == 2
    assert "cannot write" in capsys.readouterr().err


def test_report_of_a_plan_the_solver_cannot_settle(tmp_path, capsys, monkeypatch):
    def unsettled(plan, *args, **kwargs):
        raise ampplan.errors.NoConsistentRegionError("no consistent assignment (test double)")

    monkeypatch.setattr(ampplan.Plan, "solve", unsettled)
    assert main(["report", "--demo", "-o", str(tmp_path / "r.html")]) == 1
    assert "could not settle" in capsys.readouterr().err and not (tmp_path / "r.html").exists()


def test_picture_keeps_the_palette_colours_of_every_layer():
    # The saved picture is palette-quantised to keep notebooks small; each layer's colour must
    # survive (within a few levels of 255) so the picture still reads as the canvas does.
    from PIL import Image

    from ampplan.notebook.look import COLOURS
    live = ObservablePlan.demo()
    png = draw_png(plan_planes(live.result, live.plan))
    image = Image.open(io.BytesIO(png))
    assert image.mode == "P"
    present = {colour for _, colour in image.convert("RGB").getcolors(maxcolors=4096)}
    for name in ("dc", "ac", "qpoint", "swing", "limit", "available", "demanded"):
        want = tuple(int(COLOURS[name][k:k + 2], 16) for k in (1, 3, 5))
        assert any(max(abs(a - b) for a, b in zip(want, c)) <= 12 for c in present), name

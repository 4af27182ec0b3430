"""What a designer reads: one formatter for every quantity shown (issue 6, item 7).

Source for the prefixes: SI prefixes (BIPM, The International System of Units, 9th edition, table 7;
from memory): micro is written with the micro sign µ, never an ASCII u; the display stops at
femto, below which a value prints in e-notation, so one line never mixes the two styles.
"""

from __future__ import annotations

import math

import pytest

from ampplan.units import format_quantity, parse_quantity


@pytest.mark.parametrize("value, unit, shown", [
    (946.1e-6, "A", "946.1 µA"),
    (4.73e-6, "A", "4.73 µA"),
    (4700.0, "Ω", "4.7 kΩ"),
    (2e-15, "A", "2 fA"),
    (3.388e-21, "A", "3.388e-21 A"),
    (5.855e-18, "A", "5.855e-18 A"),
    (0.0, "V", "0 V"),
    (-math.inf, "Ω", "-∞ Ω"),
    (math.nan, "V", "—"),
    (None, "V", "—"),
])
def test_format_quantity(value, unit, shown):
    assert format_quantity(value, unit) == shown


def test_shown_text_reads_back():
    # Whatever the display writes, the parser reads (µ included), to the digits shown.
    for value in (946.1e-6, 4.7e3, 2.2e6, 3.388e-21, 12.0, 1.5e-12):
        for unit in ("A", "Ω", "V", "F"):
            text = format_quantity(value, unit)
            assert "u" not in text.replace("µ", "")
            assert math.isclose(parse_quantity(text, unit), value, rel_tol=5e-4), text


def test_other_quantiphy_users_keep_their_preferences():
    # The display preferences live on a subclass: quantiphy's own defaults are untouched.
    from quantiphy import Quantity
    assert Quantity(4.7e-6, "A").render() == "4.7 uA"


# -- the reprs and tables of results (issue 6, item 7) --------------------------------------------
import html.parser
import re

import ampplan
from ampplan.analyses.results import STAGE_COLUMNS
from ampplan.units import LINE_WIDTH, format_call


def _demo():
    import importlib.resources
    with importlib.resources.as_file(importlib.resources.files("ampplan") / "data/demo_plan.json") as path:
        return ampplan.Plan.load(path)


class _Cells(html.parser.HTMLParser):
    """The text of every <th>/<td> of the first <table>, row by row."""

    def __init__(self):
        super().__init__()
        self.rows, self._cell, self._tables = [], None, 0

    def handle_starttag(self, tag, attrs):
        if tag == "table":
            self._tables += 1
        if self._tables == 1 and tag == "tr":
            self.rows.append([])
        if self._tables == 1 and tag in ("td", "th"):
            self._cell = ""

    def handle_endtag(self, tag):
        if tag in ("td", "th") and self._cell is not None:
            self.rows[-1].append(self._cell)
            self._cell = None

    def handle_data(self, data):
        if self._cell is not None:
            self._cell += data


@pytest.mark.parametrize("model", ["constant-drop", "ebers-moll"])
def test_text_and_html_tables_show_the_same_columns_and_cells(model):
    result = _demo().solve(model=model)
    parser = _Cells()
    parser.feed(result._repr_html_())
    html_rows = parser.rows
    text_lines = result.table().splitlines()
    headers = [head for head, _, _ in STAGE_COLUMNS]
    assert html_rows[0] == headers
    # Both margins are shown, each in its own unit, in both forms (no lone "headroom" column).
    assert "sat. margin" in text_lines[0] and "cutoff margin" in text_lines[0]
    for stage, cells in zip(result.stages, html_rows[1:]):
        line = next(line for line in text_lines[2:] if line[1:].startswith(stage.id))
        for cell in cells:
            assert cell in line, (cell, line)


def test_one_column_declaration_names_real_json_fields():
    # Every column says which field of StageResult.to_dict() it shows, and that field exists.
    stage = _demo().solve().stages[0].to_dict()
    for _, path, _ in STAGE_COLUMNS:
        node = stage
        for key in path.split("."):
            assert key in node, path
            node = node[key]


def test_reprs_keep_lines_short_and_numbers_whole():
    plan = _demo()
    result = plan.solve()
    texts = [repr(s) for s in plan.stages] + [repr(s.device) for s in plan.stages]
    texts += [repr(s) for s in result.stages] + [repr(s.transistor) for s in result.stages]
    texts += [repr(result.operating_point), repr(result.stages[0].swing), repr(result.stages[0].load_lines.ac)]
    for text in texts:
        for line in text.splitlines():
            assert len(line) <= LINE_WIDTH, line
        # Micro is µ, never an ASCII u.
        assert not re.search(r"\d u[AVWFΩ]", text), text
    # Values are shown in engineering notation, not as raw floats.
    assert "100 kΩ" in repr(plan.stages[0]) and "100000.0" not in repr(plan.stages[0])


def test_format_call_wraps_at_commas_and_nests():
    inner = format_call("Inner", ["a=1 V", "b=2 V", "c=3 V"], width=20)
    text = format_call("Outer", ["x=10 kΩ", ("inner=", inner)], width=30)
    assert text == ("Outer(x=10 kΩ,\n"
                    "      inner=Inner(a=1 V, b=2 V,\n"
                    "                  c=3 V))")
    assert format_call("Empty", []) == "Empty()"

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

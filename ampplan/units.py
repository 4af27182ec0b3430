"""Engineering notation at the edges (CLI, reprs, widgets), through the quantiphy library.

Inside ampplan every quantity is a float in SI base units; these two functions are the only
place text turns into numbers and back.
"""

from __future__ import annotations

import math

from quantiphy import InvalidNumber, Quantity

from .errors import InvalidValueError

__all__ = ["parse_quantity", "format_quantity", "format_call", "wrap_items", "LINE_WIDTH", "MAX_QUANTITY_LENGTH"]


class _Shown(Quantity):
    """quantiphy with ampplan's display preferences, kept on a subclass so that other users of
    quantiphy in the same process are untouched: the micro sign µ (not an ASCII u), and prefixes
    from tera down to femto only, so that anything smaller prints in one style (``3.4e-21 A``)
    instead of a mix of rare prefixes (atto, zepto) and e-notation."""


_Shown.set_prefs(map_sf=Quantity.map_sf_to_greek, output_sf="TGMkmunpf")

# Plain-ASCII spellings accepted for unit symbols.
_ASCII_UNITS = {"Ω": "Ohm", "°C": "C"}
#: Longest text read as a quantity: a float needs at most 17 significant digits, an exponent, a
#: prefix and a unit, so 40 characters are room to spare; longer text is refused before parsing
#: (the parser's time grows with the length, to minutes for 20,000 digits).
MAX_QUANTITY_LENGTH = 40


def parse_quantity(text, unit: str = "") -> float:
    """Read ``"4.7k"``, ``"100u"``, ``"2.2 MΩ"`` or a plain number as a float in SI base units.

    A unit after the number must be ``unit`` (or its ASCII spelling, ``Ohm`` for Ω, ``C`` for °C);
    with ``unit=""`` none is allowed. Raises InvalidValueError naming the text when it is not a
    number or carries another unit.
    """
    if isinstance(text, (int, float)) and not isinstance(text, bool):
        return float(text)
    if not isinstance(text, str):
        raise InvalidValueError(f"cannot read a {type(text).__name__} as a quantity; give text such as '4.7k'")
    if len(text.strip()) > MAX_QUANTITY_LENGTH:
        raise InvalidValueError(f"cannot read {text.strip()[:20]!r}... as a quantity: {len(text.strip())} characters, "
                                f"more than the {MAX_QUANTITY_LENGTH} a number needs")
    try:
        quantity = Quantity(str(text).strip())
    except (InvalidNumber, ValueError) as exc:
        raise InvalidValueError(f"cannot read {text!r} as a quantity{' in ' + unit if unit else ''}") from exc
    # Anything after the number must be the expected unit (or nothing): quantiphy would otherwise
    # read "4k7" as 4 with a unit "k7", or "1meg" as 1 m with a unit "eg".
    if quantity.units and quantity.units not in {unit, _ASCII_UNITS.get(unit, unit)}:
        expected = f"{unit} or no unit" if unit else "no unit"
        raise InvalidValueError(f"cannot read {text!r} as a quantity{' in ' + unit if unit else ''}: "
                                f"unexpected {quantity.units!r} after the number, expected {expected} "
                                "(write 4.7k, 100u, 2.2M)")
    return float(quantity)


def format_quantity(value: float, unit: str = "", digits: int = 4) -> str:
    """Format a float with an SI prefix: ``format_quantity(4700, "Ω") == "4.7 kΩ"``.

    None and NaN print as ``"—"`` (no value), infinities as ``"∞"`` with the unit.
    """
    if value is None:
        return "—"
    if isinstance(value, str):
        return value
    try:
        value = float(value)
    except (TypeError, ValueError):
        raise InvalidValueError(f"format_quantity expects a number, got {type(value).__name__}") from None
    if math.isnan(value):
        return "—"
    if math.isinf(value):
        return (("-" if value < 0 else "") + "∞ " + unit).strip()
    if value == 0:
        return f"0 {unit}".strip()
    return _Shown(value, unit or None).render(prec=digits - 1, strip_zeros=True)


#: Longest line a text form (repr, table line) aims for: notebooks wrap longer output lines
#: anywhere, even in the middle of a number and its unit.
LINE_WIDTH = 96


def format_call(name: str, items, width: int = LINE_WIDTH) -> str:
    """``name(item, item, ...)`` wrapped at the commas so that no line passes ``width`` columns.

    Continuation lines are indented under the first item, and an item is never split, so a
    number stays on one line with its unit: ``Transistor(npn, beta=200, early_voltage=100 V)``.

    Parameters
    ----------
    name : str
        What is called (a class name).
    items : sequence of str or (str, str)
        Already formatted items (``"rc=4.7 kΩ"``), or (prefix, nested call) pairs whose nested
        call was formatted for the width left after the indent and the prefix.
    width : int
        Target line width, characters.
    """
    return wrap_items(f"{name}(", items, width, end=")")


def wrap_items(head: str, items, width: int = LINE_WIDTH, end: str = "") -> str:
    """``head`` followed by ``items`` separated by commas, wrapped as :func:`format_call` wraps
    (continuation lines indented to the width of ``head``), then ``end``."""
    indent = " " * len(head)
    lines, current = [], head
    for k, item in enumerate(items):
        # An item may be (prefix, nested call text): its continuation lines line up under the
        # nested call, e.g. ("device=", repr of a Transistor formatted for the narrower width).
        prefix, body = item if isinstance(item, tuple) else ("", str(item))
        piece = prefix + body.replace("\n", "\n" + indent + " " * len(prefix))
        piece += end if k == len(items) - 1 else ","
        fresh = current in (head, indent)
        # An item of several lines starts a line of its own.
        if not fresh and ("\n" in piece or len(current) + 1 + len(piece.split("\n")[0]) > width):
            lines.append(current.rstrip())
            current, fresh = indent, True
        current += ("" if fresh else " ") + piece
    if not items:
        current += end
    lines.append(current)
    return "\n".join(lines)

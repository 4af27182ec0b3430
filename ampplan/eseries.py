"""Standard preferred values: the E-series of IEC 60063 (E6, E12, E24, E48, E96, E192).

A series E\\ *N* has *N* values per decade, roughly 10^(i/N) for i = 0 … N−1. The standard rounds
E6–E24 to two significant digits and E48–E192 to three, and it keeps a few historical values that
plain rounding of 10^(i/N) would not give: in E24 (and so in E12 and E6) 2.7, 3.0, 3.3, 3.6, 3.9,
4.3, 4.7 and 8.2, and in E192 the value 9.20 (plain rounding gives 9.19). E12 and E6 are every
second and fourth value of E24; E96 and E48 every second and fourth value of E192.

The mantissas are kept as integers (10 … 91, 100 … 988), so a value in any decade is the float
nearest to its decimal value: ``nearest(4650.0, "E24") == 4700.0`` exactly, and
``nearest(4.7e-9, "E12") == 4.7e-9``.

This module is shared by every layer and imports nothing of ampplan but its errors.
"""

from __future__ import annotations

import bisect
import math
import numbers
from typing import Literal, get_args

from .errors import InvalidValueError, UnknownModelError

__all__ = ["SeriesName", "SERIES_NAMES", "series", "nearest", "neighbours", "series_values"]

SeriesName = Literal["E6", "E12", "E24", "E48", "E96", "E192"]
#: The series this module knows, in order of density.
SERIES_NAMES: tuple[str, ...] = get_args(SeriesName)

# IEC 60063, E24 and E192, as integer mantissas (two and three significant digits).
_E24 = (10, 11, 12, 13, 15, 16, 18, 20, 22, 24, 27, 30, 33, 36, 39, 43, 47, 51, 56, 62, 68, 75, 82, 91)
_E192 = (
    100, 101, 102, 104, 105, 106, 107, 109, 110, 111, 113, 114, 115, 117, 118, 120, 121, 123, 124, 126,
    127, 129, 130, 132, 133, 135, 137, 138, 140, 142, 143, 145, 147, 149, 150, 152, 154, 156, 158, 160,
    162, 164, 165, 167, 169, 172, 174, 176, 178, 180, 182, 184, 187, 189, 191, 193, 196, 198, 200, 203,
    205, 208, 210, 213, 215, 218, 221, 223, 226, 229, 232, 234, 237, 240, 243, 246, 249, 252, 255, 258,
    261, 264, 267, 271, 274, 277, 280, 284, 287, 291, 294, 298, 301, 305, 309, 312, 316, 320, 324, 328,
    332, 336, 340, 344, 348, 352, 357, 361, 365, 370, 374, 379, 383, 388, 392, 397, 402, 407, 412, 417,
    422, 427, 432, 437, 442, 448, 453, 459, 464, 470, 475, 481, 487, 493, 499, 505, 511, 517, 523, 530,
    536, 542, 549, 556, 562, 569, 576, 583, 590, 597, 604, 612, 619, 626, 634, 642, 649, 657, 665, 673,
    681, 690, 698, 706, 715, 723, 732, 741, 750, 759, 768, 777, 787, 796, 806, 816, 825, 835, 845, 856,
    866, 876, 887, 898, 909, 920, 931, 942, 953, 965, 976, 988)

#: Values the look-ups take: a float holds a decade and both its neighbours (IEEE 754 doubles are
#: normal from 2.2e-308 to 1.8e308) only well inside that range; any real part sits far inside it.
VALUE_RANGE = (1e-300, 1e300)

#: Integer mantissas and the power of ten that makes them 1 ≤ m < 10, per series.
_TABLES: dict[str, tuple[tuple[int, ...], int]] = {
    "E6": (_E24[::4], 1), "E12": (_E24[::2], 1), "E24": (_E24, 1),
    "E48": (_E192[::4], 2), "E96": (_E192[::2], 2), "E192": (_E192, 2),
}


def _table(name) -> tuple[tuple[int, ...], int]:
    if not isinstance(name, str) or name.upper() not in _TABLES:
        raise UnknownModelError(f"unknown E-series {name!r}; the IEC 60063 series are {', '.join(SERIES_NAMES)}")
    return _TABLES[name.upper()]


def series(name: str) -> tuple[float, ...]:
    """The mantissas of an IEC 60063 series, 1 ≤ m < 10, ascending.

    Parameters
    ----------
    name : {"E6", "E12", "E24", "E48", "E96", "E192"}
        Case does not matter (``"e24"`` works).

    Returns
    -------
    tuple of float
        N values (N = 6 … 192): ``series("E6") == (1.0, 1.5, 2.2, 3.3, 4.7, 6.8)``.

    Raises
    ------
    UnknownModelError
        ``name`` is not one of the six series.
    """
    digits, shift = _table(name)
    return tuple(m / 10 ** shift for m in digits)


def _scaled(mantissa: int, exponent: int) -> float:
    """mantissa · 10**exponent as the float nearest its decimal value (integer arithmetic first)."""
    return float(mantissa * 10 ** exponent) if exponent >= 0 else mantissa / 10 ** (-exponent)


def _value(value, what: str = "value") -> float:
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise InvalidValueError(f"E-series {what} must be a positive number, got {value!r}")
    number = float(value)
    if not (math.isfinite(number) and number > 0):
        raise InvalidValueError(f"E-series {what} must be a positive, finite number, got {value!r}")
    if not VALUE_RANGE[0] <= number <= VALUE_RANGE[1]:
        raise InvalidValueError(f"E-series {what} must be from {VALUE_RANGE[0]:g} to {VALUE_RANGE[1]:g}, got "
                                f"{value!r}")
    return number


def series_values(name: str, low: float, high: float) -> tuple[float, ...]:
    """Every value of a series from ``low`` to ``high`` (inclusive), ascending, over all decades.

    Raises
    ------
    UnknownModelError
        Unknown series name.
    InvalidValueError
        A bound is not a positive finite number, or ``low > high``.
    """
    digits, shift = _table(name)
    lo, hi = _value(low, "lower bound"), _value(high, "upper bound")
    if lo > hi:
        raise InvalidValueError(f"E-series range: lower bound {lo!r} is above the upper bound {hi!r}")
    out = []
    for decade in range(math.floor(math.log10(lo)) - 1, math.floor(math.log10(hi)) + 2):
        out += [v for v in (_scaled(m, decade - shift) for m in digits) if lo <= v <= hi]
    return tuple(out)


def _around(number: float, name: str) -> list[float]:
    """The series values of the decade holding ``number`` and one value either side of it."""
    digits, shift = _table(name)
    decade = math.floor(math.log10(number))
    # Three decades, so rounding in log10 near a decade edge cannot lose a candidate.
    return [_scaled(m, d - shift) for d in (decade - 1, decade, decade + 1) for m in digits]


def neighbours(value: float, name: str) -> tuple[float, float]:
    """The series values just below and just above ``value`` (any decade).

    Returns
    -------
    (below, above) : tuple of float
        The largest series value ≤ ``value`` and the smallest ≥ ``value``; both equal ``value``
        when it is itself a series value.

    Raises
    ------
    UnknownModelError
        Unknown series name.
    InvalidValueError
        ``value`` is not a positive finite number.
    """
    number = _value(value)
    candidates = _around(number, name)
    k = bisect.bisect_left(candidates, number)
    if candidates[k] == number:
        return number, number
    return candidates[k - 1], candidates[k]


def nearest(value: float, name: str) -> float:
    """The series value nearest to ``value`` on a logarithmic scale (smallest ratio).

    A value exactly halfway in ratio between two series values (their geometric mean) goes to the
    lower one.

    Raises
    ------
    UnknownModelError
        Unknown series name.
    InvalidValueError
        ``value`` is not a positive finite number.
    """
    number = _value(value)
    below, above = neighbours(number, name)
    return below if math.log(number / below) <= math.log(above / number) else above

"""The E-series tables and the nearest/neighbour look-ups.

Source: IEC 60063 (preferred number series for resistors and capacitors), the tables of E6 … E192
as printed in the standard (from memory; the values below are the ones every parts catalogue
repeats). The standard is also checked through its construction rule: value i of E*N* is 10^(i/N)
rounded to two significant digits (E6–E24) or three (E48–E192), except for the historical values
the standard keeps, listed here.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from ampplan import eseries
from ampplan.errors import InvalidValueError, UnknownModelError

# IEC 60063 tables of the small series, as printed.
IEC_E6 = (1.0, 1.5, 2.2, 3.3, 4.7, 6.8)
IEC_E12 = (1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2)
IEC_E24 = (1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7, 5.1, 5.6,
           6.2, 6.8, 7.5, 8.2, 9.1)
# IEC 60063 E48, as printed.
IEC_E48 = (1.00, 1.05, 1.10, 1.15, 1.21, 1.27, 1.33, 1.40, 1.47, 1.54, 1.62, 1.69, 1.78, 1.87, 1.96, 2.05,
           2.15, 2.26, 2.37, 2.49, 2.61, 2.74, 2.87, 3.01, 3.16, 3.32, 3.48, 3.65, 3.83, 4.02, 4.22, 4.42,
           4.64, 4.87, 5.11, 5.36, 5.62, 5.90, 6.19, 6.49, 6.81, 7.15, 7.50, 7.87, 8.25, 8.66, 9.09, 9.53)

# Where IEC 60063 departs from plain rounding of 10^(i/N): value in the standard -> plain rounding.
E24_DEVIATIONS = {2.7: 2.6, 3.0: 2.9, 3.3: 3.2, 3.6: 3.5, 3.9: 3.8, 4.3: 4.2, 4.7: 4.6, 8.2: 8.3}
E192_DEVIATIONS = {9.20: 9.19}


@pytest.mark.parametrize("name, table", [("E6", IEC_E6), ("E12", IEC_E12), ("E24", IEC_E24), ("E48", IEC_E48)])
def test_small_series_equal_the_printed_tables(name, table):
    # IEC 60063 tables as printed.
    assert eseries.series(name) == table


@pytest.mark.parametrize("name, digits", [("E6", 2), ("E12", 2), ("E24", 2), ("E48", 3), ("E96", 3), ("E192", 3)])
def test_series_follow_the_construction_rule_except_the_kept_values(name, digits):
    # IEC 60063: 10^(i/N) rounded to 2 (E6-E24) or 3 (E48-E192) significant digits, except the
    # historical values the standard keeps (E24's 2.7 ... 4.7 and 8.2, E192's 9.20).
    values = eseries.series(name)
    n = int(name[1:])
    assert len(values) == n
    deviations = E24_DEVIATIONS if digits == 2 else E192_DEVIATIONS
    found = {}
    for i, value in enumerate(values):
        plain = round(10 ** (i / n), digits - 1)
        if not math.isclose(value, plain, abs_tol=1e-12):
            found[value] = plain
    assert found == {v: p for v, p in deviations.items() if v in values}


def test_series_nest_as_the_standard_says():
    # IEC 60063: E12 is every other E24 value, E6 every other E12 value; likewise E96/E48 in E192.
    e24, e192 = eseries.series("E24"), eseries.series("E192")
    assert eseries.series("E12") == e24[::2] and eseries.series("E6") == e24[::4]
    assert eseries.series("E96") == e192[::2] and eseries.series("E48") == e192[::4]
    for name in eseries.SERIES_NAMES:
        values = eseries.series(name)
        assert values[0] == 1.0 and values[-1] < 10.0
        assert all(a < b for a, b in zip(values, values[1:]))
    assert eseries.series("e24") == e24  # case does not matter


def test_values_in_other_decades_are_the_decimal_values():
    # 4.7 kΩ is the float 4700.0 exactly, 4.7 nF the float nearest 4.7e-9: no accumulated rounding.
    assert eseries.nearest(4650.0, "E24") == 4700.0
    assert eseries.nearest(4.65e-9, "E12") == 4.7e-9
    assert eseries.nearest(2.2e6, "E6") == 2.2e6
    assert eseries.neighbours(1.0e-12, "E6") == (1.0e-12, 1.0e-12)


def test_nearest_is_on_a_log_scale():
    # Between 1.0 and 1.5 (E6) the boundary is their geometric mean, 1.2247, not 1.25: 1.24 is
    # nearer 1.5 in ratio (1.21 against 1.24) although nearer 1.0 in difference.
    assert eseries.nearest(1.24, "E6") == 1.5
    assert eseries.nearest(1.22, "E6") == 1.0
    assert eseries.nearest(math.sqrt(1.0 * 1.5), "E6") == 1.0  # exact halfway goes down
    assert eseries.nearest(1240.0, "E6") == 1500.0


def test_neighbours_cross_decades():
    assert eseries.neighbours(9.99e3, "E12") == (8.2e3, 10e3)
    assert eseries.neighbours(0.95, "E24") == (0.91, 1.0)
    assert eseries.neighbours(4.8e3, "E24") == (4.7e3, 5.1e3)
    assert eseries.neighbours(4700.0, "E24") == (4700.0, 4700.0)
    assert eseries.neighbours(9.2, "E192") == (9.2, 9.2)
    assert eseries.neighbours(9.195, "E192") == (9.09, 9.2)


@pytest.mark.parametrize("name", ["E6", "E12", "E24", "E48", "E96", "E192"])
def test_nearest_agrees_with_a_brute_force_search(name):
    # Independent check: over three decades, the minimum of |log(value / candidate)| by numpy.
    rng = np.random.default_rng(20)
    mantissas = np.array(eseries.series(name))
    candidates = np.concatenate([mantissas * 10.0 ** d for d in range(-2, 5)])
    for value in 10 ** rng.uniform(-1, 3, 300):
        expected = candidates[np.argmin(np.abs(np.log(value / candidates)))]
        assert math.isclose(eseries.nearest(value, name), expected, rel_tol=1e-12)
        below, above = eseries.neighbours(value, name)
        assert below <= value <= above
        assert not np.any((candidates > below * (1 + 1e-12)) & (candidates < above * (1 - 1e-12)))


def test_series_values_lists_a_range():
    assert eseries.series_values("E6", 1e3, 1e4) == (1e3, 1.5e3, 2.2e3, 3.3e3, 4.7e3, 6.8e3, 1e4)
    assert eseries.series_values("E12", 0.5, 1.3) == (0.56, 0.68, 0.82, 1.0, 1.2)


@pytest.mark.parametrize("bad", ["E10", "E", "", None, 24])
def test_unknown_series_is_named(bad):
    with pytest.raises(UnknownModelError, match=r"unknown E-series .*E6, E12, E24, E48, E96, E192"):
        eseries.series(bad)
    with pytest.raises(UnknownModelError, match="unknown E-series"):
        eseries.nearest(1.0, bad)


@pytest.mark.parametrize("bad", [0.0, -4.7e3, math.nan, math.inf, "4.7k", True, None])
def test_bad_values_are_refused(bad):
    with pytest.raises(InvalidValueError, match=r"E-series value must be a positive.*got"):
        eseries.nearest(bad, "E24")
    with pytest.raises(InvalidValueError, match=r"E-series value must be a positive"):
        eseries.neighbours(bad, "E24")


def test_bad_range_is_refused():
    with pytest.raises(InvalidValueError, match="lower bound 10.0 is above the upper bound 1.0"):
        eseries.series_values("E6", 10.0, 1.0)
    with pytest.raises(InvalidValueError, match="E-series upper bound must be a positive"):
        eseries.series_values("E6", 1.0, -1.0)


@pytest.mark.parametrize("bad", [5e-324, 1e-310, 1.7976931348623157e308, 1e307])
def test_values_beyond_the_float_decades_are_refused(bad):
    # IEC 60063 values exist in every decade, but a float holds a decade and its neighbours only
    # between about 1e-307 and 1e307 (IEEE 754 double: normal numbers from 2.2e-308 to 1.8e308):
    # 5e-324 is not "the E24 value 5e-324", and near 1.8e308 the next decade overflows.
    with pytest.raises(InvalidValueError, match=r"E-series value must be .*1e-300 .*1e\+300, got"):
        eseries.nearest(bad, "E24")
    with pytest.raises(InvalidValueError, match=r"E-series value must be .*1e-300 .*1e\+300"):
        eseries.neighbours(bad, "E192")
    with pytest.raises(InvalidValueError, match=r"E-series (lower|upper) bound must be"):
        eseries.series_values("E6", bad, bad)


def test_the_ends_of_the_float_decades():
    # 1.0·10^-300 and 1.0·10^300 are E6 values (IEC 60063: the 1.0 mantissa in every decade).
    assert eseries.neighbours(1e-300, "E6") == (1e-300, 1e-300)
    assert eseries.nearest(9.9e299, "E6") == 1e300 and eseries.nearest(1.1e-300, "E6") == 1e-300

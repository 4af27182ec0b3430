"""One validator for every number ampplan takes in, one value at a time or a batch of samples.

Transistor parameters, circuit element values, stage-template and plan parameters and batch
arrays all check their numbers here, so that they agree on what a number is:

* a real scalar: a Python int or float or a numpy number; never a bool, text or a list;
* None only where the declaration allows it (``optional``), meaning "not fitted" or "same as";
* never NaN; infinite only where declared (``may_be_infinite``); within the declared bounds.

Messages name the culprit (``where``, e.g. ``"CommonEmitter.rc:"`` or ``"Transistor parameter
beta"``), then say what was expected and what came, with numbers printed plainly (``1e-09``, not
``np.float64(1e-09)``); a batch also names the index of the first bad sample.
"""

from __future__ import annotations

import math
import numbers

import numpy as np

from .errors import InvalidValueError
from .units import format_quantity

__all__ = ["shown", "bounds_text", "check_number", "check_samples", "check_text", "unencodable",
           "MAX_NAME_LENGTH", "MAX_TEXT_LENGTH"]

#: Longest name accepted (an element, a node, a stage id ...): a name is a label, not prose.
MAX_NAME_LENGTH = 200
#: Longest free text accepted (a plan's description): room for pages of notes, and a plan file
#: holding it stays far below the plan-file size limit even when every character takes 4 bytes.
MAX_TEXT_LENGTH = 20_000


def shown(value) -> str:
    """A value as a message shows it: numbers plainly (whole ones without ".0"), others shortened."""
    if isinstance(value, np.generic):  # numpy scalars print as the Python values they hold
        value = value.item()
    if isinstance(value, bool):
        return repr(value)
    if isinstance(value, numbers.Real):
        try:
            number = float(value)
        except OverflowError:  # an int beyond the float range
            number = math.inf if value > 0 else -math.inf
        if number.is_integer() and abs(number) < 1e16:
            return str(int(number))
        return repr(number)
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def bounds_text(minimum: float = -math.inf, maximum: float = math.inf, minimum_inclusive: bool = False,
                unit: str = "") -> str:
    """The allowed range in words: ``"> 0 Ω"``, ``">= 1 µΩ and <= 1 TΩ"`` or ``"finite"``.

    A bound with a unit is written in engineering notation (:func:`ampplan.units.format_quantity`);
    a plain number as ``%g``.
    """
    def bound(value: float) -> str:
        return format_quantity(value, unit) if unit else f"{value:g}"

    parts = []
    if math.isfinite(minimum):
        parts.append(f"{'>=' if minimum_inclusive else '>'} {bound(minimum)}")
    if math.isfinite(maximum):
        parts.append(f"<= {bound(maximum)}")
    return " and ".join(parts) or "finite"


def _real(value) -> float | None:
    """``value`` as a float when it is one real scalar, else None (bool, text, None, lists ...)."""
    if isinstance(value, np.ndarray) and value.ndim == 0 and value.dtype.kind in "iuf":
        value = value[()]
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, numbers.Real):
        return None
    try:
        return float(value)
    except OverflowError:  # an int too large for a float counts as infinite
        return math.inf if value > 0 else -math.inf


def _collection(value) -> bool:
    return isinstance(value, (list, tuple, set, frozenset, dict, np.ndarray))


def _out_of_bounds(values: np.ndarray, minimum, maximum, minimum_inclusive, may_be_infinite) -> tuple:
    """(not finite where it must be, outside the bounds) as boolean arrays of ``values``' shape."""
    not_finite = np.isnan(values) | (np.isinf(values) & (not may_be_infinite))
    below = values < minimum if minimum_inclusive else values <= minimum
    outside = ~not_finite & (below | (values > maximum))
    return not_finite, outside


def _all_good(values: np.ndarray, minimum, maximum, minimum_inclusive, may_be_infinite) -> bool:
    """Whether no value is bad in the sense of :func:`_out_of_bounds`, in two comparisons: NaN
    fails both, and where infinity is not allowed the bounds are brought within the finite
    numbers, so that an infinity fails one of them."""
    if not may_be_infinite:
        minimum = max(minimum, -_LARGEST) if minimum_inclusive else minimum
        maximum = min(maximum, _LARGEST)
    good = values >= minimum if minimum_inclusive else values > minimum
    good &= values <= maximum
    return bool(good.all())


_LARGEST = float(np.finfo(float).max)


def _raise_first_bad(values: np.ndarray, where: str, bounds: dict, samples: bool) -> None:
    if values.size > 1 and _all_good(values, bounds["minimum"], bounds["maximum"], bounds["minimum_inclusive"],
                                     bounds["may_be_infinite"]):
        return
    not_finite, outside = _out_of_bounds(values, bounds["minimum"], bounds["maximum"],
                                         bounds["minimum_inclusive"], bounds["may_be_infinite"])
    bad = not_finite | outside
    if not np.any(bad):
        return
    k = int(np.argmax(bad.reshape(-1)))
    first = values.reshape(-1)[k]
    at = f" at sample {k}" if samples and values.ndim == 1 else ""
    if not_finite.reshape(-1)[k]:
        raise InvalidValueError(f"{where} must be finite, got {shown(first)}{at}")
    what = bounds_text(bounds["minimum"], bounds["maximum"], bounds["minimum_inclusive"], bounds["unit"])
    raise InvalidValueError(f"{where} must be {what}, got {shown(first)}{at}")


def check_number(value, where: str, *, minimum: float = -math.inf, maximum: float = math.inf,
                 minimum_inclusive: bool = False, may_be_infinite: bool = False, unit: str = "",
                 optional: bool = False, required: str = "") -> float | None:
    """One number, validated; returned as a float (or None when ``optional`` and None).

    Parameters
    ----------
    value : object
        What the caller was given.
    where : str
        The culprit as messages name it, put before "must be" (``"CommonEmitter.rc:"``).
    minimum, maximum : float
        Bounds: values must be above ``minimum`` (or equal, when ``minimum_inclusive``) and at
        most ``maximum``, in the unit ``unit`` (which messages print after each bound).
    may_be_infinite : bool
        Whether infinity is allowed (an Early voltage of ``inf`` means none); NaN never is.
    optional : bool
        Whether None is allowed; it is returned as None.
    required : str
        Said in brackets after "is required" when None is given but not allowed.

    Raises
    ------
    InvalidValueError
        None where not allowed; a bool, text, list or other non-number; NaN; a disallowed
        infinity; a value out of bounds.
    """
    if value is None:
        if optional:
            return None
        raise InvalidValueError(f"{where} is required" + (f" ({required})" if required else ""))
    number = _real(value)
    if number is None:
        kind = "a single number" if _collection(value) else "a number"
        raise InvalidValueError(f"{where} must be {kind}, got {shown(value)}")
    _raise_first_bad(np.array(number), where, dict(minimum=minimum, maximum=maximum,
                                                   minimum_inclusive=minimum_inclusive,
                                                   may_be_infinite=may_be_infinite, unit=unit), False)
    return number


def check_samples(value, where: str, *, minimum: float = -math.inf, maximum: float = math.inf,
                  minimum_inclusive: bool = False, may_be_infinite: bool = False, unit: str = "") -> np.ndarray:
    """A number or a 1-D array of samples (a batch), validated; returned as a float ndarray.

    Parameters are those of :func:`check_number` (None is never allowed in a batch).

    Returns
    -------
    ndarray of float, shape () or (S,)

    Raises
    ------
    InvalidValueError
        Naming ``where`` and, for an array, the index of the first bad sample.
    """
    if value is None or isinstance(value, (str, bytes, bool, np.bool_, dict, set, frozenset)):
        raise InvalidValueError(f"{where} must be a number or a 1-D array of numbers, got {shown(value)}")
    try:
        arr = np.asarray(value)
    except (ValueError, TypeError):  # ragged nesting
        raise InvalidValueError(f"{where} must be a number or a 1-D array of numbers, got {shown(value)}") \
            from None
    if arr.ndim > 1:
        raise InvalidValueError(f"{where} must be a number or a 1-D array of numbers, got shape {arr.shape}")
    # numpy reads [100.0, True] as [100.0, 1.0]; a list is scanned for bools so that it does not.
    has_bool = isinstance(value, (list, tuple)) and any(isinstance(x, (bool, np.bool_)) for x in value)
    if arr.dtype.kind in "iuf" and not has_bool:
        numbers_ = arr.astype(float)
    else:
        # Text, bools, None or mixed objects: find the first element that is not a number, as
        # given (numpy would have turned every number of a list holding text into text).
        items = np.asarray(value, dtype=object) if isinstance(value, (list, tuple)) else arr
        numbers_ = np.empty(arr.shape)
        flat = numbers_.reshape(-1)
        for k, item in enumerate(items.reshape(-1)):
            number = _real(item)
            if number is None:
                at = f" at sample {k}" if arr.ndim == 1 else ""
                raise InvalidValueError(f"{where} must be a number, got {shown(item)}{at}")
            flat[k] = number
    _raise_first_bad(numbers_, where, dict(minimum=minimum, maximum=maximum, minimum_inclusive=minimum_inclusive,
                                           may_be_infinite=may_be_infinite, unit=unit), True)
    return numbers_


def unencodable(text: str) -> int | None:
    """Index of the first character of ``text`` that UTF-8 cannot encode (a lone surrogate), or None.

    Such characters come from a JSON escape such as ``"\\ud800"`` or from undecodable bytes in
    a command line; they cannot be written to a file or a terminal, so they are refused.
    """
    try:
        text.encode("utf-8")
    except UnicodeEncodeError as exc:
        return exc.start
    return None


def check_text(value, where: str, *, maximum_length: int = MAX_NAME_LENGTH, empty: bool = False) -> str:
    """Text, validated: a ``str`` of at most ``maximum_length`` characters that UTF-8 can encode.

    Parameters
    ----------
    value : object
    where : str
        The culprit as messages name it (``"Plan.description"``, ``"resistor name"``).
    maximum_length : int
    empty : bool
        Whether the empty (or all-blank) text is allowed.

    Raises
    ------
    InvalidValueError
        Not text; empty where not allowed; too long; holds a character UTF-8 cannot encode (named
        by its code point and position, with the text shown escaped).
    """
    if not isinstance(value, str):
        raise InvalidValueError(f"{where} must be text, got {shown(value)}")
    if not empty and not value.strip():
        raise InvalidValueError(f"{where} must not be empty, got {value!r}")
    if len(value) > maximum_length:
        raise InvalidValueError(f"{where} must be at most {maximum_length} characters long, got {len(value)}")
    bad = unencodable(value)
    if bad is not None:
        escaped = value.encode("utf-8", "backslashreplace").decode("ascii", "backslashreplace")
        raise InvalidValueError(f"{where} holds a character that cannot be written as UTF-8 text "
                                f"(U+{ord(value[bad]):04X} at position {bad}, a lone surrogate): "
                                f"{escaped[:60]}")
    return value

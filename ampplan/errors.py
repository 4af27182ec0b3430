"""Exceptions raised for bad input and for circuits the solver cannot settle.

Every message names the culprit: the element, the node, the parameter or the file path at fault.
All classes derive from :class:`AmpplanError`, so a caller can catch the family at once.
"""

from __future__ import annotations

__all__ = [
    "AmpplanError",
    "InvalidValueError",
    "UnknownModelError",
    "DuplicateNameError",
    "UnknownNameError",
    "FloatingNodeError",
    "VoltageSourceLoopError",
    "NoConsistentRegionError",
    "ConvergenceError",
    "PlanFileError",
    "TargetNotReachedError",
]


class AmpplanError(Exception):
    """Base class of every error ampplan raises on purpose."""


class InvalidValueError(AmpplanError, ValueError):
    """A value is out of range: a non-positive, NaN or infinite resistance, say."""


class UnknownModelError(AmpplanError, ValueError):
    """An enumerated option (model name, polarity, coupling ...) is not one of its choices."""


class DuplicateNameError(AmpplanError, ValueError):
    """Two elements (or two stages) were given the same name."""


class UnknownNameError(AmpplanError, KeyError):
    """A name (element, node, batch key, parameter address) does not exist."""

    def __str__(self) -> str:  # KeyError would wrap the message in quotes
        return str(self.args[0]) if self.args else ""


class FloatingNodeError(AmpplanError):
    """A node has no DC path to ground (only capacitors or current sources reach it)."""


class VoltageSourceLoopError(AmpplanError):
    """Voltage sources form a closed loop, so their currents are undetermined."""


class NoConsistentRegionError(AmpplanError):
    """The constant-drop search found no region assignment whose checks all hold.

    Attributes
    ----------
    closest : list of tuple(dict, str)
        The assignments that came closest (transistor name -> region) with the check that failed.
    """

    def __init__(self, message: str, closest=()):
        super().__init__(message)
        self.closest = list(closest)


class ConvergenceError(AmpplanError):
    """Newton's method did not converge, even after its fallbacks.

    Attributes
    ----------
    iterations : int
        Newton iterations spent over all attempts.
    last_iterate : dict
        Node voltages of the last iterate, volts, by node name.
    """

    def __init__(self, message: str, iterations: int = 0, last_iterate=None):
        super().__init__(message)
        self.iterations = iterations
        self.last_iterate = dict(last_iterate or {})


class PlanFileError(AmpplanError, ValueError):
    """A plan file is unreadable, malformed, of a newer format, or could not be written."""


class TargetNotReachedError(AmpplanError, ValueError):
    """A design target that no value within the bounds reaches (``plan.design``)."""

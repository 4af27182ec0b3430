"""Power in every part against its rating, and the cautions a designer should read.

Ratings and thresholds (each a plain parameter, common practice, no source):

* transistor power rating ``max_power`` is given at 25 °C and derated linearly to zero at a
  150 °C junction limit above 25 °C;
* every resistor is compared with the plan's ``resistor_power_rating`` (0.25 W by default);
* a supply span above :data:`SAFETY_EXTRA_LOW_VOLTAGE_DC` (60 V DC) leaves the safety
  extra-low-voltage range (the limit IEC 61140 usage gives for DC); the caution defers to local
  codes and licensed practice.
"""

from __future__ import annotations

import numpy as np

from ..devices import REFERENCE_TEMPERATURE
from ..units import format_quantity as fq

__all__ = ["derated_power", "derated_powers", "transistor_cautions", "resistor_cautions", "supply_cautions",
           "transistor_flags", "BatchCautions",
           "JUNCTION_LIMIT", "SAFETY_EXTRA_LOW_VOLTAGE_DC"]

#: Junction temperature (°C) at which the derated power reaches zero.
JUNCTION_LIMIT = 150.0
#: Volts DC: above this a supply leaves the safety extra-low-voltage range.
SAFETY_EXTRA_LOW_VOLTAGE_DC = 60.0


def derated_power(max_power: float, temperature: float) -> float:
    """Transistor power rating at ``temperature``, watts.

    Parameters
    ----------
    max_power : float
        Rating at :data:`~ampplan.devices.REFERENCE_TEMPERATURE` (25 °C), watts.
    temperature : float
        Degrees Celsius; the rating falls linearly above 25 °C to zero at :data:`JUNCTION_LIMIT`.
    """
    if temperature <= REFERENCE_TEMPERATURE:
        return max_power
    return max(0.0, max_power * (JUNCTION_LIMIT - temperature) / (JUNCTION_LIMIT - REFERENCE_TEMPERATURE))


def transistor_cautions(sid: str, t, device, edge: float, headroom: float | None, temperature: float,
                        name: str | None = None) -> list[str]:
    """Plain-sentence cautions for one transistor (region, headroom, ratings).

    Parameters
    ----------
    sid : str
        Stage id that opens every sentence (``"s1"``).
    t : TransistorResult
        The transistor at the operating point (single solve, scalar fields).
    device : Transistor
        Its parameters, for beta and the ratings.
    edge : float
        V_CE where forward-active ends, volts, in the transistor's own frame (V_EC for a PNP).
    headroom : float or None
        Volts of V_CE above ``edge`` asked for; None skips the headroom check.
    temperature : float
        Degrees Celsius, for derating the power rating.
    name : str, optional
        The transistor's element name, for a stage with more than one; the sentences then say
        "transistor <name>" instead of "the transistor".

    Returns
    -------
    list of str
        Empty when all is well.
    """
    out = []
    who = "the transistor" if name is None else f"transistor {name}"
    frame_vce = device.sign * t.vce
    if t.region != "forward-active":
        detail = ""
        if t.region == "saturation":
            detail = f" (forced beta {t.beta_forced:.3g} is below beta {device.beta:.3g})"
        elif t.region == "cutoff":
            detail = " (no collector current)"
        out.append(f"{sid}: {who} is in {t.region}, not forward-active{detail}.")
    elif headroom is not None and frame_vce - edge < headroom:
        where = "" if name is None else f" of transistor {name}"
        out.append(f"{sid}: V_CE{where} is only {fq(frame_vce - edge, 'V')} above the forward-active edge, "
                   f"less than the {fq(headroom, 'V')} headroom asked for.")
    if device.max_power is not None:
        rating = derated_power(device.max_power, temperature)
        if t.power > rating:
            derate = f" (derated to {fq(rating, 'W')} at {temperature:g} °C)" if rating != device.max_power else ""
            out.append(f"{sid}: {who} dissipates {fq(t.power, 'W')}, above its "
                       f"{fq(device.max_power, 'W')} rating{derate}; it may overheat.")
    of = "" if name is None else f" of transistor {name}"
    if device.max_collector_current is not None and abs(t.ic) > device.max_collector_current:
        out.append(f"{sid}: I_C{of} {fq(abs(t.ic), 'A')} exceeds the {fq(device.max_collector_current, 'A')} "
                   "rating.")
    if device.max_vce is not None and abs(t.vce) > device.max_vce:
        out.append(f"{sid}: |V_CE|{of} {fq(abs(t.vce), 'V')} exceeds the {fq(device.max_vce, 'V')} rating.")
    return out


def resistor_cautions(powers: dict, rating: float) -> list[str]:
    """Cautions for resistors dissipating more than ``rating``.

    Parameters
    ----------
    powers : dict of str -> float
        Watts by the name the sentence should use (``"s1.rc"``, ``"load_resistance"``).
    rating : float
        Watts.
    """
    return [f"{name}: dissipates {fq(p, 'W')}, above the {fq(rating, 'W')} resistor rating."
            for name, p in powers.items() if p > rating]


def supply_cautions(supply: float, negative_supply: float) -> list[str]:
    """The safety caution for supplies beyond the safety extra-low-voltage range.

    Parameters
    ----------
    supply, negative_supply : float
        The two rails, volts (``negative_supply`` <= 0).
    """
    span = supply - negative_supply
    if span > SAFETY_EXTRA_LOW_VOLTAGE_DC or max(abs(supply), abs(negative_supply)) > SAFETY_EXTRA_LOW_VOLTAGE_DC:
        return [f"The supply spans {fq(span, 'V')} DC, beyond the {fq(SAFETY_EXTRA_LOW_VOLTAGE_DC, 'V')} DC "
                "safety extra-low-voltage range "
                "(IEC 61140 usage): touchable parts can be hazardous. Follow local electrical codes and "
                "have the build checked under licensed practice."]
    return []


def derated_powers(max_power, temperature):
    """:func:`derated_power` for arrays (NaN ratings stay NaN), watts."""
    max_power = np.asarray(max_power, dtype=float)
    t = np.asarray(temperature, dtype=float)
    return np.where(t <= REFERENCE_TEMPERATURE, max_power,
                    np.maximum(0.0, max_power * (JUNCTION_LIMIT - t) / (JUNCTION_LIMIT - REFERENCE_TEMPERATURE)))


def transistor_flags(key: str, region, frame_vce, edge, headroom, power, ic, vce, device: dict, temperature) -> dict:
    """Which of :func:`transistor_cautions`' sentences fire, per sample, as boolean arrays.

    Parameters
    ----------
    key : str
        Prefix of the flag names (``"s1"``, or ``"s1.s1_q2"`` for a custom stage's other transistor).
    region : ndarray of str, shape (S,)
    frame_vce, edge : ndarray, shape (S,)
        V_CE in the transistor's frame and the forward-active edge, volts.
    headroom : ndarray of shape (S,), or None
        Volts asked for above the edge; None skips the check.
    power, ic, vce : ndarray, shape (S,)
        Watts, amperes (textbook sign), volts (signed).
    device : dict of str -> ndarray (S,)
        ``max_power``, ``max_collector_current``, ``max_vce`` at 25 °C (NaN: no rating).
    temperature : ndarray, shape (S,)

    Returns
    -------
    dict of str -> ndarray of bool
        ``"<key>.region"``, ``"<key>.headroom"``, ``"<key>.power"``, ``"<key>.collector_current"``, ``"<key>.vce"``.
    """
    solved = region != "unsolved"
    with np.errstate(invalid="ignore"):
        out = {f"{key}.region": solved & (region != "forward-active")}
        if headroom is not None:
            out[f"{key}.headroom"] = (region == "forward-active") & (frame_vce - edge < headroom)
        out[f"{key}.power"] = power > derated_powers(device["max_power"], temperature)
        out[f"{key}.collector_current"] = np.abs(ic) > device["max_collector_current"]
        out[f"{key}.vce"] = np.abs(vce) > device["max_vce"]
    return out


class BatchCautions:
    """The cautions of a batch: which fire in each sample (vectorised flags) and, on demand, the
    sentences of one sample (the same as a single solve of that sample gives).

    Attributes
    ----------
    flags : dict of str -> ndarray of bool, shape (S,)
        One flag per caution that can fire (``"s1.region"``, ``"s1.headroom"``, ``"s1.rc.power"``,
        ``"load_resistance.power"``, ``"supply.safety"`` ...).
    """

    def __init__(self, flags: dict, size: int, render):
        self.flags = dict(flags)
        self._size = size
        self._render = render

    @property
    def any(self) -> np.ndarray:
        """True where at least one caution fires, shape (S,)."""
        out = np.zeros(self._size, dtype=bool)
        for flag in self.flags.values():
            out |= flag
        return out

    def __len__(self) -> int:
        return self._size

    def __getitem__(self, i: int) -> tuple:
        """The sentences of sample ``i``."""
        if not -self._size <= i < self._size:
            raise IndexError(f"sample {i} is out of range for a batch of {self._size}")
        return self._render(int(i) % self._size)

    def __iter__(self):
        return (self[i] for i in range(self._size))

    def __repr__(self) -> str:
        fired = {k: int(v.sum()) for k, v in self.flags.items() if v.any()}
        body = ", ".join(f"{k}: {n}" for k, n in fired.items()) or "none"
        return f"BatchCautions({self._size} samples; samples per caution: {body})"

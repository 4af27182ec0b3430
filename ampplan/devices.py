"""Transistor parameter sets, their temperature scaling, and presets named by role.

Everything here is SI: volts, amperes, watts, kelvin inside (degrees Celsius only as the
``temperature`` argument a designer types). The module knows nothing of circuits.
"""

from __future__ import annotations

import dataclasses
import math
import typing
from dataclasses import dataclass
from typing import Literal, get_args

import numpy as np
from scipy import constants

from .errors import InvalidValueError, UnknownModelError, UnknownNameError
from .validation import check_number, check_samples, shown
from .units import LINE_WIDTH, format_call, format_quantity

__all__ = [
    "Polarity",
    "POLARITIES",
    "Transistor",
    "thermal_voltage",
    "REFERENCE_TEMPERATURE",
    "ABSOLUTE_ZERO",
    "TEMPERATURE_RANGE",
    "check_temperature",
    "DEVICE_UNITS",
    "OPTIONAL_PARAMETERS",
    "check_parameter",
    "PRESETS",
    "preset",
]

Polarity = Literal["npn", "pnp"]
POLARITIES: tuple[str, ...] = get_args(Polarity)

#: Temperature (degrees C) at which device parameters are given, and the default solve temperature.
REFERENCE_TEMPERATURE = 25.0
#: Absolute zero in degrees Celsius (scipy.constants).
ABSOLUTE_ZERO = -constants.zero_Celsius
#: Temperatures (degrees C, both ends included) at which the device models are taken as valid, and
#: outside which every solve, batch sample and plan is refused. Common practice, no source: -55 °C
#: is the cold end of the widest grade silicon parts are usually specified over, 150 °C the usual
#: limit of a silicon junction (where the dissipation derating of the analyses reaches zero). The
#: constant-drop laws are linear fits about 25 °C (V_BE(on) falls about 2 mV/K) and the I_S law
#: is a fit too; far outside this span they give nonsense (an NPN "on" at a negative V_BE), and
#: near absolute zero V_T = kT/q vanishes.
TEMPERATURE_RANGE = (-55.0, 150.0)


def thermal_voltage(temperature=REFERENCE_TEMPERATURE):
    """Thermal voltage V_T = k·T/q.

    Parameters
    ----------
    temperature : float or ndarray
        Junction temperature in degrees Celsius, any shape.

    Returns
    -------
    float or ndarray
        V_T in volts, same shape (25.69 mV at 25 °C).
    """
    kelvin = np.asarray(temperature, dtype=float) + constants.zero_Celsius
    v_t = constants.Boltzmann * kelvin / constants.elementary_charge
    return float(v_t) if v_t.ndim == 0 else v_t


def check_temperature(value, where: str = "temperature", samples: bool = False):
    """Validate a temperature in degrees Celsius against :data:`TEMPERATURE_RANGE`.

    Parameters
    ----------
    value : object
        One number, or with ``samples`` a number or a 1-D array of samples.
    where : str
        What holds the value, for the message (``"temperature"``, ``"batch['temperature']:"``).
    samples : bool
        Accept a batch of samples; returns a float ndarray of shape () or (S,).

    Returns
    -------
    float or ndarray

    Raises
    ------
    InvalidValueError
        Naming ``where``, the valid range and the value (and the first bad sample of a batch).
    """
    bounds = dict(minimum=TEMPERATURE_RANGE[0], minimum_inclusive=True, maximum=TEMPERATURE_RANGE[1], unit="°C")
    try:
        if samples:
            return check_samples(value, where, **bounds)
        return check_number(value, where, **bounds)
    except InvalidValueError as error:
        if "must be >=" not in str(error):
            raise               # not a finite number at all: the plain message says it all
        raise InvalidValueError(f"{error} (the device models are valid from {TEMPERATURE_RANGE[0]:g} °C to "
                                f"{TEMPERATURE_RANGE[1]:g} °C only)") from None


@dataclass(frozen=True)
class Transistor:
    """One bipolar transistor's parameters, for both device models.

    The constant-drop model uses ``beta``, ``vbe_on``, ``vce_sat``, ``beta_reverse`` and
    ``vbc_on``; the Ebers–Moll model uses ``beta``, ``beta_reverse``, ``saturation_current``,
    ``early_voltage`` and ``emission_coefficient``. Voltages are magnitudes: a PNP with
    ``vbe_on=0.7`` has V_EB = 0.7 V when on. All values are at 25 °C and are stored as
    floats; a bool, text or a list is refused (InvalidValueError naming the parameter), and None
    only where the annotation allows it.

    Parameters
    ----------
    polarity : {"npn", "pnp"}
    beta : float
        Forward current gain β_F = I_C/I_B in forward-active, dimensionless, > 0.
    vbe_on : float
        Base-emitter drop when conducting (constant-drop model), volts. Common practice 0.7 V.
    vce_sat : float
        Collector-emitter voltage in saturation (constant-drop model), volts. Common practice 0.2 V.
    beta_reverse : float
        Reverse current gain β_R, dimensionless, > 0.
    vbc_on : float or None
        Base-collector drop when conducting, volts; None (the default) means the same as
        ``vbe_on``, whatever ``vbe_on`` is changed to later: it is kept as None here and resolved
        where the numbers are built (:meth:`ampplan.circuit.Layout.parameters`).
    saturation_current : float
        Transport saturation current I_S, amperes, > 0.
    early_voltage : float
        Forward Early voltage V_A, volts, > 0; ``inf`` for none.
    emission_coefficient : float
        Junction emission coefficient n, dimensionless, >= 1 in practice.
    vbe_temperature_coefficient : float
        Drift of ``vbe_on`` and ``vbc_on`` with temperature in the constant-drop model, V/K.
        Default -2 mV/K (common practice, no source).
    bandgap_energy : float
        Energy gap for the I_S temperature law, electron-volts (silicon 1.11 eV).
    saturation_current_exponent : float
        Power of T/T₀ in the I_S temperature law, dimensionless (3 for silicon).
    max_power, max_collector_current, max_vce : float or None
        Ratings at 25 °C (watts, amperes, volts) for the dissipation checks; None when unknown.
    """

    polarity: Polarity = "npn"
    beta: float = 100.0
    vbe_on: float = 0.7
    vce_sat: float = 0.2
    beta_reverse: float = 1.0
    vbc_on: float | None = None
    saturation_current: float = 1e-14
    early_voltage: float = math.inf
    emission_coefficient: float = 1.0
    vbe_temperature_coefficient: float = -2e-3
    bandgap_energy: float = 1.11
    saturation_current_exponent: float = 3.0
    max_power: float | None = None
    max_collector_current: float | None = None
    max_vce: float | None = None

    def __post_init__(self):
        if not isinstance(self.polarity, str) or self.polarity not in POLARITIES:
            raise UnknownModelError(
                f"Transistor polarity must be one of {', '.join(POLARITIES)}, got {self.polarity!r}"
            )
        # Every number stored as a float, so that "150", True or [1, 2] never reach the solver.
        for name in PARAMETERS:
            object.__setattr__(self, name, check_parameter(name, getattr(self, name)))

    def __repr__(self) -> str:
        return self.formatted()

    def formatted(self, width: int = LINE_WIDTH) -> str:
        """The repr: the polarity and the parameters that differ from the defaults, in
        engineering notation, wrapped to ``width`` columns (the full set is in :meth:`to_dict`)."""
        items = [f"{name}={format_quantity(value, DEVICE_UNITS[name])}" for name in PARAMETERS
                 if (value := getattr(self, name)) != _DEFAULT_VALUES[name]]
        return format_call("Transistor", [self.polarity, *items], width)

    @property
    def sign(self) -> int:
        """+1 for NPN, -1 for PNP: multiplies voltages and currents into the NPN frame."""
        return 1 if self.polarity == "npn" else -1

    def replace(self, **changes) -> "Transistor":
        """A copy with some parameters changed (unknown names raise UnknownNameError)."""
        for name in changes:
            if name not in FIELDS:
                raise UnknownNameError(f"Transistor has no parameter {name!r}; it has {', '.join(FIELDS)}")
        return dataclasses.replace(self, **changes)

    def to_dict(self) -> dict:
        """Plain dict of every parameter (SI units), for JSON."""
        return dataclasses.asdict(self)


FIELDS: tuple[str, ...] = tuple(f.name for f in dataclasses.fields(Transistor))
#: Numeric parameters (everything but polarity), the ones a batch may vary.
PARAMETERS: tuple[str, ...] = tuple(f for f in FIELDS if f != "polarity")
#: Parameters annotated ``float | None``: the only ones that may be None.
OPTIONAL_PARAMETERS: frozenset = frozenset(
    name for name, hint in typing.get_type_hints(Transistor).items() if type(None) in get_args(hint))

#: Default value of every parameter (the dataclass's own), which the repr leaves out.
_DEFAULT_VALUES = {f.name: f.default for f in dataclasses.fields(Transistor)}

#: SI unit symbol of each numeric parameter ("" for dimensionless), for messages, files and the CLI.
DEVICE_UNITS: dict[str, str] = {
    "beta": "",
    "vbe_on": "V",
    "vce_sat": "V",
    "beta_reverse": "",
    "vbc_on": "V",
    "saturation_current": "A",
    "early_voltage": "V",
    "emission_coefficient": "",
    "vbe_temperature_coefficient": "V/K",
    "bandgap_energy": "eV",
    "saturation_current_exponent": "",
    "max_power": "W",
    "max_collector_current": "A",
    "max_vce": "V",
}

#: (lower bound, lower inclusive) of each numeric parameter; unlisted ones only need to be finite.
PARAMETER_BOUNDS = {
    "beta": (0.0, False),
    "beta_reverse": (0.0, False),
    "vbe_on": (0.0, False),
    "vbc_on": (0.0, False),
    "vce_sat": (0.0, True),
    "saturation_current": (0.0, False),
    "early_voltage": (0.0, False),
    "emission_coefficient": (0.0, False),
    "bandgap_energy": (0.0, True),
    "vbe_temperature_coefficient": (-0.1, True),
    "max_power": (0.0, False),
    "max_collector_current": (0.0, False),
    "max_vce": (0.0, False),
}
#: Upper bound (inclusive) of the parameters that have one; the others are bounded below only.
#: Junction and saturation drops of silicon bipolar transistors stay below about 2 V (a
#: Darlington's two drops, a power part's V_CE(sat); common practice, no source): 10 V leaves
#: room for any part and keeps absurd values (1e300 V) from overflowing the analyses. The drift
#: of those drops is about -2 mV/K; 0.1 V/K either way is far beyond any junction.
PARAMETER_MAXIMA = {
    "vbe_on": 10.0,
    "vbc_on": 10.0,
    "vce_sat": 10.0,
    "vbe_temperature_coefficient": 0.1,
}
#: Range each numeric parameter usually takes, for controls such as slider ends (common practice,
#: no source): small-signal and power silicon parts, room temperature, the drift silicon junctions
#: show. Well inside the hard bounds above, which only refuse what cannot be meant.
TYPICAL_RANGES: dict[str, tuple[float, float]] = {
    "beta": (20.0, 800.0),
    "vbe_on": (0.5, 0.9),
    "vce_sat": (0.05, 0.5),
    "beta_reverse": (0.1, 10.0),
    "vbc_on": (0.4, 0.9),
    "saturation_current": (1e-16, 1e-12),
    "early_voltage": (20.0, 300.0),
    "emission_coefficient": (1.0, 2.0),
    "vbe_temperature_coefficient": (-2.5e-3, -1.5e-3),
    "bandgap_energy": (0.6, 1.5),
    "saturation_current_exponent": (2.0, 4.0),
    "max_power": (0.1, 100.0),
    "max_collector_current": (0.01, 10.0),
    "max_vce": (10.0, 400.0),
}
#: Parameters that may be infinite (no Early effect, no rating).
MAY_BE_INFINITE = {"early_voltage", "max_power", "max_collector_current", "max_vce"}


def check_parameter(name: str, value, where: str = "Transistor", samples: bool = False):
    """Validate a value of the numeric parameter ``name``; returns it as float (or None).

    Parameters
    ----------
    name : str
        One of :data:`PARAMETERS`.
    value : object
        One number (None only for :data:`OPTIONAL_PARAMETERS`), or with ``samples`` a number or a
        1-D array of samples.
    where : str
        Who holds the value, for the message: ``"Transistor"`` or ``"batch['Q1.beta']:"``.
    samples : bool
        Accept a batch of samples; returns a float ndarray of shape () or (S,).

    Raises
    ------
    InvalidValueError
        Naming ``where`` and ``name`` (and the first bad sample of a batch).
    """
    low, inclusive = PARAMETER_BOUNDS.get(name, (-math.inf, False))
    bounds = dict(minimum=low, minimum_inclusive=inclusive, maximum=PARAMETER_MAXIMA.get(name, math.inf),
                  may_be_infinite=name in MAY_BE_INFINITE, unit=DEVICE_UNITS[name])
    if samples:
        return check_samples(value, f"{where} parameter {name}", **bounds)
    nullable = ", ".join(f for f in FIELDS if f in OPTIONAL_PARAMETERS)
    return check_number(value, f"{where} parameter {name}", optional=name in OPTIONAL_PARAMETERS,
                        required=f"None is allowed only for {nullable}", **bounds)


# Presets are typical values for a role (common practice, no source); they are starting points
# for a design, not the data sheet of any part.
PRESETS: dict[str, Transistor] = {
    "general-purpose small-signal NPN": Transistor(
        polarity="npn", beta=200.0, saturation_current=1e-14, early_voltage=100.0,
        max_power=0.5, max_collector_current=0.1, max_vce=40.0),
    "general-purpose small-signal PNP": Transistor(
        polarity="pnp", beta=200.0, saturation_current=1e-14, early_voltage=80.0,
        max_power=0.5, max_collector_current=0.1, max_vce=40.0),
    "low-noise high-gain NPN": Transistor(
        polarity="npn", beta=400.0, saturation_current=5e-15, early_voltage=60.0,
        max_power=0.5, max_collector_current=0.1, max_vce=45.0),
    "medium-power NPN": Transistor(
        polarity="npn", beta=80.0, saturation_current=1e-13, early_voltage=150.0,
        max_power=1.25, max_collector_current=1.0, max_vce=60.0),
    "medium-power PNP": Transistor(
        polarity="pnp", beta=80.0, saturation_current=1e-13, early_voltage=150.0,
        max_power=1.25, max_collector_current=1.0, max_vce=60.0),
}


def preset(role: str) -> Transistor:
    """The preset transistor for a role, e.g. ``preset("general-purpose small-signal NPN")``."""
    try:
        return PRESETS[role]
    except (KeyError, TypeError):  # TypeError: a list or dict given as the role
        raise UnknownNameError(
            f"no device preset named {shown(role)}; presets are: {', '.join(PRESETS)}") from None


def scaled_to_temperature(devices: dict, temperature):
    """Device parameters at a junction temperature, as arrays.

    Parameters
    ----------
    devices : dict of str -> ndarray
        Parameter name -> values at 25 °C, each of shape (S, N) for S samples of N transistors,
        with ``vbc_on`` already resolved (as :meth:`ampplan.circuit.Layout.parameters` gives them).
    temperature : float or ndarray
        Degrees Celsius, scalar or shape (S, 1).

    Returns
    -------
    dict of str -> ndarray
        A copy with ``saturation_current``, ``vbe_on`` and ``vbc_on`` moved to ``temperature``.

    Notes
    -----
    Saturation current (Gray & Meyer, *Analysis and Design of Analog Integrated Circuits*, the
    I_S(T) relation of the bipolar chapter, from memory):
    ``I_S(T) = I_S(T0) · (T/T0)^(m/n) · exp(E_g·q/(n·k) · (1/T0 - 1/T))`` with m the
    ``saturation_current_exponent``, E_g the ``bandgap_energy`` and T in kelvin.
    Constant-drop voltages move linearly: ``V(T) = V(T0) + vbe_temperature_coefficient·(T - T0)``.
    β is held constant. At T = T0 = 25 °C nothing changes.
    """
    out = dict(devices)
    t0 = REFERENCE_TEMPERATURE + constants.zero_Celsius
    t = np.asarray(temperature, dtype=float) + constants.zero_Celsius
    if np.all(t == t0):
        return out
    n = devices["emission_coefficient"]
    exponent = devices["saturation_current_exponent"] / n * np.log(t / t0) + (
        devices["bandgap_energy"] * constants.elementary_charge / (n * constants.Boltzmann)
        * (1.0 / t0 - 1.0 / t))
    out["saturation_current"] = devices["saturation_current"] * np.exp(exponent)
    shift = devices["vbe_temperature_coefficient"] * (t - t0)
    out["vbe_on"] = devices["vbe_on"] + shift
    out["vbc_on"] = devices["vbc_on"] + shift
    return out

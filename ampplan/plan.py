"""A plan: a signal source, a chain of stages, and a load, compiled to one circuit.

The plan describes; :meth:`Plan.solve` compiles it, hands the circuit to the solver once, and runs
the analyses of :mod:`ampplan.analyses` on that one operating point.
"""

from __future__ import annotations

import copy
import dataclasses
import math
import numbers
import re
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Literal, get_args

import numpy as np

from .circuit import GROUND, RESISTANCE_RANGE, VALUE_BOUNDS, VOLTAGE_LIMIT, Bjt, Circuit, Resistor, did_you_mean
from .devices import DEVICE_UNITS, MAY_BE_INFINITE, PARAMETER_BOUNDS, PARAMETER_MAXIMA, TEMPERATURE_RANGE
from .devices import FIELDS as DEVICE_FIELDS
from .devices import PARAMETERS as DEVICE_PARAMETERS
from .errors import DuplicateNameError, InvalidValueError, UnknownModelError, UnknownNameError
from .stages import Parameter, Rails, Stage, StageNodes, declared, declared_parameters
from .units import format_quantity
from .validation import MAX_TEXT_LENGTH, check_samples, check_text, shown

__all__ = ["Plan", "PlanValues", "Coupling", "COUPLINGS", "CompiledPlan", "PlanAddress", "PLAN_PARAMETERS"]

Coupling = Literal["capacitor", "direct"]
COUPLINGS: tuple[str, ...] = get_args(Coupling)

#: Names of the circuit elements a plan adds around its stages.
SUPPLY, NEGATIVE_SUPPLY, SOURCE, SOURCE_RESISTOR, LOAD_RESISTOR, LOAD_CAPACITOR = (
    "supply", "negative_supply", "source", "source_resistance", "load_resistance", "load_coupling")
#: Nodes of the plan's own: source EMF, source output, load.
EMF_NODE, SOURCE_NODE, LOAD_NODE = "emf", "source_out", "load"

#: Largest rail magnitude, volts: 10 kV is beyond the rating of any bipolar transistor (high-voltage
#: parts stop near 1.5 kV; common practice, no source), and a tenth of the circuit's
#: VOLTAGE_LIMIT, which leaves the analyses room to drive the source beyond the rails.
SUPPLY_LIMIT = VOLTAGE_LIMIT / 100

@dataclass(frozen=True)
class PlanValues:
    """The plan's own numbers, each declared once as a field with its :class:`~ampplan.stages.Parameter`.

    Validation (``Plan.<name>`` in messages), the :class:`Plan` properties, the plan-file schema,
    the docs and the controls all come from these fields (see :data:`PLAN_PARAMETERS`). Typical
    ranges are common practice, no source.
    """
    # Rails within SUPPLY_LIMIT, so that the plan never holds a value its circuit would refuse.
    supply: float = field(default=12.0, metadata=declared(
        "V", "positive supply rail, volts", typical=(3.0, 48.0), minimum=0.0, maximum=SUPPLY_LIMIT,
        scale="linear"))
    negative_supply: float = field(default=0.0, metadata=declared(
        "V", "lower rail (0 for ground, negative for a split supply), volts", typical=(-24.0, 0.0),
        minimum=-SUPPLY_LIMIT, minimum_inclusive=True, maximum=0.0, scale="linear"))
    # 0 or within RESISTANCE_RANGE; the gap below its lower end is refused in __post_init__.
    source_resistance: float = field(default=0.0, metadata=declared(
        "Ω", "signal source resistance, ohms (0 for an ideal source)", typical=(10.0, 100e3),
        minimum=0.0, minimum_inclusive=True, maximum=RESISTANCE_RANGE[1]))
    load_resistance: float | None = field(default=None, metadata=declared(
        "Ω", "load resistance, ohms (None: no load)", typical=(100.0, 1e6),
        minimum=RESISTANCE_RANGE[0], minimum_inclusive=True, maximum=RESISTANCE_RANGE[1]))
    temperature: float = field(default=25.0, metadata=declared(
        "°C", "ambient and junction temperature, degrees Celsius", typical=(-40.0, 125.0),
        minimum=TEMPERATURE_RANGE[0], minimum_inclusive=True, maximum=TEMPERATURE_RANGE[1], scale="linear"))
    resistor_power_rating: float = field(default=0.25, metadata=declared(
        "W", "power rating of every resistor, watts (common practice)", typical=(0.125, 2.0)))
    min_headroom: float = field(default=1.0, metadata=declared(
        "V", "caution when V_CE is closer than this to the forward-active edge, volts", typical=(0.0, 5.0),
        minimum=0.0, minimum_inclusive=True, maximum=SUPPLY_LIMIT, scale="linear"))
    coupling_capacitance: float | None = field(default=None, metadata=declared(
        "F", "value of every coupling capacitor, farads (None: not chosen)", typical=(100e-9, 100e-6)))
    bypass_capacitance: float | None = field(default=None, metadata=declared(
        "F", "default bypass capacitor value, farads (None: not chosen)", typical=(1e-6, 1e-3)))

    def __post_init__(self):
        for p in PLAN_PARAMETERS.values():
            object.__setattr__(self, p.name, p.check(getattr(self, p.name), f"Plan.{p.name}"))
        if 0 < self.source_resistance < RESISTANCE_RANGE[0]:
            # Below the circuit's smallest resistance the source would swamp the equations' precision;
            # 0 is the ideal source.
            raise InvalidValueError(f"Plan.source_resistance: must be 0 (an ideal source) or >= "
                                    f"{format_quantity(RESISTANCE_RANGE[0], 'Ω')}, got {shown(self.source_resistance)}")


#: Plan-level numbers by name, read from :class:`PlanValues`' declarations.
PLAN_PARAMETERS: dict[str, Parameter] = {p.name: p for p in declared_parameters(PlanValues)}


#: Plan-level addresses that hold words, not numbers.
_PLAN_WORDS = ("load_coupling", "description")


def _check_base_bias(sid: str, stage: Stage, coupling: str) -> None:
    """Refuse a capacitor-coupled stage that does not bias its own input."""
    if coupling == "capacitor" and not stage.has_base_bias():
        raise InvalidValueError(f"{sid}: a capacitor-coupled {type(stage).__name__} needs its own base bias "
                                "(rb1 and/or rb2, or rf); give one or use coupling='direct'")


@dataclass
class StageEntry:
    """One stage in a plan: its id, the stage, and how it couples to what comes before it."""
    id: str
    stage: Stage
    coupling: str = "capacitor"


#: Longest stage id accepted (it prefixes every element and node name of the stage).
MAX_STAGE_ID_LENGTH = 32
#: Most stages a plan may hold; a plan file with more is refused before it is read further.
MAX_STAGES = 64
_ID_PATTERN = re.compile(r"[A-Za-z][A-Za-z0-9_]*\Z")
#: Names of the plan's own: its values, words, elements and nodes. A stage id may be none of
#: them, nor one of them followed by "_" and more, since the id prefixes the stage's element
#: and node names ("<id>_rc", "<id>_in") and its addresses ("<id>.rc").
_RESERVED_NAMES = (*PLAN_PARAMETERS, *_PLAN_WORDS, SUPPLY, NEGATIVE_SUPPLY, SOURCE, SOURCE_RESISTOR,
                   LOAD_RESISTOR, LOAD_CAPACITOR, EMF_NODE, SOURCE_NODE, LOAD_NODE, GROUND, "vcc", "vee")


def _prefixes(a: str, b: str) -> bool:
    """True when one name is the other followed by "_" (so their element names could meet)."""
    return a.startswith(b + "_") or b.startswith(a + "_")


def check_stage_id(sid, taken=()) -> str:
    """A user's stage id, checked: text, a safe identifier, no plan name, unique among ``taken``.

    Raises
    ------
    InvalidValueError
        Not text, empty, too long, not an identifier (a letter, then letters, digits or ``_``),
        or a plan-level name (``supply``, ``load`` ...) or one followed by ``_``.
    DuplicateNameError
        Another stage has this id, or one that is this id followed by ``_`` (or the other way
        round), whose element names could meet this stage's.
    """
    if not isinstance(sid, str):
        raise InvalidValueError(f"a stage id is text such as 'input', got {shown(sid)}")
    if not sid or len(sid) > MAX_STAGE_ID_LENGTH or not _ID_PATTERN.match(sid):
        raise InvalidValueError(f"stage id {shown(sid)}: must be a letter followed by letters, digits or '_' "
                                f"(at most {MAX_STAGE_ID_LENGTH} characters), since it prefixes the names of "
                                "the stage's elements and nodes")
    clash = sid if sid in _RESERVED_NAMES else next((n for n in _RESERVED_NAMES if _prefixes(sid, n)), None)
    if clash is not None:
        raise InvalidValueError(f"stage id {sid!r}: clashes with the plan's own name {clash!r}; choose another")
    other = next((t for t in taken if t == sid or _prefixes(sid, t)), None)
    if other == sid:
        raise DuplicateNameError(f"stage id {sid!r}: the plan already has a stage with this id")
    if other is not None:
        raise DuplicateNameError(f"stage id {sid!r}: too close to the stage id {other!r} (one is the other "
                                 "followed by '_', so their element names could meet); choose another")
    return sid


@dataclass(frozen=True)
class PlanAddress:
    """Where a plan address lands in the compiled circuit.

    Attributes
    ----------
    address : str
        The plan address (``"s1.rc"``, ``"s2.device.beta"``, ``"supply"``, ``"temperature"``).
    element : str or None
        The circuit element holding the value (``"s1_rc"``; the transistor ``"s2_q"`` for a
        device parameter); None for a value that is not an element's (temperature, the
        analysis values ``min_headroom`` and ``resistor_power_rating``).
    key : str or None
        The key that varies it in a circuit batch (``"s1_rc"``, ``"s2_q.beta"``,
        ``"temperature"``); None for a value the analyses read themselves.
    unit : str
    bounds : dict
        The bounds a batch value is checked against (those of the value's own declaration), as
        keyword arguments of :func:`ampplan.validation.check_samples`.
    """
    address: str
    element: str | None
    key: str | None
    unit: str
    bounds: dict = field(default_factory=dict, repr=False, compare=False)


#: Plan values the analyses read themselves (no circuit element): a batch varies them per sample.
ANALYSIS_VALUES = ("min_headroom", "resistor_power_rating")


@dataclass(frozen=True)
class CompiledPlan:
    """The circuit a plan compiles to and where each stage landed in it.

    Attributes
    ----------
    circuit : Circuit
    stages : tuple of StageNodes
        Input node, output node, transistor and element names per stage, in order.
    source : str
        Name of the signal source's voltage source (0 V DC; its EMF is what gains refer to).
    load_node : str
        Node across the load (the last stage's output when there is no load).
    owner : dict of str -> float
        Position of each element along the chain: 0 for the source side, k for stage k, k - 0.5
        for the coupling capacitor into stage k, n + 0.5 and n + 1 for the load coupling and load.
        Rails have no owner.
    stage_ids, kinds : tuple of str
        Each stage's id and template kind, in order.
    transistor_stage : dict of str -> str
        Stage id of every transistor of the circuit.
    supplies : tuple of str
        The rail sources (the positive supply first).
    plan_resistors : tuple of str
        The plan's own resistors (source and load), those it has.
    temperature, supply, negative_supply, min_headroom, resistor_power_rating : float
        The plan values the analyses read (degrees Celsius, volts, volts, volts, watts).
    addresses : dict of str -> PlanAddress
        Every plan address a batch can vary, with its element and batch key
        (see :meth:`batch_keys`).
    cache : dict
        Work the analyses keep with the compiled circuit (its incremental equations).
    """
    circuit: Circuit
    stages: tuple
    source: str
    load_node: str
    owner: dict
    stage_ids: tuple = ()
    kinds: tuple = ()
    transistor_stage: dict = field(default_factory=dict)
    supplies: tuple = (SUPPLY,)
    plan_resistors: tuple = ()
    temperature: float = 25.0
    supply: float = 12.0
    negative_supply: float = 0.0
    min_headroom: float = 1.0
    resistor_power_rating: float = 0.25
    addresses: dict = field(default_factory=dict)
    cache: dict = field(default_factory=dict, compare=False, repr=False)

    def batch_keys(self, batch) -> tuple[dict, dict]:
        """Split a batch of plan addresses into a circuit batch and the analysis values.

        Parameters
        ----------
        batch : dict of str -> array_like of shape (S,)
            Plan addresses (keys of :attr:`addresses`) to values, validated against the address's
            own declaration (bounds, unit).

        Returns
        -------
        circuit_batch : dict of str -> ndarray
            Batch keys of :func:`ampplan.solver.solve`. When only analysis values vary, it holds
            the plan's temperature once per sample, so the solve still gives S samples.
        plan_values : dict of str -> ndarray
            ``"min_headroom"`` / ``"resistor_power_rating"`` when varied.

        Raises
        ------
        InvalidValueError
            ``batch`` is not a mapping; an address that holds no number or would change the
            circuit's topology (a coupling, a part that is not fitted); a bad value (naming the
            address and the first bad sample); arrays of different lengths or empty ones.
        UnknownNameError
            An address the plan does not have.
        """
        if not isinstance(batch, Mapping):
            raise InvalidValueError(f"batch must be a dict of plan address -> values, got {type(batch).__name__}")
        circuit_batch, plan_values, sizes = {}, {}, {}
        for address, value in batch.items():
            where = self.addresses.get(address) if isinstance(address, str) else None
            if where is None:
                raise self._not_batchable(address)
            checked = check_samples(value, address, **where.bounds)
            if np.ndim(checked):
                sizes[address] = checked.shape[0]
            if where.key is None:
                plan_values[address] = checked
            else:
                circuit_batch[where.key] = checked
        if len(set(sizes.values())) > 1:
            raise InvalidValueError("batch arrays differ in length: " + ", ".join(f"{k}: {n}" for k, n in sizes.items()))
        empty = [k for k, n in sizes.items() if n == 0]
        if empty:
            raise InvalidValueError(f"batch arrays are empty: {', '.join(empty)}")
        if sizes and not any(np.ndim(v) for v in circuit_batch.values()):
            # Only values the analyses read vary: the circuit is the same in every sample, but the
            # solve must still give one sample per value, so it gets its one temperature S times.
            size = next(iter(sizes.values()))
            circuit_batch["temperature"] = np.full(size, float(circuit_batch.get("temperature", self.temperature)))
        return circuit_batch, plan_values

    def _not_batchable(self, address):
        if not isinstance(address, str):
            return InvalidValueError(f"batch keys are plan addresses such as 's1.rc', got {address!r}")
        head, _, rest = address.partition(".")
        if head in PLAN_PARAMETERS or head in _PLAN_WORDS or (head in self.stage_ids and rest):
            return InvalidValueError(
                f"batch[{address!r}]: {address} cannot vary in a batch (it holds no number, or changing it "
                "changes the circuit: a coupling, a part that is not fitted, a capacitor value); "
                "set it on the plan instead")
        return UnknownNameError(f"batch[{address!r}]: the plan has no address {address!r}"
                                + did_you_mean(address, self.addresses))


class Plan:
    """A chain of amplifier stages between a signal source and a load.

    Parameters
    ----------
    supply : float
        Positive rail, volts.
    negative_supply : float
        Lower rail, volts: 0 for ground, negative for a split supply.
    source_resistance : float
        Signal-source resistance, ohms (0: ideal).
    load_resistance : float or None
        Load, ohms, returned to ground; None for no load.
    temperature : float
        Degrees Celsius.
    resistor_power_rating : float
        Rating every resistor's dissipation is compared with, watts (0.25 W: common practice).
    min_headroom : float
        A caution fires when a transistor's V_CE is closer than this to V_CE(sat), volts
        (1 V: common practice, no source).
    load_coupling : {"capacitor", "direct"}
    coupling_capacitance, bypass_capacitance : float or None
        Farads; open at DC and shorts at midband whatever their value.
    description : str
        Free text about the design.
    """

    def __init__(self, supply: float = 12.0, negative_supply: float = 0.0, source_resistance: float = 0.0,
                 load_resistance: float | None = None, temperature: float = 25.0, *,
                 load_coupling: str = "capacitor", resistor_power_rating: float = 0.25,
                 min_headroom: float = 1.0, coupling_capacitance: float | None = None,
                 bypass_capacitance: float | None = None, description: str = ""):
        self._entries: list[StageEntry] = []
        #: Number of the next automatic id ("s<n>"); it only grows, so no id comes back.
        self._next_number = 1
        self.description = description
        self._values = PlanValues(supply=supply, negative_supply=negative_supply, source_resistance=source_resistance,
                                  load_resistance=load_resistance, temperature=temperature,
                                  resistor_power_rating=resistor_power_rating, min_headroom=min_headroom,
                                  coupling_capacitance=coupling_capacitance, bypass_capacitance=bypass_capacitance)
        self.load_coupling = load_coupling

    # -- plan-level values --------------------------------------------------------------------
    @property
    def values(self) -> PlanValues:
        """The plan's numbers as one frozen, validated :class:`PlanValues`."""
        return self._values

    def _set_plan_value(self, name, value):
        self._values = dataclasses.replace(self._values, **{name: value})

    @property
    def description(self) -> str:
        """Free text about the design (kept in the plan file)."""
        return self._description

    @description.setter
    def description(self, value: str):
        if not isinstance(value, str):
            raise InvalidValueError(f"Plan.description must be text, got {type(value).__name__}")
        self._description = check_text(value, "Plan.description", maximum_length=MAX_TEXT_LENGTH, empty=True)

    @property
    def load_coupling(self) -> str:
        """How the load meets the last stage: ``"capacitor"`` or ``"direct"``."""
        return self._load_coupling

    @load_coupling.setter
    def load_coupling(self, value: str):
        if not isinstance(value, str) or value not in COUPLINGS:
            raise UnknownModelError(f"Plan.load_coupling must be one of {', '.join(COUPLINGS)}, got {shown(value)}")
        self._load_coupling = value

    # -- stages -------------------------------------------------------------------------------
    def add(self, stage: Stage, coupling: Coupling = "capacitor", *, id: str | None = None) -> str:
        """Append a stage; returns its id.

        Parameters
        ----------
        stage : Stage
        coupling : {"capacitor", "direct"}
            ``"direct"`` takes the stage's input straight from the previous stage's output (or
            the source), so the stage may omit its own base bias.
        id : str, optional
            A name of your own (``"input"``): a letter, then letters, digits or ``_``, unique in
            the plan and none of the plan's own names (see :func:`check_stage_id`). Without it the
            stage gets the next of ``"s1"``, ``"s2"`` ..., a number never given before in this
            plan: they continue after the highest ``"s<n>"`` the plan has held, so a removed
            stage's id does not come back.

        The id stays with the stage when others are removed or moved; it prefixes the stage's
        element names in the compiled circuit (``"input_rc"``) and its addresses (``"input.rc"``).
        """
        if not isinstance(coupling, str) or coupling not in COUPLINGS:
            raise UnknownModelError(f"coupling must be one of {', '.join(COUPLINGS)}, got {shown(coupling)}")
        if not isinstance(stage, Stage):
            raise InvalidValueError(f"plan.add expects a stage template, got {type(stage).__name__}")
        if len(self._entries) >= MAX_STAGES:
            raise InvalidValueError(f"plan.add: the plan already holds {MAX_STAGES} stages, the most a plan may hold")
        taken = self.stage_ids
        if id is None:
            while any(f"s{self._next_number}" == t or _prefixes(f"s{self._next_number}", t) for t in taken):
                self._next_number += 1
            sid = f"s{self._next_number}"
        else:
            sid = check_stage_id(id, taken)
        _check_base_bias(sid, stage, coupling)
        number = re.fullmatch(r"s([1-9][0-9]{0,8})", sid)
        if number:  # automatic ids continue after the highest "s<n>", given or automatic
            self._next_number = max(self._next_number, int(number.group(1)) + 1)
        self._entries.append(StageEntry(sid, stage, coupling))
        return sid

    def remove(self, sid: str) -> Stage:
        """Remove stage ``sid`` and return it; every other stage keeps its id."""
        k = self._index(sid)
        return self._entries.pop(k).stage

    def move(self, sid: str, position: int) -> None:
        """Move stage ``sid`` to ``position`` in the chain (0 is first, -1 is last); ids stay as they are.

        Raises
        ------
        UnknownNameError
            No stage ``sid``.
        InvalidValueError
            ``position`` is not a whole number, or is outside the chain.
        """
        k = self._index(sid)
        n = len(self._entries)
        if isinstance(position, bool) or not isinstance(position, numbers.Integral):
            raise InvalidValueError(f"plan.move({sid!r}, ...): the position must be a whole number, "
                                    f"got {shown(position)}")
        if not -n <= position < n:
            raise InvalidValueError(f"plan.move({sid!r}, {position}): the plan has {n} stage(s), so the position "
                                    f"runs from 0 to {n - 1} (or -{n} to -1 from the end)")
        entry = self._entries.pop(k)
        self._entries.insert(int(position) % n, entry)

    @property
    def stages(self) -> tuple:
        """The stages in order."""
        return tuple(e.stage for e in self._entries)

    @property
    def couplings(self) -> tuple:
        """Each stage's coupling (``"capacitor"`` or ``"direct"``), in order."""
        return tuple(e.coupling for e in self._entries)

    @property
    def stage_ids(self) -> tuple:
        """The stages' ids, in chain order."""
        return tuple(e.id for e in self._entries)

    def stage(self, sid: str) -> Stage:
        """The stage with id ``sid``."""
        return self._entries[self._index(sid)].stage

    def _index(self, sid: str) -> int:
        ids = self.stage_ids
        if not isinstance(sid, str) or sid not in ids:
            raise UnknownNameError(f"the plan has no stage {shown(sid)}; its stages are {', '.join(ids) or 'none'}"
                                   + (did_you_mean(sid, ids) if isinstance(sid, str) else ""))
        return ids.index(sid)

    # -- dotted addresses ---------------------------------------------------------------------
    def _address(self, address) -> tuple:
        """What a dotted address names, checked: ``("plan", name)``, ``("coupling", k)``,
        ``("device", k)``, ``("device-parameter", k, name)`` or ``("stage", k, name)``, k the stage index."""
        if not isinstance(address, str):
            raise UnknownNameError(f"an address is text such as 's1.rc', got {address!r}")
        head, _, rest = address.partition(".")
        if not rest:
            if head in PLAN_PARAMETERS or head in _PLAN_WORDS:
                return ("plan", head)
            raise UnknownNameError(f"no plan parameter {address!r}"
                                   + did_you_mean(head, (*PLAN_PARAMETERS, *_PLAN_WORDS)))
        k = self._index(head)
        if rest in ("coupling", "device"):
            return (rest, k)
        if rest.startswith("device."):
            pname = rest[len("device."):]
            if pname not in DEVICE_FIELDS:
                raise UnknownNameError(f"{address}: transistors have no parameter {pname!r}"
                                       + did_you_mean(pname, DEVICE_FIELDS))
            return ("device-parameter", k, pname)
        stage = self._entries[k].stage
        values = stage.parameters()
        if rest not in values:
            raise UnknownNameError(f"{address}: {type(stage).__name__} has no parameter {rest!r}; "
                                   f"it has {', '.join((*values, 'device', 'coupling'))}")
        return ("stage", k, rest)

    def get(self, address: str):
        """Value at a dotted address.

        Addresses: a plan value (``"supply"``, ``"load_coupling"``, ``"description"``); a stage's
        parameter (``"s1.rc"``; for a custom stage, an element's name), its transistor
        (``"s1.device"``) or one transistor parameter (``"s2.device.beta"``), and its coupling
        (``"s1.coupling"``).
        """
        where = self._address(address)
        if where[0] == "plan":
            return getattr(self, where[1])
        entry = self._entries[where[1]]
        if where[0] == "coupling":
            return entry.coupling
        if where[0] == "device":
            return entry.stage.device
        if where[0] == "device-parameter":
            return getattr(entry.stage.device, where[2])
        return entry.stage.parameters()[where[2]]

    def set(self, address: str, value) -> None:
        """Change the value at a dotted address (see :meth:`get`), validated like the constructors.

        A refused change leaves the plan as it was. A capacitor-coupled stage must keep its own
        base bias, as :meth:`add` requires.
        """
        where = self._address(address)
        if where[0] == "plan":
            setattr(self, where[1], value)
            return
        sid = self.stage_ids[where[1]]
        entry = self._entries[where[1]]
        if where[0] == "coupling":
            if not isinstance(value, str) or value not in COUPLINGS:
                raise UnknownModelError(f"{address} must be one of {', '.join(COUPLINGS)}, got {value!r}")
            _check_base_bias(sid, entry.stage, value)
            entry.coupling = value
            return
        if where[0] == "device":
            stage = entry.stage.replace(device=value)
        elif where[0] == "device-parameter":
            stage = entry.stage.replace(device=entry.stage.device.replace(**{where[2]: value}))
        else:
            stage = entry.stage.replace(**{where[2]: value})
        _check_base_bias(sid, stage, entry.coupling)
        entry.stage = stage

    def unit(self, address: str) -> str:
        """SI unit symbol of the number at a dotted address, from the declarations.

        ``"Ω"``, ``"F"``, ``"V"``, ``"A"``, ``"W"``, ``"°C"``, ``"V/K"``, ``"eV"``, or ``""`` for a
        dimensionless one (``"s1.device.beta"``).

        Raises
        ------
        UnknownNameError
            The address names nothing.
        InvalidValueError
            The address holds a word (a coupling, a polarity, the description) or a transistor,
            not a number.
        """
        where = self._address(address)
        if where[0] == "plan" and where[1] in PLAN_PARAMETERS:
            return PLAN_PARAMETERS[where[1]].unit
        if where[0] == "device-parameter" and where[2] in DEVICE_UNITS:
            return DEVICE_UNITS[where[2]]
        if where[0] == "stage":
            return self._entries[where[1]].stage.unit(where[2])
        held = "a transistor" if where[0] == "device" else "a word"
        raise InvalidValueError(f"{address} holds {held}, not a number, so it has no unit")

    def copy(self) -> "Plan":
        """An independent copy: a deep copy, since a CustomStage holds a mutable Circuit (template
        stages are frozen, but a custom stage's circuit can be changed in place)."""
        return copy.deepcopy(self)

    # -- compile and solve --------------------------------------------------------------------
    def compile(self) -> CompiledPlan:
        """Build the one circuit of source, stages and load."""
        if not self._entries:
            raise InvalidValueError("the plan has no stages; add one with plan.add(...)")
        c = Circuit()
        owner: dict[str, float] = {}
        c.voltage_source(SUPPLY, "vcc", GROUND, self.supply)
        lower = GROUND
        if self.negative_supply != 0:
            lower = "vee"
            c.voltage_source(NEGATIVE_SUPPLY, lower, GROUND, self.negative_supply)
        rails = Rails(supply="vcc", lower=lower)
        c.voltage_source(SOURCE, EMF_NODE, GROUND, 0.0)
        owner[SOURCE] = 0.0
        previous = EMF_NODE
        if self.source_resistance > 0:
            c.resistor(SOURCE_RESISTOR, EMF_NODE, SOURCE_NODE, self.source_resistance)
            owner[SOURCE_RESISTOR] = 0.0
            previous = SOURCE_NODE
        nodes, sids = [], []
        plan_values = dataclasses.asdict(self._values)
        for k, entry in enumerate(self._entries, start=1):
            sid = entry.id
            sids.append(sid)
            if entry.coupling == "capacitor":
                input_node = f"{sid}_in"
                c.capacitor(f"{sid}_coupling", previous, input_node, self.coupling_capacitance)
                owner[f"{sid}_coupling"] = k - 0.5
            else:
                input_node = previous
            # A capacitor left None takes the plan value its declaration names (bypass_capacitance).
            stage = entry.stage.with_plan_defaults(plan_values)
            built: StageNodes = stage.build(c, sid, input_node, rails)
            for name in built.elements:
                owner[name] = float(k)
            nodes.append(built)
            previous = built.output
        n = len(self._entries)
        load_node = previous
        if self.load_resistance is not None:
            if self.load_coupling == "capacitor":
                c.capacitor(LOAD_CAPACITOR, previous, LOAD_NODE, self.coupling_capacitance)
                owner[LOAD_CAPACITOR] = n + 0.5
                load_node = LOAD_NODE
            c.resistor(LOAD_RESISTOR, load_node, GROUND, self.load_resistance)
            owner[LOAD_RESISTOR] = n + 1.0
        ids = tuple(sids)
        have = {e.name for e in c.elements}
        transistor_stage = {name: ids[int(round(tag)) - 1] for name, tag in owner.items()
                            if isinstance(c.element(name), Bjt) and 1 <= round(tag) <= n}
        return CompiledPlan(
            circuit=c, stages=tuple(nodes), source=SOURCE, load_node=load_node, owner=owner, stage_ids=ids,
            kinds=tuple(e.stage.kind for e in self._entries), transistor_stage=transistor_stage,
            supplies=tuple(name for name in (SUPPLY, NEGATIVE_SUPPLY) if name in have),
            plan_resistors=tuple(name for name in (SOURCE_RESISTOR, LOAD_RESISTOR) if name in have),
            temperature=self.temperature, supply=self.supply, negative_supply=self.negative_supply,
            min_headroom=self.min_headroom, resistor_power_rating=self.resistor_power_rating,
            addresses=_addresses(c, ids, [e.stage for e in self._entries], nodes))

    def solve(self, model: str = "constant-drop", active_edge: str = "vce-sat", batch: dict | None = None):
        """Solve the plan: bias, midband small-signal, load lines, swing, dissipation, cautions.

        Parameters
        ----------
        model : {"constant-drop", "ebers-moll"}
        active_edge : {"vce-sat", "vcb-zero"}
            Constant-drop model only: where forward-active meets saturation.
        batch : dict of str -> array_like of shape (S,), optional
            Plan addresses to values per sample: ``{"s1.rc": [...], "s2.device.beta": [...],
            "supply": [...], "temperature": [...]}`` (scalars broadcast). The addresses a batch can
            vary are those of ``plan.compile().addresses``: numbers held by a circuit element, a
            transistor parameter, the temperature, ``min_headroom`` and ``resistor_power_rating``;
            not a coupling, a part that is not fitted or a capacitor value (those change the
            circuit, or nothing DC).

        Returns
        -------
        ampplan.analyses.PlanResult
            Floats for a single solve; for a batch, every figure an array of shape (S,) and a
            ``status`` per sample (a failed sample gets NaN figures, the others are unaffected).
        """
        from .analyses.chain import analyse_plan
        return analyse_plan(self, model=model, active_edge=active_edge, batch=batch)

    # -- what-if (ampplan.analyses.whatif) ----------------------------------------------------
    def sweep(self, values, model: str = "constant-drop", grid: bool = False):
        """Solve many variants of the plan in one batched call; returns a PlanSweep.

        ``values`` maps plan addresses to 1-D arrays (same length, or a full grid with
        ``grid=True``). See :func:`ampplan.analyses.whatif.sweep`.
        """
        from .analyses.whatif import sweep
        return sweep(self, values, model=model, grid=grid)

    def tolerance(self, samples: int = 10_000, seed=None, resistors=0.05, beta=(0.5, 2.0), vbe_on=0.01,
                  temperature=(0.0, 50.0), distribution: str = "uniform", required_amplitude=None,
                  model: str = "constant-drop", executor=None, **options):
        """Monte Carlo tolerance run; returns a ToleranceResult (yield, percentiles, worst samples,
        sensitivity). See :func:`ampplan.analyses.whatif.tolerance`."""
        from .analyses.whatif import tolerance
        return tolerance(self, samples=samples, seed=seed, resistors=resistors, beta=beta, vbe_on=vbe_on,
                         temperature=temperature, distribution=distribution, required_amplitude=required_amplitude,
                         model=model, executor=executor, **options)

    def corners(self, resistors=0.05, beta=(0.5, 2.0), vbe_on=0.01, temperature=(0.0, 50.0),
                required_amplitude=None, model: str = "constant-drop", **options):
        """The plan at the extremes of the same spreads; returns a CornersResult (worst case per
        margin). See :func:`ampplan.analyses.whatif.corners`."""
        from .analyses.whatif import corners
        return corners(self, resistors=resistors, beta=beta, vbe_on=vbe_on, temperature=temperature,
                       required_amplitude=required_amplitude, model=model, **options)

    def design(self, address: str, target, series=None, bounds=None, model: str = "constant-drop"):
        """Solve one plan value so that a result reaches a target; returns a DesignResult (this plan
        is not changed). See :func:`ampplan.analyses.whatif.design`."""
        from .analyses.whatif import design
        return design(self, address, target, series=series, bounds=bounds, model=model)

    # -- files --------------------------------------------------------------------------------
    def save(self, path) -> None:
        """Write the plan as a JSON plan file, atomically (see :mod:`ampplan.record`)."""
        from .record import save_plan
        save_plan(self, path)

    @classmethod
    def load(cls, path) -> "Plan":
        """Read a JSON plan file (see :mod:`ampplan.record`)."""
        from .record import load_plan
        return load_plan(path)

    def __repr__(self) -> str:
        body = ", ".join(f"{sid}: {type(e.stage).__name__} ({e.coupling})"
                         for sid, e in zip(self.stage_ids, self._entries))
        return (f"Plan(supply={self.supply:g} V, negative_supply={self.negative_supply:g} V, "
                f"{len(self._entries)} stage(s): {body})")


def _addresses(circuit: Circuit, ids, stages, built) -> dict:
    """Every plan address a batch can vary: its element, batch key, unit and bounds."""
    out = {}
    have = {e.name for e in circuit.elements}

    def add(address, element, key, unit, **bounds):
        out[address] = PlanAddress(address, element, key, unit, dict(bounds, unit=unit))

    resistor = VALUE_BOUNDS[Resistor]
    for name in (SUPPLY, NEGATIVE_SUPPLY):
        if name in have:
            p = PLAN_PARAMETERS[name]
            add(name, name, name, p.unit, minimum=p.minimum, maximum=p.maximum, minimum_inclusive=p.minimum_inclusive)
    for name in (SOURCE_RESISTOR, LOAD_RESISTOR):
        if name in have:
            add(name, name, name, **resistor)
    p = PLAN_PARAMETERS["temperature"]
    add("temperature", None, "temperature", p.unit, minimum=p.minimum, maximum=p.maximum,
        minimum_inclusive=p.minimum_inclusive)
    for name in ANALYSIS_VALUES:
        p = PLAN_PARAMETERS[name]
        add(name, None, None, p.unit, minimum=p.minimum, maximum=p.maximum, minimum_inclusive=p.minimum_inclusive)
    for sid, stage, nodes in zip(ids, stages, built):
        declared = {p.name: p for p in stage.PARAMETERS}
        for pname in stage.parameters():
            element = f"{sid}_{pname}"
            if element not in have or isinstance(circuit.element(element), Bjt):
                continue        # not fitted (None) or not an element's value
            kind = type(circuit.element(element))
            bounds = dict(VALUE_BOUNDS[kind])
            if pname in declared:
                d = declared[pname]
                bounds.update(minimum=d.minimum, maximum=d.maximum, minimum_inclusive=d.minimum_inclusive, unit=d.unit)
            add(f"{sid}.{pname}", element, element, **bounds)
        for pname in DEVICE_PARAMETERS:
            low, inclusive = PARAMETER_BOUNDS.get(pname, (-math.inf, False))
            add(f"{sid}.device.{pname}", nodes.transistor, f"{nodes.transistor}.{pname}", DEVICE_UNITS[pname],
                minimum=low, minimum_inclusive=inclusive, maximum=PARAMETER_MAXIMA.get(pname, math.inf),
                may_be_infinite=pname in MAY_BE_INFINITE)
    return out


def _plan_value(name: str) -> property:
    """The validated property of one declared plan value."""
    p = PLAN_PARAMETERS[name]
    return property(lambda self: getattr(self._values, name), lambda self, value: self._set_plan_value(name, value),
                    doc=f"{p.help} ({p.unit}).")


# One property per declared plan value, from its declaration (PLAN_PARAMETERS).
for _name in PLAN_PARAMETERS:
    setattr(Plan, _name, _plan_value(_name))
del _name

"""Stage templates: small, declared parameter sets that compile to circuit elements.

Each template declares its parameters once, as :class:`Parameter` rows (name, unit, default, bounds,
scale, help). The dataclass fields, validation, docstring, the plan-file schema and (later) the
widget controls all come from that one declaration.

Rails seen by a stage: the *supply* (node ``vcc``), the *lower rail* (``vee`` when the plan has a
negative supply, else ``gnd``) and ground. An NPN stage hangs from the supply with its emitter
toward the lower rail; a PNP stage is mirrored: its emitter resistor goes to the supply and its
collector resistor to the lower rail. The base network is the same for both: ``rb1`` from the
supply to the base, ``rb2`` from the base to the lower rail (either may be None).
"""

from __future__ import annotations

import dataclasses
import math
import typing
from dataclasses import dataclass, field
from typing import ClassVar, Literal, get_args

from .circuit import (GROUND, RESISTANCE_RANGE, VALUE_BOUNDS, Bjt, Capacitor, Circuit, CurrentSource, Resistor,
                      VoltageSource)
from .devices import Transistor
from .errors import InvalidValueError, UnknownNameError
from .units import LINE_WIDTH, format_call, format_quantity
from .validation import bounds_text, check_number, check_text, shown

__all__ = ["Parameter", "Stage", "CommonEmitter", "CommonCollector", "CommonBase", "CustomStage",
           "StageNodes", "Rails", "TEMPLATES", "SUPPLY_NODE", "LOWER_NODE"]

Scale = Literal["log", "linear"]
SCALES = get_args(Scale)

#: Node names a CustomStage uses for the rails; the plan maps them to its own rails.
SUPPLY_NODE = "supply"
LOWER_NODE = "lower"


@dataclass(frozen=True)
class Parameter:
    """One declared number: of a stage template or of a plan.

    It is declared once, in the metadata of the dataclass field that holds the value
    (:func:`declared`); the field gives the name and the default, and the field's annotation says
    whether None is allowed (``float | None``). Validation, the docstring, the plan-file schema and
    the controls of a notebook all read it.

    Attributes
    ----------
    name : str
        Field name, e.g. ``"rc"``.
    unit : str
        SI unit symbol (``"Ω"``, ``"F"``).
    default : float or None
    minimum : float
        Lower bound: values must be greater (or equal when ``minimum_inclusive``).
    maximum : float
        Inclusive upper bound.
    minimum_inclusive : bool
        Whether ``minimum`` itself is allowed.
    scale : {"log", "linear"}
        How a control should move it.
    optional : bool
        None is allowed and means "not fitted".
    help : str
        One line for a tooltip and the docstring.
    typical : (float, float)
        The range a designer usually moves it in, for controls such as slider ends; well inside
        the hard bounds (``minimum``, ``maximum``), which only refuse what cannot be meant. For a
        ``"log"`` scale both ends are > 0. Common practice, no source, unless the help says so.
    plan_default : str or None
        Name of the plan value that stands in when this one is None (``"bypass_capacitance"``
        for a bypass capacitor left unchosen).
    """
    name: str
    unit: str
    default: float | None
    help: str
    minimum: float = 0.0
    maximum: float = math.inf
    scale: Scale = "log"
    optional: bool = True
    minimum_inclusive: bool = False
    typical: tuple[float, float] | None = None
    plan_default: str | None = None

    def check(self, value, where: str):
        """Return ``value`` as float (or None), raising InvalidValueError naming ``where``.

        The rules are those of :func:`ampplan.validation.check_number`: a real number (not a bool,
        text or a list), finite, within the bounds; None only when ``optional``.
        """
        return check_number(value, f"{where}:", minimum=self.minimum, maximum=self.maximum,
                            minimum_inclusive=self.minimum_inclusive, unit=self.unit, optional=self.optional,
                            required=self.help)

    def bounds_text(self) -> str:
        """The allowed range in words, e.g. ``"> 0 F"`` or ``">= 1 µΩ and <= 1 TΩ"``."""
        return bounds_text(self.minimum, self.maximum, self.minimum_inclusive, self.unit)


@dataclass(frozen=True)
class Rails:
    """Node names of the plan's rails."""
    supply: str = "vcc"
    lower: str = GROUND


@dataclass(frozen=True)
class StageNodes:
    """What a compiled stage exposes: its input and output nodes and its transistor's name."""
    input: str
    output: str
    transistor: str
    elements: tuple[str, ...]


#: Key of a field's metadata that holds its :class:`Parameter`.
PARAMETER_KEY = "parameter"


def declared(unit: str, help: str, typical: tuple[float, float], **bounds) -> dict:
    """Field metadata declaring a number: ``field(default=..., metadata=declared(...))``.

    The name, the default and whether None is allowed come from the field itself (filled in by
    :func:`declared_parameters`); ``bounds`` are the other :class:`Parameter` attributes.
    """
    return {PARAMETER_KEY: Parameter("", unit, None, help, typical=typical, **bounds)}


def resistance(help: str, typical: tuple[float, float]) -> dict:
    """Field metadata of a resistance: ohms, bounds from the circuit's RESISTANCE_RANGE (so that a
    stage never holds a value its circuit would refuse), log scale."""
    return declared("Ω", help, typical, minimum=RESISTANCE_RANGE[0], minimum_inclusive=True,
                    maximum=RESISTANCE_RANGE[1])


def capacitance(help: str, typical: tuple[float, float], plan_default: str | None = None) -> dict:
    """Field metadata of a capacitance: farads, > 0, log scale (open at DC, short at midband)."""
    return declared("F", help, typical, plan_default=plan_default)


def declared_parameters(cls) -> tuple[Parameter, ...]:
    """The :class:`Parameter` of every declared field of dataclass ``cls``, in field order, with
    the field's name and default filled in and ``optional`` read from its annotation."""
    hints = typing.get_type_hints(cls)
    out = []
    for f in dataclasses.fields(cls):
        p = f.metadata.get(PARAMETER_KEY)
        if p is None:
            continue
        default = None if f.default is dataclasses.MISSING else f.default
        out.append(dataclasses.replace(p, name=f.name, default=default,
                                       optional=type(None) in typing.get_args(hints[f.name])))
    return tuple(out)


def parameter_doc(parameters) -> list[str]:
    """numpydoc lines of declared parameters: name, type, help, unit, bounds and default."""
    lines = []
    for p in parameters:
        default = "None" if p.default is None else f"{p.default:g}"
        lines += [f"{p.name} : float{' or None' if p.optional else ''}",
                  f"    {p.help} ({p.unit or 'dimensionless'}, {p.bounds_text()}; default {default}; "
                  f"typically {p.typical[0]:g} to {p.typical[1]:g})."]
    return lines




class Stage:
    """Base of the stage templates: declared parameters plus a transistor ``device``.

    Subclasses are frozen dataclasses built by :func:`_template`; they implement :meth:`build`.
    """

    kind: ClassVar[str] = ""
    PARAMETERS: ClassVar[tuple[Parameter, ...]] = ()

    def __post_init__(self):
        for p in self.PARAMETERS:
            object.__setattr__(self, p.name, p.check(getattr(self, p.name), f"{type(self).__name__}.{p.name}"))
        if not isinstance(self.device, Transistor):
            raise InvalidValueError(f"{type(self).__name__}.device must be an ampplan.Transistor, "
                                    f"got {type(self.device).__name__}")
        self._check()

    def _check(self):
        """Template-specific consistency checks (override)."""

    def __repr__(self) -> str:
        # The fitted values in engineering notation, wrapped so no line is long (parts not fitted
        # are left out); the dataclass's own repr would print raw floats on one very long line.
        name = type(self).__name__
        items = [f"{p.name}={format_quantity(v, p.unit)}" for p in self.PARAMETERS
                 if (v := getattr(self, p.name)) is not None]
        device = self.device.formatted(LINE_WIDTH - len(name) - len("(device="))
        return format_call(name, [*items, ("device=", device)])

    def parameters(self) -> dict:
        """Declared parameter values by name (SI units; None where not fitted)."""
        return {p.name: getattr(self, p.name) for p in self.PARAMETERS}

    def unit(self, name: str) -> str:
        """SI unit symbol of parameter ``name`` (``"Ω"``, ``"F"``), from its declaration."""
        for p in self.PARAMETERS:
            if isinstance(name, str) and p.name == name:
                return p.unit
        raise UnknownNameError(f"{type(self).__name__} has no parameter {shown(name)}; "
                               f"it has {', '.join(p.name for p in self.PARAMETERS)}")

    def replace(self, **changes) -> "Stage":
        """A copy with some parameters (or ``device``) changed."""
        allowed = {p.name for p in self.PARAMETERS} | {"device"}
        for name in changes:
            if name not in allowed:
                raise UnknownNameError(f"{type(self).__name__} has no parameter {name!r}; "
                                       f"it has {', '.join(sorted(allowed))}")
        return dataclasses.replace(self, **changes)

    def has_base_bias(self) -> bool:
        """True when the stage biases its own input (a divider or base resistor)."""
        return True

    def with_plan_defaults(self, values: dict) -> "Stage":
        """A copy where each parameter left None takes the plan value its declaration names
        (``plan_default``), when that value is set; ``values`` maps plan value names to values."""
        changes = {p.name: values[p.plan_default] for p in self.PARAMETERS
                   if p.plan_default and getattr(self, p.name) is None and values.get(p.plan_default) is not None}
        return self.replace(**changes) if changes else self

    def build(self, circuit: Circuit, sid: str, input_node: str, rails: Rails) -> StageNodes:
        """Add this stage's elements to ``circuit`` with names prefixed ``sid`` (e.g. ``s1_rc``)."""
        raise NotImplementedError

    # Helpers shared by the templates.
    def _low_high(self, rails: Rails):
        """(rail for the emitter side, rail for the collector side)."""
        return (rails.lower, rails.supply) if self.device.polarity == "npn" else (rails.supply, rails.lower)

    def _base_network(self, circuit, sid, base, rails, added):
        if self.rb1 is not None:
            circuit.resistor(f"{sid}_rb1", rails.supply, base, self.rb1)
            added.append(f"{sid}_rb1")
        if self.rb2 is not None:
            circuit.resistor(f"{sid}_rb2", base, rails.lower, self.rb2)
            added.append(f"{sid}_rb2")

    def _emitter_network(self, circuit, sid, emitter, rail, added, re, re_bypassed, c_bypass):
        """Unbypassed ``re`` then bypassed ``re_bypassed`` from the emitter to ``rail``.

        The caller passes at least one of ``re`` and ``re_bypassed`` (with neither, the emitter
        goes straight to the rail and this is not called).
        """
        node = emitter
        if re is not None:
            nxt = f"{sid}_ex" if re_bypassed is not None else rail
            circuit.resistor(f"{sid}_re", node, nxt, re)
            added.append(f"{sid}_re")
            node = nxt
        if re_bypassed is not None:
            circuit.resistor(f"{sid}_re_bypassed", node, rail, re_bypassed)
            circuit.capacitor(f"{sid}_c_bypass", node, GROUND, c_bypass)
            added += [f"{sid}_re_bypassed", f"{sid}_c_bypass"]


def _template(kind: str):
    """Class decorator of a stage template, applied above ``@dataclass(frozen=True)``.

    Reads the declared fields into ``PARAMETERS``, sets ``kind`` (the plan-file name) and appends
    the numpydoc Parameters section, generated from the declarations, to the class docstring.
    """
    def finish(cls):
        cls.kind = kind
        cls.__repr__ = Stage.__repr__      # the dataclass decorator wrote its own
        cls.PARAMETERS = declared_parameters(cls)
        lines = [(cls.__doc__ or "").strip(), "", "Parameters", "----------", *parameter_doc(cls.PARAMETERS),
                 "device : Transistor", "    The stage's transistor (its polarity decides the orientation)."]
        cls.__doc__ = "\n".join(lines)
        return cls
    return finish


class _CommonEmitter(Stage):
    def has_base_bias(self):
        return self.rb1 is not None or self.rb2 is not None or self.rf is not None

    def build(self, circuit, sid, input_node, rails):
        added = []
        emitter_rail, collector_rail = self._low_high(rails)
        c, e = f"{sid}_c", f"{sid}_e"
        self._base_network(circuit, sid, input_node, rails, added)
        if self.rf is not None:
            circuit.resistor(f"{sid}_rf", c, input_node, self.rf)
            added.append(f"{sid}_rf")
        circuit.resistor(f"{sid}_rc", collector_rail, c, self.rc)
        added.append(f"{sid}_rc")
        if self.re is None and self.re_bypassed is None:
            e = emitter_rail
        else:
            self._emitter_network(circuit, sid, e, emitter_rail, added, self.re, self.re_bypassed, self.c_bypass)
        circuit.bjt(f"{sid}_q", collector=c, base=input_node, emitter=e, device=self.device)
        return StageNodes(input_node, c, f"{sid}_q", tuple(added) + (f"{sid}_q",))


@_template("common-emitter")
@dataclass(frozen=True)
class CommonEmitter(_CommonEmitter):
    """Common-emitter stage: input at the base, output at the collector."""
    rb1: float | None = field(default=None, metadata=resistance(
        "bias resistor from the supply to the base", typical=(10e3, 1e6)))
    rb2: float | None = field(default=None, metadata=resistance(
        "bias resistor from the base to the lower rail", typical=(1e3, 470e3)))
    rc: float = field(default=4.7e3, metadata=resistance("collector resistor", typical=(100.0, 100e3)))
    re: float | None = field(default=None, metadata=resistance(
        "unbypassed emitter resistor (degeneration)", typical=(10.0, 10e3)))
    re_bypassed: float | None = field(default=None, metadata=resistance(
        "emitter resistor bypassed to ground at midband", typical=(100.0, 10e3)))
    rf: float | None = field(default=None, metadata=resistance(
        "collector-to-base feedback resistor", typical=(10e3, 1e6)))
    c_bypass: float | None = field(default=None, metadata=capacitance(
        "emitter bypass capacitor (None: the plan's bypass_capacitance)", typical=(1e-6, 1e-3),
        plan_default="bypass_capacitance"))
    device: Transistor = field(default_factory=Transistor)


class _CommonCollector(Stage):
    def has_base_bias(self):
        return self.rb1 is not None or self.rb2 is not None

    def build(self, circuit, sid, input_node, rails):
        added = []
        emitter_rail, collector_rail = self._low_high(rails)
        c, e = f"{sid}_c", f"{sid}_e"
        self._base_network(circuit, sid, input_node, rails, added)
        if self.rc is not None:
            circuit.resistor(f"{sid}_rc", collector_rail, c, self.rc)
            added.append(f"{sid}_rc")
        else:
            c = collector_rail
        circuit.resistor(f"{sid}_re", e, emitter_rail, self.re)
        added.append(f"{sid}_re")
        circuit.bjt(f"{sid}_q", collector=c, base=input_node, emitter=e, device=self.device)
        return StageNodes(input_node, e, f"{sid}_q", tuple(added) + (f"{sid}_q",))


@_template("common-collector")
@dataclass(frozen=True)
class CommonCollector(_CommonCollector):
    """Common-collector stage (emitter follower): input at the base, output at the emitter."""
    rb1: float | None = field(default=None, metadata=resistance(
        "bias resistor from the supply to the base", typical=(10e3, 1e6)))
    rb2: float | None = field(default=None, metadata=resistance(
        "bias resistor from the base to the lower rail", typical=(1e3, 470e3)))
    re: float = field(default=1e3, metadata=resistance("emitter resistor", typical=(100.0, 100e3)))
    rc: float | None = field(default=None, metadata=resistance(
        "collector resistor (None: collector on the rail)", typical=(10.0, 10e3)))
    device: Transistor = field(default_factory=Transistor)


class _CommonBase(Stage):
    def _check(self):
        if self.rb1 is None or self.rb2 is None:
            raise InvalidValueError("CommonBase needs both rb1 and rb2 (its base divider)")

    def build(self, circuit, sid, input_node, rails):
        added = []
        emitter_rail, collector_rail = self._low_high(rails)
        b, c = f"{sid}_b", f"{sid}_c"
        self._base_network(circuit, sid, b, rails, added)
        circuit.capacitor(f"{sid}_c_base", b, GROUND, self.c_base)
        circuit.resistor(f"{sid}_rc", collector_rail, c, self.rc)
        circuit.resistor(f"{sid}_re", input_node, emitter_rail, self.re)
        added += [f"{sid}_c_base", f"{sid}_rc", f"{sid}_re"]
        circuit.bjt(f"{sid}_q", collector=c, base=b, emitter=input_node, device=self.device)
        return StageNodes(input_node, c, f"{sid}_q", tuple(added) + (f"{sid}_q",))


@_template("common-base")
@dataclass(frozen=True)
class CommonBase(_CommonBase):
    """Common-base stage: base bypassed, input at the emitter, output at the collector."""
    # rb1 and rb2 are None-able in type so that CommonBase(rb1=None) reaches the stage's own
    # message ("needs both rb1 and rb2") rather than a bare "is required".
    rb1: float | None = field(default=47e3, metadata=resistance(
        "base divider resistor from the supply", typical=(10e3, 1e6)))
    rb2: float | None = field(default=10e3, metadata=resistance(
        "base divider resistor to the lower rail", typical=(1e3, 470e3)))
    rc: float = field(default=4.7e3, metadata=resistance("collector resistor", typical=(100.0, 100e3)))
    re: float = field(default=1e3, metadata=resistance("emitter resistor (the stage's input)",
                                                       typical=(100.0, 100e3)))
    c_base: float | None = field(default=None, metadata=capacitance(
        "base bypass capacitor (None: the plan's bypass_capacitance)", typical=(1e-6, 1e-3),
        plan_default="bypass_capacitance"))
    device: Transistor = field(default_factory=Transistor)


@dataclass(frozen=True)
class CustomStage(Stage):
    """A stage built from raw circuit elements, usable wherever a template is.

    Parameters
    ----------
    circuit : Circuit
        The stage's elements. Rails are the nodes ``"supply"`` and ``"lower"`` (the lower rail)
        and ``"gnd"``; the node named by ``input`` is joined to the previous stage (or coupling
        capacitor); every other node is private to the stage (``"<sid>.<node>"`` in the plan's
        circuit, e.g. ``"s2.c"``).
    input, output : str
        The stage's input and output nodes: nodes of its own, not rails (InvalidValueError).
    transistor : str
        Name of the transistor whose Q-point, swing and load lines the stage reports.

    Notes
    -----
    Unlike the templates, whose values are plain floats, this stage holds a :class:`Circuit`, which
    can be changed in place. The stage takes its own copy when it is made, so later changes to the
    circuit you passed in do not reach it; change the stage through :meth:`replace` (or
    ``plan.set("s2.r1", ...)``), which validates, and treat ``stage.circuit`` as read-only.
    """

    kind: ClassVar[str] = "custom"
    PARAMETERS: ClassVar[tuple[Parameter, ...]] = ()
    circuit: Circuit = field(default_factory=Circuit)
    input: str = "in"
    output: str = "out"
    transistor: str = "q"

    def __post_init__(self):
        if not isinstance(self.circuit, Circuit):
            raise InvalidValueError("CustomStage.circuit must be an ampplan.Circuit")
        object.__setattr__(self, "circuit", self.circuit.copy())
        nodes = set(self.circuit.nodes) | {GROUND}
        rails = (SUPPLY_NODE, LOWER_NODE, GROUND)
        for what in ("input", "output", "transistor"):
            check_text(getattr(self, what), f"CustomStage.{what}")
        for what in ("input", "output"):
            node = getattr(self, what)
            if node in rails:
                # The plan joins a rail node to its own rail, so a rail input or output would
                # merge the signal path with that rail.
                raise InvalidValueError(f"CustomStage.{what}: {node!r} is a rail node; the {what} must be a "
                                        f"node of the stage's own (not {', '.join(map(repr, rails))})")
            if node not in nodes:
                raise UnknownNameError(f"CustomStage.{what}: the stage circuit has no node {node!r}")
        names = {b.name for b in self.circuit.of_kind(Bjt)}
        if self.transistor not in names:
            raise UnknownNameError(f"CustomStage.transistor: the stage circuit has no transistor {self.transistor!r}"
                                   f" (it has {', '.join(sorted(names)) or 'none'})")

    @property
    def device(self) -> Transistor:
        """The reported transistor's parameters."""
        return self.circuit.element(self.transistor).device

    def parameters(self) -> dict:
        """Element values by element name."""
        out = {}
        for e in self.circuit.elements:
            for attr in ("resistance", "voltage", "current", "capacitance"):
                if hasattr(e, attr):
                    out[e.name] = getattr(e, attr)
        return out

    def unit(self, name: str) -> str:
        """SI unit symbol of element ``name``'s value: Ω, F, V or A by its kind."""
        element = self.circuit.element(name)
        if isinstance(element, Bjt):
            raise InvalidValueError(f"CustomStage element {name!r} is a transistor; it has no single value "
                                    "(its device parameters have units of their own)")
        return VALUE_BOUNDS[type(element)]["unit"]

    def replace(self, **changes) -> "CustomStage":
        """A copy with element values (by element name) or ``device`` changed."""
        circuit = self.circuit.copy()
        for name, value in changes.items():
            if name == "device":
                old = circuit.remove(self.transistor)
                circuit.bjt(old.name, old.collector, old.base, old.emitter, value)
                continue
            old = circuit.element(name)
            if isinstance(old, Bjt):
                raise InvalidValueError(f"CustomStage element {name!r} is a transistor; set its device instead")
            attr = next(a for a in ("resistance", "voltage", "current", "capacitance") if hasattr(old, a))
            circuit.remove(name)
            circuit.add(dataclasses.replace(old, **{attr: value}))
        return CustomStage(circuit=circuit, input=self.input, output=self.output, transistor=self.transistor)

    def build(self, circuit, sid, input_node, rails):
        """Add the elements as ``<sid>_<element>``; private nodes become ``<sid>.<node>``.

        The plan's own nodes are ``<sid>_...`` without a dot (``s1_in``, ``s1_c``), so a private
        node can never land on one of them.
        """
        mapping = {SUPPLY_NODE: rails.supply, LOWER_NODE: rails.lower, GROUND: GROUND, self.input: input_node}
        rename = lambda n: mapping.get(n, f"{sid}.{n}")  # noqa: E731
        added = []
        for e in self.circuit.elements:
            new_name = f"{sid}_{e.name}"
            if isinstance(e, Resistor):
                circuit.resistor(new_name, rename(e.a), rename(e.b), e.resistance)
            elif isinstance(e, Capacitor):
                circuit.capacitor(new_name, rename(e.a), rename(e.b), e.capacitance)
            elif isinstance(e, VoltageSource):
                circuit.voltage_source(new_name, rename(e.plus), rename(e.minus), e.voltage)
            elif isinstance(e, CurrentSource):
                circuit.current_source(new_name, rename(e.from_node), rename(e.to_node), e.current)
            elif isinstance(e, Bjt):
                circuit.bjt(new_name, rename(e.collector), rename(e.base), rename(e.emitter), e.device)
            added.append(new_name)
        return StageNodes(input_node, rename(self.output), f"{sid}_{self.transistor}", tuple(added))


#: Templates by their plan-file ``kind``.
TEMPLATES: dict[str, type] = {cls.kind: cls for cls in (CommonEmitter, CommonCollector, CommonBase, CustomStage)}

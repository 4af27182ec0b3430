"""Circuits: elements and nodes, described and checked, never solved.

A :class:`Circuit` only describes (elements by name, nodes by use) and checks its own topology;
:meth:`Circuit.solve` is a thin call into :mod:`ampplan.solver`, which compiles the circuit into
its equations (:mod:`ampplan.solver.assembly`) and solves them.
"""

from __future__ import annotations

import dataclasses
import difflib
from dataclasses import dataclass
from typing import Union

import numpy as np

from .devices import Transistor
from .errors import (DuplicateNameError, FloatingNodeError, InvalidValueError, UnknownNameError,
                     VoltageSourceLoopError)
from .validation import check_number, check_text, shown

__all__ = ["GROUND", "Circuit", "Resistor", "VoltageSource", "CurrentSource", "Capacitor", "Bjt",
           "Element", "RESISTANCE_RANGE", "VOLTAGE_LIMIT", "CURRENT_LIMIT", "VALUE_BOUNDS", "VALUE_FIELD", "UnionFind", "terminals", "did_you_mean"]

GROUND = "gnd"


@dataclass(frozen=True)
class Resistor:
    """Resistor between nodes ``a`` and ``b``; ``resistance`` in ohms."""
    name: str
    a: str
    b: str
    resistance: float


@dataclass(frozen=True)
class VoltageSource:
    """Ideal DC source holding V(plus) - V(minus) = ``voltage`` volts."""
    name: str
    plus: str
    minus: str
    voltage: float


@dataclass(frozen=True)
class CurrentSource:
    """Ideal DC source; ``current`` amperes leave ``from_node``, pass through it, enter ``to_node``."""
    name: str
    from_node: str
    to_node: str
    current: float


@dataclass(frozen=True)
class Capacitor:
    """Capacitor: open at DC, a short at midband. ``capacitance`` in farads, or None if not chosen."""
    name: str
    a: str
    b: str
    capacitance: float | None = None


@dataclass(frozen=True)
class Bjt:
    """Bipolar transistor with its terminal nodes and device parameters."""
    name: str
    collector: str
    base: str
    emitter: str
    device: Transistor


Element = Union[Resistor, VoltageSource, CurrentSource, Capacitor, Bjt]

# The one value each element kind carries, by kind: what a batch key "<element>" varies.
VALUE_FIELD = {Resistor: "resistance", VoltageSource: "voltage", CurrentSource: "current",
                Capacitor: "capacitance"}

#: Smallest and largest resistance accepted, ohms: beyond them the equations lose their precision
#: in double arithmetic, so a short or an open should be drawn as one.
RESISTANCE_RANGE = (1e-6, 1e12)

#: Largest source voltage accepted, volts, either sign. A plan's rails stop at 10 kV
#: (:data:`ampplan.plan.SUPPLY_LIMIT`); the analyses drive sources beyond the rails (the clipping
#: sweep reaches ten times the largest rail), so the circuit allows 1 MV. Products the analyses
#: form stay far inside the float range (V²/R ≤ 1e12 V² / 1e-6 Ω = 1e18 W), so an absurd value
#: (1e160 V) is refused by name instead of overflowing in a power sum.
VOLTAGE_LIMIT = 1e6
#: Largest source current accepted, amperes, either sign: 1 kA is beyond any bipolar transistor's
#: collector rating (power parts stop near 100 A; common practice, no source); I²R through the
#: largest resistance stays finite (1e6 A² · 1e12 Ω = 1e18 W).
CURRENT_LIMIT = 1e3

#: Bounds and unit of each element kind's value, declared once: the element methods, batches,
#: the stage templates (through RESISTANCE_RANGE) and the plan-file schema follow them.
VALUE_BOUNDS: dict[type, dict] = {
    Resistor: dict(minimum=RESISTANCE_RANGE[0], minimum_inclusive=True, maximum=RESISTANCE_RANGE[1], unit="Ω"),
    VoltageSource: dict(minimum=-VOLTAGE_LIMIT, minimum_inclusive=True, maximum=VOLTAGE_LIMIT, unit="V"),
    CurrentSource: dict(minimum=-CURRENT_LIMIT, minimum_inclusive=True, maximum=CURRENT_LIMIT, unit="A"),
    Capacitor: dict(minimum=0.0, unit="F"),
}

# The method that adds (and validates) each element kind, by kind.
_ADD_METHOD = {Resistor: "resistor", VoltageSource: "voltage_source", CurrentSource: "current_source",
               Capacitor: "capacitor", Bjt: "bjt"}


def _check_name(kind: str, name) -> str:
    if not isinstance(name, str) or not name.strip():
        raise InvalidValueError(f"{kind} name must be a non-empty string, got {shown(name)}")
    check_text(name, f"{kind} name {name[:40]!r}")
    if "." in name:
        raise InvalidValueError(f"{kind} name {name!r} must not contain '.' (it separates parameters)")
    return name


def _check_node(element: str, terminal: str, node) -> str:
    if not isinstance(node, str) or not node.strip():
        raise InvalidValueError(f"{element}: {terminal} node must be a non-empty string, got {shown(node)}")
    return check_text(node, f"{element}: {terminal} node")


def _value(kind: type, element: str, value, optional: bool = False) -> float | None:
    """An element's value checked against its kind's VALUE_BOUNDS (``"R1: resistance must be ..."``)."""
    return check_number(value, f"{element}: {VALUE_FIELD[kind]}", optional=optional, **VALUE_BOUNDS[kind])


class Circuit:
    """A DC circuit of resistors, sources, capacitors and bipolar transistors.

    Nodes are created by use; ``"gnd"`` is ground (0 V). Element names are unique across kinds.

    Examples
    --------
    >>> c = Circuit()
    >>> c.voltage_source("VCC", "vcc", "gnd", 12.0)
    >>> c.resistor("RC", "vcc", "c", 4.7e3)
    """

    def __init__(self):
        self._elements: dict[str, Element] = {}
        #: Bumped by every change, so that compiled forms (the solver's layout) know when to rebuild.
        self.revision = 0

    # -- description --------------------------------------------------------------------------
    def _add(self, element: Element) -> None:
        if element.name in self._elements:
            raise DuplicateNameError(f"an element named {element.name!r} already exists in the circuit")
        self._elements[element.name] = element
        self.revision += 1

    def resistor(self, name: str, a: str, b: str, resistance: float) -> None:
        """Add a resistor of ``resistance`` ohms between nodes ``a`` and ``b``.

        The value must lie within RESISTANCE_RANGE (1 µΩ to 1 TΩ): beyond it the equations lose
        their precision in double arithmetic, so a short or an open should be drawn as one.
        """
        _check_name("resistor", name)
        value = _value(Resistor, name, resistance)
        self._add(Resistor(name, _check_node(name, "a", a), _check_node(name, "b", b), value))

    def voltage_source(self, name: str, plus: str, minus: str, voltage: float) -> None:
        """Add an ideal source holding V(plus) - V(minus) = ``voltage`` volts."""
        _check_name("voltage source", name)
        plus, minus = _check_node(name, "plus", plus), _check_node(name, "minus", minus)
        if plus == minus:
            raise InvalidValueError(f"{name}: voltage source has both terminals on node {plus!r}")
        self._add(VoltageSource(name, plus, minus, _value(VoltageSource, name, voltage)))

    def current_source(self, name: str, from_node: str, to_node: str, current: float) -> None:
        """Add an ideal source: ``current`` amperes leave ``from_node``, flow through it into ``to_node``."""
        _check_name("current source", name)
        self._add(CurrentSource(name, _check_node(name, "from", from_node),
                                _check_node(name, "to", to_node), _value(CurrentSource, name, current)))

    def capacitor(self, name: str, a: str, b: str, capacitance: float | None = None) -> None:
        """Add a capacitor (open at DC, short at midband); ``capacitance`` in farads or None."""
        _check_name("capacitor", name)
        capacitance = _value(Capacitor, name, capacitance, optional=True)
        self._add(Capacitor(name, _check_node(name, "a", a), _check_node(name, "b", b), capacitance))

    def bjt(self, name: str, collector: str, base: str, emitter: str, device: Transistor) -> None:
        """Add a bipolar transistor with the given terminal nodes and :class:`Transistor` parameters."""
        _check_name("transistor", name)
        if not isinstance(device, Transistor):
            raise InvalidValueError(f"{name}: device must be an ampplan.Transistor, got {type(device).__name__}")
        self._add(Bjt(name, _check_node(name, "collector", collector), _check_node(name, "base", base),
                      _check_node(name, "emitter", emitter), device))

    def add(self, element: Element) -> None:
        """Add an element object (as made by the methods above, or taken from another circuit).

        It goes through the method for its kind (:meth:`resistor`, :meth:`bjt` ...), so it is
        validated exactly as they validate.
        """
        method = next((m for kind, m in _ADD_METHOD.items() if isinstance(element, kind)), None)
        if method is None:
            raise InvalidValueError(f"cannot add a {type(element).__name__} to a circuit")
        getattr(self, method)(*(getattr(element, f.name) for f in dataclasses.fields(element)))

    def remove(self, name: str) -> Element:
        """Remove and return the element ``name``."""
        element = self.element(name)
        del self._elements[name]
        self.revision += 1
        return element

    def copy(self) -> "Circuit":
        """An independent copy (elements are immutable, so a shallow copy suffices)."""
        new = Circuit()
        new._elements = dict(self._elements)
        return new

    # -- inspection ---------------------------------------------------------------------------
    @property
    def elements(self) -> tuple:
        """Every element, in the order added."""
        return tuple(self._elements.values())

    def element(self, name: str) -> Element:
        """The element called ``name`` (UnknownNameError, with a suggestion, when there is none)."""
        if not isinstance(name, str):
            raise UnknownNameError(f"an element name is text, got {shown(name)}")
        try:
            return self._elements[name]
        except KeyError:
            raise UnknownNameError(f"the circuit has no element named {name!r}"
                                   + did_you_mean(name, self._elements)) from None

    def of_kind(self, kind: type) -> list:
        """Elements of one class (``Resistor``, ``Bjt`` ...), in the order added."""
        if not (isinstance(kind, type) or (isinstance(kind, tuple) and all(isinstance(k, type) for k in kind))):
            raise InvalidValueError(f"of_kind expects an element class such as Resistor, got {shown(kind)}")
        return [e for e in self._elements.values() if isinstance(e, kind)]

    @property
    def nodes(self) -> tuple[str, ...]:
        """Every node name but ground, in order of first use (no topology check)."""
        seen: dict[str, None] = {}
        for e in self._elements.values():
            for n in terminals(e):
                if n != GROUND:
                    seen.setdefault(n, None)
        return tuple(seen)

    # -- topology -----------------------------------------------------------------------------
    def check_topology(self) -> None:
        """Refuse a circuit whose equations could have no unique answer, naming the culprit.

        Raises
        ------
        InvalidValueError
            Elements, but no node besides ground.
        VoltageSourceLoopError
            Voltage sources close a loop (their currents would be undetermined).
        FloatingNodeError
            A node has no DC path to ground, or meets a single transistor terminal and nothing
            else but capacitors (a bias resistor missing).
        """
        circuit = self
        if self._elements and not self.nodes:
            # No unknowns at all (a resistor from ground to ground, say): nothing to solve, and
            # numpy's reductions over zero unknowns would fail.
            names = ", ".join(repr(e.name) for e in self.elements[:5])
            raise InvalidValueError(f"every element of the circuit ({names}) has all its terminals on 'gnd', so "
                                    "there is nothing to solve; connect them to other nodes")
        voltage_sources = self.of_kind(VoltageSource)
        capacitors = self.of_kind(Capacitor)
        nodes = self.nodes
        loops = UnionFind()
        for v in voltage_sources:
            if not loops.union(v.plus, v.minus):
                others = [w.name for w in voltage_sources if w is not v
                          and loops.find(w.plus) == loops.find(v.plus)]
                raise VoltageSourceLoopError(
                    f"voltage source {v.name!r} closes a loop of voltage sources with "
                    f"{', '.join(repr(o) for o in others)} between nodes {v.plus!r} and {v.minus!r}; "
                    "their currents would be undetermined")
        dc = UnionFind()
        dc.find(GROUND)
        for e in circuit.elements:
            if isinstance(e, (Resistor, VoltageSource)):
                a, b = terminals(e)
                dc.union(a, b)
            elif isinstance(e, Bjt):
                dc.union(e.collector, e.base)
                dc.union(e.base, e.emitter)
        ground = dc.find(GROUND)
        floating = [n for n in nodes if dc.find(n) != ground]
        # A node that meets a single transistor terminal and nothing else but capacitors has no
        # voltage of its own: the transistor's current there would have nowhere to go (a bias
        # resistor forgotten, say). Two terminals (a Darlington pair) or any source or resistor
        # do give it one.
        meets: dict[str, list] = {}
        for e in circuit.elements:
            if isinstance(e, Capacitor):
                continue
            for role, n in zip(_roles(e), terminals(e)):
                meets.setdefault(n, []).append(f"{e.name}'s {role}" if isinstance(e, Bjt) else e.name)
        for n in nodes:
            touching = meets.get(n, [])
            if len(touching) == 1 and touching[0].endswith(("'s base", "'s collector", "'s emitter")):
                caps = [e.name for e in capacitors if n in (e.a, e.b)]
                raise FloatingNodeError(
                    f"node {n!r} meets only {touching[0]}" + (f" and capacitor(s) {', '.join(caps)}" if caps else "")
                    + ": nothing sets its DC voltage (a bias resistor missing?)")
        if floating:
            where = {n: [e.name for e in circuit.elements if n in terminals(e)] for n in floating}
            first = floating[0]
            raise FloatingNodeError(
                f"node {first!r} has no DC path to ground (it meets only "
                f"{', '.join(repr(x) for x in where[first])}, and capacitors and current sources "
                "carry no DC path)" + (f"; also floating: {', '.join(floating[1:])}" if floating[1:] else ""))

    def solve(self, model: str = "constant-drop", temperature: float = 25.0, batch: dict | None = None,
              active_edge: str = "vce-sat", assume: dict | None = None, warm_start: bool = True):
        """Solve the DC operating point.

        Parameters
        ----------
        model : {"constant-drop", "ebers-moll"}
            Device model, see :func:`ampplan.solver.solve`.
        temperature : float
            Junction temperature, degrees Celsius (parameters are given at 25 °C).
        batch : dict of str -> array_like, optional
            Values to vary, each of shape (S,) (scalars broadcast): element values by element name
            (``"RC"``, ``"VCC"``) and numeric device parameters as ``"<transistor>.<parameter>"``
            (``"Q1.beta"``; not ``polarity``); ``"temperature"`` varies the temperature.
        active_edge : {"vce-sat", "vcb-zero"}
            Where forward-active ends: at V_CE = V_CE(sat) (default) or at V_CB = 0.
        assume : dict of str -> str, optional
            Constant-drop only: regions to assume and check, without search (see
            :func:`ampplan.solver.solve`).
        warm_start : bool
            Batches only: start every sample from one solved sample (fast; see
            :func:`ampplan.solver.solve` for circuits with several operating points).

        Returns
        -------
        ampplan.solver.OperatingPoint
        """
        from .solver import solve
        return solve(self, model=model, temperature=temperature, batch=batch, active_edge=active_edge,
                     assume=assume, warm_start=warm_start)

    def __repr__(self) -> str:
        counts = {}
        for e in self._elements.values():
            counts[type(e).__name__] = counts.get(type(e).__name__, 0) + 1
        body = ", ".join(f"{n} {k}" for k, n in counts.items()) or "empty"
        return f"Circuit({body})"


def did_you_mean(name: str, choices) -> str:
    close = difflib.get_close_matches(str(name), list(choices), n=3)
    return f"; did you mean {', '.join(repr(c) for c in close)}?" if close else ""


class UnionFind:
    """Disjoint sets of node names (which nodes a set of elements ties together)."""

    def __init__(self):
        self.parent: dict[str, str] = {}

    def find(self, x: str) -> str:
        self.parent.setdefault(x, x)
        while self.parent[x] != x:
            self.parent[x] = self.parent[self.parent[x]]
            x = self.parent[x]
        return x

    def union(self, x: str, y: str) -> bool:
        rx, ry = self.find(x), self.find(y)
        if rx == ry:
            return False
        self.parent[rx] = ry
        return True


def _roles(e: Element) -> tuple[str, ...]:
    return ("collector", "base", "emitter") if isinstance(e, Bjt) else ("", "")


def terminals(e: Element) -> tuple[str, ...]:
    """The nodes an element connects, in its own order (collector, base, emitter for a transistor)."""
    if isinstance(e, Bjt):
        return (e.collector, e.base, e.emitter)
    if isinstance(e, VoltageSource):
        return (e.plus, e.minus)
    if isinstance(e, CurrentSource):
        return (e.from_node, e.to_node)
    return (e.a, e.b)

"""Circuits: elements and nodes, and assembly of their linear (modified nodal) equations.

A :class:`Circuit` only describes; :meth:`Circuit.solve` hands it to :mod:`ampplan.solver`.

Unknowns, in this order (the *layout*, see :class:`Layout`):

* the voltage of every node but ``gnd``, volts, in order of first use;
* the current into the plus terminal of every voltage source, amperes;
* per transistor, its base current I_B and collector current I_C with textbook signs
  (positive in forward-active for NPN and PNP alike), amperes.

Rows are Kirchhoff's current law at every node, one constraint per voltage source, and two rows
per transistor that the device model fills in (its region's equations for the constant-drop model,
its linearised Ebers–Moll equations for Newton's method).
"""

from __future__ import annotations

import dataclasses
import difflib
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Union

import numpy as np

from .devices import ABSOLUTE_ZERO, Transistor, check_parameter
from .devices import PARAMETERS as DEVICE_PARAMETERS
from .errors import (DuplicateNameError, FloatingNodeError, InvalidValueError, UnknownNameError,
                     VoltageSourceLoopError)
from .validation import check_number, check_samples

__all__ = ["GROUND", "Circuit", "Resistor", "VoltageSource", "CurrentSource", "Capacitor", "Bjt",
           "Layout", "Parameters", "RESISTANCE_RANGE", "VALUE_BOUNDS", "UnionFind", "terminals"]

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
_VALUE_FIELD = {Resistor: "resistance", VoltageSource: "voltage", CurrentSource: "current",
                Capacitor: "capacitance"}

#: Smallest and largest resistance accepted, ohms: beyond them the equations lose their precision
#: in double arithmetic, so a short or an open should be drawn as one.
RESISTANCE_RANGE = (1e-6, 1e12)

#: Bounds and unit of each element kind's value, declared once: the element methods, batches,
#: the stage templates (through RESISTANCE_RANGE) and the plan-file schema follow them.
VALUE_BOUNDS: dict[type, dict] = {
    Resistor: dict(minimum=RESISTANCE_RANGE[0], minimum_inclusive=True, maximum=RESISTANCE_RANGE[1], unit="Ω"),
    VoltageSource: dict(unit="V"),
    CurrentSource: dict(unit="A"),
    Capacitor: dict(minimum=0.0, unit="F"),
}

# The method that adds (and validates) each element kind, by kind.
_ADD_METHOD = {Resistor: "resistor", VoltageSource: "voltage_source", CurrentSource: "current_source",
               Capacitor: "capacitor", Bjt: "bjt"}


def _check_name(kind: str, name) -> str:
    if not isinstance(name, str) or not name.strip():
        raise InvalidValueError(f"{kind} name must be a non-empty string, got {name!r}")
    if "." in name:
        raise InvalidValueError(f"{kind} name {name!r} must not contain '.' (it separates parameters)")
    return name


def _check_node(element: str, terminal: str, node) -> str:
    if not isinstance(node, str) or not node.strip():
        raise InvalidValueError(f"{element}: {terminal} node must be a non-empty string, got {node!r}")
    return node


def _value(kind: type, element: str, value, optional: bool = False) -> float | None:
    """An element's value checked against its kind's VALUE_BOUNDS (``"R1: resistance must be ..."``)."""
    return check_number(value, f"{element}: {_VALUE_FIELD[kind]}", optional=optional, **VALUE_BOUNDS[kind])


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
        self._layout: Layout | None = None

    # -- description --------------------------------------------------------------------------
    def _add(self, element: Element) -> None:
        if element.name in self._elements:
            raise DuplicateNameError(f"an element named {element.name!r} already exists in the circuit")
        self._elements[element.name] = element
        self._layout = None

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
        self._layout = None
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
        try:
            return self._elements[name]
        except KeyError:
            raise UnknownNameError(f"the circuit has no element named {name!r}"
                                   + _did_you_mean(name, self._elements)) from None

    def of_kind(self, kind: type) -> list:
        """Elements of one class (``Resistor``, ``Bjt`` ...), in the order added."""
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

    def layout(self) -> "Layout":
        """The compiled layout of unknowns and index arrays (cached until the circuit changes)."""
        if self._layout is None:
            self._layout = Layout(self)
        return self._layout

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


def _did_you_mean(name: str, choices) -> str:
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


@dataclass(frozen=True)
class Parameters:
    """Numeric values of a circuit for S samples (the batch axis leads).

    Attributes
    ----------
    conductance : ndarray, shape (S, n_resistors)
        1/R per resistor, siemens.
    voltage : ndarray, shape (S, n_voltage_sources)
    current : ndarray, shape (S, n_current_sources)
    device : dict of str -> ndarray of shape (S, n_transistors)
        Every numeric transistor parameter, at 25 °C.
    temperature : ndarray, shape (S,)
        Degrees Celsius.
    """
    conductance: np.ndarray
    voltage: np.ndarray
    current: np.ndarray
    device: dict
    temperature: np.ndarray

    @property
    def size(self) -> int:
        return self.temperature.shape[0]


class Layout:
    """Index arrays of one circuit's unknowns and rows, and assembly of its linear equations.

    Built by :meth:`Circuit.layout`; checks the topology on construction (every node has a DC path
    to ground, no loop of voltage sources).
    """

    def __init__(self, circuit: Circuit):
        self.resistors = circuit.of_kind(Resistor)
        self.voltage_sources = circuit.of_kind(VoltageSource)
        self.current_sources = circuit.of_kind(CurrentSource)
        self.capacitors = circuit.of_kind(Capacitor)
        self.bjts = circuit.of_kind(Bjt)
        self.nodes: tuple[str, ...] = circuit.nodes
        self.n_nodes = len(self.nodes)
        self.n_vs = len(self.voltage_sources)
        self.n_bjt = len(self.bjts)
        self.size = self.n_nodes + self.n_vs + 2 * self.n_bjt
        # Ground maps to index `size`, one past the end: stamps land in a spare row and column that
        # are dropped before solving, which spares a branch per terminal.
        index = {n: i for i, n in enumerate(self.nodes)}
        index[GROUND] = self.size
        self.index = index
        self._check_topology(circuit)

        ix = lambda names: np.array([index[n] for n in names], dtype=np.intp)  # noqa: E731
        self.r_a = ix([r.a for r in self.resistors])
        self.r_b = ix([r.b for r in self.resistors])
        self.vs_plus = ix([v.plus for v in self.voltage_sources])
        self.vs_minus = ix([v.minus for v in self.voltage_sources])
        self.vs_row = self.n_nodes + np.arange(self.n_vs, dtype=np.intp)
        self.cs_from = ix([s.from_node for s in self.current_sources])
        self.cs_to = ix([s.to_node for s in self.current_sources])
        self.q_c = ix([q.collector for q in self.bjts])
        self.q_b = ix([q.base for q in self.bjts])
        self.q_e = ix([q.emitter for q in self.bjts])
        self.q_ib = self.n_nodes + self.n_vs + 2 * np.arange(self.n_bjt, dtype=np.intp)
        self.q_ic = self.q_ib + 1
        self.sign = np.array([q.device.sign for q in self.bjts], dtype=float)
        self.structure = self._structure()
        self._pattern_cache: dict = {}
        self._parameter_cache: dict = {}

    # -- topology -----------------------------------------------------------------------------
    def _check_topology(self, circuit: Circuit) -> None:
        loops = UnionFind()
        for v in self.voltage_sources:
            if not loops.union(v.plus, v.minus):
                others = [w.name for w in self.voltage_sources if w is not v
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
        floating = [n for n in self.nodes if dc.find(n) != ground]
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
        for n in self.nodes:
            touching = meets.get(n, [])
            if len(touching) == 1 and touching[0].endswith(("'s base", "'s collector", "'s emitter")):
                caps = [e.name for e in self.capacitors if n in (e.a, e.b)]
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

    # -- assembly -----------------------------------------------------------------------------
    def _structure(self) -> np.ndarray:
        """The parameter-free entries: voltage-source incidence and transistor terminal currents."""
        n = self.size + 1
        a = np.zeros((n, n))
        a[self.vs_plus, self.vs_row] += 1.0   # source current leaves its plus node into the source
        a[self.vs_minus, self.vs_row] -= 1.0
        a[self.vs_row, self.vs_plus] += 1.0   # V(plus) - V(minus) = voltage
        a[self.vs_row, self.vs_minus] -= 1.0
        # Textbook currents: I_B into the base and I_C into the collector (NPN), I_E = I_B + I_C out
        # of the emitter; a PNP reverses all three, hence the sign.
        s = self.sign
        np.add.at(a, (self.q_b, self.q_ib), s)
        np.add.at(a, (self.q_c, self.q_ic), s)
        np.add.at(a, (self.q_e, self.q_ib), -s)
        np.add.at(a, (self.q_e, self.q_ic), -s)
        return a

    def assemble(self, params: Parameters, source_scale=1.0, ladder_conductance=0.0, reduced: bool = False):
        """Linear part of the equations for every sample.

        Parameters
        ----------
        params : Parameters
            S samples of element values.
        source_scale : float or ndarray of shape (S,)
            Multiplies every independent source (source stepping).
        ladder_conductance : float or ndarray of shape (S,)
            Conductance from every node to ground, siemens (the conductance ladder).
        reduced : bool
            Leave out the transistor-current unknowns and their rows (for a device model that
            stamps its currents straight into the node rows).

        Returns
        -------
        matrix : ndarray, shape (S, m + 1, m + 1)
            m = ``size`` (or ``n_nodes + n_vs`` reduced). The transistor rows are left empty for the
            device model; the last row and column belong to ground and are dropped before solving.
        rhs : ndarray, shape (S, m + 1)
        """
        structure, resistors, volts, amps = self._patterns(reduced)
        s_count = params.size
        n = structure.shape[0]
        # Every stamp for every sample at once: values (S, elements) times stamp patterns
        # (elements, n·n) replace loops over elements and samples.
        matrix = (params.conductance @ resistors).reshape(s_count, n, n)
        matrix += structure
        if np.any(ladder_conductance):
            diag = np.arange(self.n_nodes)
            matrix[:, diag, diag] += np.reshape(ladder_conductance, (-1, 1))
        scale = np.reshape(np.asarray(source_scale, dtype=float), (-1, 1))
        rhs = (params.voltage * scale) @ volts + (params.current * scale) @ amps
        return matrix, rhs

    def _patterns(self, reduced: bool):
        """Stamp patterns over the kept unknowns (cached): structure, resistors, V and I sources."""
        if reduced not in self._pattern_cache:
            n_full = self.size + 1
            keep = (np.concatenate([np.arange(self.n_nodes + self.n_vs), [self.size]]) if reduced
                    else np.arange(n_full))
            n = keep.size
            resistors = np.zeros((len(self.resistors), n_full, n_full))
            for k, (a, b) in enumerate(zip(self.r_a, self.r_b)):
                resistors[k, a, a] += 1.0
                resistors[k, b, b] += 1.0
                resistors[k, a, b] -= 1.0
                resistors[k, b, a] -= 1.0
            volts = np.zeros((self.n_vs, n_full))
            volts[np.arange(self.n_vs), self.vs_row] = 1.0
            amps = np.zeros((len(self.current_sources), n_full))
            for k, (f, t) in enumerate(zip(self.cs_from, self.cs_to)):
                amps[k, f] -= 1.0
                amps[k, t] += 1.0
            self._pattern_cache[reduced] = (
                self.structure[np.ix_(keep, keep)],
                resistors[:, keep][:, :, keep].reshape(len(self.resistors), n * n),
                volts[:, keep], amps[:, keep])
        return self._pattern_cache[reduced]

    # -- parameters ---------------------------------------------------------------------------
    def parameters(self, temperature=25.0, batch: dict | None = None) -> Parameters:
        """Element and device values for S samples, with ``batch`` overriding the circuit's own.

        Parameters
        ----------
        temperature : float
            Degrees Celsius, one value (the batch key ``"temperature"`` varies it per sample).
        batch : dict of str -> array_like of shape (S,), optional
            Keys and values as for :meth:`Circuit.solve`; scalars broadcast.

        Returns
        -------
        Parameters
            A transistor parameter given as None is NaN, but for ``vbc_on``: None there means
            "same as vbe_on" and takes ``vbe_on``'s values, after the batch's overrides (a batch
            of ``"Q1.vbe_on"`` moves it too, unless the batch sets ``"Q1.vbc_on"`` as well).

        Raises
        ------
        InvalidValueError
            A batch that is not a dict, a key that is not text, a parameter a batch cannot vary
            (``polarity``), arrays of different lengths, or a bad value (naming the key and the
            index of the first bad sample); a bad ``temperature``.
        UnknownNameError
            A batch key that names no element or transistor parameter.
        """
        temperature = check_number(temperature, "temperature", minimum=ABSOLUTE_ZERO, unit="°C")
        if batch is not None and not isinstance(batch, Mapping):
            raise InvalidValueError(f"batch must be a dict of name -> values, got {type(batch).__name__}")
        if not batch:
            # A single solve of an unchanged circuit reuses its parameters (they are never mutated).
            cached = self._parameter_cache.get(temperature)
            if cached is None:
                cached = self._parameter_cache[temperature] = self._parameters(temperature, {})
            return cached
        return self._parameters(temperature, batch)

    def _batch_targets(self, batch: Mapping) -> dict:
        """What each batch key varies: ``"temperature"``, an element, or ``(transistor index, parameter)``.

        Every key is checked here, before any value is read.
        """
        by_name = {e.name: e for group in (self.resistors, self.voltage_sources, self.current_sources,
                                           self.capacitors) for e in group}
        q_index = {q.name: j for j, q in enumerate(self.bjts)}
        targets = {}
        for key in batch:
            if not isinstance(key, str):
                raise InvalidValueError(f"batch keys must be names (text), got {key!r}")
            if key == "temperature":
                targets[key] = key
            elif "." in key:
                qname, _, pname = key.partition(".")
                if qname not in q_index:
                    raise UnknownNameError(f"batch key {key!r}: the circuit has no transistor named {qname!r}"
                                           + _did_you_mean(qname, q_index))
                if pname == "polarity":
                    raise InvalidValueError(f"batch key {key!r}: polarity cannot vary in a batch (it sets the "
                                            "orientation of the equations); solve each polarity on its own")
                if pname not in DEVICE_PARAMETERS:
                    raise UnknownNameError(f"batch key {key!r}: transistors have no parameter {pname!r}"
                                           + _did_you_mean(pname, DEVICE_PARAMETERS))
                targets[key] = (q_index[qname], pname)
            elif key in by_name:
                targets[key] = by_name[key]
            else:
                raise UnknownNameError(f"batch key {key!r} names no resistor, source or capacitor"
                                       + _did_you_mean(key, by_name))
        return targets

    def _parameters(self, temperature: float, batch: Mapping) -> Parameters:
        targets = self._batch_targets(batch)
        arrays: dict[str, np.ndarray] = {}
        for key, value in batch.items():
            target = targets[key]
            if target == "temperature":
                arrays[key] = check_samples(value, f"batch[{key!r}]:", minimum=ABSOLUTE_ZERO, unit="°C")
            elif isinstance(target, tuple):
                arrays[key] = check_parameter(target[1], value, where=f"batch[{key!r}]:", samples=True)
            else:
                kind = type(target)
                arrays[key] = check_samples(value, f"batch[{key!r}]: {_VALUE_FIELD[kind]}", **VALUE_BOUNDS[kind])
        sizes = {k: a.shape[0] for k, a in arrays.items() if a.ndim == 1}
        if len(set(sizes.values())) > 1:
            raise InvalidValueError("batch arrays differ in length: "
                                    + ", ".join(f"{k}: {n}" for k, n in sizes.items()))
        s_count = next(iter(sizes.values()), 1)
        if s_count == 0:
            raise InvalidValueError("batch arrays are empty")
        full = lambda arr: np.broadcast_to(arr, (s_count,)).copy()  # noqa: E731
        temp = full(arrays["temperature"]) if "temperature" in arrays else np.full(s_count, temperature)
        overrides = {key: full(arr) for key, arr in arrays.items() if not isinstance(targets[key], (str, tuple))}
        device_overrides = {targets[key]: full(arr) for key, arr in arrays.items() if isinstance(targets[key], tuple)}

        def column(elements, field, transform=lambda x: x):
            out = np.empty((s_count, len(elements)))
            for k, e in enumerate(elements):
                out[:, k] = transform(overrides[e.name]) if e.name in overrides else transform(getattr(e, field))
            return out

        device = {}
        for pname in DEVICE_PARAMETERS:
            col = np.empty((s_count, self.n_bjt))
            for j, q in enumerate(self.bjts):
                v = getattr(q.device, pname)
                col[:, j] = device_overrides.get((j, pname), np.nan if v is None else v)
            device[pname] = col
        # vbc_on None means "same as vbe_on"; resolved here, after the batch's overrides of either.
        device["vbc_on"] = np.where(np.isnan(device["vbc_on"]), device["vbe_on"], device["vbc_on"])
        return Parameters(
            conductance=column(self.resistors, "resistance", lambda r: 1.0 / np.asarray(r, dtype=float)),
            voltage=column(self.voltage_sources, "voltage"),
            current=column(self.current_sources, "current"),
            device=device,
            temperature=temp,
        )


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

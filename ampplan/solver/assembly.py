"""Assembly of a circuit's linear (modified nodal) equations, for S samples at once.

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

import weakref
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from ..circuit import (GROUND, VALUE_BOUNDS, VALUE_FIELD, Bjt, Capacitor, Circuit, CurrentSource, Resistor,
                       VoltageSource, did_you_mean)
from ..devices import check_parameter, check_temperature, scaled_to_temperature
from ..devices import PARAMETERS as DEVICE_PARAMETERS
from ..errors import InvalidValueError, UnknownNameError
from ..validation import check_number, check_samples

__all__ = ["Layout", "Parameters", "Scatter", "layout_of", "take_samples"]

_LAYOUTS: "weakref.WeakKeyDictionary[Circuit, tuple[int, Layout]]" = weakref.WeakKeyDictionary()


def layout_of(circuit: Circuit) -> "Layout":
    """The compiled layout of ``circuit`` (cached until the circuit changes; checks its topology)."""
    cached = _LAYOUTS.get(circuit)
    if cached is None or cached[0] != circuit.revision:
        cached = _LAYOUTS[circuit] = (circuit.revision, Layout(circuit))
    return cached[1]


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
        Degrees Celsius, within :data:`ampplan.devices.TEMPERATURE_RANGE`.
    at_temperature : dict of str -> ndarray of shape (S, n_transistors)
        ``device`` moved to ``temperature`` by :func:`ampplan.devices.scaled_to_temperature`
        (computed once here, read by both device models).
    """
    conductance: np.ndarray
    voltage: np.ndarray
    current: np.ndarray
    device: dict
    temperature: np.ndarray
    at_temperature: dict

    @property
    def size(self) -> int:
        return self.temperature.shape[0]


class Layout:
    """Index arrays of one circuit's unknowns and rows, and assembly of its linear equations.

    Built by :func:`layout_of`; checks the topology on construction (every node has a DC path
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
        circuit.check_topology()

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
        #: Per transistor, the unknowns its device rows touch: V_B, V_C, V_E, I_B, I_C (N, 5).
        self.ports = np.stack([self.q_b, self.q_c, self.q_e, self.q_ib, self.q_ic], axis=1)
        #: The same with each transistor's sign, as plain lists (sign, [b, c, e, ib, ic]), for the
        #: plain-float checks of single solves.
        self.port_lists = list(zip(self.sign.tolist(), self.ports.tolist()))
        self.structure = self._structure()
        self._pattern_cache: dict = {}
        self._parameter_cache: dict = {}
        self._assembly_cache: dict = {}
        self._entry_cache: dict = {}
        #: Stamped constant-drop systems of single solves, by parameters, edge, sample and assignment.
        self.stamped: dict = {}
        #: Planned sparse eliminations of the constant-drop systems, by region assignment.
        self.region_plans: dict = {}

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
        # Every stamp for every sample at once, summed into place by index. No matrix product: a
        # product of (S, elements) values by (elements, n·n) patterns would wake the BLAS library's
        # threads (which fight the solver for the cores) and hold an elements × n² pattern array.
        matrix = np.empty((s_count, n * n))
        matrix[:] = structure.reshape(1, n * n)
        resistors(params.conductance, out=matrix)
        matrix = matrix.reshape(s_count, n, n)
        if np.any(ladder_conductance):
            diag = np.arange(self.n_nodes)
            matrix[:, diag, diag] += np.reshape(ladder_conductance, (-1, 1))
        scale = np.reshape(np.asarray(source_scale, dtype=float), (-1, 1))
        rhs = np.zeros((s_count, n))
        volts(params.voltage * scale, out=rhs)
        amps(params.current * scale, out=rhs)
        return matrix, rhs

    def entries(self, params: Parameters, positions: np.ndarray, reduced: bool = False, source_scale=1.0,
                ladder_conductance=0.0, rows=None):
        """Chosen entries of :meth:`assemble`'s matrix and its right-hand side, with the samples last
        and without ground's row and column, built without the dense matrices.

        Parameters
        ----------
        params, reduced, source_scale, ladder_conductance
            As for :meth:`assemble` (``source_scale`` and ``ladder_conductance`` scalars here).
        positions : ndarray of int, shape (P,)
            Flat positions ``row·m + column`` in the m×m matrix (m = ``size``, or
            ``n_nodes + n_vs`` reduced); they must hold every position a resistor stamp (and the
            conductance ladder, when used) touches.
        rows : ndarray of int, optional
            Only these samples of ``params`` (S = their count).

        Returns
        -------
        values : ndarray, shape (P, S)
        rhs : ndarray, shape (m, S)
        """
        key = (reduced, positions.tobytes())
        plan = self._entry_cache.get(key)
        if plan is None:
            structure, _, volts, amps = self._patterns(reduced)
            n = structure.shape[0]
            m = n - 1
            slot = np.full(n * n, -1, dtype=np.intp)
            at_row, at_col = positions // m, positions % m
            slot[at_row * n + at_col] = np.arange(positions.size)
            n_full = self.size + 1
            keep = (np.concatenate([np.arange(self.n_nodes + self.n_vs), [self.size]]) if reduced
                    else np.arange(n_full))
            at = np.full(n_full, -1, dtype=np.intp)
            at[keep] = np.arange(n)
            r_a, r_b = at[self.r_a], at[self.r_b]
            n_r = len(self.resistors)
            flat = np.concatenate([r_a * n + r_a, r_b * n + r_b, r_a * n + r_b, r_b * n + r_a])
            inside = np.concatenate([r_a < m, r_b < m, (r_a < m) & (r_b < m), (r_a < m) & (r_b < m)])
            if np.any(slot[flat[inside]] < 0):
                raise ValueError("the positions leave out an entry a resistor stamps")
            resistors = Scatter(slot[flat[inside]], np.tile(np.arange(n_r), 4)[inside],
                                np.repeat([1.0, 1.0, -1.0, -1.0], n_r)[inside])
            nodes = np.arange(self.n_nodes)
            diagonal = slot[nodes * n + nodes]
            plan = self._entry_cache[key] = (structure.ravel()[at_row * n + at_col], resistors, diagonal, volts, amps,
                                             n)
        base, resistors, diagonal, volts, amps, n = plan
        pick = (lambda a: a) if rows is None else (lambda a: a[rows])  # noqa: E731
        # Samples last and contiguous, so that each pass gathers whole rows.
        values = resistors.new_last(np.ascontiguousarray(pick(params.conductance).T), base)
        if np.any(ladder_conductance):
            if np.any(diagonal < 0):
                raise ValueError("the positions leave out a node's diagonal, which the conductance ladder needs")
            values[diagonal] += ladder_conductance
        rhs = volts.new_last((pick(params.voltage) * source_scale).T, np.zeros(n))
        amps.last((pick(params.current) * source_scale).T, rhs)
        return values, rhs[:n - 1]

    def assembled(self, params: Parameters):
        """:meth:`assemble` of ``params`` (read-only arrays), kept when ``params`` is one of the
        layout's own single-sample parameter sets, so that repeated single solves of an unchanged
        circuit assemble it once."""
        cached = self._assembly_cache.get(id(params))
        if cached is not None and cached[0] is params:
            return cached[1], cached[2]
        matrix, rhs = self.assemble(params)
        if any(params is p for p in self._parameter_cache.values()):
            matrix.flags.writeable = False
            rhs.flags.writeable = False
            self._assembly_cache[id(params)] = (params, matrix, rhs)
        return matrix, rhs

    def _patterns(self, reduced: bool):
        """Stamp patterns over the kept unknowns (cached): the structure, and scatters of the
        resistor conductances, source voltages and source currents into place."""
        if reduced not in self._pattern_cache:
            n_full = self.size + 1
            keep = (np.concatenate([np.arange(self.n_nodes + self.n_vs), [self.size]]) if reduced
                    else np.arange(n_full))
            n = keep.size
            at = np.full(n_full, -1, dtype=np.intp)
            at[keep] = np.arange(n)          # full index -> kept index
            r_a, r_b = at[self.r_a], at[self.r_b]
            n_r = len(self.resistors)
            # Conductance k lands at (a, a) and (b, b) with +1, at (a, b) and (b, a) with -1.
            resistors = Scatter(np.concatenate([r_a * n + r_a, r_b * n + r_b, r_a * n + r_b, r_b * n + r_a]),
                                np.tile(np.arange(n_r), 4), np.repeat([1.0, 1.0, -1.0, -1.0], n_r))
            volts = Scatter(at[self.vs_row], np.arange(self.n_vs), np.ones(self.n_vs))
            n_i = len(self.current_sources)
            # A current source moves -I to its from node's right-hand side and +I to its to node's.
            amps = Scatter(np.concatenate([at[self.cs_from], at[self.cs_to]]), np.tile(np.arange(n_i), 2),
                           np.repeat([-1.0, 1.0], n_i))
            self._pattern_cache[reduced] = (self.structure[np.ix_(keep, keep)], resistors, volts, amps)
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
            index of the first bad sample); a ``temperature`` outside
            :data:`ampplan.devices.TEMPERATURE_RANGE`; a transistor whose constant-drop
            on-voltage (``vbe_on`` or ``vbc_on``) is not positive at its temperature (naming the
            transistor, the temperature and the sample).
        UnknownNameError
            A batch key that names no element or transistor parameter.
        """
        if batch is None and type(temperature) is float:
            # A single solve at a temperature already validated and kept: nothing to check again.
            cached = self._parameter_cache.get(temperature)
            if cached is not None:
                return cached
        temperature = check_temperature(temperature)
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
                                           + did_you_mean(qname, q_index))
                if pname == "polarity":
                    raise InvalidValueError(f"batch key {key!r}: polarity cannot vary in a batch (it sets the "
                                            "orientation of the equations); solve each polarity on its own")
                if pname not in DEVICE_PARAMETERS:
                    raise UnknownNameError(f"batch key {key!r}: transistors have no parameter {pname!r}"
                                           + did_you_mean(pname, DEVICE_PARAMETERS))
                targets[key] = (q_index[qname], pname)
            elif key in by_name:
                targets[key] = by_name[key]
            else:
                raise UnknownNameError(f"batch key {key!r} names no resistor, source or capacitor"
                                       + did_you_mean(key, by_name))
        return targets

    def _parameters(self, temperature: float, batch: Mapping) -> Parameters:
        targets = self._batch_targets(batch)
        arrays: dict[str, np.ndarray] = {}
        for key, value in batch.items():
            target = targets[key]
            if target == "temperature":
                arrays[key] = check_temperature(value, f"batch[{key!r}]:", samples=True)
            elif isinstance(target, tuple):
                arrays[key] = check_parameter(target[1], value, where=f"batch[{key!r}]:", samples=True)
            else:
                kind = type(target)
                arrays[key] = check_samples(value, f"batch[{key!r}]: {VALUE_FIELD[kind]}", **VALUE_BOUNDS[kind])
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
        at_temperature = scaled_to_temperature(device, temp[:, None])
        self._check_on_voltages(device, at_temperature, temp, single=not sizes)
        return Parameters(
            conductance=column(self.resistors, "resistance", lambda r: 1.0 / np.asarray(r, dtype=float)),
            voltage=column(self.voltage_sources, "voltage"),
            current=column(self.current_sources, "current"),
            device=device,
            temperature=temp,
            at_temperature=at_temperature,
        )

    def _check_on_voltages(self, device: dict, at_temperature: dict, temperature: np.ndarray, single: bool) -> None:
        """Refuse a transistor whose constant-drop on-voltage is not positive at its temperature.

        V_BE(on) moves by ``vbe_temperature_coefficient`` per kelvin; a device and temperature
        that take it to zero or below would make a junction "conduct" at a reverse voltage.
        """
        for pname, label in (("vbe_on", "V_BE(on)"), ("vbc_on", "V_BC(on)")):
            bad = at_temperature[pname] <= 0.0
            if not bad.any():
                continue
            k, j = (int(i) for i in np.argwhere(bad)[0])
            q = self.bjts[j]
            at = "" if single else f" (sample {k})"
            raise InvalidValueError(
                f"transistor {q.name}: {label} at {temperature[k]:g} °C would be "
                f"{at_temperature[pname][k, j]:.4g} V{at}, from {pname} = {device[pname][k, j]:g} V at 25 °C "
                f"moving {device['vbe_temperature_coefficient'][k, j]:g} V/K; an on-voltage must stay positive: "
                "raise it, or bring the temperature coefficient or the temperature back")


class Scatter:
    """Adds weighted columns of a value array into fixed positions of another, for S samples.

    Term t adds ``values[source[t]] * weight[t]`` at ``position[t]``; positions may repeat (their
    terms add up). The terms are sorted into passes in which every position occurs at most once,
    so each pass is one gather, one product and one indexed add over all samples, and no matrix
    product (so no BLAS threads). Each sample's sums are formed from its own values only, so a
    sample's figures never depend on its batch.

    Parameters
    ----------
    position : array_like of int, shape (T,)
        Position in ``out`` of each term.
    source : array_like of int, shape (T,)
        Index in ``values`` each term reads.
    weight : array_like of float, shape (T,)
    """

    def __init__(self, position, source, weight):
        position = np.asarray(position, dtype=np.intp)
        source = np.asarray(source, dtype=np.intp)
        weight = np.asarray(weight, dtype=float)
        order = np.argsort(position, kind="stable")
        position, source, weight = position[order], source[order], weight[order]
        starts = np.flatnonzero(np.r_[True, position[1:] != position[:-1]]) if position.size else position
        rank = np.arange(position.size) - np.repeat(starts, np.diff(np.r_[starts, position.size]))
        self.passes = [(position[rank == k], source[rank == k], weight[rank == k])
                       for k in range(int(rank.max(initial=-1)) + 1)]
        self.targets = position[starts] if position.size else position
        self._untouched = None

    def __call__(self, values: np.ndarray, out: np.ndarray) -> np.ndarray:
        """Add the terms of ``values`` (S, K) into ``out`` (S, size), in place (samples first)."""
        for position, source, weight in self.passes:
            out[:, position] += values[:, source] * weight
        return out

    def last(self, values: np.ndarray, out: np.ndarray) -> np.ndarray:
        """The same with the samples last: ``values`` (K, S) into ``out`` (size, S), in place."""
        for position, source, weight in self.passes:
            out[position] += values.take(source, axis=0) * weight[:, None]
        return out

    def new_last(self, values: np.ndarray, base: np.ndarray) -> np.ndarray:
        """``base`` (size,) plus the terms of ``values`` (K, S), as a new (size, S) array (samples
        last): the first pass writes its positions outright, the rest of ``base`` is copied."""
        out = np.empty((base.size, values.shape[1]))
        if not self.passes:
            out[:] = base[:, None]
            return out
        position, source, weight = self.passes[0]
        if self._untouched is None or self._untouched[0] != base.size:
            self._untouched = (base.size, np.setdiff1d(np.arange(base.size), position))
        rest = self._untouched[1]
        out[rest] = base[rest, None]
        # ndarray.take gathers whole rows with less overhead than fancy indexing (the same values).
        out[position] = values.take(source, axis=0) * weight[:, None] + base[position, None]
        for position, source, weight in self.passes[1:]:
            out[position] += values.take(source, axis=0) * weight[:, None]
        return out


def take_samples(params, rows, device: bool = True):
    """Samples ``rows`` of ``params`` (without device parameters when ``device`` is False)."""
    return Parameters(conductance=params.conductance[rows], voltage=params.voltage[rows],
                      current=params.current[rows],
                      device={k: v[rows] for k, v in params.device.items()} if device else {},
                      temperature=params.temperature[rows],
                      at_temperature={k: v[rows] for k, v in params.at_temperature.items()} if device else {})

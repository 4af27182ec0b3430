"""Result types of the region solver: one OperatingPoint per solve, single or batched."""

from __future__ import annotations

import html
import math
import operator
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Literal, TypeAlias, Union, get_args

import numpy as np

from ..errors import InvalidValueError
from ..units import format_call, wrap_items

__all__ = ["Region", "REGIONS", "Status", "STATUSES", "Figure", "Text", "Flag", "Check", "TransistorResult",
           "OperatingPoint", "Alternatives"]

#: A number of a single solve (float), or of a batch: one per sample, ndarray of shape (S,).
Figure: TypeAlias = Union[float, np.ndarray]
#: A word of a single solve (str), or of a batch: ndarray of str, shape (S,).
Text: TypeAlias = Union[str, np.ndarray]
#: A truth of a single solve (bool), or of a batch: ndarray of bool, shape (S,).
Flag: TypeAlias = Union[bool, np.ndarray]

Region = Literal["cutoff", "forward-active", "saturation", "reverse-active"]
#: Region names, indexed by the integer codes the solver uses internally.
REGIONS: tuple[str, ...] = get_args(Region)
#: Region given to a batch sample that has no solution.
UNSOLVED = "unsolved"

#: Outcome of one solve (or of one batch sample):
#:
#: * ``"ok"``: a solution whose region checks all hold;
#: * ``"no-consistent-region"``: the constant-drop search found no region assignment that holds;
#: * ``"no-convergence"``: Newton's method (Ebers–Moll) did not converge, fallbacks included;
#: * ``"assumption-fails"``: the regions were imposed (``assume=``) and a check fails at the
#:   solution; the numbers are still reported;
#: * ``"singular"``: the equations of the imposed regions have no unique solution (fields NaN).
Status = Literal["ok", "no-consistent-region", "no-convergence", "assumption-fails", "singular"]
#: Every status, in the order of :data:`Status`.
STATUSES: tuple[str, ...] = get_args(Status)


def _fmt(x, unit: str = "") -> str:
    """Engineering form of a scalar for reprs and tables, or a summary of an array.

    SI prefixes through :func:`ampplan.units.format_quantity`; None and NaN print as ``"—"``,
    infinities as ``"∞"`` with the unit. An array prints as ``[min … max]`` over its non-NaN
    values; an array of str as ``value×count`` pairs.
    """
    from ..units import format_quantity
    if isinstance(x, str):
        return x
    if x is None:
        return "—"
    if np.ndim(x) == 0:
        return format_quantity(float(x), unit)
    arr = np.asarray(x)
    if arr.dtype.kind in "US":
        values, counts = np.unique(arr, return_counts=True)
        return ", ".join(f"{v}×{c}" for v, c in zip(values, counts))
    arr = arr.astype(float)
    if arr.size == 0 or np.all(np.isnan(arr)):  # np.nanmin would warn on an all-NaN batch
        return "—"
    return f"[{_fmt(np.nanmin(arr), unit)} … {_fmt(np.nanmax(arr), unit)}]"


def _unit_of(name) -> str:
    """Unit of a check's quantity from its name: amperes for ``I_…``, volts for ``V_…``.

    In a batch (``name`` an array) the unit is the one all samples share, else ``""``.
    """
    initials = {str(n)[:1] for n in np.ravel(np.asarray(name))}
    return {"I": "A", "V": "V"}.get(initials.pop(), "") if len(initials) == 1 else ""


_CHECK_HEAD = ("<thead><tr><th>condition</th><th>holds</th><th>margin</th><th>value</th><th>limit</th>"
               "</tr></thead>")


def _holds_text(holds) -> str:
    """``"holds"`` / ``"FAILS"`` for one check, ``"holds in k of S"`` over a batch."""
    if np.ndim(holds) == 0:
        return "holds" if bool(holds) else "FAILS"
    arr = np.asarray(holds, dtype=bool)
    return f"holds in {int(arr.sum())} of {arr.size}"


@dataclass(frozen=True)
class Check:
    """One condition of a transistor's region, as tested at the solution.

    In a single solve every field is a scalar; in a batch each is an ndarray of shape (S,), one
    entry per sample (the annotations :data:`Text`, :data:`Figure` and :data:`Flag` say so).

    Attributes
    ----------
    name : str, or ndarray of str (S,) in a batch
        The condition, e.g. ``"V_CE >= V_CE(sat)"`` (``"V_EC >= V_EC(sat)"`` for a PNP). In a batch
        it may differ between samples (their regions differ); ``""`` for a failed sample. A name
        every sample shares is a read-only broadcast view of one word.
    value : float, or ndarray (S,) in a batch
        The quantity tested, volts or amperes.
    limit : float, or ndarray (S,) in a batch
        The bound it is tested against, same unit.
    holds : bool, or ndarray of bool (S,) in a batch
    margin : float, or ndarray (S,) in a batch
        Room left, same unit: positive when the condition holds, negative when it fails.
    """
    name: Text
    value: Figure
    limit: Figure
    holds: Flag
    margin: Figure

    @property
    def unit(self) -> str:
        """``"V"`` or ``"A"``, read from the name (``""`` when a batch mixes them)."""
        return _unit_of(self.name)

    def __repr__(self) -> str:
        u = self.unit
        return (f"Check({_fmt(self.name)} {_holds_text(self.holds)}, margin {_fmt(self.margin, u)}: "
                f"value {_fmt(self.value, u)}, limit {_fmt(self.limit, u)})")

    def _repr_html_(self) -> str:
        return f"<table>{_CHECK_HEAD}<tbody>{self._html_row()}</tbody></table>"

    def _html_row(self) -> str:
        e, u = html.escape, self.unit
        cells = (_fmt(self.name), _holds_text(self.holds), _fmt(self.margin, u), _fmt(self.value, u),
                 _fmt(self.limit, u))
        return "<tr>" + "".join(f"<td>{e(c)}</td>" for c in cells) + "</tr>"

    def to_dict(self) -> dict:
        """Plain, JSON-ready dict (arrays become lists; NaN and infinities become None)."""
        return _json_safe({k: _plain(getattr(self, k)) for k in ("name", "value", "limit", "holds", "margin")})


@dataclass(frozen=True)
class TransistorResult:
    """One transistor at the operating point.

    Currents carry textbook signs, positive in forward-active for NPN and PNP alike (NPN: into the
    collector, into the base, out of the emitter; PNP the reverse). Voltages are signed node
    differences. In a batch every numeric field is an ndarray of shape (S,) and ``region`` an
    array of str.

    Attributes
    ----------
    name, polarity : str
    region : str, or ndarray of str (S,) in a batch
        One of :data:`REGIONS`; ``"unsolved"`` for a failed batch sample. A region every sample
        shares is a read-only broadcast view of one word.
    ic, ib, ie : float, or ndarray (S,) in a batch
        Collector, base and emitter current, amperes; ``ie == ic + ib``.
    vbe, vce : float, or ndarray (S,) in a batch
        V(B) - V(E) and V(C) - V(E), volts.
    beta_forced : float, or ndarray (S,) in a batch
        ic / ib, NaN when ib == 0.
    power : float, or ndarray (S,) in a batch
        Power the transistor dissipates, V_CE·I_C + V_BE·I_B, watts.
    checks : tuple of two Check
        The conditions of its region with their margins (arrays in a batch, as the fields above).
    """
    name: str
    polarity: str
    region: Text
    ic: Figure
    ib: Figure
    ie: Figure
    vbe: Figure
    vce: Figure
    beta_forced: Figure
    power: Figure
    checks: tuple[Check, ...] = ()

    @property
    def vcb(self):
        """V(C) - V(B), volts."""
        return self.vce - self.vbe

    def __repr__(self) -> str:
        return format_call("TransistorResult", [
            f"{self.name} {self.polarity}: {_fmt(self.region)}", f"I_C={_fmt(self.ic, 'A')}",
            f"V_CE={_fmt(self.vce, 'V')}", f"I_B={_fmt(self.ib, 'A')}", f"V_BE={_fmt(self.vbe, 'V')}",
            f"forced beta={_fmt(self.beta_forced)}"])

    def _repr_html_(self) -> str:
        e = html.escape
        figures = (("region", _fmt(self.region)), ("I_C", _fmt(self.ic, "A")), ("V_CE", _fmt(self.vce, "V")),
                   ("I_B", _fmt(self.ib, "A")), ("V_BE", _fmt(self.vbe, "V")),
                   ("forced beta", _fmt(self.beta_forced)), ("power", _fmt(self.power, "W")))
        rows = "".join(f"<tr><td>{e(k)}</td><td>{e(v)}</td></tr>" for k, v in figures)
        checks = "".join(c._html_row() for c in self.checks)
        return (f"<div><strong>Transistor {e(self.name)} ({e(self.polarity.upper())})</strong>"
                f"<table><tbody>{rows}</tbody></table>"
                + (f"<table>{_CHECK_HEAD}<tbody>{checks}</tbody></table>" if checks else "")
                + "</div>")

    def to_dict(self) -> dict:
        """Plain, JSON-ready dict (arrays become lists; NaN and infinities become None)."""
        out = {k: _plain(getattr(self, k)) for k in
               ("name", "polarity", "region", "ic", "ib", "ie", "vbe", "vce", "beta_forced", "power")}
        out["checks"] = [c.to_dict() for c in self.checks]
        return _json_safe(out)


class Alternatives(Sequence):
    """The other consistent operating points of a single constant-drop solve, found when first read.

    Listing them is a search of its own (every region assignment of a small circuit, the
    neighbourhood of the answer in a large one), which most callers never need; the solve hands
    over how to find them and this sequence runs it once, on first use, and keeps the result.
    It behaves as a tuple of :class:`OperatingPoint` (and pickles as one).
    """

    def __init__(self, find: Callable[[], tuple]):
        self._find: Callable[[], tuple] | None = find
        self._points: tuple | None = None

    def _resolved(self) -> tuple:
        if self._points is None:
            self._points = tuple(self._find())
            self._find = None
        return self._points

    def __getitem__(self, index):
        return self._resolved()[index]

    def __len__(self) -> int:
        return len(self._resolved())

    def __eq__(self, other) -> bool:
        return isinstance(other, Sequence) and self._resolved() == tuple(other)

    __hash__ = None

    def __repr__(self) -> str:
        return repr(self._resolved())

    def __reduce__(self):
        return (tuple, (self._resolved(),))


@dataclass(frozen=True)
class OperatingPoint:
    """The DC operating point of a circuit (or of S samples of it, in a batch).

    Attributes
    ----------
    Fields typed :data:`Figure`, :data:`Text` or :data:`Flag` are scalars in a single solve and
    ndarrays of shape (S,) in a batch (``batch_size`` is S there, None otherwise).

    Attributes
    ----------
    model : str
        ``"constant-drop"`` or ``"ebers-moll"``.
    v : dict of str -> float, or of ndarray (S,) in a batch
        Node voltages, volts, ``v["gnd"] == 0``.
    i : dict of str -> float, or of ndarray (S,) in a batch
        Element currents, amperes: through a resistor from its node ``a`` to ``b``; the current a
        voltage source delivers out of its plus terminal; a current source's own value.
    transistors : dict of str -> TransistorResult
    status : str, or ndarray of str (S,) in a batch
        One of :data:`STATUSES` (see :data:`Status`): ``"ok"``, or for a single solve
        ``"assumption-fails"`` when the regions were imposed; in a batch one per sample, where
        failed samples (``"no-consistent-region"``, ``"no-convergence"``, ``"singular"``) have NaN
        numeric fields.
    temperature : float, or ndarray (S,) in a batch
        Degrees Celsius.
    alternatives : sequence of OperatingPoint
        Other consistent operating points of a single constant-drop solve (a latch, say), found
        by a search of their own when first read (:class:`Alternatives`); empty otherwise.
    method : str
        How the answer was reached: the steps of the constant-drop search it took
        (``"forward-active start, repair by failed checks, enumeration"`` ..., for a batch the
        furthest any sample went), ``"assumed regions"``, or Newton's (``"newton"``,
        ``"conductance ladder"``, ``"source stepping"``).
    iterations : int
        Newton iterations (Ebers–Moll, including any Ebers–Moll guess for constant-drop) or
        linear solves (constant-drop).
    batch_size : int or None
        S for a batch, None for a single solve.
    circuit : Circuit
        The circuit solved (not compared, not shown).
    unknowns : ndarray (size,), or (S, size) in a batch
        The solver's unknown vector (node voltages, source currents, I_B and I_C per transistor).
    parameters : ampplan.solver.assembly.Parameters or None
        A batch's element and device values, as solved (not compared, not shown): an analysis of
        the batch reads them instead of building them again. None for a single solve.
    """
    model: str
    v: dict[str, Figure]
    i: dict[str, Figure]
    transistors: dict[str, TransistorResult]
    status: Text = "ok"
    temperature: Figure = 25.0
    alternatives: Sequence[OperatingPoint] = ()
    method: str = ""
    iterations: int = 0
    batch_size: int | None = None
    circuit: object = field(default=None, repr=False, compare=False)
    unknowns: np.ndarray | None = field(default=None, repr=False, compare=False)
    parameters: object = field(default=None, repr=False, compare=False)

    @property
    def ok(self):
        """True where the solve succeeded (bool, or ndarray (S,) in a batch)."""
        return np.asarray(self.status) == "ok" if self.batch_size is not None else self.status == "ok"

    def kcl_residual(self):
        """Largest current imbalance over all nodes, amperes (ndarray (S,) in a batch).

        Recomputed from the reported element and transistor currents, independent of the solver.
        """
        from ..circuit import Bjt, CurrentSource, Resistor, VoltageSource
        net = {n: 0.0 for n in self.v}
        for e in self.circuit.elements:
            if isinstance(e, Resistor):
                net[e.a] = net[e.a] + self.i[e.name]
                net[e.b] = net[e.b] - self.i[e.name]
            elif isinstance(e, VoltageSource):
                net[e.plus] = net[e.plus] - self.i[e.name]
                net[e.minus] = net[e.minus] + self.i[e.name]
            elif isinstance(e, CurrentSource):
                net[e.from_node] = net[e.from_node] + self.i[e.name]
                net[e.to_node] = net[e.to_node] - self.i[e.name]
            elif isinstance(e, Bjt):
                t = self.transistors[e.name]
                s = e.device.sign
                net[e.base] = net[e.base] + s * t.ib
                net[e.collector] = net[e.collector] + s * t.ic
                net[e.emitter] = net[e.emitter] - s * t.ie
        net.pop("gnd", None)
        if not net:
            return 0.0
        return np.max(np.abs(np.array([np.broadcast_to(v, np.shape(self.v["gnd"])) for v in net.values()])),
                      axis=0)

    def sample(self, k: int) -> "OperatingPoint":
        """Sample ``k`` of a batch as a single OperatingPoint.

        Parameters
        ----------
        k : int
            Sample index, ``0 <= k < batch_size`` (negative counts from the end, as for a list).

        Raises
        ------
        InvalidValueError
            When this is a single solve, not a batch, or ``k`` is not an integer in range.
        """
        if self.batch_size is None:
            raise InvalidValueError("OperatingPoint.sample: this is a single solve, not a batch; it has no samples")
        try:
            index = operator.index(k)
        except TypeError:
            raise InvalidValueError(f"OperatingPoint.sample: k must be an integer, got {k!r}") from None
        if isinstance(k, bool) or not -self.batch_size <= index < self.batch_size:
            raise InvalidValueError(f"OperatingPoint.sample: k must be an integer from 0 to {self.batch_size - 1} "
                                    f"(the batch has {self.batch_size} samples), got {k!r}")
        k = index % self.batch_size
        pick = lambda a: a[k].item() if hasattr(a[k], "item") else a[k]  # noqa: E731
        transistors = {
            name: TransistorResult(
                name=t.name, polarity=t.polarity, region=str(t.region[k]),
                **{f: pick(getattr(t, f)) for f in ("ic", "ib", "ie", "vbe", "vce", "beta_forced", "power")},
                checks=tuple(Check(str(c.name[k]), pick(c.value), pick(c.limit), bool(c.holds[k]), pick(c.margin))
                             for c in t.checks))
            for name, t in self.transistors.items()}
        return OperatingPoint(
            model=self.model, v={n: pick(a) for n, a in self.v.items()}, i={n: pick(a) for n, a in self.i.items()},
            transistors=transistors, status=str(self.status[k]), temperature=pick(self.temperature),
            method=self.method, iterations=self.iterations, circuit=self.circuit,
            unknowns=None if self.unknowns is None else self.unknowns[k])

    def __repr__(self) -> str:
        head = f"OperatingPoint({self.model}"
        if self.batch_size is not None:
            head += f", batch of {self.batch_size}, status {_fmt(self.status)}"
        elif self.status != "ok":
            head += f", {self.status}"
        lines = [head + ")"]
        for t in self.transistors.values():
            lines.append(f"  {t.name}: {_fmt(t.region)}, I_C={_fmt(t.ic, 'A')}, V_CE={_fmt(t.vce, 'V')}, "
                         f"I_B={_fmt(t.ib, 'A')}")
        # Node voltages wrapped at the commas, so a long circuit does not make one endless line.
        lines.append(wrap_items("  nodes: ", [f"{n}={_fmt(v, 'V')}" for n, v in self.v.items() if n != "gnd"]
                                or ["none"]))
        if self.alternatives:
            lines.append(f"  {len(self.alternatives)} other consistent operating point(s) on .alternatives")
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        e = html.escape
        rows = "".join(
            f"<tr><td>{e(t.name)}</td><td>{e(t.polarity.upper())}</td><td>{e(_fmt(t.region))}</td>"
            f"<td>{e(_fmt(t.ic, 'A'))}</td><td>{e(_fmt(t.vce, 'V'))}</td><td>{e(_fmt(t.ib, 'A'))}</td>"
            f"<td>{e(_fmt(t.beta_forced))}</td></tr>" for t in self.transistors.values())
        nodes = "".join(f"<tr><td>{e(n)}</td><td>{e(_fmt(v, 'V'))}</td></tr>" for n, v in self.v.items()
                        if n != "gnd")
        title = f"Operating point ({e(self.model)})"
        if self.batch_size is not None:
            title += f", batch of {self.batch_size}"
        return (f"<div><strong>{title}</strong>"
                "<table><thead><tr><th>transistor</th><th>type</th><th>region</th><th>I_C</th><th>V_CE</th>"
                f"<th>I_B</th><th>forced beta</th></tr></thead><tbody>{rows}</tbody></table>"
                f"<table><thead><tr><th>node</th><th>voltage</th></tr></thead><tbody>{nodes}</tbody></table></div>")

    def to_dict(self) -> dict:
        """Plain, JSON-ready dict (arrays become lists; NaN and infinities become None)."""
        return _json_safe({
            "model": self.model,
            "status": _plain(self.status),
            "temperature": _plain(self.temperature),
            "method": self.method,
            "iterations": int(self.iterations),
            "batch_size": self.batch_size,
            "v": {n: _plain(v) for n, v in self.v.items()},
            "i": {n: _plain(v) for n, v in self.i.items()},
            "transistors": {n: t.to_dict() for n, t in self.transistors.items()},
            "alternatives": [a.to_dict() for a in self.alternatives],
        })


def _plain(x):
    if isinstance(x, np.ndarray):
        return x.tolist()
    if isinstance(x, np.generic):
        return x.item()
    return x


def _json_safe(x):
    """``x`` with NaN and infinities (at any depth of dicts and lists) replaced by None.

    JSON has no NaN or infinity; ``json.dumps(..., allow_nan=False)`` accepts the result.
    """
    if isinstance(x, dict):
        return {k: _json_safe(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_json_safe(v) for v in x]
    if isinstance(x, np.ndarray) or isinstance(x, np.generic):
        return _json_safe(_plain(x))
    if isinstance(x, float) and not math.isfinite(x):
        return None
    return x

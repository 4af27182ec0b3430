"""Region codes and the one table of region checks both device models report.

Every region of a transistor is defined by two checks, each "a quantity above (or below) a
limit", in the NPN frame (a PNP negates every voltage and current and reads its checks in its
own terms, ``V_EB``, ``V_EC``). The quantities and limits are slots that each model fills with
its own numbers:

==============  ====================================================================
quantity        ``v_be``, ``v_bc``, ``v_ce``, ``v_cb`` (volts), ``i_b``, ``i_c`` (amperes)
limit           ``be_on``, ``bc_on``: the junction's on-voltage; ``active_edge``: V_CE where
                forward-active meets saturation; ``zero``; ``beta_i_b``: β·I_B;
                ``reverse_edge``: -V_CE(sat)
==============  ====================================================================

Constant-drop (DESIGN §4; ``active_edge`` is V_CE(sat), or V_BE(on) for the stricter edge
V_CB = 0):

================  ==========================================
cutoff            V_BE < V_BE(on), V_BC < V_BC(on)
forward-active    I_B > 0, V_CE >= V_CE(sat)  (or V_CB >= 0)
saturation        I_B > 0, I_C < β·I_B
reverse-active    I_B > 0, V_CE <= -V_CE(sat)
================  ==========================================

Ebers–Moll classifies a solution by what its junctions do at that device's saturation current
and temperature. A junction *conducts* when the current it injects, I_S·(exp(V/(n·V_T)) − 1),
is at least :data:`CONDUCTION_CURRENT`; that is, when its voltage is at least
``n·V_T·ln(1 + CONDUCTION_CURRENT/I_S)`` (the ``be_on`` and ``bc_on`` slots of this model, with
I_S and V_T at the solve temperature). Neither junction conducting is cutoff; otherwise V_CE
against V_CE(sat), the edge both models share, separates forward-active, saturation and
reverse-active:

================  ===================================================
cutoff            V_BE < V_BE(100 nA), V_BC < V_BC(100 nA)
forward-active    V_BE >= V_BE(100 nA), V_CE >= V_CE(sat)
saturation        V_CE < V_CE(sat), V_CE > -V_CE(sat)
reverse-active    V_BC >= V_BC(100 nA), V_CE <= -V_CE(sat)
================  ===================================================
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..units import format_quantity
from .result import REGIONS

__all__ = ["CUTOFF", "ACTIVE", "SATURATION", "REVERSE", "QUANTITIES", "LIMITS", "CONDUCTION_CURRENT",
           "CheckDefinition", "CHECKS", "CheckTable", "table"]

CUTOFF, ACTIVE, SATURATION, REVERSE = (REGIONS.index(name) for name in
                                       ("cutoff", "forward-active", "saturation", "reverse-active"))

#: Quantity slots, in the order of the last axis of the ``quantities`` array a model builds.
QUANTITIES: tuple[str, ...] = ("v_be", "v_bc", "v_ce", "v_cb", "i_b", "i_c")
#: Limit slots, in the order of the last axis of the ``limits`` array a model builds.
LIMITS: tuple[str, ...] = ("be_on", "bc_on", "active_edge", "zero", "beta_i_b", "reverse_edge")

#: Amperes: an Ebers–Moll junction conducts when it injects at least this current. Common
#: practice, no source: a hundred times the nanoampere leakage of small-signal silicon at room
#: temperature, ten times below the microampere bias of a micropower stage.
CONDUCTION_CURRENT = 100e-9


@dataclass(frozen=True)
class CheckDefinition:
    """One check: ``quantity`` above (``above=True``) or below ``limit``, with its names.

    Attributes
    ----------
    npn, pnp : str
        The condition as a designer reads it, in NPN and in PNP terms.
    quantity : str
        One of :data:`QUANTITIES`.
    limit : str
        One of :data:`LIMITS`.
    above : bool
        True when the check holds with the quantity above the limit.
    """
    npn: str
    pnp: str
    quantity: str
    limit: str
    above: bool

    @property
    def is_current(self) -> bool:
        """True when the quantity is a current (amperes), False for a voltage."""
        return self.quantity.startswith("i_")


_ON = format_quantity(CONDUCTION_CURRENT, "A")

#: Every check either model uses, by a short key.
CHECKS: dict[str, CheckDefinition] = {
    # constant-drop
    "be off": CheckDefinition("V_BE < V_BE(on)", "V_EB < V_EB(on)", "v_be", "be_on", False),
    "bc off": CheckDefinition("V_BC < V_BC(on)", "V_CB < V_CB(on)", "v_bc", "bc_on", False),
    "base current": CheckDefinition("I_B > 0", "I_B > 0", "i_b", "zero", True),
    "collector above base": CheckDefinition("V_CB >= 0", "V_BC >= 0", "v_cb", "zero", True),
    "forced beta": CheckDefinition("I_C < beta*I_B", "I_C < beta*I_B", "i_c", "beta_i_b", False),
    # both models
    "above edge": CheckDefinition("V_CE >= V_CE(sat)", "V_EC >= V_EC(sat)", "v_ce", "active_edge", True),
    "reverse edge": CheckDefinition("V_CE <= -V_CE(sat)", "V_EC <= -V_EC(sat)", "v_ce", "reverse_edge", False),
    # Ebers–Moll
    "be blocks": CheckDefinition(f"V_BE < V_BE({_ON})", f"V_EB < V_EB({_ON})", "v_be", "be_on", False),
    "bc blocks": CheckDefinition(f"V_BC < V_BC({_ON})", f"V_CB < V_CB({_ON})", "v_bc", "bc_on", False),
    "be conducts": CheckDefinition(f"V_BE >= V_BE({_ON})", f"V_EB >= V_EB({_ON})", "v_be", "be_on", True),
    "bc conducts": CheckDefinition(f"V_BC >= V_BC({_ON})", f"V_CB >= V_CB({_ON})", "v_bc", "bc_on", True),
    "below edge": CheckDefinition("V_CE < V_CE(sat)", "V_EC < V_EC(sat)", "v_ce", "active_edge", False),
    "above reverse edge": CheckDefinition("V_CE > -V_CE(sat)", "V_EC > -V_EC(sat)", "v_ce", "reverse_edge", True),
}

#: The two checks of each region (rows in the order of REGIONS), per model and active edge.
_TABLES: dict[tuple[str, str], tuple] = {
    ("constant-drop", "vce-sat"): (("be off", "bc off"), ("base current", "above edge"),
                                   ("base current", "forced beta"), ("base current", "reverse edge")),
    ("constant-drop", "vcb-zero"): (("be off", "bc off"), ("base current", "collector above base"),
                                    ("base current", "forced beta"), ("base current", "reverse edge")),
    ("ebers-moll", "vce-sat"): (("be blocks", "bc blocks"), ("be conducts", "above edge"),
                                ("below edge", "above reverse edge"), ("bc conducts", "reverse edge")),
}


class CheckTable:
    """The checks of one model (and active edge) as index arrays, evaluated for whole batches."""

    def __init__(self, rows):
        by_code = [None] * len(REGIONS)
        for region, keys in zip(("cutoff", "forward-active", "saturation", "reverse-active"), rows):
            by_code[REGIONS.index(region)] = [CHECKS[k] for k in keys]
        self.quantity = np.array([[QUANTITIES.index(c.quantity) for c in r] for r in by_code], dtype=np.intp)
        self.limit = np.array([[LIMITS.index(c.limit) for c in r] for r in by_code], dtype=np.intp)
        self.above = np.array([[c.above for c in r] for r in by_code])
        self.is_current = np.array([[c.is_current for c in r] for r in by_code])
        self._margin_sign = np.where(self.above, 1.0, -1.0)
        self.names = np.array([[[c.npn for c in r] for r in by_code], [[c.pnp for c in r] for r in by_code]],
                              dtype=str)    # [npn, pnp][region][check]
        #: The same table as plain lists, for one sample in plain floats (a single solve): per region
        #: code, its two checks as (quantity slot, limit slot, above, is_current, npn name, pnp name).
        self.rows = tuple(tuple((QUANTITIES.index(c.quantity), LIMITS.index(c.limit), c.above, c.is_current,
                                 c.npn, c.pnp) for c in r) for r in by_code)

    def evaluate(self, quantities: np.ndarray, limits: np.ndarray, regions: np.ndarray):
        """Values, limits and margins of each transistor's two checks.

        Parameters
        ----------
        quantities : ndarray, shape (K, N, len(QUANTITIES))
        limits : ndarray, shape (K, N, len(LIMITS))
        regions : ndarray of int, shape (K, N)

        Returns
        -------
        values, limits, margins : ndarray, shape (K, N, 2)
            The margin is positive where the check holds with room (volts or amperes).
        """
        reg = regions.astype(np.intp)
        # What quantities[k, n, slot[k, n, c]] reads, as one flat ndarray.take each, and the
        # table's rows by region with take too (plain gathers: advanced indexing with broadcast
        # index arrays, or of a small table by a large one, costs several times more).
        k_count, n_q = reg.shape
        cell = np.arange(k_count * n_q, dtype=np.intp).reshape(k_count, n_q, 1)
        values = np.ascontiguousarray(quantities).reshape(-1).take(
            cell * quantities.shape[2] + self.quantity.take(reg, axis=0))
        bounds = np.ascontiguousarray(limits).reshape(-1).take(cell * limits.shape[2] + self.limit.take(reg, axis=0))
        margins = np.where(self.above.take(reg, axis=0), values - bounds, bounds - values)
        return values, bounds, margins

    def choose(self, quantities, limits, regions: np.ndarray):
        """:meth:`evaluate` with the slots given one array each, the same values to the last bit.

        Each check picks its slot by region with one ``numpy.choose`` (one copy where every
        sample and transistor is in the same region), instead of stacking every slot into one
        array and gathering from it; a slot that no check of this table reads may be None.

        Parameters
        ----------
        quantities : sequence of ndarray (K, N) or None, in the order of :data:`QUANTITIES`
        limits : sequence of ndarray (K, N) or None, in the order of :data:`LIMITS`
        regions : ndarray of int, shape (K, N)

        Returns
        -------
        values, limits, margins : ndarray, shape (K, N, 2)
        """
        shape = regions.shape + (2,)
        values, bounds = np.empty(shape), np.empty(shape)
        first = regions.flat[0] if regions.size else 0
        uniform = regions.size == 0 or bool(np.all(regions == first))
        for c in range(2):
            for out, table, slots in ((values, self.quantity, quantities), (bounds, self.limit, limits)):
                if uniform:
                    out[..., c] = slots[table[first, c]]
                else:
                    np.choose(regions, [slots[k] for k in table[:, c]], out=out[..., c])
        # b - v is exactly -(v - b): a margin is the difference times ±1.
        margins = values - bounds
        margins *= self._margin_sign[first] if uniform else self._margin_sign.take(regions, axis=0)
        return values, bounds, margins

    def check_names(self, regions: np.ndarray, sign: np.ndarray) -> np.ndarray:
        """Names (K, N, 2) of the checks of ``regions`` (K, N), for transistors of polarity ``sign`` (N,)."""
        pnp = (np.asarray(sign) < 0).astype(np.intp)[None, :]
        if regions.size and np.all(regions == regions.flat[0]):
            # Every sample in the same regions: one read-only view of the N×2 names (a batch of
            # 10,000 would otherwise write 60,000 words).
            return np.broadcast_to(self.names[pnp[0], regions.flat[0]], regions.shape + (2,))
        # names[pnp, region] as one row gather of the (polarity·region, check) table.
        flat = self.names.reshape(-1, self.names.shape[2])
        return flat.take(pnp * self.names.shape[1] + regions.astype(np.intp), axis=0)


_COMPILED: dict[tuple[str, str], CheckTable] = {}


def table(model: str, active_edge: str = "vce-sat") -> CheckTable:
    """The check table of ``model`` (``"constant-drop"`` or ``"ebers-moll"``) and ``active_edge``.

    Ebers–Moll has one edge, V_CE(sat), whatever ``active_edge`` says.
    """
    key = (model, active_edge if model == "constant-drop" else "vce-sat")
    if key not in _COMPILED:
        _COMPILED[key] = CheckTable(_TABLES[key])
    return _COMPILED[key]

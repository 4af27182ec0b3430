"""Result addresses: dotted names for the figures of a solved plan, mirroring plan addresses.

Per stage, ``"<stage id>.<name>"`` (``"s1.ic"``, ``"s2.vce"``); for the chain, a bare name
(``"gain"``, ``"limiting_stage"``). ``PlanResult[address]`` reads one; the sweeps, tolerance runs
and design targets of :mod:`ampplan.analyses.whatif` name their results the same way.

The reader works on a single result (a float, a str, None) and on a batched one (an array over
the samples, a str array for regions and stage ids) alike: it only follows fields.

===============================  =====================================================  ======
address                          field                                                  unit
===============================  =====================================================  ======
``sN.ic``, ``sN.ib``             the transistor's collector and base current             A
``sN.vce``                       its V_CE (signed node difference)                      V
``sN.region``                    its region                                             —
``sN.saturation_margin``         volts of V_CE above the forward-active edge            V
``sN.cutoff_margin``             amperes of I_C above zero                              A
``sN.swing``                     peak swing at the stage output                         V
``sN.swing_to_saturation``       swing toward saturation                                V
``sN.swing_to_cutoff``           swing toward cutoff                                    V
``sN.gain``                      midband v(output)/v(input)                             V/V
``sN.input_resistance``          midband, ohms                                          Ω
``sN.output_resistance``         midband, ohms                                          Ω
``sN.dissipation``               transistor power                                       W
``gain``                         v(load)/source EMF                                     V/V
``input_resistance``             the first stage's                                      Ω
``output_resistance``            the last stage's                                       Ω
``max_source_amplitude``         largest source EMF before a stage clips                V
``limiting_stage``               id of the stage that clips first                       —
``supply_current``               current the positive supply delivers                   A
``supply_power``                 power all supplies deliver                             W
``status``                       the solver's status (``"ok"`` …)                       —
===============================  =====================================================  ======
"""

from __future__ import annotations

from typing import Callable

import numpy as np

from ..circuit import did_you_mean
from ..errors import UnknownNameError

__all__ = ["STAGE_RESULTS", "CHAIN_RESULTS", "RESULT_UNITS", "WORD_RESULTS", "read_result", "result_addresses",
           "check_result_address"]


def _peak(swing):
    """Swing peak for one result or a batch (elementwise; NaN stays NaN)."""
    peak = np.minimum(swing.toward_saturation, swing.toward_cutoff)
    return float(peak) if np.ndim(peak) == 0 else peak


def _status(result):
    status = getattr(result, "status", None)
    if status is None and result.operating_point is not None:
        status = result.operating_point.status
    return status


#: Per-stage result names -> how to read them off a StageResult.
STAGE_RESULTS: dict[str, Callable] = {
    "ic": lambda s: s.transistor.ic,
    "ib": lambda s: s.transistor.ib,
    "vce": lambda s: s.transistor.vce,
    "region": lambda s: s.transistor.region,
    "saturation_margin": lambda s: s.saturation_margin,
    "cutoff_margin": lambda s: s.cutoff_margin,
    "swing": lambda s: _peak(s.swing),
    "swing_to_saturation": lambda s: s.swing.toward_saturation,
    "swing_to_cutoff": lambda s: s.swing.toward_cutoff,
    "gain": lambda s: s.gain,
    "input_resistance": lambda s: s.input_resistance,
    "output_resistance": lambda s: s.output_resistance,
    "dissipation": lambda s: s.dissipation,
}

#: Chain result names -> how to read them off a PlanResult.
CHAIN_RESULTS: dict[str, Callable] = {
    "gain": lambda r: r.gain,
    "input_resistance": lambda r: r.input_resistance,
    "output_resistance": lambda r: r.output_resistance,
    "max_source_amplitude": lambda r: r.max_source_amplitude,
    "limiting_stage": lambda r: r.limiting_stage,
    "supply_current": lambda r: r.supply_current,
    "supply_power": lambda r: r.supply_power,
    "status": _status,
}

#: SI unit of each result name (stage and chain names share units where they share a name).
RESULT_UNITS: dict[str, str] = {
    "ic": "A", "ib": "A", "vce": "V", "region": "", "saturation_margin": "V", "cutoff_margin": "A", "swing": "V",
    "swing_to_saturation": "V", "swing_to_cutoff": "V", "gain": "", "input_resistance": "Ω",
    "output_resistance": "Ω", "dissipation": "W", "max_source_amplitude": "V", "limiting_stage": "",
    "supply_current": "A", "supply_power": "W", "status": "",
}

#: Results that are words, not numbers.
WORD_RESULTS = ("region", "limiting_stage", "status")


def result_addresses(stage_ids) -> tuple:
    """Every result address of a plan with these stage ids: the stages' in order, then the chain's."""
    return tuple(f"{sid}.{name}" for sid in stage_ids for name in STAGE_RESULTS) + tuple(CHAIN_RESULTS)


def check_result_address(address, stage_ids) -> tuple:
    """Split and check a result address: ``(stage id or None, name)``.

    Raises
    ------
    UnknownNameError
        Not text, an unknown stage id or an unknown name; the message names the address and
        suggests the nearest valid ones.
    """
    if not isinstance(address, str):
        raise UnknownNameError(f"a result address is text such as 's1.vce' or 'gain', got {address!r}")
    head, dot, rest = address.partition(".")
    if not dot:
        if head in CHAIN_RESULTS:
            return None, head
        stage_names = [f"{sid}.{name}" for sid in stage_ids for name in STAGE_RESULTS]
        raise UnknownNameError(f"no result {address!r}" + (did_you_mean(head, CHAIN_RESULTS)
                                                           or did_you_mean(address, stage_names))
                               + f" (chain results: {', '.join(CHAIN_RESULTS)}; per stage: "
                               f"<stage id>.{{{', '.join(STAGE_RESULTS)}}})")
    if head not in stage_ids:
        raise UnknownNameError(f"result address {address!r}: the plan has no stage {head!r}; its stages are "
                               f"{', '.join(stage_ids) or 'none'}" + did_you_mean(head, stage_ids))
    if rest not in STAGE_RESULTS:
        raise UnknownNameError(f"result address {address!r}: a stage has no result {rest!r}"
                               + (did_you_mean(rest, STAGE_RESULTS)
                                  or f"; per stage: {', '.join(STAGE_RESULTS)}"))
    return head, rest


def read_result(result, address: str):
    """The figure at a result address of a PlanResult, single (scalar) or batched (array).

    Raises
    ------
    UnknownNameError
        The address names nothing (see :func:`check_result_address`).
    """
    sid, name = check_result_address(address, [s.id for s in result.stages])
    if sid is None:
        return CHAIN_RESULTS[name](result)
    return STAGE_RESULTS[name](result.stage(sid))

"""The what-if tools' reference: every sample solved on its own, one ``plan.solve()`` at a time.

This is the definition the batched tools must meet (issue 8: "every sample must equal
``plan.copy()`` with those values set and solved"), written the slow, obvious way, with no
batching and none of the what-if module's code.
"""

from __future__ import annotations

import math

import numpy as np

from ampplan.errors import ConvergenceError, NoConsistentRegionError

STATUS_OF = {NoConsistentRegionError: "no-consistent-region", ConvergenceError: "no-convergence"}


def single_solves(plan, values: dict, model: str, addresses) -> tuple:
    """(table, cautions, results): per sample, every address read off its own single solve.

    ``table`` maps address -> list over the samples (NaN / None / the failure's status for a sample
    that did not solve), ``cautions`` is a list of tuples, ``results`` the PlanResults (None where
    the solve raised).
    """
    size = len(next(iter(values.values())))
    table = {a: [] for a in addresses}
    cautions, results = [], []
    for i in range(size):
        trial = plan.copy()
        for address, array in values.items():
            trial.set(address, float(array[i]))
        try:
            result = trial.solve(model=model)
        except (NoConsistentRegionError, ConvergenceError) as exc:
            result = None
            status = STATUS_OF[type(exc)]
        results.append(result)
        cautions.append(() if result is None else tuple(result.cautions))
        for address in addresses:
            if result is None:
                # A batch marks a failed sample's regions "unsolved" (the solver's word) and has no
                # limiting stage.
                value = (status if address == "status" else "unsolved" if address.endswith("region")
                         else None if address.endswith("limiting_stage") else math.nan)
            else:
                value = result[address]
            table[address].append(value)
    return table, cautions, results


def check_rule(result, required_amplitude=None) -> bool:
    """``ampplan check`` exit 0 for one PlanResult (README: every stage forward-active, no caution),
    plus the amplitude requirement."""
    if result is None:
        return False
    ok = result.all_forward_active and not result.cautions
    if required_amplitude is not None:
        ok = ok and result.max_source_amplitude >= required_amplitude
    return bool(ok)


def assert_matches(sweep, table, rtol: float, atol: float = 0.0) -> None:
    """Every address of a PlanSweep equals the single-solve table."""
    for address, expected in table.items():
        actual = sweep[address]
        if address.endswith(("region", "limiting_stage", "status")):
            want = np.array(["" if v is None else str(v) for v in expected])
            assert actual.tolist() == want.tolist(), address
        else:
            np.testing.assert_allclose(actual, np.array(expected, dtype=float), rtol=rtol, atol=atol,
                                       equal_nan=True, err_msg=address)

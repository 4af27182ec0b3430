"""Batched dense linear solves that survive singular members."""

from __future__ import annotations

import numpy as np


def solve_batch(matrix: np.ndarray, rhs: np.ndarray, check_residual: bool = True):
    """Solve ``matrix @ x = rhs`` for a stack of systems.

    Parameters
    ----------
    matrix : ndarray, shape (S, m, m)
    rhs : ndarray, shape (S, m)
    check_residual : bool
        Also reject members whose residual betrays near-singularity (Newton skips this: it
        judges its iterates by their steps).

    Returns
    -------
    x : ndarray, shape (S, m)
        NaN rows where the system is singular or the answer is not finite.
    ok : ndarray of bool, shape (S,)
    """
    try:
        x = np.linalg.solve(matrix, rhs[..., None])[..., 0]
    except np.linalg.LinAlgError:
        # One singular member spoils LAPACK's batched call; redo the stack one system at a time,
        # which costs a Python loop only on this rare path.
        x = np.full(rhs.shape, np.nan)
        for k in range(matrix.shape[0]):
            try:
                x[k] = np.linalg.solve(matrix[k], rhs[k])
            except np.linalg.LinAlgError:
                pass
    with np.errstate(all="ignore"):
        ok = np.all(np.isfinite(x), axis=-1)
    if not check_residual:
        x[~ok] = np.nan
        return x, ok
    with np.errstate(all="ignore"):
        # A nearly singular member gives finite nonsense; its residual against the scale of the
        # equations gives it away.
        resid = np.abs(np.einsum("sij,sj->si", matrix, np.where(ok[:, None], x, 0.0)) - rhs).max(axis=-1)
        scale = (np.abs(matrix).max(axis=(-1, -2)) * np.abs(np.where(ok[:, None], x, 0.0)).max(axis=-1)
                 + np.abs(rhs).max(axis=-1))
        ok &= resid <= 1e-8 * scale + 1e-300
    x[~ok] = np.nan
    return x, ok

"""Batched dense linear solves that survive singular members."""

from __future__ import annotations

import contextlib

import numpy as np

#: From this order up, LAPACK's factorisation wakes the BLAS library's threads, which on a shared
#: machine fight the rest of the work for the cores (a 200×200 solve measured 2 ms on one thread,
#: 100 ms on the default threads under load); those solves run on one thread.
THREADED_ORDER = 96

_controller = None


def _one_blas_thread():
    """A context that keeps BLAS to one thread (threadpoolctl), restoring its setting afterwards."""
    global _controller
    if _controller is None:
        from threadpoolctl import ThreadpoolController
        _controller = ThreadpoolController()
    return _controller.limit(limits=1, user_api="blas")


def solve_batch(matrix: np.ndarray, rhs: np.ndarray, check_residual: bool = True):
    """Solve ``matrix @ x = rhs`` for a stack of systems.

    Parameters
    ----------
    matrix : ndarray, shape (S, m, m)
    rhs : ndarray, shape (S, m) or (S, m, k)
        One right-hand side per system, or k of them.
    check_residual : bool
        Also reject members whose residual betrays near-singularity (Newton skips this: it
        judges its iterates by their steps).

    Returns
    -------
    x : ndarray, shape of ``rhs``
        NaN rows where the system is singular or the answer is not finite.
    ok : ndarray of bool, shape (S,)
    """
    columns = rhs if rhs.ndim == 3 else rhs[..., None]
    threads = _one_blas_thread() if matrix.shape[-1] >= THREADED_ORDER else contextlib.nullcontext()
    try:
        with threads:
            x = np.linalg.solve(matrix, columns)
    except np.linalg.LinAlgError:
        # One singular member spoils LAPACK's batched call; redo the stack one system at a time,
        # which costs a Python loop only on this rare path.
        x = np.full(columns.shape, np.nan)
        for k in range(matrix.shape[0]):
            try:
                x[k] = np.linalg.solve(matrix[k], columns[k])
            except np.linalg.LinAlgError:
                pass
    with np.errstate(all="ignore"):
        ok = np.all(np.isfinite(x), axis=(-2, -1))
    if check_residual:
        with np.errstate(all="ignore"):
            # A nearly singular member gives finite nonsense; its residual against the scale of the
            # equations gives it away.
            xz = np.where(ok[:, None, None], x, 0.0)
            resid = np.abs(np.einsum("sij,sjk->sik", matrix, xz) - columns).max(axis=(-2, -1), initial=0.0)
            scale = (np.abs(matrix).max(axis=(-1, -2), initial=0.0) * np.abs(xz).max(axis=(-2, -1), initial=0.0)
                     + np.abs(columns).max(axis=(-2, -1), initial=0.0))
            ok &= resid <= 1e-8 * scale + 1e-300
    x[~ok] = np.nan
    return (x if rhs.ndim == 3 else x[..., 0]), ok

"""Finite-difference Jacobians of the model's residuals: one implementation for the start and the planner."""
from __future__ import annotations

import numpy as np

__all__ = ["difference_jacobian"]


def difference_jacobian(batch, theta, step, *, central=False, one_at_a_time=False):
    """Jacobian of a vectorised residual function by forward or central differences.

    Parameters
    ----------
    batch : callable
        ``batch(points)`` with ``points`` of shape ``(k, n_dim)`` returns the residuals of
        every point, shape ``(k, n_res)``; all shifted points go through one call.
    theta : ndarray, shape (n_dim,)
        Where to differentiate.
    step : ndarray, shape (n_dim,)
        Step of each coordinate (a negative step differences backwards).
    central : bool
        Central differences (error O(h^2), two points a coordinate) instead of forward
        ones (O(h), one point a coordinate plus the centre).
    one_at_a_time : bool
        Evaluate one shifted point per call, filling one array, for data sets whose
        stack of shifted residual vectors would not fit in memory (the same numbers).

    Returns
    -------
    ndarray, shape (n_res, n_dim)
    """
    theta = np.asarray(theta, dtype=float)
    step = np.asarray(step, dtype=float)
    shifts = np.diag(step)
    if not one_at_a_time:
        if central:
            res = batch(np.vstack([theta + shifts, theta - shifts]))
            return ((res[:theta.size] - res[theta.size:]) / (2.0 * step[:, None])).T
        res = batch(np.vstack([theta, theta + shifts]))
        return ((res[1:] - res[0]) / step[:, None]).T
    base = None if central else batch(theta[None])[0]
    out = None
    for k in range(theta.size):
        ahead = batch((theta + shifts[k])[None])[0]
        behind = batch((theta - shifts[k])[None])[0] if central else base
        column = (ahead - behind) / ((2.0 if central else 1.0) * step[k])
        if out is None:
            out = np.empty((column.size, theta.size))
        out[:, k] = column
    return out

"""Compiled differential-evolution steps of the ensemble (numba).

:func:`de_steps` takes a block of steps of :class:`massfit.sample.chain.DEMove` with
the random numbers drawn beforehand, in the order the Python move draws them
(:mod:`massfit.sample.steps` draws them), and the compiled log-posterior of
:mod:`massfit.orbits._posterior_numba`: the same arithmetic in the same order, so the
chain is the Python move's to the bit (tests/test_compiled_steps.py).
"""

from __future__ import annotations

import numba
import numpy as np

from massfit.orbits._posterior_numba import walker_log_posterior

_jit = dict(cache=True, error_model="numpy", fastmath=False)


@numba.njit(parallel=True, **_jit)
def de_steps(coords, log_prob, splits, first, second, gamma, log_u, chain, chain_lp,
             accepted, *tables):  # pragma: no cover - compiled
    """Advance ``coords`` (walkers, dim) and ``log_prob`` (walkers,) in place by
    ``splits.shape[0]`` steps.

    Per step t: ``splits[t]`` the half (0 or 1) of each walker; for half h and its
    i-th walker (in walker order), the positions in the other half (in walker order)
    of the pair whose difference it moves along, ``first[t, h, i]`` and
    ``second[t, h, i]``, its scale ``gamma[t, h, i]`` and the log of its uniform
    number ``log_u[t, h, i]``. Fills ``chain[t]``, ``chain_lp[t]`` with the ensemble
    after step t and adds each walker's acceptances to ``accepted``. ``tables`` are
    the log-posterior's (``walker_log_posterior`` after the coordinates).
    """
    n_walkers, n_dim = coords.shape
    members = np.empty(n_walkers, dtype=np.int64)
    others = np.empty(n_walkers, dtype=np.int64)
    proposal = np.empty((n_walkers, n_dim))
    new_lp = np.empty(n_walkers)
    for t in range(splits.shape[0]):
        for half in range(2):
            n_move = 0
            n_other = 0
            for w in range(n_walkers):
                if splits[t, w] == half:
                    members[n_move] = w
                    n_move += 1
                else:
                    others[n_other] = w
                    n_other += 1
            for i in range(n_move):
                a = others[first[t, half, i]]
                b = others[second[t, half, i]]
                for j in range(n_dim):
                    proposal[i, j] = (coords[members[i], j]
                                      + gamma[t, half, i] * (coords[b, j] - coords[a, j]))
            for i in numba.prange(n_move):
                new_lp[i] = walker_log_posterior(proposal[i], *tables)
            for i in range(n_move):
                w = members[i]
                if new_lp[i] - log_prob[w] > log_u[t, half, i]:
                    coords[w, :] = proposal[i]
                    log_prob[w] = new_lp[i]
                    accepted[w] += 1
        chain[t] = coords
        chain_lp[t] = log_prob

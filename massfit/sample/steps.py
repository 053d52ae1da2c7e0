"""The ensemble's differential-evolution steps taken in compiled code, blocks at a time.

emcee's sampler spends most of a step on Python around the log-posterior where that is
compiled and cheap (a few walkers, a few hundred rows): choosing the move, splitting the
ensemble, building the proposals, the random state, the bookkeeping. Here the random
numbers of a block of steps are drawn first, with the sampler's own generator and in the
order :class:`massfit.sample.chain` 's DE move inside ``emcee.EnsembleSampler.sample``
draws them; then :func:`massfit.sample._steps_numba.de_steps` takes the block, calling
the compiled log-posterior walker by walker; the block goes into emcee's backend as the
sampler would have stored it. The chain is the one emcee gives with the same move, to the
bit (tests/test_compiled_steps.py), and emcee's backend, checkpoints and random state
carry on as before.
"""

from __future__ import annotations

import time
from functools import lru_cache

import numpy as np

#: The DE move's scale: gamma = GAMMA_0(n_dim) (1 + DE_SIGMA N(0, 1)), as emcee's
#: default (ter Braak 2006; Nelson et al. 2013).
DE_SIGMA = 1.0e-5
#: Longest a block of compiled steps should run (s): a Ctrl-C waits at most this long.
BLOCK_SECONDS = 0.5


def gamma_0(n_dim):
    """The DE move's mean scale 2.38 / sqrt(2 n_dim)."""
    return 2.38 / np.sqrt(2 * n_dim)


@lru_cache(maxsize=4)
def difference_pairs(n):
    """Every ordered pair (a, b), a != b, of ``n`` walkers, shape (n (n - 1), 2), in
    the order the DE move numbers them (the lower triangle, then its mirror)."""
    rows, cols = np.tril_indices(n, -1)
    return np.column_stack([np.concatenate([rows, cols]), np.concatenate([cols, rows])])


def draw_block(random, n_steps, n_walkers, n_dim):
    """The random numbers of ``n_steps`` steps, drawn from ``random`` (a
    ``numpy.random.RandomState``) as the Python path draws them: per step the one
    uniform number emcee's sampler draws to choose among its moves (there is one), the
    shuffled halves, then per half the pairs, the scales and the acceptance numbers.
    The calls are the lean equivalents of those the Python path makes (``randint`` for
    ``choice`` without weights, ``random_sample`` for ``choice`` of one move): the
    same numbers from the same stream (tests/test_compiled_steps.py).
    Returns (splits, first, second, gamma, log_u)."""
    half = (n_walkers + 1) // 2
    splits = np.empty((n_steps, n_walkers), dtype=np.int64)
    first = np.zeros((n_steps, 2, half), dtype=np.int64)
    second = np.zeros((n_steps, 2, half), dtype=np.int64)
    gamma = np.zeros((n_steps, 2, half))
    log_u = np.zeros((n_steps, 2, half))
    g0 = gamma_0(n_dim)
    base = np.arange(n_walkers) % 2
    sizes = (n_walkers - n_walkers // 2, n_walkers // 2)  # walkers in each half
    pairs = [difference_pairs(n_walkers - n) for n in sizes]
    for t in range(n_steps):
        random.random_sample()
        inds = base.copy()
        random.shuffle(inds)
        splits[t] = inds
        for h, n_move in enumerate(sizes):
            chosen = pairs[h][random.randint(0, pairs[h].shape[0], n_move)]
            first[t, h, :n_move] = chosen[:, 0]
            second[t, h, :n_move] = chosen[:, 1]
            gamma[t, h, :n_move] = random.randn(n_move)  # scaled below, all at once
            log_u[t, h, :n_move] = random.rand(n_move)
    gamma = g0 * (1 + DE_SIGMA * gamma)
    with np.errstate(divide="ignore"):
        log_u = np.log(log_u)
    return splits, first, second, gamma, log_u


class CompiledSteps:
    """Take an emcee sampler's DE steps in compiled code.

    Parameters
    ----------
    kernel : massfit.model.compiled_posterior.KernelTables
        The compiled log-posterior's tables for the sampler's coordinates.
    threads : int or None
        Threads for the walkers of a half-ensemble (None: as the kernel decides).
    """

    def __init__(self, kernel, threads=None):
        from massfit.sample import _steps_numba

        self._kernel = kernel
        self._threads = threads
        self._steps = _steps_numba.de_steps

    def advance(self, sampler, state, n_steps, interrupted=lambda: False):
        """``n_steps`` steps of ``sampler`` (an ``emcee.EnsembleSampler`` whose only
        move is the DE move) from ``state`` (an ``emcee.State``), stored in its backend;
        returns the new state. Raises KeyboardInterrupt after a stored block when
        ``interrupted()`` says so (a Ctrl-C during the last block is not lost)."""
        import emcee

        from massfit.model.compiled_posterior import use_threads

        n_walkers, n_dim = state.coords.shape
        if n_walkers < 2 * n_dim:
            raise RuntimeError("It is unadvisable to use a red-blue move with fewer "
                               "walkers than twice the number of dimensions.")
        coords = np.array(state.coords, dtype=float)
        if state.random_state is not None:
            sampler.random_state = state.random_state
        random = sampler.random_generator()
        if state.log_prob is None:
            log_prob = np.array(sampler.compute_log_prob(coords)[0], dtype=float)
        else:
            log_prob = np.array(state.log_prob, dtype=float)
        use_threads(self._threads, (n_walkers // 2) * self._kernel.work_per_walker)
        if sampler.move_weights()[0] != 1:
            raise ValueError("compiled steps take a sampler with the DE move alone")
        # Room for the steps, as emcee's sample() makes it, but at least doubling the
        # store: growing it by each call's steps copies the whole chain every call.
        backend = sampler.backend
        if len(backend.chain) - backend.iteration < n_steps:
            backend.grow(max(n_steps, backend.iteration), None)
        block, done = 16, 0
        while done < n_steps:
            n = min(block, n_steps - done)
            draws = draw_block(random, n, n_walkers, n_dim)
            chain = np.empty((n, n_walkers, n_dim))
            chain_lp = np.empty((n, n_walkers))
            accepted = np.zeros(n_walkers, dtype=np.int64)
            started = time.perf_counter()
            self._steps(coords, log_prob, *draws, chain, chain_lp, accepted,
                        *self._kernel.tables)
            per_step = (time.perf_counter() - started) / n
            save_block(sampler.backend, chain, chain_lp, accepted, random.get_state())
            done += n
            block = max(1, int(BLOCK_SECONDS / max(per_step, 1e-7)))
            if interrupted():  # after each stored block, the last one too
                raise KeyboardInterrupt
        return emcee.State(coords, log_prob=log_prob, random_state=random.get_state())


def save_block(backend, chain, log_prob, accepted, random_state):
    """Store a block of steps in an emcee backend (grown for them already) as its
    ``save_step`` would, one step after another (the backend's ``stored_block`` hook,
    where it has one, sees the block's acceptances)."""
    n = chain.shape[0]
    i = backend.iteration
    backend.chain[i:i + n] = chain
    backend.log_prob[i:i + n] = log_prob
    backend.accepted += accepted
    backend.random_state = random_state
    backend.iteration = i + n
    hook = getattr(backend, "stored_block", None)
    if hook is not None:
        hook(accepted)

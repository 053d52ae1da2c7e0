"""Sampling the posterior with emcee until the chain is long enough to trust.

Convergence criterion (the one ``converged`` in the summary reports): the chain is at
least ``50`` integrated autocorrelation times long for every coordinate, and the
largest autocorrelation time changed by less than 3 % between two checks. Otherwise
the run stops at ``max_steps`` and says it has not converged.
"""

from __future__ import annotations

import contextlib
import signal
import sys
import threading
import time
from dataclasses import dataclass, field

import emcee
import numpy as np
import scipy.fft

from massfit.model.compiled_posterior import on_threads
from massfit.sample.progress import ConvergenceBar
from massfit.sample.steps import CompiledSteps, difference_pairs

__all__ = ["SamplerSettings", "Chain", "run_sampler", "check_seed", "ConvergenceTest",
           "arrival_step", "ARRIVAL_PROBABILITY"]

#: Required chain length in autocorrelation times.
TAU_MULTIPLE = 50.0
#: Largest allowed relative change of the autocorrelation time between checks.
TAU_STABILITY = 0.03


@dataclass
class SamplerSettings:
    """How long and how widely to sample.

    Parameters
    ----------
    walkers : int or None
        Number of walkers; None gives max(32, 2 n_dim + 2) rounded up to even (a fit
        through the linearised surrogate takes 8 n_dim: ``massfit.run``). On a
        25-parameter two-body model the autocorrelation time in steps hardly depended
        on the walkers beyond twice the dimensions (tau ~100 steps with 52 and with
        100 walkers), so more walkers only made each step dearer; on the 29
        coordinates of four resonant moons (the linearised surrogate, 372 s of
        sampling either way) 60 walkers gave tau 3404 steps over 80 000 steps and 240
        walkers tau 1886 over 40 000: 3.6 times the effective samples.
    max_steps : int
        Step cap; a run that reaches it without converging says so.
    check_every : int
        Steps between convergence checks.
    seed : int or None
        Seed for the walkers' start and for emcee; the same seed repeats the run.
    progress : bool or None
        Progress bar; None shows it only on a terminal.
    threads : int or None
        Threads the compiled log-posterior shares the walkers among
        (:mod:`massfit.model.compiled_posterior`, ``--threads``); None uses every core
        where a call is large enough to gain from it (``thread_count``). The numbers do
        not depend on it.
    """

    walkers: int | None = None
    max_steps: int = 50_000
    check_every: int = 500
    seed: int | None = None
    progress: bool | None = None
    threads: int | None = None

    def check(self, *, key_prefix: str = "", file=None) -> None:
        """Raise a ConfigError naming the key of the first setting massfit cannot use."""
        from massfit.errors import ConfigError

        limits = (("walkers", self.walkers, 4), ("max_steps", self.max_steps, 100),
                  ("check_every", self.check_every, 50))
        limits += (("threads", self.threads, 1),)
        for name, value, least in limits:
            if value is None and name in ("walkers", "threads"):
                continue
            if not isinstance(value, int) or isinstance(value, bool) or value < least:
                raise ConfigError(f"{name} must be a whole number of at least {least}",
                                  key=f"{key_prefix}{name}", file=file)
        check_seed(self.seed, key=f"{key_prefix}seed", file=file)

    def n_walkers(self, n_dim: int) -> int:
        n = self.walkers if self.walkers is not None else max(32, 2 * n_dim + 2)
        return int(n + (n % 2))


def check_seed(seed, *, key="seed", file=None) -> None:
    """Refuse a seed numpy's SeedSequence cannot take (None is fine: a fresh seed).

    Raises
    ------
    massfit.errors.ConfigError
        For anything but None or a whole number of at least zero.
    """
    from massfit.errors import ConfigError

    if seed is None:
        return
    if isinstance(seed, (bool, np.bool_)) or not isinstance(seed, (int, np.integer)) \
            or seed < 0:
        raise ConfigError(f"the seed must be a whole number of at least 0 (got {seed!r})",
                          key=key, file=file)


@dataclass
class Chain:
    """A finished chain with its diagnostics.

    Attributes
    ----------
    samples : ndarray, shape (n_samples, n_dim)
        Flattened samples after burn-in and thinning.
    log_prob : ndarray, shape (n_samples,)
    steps : int
        Steps taken by each walker.
    walkers : int
    tau : ndarray
        Integrated autocorrelation time of each coordinate, steps.
    converged : bool
    burn_in, thin : int
    acceptance_fraction : float
        Mean over walkers.
    seconds : float
        Wall time of the sampling alone.
    tau_history : list of (steps, tau)
        The largest autocorrelation time at each check (where a check could stop at
        the leading coordinate, that coordinate's: see :class:`ConvergenceTest`).
    resumed_from : int
        Steps that were already in the checkpoint when this run began (0 if fresh).
    walker_steps : ndarray, shape (n_kept, walkers, n_dim), optional
        The kept steps walker by walker (``samples`` is this, flattened); used to see
        whether walkers sit in separate modes.
    coordinate_names : list of str, optional
        Names of the coordinates the sampler moved in (those of ``tau``), where they
        differ from the model's (see :mod:`massfit.sample.reparameterisation`).
    state_bodies : list of str
        Companions sampled as a position and velocity rather than as elements.
    key_column, key_tau : int and float, optional
        Where the sampler moved in other coordinates than the model's: the model column
        of the central mass and its own autocorrelation time (steps), measured on the
        whole chain (``run_sampler``'s ``key``); the effective samples of the mass use it.
    weighed_effective : float, optional
        Where ``samples`` are draws resampled by importance weights
        (:mod:`massfit.linearised_fit`): their effective number.
    arrival_steps : int
        Steps until the last walker reached the posterior's bulk
        (:func:`arrival_step`); the burn-in is at least this.
    autocorr_converged : bool or None
        Whether the autocorrelation test alone passed (``converged`` may be false for
        another reason, named in the chain's notes); None where unknown.
    """

    samples: np.ndarray
    log_prob: np.ndarray
    steps: int
    walkers: int
    tau: np.ndarray
    converged: bool
    burn_in: int
    thin: int
    acceptance_fraction: float
    seconds: float
    tau_history: list
    resumed_from: int = 0
    walker_steps: np.ndarray | None = None
    coordinate_names: list | None = None
    state_bodies: list = field(default_factory=list)
    key_column: int | None = None
    key_tau: float | None = None
    weighed_effective: float | None = None
    arrival_steps: int = 0
    autocorr_converged: bool | None = None

    def effective_samples(self, k: int = 0) -> float:
        """Effective number of independent samples of coordinate ``k`` (of the model's
        quantity ``key_tau`` was measured for, where ``k`` is its column); at most
        ``weighed_effective`` where the samples are importance-weighted draws."""
        tau = self.key_tau if self.key_tau is not None and k == self.key_column else self.tau[k]
        count = float(self.walkers * (self.steps - self.burn_in) / max(tau, 1.0))
        return count if self.weighed_effective is None else min(count, self.weighed_effective)


def _moves():
    # Differential-evolution proposals cope with the strong correlations of orbit
    # posteriors (period-phase, mass-parallax) better than the plain stretch move.
    # DE alone, never emcee's snooker variant (DESnookerMove, emcee 3.1): it does not
    # leave the target invariant. Its step along the line to the anchor walker is
    # scaled by the distance to it (delta / sqrt(|delta|) where a unit vector belongs),
    # which the Metropolis factor does not undo: a 7-d standard normal sampled with the
    # 0.8/0.2 DE/snooker mixture comes out with variances of 0.89 instead of 1 (0.65
    # with the snooker alone), and the short-arc masses of validation/short_arc.py
    # departed from the brute-force reference by a KS distance of 0.09. The test suite
    # pins this (tests/test_sampler_target.py). The snooker was also ~35 % dearer per
    # step on a four-companion model (benchmarks/) with no shorter autocorrelation.
    return [(_DEMove(), 1.0)]


class _DEMove(emcee.moves.DEMove):
    """emcee's DE move with the acceptance of a half-ensemble decided in one array
    operation instead of a Python loop over its walkers: the loop draws one uniform
    number per walker in order, ``rand(n)`` draws the same n numbers, so the chain is
    emcee's to the bit (tests/test_convergence_checks.py). At a few tenths of a
    millisecond a step, the loop cost as much as the compiled log-posterior."""

    def propose(self, model, state):
        nwalkers, ndim = state.coords.shape
        if nwalkers < 2 * ndim and not self.live_dangerously:
            raise RuntimeError("It is unadvisable to use a red-blue move with fewer "
                               "walkers than twice the number of dimensions.")
        self.setup(state.coords)
        accepted = np.zeros(nwalkers, dtype=bool)
        all_inds = np.arange(nwalkers)
        inds = all_inds % self.nsplits
        if self.randomize_split:
            model.random.shuffle(inds)
        for split in range(self.nsplits):
            chosen = inds == split
            sets = [state.coords[inds == j] for j in range(self.nsplits)]
            q, factors = self.get_proposal(sets[split], sets[:split] + sets[split + 1:],
                                           model.random)
            new_log_probs, new_blobs = model.compute_log_prob_fn(q)
            walkers = all_inds[chosen]
            with np.errstate(invalid="ignore"):
                difference = factors + new_log_probs - state.log_prob[walkers]
                accepted[walkers] = difference > np.log(model.random.rand(walkers.size))
            new_state = emcee.State(q, log_prob=new_log_probs, blobs=new_blobs)
            state = self.update(state, new_state, accepted, chosen)
        return state, accepted

    def get_proposal(self, s, c, random):
        # emcee's DE proposal (emcee 3.1.6), kept here so that the compiled steps
        # (massfit.sample.steps) and this move draw the same numbers whatever emcee
        # does next: each walker moves along the difference of a pair of the other
        # half's walkers, scaled by gamma_0 (1 + sigma N(0, 1)).
        c = np.concatenate(c, axis=0)
        pairs = difference_pairs(c.shape[0])
        pairs = pairs[random.choice(pairs.shape[0], size=s.shape[0], replace=True)]
        diffs = np.diff(c[pairs], axis=1).squeeze(axis=1)
        gamma = self.g0 * (1 + self.sigma * random.randn(s.shape[0], 1))
        return s + gamma * diffs, np.zeros(s.shape[0], dtype=np.float64)


class _Sampler(emcee.EnsembleSampler):
    """emcee's ensemble sampler taking a vectorised log-probability's array as it is
    (emcee converts it value by value, looking for blobs massfit never returns); the
    same checks of the coordinates and of NaN results."""

    def compute_log_prob(self, coords):
        if not self.vectorize or self.params_are_named:
            return super().compute_log_prob(coords)
        if np.any(np.isinf(coords)):
            raise ValueError("At least one parameter value was infinite")
        if np.any(np.isnan(coords)):
            raise ValueError("At least one parameter value was NaN")
        log_prob = np.array(self.log_prob_fn(coords), dtype=float).reshape(-1)
        if np.any(np.isnan(log_prob)):
            raise ValueError("Probability function returned NaN")
        return log_prob, None

    def random_generator(self):
        """The sampler's own ``numpy.random.RandomState`` (what its moves draw from)."""
        return self._random

    def move_weights(self):
        """(number of moves, their weights), as the sampler chooses among them."""
        return len(self._moves), self._weights


def run_sampler(log_prob, initial, settings: SamplerSettings, *, checkpoint=None,
                resume=False, key=None, compiled=None) -> Chain:
    """Run emcee from ``initial`` until converged or at the step cap.

    Convergence is checked every ``settings.check_every`` steps, counted from the
    first step, and each check looks only at the chain stored so far; so a run that
    is resumed from a checkpoint checks at the same steps, sees the same numbers and
    stops where an uninterrupted run would.

    Parameters
    ----------
    log_prob : callable
        Vectorised log-posterior: (n_walkers, n_dim) -> (n_walkers,).
    initial : ndarray, shape (n_walkers, n_dim)
        Starting points.
    settings : SamplerSettings
    checkpoint : path, optional
        The checkpoint file: the steps and the random state after them are saved in
        blocks beside it (see :mod:`massfit.sample.checkpoint`). In memory only when None.
    resume : bool
        Continue the chain stored in ``checkpoint`` instead of starting afresh.
    key : (int, callable), optional
        A model column and a map from the sampled chain (steps, walkers, dim) to that
        column's values (steps, walkers): its autocorrelation time is measured on the
        whole chain (``Chain.key_tau``), where the sampler does not move in it directly.
    compiled : massfit.model.compiled_posterior.KernelTables, optional
        ``log_prob``'s compiled tables: the steps are then taken in compiled code
        (:mod:`massfit.sample.steps`), the same chain as emcee's with ``log_prob``.

    Returns
    -------
    Chain
    """
    n_walkers, n_dim = initial.shape
    backend = None
    if checkpoint is not None:
        from massfit.sample.checkpoint import chain_backend

        backend = chain_backend(checkpoint)
        if not resume and backend.initialized:
            backend.reset(n_walkers, n_dim)
    sampler = _Sampler(n_walkers, n_dim, on_threads(log_prob, settings.threads),
                                    vectorize=True,
                                    moves=_moves(), backend=backend)
    steps = resumed_from = int(sampler.iteration)
    if steps > 0:
        state = sampler.backend.get_last_sample()
    else:
        state = emcee.State(initial, random_state=np.random.RandomState(
            np.random.SeedSequence(settings.seed).generate_state(1)[0]).get_state())
    stepper = None
    if compiled is not None:
        stepper = CompiledSteps(compiled, settings.threads)
    show = settings.progress if settings.progress is not None else sys.stderr.isatty()
    bar = ConvergenceBar(show, settings.max_steps, TAU_MULTIPLE, steps)
    history = []
    test = ConvergenceTest()
    converged = False
    started = time.perf_counter()
    checked = 0
    while checked < settings.max_steps:
        checked = min(checked + settings.check_every, settings.max_steps)
        if checked > steps:
            with _interrupt_between_steps() as interrupted:
                if stepper is not None:
                    state = stepper.advance(sampler, state, checked - steps, interrupted)
                else:
                    for state in sampler.sample(state, iterations=checked - steps,
                                                skip_initial_state_check=True):
                        if interrupted():
                            raise KeyboardInterrupt
            bar.stepped(checked)
            steps = checked
        tau = test.update(sampler.get_chain()[:checked])
        history.append((checked, float(np.max(tau))))
        bar.checked(checked, float(np.max(tau)))
        if test.converged:
            converged = True
            break
    seconds = time.perf_counter() - started
    bar.close(converged)
    # A checkpoint never holds more than the run would have taken, but the result is
    # cut at the last check all the same, so it cannot depend on when it was stopped.
    steps = checked
    chain = sampler.get_chain()[:steps]
    lnp = sampler.get_log_prob()[:steps]
    tau = test.tau_at(chain)
    tau_max = float(np.max(tau)) if np.all(np.isfinite(tau)) else float(steps)
    # Burn-in: two autocorrelation times, and at least until the last walker has
    # reached the posterior's bulk (a walker started far out in a stiff direction can
    # take many times tau to come in, and its way in is no posterior draw).
    arrival = arrival_step(lnp, n_dim)
    burn_in = min(max(int(np.ceil(2 * tau_max)), arrival), steps // 2)
    thin = max(1, int(tau_max // 2))
    # The same slice as emcee's get_chain(discard=burn_in, thin=thin).
    keep = slice(burn_in + thin - 1, steps, thin)
    accepted = sampler.backend.accepted
    out = Chain(
        samples=chain[keep].reshape(-1, n_dim),
        log_prob=lnp[keep].reshape(-1),
        steps=steps, walkers=n_walkers, tau=np.asarray(tau), converged=converged,
        burn_in=burn_in, thin=thin,
        acceptance_fraction=float(np.mean(accepted / max(sampler.iteration, 1))),
        seconds=seconds, tau_history=history, resumed_from=resumed_from,
        walker_steps=chain[keep],
        key_column=None if key is None else key[0],
        key_tau=None if key is None else float(_autocorr(key[1](chain)[:, :, None])[0]),
        arrival_steps=arrival, autocorr_converged=converged)
    if arrival > steps // 2:
        out.converged = False
        out.notes = [f"not every walker had reached the posterior's bulk by half the chain "
                     f"(the last came in after {arrival} of {steps} steps): raise max_steps"]
    return out


#: A walker has reached the posterior's bulk once its log-posterior is within half the
#: chi^2 quantile of this probability (for as many degrees of freedom as coordinates)
#: of the walkers' median at the last step: below that lies one draw in a thousand of
#: a Gaussian posterior.
ARRIVAL_PROBABILITY = 0.999


def arrival_step(log_prob, n_dim) -> int:
    """The first step by which every walker has reached the posterior's bulk.

    ``log_prob`` (steps, walkers). The bulk's floor is the walkers' median at the last
    step minus chi2.ppf(:data:`ARRIVAL_PROBABILITY`, n_dim) / 2; a walker arrives at its
    first step at or above it (``steps`` where it never does). Walkers that arrive at
    once give 0."""
    from scipy.stats import chi2

    log_prob = np.asarray(log_prob, dtype=float)
    if log_prob.size == 0:
        return 0
    floor = np.median(log_prob[-1]) - 0.5 * chi2.ppf(ARRIVAL_PROBABILITY, n_dim)
    reached = log_prob >= floor
    first = np.where(np.any(reached, axis=0), np.argmax(reached, axis=0), log_prob.shape[0])
    return int(np.max(first))


class ConvergenceTest:
    """The convergence criterion of this module, checked at growing lengths of one chain.

    A check at n steps passes when every coordinate's autocorrelation time tau(n) is
    finite, n >= 50 max tau(n), and every tau(n) is within 3 % of its value at the
    previous check. Each condition holds for all coordinates only if it holds for each,
    so a check computes the coordinates one at a time and stops at the first that
    fails: first the one that led (largest tau) last time, which fails most checks on
    the length alone, then the one that last moved by more than 3 %, then the rest.
    Each coordinate's estimate is computed on its own, so it is the number computing
    them all gives; only a check that passes computes every coordinate (at this check
    and the previous one). The decisions, and the step a run stops at, are those of
    computing everything at every check (tests/test_convergence_checks.py).

    Parameters
    ----------
    every_coordinate : bool
        Compute every coordinate at every check (the plain way; the reference).
    """

    def __init__(self, *, every_coordinate=False):
        self.every_coordinate = every_coordinate
        self.converged = False
        self._lead = None  # the coordinate with the largest tau seen at the last check
        self._moved = None  # the coordinate that last failed the 3 % test
        self._tau = {}  # (steps, coordinate) -> tau, for this check and the previous one
        self._checks = []  # steps of the checks so far

    def update(self, chain):
        """Check the chain so far (steps, walkers, dim); returns the tau of the
        coordinates computed (every coordinate where the check passed or where
        ``every_coordinate``) and sets :attr:`converged`."""
        n, n_dim = chain.shape[0], chain.shape[2]
        previous = self._checks[-1] if self._checks else None
        self._checks.append(n)
        keep = set(self._checks[-2:])
        self._tau = {key: v for key, v in self._tau.items() if key[0] in keep}
        if previous is None or self.every_coordinate:
            tau = self._every(chain, n)
            if previous is not None:
                tau_old = self._every(chain, previous)
                self.converged = bool(np.all(np.isfinite(tau))
                                      and n >= TAU_MULTIPLE * np.max(tau)
                                      and np.all(np.abs(tau - tau_old) <= TAU_STABILITY * tau))
            if np.all(np.isfinite(tau)):
                self._lead = int(np.argmax(tau))
            return tau
        first = [d for d in (self._lead, self._moved) if d is not None]
        order = list(dict.fromkeys(first + list(range(n_dim))))
        seen = []
        for d in order:
            tau_d = self._one(chain, n, d)
            seen.append(tau_d)
            if not (np.isfinite(tau_d) and n >= TAU_MULTIPLE * tau_d):
                break
            if not abs(tau_d - self._one(chain, previous, d)) <= TAU_STABILITY * tau_d:
                self._moved = d
                break
        else:
            self.converged = True
        finite = [(t, d) for t, d in zip(seen, order) if np.isfinite(t)]
        self._lead = max(finite)[1] if finite else self._lead
        return self._every(chain, n) if self.converged else np.array(seen)

    def _one(self, chain, n, d):
        if (n, d) not in self._tau:
            self._tau[(n, d)] = float(_autocorr(chain[:n, :, d:d + 1])[0])
        return self._tau[(n, d)]

    def _every(self, chain, n):
        missing = [d for d in range(chain.shape[2]) if (n, d) not in self._tau]
        if len(missing) == chain.shape[2]:
            for d, value in enumerate(_autocorr(chain[:n])):
                self._tau[(n, d)] = float(value)
        return np.array([self._one(chain, n, d) for d in range(chain.shape[2])])

    def tau_at(self, chain):
        """Every coordinate's tau of ``chain`` (computed once per length)."""
        return self._every(chain, chain.shape[0])


def _autocorr(chain, *, window_factor=5.0):
    """Integrated autocorrelation time of each coordinate of a (steps, walkers, dim) chain.

    emcee's estimator (``emcee.autocorr.integrated_time`` with ``tol=0``): the
    autocorrelation function of each walker's series, averaged over the walkers, summed
    up to the first lag M with M >= c tau(M) (c = ``window_factor``). emcee makes one
    FFT per walker and coordinate, and at every convergence check that cost about as
    much as the sampling between checks; here the FFTs of many walkers go in one call.
    The numbers agree with emcee's to rounding (tested).
    """
    chain = np.asarray(chain, dtype=float)
    n_steps, n_walkers, n_dim = chain.shape
    # Any padding of at least 2 n - 1 gives the same autocorrelation at lags below n
    # (emcee pads to twice the next power of two); a fast length costs less.
    size = scipy.fft.next_fast_len(max(2 * n_steps - 1, 1), real=True)
    group = max(1, _FFT_ELEMENTS // size)
    tau = np.empty(n_dim)
    # One row per walker and coordinate, contiguous along the steps (the FFT axis):
    # one transposing copy of the whole chain.
    rows = np.ascontiguousarray(chain.transpose(2, 1, 0))
    for d in range(n_dim):
        mean_acf = np.zeros(n_steps)
        for start in range(0, n_walkers, group):
            series = rows[d, start:start + group]
            series = series - series.mean(axis=1, keepdims=True)
            spectrum = scipy.fft.rfft(series, n=size, axis=1)
            acf = scipy.fft.irfft(spectrum.real ** 2 + spectrum.imag ** 2, n=size,
                                  axis=1)[:, :n_steps]
            with np.errstate(invalid="ignore", divide="ignore"):
                mean_acf += np.sum(acf / acf[:, :1], axis=0)
        mean_acf /= n_walkers
        taus = 2.0 * np.cumsum(mean_acf) - 1.0
        short = np.arange(n_steps) < window_factor * taus
        tau[d] = taus[np.argmin(short) if np.any(short) else n_steps - 1]
    return tau


#: Samples per FFT call in the autocorrelation estimate (bounds its memory).
_FFT_ELEMENTS = 2_000_000


@contextlib.contextmanager
def _interrupt_between_steps():
    """Hold Ctrl-C until the current step is done, then raise KeyboardInterrupt.

    emcee reports any exception raised inside the log-probability with a traceback on
    the terminal (and Ctrl-C mostly lands there); deferred to the end of the step, the
    interruption reaches the caller plainly, with the step complete in the checkpoint.
    A second Ctrl-C interrupts at once. Outside the main thread, or where the caller
    has its own SIGINT handler, nothing changes.
    """
    if (threading.current_thread() is not threading.main_thread()
            or signal.getsignal(signal.SIGINT) is not signal.default_int_handler):
        yield lambda: False  # not ours to change (a worker, or a caller's own handler)
        return
    pressed = []

    def hold(signum, frame):
        if pressed:
            raise KeyboardInterrupt
        pressed.append(signum)

    previous = signal.signal(signal.SIGINT, hold)
    try:
        yield lambda: bool(pressed)
    finally:
        signal.signal(signal.SIGINT, previous)

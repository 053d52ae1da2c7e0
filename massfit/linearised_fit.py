"""Sampling an integrated model through its linearised surrogate, checked exactly.

With ``[dynamics] surrogate = "linearised"`` (``--surrogate linearised``) a perturbed or
n-body fit samples :class:`massfit.model.surrogate.LinearisedPosterior` instead of
integrating every walker at every step: the compiled two-body kernel plus the
integrated model's departure from it, linearised at the start's solution (two
integrations per coordinate). The chain is then checked against the exact model:
:data:`CHECK_DRAWS` draws of it are evaluated with the integrator and weighed by
exp(ln p_exact - ln p_surrogate). Where the weights' effective sample size is below
:data:`massfit.model.surrogate.MIN_ESS_FRACTION` of the draws, the surrogate is
linearised again at the chain's median (steps of the chain's own spread) and the
chain is run again from its last walkers, at most :data:`ROUNDS` times in all, but only
after a chain that passed its autocorrelation test (an unconverged chain is reported
as such at once); a chain whose last check fails is not converged, whatever its
autocorrelation time. The
summary's ``surrogate`` block gives every round's check and the central mass's median
sampled and importance-weighted.

A checkpoint holds the first round's chain only: a resumed fit rebuilds the first
surrogate from the saved start (the same numbers) and repeats any later round.
"""

from __future__ import annotations

import copy
import time

import numpy as np

from massfit.model.surrogate import MIN_ESS_FRACTION, LinearisedPosterior, surrogate_check
from massfit.sample.chain import run_sampler
from massfit.sample.reparameterisation import SamplerCoordinates

__all__ = ["sample_linearised", "ROUNDS", "CHECK_DRAWS"]

#: Linearisations at most (the first at the start, the others at the chain's median).
ROUNDS = 3
#: Draws of each chain evaluated with the exact model.
CHECK_DRAWS = 300


def sample_linearised(model, start, initial, settings, *, checkpoint=None, resume=False):
    """The chain of ``model`` sampled through its linearised surrogate.

    Parameters
    ----------
    model : OrbitModel
        A model with integrated dynamics (its Python path is the exact model).
    start : Start
    initial : ndarray (walkers, n_dim)
        The walkers' first positions, model coordinates.
    settings : SamplerSettings
    checkpoint, resume
        As for :func:`massfit.sample.chain.run_sampler` (first round only).

    Returns
    -------
    Chain or None
        The last round's chain (model coordinates) with ``surrogate`` (the record of
        every round) and ``notes``; ``converged`` only where the last check passed.
        None where the model cannot take the surrogate (then ``model.notes`` says
        why nothing but the exact model was sampled: see :func:`fit`).
    """
    theta0 = np.asarray(start.theta, dtype=float)
    steps = np.sqrt(np.clip(np.diag(start.covariance), 1e-30, None))
    walkers = np.asarray(initial, dtype=float)
    rng = np.random.default_rng(settings.seed)
    rounds, chain = [], None
    for k in range(ROUNDS):
        cpu = time.process_time()
        surrogate = LinearisedPosterior(model, theta0, steps)
        built = time.process_time() - cpu
        sampling = copy.copy(model)
        sampling.compiled = surrogate
        coordinates = SamplerCoordinates.for_start(sampling, start.theta)
        first = k == 0
        chain = run_sampler(coordinates.log_prob, coordinates.to_sampled(walkers), settings,
                            checkpoint=checkpoint if first else None,
                            resume=resume and first, key=coordinates.mass_key(),
                            compiled=coordinates.compiled_arguments())
        coordinates.restore(chain)
        cpu = time.process_time()
        size = min(CHECK_DRAWS, len(chain.samples))
        draws = chain.samples[rng.choice(len(chain.samples), size=size, replace=False)]
        check = surrogate_check(model, surrogate, draws)
        weights = check.pop("weights")
        check.pop("exact_log_prob")
        rounds.append({"linearised_at": "the start" if first else
                       f"the median of round {k}'s chain",
                       "integrations": surrogate.integrations,
                       "largest_departure_sigma": surrogate.largest_departure,
                       "linearise_cpu_seconds": built, "steps": int(chain.steps),
                       "chain_converged": bool(chain.converged), **check,
                       "check_cpu_seconds": time.process_time() - cpu,
                       "central_mass_solar": _mass_medians(model, chain.samples, draws,
                                                           weights)})
        if check["passed"] or not chain.converged:
            # Passed; or the chain itself is not converged, which a new linearisation
            # would not mend (the fit is not converged either way).
            break
        theta0 = np.median(chain.samples, axis=0)
        steps = np.maximum(np.std(chain.samples, axis=0), 1e-12 * np.abs(theta0) + 1e-30)
        walkers = chain.walker_steps[-1]
    passed = rounds[-1]["passed"]
    chain.notes = list(getattr(chain, "notes", []))
    if not passed:
        chain.converged = False
        last = rounds[-1]
        chain.notes.append(
            f"the linearised surrogate did not match the exact model after {len(rounds)} "
            f"linearisation(s): the importance weights of {last['draws']} draws kept "
            f"{100 * last['ess_fraction']:.0f} % effective samples ("
            f"{100 * MIN_ESS_FRACTION:.0f} % needed; largest |delta chi2| "
            f"{last['largest_abs_delta_chi2']:.3g}); the chain is not converged: fit "
            f"with [dynamics] surrogate = \"none\"")
    chain.surrogate = {"kind": "linearised", "passed": passed,
                       "min_ess_fraction": MIN_ESS_FRACTION, "rounds": rounds,
                       "basis": "draws of the chain weighed by exp(ln p_exact - ln "
                                "p_surrogate), the exact model being the integrator"}
    return chain


def _mass_medians(model, samples, draws, weights):
    """The central mass's median over the chain, over the checked draws and over the
    same draws importance-weighted, and the last two's difference in the chain's sd
    (the weights' own effect: the draws' sampling noise cancels), where it is
    sampled."""
    if "central.log10_mass" not in model.names:
        return None
    k = model.names.index("central.log10_mass")
    order = np.argsort(draws[:, k])
    cumulative = np.cumsum(weights[order]) / np.sum(weights)
    weighted = 10.0 ** float(draws[order, k][min(np.searchsorted(cumulative, 0.5),
                                                 len(order) - 1)])
    drawn = float(np.median(10.0 ** draws[:, k]))
    sd = float(np.std(10.0 ** samples[:, k]))
    return {"chain_median": float(np.median(10.0 ** samples[:, k])), "draws_median": drawn,
            "reweighted_median": weighted,
            "shift_in_sd": (weighted - drawn) / sd if sd > 0 else None}

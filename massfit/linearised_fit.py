"""Sampling an integrated model through its linearised surrogate, checked exactly.

With ``[dynamics] surrogate = "linearised"`` (``--surrogate linearised``) a perturbed or
n-body fit samples :class:`massfit.model.surrogate.LinearisedPosterior` instead of
integrating every walker at every step: the compiled two-body kernel plus the
integrated model's departure from it, linearised at the start's solution (two
integrations per coordinate) and its second order from every pair of the posterior's
axes. The chain is then checked against the exact model:
:data:`CHECK_DRAWS` draws of it are evaluated with the integrator and weighed by
exp(ln p_exact - ln p_surrogate). Where the weights' effective sample size is below
:data:`massfit.model.surrogate.MIN_ESS_FRACTION` of the draws and the chain's median
moved more than :data:`RELINEARISE_SHIFT_SD` from the linearisation point, the
surrogate is linearised again at the chain's median (axes of the chain's own covariance)
and the chain is run again from its last walkers, at most :data:`ROUNDS` times in all.
Where the last check still falls short, the chain's draws are weighed by the
integrator itself (:func:`importance_resampled`: enough draws for
:data:`MIN_WEIGHED_EFFECTIVE` effective ones) and resampled; the fit is converged
only if that weighing has them and no draw carries more than
:data:`MAX_WEIGHT_SHARE` of the weight. An unconverged chain is reported as such at
once. The summary's ``surrogate`` block gives every round's check, the weighing
(``weighed``) and the central mass's median sampled and importance-weighted.

A checkpoint holds the first round's chain only: a resumed fit rebuilds the first
surrogate from the saved start (the same numbers) and repeats any later round.
"""

from __future__ import annotations

import copy
import time

import numpy as np

from massfit.model.surrogate import (
    MIN_ESS_FRACTION,
    LinearisedPosterior,
    importance_weights,
    surrogate_check,
)
from massfit.sample.chain import run_sampler
from massfit.sample.reparameterisation import SamplerCoordinates

__all__ = ["sample_linearised", "importance_resampled", "ROUNDS", "CHECK_DRAWS",
           "MIN_WEIGHED_EFFECTIVE", "MAX_WEIGHED_DRAWS", "MAX_WEIGHT_SHARE"]

#: Linearisations at most (the first at the start, the others at the chain's median).
ROUNDS = 3
#: Draws of each chain evaluated with the exact model.
CHECK_DRAWS = 300
#: A chain whose median moved less than this many steps (one Laplace sigma each)
#: from the linearisation point in every coordinate is not linearised again.
RELINEARISE_SHIFT_SD = 1.0
#: Effective draws the posterior weighed by the integrator needs (where the surrogate
#: alone falls short of ``MIN_ESS_FRACTION``).
MIN_WEIGHED_EFFECTIVE = 400
#: Draws evaluated with the integrator for that, at most.
MAX_WEIGHED_DRAWS = 3000
#: The largest share of the total weight that one weighed draw may carry.
MAX_WEIGHT_SHARE = 0.02


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
    spread = np.asarray(start.covariance, dtype=float)
    steps = np.sqrt(np.clip(np.diag(spread), 1e-30, None))
    walkers = np.asarray(initial, dtype=float)
    rng = np.random.default_rng(settings.seed)
    rounds, chain = [], None
    for k in range(ROUNDS):
        cpu = time.process_time()
        surrogate = LinearisedPosterior(model, theta0, spread)
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
        shift = float(np.max(np.abs(np.median(chain.samples, axis=0) - theta0) / steps))
        rounds.append({"linearised_at": "the start" if first else
                       f"the median of round {k}'s chain",
                       "integrations": surrogate.integrations,
                       "second_order_terms": surrogate.quadratic_terms,
                       "largest_departure_sigma": surrogate.largest_departure,
                       "linearise_cpu_seconds": built, "steps": int(chain.steps),
                       "chain_converged": bool(chain.converged), **check,
                       "check_cpu_seconds": time.process_time() - cpu,
                       "median_shift_sd": shift,
                       "central_mass_solar": _mass_medians(model, chain.samples, draws,
                                                           weights)})
        # Passed; or the chain itself is not converged, which a new linearisation
        # would not mend; or the chain stayed about the linearisation point, where a
        # new one would change little (the draws are then weighed below).
        if check["passed"] or not chain.converged or shift <= RELINEARISE_SHIFT_SD:
            break
        theta0 = np.median(chain.samples, axis=0)
        spread = np.cov(chain.samples, rowvar=False)
        steps = np.maximum(np.sqrt(np.diag(spread)), 1e-12 * np.abs(theta0) + 1e-30)
        walkers = chain.walker_steps[-1]
    weighed = None
    if not rounds[-1]["passed"] and chain.converged:
        weighed = importance_resampled(model, surrogate, chain, rounds[-1]["ess_fraction"],
                                       rng)
    _conclude(chain, rounds, weighed)
    return chain


def importance_resampled(model, surrogate, chain, fraction, rng) -> dict:
    """The chain's posterior weighed by the exact model, where the surrogate alone fell
    short of :data:`MIN_ESS_FRACTION`: enough draws of the chain for
    :data:`MIN_WEIGHED_EFFECTIVE` effective ones at the checked ``fraction``, then at
    the fraction the draws so far show (at most :data:`MAX_WEIGHED_DRAWS`), are
    evaluated with the integrator, weighed by exp(ln
    p_exact - ln p_surrogate) and resampled systematically; where that passes,
    ``chain.samples`` and ``chain.log_prob`` become the resampled draws (in place), and
    ``chain.weighed_effective`` their effective number. Self-normalised importance
    sampling with the surrogate's posterior as the proposal: sound where the proposal
    covers the exact posterior, judged by the effective draws and the largest weight's
    share (:data:`MAX_WEIGHT_SHARE`); where either falls short the chain is left as it
    was. Returns the summary's ``weighed`` record."""
    cpu = time.process_time()
    order = rng.permutation(len(chain.samples))[:MAX_WEIGHED_DRAWS]
    exact, approx, size, share = np.zeros(0), np.zeros(0), 0, 0.0
    while True:
        # Enough draws for the effective number needed at the fraction seen so far
        # (the check's at first), and for the largest weight's share to fall to the
        # limit if no larger weight turns up (a heavy tail shows only in more draws).
        wanted = int(min(len(order), max(
            np.ceil(1.5 * MIN_WEIGHED_EFFECTIVE / max(fraction, 1e-3)),
            np.ceil(size * share / MAX_WEIGHT_SHARE))))
        if wanted <= size:
            break
        batch = chain.samples[order[size:wanted]]
        exact = np.concatenate([exact, model.log_prob_python(batch)])
        approx = np.concatenate([approx, surrogate(batch)])
        size = wanted
        check = importance_weights(exact, approx)
        fraction, share = check["ess_fraction"], check["largest_weight_share"] or 1.0
        passed = check["ess"] >= MIN_WEIGHED_EFFECTIVE and share <= MAX_WEIGHT_SHARE
        if passed:
            break
    draws, weights = chain.samples[order[:size]], check["weights"]
    medians = _mass_medians(model, chain.samples, draws, weights)
    if passed:  # else the chain's own draws stay, the fit not converged
        cumulative = np.cumsum(weights) / np.sum(weights)
        picks = np.minimum(np.searchsorted(cumulative, (rng.random() + np.arange(size))
                                           / size), size - 1)
        chain.samples, chain.log_prob = draws[picks], exact[picks]
        chain.weighed_effective = check["ess"]
    return {"draws": size, "finite": check["finite"], "ess": check["ess"],
            "ess_fraction": check["ess_fraction"],
            "largest_weight_share": check["largest_weight_share"],
            "min_effective": MIN_WEIGHED_EFFECTIVE, "max_weight_share": MAX_WEIGHT_SHARE,
            "passed": bool(passed), "cpu_seconds": time.process_time() - cpu,
            "central_mass_solar": medians}


def _conclude(chain, rounds, weighed):
    """The chain's verdict, notes and ``surrogate`` block from the checks."""
    last = rounds[-1]
    passed = last["passed"]
    chain.notes = list(getattr(chain, "notes", []))
    if not passed and weighed is not None and weighed["passed"]:
        chain.notes.append(
            f"the linearised surrogate alone did not match the integrator ("
            f"{100 * last['ess_fraction']:.0f} % effective samples of {last['draws']} "
            f"draws, {100 * MIN_ESS_FRACTION:.0f} % needed): the posterior is "
            f"{weighed['draws']} draws of the chain weighed by the integrator and "
            f"resampled ({weighed['ess']:.0f} effective, the largest weight "
            f"{100 * weighed['largest_weight_share']:.1f} % of the total)")
    elif not passed:
        chain.converged = False
        why = (f"weighing {weighed['draws']} draws by the integrator left "
               f"{weighed['ess']:.0f} effective (>= {MIN_WEIGHED_EFFECTIVE} needed, the "
               f"largest weight {100 * weighed['largest_weight_share']:.1f} % of the "
               f"total, <= {100 * MAX_WEIGHT_SHARE:.0f} % allowed)" if weighed is not None
               else "the chain itself is not converged")
        chain.notes.append(
            f"the linearised surrogate did not match the exact model after {len(rounds)} "
            f"linearisation(s): the importance weights of {last['draws']} draws kept "
            f"{100 * last['ess_fraction']:.0f} % effective samples ("
            f"{100 * MIN_ESS_FRACTION:.0f} % needed; largest |delta chi2| "
            f"{last['largest_abs_delta_chi2']:.3g}) and {why}; the chain is not "
            f"converged: fit with [dynamics] surrogate = \"none\"")
    chain.surrogate = {"kind": "linearised",
                       "passed": bool(passed or (weighed is not None and weighed["passed"])),
                       "min_ess_fraction": MIN_ESS_FRACTION, "rounds": rounds,
                       "weighed": weighed,
                       "basis": "draws of the chain weighed by exp(ln p_exact - ln "
                                "p_surrogate), the exact model being the integrator"}


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

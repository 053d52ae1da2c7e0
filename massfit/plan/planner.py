"""Planning observations: the next epochs that shrink the central mass's uncertainty most.

:func:`plan_observations` takes an assumed system (:class:`~massfit.plan.system.AssumedSystem`)
or a finished fit (its output folder) and a schedule of candidate epochs
(:class:`~massfit.plan.schedule.Schedule`); the information comes from
:mod:`massfit.plan.forecast` (the Fisher matrix) or :mod:`massfit.plan.posterior` (the
posterior ensemble), the greedy choice from :mod:`massfit.plan.choice`, the optional
simulated check from :mod:`massfit.plan.checks`, and the answer is a
:class:`~massfit.plan.result.PlanResult`.
"""
from __future__ import annotations

import math
import os

import numpy as np

from massfit.errors import ConfigError
from massfit.plan.checks import check_schedule
from massfit.plan.choice import evenly_spaced, planned_curve, ranking_table, sigma_of
from massfit.plan.forecast import FisherInformation, precision_block
from massfit.plan.modes import mode_labels, read_modes, separating_epochs
from massfit.plan.posterior import EnsembleInformation, Posterior, read_posterior
from massfit.plan.result import PlanResult, mass_unit
from massfit.plan.schedule import Schedule, empty_schedule
from massfit.plan.system import AssumedSystem
from massfit.sample.chain import check_seed

__all__ = ["plan_observations"]


def plan_observations(source, candidates: Schedule, *, observed: Schedule | None = None,
                      n_next: int = 5, check: int = 0, check_steps: int = 2000,
                      seed: int = 0) -> PlanResult:
    """Forecast the central mass's precision and choose the next epochs.

    Parameters
    ----------
    source : AssumedSystem, Posterior or path
        An assumed system (Fisher forecast at its elements), or a finished fit
        (its output folder or :func:`read_posterior`).
    candidates : Schedule
        The epochs that could be observed, with their expected errors.
    observed : Schedule, optional
        Epochs already in hand (an assumed system only; a fit's posterior holds its
        own data).
    n_next : int
        How many next epochs to choose, one after another (greedy).
    check : int
        How many schedules to simulate and fit to test the forecast (assumed system
        only): the planned one, the evenly spaced one, then all candidates.
    check_steps : int
        Step cap of each check's chain.
    seed : int
        Seed of the simulated noise, the chains and the subsample of the posterior.

    Returns
    -------
    PlanResult
    """
    if not isinstance(n_next, int) or isinstance(n_next, bool) or n_next < 1:
        raise ConfigError("the number of next epochs must be a whole number of at least 1",
                          key="--next")
    if not isinstance(check, int) or isinstance(check, bool) or not 0 <= check <= 3:
        raise ConfigError("check is a whole number from 0 to 3 (schedules to simulate)",
                          key="--check")
    if not isinstance(check_steps, int) or isinstance(check_steps, bool) or check_steps < 100:
        raise ConfigError("the check's step cap must be a whole number of at least 100",
                          key="--check-steps")
    check_seed(seed, key="--seed")
    if len(candidates) == 0:
        raise ConfigError("there are no candidate epochs", key="--candidates")
    modes = []
    if isinstance(source, (str, os.PathLike)):
        modes = read_modes(source)
        source = read_posterior(source)
    if isinstance(source, Posterior):
        if observed is not None and len(observed):
            raise ConfigError("a fit's posterior already holds its observations; give "
                              "no observed epochs with it", key="--observed")
        result = _plan_posterior(source, candidates, n_next, seed)
        if modes:
            _add_mode_separation(result, source, candidates, modes)
        if check:
            result.notes.append("no simulated check was run: checks need an assumed "
                                "system (a fit's posterior has no truth to simulate from)")
        return result
    if not isinstance(source, AssumedSystem):
        raise ConfigError("plan from an AssumedSystem, a Posterior or a fit's output folder",
                          key="source")
    return _plan_assumed(source, candidates, observed, n_next, check, check_steps, seed)


def _plan_assumed(system, candidates, observed, n_next, check, check_steps, seed):
    observed = observed if observed is not None else empty_schedule(candidates.error.unit)
    schedule = observed.join(candidates)
    info = FisherInformation(system, schedule)
    baseline = list(range(len(observed)))
    cand = list(range(len(observed), len(schedule)))
    now_var = info.variance(baseline) if baseline else math.inf
    notes = []
    ridge = None
    if not math.isfinite(now_var):
        ridge = info.ridge()
        notes.append("the epochs in hand leave the mass undetermined, so the first epochs "
                     "were chosen with a weak prior (widths of 3 dex in mass and period, "
                     "the full range of the other coordinates); the precisions reported "
                     "use the data and the stated priors alone")
    times_jd = candidates.tdb_jd
    mass = system.central_mass.to(mass_unit(system.central_mass))
    order, planned, curve = planned_curve(info, baseline, cand, times_jd, n_next, mass, ridge)
    singles = info.trial_variances(baseline, cand)
    ranking = ranking_table(candidates, cand, order, planned, singles, now_var)
    all_var = info.variance(baseline + cand)
    result = PlanResult(
        method="fisher", central_mass=mass,
        current=precision_block(now_var, mass, len(baseline)),
        all_candidates=precision_block(all_var, mass, len(schedule)),
        ranking=ranking, curve=curve, notes=notes,
        inputs={"now": f"{len(baseline)} epoch(s) in hand", "candidates": candidates.source,
                "observed": observed.source if len(observed) else None,
                "error_text": _error_text(candidates.error),
                "parallax_prior": system.parallax_err is not None,
                "coordinates": info.model.names})
    if check:
        plans = [("planned", baseline + order), ("evenly spaced",
                 baseline + [cand[k] for k in evenly_spaced(times_jd, len(order))]),
                 ("all candidates", baseline + cand)]
        for label, index in plans[:check]:
            result.checks.append(check_schedule(system, schedule.select(index), label,
                                                 len(index) - len(baseline),
                                                 sigma_of(info.variance(index)), check_steps,
                                                 seed + len(result.checks)))
    return result


def _error_text(error):
    lo, hi = np.min(error), np.max(error)
    return f"{lo:.3g}" if lo == hi else f"{lo:.3g} to {hi:.3g}"


def _add_mode_separation(result, posterior, candidates, modes):
    """The epochs that best tell the fit's weighed modes apart (:mod:`massfit.plan.modes`)."""
    labels = mode_labels(posterior.companions, modes)
    kept = [k for k in range(len(modes)) if np.sum(labels == k) >= 10]
    if len(kept) < 2:
        return
    labels = np.array([kept.index(k) if k in kept else -1 for k in labels])
    probabilities = [modes[k]["probability"] for k in kept]
    result.mode_separation = separating_epochs(posterior, candidates, labels, probabilities)
    best = result.mode_separation[0]
    result.notes.append(
        f"the fit has {len(kept)} weighed modes; the epoch that best tells them apart is "
        f"{best['time_utc'][:19]} UTC: the bound on picking the wrong mode goes from "
        f"{best['wrong_mode_bound_now']:.3f} to {best['wrong_mode_bound_after']:.3g} "
        f"(the modes' predictions differ there by up to "
        f"{best['largest_separation_sigma']:.1f} errors; see mode_separation)")


def _plan_posterior(posterior, candidates, n_next, seed):
    info = EnsembleInformation(posterior, candidates, seed=seed)
    cand = list(range(len(candidates)))
    now_var = info.variance([])
    mass = posterior.central_mass()
    unit = mass_unit(mass)
    mass = mass.to(unit)
    order, planned, curve = planned_curve(info, [], cand, candidates.tdb_jd, n_next, mass)
    singles = info.trial_variances([], cand)
    ranking = ranking_table(candidates, cand, order, planned, singles, now_var,
                             spread=info.spread_per_epoch(),
                             spread_unit=candidates.error.unit)
    notes = ["the posterior is updated linearly (as a Gaussian would be); where it is far "
             "from Gaussian (several period modes, a short arc) the ranking is a guide, "
             "and a refit after each new epoch tells the truth"]
    if posterior.dropped:
        notes.append(f"{posterior.dropped} posterior sample(s) with a non-finite element "
                     f"were left out")
    if posterior.converged is False:
        notes.append("the fit this plan starts from did NOT converge; its posterior, and "
                     "so this plan, may be too narrow or too wide")
    return PlanResult(
        method="posterior", central_mass=mass,
        current=precision_block(now_var, mass, 0),
        all_candidates=precision_block(info.variance(cand), mass, len(cand)),
        ranking=ranking, curve=curve, notes=notes,
        inputs={"now": f"posterior of {posterior.source}", "candidates": candidates.source,
                "error_text": _error_text(candidates.error),
                "posterior_samples": int(posterior.gm.size)})

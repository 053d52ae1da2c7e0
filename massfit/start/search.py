"""Starting points without guesses: periodograms, a linear scan, then least squares.

For each companion on its own:

1. Candidate periods (:mod:`massfit.start.aliases`): Lomb-Scargle peaks of the east and north
   offsets, the aliases the sampling cadence makes of the best peaks (below half the
   spacing of the data too), and periods longer than the time span for short arcs.
2. For each candidate period, a grid of eccentricities and periapsis times makes the
   offsets linear in the Thiele-Innes constants, solved by weighted least squares.
3. The best grid points are polished by non-linear least squares (scipy) on that
   companion alone, with its own central mass.

Then all companions are joined with one central mass and polished together. Distinct
solutions whose chi^2 is close to the best are polished jointly as candidate *modes*
(period aliases, mostly) and weighed by their posterior mass (the Laplace estimate of
:mod:`massfit.start.modes`); the walkers start in a small ball about the heaviest one,
shaped by the least-squares covariance."""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from massfit.model.orbit_model import OrbitModel
from massfit.orbits.dynamics import Keplerian
from massfit.priors import Fixed
from massfit.start.joint import best_combination, comparable_modes, joint_polish
from massfit.start.least_squares import parameter_bounds, values_from_theta
from massfit.start.modes import laplace_log_mass, merge_same_modes
from massfit.start.progress import start_reporter
from massfit.start.result import COMPARABLE_DELTA_CHI2, WEIGH_DELTA_CHI2, Start
from massfit.start.scan import check_rows_from_primary, single_companion_modes
from massfit.start.staged import perturbed_start, sight_start, staged_start
from massfit.start.velocities import velocity_only_start

__all__ = ["Start", "find_start", "two_body_start"]

#: Runner-up solutions of each companion weighed at most.
_ALTERNATIVES = 4


def find_start(model: OrbitModel, *, rng=None, progress=None) -> Start:
    """Find the best joint solution and any comparable modes.

    Parameters
    ----------
    model : OrbitModel
        The joint model; its angle windows are re-centred on the result.
    rng : numpy.random.Generator, optional
        Used only to break ties in the walker ball later; the search is deterministic.
    progress : bool, optional
        Report the stages of an integrated model's start on stderr (default: when
        stderr is a terminal).

    Returns
    -------
    Start
    """
    say = start_reporter(progress)
    if model.velocity_only:
        say(f"periodogram and scan of the velocities for {len(model.companions)} "
            f"companion(s)")
        return velocity_only_start(model)
    check_rows_from_primary(model)
    if getattr(model.dynamics, "start_evaluations", None):
        return staged_start(model, two_body_start(model), progress)
    if type(model.dynamics) is not Keplerian:
        return perturbed_start(model, two_body_start(model))
    if model.sight is not None:
        return sight_start(model)
    singles = {}
    for k, name in enumerate(model.companions):
        say(f"period search for '{name}' ({k + 1} of {len(model.companions)} "
            f"companion(s))")
        singles[name] = single_companion_modes(model, name)
    say("joint least squares of the companions' best periods")
    best, joint = best_combination(model, singles)
    found = [_mode_record(model, joint, best)]
    # Each companion's runner-ups, swapped into the joint solution, are candidate
    # modes. They are weighed by their posterior mass, not by chi^2: a worse fit in a
    # wider stretch of the log-uniform priors can hold more of the posterior.
    for name, candidates in singles.items():
        for alt in comparable_modes(candidates, WEIGH_DELTA_CHI2)[:_ALTERNATIVES + 1]:
            if alt is best[name]:
                continue
            say(f"weighing the alternative period {alt['period']:.6g} d of '{name}'")
            trial = dict(best, **{name: alt})
            result = joint_polish(model, trial)
            if result[0] is not None:
                found.append(_mode_record(model, result, trial))
    weighed = merge_same_modes(found)
    chosen = weighed[0]  # the walkers start in the mode of largest weight
    theta, chi2, covariance = chosen.pop("_joint")
    chosen_values = chosen.pop("_values")
    model.recentre(theta)
    modes = []
    for mode in weighed[1:]:
        mode.pop("_joint"), mode.pop("_values")
        delta = mode["chi2"] - chi2
        if delta < COMPARABLE_DELTA_CHI2:
            body = _differing_body(mode, chosen)
            modes.append({"body": body, "period": mode["periods"][body],
                          "central_mass": mode["central_mass"], "delta_chi2": float(delta),
                          "best_period": chosen["periods"][body],
                          "weight": mode["weight"]})
    chosen["started"] = True
    for mode in weighed[1:]:
        mode["started"] = False
    per = {name: {"period": m["period"], "central_mass": m["central_mass"],
                  "chi2": m["chi2"], "rows": m["rows"]} for name, m in chosen_values.items()}
    return Start(theta=theta, chi2=chi2, covariance=covariance, modes=modes,
                 per_companion=per, candidate_modes=weighed)


def _mode_record(model, joint, values):
    """A joint solution as a candidate mode: periods, mass, Laplace mass.

    Evaluated right after its polish, while the angle windows are centred on it.
    """
    theta, chi2, covariance = joint
    model.recentre(theta)
    low, high = parameter_bounds(model)
    phys = model.physical(theta[None, :])
    names = model.names
    periods, sd = {}, {}
    for name in model.companions:
        periods[name] = float(phys["companions"][name]["period"][0])
        k = names.index(f"{name}.log10_period") if f"{name}.log10_period" in names else None
        sd[name] = 0.0 if k is None else float(np.sqrt(max(covariance[k, k], 0.0)))
    mass = phys["central_mass"]
    return {"periods": periods, "log10_period_sd": sd,
            "central_mass": None if mass is None else float(mass[0]),
            "window_centres": {n: dict(c) for n, c in model.centres.items()},
            "chi2": float(chi2),
            "log_laplace_mass": laplace_log_mass(model.log_prob, theta, covariance,
                                                 widths=high - low),
            "_joint": joint, "_values": values}


def _differing_body(mode, other):
    """The companion whose period differs most between two modes."""
    return max(mode["periods"],
               key=lambda n: abs(np.log10(mode["periods"][n] / other["periods"][n])))


def two_body_start(model):
    """The two-body search on a model's data: (two-body model, its Start, its values).

    The companions' masses are fixed at zero there: astrometry alone fixes only
    M1 + m_k for each orbit, and leaving the masses free would only give the least
    squares degenerate directions to wander along (and cost it time).
    """
    companions = {name: replace(comp, mass=Fixed(0.0))
                  for name, comp in model.companions.items()}
    spec = replace(model.spec, dynamics=Keplerian(), companions=companions,
                   strict_companions=True)
    two_body = OrbitModel(model.observations, spec)
    found = find_start(two_body)
    return two_body, found, values_from_theta(two_body, found.theta)

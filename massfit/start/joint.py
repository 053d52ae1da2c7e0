"""All companions joined with one central mass: the comparable single-companion solutions
combined and polished together.
"""

from __future__ import annotations

import itertools

import numpy as np

from massfit.errors import ModelError
from massfit.start.least_squares import chi2_at, covariance_at, solve_least_squares
from massfit.start.result import COMPARABLE_DELTA_CHI2
from massfit.start.scan import parallax_guess
from massfit.start.velocities import with_velocities

__all__ = ["best_combination", "comparable_modes", "joint_polish"]

_COMBINE = 5

_JOINT_TRIES = 4


def comparable_modes(modes, delta=COMPARABLE_DELTA_CHI2):
    """Single solutions (best first) whose chi^2 is within ``delta`` of the best one's
    (or 10 % of it, for fits poorer than their errors)."""
    limit = modes[0]["chi2"] + max(delta, 0.1 * modes[0]["chi2"])
    return [m for m in modes if m["chi2"] <= limit]


def best_combination(model, singles):
    """The joint start from the companions' single solutions that agree on the mass.

    Sparse sampling leaves a companion with several aliases of nearly equal chi^2,
    each implying its own central mass; only the shared mass tells them apart. The
    combinations of comparable single solutions whose masses agree best are polished
    jointly, and the lowest joint chi^2 wins.
    """
    comparable = {name: comparable_modes(modes)[:_COMBINE] for name, modes in singles.items()}
    combos = list(itertools.islice(itertools.product(*comparable.values()), 20_000))
    spread = [np.var([np.log(max(m["central_mass"], 1e-300)) for m in combo])
              for combo in combos]
    order = np.argsort(spread, kind="stable")[:_JOINT_TRIES]
    trials = [dict(zip(comparable, combos[k])) for k in order]
    first = {name: modes[0] for name, modes in singles.items()}
    if first not in trials:
        trials.insert(0, first)
    best, joint = None, (None, np.inf, None)
    for chosen in trials:
        result = joint_polish(model, chosen)
        if result[0] is not None and result[1] < joint[1]:
            best, joint = chosen, result
    if best is None:
        raise ModelError("the joint fit of all companions failed from every starting "
                         "orbit; fit the companions one by one to find the one at fault")
    return best, joint


# -------------------------------------------------------------------- joint fit
def joint_polish(model, chosen):
    values = {"central_mass": _joint_mass(model, chosen)}
    if model.needs_parallax and model.spec.parallax is not None:
        values["parallax"] = parallax_guess(model.spec.parallax)
    for name, sol in chosen.items():
        values[name] = dict(sol["orbit"])
    if model.velocity_rows is not None:
        values = with_velocities(model, values)
    theta = solve_least_squares(model, values, rounds=3)
    if theta is None:
        return None, np.inf, None
    return theta, chi2_at(model, theta), covariance_at(model, theta)


def _joint_mass(model, chosen):
    # Weight each companion's own mass estimate by its number of rows: a rough but
    # robust start; the joint least squares does the real combining.
    masses = np.array([sol["central_mass"] for sol in chosen.values()])
    weights = np.array([len(model.rows[name].t) for name in chosen])
    return float(np.exp(np.sum(weights * np.log(masses)) / np.sum(weights)))

"""The start step's result: the walkers' starting point, the modes it found, and the thresholds
that call two solutions comparable.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from massfit.errors import ModelError
from massfit.model.orbit_model import OrbitModel
from massfit.start.least_squares import parameter_bounds

__all__ = ["COMPARABLE_DELTA_CHI2", "Start", "WEIGH_DELTA_CHI2"]

#: Modes whose chi^2 is within this of the best are reported as comparable. A
#: difference of 2 ln L = 25 is decisive by common practice (a "5 sigma" step).
COMPARABLE_DELTA_CHI2 = 25.0

#: Single-companion solutions within this chi^2 of the best are polished jointly and
#: weighed: beyond it a mode would need a prior volume e^20 / 100 (5e6) times the
#: best one's to reach a weight of 1 %.
WEIGH_DELTA_CHI2 = 40.0


@dataclass
class Start:
    """The outcome of :func:`find_start`.

    Attributes
    ----------
    theta : ndarray
        Best joint solution in the model's sampled coordinates.
    chi2 : float
        Its chi^2.
    covariance : ndarray
        Least-squares covariance at ``theta`` (a Laplace approximation).
    modes : list of dict
        Other solutions with comparable chi^2: ``body``, ``period`` (d),
        ``central_mass`` (M_sun), ``delta_chi2``, ``best_period``, ``weight``.
    candidate_modes : list of dict
        Every distinct joint solution found, largest posterior mass first (see
        :mod:`massfit.start.modes`): ``periods`` and ``log10_period_sd`` per companion,
        ``central_mass`` (M_sun), ``chi2``, ``log_laplace_mass``, ``weight`` and
        ``started`` (the walkers start in that one).
    per_companion : dict
        name -> best single-companion solution (``period``, ``central_mass``, and
        ``chi2`` over the ``rows`` it was searched on: a random subset of
        ``SEARCH_ROWS`` where the companion has more).
    notes : list of str
        What the summary's warnings must say about the start (e.g. a least-squares
        pass stopped at its cap of evaluations).
    """

    theta: np.ndarray
    chi2: float
    covariance: np.ndarray
    modes: list = field(default_factory=list)
    per_companion: dict = field(default_factory=dict)
    candidate_modes: list = field(default_factory=list)
    notes: list = field(default_factory=list)

    def walkers(self, model: OrbitModel, n_walkers: int, rng) -> np.ndarray:
        """A ball of ``n_walkers`` starting points, all inside the prior's support."""
        scale = np.sqrt(np.clip(np.diag(self.covariance), 1e-16, None))
        cov = self.covariance if np.all(np.isfinite(self.covariance)) else np.diag(scale ** 2)
        # Ensemble moves only explore the span of the walkers: a rank-deficient
        # covariance (a degenerate combination of parameters) would trap them in a
        # subspace, so every direction gets a little width of its own.
        cov = cov + np.diag((1e-3 * scale) ** 2)
        points = np.empty((n_walkers, model.n_dim))
        filled = 0
        for shrink in (1.0, 0.3, 0.1, 0.03, 0.01, 1e-3, 1e-4):
            try:
                trial = rng.multivariate_normal(self.theta, cov * shrink ** 2,
                                                size=4 * n_walkers,
                                                check_valid="ignore")
            except np.linalg.LinAlgError:
                trial = self.theta + shrink * scale * rng.standard_normal(
                    (4 * n_walkers, model.n_dim))
            filled = _take_inside(model, trial, points, filled)
            if filled == n_walkers:
                return points
        # The best fit can sit on the edge of several priors at once (short arcs run
        # to the largest period, mass and eccentricity allowed), where a ball about it
        # is mostly outside: fall back on a tiny box ball pulled inside the bounds.
        low, high = parameter_bounds(model)
        width = np.where(np.isfinite(high - low), high - low, 1.0)
        for _ in range(20):
            trial = self.theta + 1e-6 * width * rng.standard_normal((4 * n_walkers,
                                                                     model.n_dim))
            trial = np.clip(trial, low + 1e-7 * width, high - 1e-7 * width)
            filled = _take_inside(model, trial, points, filled)
            if filled == n_walkers:
                return points
        raise ModelError("could not place the walkers inside the prior's support: the "
                         "best fit lies at the edge of a prior; widen that prior")


def _take_inside(model, trial, points, filled) -> int:
    """Copy the ``trial`` points inside the prior's support into ``points`` after the
    first ``filled``, as many as fit, in order; return the new count.

    The prior screens every point; the whole log-posterior is evaluated only on as
    many as are still needed (an integrated model costs a whole integration a point:
    a fit of four moons with 240 walkers spent minutes on the 960 trial points)."""
    inside = trial[np.isfinite(model.log_prior(np.atleast_2d(trial)))]
    used = 0
    while filled < len(points) and used < len(inside):
        chunk = inside[used:used + len(points) - filled]
        used += len(chunk)
        good = chunk[np.isfinite(model.log_prob(chunk))]
        points[filled:filled + len(good)] = good
        filled += len(good)
    return filled

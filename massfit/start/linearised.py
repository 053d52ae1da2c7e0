"""Least squares of an integrated model through its linearised departure from two-body orbits.

A trust-region least squares on an integrated model (J2, J4, mutual pulls) needs a
Jacobian, i.e. one integration per coordinate, at every iteration, and on resonant
moons it takes tens of iterations per stage of the start: most of the start's time.
The departure of the integrated orbits from the two-body ones with the same elements
is large (thousands of errors) but smooth, and nearly linear over the steps a polish
makes, so here the least squares runs on

    r(u) ~ r2(u0 + M (u - u0)) + [r(u0) - r2(u0)] + R (u - u0),

the whitened residuals r of the model written as the two-body model's r2 (cheap) plus
the departure, linear about u0 (u: the model's coordinates with companions' log10
masses as masses, in which pulls are linear). R and M are those of
:class:`massfit.model.surrogate.LinearisedPosterior`, in residual space: the exact
Jacobian by central differences (two integrations per coordinate, in one call), M the
two-body coordinates' change that follows it best and R what is left. The two-body
least squares on that is solved to its minimum; the integrated model's own chi^2 there
decides whether the step is taken (else it is halved), and the departure is linearised
again at the new point, until chi^2 falls by less than :data:`SETTLED_CHI2`. Each
round costs 2 n + 1 integrations against the exact least squares' n + 1 per iteration.
"""

from __future__ import annotations

import numpy as np
from scipy.optimize import least_squares

from massfit.model.derivatives import difference_jacobian
from massfit.model.surrogate import (
    linear_coordinates,
    log10_mass_columns,
    model_coordinates,
    two_body_twin,
)
from massfit.start.least_squares import (
    batch_residuals,
    chi2_at,
    covariance_at,
    parameter_bounds,
)

__all__ = ["linearised_least_squares", "SETTLED_CHI2", "ROUNDS"]

#: Linearisations at most.
ROUNDS = 8
#: A round that lowers the integrated model's chi^2 by less than this ends the polish.
SETTLED_CHI2 = 0.05
#: Evaluations of the linearised residuals in one round's least squares at most.
INNER_EVALUATIONS = 200


def linearised_least_squares(model, theta, *, rounds=ROUNDS, say=None):
    """Polish ``theta`` (the model's coordinates) through the linearised departure.

    Returns (theta, chi2, integrations): the best point found (``theta`` itself where
    no round lowered chi^2), the integrated model's chi^2 there and the number of
    integrated orbits computed.
    """
    power = log10_mass_columns(model)
    low, high = parameter_bounds(model)
    u_low, u_high = linear_coordinates(low, power), linear_coordinates(high, power)
    twin = two_body_twin(model)
    kept = power == 0
    theta = np.asarray(theta, dtype=float)
    chi2 = chi2_at(model, theta)
    steps = _steps(twin, theta, power)
    integrations = 1
    for k in range(rounds):
        u0 = linear_coordinates(theta, power)
        step = np.minimum(steps, 0.25 * (u_high - u_low))

        slope = difference_jacobian(
            lambda points: batch_residuals(model, model_coordinates(points, power)), u0,
            step, central=True)
        plain = difference_jacobian(
            lambda points: batch_residuals(twin, model_coordinates(points, power)), u0,
            step, central=True)
        integrations += 2 * u0.size
        mix = np.zeros((u0.size, u0.size))
        mix[kept] = np.linalg.lstsq(plain[:, kept], slope, rcond=1e-12)[0]
        rest = slope - plain @ mix
        base = (batch_residuals(model, theta[None]) - batch_residuals(twin, theta[None]))[0]
        integrations += 1

        def linearised(points):
            du = np.atleast_2d(points) - u0
            with np.errstate(all="ignore"):  # the two-body trial points may run wild
                return (batch_residuals(twin, model_coordinates(u0 + du @ mix.T, power))
                        + base + du @ rest.T)

        inside = np.clip(u0, u_low + 1e-12 * np.abs(u_low), u_high - 1e-12 * np.abs(u_high))
        tiny = 1e-4 * step  # forward differences of the (cheap) linearised residuals
        try:
            fit = least_squares(lambda u: linearised(u)[0], inside, bounds=(u_low, u_high),
                                jac=lambda u: difference_jacobian(linearised, u, tiny),
                                method="trf", x_scale="jac", max_nfev=INNER_EVALUATIONS)
        except (ValueError, np.linalg.LinAlgError):
            break
        moved, moved_chi2 = None, np.inf
        for shrink in (1.0, 0.5, 0.25):
            trial = model_coordinates(u0 + shrink * (fit.x - u0), power)
            trial_chi2 = chi2_at(model, trial)
            integrations += 1
            if trial_chi2 < chi2:
                moved, moved_chi2 = trial, trial_chi2
                break
        if say is not None:
            say(f"linearised round {k + 1}: chi2 {chi2:.6g} -> "
                + (f"{moved_chi2:.6g}" if moved is not None else "not lowered"))
        if moved is None:
            break
        settled = chi2 - moved_chi2 < SETTLED_CHI2
        theta, chi2 = moved, moved_chi2
        if settled:
            break
        steps = _laplace_steps(slope, u0, power, steps)
    return theta, chi2, integrations


def _steps(model, theta, power):
    """Steps of the first linearisation: the two-body model's Laplace sigma per
    coordinate; a companion's mass (which two-body orbits hardly measure) a tenth of
    itself."""
    sigma = np.sqrt(np.clip(np.diag(covariance_at(model, theta)), 1e-30, None))
    u = linear_coordinates(theta, power)
    return np.where(power == 1, 0.1 * u, np.minimum(sigma, 1.0))


def _laplace_steps(slope, u, power, previous):
    """One Laplace sigma per coordinate from the exact Jacobian (the previous steps
    where it is singular), a mass's at most half of itself."""
    try:
        sigma = np.sqrt(np.clip(np.diag(np.linalg.pinv(slope.T @ slope)), 1e-30, None))
    except np.linalg.LinAlgError:
        return previous
    return np.where(power == 1, np.minimum(sigma, 0.5 * u), sigma)

"""Non-linear least squares on a model: parameter bounds from the priors, the residuals (data
and priors), their Jacobian, the trust-region solve, chi^2 and the covariance at a solution.
"""

from __future__ import annotations

import numpy as np
from scipy.optimize import least_squares

from massfit.model.derivatives import difference_jacobian
from massfit.priors import Normal

__all__ = [
    "CHUNK_ELEMENTS",
    "batch_residuals",
    "centre_guess",
    "chi2_at",
    "covariance_at",
    "orbit_dict",
    "parameter_bounds",
    "prior_residuals",
    "residual_function",
    "solve_least_squares",
    "values_from_theta",
]


def orbit_dict(phys, name):
    return {k: float(v[0]) for k, v in phys["companions"][name].items()}


# ------------------------------------------------------------- least squares
def parameter_bounds(model):
    low = np.empty(model.n_dim)
    high = np.empty(model.n_dim)
    for k, param in enumerate(model.parameters):
        lo, hi = param.low, param.high
        if param.transform == "log10":
            lo = np.log10(param.prior.low) if param.prior.low > 0 else -np.inf
            hi = np.log10(param.prior.high) if np.isfinite(param.prior.high) else np.inf
        elif param.transform == "identity":
            lo, hi = max(lo, param.prior.low), min(hi, param.prior.high)
        elif param.transform == "disc":
            lo, hi = -0.995, 0.995
        elif param.transform == "window" and not param.name.endswith(".omega"):
            body, kind = param.name.rsplit(".", 1)
            lo, hi = model.window(body, kind)
        low[k], high[k] = lo, hi
    return low, high


def prior_residuals(model, theta):
    """Gaussian priors on directly sampled quantities act as extra residuals."""
    out = []
    for k, param in enumerate(model.parameters):
        if param.transform == "identity" and isinstance(param.prior, Normal):
            out.append((theta[k] - param.prior.mean) / param.prior.sd)
    return np.array(out)


def residual_function(model):
    def fun(theta):
        return batch_residuals(model, theta[None, :])[0]
    return fun

#: Parameter vectors times data rows evaluated in one piece (bounds memory on big sets).
CHUNK_ELEMENTS = 2_000_000


def batch_residuals(model, thetas):
    """Whitened residuals and prior residuals of every row of ``thetas`` (n, n_dim),
    non-finite values as 1e6; at most :data:`CHUNK_ELEMENTS` in one piece."""
    step = max(1, CHUNK_ELEMENTS // max(_rows(model), 1))
    res = np.concatenate([model.residuals(thetas[k:k + step], lenient=True)
                          for k in range(0, len(thetas), step)])
    prior = np.array([prior_residuals(model, theta) for theta in thetas])
    res = np.concatenate([res, prior.reshape(len(thetas), -1)], axis=1)
    return np.where(np.isfinite(res), res, 1e6)


def _jacobian_function(model, low=None, high=None, rel_step=None):
    """Forward-difference Jacobian with every shifted point in ONE vectorised call.

    The step defaults to scipy's for '2-point' (sqrt(eps) max(1, |x|)), taken
    backwards where a forward step would leave the bounds.
    """
    rel = np.sqrt(np.finfo(float).eps) if rel_step is None else rel_step

    def jac(theta):
        step = rel * np.maximum(1.0, np.abs(theta))
        if high is not None:
            step = np.where(theta + step > high, -step, step)
        # A big data set: one shifted point at a time into one array (the same numbers)
        big = (theta.size + 1) * _rows(model) > CHUNK_ELEMENTS
        return difference_jacobian(lambda points: batch_residuals(model, points), theta, step,
                                   one_at_a_time=big)
    return jac


def _trust_region_solver(model) -> str:
    """scipy's 'exact' steps (an SVD of the Jacobian) unless the data set is big.

    The SVD holds three more copies of the Jacobian (~400 MB at 1e6 rows); LSMR
    works with products alone.
    """
    values = 2 * _rows(model)  # two per astrometric row (one per velocity: an upper bound)
    return "lsmr" if values * model.n_dim > _EXACT_ELEMENTS else "exact"

#: Jacobian elements (values x parameters) beyond which the start's steps use LSMR.
_EXACT_ELEMENTS = 5_000_000


def _rows(model) -> int:
    obs = model.observations
    return sum(len(part) for part in (obs.astrometry, obs.velocities) if part is not None)


def solve_least_squares(model, values, *, rounds=2, max_nfev=None, capped=None):
    """Polish physical starting values; returns sampled coordinates or None.

    ``capped``, a list, gets an entry for each pass that stopped at ``max_nfev``."""
    model.recentre(centre_guess(model, values))
    theta = model.from_physical(values)
    fun = residual_function(model)
    for _ in range(rounds):
        low, high = parameter_bounds(model)
        width = np.where(np.isfinite(high - low), high - low, 1.0)
        theta = np.clip(theta, low + 1e-9 * width, high - 1e-9 * width)
        try:
            fit = least_squares(fun, theta, jac=_jacobian_function(model, low, high),
                                bounds=(low, high), method="trf", x_scale="jac",
                                max_nfev=max_nfev or 400 * model.n_dim,
                                tr_solver=_trust_region_solver(model))
        except (ValueError, np.linalg.LinAlgError):
            return None
        if capped is not None and fit.status == 0:
            capped.append(fit.nfev)
        theta = model.recentre(fit.x)
        theta = model.from_physical(values_from_theta(model, theta))
    if not np.isfinite(model.log_prob(theta[None, :])[0]):
        return None
    return theta


def centre_guess(model, values):
    theta = np.zeros(model.n_dim)
    for name in model.companions:
        orbit = values[name]
        if not model.velocity_only:
            theta[model.column_of[f"{name}.node"]] = orbit["node"]
        theta[model.column_of[f"{name}.phase"]] = orbit["mean_anomaly_ref"] + orbit["omega"]
    return theta


def values_from_theta(model, theta):
    phys = model.physical(theta[None, :], lenient=True)
    values = {"central_mass": None if phys["central_mass"] is None
              else float(phys["central_mass"][0]),
              "parallax": None if phys["parallax"] is None else float(phys["parallax"][0])}
    for name in model.companions:
        values[name] = orbit_dict(phys, name)
        # Stay inside the eccentricity prior: the least-squares box on the disc
        # coordinates allows e up to 0.99 whatever the prior's upper end.
        ecc_prior = model.companions[name].eccentricity
        top = 0.98 if ecc_prior.is_fixed else min(0.98, 0.999 * ecc_prior.high)
        values[name]["ecc"] = min(values[name]["ecc"], top)
    if phys.get("frame") is not None:
        values["frame"] = {key: float(value[0]) for key, value in phys["frame"].items()}
    if "precession_scale" in phys:
        values["precession_scale"] = float(phys["precession_scale"][0])
    if "rv" in phys:
        rv = phys["rv"]
        labels = model.velocity_rows.labels
        values["rv"] = {"offset": dict(zip(labels, rv["offset"][0])),
                        "jitter": dict(zip(labels, rv["jitter"][0])),
                        "slope": float(rv["slope"][0]),
                        "curvature": float(rv["curvature"][0])}
    return values


def chi2_at(model, theta):
    res = model.residuals(theta[None, :])[0]
    return float(np.sum(res * res))


def covariance_at(model, theta):
    jac = _jacobian_function(model, rel_step=1e-6)(theta)
    try:
        cov = np.linalg.pinv(jac.T @ jac)
    except np.linalg.LinAlgError:
        cov = np.diag(np.full(theta.size, 1e-6))
    return 0.5 * (cov + cov.T)

"""The Fisher forecast at an assumed system.

The forecast is the Fisher matrix at the assumed elements: the numerical Jacobian of the
model's whitened residuals with respect to its sampled coordinates, ``F = J^T J``, plus
the information of every Gaussian prior (the parallax, most often). The variance of the
central mass is the inverse of its Schur complement, so every other parameter is
marginalised. Because each epoch adds its own ``J_k^T J_k``, a schedule's information is
the sum over its epochs, and the greedy choice of next epochs is exact within the
Gaussian approximation. Both the relative 1-sigma of GM (what the data fix) and of the
mass in kg (which also carries the uncertainty of G, about 2.2e-5) are reported.
"""
from __future__ import annotations

import math

import numpy as np

from massfit.constants import G_REL_UNCERTAINTY
from massfit.errors import ConfigError, ModelError
from massfit.model.derivatives import difference_jacobian
from massfit.model.orbit_model import OrbitModel
from massfit.plan.schedule import Schedule, epoch_rows
from massfit.plan.system import AssumedSystem, simulated_observations
from massfit.priors import Normal

LN10 = math.log(10.0)


#: Relative Fisher variance below which the mass counts as not determined by the data.
_SINGULAR = 1e-10


# ================================================================ Fisher forecast
class FisherInformation:
    """Per-epoch Fisher blocks of one schedule at the assumed elements.

    Attributes
    ----------
    blocks : ndarray, shape (n_epochs, n_dim, n_dim)
        ``J_k^T J_k`` of each epoch, in the sampled coordinates of one model.
    prior : ndarray, shape (n_dim, n_dim)
        Information of the Gaussian priors.
    k_mass : int
        Index of ``central.log10_mass``.
    """

    def __init__(self, system: AssumedSystem, schedule: Schedule):
        if len(schedule) == 0:
            raise ConfigError("the schedule has no epochs", key=schedule.source)
        self.model = OrbitModel(simulated_observations(system, schedule, noise=False),
                                system.spec(), distinct_epochs=False)
        values = system.physical(self.model)
        self.theta = self.model.recentre(self.model.from_physical(values))
        if "central.log10_mass" not in self.model.names:
            raise ModelError("the central mass is fixed; there is nothing to forecast")
        self.k_mass = self.model.names.index("central.log10_mass")
        jac = _central_jacobian(self.model, self.theta)
        epoch, _ = epoch_rows(system.companions, schedule)
        owner = epoch[_residual_rows(self.model, jac.shape[0])]
        n_dim = self.model.n_dim
        self.blocks = np.zeros((len(schedule), n_dim, n_dim))
        for k in range(len(schedule)):
            cols = jac[owner == k]
            self.blocks[k] = cols.T @ cols
        self.prior = _prior_information(self.model, self.theta)

    def variance(self, chosen, *, ridge=None) -> float:
        """Variance of ln M from the epochs ``chosen`` (inf where not determined)."""
        info = self.prior + self.blocks[np.asarray(chosen, dtype=int)].sum(axis=0)
        if ridge is not None:
            info = info + ridge
        return _ln_mass_variance(info, self.k_mass)

    def trial_variances(self, chosen, candidates, *, ridge=None) -> np.ndarray:
        """Variance of ln M after adding each of ``candidates`` to ``chosen``."""
        base = self.prior + self.blocks[np.asarray(chosen, dtype=int)].sum(axis=0)
        if ridge is not None:
            base = base + ridge
        return np.array([_ln_mass_variance(base + self.blocks[c], self.k_mass)
                         for c in candidates])

    def ridge(self) -> np.ndarray:
        """A weak prior for choosing epochs where the data alone leave the mass undetermined.

        Widths of several units in every sampled coordinate (3 dex in mass and
        period, the whole unit disc in sqrt(e) cos w, sqrt(e) sin w and cos i, pi in
        angles, the parallax's own value): far broader than any data constrain, so
        the chosen epochs are those that the data favour.
        """
        widths = []
        for param, value in zip(self.model.parameters, self.theta):
            if param.transform == "log10":
                widths.append(3.0)
            elif param.transform in ("disc", "cos"):
                widths.append(1.0)
            elif param.transform == "identity":
                widths.append(max(abs(value), 1e-12))
            else:
                widths.append(np.pi)
        return np.diag(1.0 / np.square(widths))


def _central_jacobian(model, theta):
    """Central-difference Jacobian of the whitened residuals, shape (n_res, n_dim)."""
    step = 1e-6 * np.maximum(1.0, np.abs(theta))
    jac = difference_jacobian(model.residuals, theta, step, central=True)
    if not np.all(np.isfinite(jac)):
        raise ModelError("the model cannot be evaluated near the assumed elements "
                         "(check the eccentricity and inclination)")
    return jac


def _residual_rows(model, width):
    """Observation row of each of the ``width`` whitened residual columns."""
    parts = []
    for rows in model.rows.values():
        cart = rows.index[rows.cart]
        polar = rows.index[rows.polar]
        parts.extend([cart, cart, polar, polar])
    owner = np.concatenate(parts)
    if owner.size != width:
        raise RuntimeError("the model's residual layout is not the one the planner knows "
                           f"({width} residuals for {owner.size} astrometric columns)")
    return owner


def _prior_information(model, theta):
    """Fisher information of the Gaussian priors, in the sampled coordinates."""
    info = np.zeros((model.n_dim, model.n_dim))
    for k, param in enumerate(model.parameters):
        if not isinstance(param.prior, Normal):
            continue
        u_k = theta[k]
        if param.transform == "identity":
            slope = 1.0
        elif param.transform == "log10":
            slope = 10.0 ** u_k * LN10
        elif param.transform == "cos":
            slope = 1.0 / max(math.sqrt(max(1.0 - u_k * u_k, 0.0)), 1e-12)
        else:  # a normal prior on e is not a Gaussian in sqrt(e) cos w: left out
            continue
        info[k, k] += (slope / param.prior.sd) ** 2
    return info


def _ln_mass_variance(info, k):
    """Variance of ln M (= ln10^2 var log10 M) from the Schur complement of ``info``."""
    f_kk = info[k, k]
    if not f_kk > 0:
        return math.inf
    rest = np.delete(np.arange(info.shape[0]), k)
    f_rr = info[np.ix_(rest, rest)]
    f_rk = info[rest, k]
    scale = np.sqrt(np.clip(np.diag(f_rr), 1e-300, None))
    normed = f_rr / np.outer(scale, scale)
    solved = np.linalg.pinv(normed, rcond=1e-12, hermitian=True) @ (f_rk / scale)
    schur = f_kk - float((f_rk / scale) @ solved)
    if not schur > _SINGULAR * f_kk:
        return math.inf
    return LN10 ** 2 / schur


def forecast_precision(system: AssumedSystem, schedule: Schedule) -> dict:
    """Fisher forecast of the central mass's precision for one schedule.

    Parameters
    ----------
    system : AssumedSystem
        The assumed elements (the forecast is evaluated there).
    schedule : Schedule
        Epochs and their expected errors.

    Returns
    -------
    dict
        ``gm_relative_sigma`` (1-sigma of GM over GM), ``mass_relative_sigma`` (of the
        mass in kg, including G's uncertainty), ``mass_sigma`` (Quantity in the
        central mass's unit), ``epochs`` and ``determined`` (False where the schedule
        leaves the mass undetermined; the sigmas are then inf).
    """
    info = FisherInformation(system, schedule)
    return precision_block(info.variance(np.arange(len(schedule))), system.central_mass,
                            len(schedule))


def precision_block(variance, mass, epochs):
    rel = math.sqrt(variance) if math.isfinite(variance) else math.inf
    return {"epochs": int(epochs), "determined": bool(math.isfinite(rel)),
            "gm_relative_sigma": rel,
            "mass_relative_sigma": math.hypot(rel, G_REL_UNCERTAINTY),
            "mass_sigma": rel * mass}

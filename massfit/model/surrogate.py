"""A linearised surrogate of an integrated model: sampling at the two-body kernel's speed.

An integrated model (:class:`massfit.orbits.perturbed.Perturbed`: J2, J4, mutual pulls)
costs one numerical integration per walker and call; the compiled two-body kernel
costs a thousandth of that. Over a posterior as narrow as good data make it, the
difference between the two models' predictions is nearly linear in the parameters, so
the sampler can move on

    m_s(theta) = kepler(theta) + D0 + J (theta - theta0) + (second order),

where ``kepler`` is the two-body prediction from the same osculating elements (the
compiled kernel), D0 = m(theta0) - kepler(theta0) the integrated model's departure at
the linearisation point and J its Jacobian by central differences along the
posterior's principal axes (one sd each: two integrations per coordinate). The
second-order terms are the linear surrogate's own errors at every pair of axes
(n (n - 1) integrations more), kept as the few shapes they take
(:func:`low_rank_quadratic`): on resonant moons the linear surrogate's errors at
posterior draws are second order, nearly all in two shapes, and the weights of an
importance check had a heavy tail from them. Every row's two predicted values (east
and north, or separation and position angle, in the data's units) get the
correction; the kernel moves each walker's observed values by minus it
(:func:`massfit.orbits._posterior_numba.log_posterior`).

What is left is third order in theta - theta0, i.e. in the posterior's width.
:func:`surrogate_check` measures it where it matters: at draws of the sampled posterior
it evaluates the exact model (the integrator) and gives the importance weights
exp(ln p_exact - ln p_surrogate), their effective sample size, the largest |delta
chi^2| and the largest error of a predicted value in units of its error. The fit
(:mod:`massfit.linearised_fit`) re-linearises at the sampled median and samples again
where the weights are too uneven, and never calls a chain converged whose check failed.

A bound worth knowing: for normalised weights w (mean 1) the importance-weighted mean
of any quantity x differs from the sampled mean by |cov(w, x)| <= sd(w) sd(x), and
sd(w)^2 = 1 / f - 1 with f the effective sample size over the draws. So f >= 0.9
bounds every posterior mean's shift by 0.33 of its posterior sd (f >= 0.99: 0.10).
"""

from __future__ import annotations

import copy
import dataclasses

import numpy as np

from massfit.errors import ModelError
from massfit.model.compiled_posterior import CompiledPosterior, why_not_compiled
from massfit.orbits.dynamics import Keplerian
from massfit.orbits.perturbed import SURROGATES

__all__ = ["SURROGATES", "MIN_ESS_FRACTION", "LinearisedPosterior", "packed_values",
           "surrogate_check", "mean_shift_bound", "why_not_linearised", "check_line",
           "two_body_twin", "log10_mass_columns", "linear_coordinates", "model_coordinates",
           "importance_weights", "principal_steps", "second_order_terms",
           "low_rank_quadratic", "MAX_QUADRATIC_TERMS", "QUADRATIC_FLOOR"]

#: The least effective sample size, as a fraction of the draws checked, for which the
#: surrogate's posterior is taken as the exact one: every posterior mean then within
#: 0.33 of its sd of the exact posterior's (:func:`mean_shift_bound`).
MIN_ESS_FRACTION = 0.9
#: The largest share of a companion's mass that one step along an axis may move it.
MASS_STEP_SHARE = 0.4
#: Second-order terms of the surrogate at most, and the least size (whitened values
#: for a step of one sd along every axis) a term must have to be kept.
MAX_QUADRATIC_TERMS = 16
QUADRATIC_FLOOR = 0.02


def mean_shift_bound(ess_fraction):
    """The largest shift of any posterior mean, in its posterior sd, between the
    sampled and the importance-weighted posterior: sd(w) = sqrt(1 / f - 1)."""
    return float(np.sqrt(max(1.0 / ess_fraction - 1.0, 0.0)))


def why_not_linearised(model) -> str | None:
    """Why ``model`` cannot be sampled through :class:`LinearisedPosterior` (a short
    phrase), or None: its two-body part must be one the compiled kernel takes. Rows
    measured from another companion qualify: their two-body part is the companion's
    offset from the primary and the other body's offset is in the departure. Radial
    velocities do not: the surrogate's departure is the astrometry's alone."""
    if model.velocity_rows is not None:
        return "radial velocities"
    return why_not_compiled(two_body_twin(model, references=False), any_dynamics=True)


def check_line(record) -> str:
    """The report's line on the surrogate's last check (summary key ``surrogate``)."""
    last = record["rounds"][-1]
    weighed = record.get("weighed")
    line = (f"  sampled through the linearised surrogate ({len(record['rounds'])} "
            f"linearisation(s)); exact check of {last['draws']} draws: effective "
            f"samples {100 * last['ess_fraction']:.1f} % (>= "
            f"{100 * record['min_ess_fraction']:.0f} % needed), largest |delta chi2| "
            f"{last['largest_abs_delta_chi2']:.3g}, largest error of a predicted value "
            f"{last['largest_value_error_sigma']:.3g} sigma: "
            + ("passed" if last["passed"] else "short" if weighed else "FAILED"))
    if weighed:
        line += (f"\n  the draws weighed by the integrator instead: {weighed['draws']} "
                 f"draws, {weighed['ess']:.0f} effective (>= {weighed['min_effective']} "
                 f"needed), the largest weight {100 * weighed['largest_weight_share']:.1f} "
                 f"% of the total (<= {100 * weighed['max_weight_share']:.0f} %): "
                 + ("passed" if weighed["passed"] else "FAILED"))
    return line


def packed_values(model, theta) -> np.ndarray:
    """Each packed row's two predicted values in the data's units, (n, 2, rows).

    Rows in the compiled kernel's order (companions in the model's order, each one's
    east/north rows, then its separation/position-angle rows); position angles in
    radians, as the data's.
    """
    theta = np.atleast_2d(theta)
    predicted = model.all_predicted_offsets(theta)
    first, second = [], []
    for name in model.companions:
        if name not in model.rows:
            continue
        rows = model.rows[name]
        east, north = predicted[name]
        first += [east[:, rows.cart], np.hypot(east[:, rows.polar], north[:, rows.polar])]
        second += [north[:, rows.cart], np.arctan2(east[:, rows.polar],
                                                   north[:, rows.polar])]
    return np.stack([np.concatenate(first, axis=1), np.concatenate(second, axis=1)], axis=1)


def two_body_twin(model, *, references=True):
    """The same model (rows, layout, priors) with two-body dynamics; without
    ``references`` every row is taken as measured from the primary (a row measured
    from another companion then predicts the companion's offset from the primary)."""
    cheap = copy.copy(model)
    cheap.dynamics = Keplerian()
    if not references and any(rows.reference is not None for rows in model.rows.values()):
        cheap.rows = {name: dataclasses.replace(rows, reference=None)
                      for name, rows in model.rows.items()}
    return cheap


def log10_mass_columns(model) -> np.ndarray:
    """1 where a coordinate is a companion's log10 mass, else 0 (int64, n_dim): the
    coordinates a linearisation takes as 10^theta, since pulls are first order in the
    mass, not in its logarithm."""
    return np.array([name.rsplit(".", 1)[-1] == "log10_mass"
                     and name.split(".", 1)[0] in model.companions for name in model.names],
                    dtype=np.int64)


class LinearisedPosterior(CompiledPosterior):
    """The compiled two-body log-posterior with the integrated model's departure from
    it, to second order about ``theta0``; called like :class:`CompiledPosterior`.

    The departure's slope is taken by central differences along the posterior's
    principal axes (one sd each: :func:`principal_steps`), not along the coordinates:
    a coordinate moved by its own sd alone leaves the posterior's ridge in correlated
    coordinates, and there the differences pick up higher orders (measured on a
    resonant moon: errors of 0.02 sigma a value, linear in the step, gone along the
    axes). The second-order terms (``quadratic``) are what the linear surrogate misses
    at the axes' pairs (:func:`second_order_terms`), kept to the few independent
    shapes they have.

    Parameters
    ----------
    model : OrbitModel
        A model with integrated dynamics whose rows, priors and settings the compiled
        kernel takes (:func:`why_not_compiled` with any dynamics).
    theta0 : ndarray (n_dim,)
        The linearisation point (model coordinates).
    spread : ndarray (n_dim, n_dim) or (n_dim,)
        The posterior's covariance about ``theta0`` (model coordinates), or one sd per
        coordinate (then the axes are the coordinates').
    quadratic : bool
        Add the second-order terms (1 + 2 n + n (n - 1) integrations in all, against
        1 + 2 n without).
    """

    def __init__(self, model, theta0, spread, *, quadratic=True):
        reason = why_not_linearised(model)
        if reason is not None:
            raise ModelError(f"the linearised surrogate cannot take {reason}; set "
                             f"[dynamics] surrogate = \"none\"")
        # The kernel's two-body part predicts every row from the primary; a row
        # measured from another companion has that companion's offset in the
        # departure (smooth over the posterior like the rest of it).
        cheap = two_body_twin(model, references=False)
        super().__init__(cheap)
        theta0 = np.asarray(theta0, dtype=float)
        n_dim = theta0.size
        polar = self._polar_rows(model)
        # Companion masses sampled as log10 enter linearly: their pulls are first order
        # in the mass, not in its logarithm (measured: in log10 the second-order error
        # along the outer moon's mass reached 0.7 of an error at 1.5 sigma).
        power = log10_mass_columns(model)
        u0 = linear_coordinates(theta0, power)
        axes = principal_steps(spread, u0, power)
        to_axes = np.linalg.inv(axes)  # z = to_axes @ (u - u0)
        points = model_coordinates(np.vstack([u0, u0 + axes.T, u0 - axes.T]), power)
        exact = packed_values(model, points)
        plain = packed_values(cheap, points)
        base = _wrapped(exact[0] - plain[0], polar)
        slope_exact = _slope(exact, to_axes, polar)
        slope_plain = _slope(plain, to_axes, polar)
        # The two-body orbits follow the exact ones' first-order change as far as
        # changes of the two-body elements can (weighted least squares over every
        # value); the companions' masses, which move a two-body orbit hardly at all,
        # stay at theta0's in the two-body part.
        kept = np.array([not self._companion_mass(model, name) for name in model.names])
        errors = self.errors()
        whiten = (1.0 / errors).reshape(-1)
        plain_w = slope_plain.reshape(n_dim, -1).T * whiten[:, None]
        exact_w = slope_exact.reshape(n_dim, -1).T * whiten[:, None]
        part = np.linalg.lstsq(plain_w[:, kept], exact_w, rcond=1e-12)[0]
        mix = np.zeros((n_dim, n_dim))
        mix[kept] = part
        rest = slope_exact - np.einsum("erv,ej->jrv", slope_plain[kept], part)
        self.theta0, self.axes = theta0, axes
        self.integrations = int(points.shape[0])
        #: The departure's size at theta0 in units of each value's error (largest).
        self.largest_departure = float(np.nanmax(np.abs(base) / errors))
        self.linear = (np.ascontiguousarray(theta0), power, np.ascontiguousarray(mix),
                       np.ascontiguousarray(base),
                       np.ascontiguousarray(np.moveaxis(rest, 0, -1)),
                       np.zeros((0, n_dim, n_dim)), np.zeros((2, base.shape[1], 0)))
        self._cheap = cheap
        #: Which packed rows are separation and position angle.
        self.polar = polar
        #: The second-order terms kept, and the axis pairs whose integration failed.
        self.quadratic_terms, self.quadratic_failed = 0, 0
        if quadratic and n_dim > 1:
            self._add_second_order(model, u0, power, axes, to_axes, exact[1:])

    def _add_second_order(self, model, u0, power, axes, to_axes, at_axes):
        """Fill the kernel's second-order tables from the linear surrogate's errors at
        u0 +- each axis (``at_axes``: the exact values there) and at u0 +- each pair
        of axes (integrated here)."""
        n_dim = u0.size
        first, second = np.triu_indices(n_dim, k=1)
        pairs = axes[:, first] + axes[:, second]
        points = model_coordinates(np.vstack([u0 + axes.T, u0 - axes.T, u0 + pairs.T,
                                              u0 - pairs.T]), power)
        exact = np.concatenate([at_axes, packed_values(model, points[2 * n_dim:])])
        self.integrations += int(points.shape[0] - 2 * n_dim)
        error = _wrapped(exact - self.values(points), self.polar) / self.errors()
        curvature, failed = second_order_terms(error, n_dim)
        forms, shapes = low_rank_quadratic(curvature)
        self.quadratic_terms, self.quadratic_failed = int(shapes.shape[-1]), failed
        # z^T B z in the axes' units is step^T (A^-T B A^-1) step in u.
        forms = np.einsum("ji,tjk,kl->til", to_axes, forms, to_axes)
        quad = shapes.reshape(self.errors().shape + (-1,)) * self.errors()[..., None]
        self.linear = self.linear[:5] + (np.ascontiguousarray(forms),
                                         np.ascontiguousarray(quad))

    @staticmethod
    def _companion_mass(model, name):
        body, kind = name.rsplit(".", 1) if "." in name else ("", name)
        return body in model.companions and kind in ("mass", "log10_mass")

    def errors(self):
        """(2, rows): each packed value's error (rows 4 and 5 of the kernel's table)."""
        return self.rows[4:6]

    @staticmethod
    def _polar_rows(model):
        """Boolean mask of the packed rows that are separation/position angle."""
        out = []
        for name in model.companions:
            if name in model.rows:
                rows = model.rows[name]
                out += [np.zeros(rows.cart.size, bool), np.ones(rows.polar.size, bool)]
        return np.concatenate(out) if out else np.zeros(0, bool)

    def values(self, theta):
        """The surrogate's predicted values at ``theta`` (n, 2, rows), data units."""
        theta = np.atleast_2d(theta)
        theta0, power, mix, base, slope, forms, quad = self.linear
        step = linear_coordinates(theta, power) - linear_coordinates(theta0, power)
        terms = np.einsum("ni,tik,nk->nt", step, forms, step)
        return (packed_values(self._cheap, theta0 + step @ mix.T) + base
                + np.einsum("jrk,nk->njr", slope, step) + np.einsum("jrt,nt->njr", quad, terms))


def linear_coordinates(theta, power):
    """u of the kernel's linear correction: 10^theta where ``power`` is 1."""
    return np.where(power == 1, 10.0 ** theta, theta)


def model_coordinates(u, power):
    """The inverse of :func:`linear_coordinates`."""
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(power == 1, np.log10(u), u)


def _wrapped(values, polar):
    """``values`` (..., 2, rows) with the position angles' differences wrapped into
    [-pi, pi)."""
    out = np.array(values, dtype=float)
    out[..., 1, polar] = np.mod(out[..., 1, polar] + np.pi, 2.0 * np.pi) - np.pi
    return out


def _slope(values, to_axes, polar):
    """The slope (n_dim, 2, rows) per unit of each linear coordinate, from central
    differences along the axes: the values at u0 and u0 +- axis k (rows 1..n_dim and
    n_dim+1..2 n_dim of ``values``), ``to_axes`` the axes' inverse."""
    n_dim = to_axes.shape[0]
    along = _wrapped(values[1:n_dim + 1] - values[n_dim + 1:2 * n_dim + 1], polar) / 2.0
    return np.einsum("kvr,kj->jvr", along, to_axes)


def principal_steps(spread, u0, power, *, mass_share=MASS_STEP_SHARE):
    """The posterior's principal axes in the linear coordinates u, one sd each, as
    columns (n_dim, n_dim).

    ``spread`` is the covariance in model coordinates (or one sd per coordinate: then
    the coordinates' own axes); a log10 mass's rows are carried to the mass
    (d u = u ln 10 d theta). An axis that would move a mass by more than
    ``mass_share`` of itself is shortened to that (a pair of axes then stays above a
    fifth of it)."""
    spread = np.asarray(spread, dtype=float)
    scale = np.where(power == 1, u0 * np.log(10.0), 1.0)
    if spread.ndim == 1:
        axes = np.diag(np.clip(spread, 1e-30, None) * scale)
    else:
        # The axes of the correlation matrix, carried back by each coordinate's sd:
        # the coordinates' scales differ by many orders (a moon's mass in solar
        # masses against an angle), which the covariance's own eigenvectors would
        # not resolve.
        sd = np.sqrt(np.clip(np.diag(spread), 1e-60, None))
        correlation = spread / sd[:, None] / sd[None, :]
        values, vectors = np.linalg.eigh(0.5 * (correlation + correlation.T))
        axes = (sd * scale)[:, None] * vectors * np.sqrt(np.clip(values, 1e-12, None))
    masses = power == 1
    if np.any(masses):
        reach = np.max(np.abs(axes[masses]) / (mass_share * u0[masses, None]), axis=0)
        axes = axes / np.maximum(reach, 1.0)
    return axes


def second_order_terms(error, n_dim):
    """The second derivatives Q (n_dim, n_dim, values) of a function whose value and
    first derivatives are zero at the origin, from its values ``error`` (whitened, any
    trailing shape) at +- each unit axis and at +- each pair of them (the rows in the
    order: + axes, - axes, + pairs, - pairs; pairs j < k in ``np.triu_indices`` order):
    Q_kk = e(+k) + e(-k) and 2 Q_jk = e(+j+k) + e(-j-k) - Q_jj - Q_kk, exact for a
    quadratic and unaffected by odd (first and third) orders. Pairs whose values are
    not finite are left out (Q_jk = 0); returns (Q, how many were left out)."""
    error = np.asarray(error, dtype=float).reshape(len(error), -1)
    first, second = np.triu_indices(n_dim, k=1)
    n_pairs = first.size
    diagonal = error[:n_dim] + error[n_dim:2 * n_dim]
    both = error[2 * n_dim:2 * n_dim + n_pairs] + error[2 * n_dim + n_pairs:]
    cross = 0.5 * (both - diagonal[first] - diagonal[second])
    bad = ~np.all(np.isfinite(cross), axis=1)
    cross[bad] = 0.0
    curvature = np.zeros((n_dim, n_dim, error.shape[1]))
    curvature[np.arange(n_dim), np.arange(n_dim)] = np.nan_to_num(diagonal)
    curvature[first, second] = curvature[second, first] = cross
    return curvature, int(np.sum(bad))


def low_rank_quadratic(curvature, *, floor=None, most=None):
    """The quadratic e(z) = z^T Q z / 2 (``curvature`` Q: (n, n, values), whitened)
    as a few shapes: e(z) ~ sum_t shapes[:, t] (z^T forms[t] z), from the singular
    value decomposition of Q's coefficients; terms whose singular value (whitened
    values at z of unit size) is below ``floor`` (:data:`QUADRATIC_FLOOR`) are left
    out, at most ``most`` (:data:`MAX_QUADRATIC_TERMS`) kept. Returns (forms (t, n,
    n), shapes (values, t))."""
    floor = QUADRATIC_FLOOR if floor is None else floor
    most = MAX_QUADRATIC_TERMS if most is None else most
    n_dim = curvature.shape[0]
    first, second = np.triu_indices(n_dim)
    factor = np.where(first == second, 0.5, 1.0)  # z^T Q z / 2 over j <= k
    coefficients = curvature[first, second] * factor[:, None]  # (monomials, values)
    left, sizes, right = np.linalg.svd(coefficients.T, full_matrices=False)
    kept = int(min(most, np.sum(sizes >= floor)))
    forms = np.zeros((kept, n_dim, n_dim))
    for t in range(kept):
        forms[t, first, second] = right[t] * np.where(first == second, 1.0, 0.5)
        forms[t] = forms[t] + np.triu(forms[t], 1).T
    return forms, left[:, :kept] * sizes[:kept]


def surrogate_check(model, surrogate, draws, *, detail=None) -> dict:
    """The surrogate against the exact model at posterior draws (model coordinates).

    Parameters
    ----------
    model : OrbitModel
        The model with its integrated dynamics (the exact log-posterior is its Python
        path).
    surrogate : LinearisedPosterior
    draws : ndarray (n, n_dim)
    detail : int, optional
        How many of the draws also get the per-value error (one more integration
        each); all by default.

    Returns
    -------
    dict
        ``draws``, ``ess`` and ``ess_fraction`` of the weights
        exp(ln p_exact - ln p_surrogate), ``mean_shift_bound_sd``
        (:func:`mean_shift_bound`), ``largest_abs_delta_chi2`` and
        ``delta_chi2_sd`` (about the draws' mean: a constant offset does not change
        the posterior), ``largest_value_error_sigma`` (the largest |surrogate -
        exact| of a predicted value over its error; None where ``detail`` is 0),
        ``largest_weight_share`` (the largest weight's share of the total),
        ``weights`` (normalised to mean 1, an array, for reweighting),
        ``exact_log_prob`` (an array) and ``passed`` (ess_fraction >=
        :data:`MIN_ESS_FRACTION`).
    """
    draws = np.atleast_2d(np.asarray(draws, dtype=float))
    exact = model.log_prob_python(draws)
    out = importance_weights(exact, surrogate(draws))
    picked = draws if detail is None else draws[:detail]
    error = np.abs(_wrapped(surrogate.values(picked) - packed_values(model, picked),
                            surrogate.polar)) if len(picked) else None
    out["largest_value_error_sigma"] = (None if error is None
                                        else float(np.nanmax(error / surrogate.errors())))
    return out


def importance_weights(exact, approx) -> dict:
    """The importance weights exp(ln p_exact - ln p_surrogate) of draws of the
    surrogate's posterior and what :func:`surrogate_check` says of them (all its keys
    but ``largest_value_error_sigma``); draws where either is not finite get weight 0."""
    exact, approx = np.asarray(exact, dtype=float), np.asarray(approx, dtype=float)
    good = np.isfinite(exact) & np.isfinite(approx)
    delta = np.where(good, exact - approx, -np.inf)
    top = np.max(delta[good]) if np.any(good) else 0.0
    weights = np.where(good, np.exp(delta - top), 0.0)
    total = float(np.sum(weights))
    ess = total ** 2 / float(np.sum(weights ** 2)) if total > 0 else 0.0
    share = float(np.max(weights) / total) if total > 0 else None
    weights = weights * (weights.size / total) if total > 0 else weights
    chi2_delta = -2.0 * delta[good]
    fraction = ess / exact.size
    return {"draws": int(exact.size), "finite": int(np.sum(good)),
            "ess": float(ess), "ess_fraction": float(fraction),
            "mean_shift_bound_sd": mean_shift_bound(fraction) if fraction > 0 else None,
            "largest_abs_delta_chi2": float(np.max(np.abs(chi2_delta - np.mean(chi2_delta))))
            if chi2_delta.size else None,
            "delta_chi2_sd": float(np.std(chi2_delta)) if chi2_delta.size else None,
            "largest_weight_share": share, "weights": weights, "exact_log_prob": exact,
            "passed": bool(fraction >= MIN_ESS_FRACTION)}

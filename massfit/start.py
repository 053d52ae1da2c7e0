"""Starting points without guesses: periodograms, a linear scan, then least squares.

For each companion on its own:

1. Lomb-Scargle periodograms (astropy) of the east and north offsets give candidate
   periods; periods longer than the time span are added for short arcs.
2. For each candidate period, a grid of eccentricities and periapsis times makes the
   offsets linear in the Thiele-Innes constants, solved by weighted least squares.
3. The best grid points are polished by non-linear least squares (scipy) on that
   companion alone, with its own central mass.

Then all companions are joined with one central mass and polished together. Distinct
solutions whose chi^2 is close to the best are kept as *modes* (period aliases, mostly)
and reported; the walkers start in a small ball about the best one, shaped by the
least-squares covariance.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field, replace

import numpy as np
from astropy.timeseries import LombScargle
from scipy.optimize import least_squares

from . import kepler
from .constants import GM_SUN
from .model import OrbitModel, SystemSpec
from .priors import Fixed, Normal

__all__ = ["Start", "find_start"]

#: Modes whose chi^2 is within this of the best are reported as comparable. A
#: difference of 2 ln L = 25 is decisive by common practice (a "5 sigma" step).
COMPARABLE_DELTA_CHI2 = 25.0
_ECC_GRID = (0.0, 0.25, 0.5, 0.75, 0.9)
_PHASE_GRID = 12
_MAX_PEAKS = 8
_POLISH = 6


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
        ``central_mass`` (M_sun), ``delta_chi2``.
    per_companion : dict
        name -> best single-companion solution (``period``, ``central_mass``,
        ``chi2``, ``n_values``).
    """

    theta: np.ndarray
    chi2: float
    covariance: np.ndarray
    modes: list = field(default_factory=list)
    per_companion: dict = field(default_factory=dict)

    def walkers(self, model: OrbitModel, n_walkers: int, rng) -> np.ndarray:
        """A ball of ``n_walkers`` starting points, all inside the prior's support."""
        scale = np.sqrt(np.clip(np.diag(self.covariance), 1e-16, None))
        cov = self.covariance if np.all(np.isfinite(self.covariance)) else np.diag(scale ** 2)
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
            good = trial[np.isfinite(model.log_prob(trial))]
            take = min(len(good), n_walkers - filled)
            points[filled:filled + take] = good[:take]
            filled += take
            if filled == n_walkers:
                return points
        raise RuntimeError("could not place the walkers inside the prior's support")


def find_start(model: OrbitModel, *, rng=None) -> Start:
    """Find the best joint solution and any comparable modes.

    Parameters
    ----------
    model : OrbitModel
        The joint model; its angle windows are re-centred on the result.
    rng : numpy.random.Generator, optional
        Used only to break ties in the walker ball later; the search is deterministic.

    Returns
    -------
    Start
    """
    singles = {name: _single_companion_modes(model, name) for name in model.companions}
    best = {name: modes[0] for name, modes in singles.items()}
    joint = _joint_fit(model, best)
    modes = []
    # Each companion's runner-up, swapped into the joint solution, is a candidate mode.
    for name, candidates in singles.items():
        for alt in candidates[1:3]:
            trial = dict(best, **{name: alt})
            theta, chi2, _ = _joint_polish(model, trial)
            if theta is None:
                continue
            delta = chi2 - joint[1]
            if delta < -1e-6:  # the runner-up wins jointly: adopt it
                joint = (theta, chi2, _)
                best = trial
                continue
            if delta < COMPARABLE_DELTA_CHI2:
                phys = model.physical(theta)
                modes.append({"body": name,
                              "period": float(phys["companions"][name]["period"][0]),
                              "central_mass": float(phys["central_mass"][0]),
                              "delta_chi2": float(delta)})
    theta, chi2, covariance = joint
    model.recentre(theta)
    per = {name: {"period": m["period"], "central_mass": m["central_mass"],
                  "chi2": m["chi2"]} for name, m in best.items()}
    best_phys = model.physical(theta)
    for mode in modes:
        mode["best_period"] = float(best_phys["companions"][mode["body"]]["period"][0])
    return Start(theta=theta, chi2=chi2, covariance=covariance, modes=modes,
                 per_companion=per)


# ------------------------------------------------------------------ one body alone
def _single_companion_modes(model, name):
    """Distinct least-squares solutions for one companion, best first."""
    sub = _sub_model(model, name)
    t, east, north, sig_e, sig_n = _offsets_au(sub, name)
    candidates = []
    for period in _candidate_periods(t, east, north, sig_e, sig_n, model.companions[name]):
        candidates.extend(_linear_scan(t, east, north, sig_e, sig_n, period))
    candidates.sort(key=lambda c: c[0])
    solutions = []
    for _, values in candidates[:_POLISH * 3]:
        if len(solutions) >= _POLISH * 2:
            break
        values = _to_model_values(values, name)
        sol = _polish_single(sub, name, values)
        if sol is not None:
            solutions.append(sol)
    if not solutions:
        raise RuntimeError(f"no starting orbit found for '{name}'")
    solutions.sort(key=lambda s: s["chi2"])
    return _distinct(solutions)


def _sub_model(model, name):
    obs = model.observations
    rows = obs.astrometry.select(obs.astrometry.body == name)
    sub_obs = replace(obs, astrometry=rows, velocities=None)
    spec = model.spec
    parallax = spec.parallax
    if parallax is not None and not parallax.is_fixed:
        parallax = Fixed(_parallax_guess(parallax))
    comp = model.companions[name]
    sub_spec = replace(spec, parallax=parallax, companions={name: comp})
    return OrbitModel(sub_obs, sub_spec)


def _parallax_guess(prior):
    if isinstance(prior, Normal):
        return prior.mean
    if prior.is_fixed:
        return prior.value
    low, high = prior.low, prior.high
    return np.sqrt(max(low, 1e-3) * high) if np.isfinite(high) else 10.0


def _offsets_au(sub, name):
    """East/north offsets in au-equivalent units (for the linear stage only)."""
    rows = sub._rows[name]
    parallax = sub.spec.parallax.value if sub.needs_parallax else 1.0
    scale = rows.scale * np.where(rows.uses_parallax, parallax * 1e-3, 1.0)
    n = len(rows.t)
    east = np.empty(n)
    north = np.empty(n)
    sig_e = np.empty(n)
    sig_n = np.empty(n)
    c, p = rows.cart, rows.polar
    east[c], north[c] = rows.east, rows.north
    sig_e[c], sig_n[c] = rows.east_err, rows.north_err
    east[p] = rows.sep * np.sin(rows.pa)
    north[p] = rows.sep * np.cos(rows.pa)
    sig = np.maximum(rows.sep_err, rows.sep * rows.pa_err)
    sig_e[p] = sig_n[p] = sig
    return rows.t, east / scale, north / scale, sig_e / scale, sig_n / scale


def _candidate_periods(t, east, north, sig_e, sig_n, comp):
    span = float(np.ptp(t))
    low_p, high_p = comp.period.low, comp.period.high
    if comp.period.is_fixed:
        return [comp.period.value]
    dt = np.diff(np.unique(np.round(t, 6)))
    # Resolve periods down to a few times the typical spacing of distinct nights or
    # epochs; the fastest aliases beyond that are not constrained by the sampling.
    min_period = max(low_p, 2.0 * np.min(dt[dt > 0]) if np.any(dt > 0) else low_p, 1e-3)
    max_period = min(high_p, 20.0 * span)
    periods = []
    if span > 0 and min_period < span:
        f_min = 1.0 / min(max_period, 3.0 * span)
        f_max = 1.0 / min_period
        n_freq = int(min(2e5, 10 * span * (f_max - f_min) + 100))
        freq = np.linspace(f_min, f_max, n_freq)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            power = (LombScargle(t, east, sig_e).power(freq)
                     + LombScargle(t, north, sig_n).power(freq))
        peaks = np.flatnonzero((power[1:-1] > power[:-2]) & (power[1:-1] >= power[2:])) + 1
        peaks = peaks[np.argsort(power[peaks])[::-1]][:_MAX_PEAKS]
        for k in peaks:
            periods.extend([1.0 / freq[k], 2.0 / freq[k]])
    # Short arcs: the orbit may be much longer than the data span.
    periods.extend(span * np.array([1.0, 1.5, 2.5, 4.0, 7.0, 12.0, 20.0]))
    periods = [p for p in periods if low_p <= p <= high_p]
    if not periods:
        periods = [float(np.sqrt(low_p * min(high_p, 1e6)))]
    return periods


def _linear_scan(t, east, north, sig_e, sig_n, period):
    """Grid over (e, periapsis time) with Thiele-Innes constants solved linearly."""
    out = []
    for ecc in _ECC_GRID:
        for m0 in np.linspace(0.0, 2 * np.pi, _PHASE_GRID, endpoint=False):
            big_e = kepler.solve_kepler(m0 + 2 * np.pi * t / period, ecc)
            x = np.cos(big_e) - ecc
            y = np.sqrt(1 - ecc * ecc) * np.sin(big_e)
            design = np.column_stack([x, y])
            chi2 = 0.0
            consts = []
            for values, sig in ((north, sig_n), (east, sig_e)):
                w = design / sig[:, None]
                coef, *_ = np.linalg.lstsq(w, values / sig, rcond=None)
                chi2 += float(np.sum((w @ coef - values / sig) ** 2))
                consts.append(coef)
            (big_a, big_f), (big_b, big_g) = consts
            out.append((chi2, {"period": period, "ecc": ecc, "m0": m0, "A": big_a,
                               "B": big_b, "F": big_f, "G": big_g}))
    return out


def elements_from_thiele_innes(big_a, big_b, big_f, big_g):
    """(a, inc, omega, node) from the Thiele-Innes constants (radians)."""
    plus = np.hypot(big_a + big_g, big_b - big_f)  # a (1 + cos i)
    minus = np.hypot(big_a - big_g, big_b + big_f)  # a (1 - cos i)
    total = np.arctan2(big_b - big_f, big_a + big_g)  # omega + node
    diff = np.arctan2(-big_b - big_f, big_a - big_g)  # omega - node
    a = 0.5 * (plus + minus)
    cos_i = (plus - minus) / (plus + minus)
    return a, np.arccos(cos_i), 0.5 * (total + diff), 0.5 * (total - diff)


def _to_model_values(grid, name):
    a, inc, omega, node = elements_from_thiele_innes(grid["A"], grid["B"], grid["F"],
                                                     grid["G"])
    gm = 4 * np.pi ** 2 * a ** 3 / grid["period"] ** 2
    return {"central_mass": max(gm / GM_SUN, 1e-30), "parallax": None,
            name: {"period": grid["period"], "ecc": max(grid["ecc"], 1e-4),
                   "omega": omega, "inc": inc, "node": node,
                   "mean_anomaly_ref": grid["m0"], "mass": 0.0}}


def _polish_single(sub, name, values):
    # The linear stage measured the phase at t = 0; move it to the body's reference.
    orbit = dict(values[name])
    orbit["mean_anomaly_ref"] += 2 * np.pi * sub.reference_epoch(name) / orbit["period"]
    comp = sub.companions[name]
    if not comp.mass.is_fixed:
        orbit["mass"] = _prior_centre(comp.mass)
    values = dict(values, **{name: orbit})
    values["central_mass"] = max(values["central_mass"] - orbit["mass"], 1e-30)
    theta = _least_squares(sub, values)
    if theta is None:
        return None
    chi2 = _chi2(sub, theta)
    phys = sub.physical(theta)
    return {"chi2": chi2, "theta": theta, "orbit": _orbit_dict(phys, name),
            "period": float(phys["companions"][name]["period"][0]),
            "central_mass": float(phys["central_mass"][0])}


def _prior_centre(prior):
    if prior.is_fixed:
        return prior.value
    if isinstance(prior, Normal):
        return max(prior.mean, 0.0)
    return np.sqrt(prior.low * prior.high) if prior.low > 0 else 0.5 * (prior.low + prior.high)


def _orbit_dict(phys, name):
    return {k: float(v[0]) for k, v in phys["companions"][name].items()}


def _distinct(solutions):
    """Drop solutions that repeat a better one (same period within 0.5 %)."""
    kept = []
    for sol in solutions:
        if all(abs(sol["period"] / k["period"] - 1) > 5e-3 for k in kept):
            kept.append(sol)
    return kept


# ------------------------------------------------------------- least squares
def _bounds(model):
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


def _prior_residuals(model, theta):
    """Gaussian priors on directly sampled quantities act as extra residuals."""
    out = []
    for k, param in enumerate(model.parameters):
        if param.transform == "identity" and isinstance(param.prior, Normal):
            out.append((theta[k] - param.prior.mean) / param.prior.sd)
    return np.array(out)


def _residual_function(model):
    def fun(theta):
        res = model.residuals(theta[None, :], lenient=True)[0]
        res = np.concatenate([res, _prior_residuals(model, theta)])
        return np.where(np.isfinite(res), res, 1e6)
    return fun


def _least_squares(model, values, *, rounds=2):
    """Polish physical starting values; returns sampled coordinates or None."""
    model.recentre(_centre_guess(model, values))
    theta = model.from_physical(values)
    fun = _residual_function(model)
    for _ in range(rounds):
        low, high = _bounds(model)
        width = np.where(np.isfinite(high - low), high - low, 1.0)
        theta = np.clip(theta, low + 1e-9 * width, high - 1e-9 * width)
        try:
            fit = least_squares(fun, theta, bounds=(low, high), method="trf",
                                x_scale="jac", max_nfev=400 * model.n_dim)
        except (ValueError, np.linalg.LinAlgError):
            return None
        theta = model.recentre(fit.x)
        theta = model.from_physical(_values_from_theta(model, theta))
    if not np.isfinite(model.log_prob(theta[None, :])[0]):
        return None
    return theta


def _centre_guess(model, values):
    theta = np.zeros(model.n_dim)
    for name in model.companions:
        orbit = values[name]
        theta[model._index[f"{name}.node"]] = orbit["node"]
        theta[model._index[f"{name}.phase"]] = orbit["mean_anomaly_ref"] + orbit["omega"]
    return theta


def _values_from_theta(model, theta):
    phys = model.physical(theta[None, :], lenient=True)
    values = {"central_mass": float(phys["central_mass"][0]),
              "parallax": None if phys["parallax"] is None else float(phys["parallax"][0])}
    for name in model.companions:
        values[name] = _orbit_dict(phys, name)
        values[name]["ecc"] = min(values[name]["ecc"], 0.98)
    return values


def _chi2(model, theta):
    res = model.residuals(theta[None, :])[0]
    return float(np.sum(res * res))


# -------------------------------------------------------------------- joint fit
def _joint_polish(model, chosen):
    values = {"central_mass": _joint_mass(model, chosen)}
    if model.needs_parallax and model.spec.parallax is not None:
        values["parallax"] = _parallax_guess(model.spec.parallax)
    for name, sol in chosen.items():
        values[name] = dict(sol["orbit"])
    theta = _least_squares(model, values, rounds=3)
    if theta is None:
        return None, np.inf, None
    return theta, _chi2(model, theta), _covariance(model, theta)


def _joint_fit(model, chosen):
    theta, chi2, cov = _joint_polish(model, chosen)
    if theta is None:
        raise RuntimeError("the joint least-squares fit failed from every start")
    return theta, chi2, cov


def _joint_mass(model, chosen):
    # Weight each companion's own mass estimate by its number of rows: a rough but
    # robust start; the joint least squares does the real combining.
    masses = np.array([sol["central_mass"] for sol in chosen.values()])
    weights = np.array([len(model._rows[name].t) for name in chosen])
    return float(np.exp(np.sum(weights * np.log(masses)) / np.sum(weights)))


def _covariance(model, theta):
    fun = _residual_function(model)
    step = 1e-6 * np.maximum(1.0, np.abs(theta))
    base = fun(theta)
    jac = np.empty((base.size, theta.size))
    for k in range(theta.size):
        shifted = theta.copy()
        shifted[k] += step[k]
        jac[:, k] = (fun(shifted) - base) / step[k]
    try:
        cov = np.linalg.pinv(jac.T @ jac)
    except np.linalg.LinAlgError:
        cov = np.diag(np.full(theta.size, 1e-6))
    return 0.5 * (cov + cov.T)

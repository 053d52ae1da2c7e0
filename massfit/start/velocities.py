"""Starting points from radial velocities: velocity-only fits by a linear scan per period, and
the velocities' scale and nuisance terms joined to an astrometric solution.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from massfit.constants import GM_SUN, KM_S_PER_AU_DAY
from massfit.errors import ModelError
from massfit.model.specs import DEFAULT_SEMI_AMPLITUDE_PRIOR
from massfit.model.orbit_model import OrbitModel
from massfit.orbits import kepler
from massfit.start.aliases import candidate_periods
from massfit.start.least_squares import (
    chi2_at,
    covariance_at,
    solve_least_squares,
    values_from_theta,
)
from massfit.start.result import COMPARABLE_DELTA_CHI2, Start
from massfit.start.scan import ECC_GRID, PHASE_GRID, POLISH, distinct_periods

__all__ = ["inside_support", "velocity_only_start", "with_velocities"]


# ------------------------------------------------------------ radial velocities
def _velocity_fit(model, bases):
    """Weighted linear least squares of the velocities on given time functions.

    ``bases`` maps each companion to a list of functions of time (arrays over all
    velocity rows). Each function enters with a free amplitude on the primary's rows
    (with the reflex's minus sign) and another on the companion's own rows; the
    instrument offsets and trend terms are free too. Returns (chi2, coefficients,
    fitted velocities); coefficients are keyed ("offset", label), ("slope", None),
    ("curvature", None) and (name, "primary" or "own", index of the function).
    """
    vel = model.velocity_rows
    sigma = np.sqrt(vel.err2)
    cols, keys = [], []
    for j, label in enumerate(vel.labels):
        cols.append((vel.instrument == j).astype(float))
        keys.append(("offset", label))
    dt = vel.t - vel.t_trend
    for term, power in (("slope", 1), ("curvature", 2)):
        if model.trend_has(term):
            cols.append(dt ** power)
            keys.append((term, None))
    primary = vel.owner < 0
    for k, (name, funcs) in enumerate(bases.items()):
        own = vel.owner == k
        for b, func in enumerate(funcs):
            if np.any(primary):
                cols.append(-func * primary)
                keys.append((name, "primary", b))
            if np.any(own):
                cols.append(func * own)
                keys.append((name, "own", b))
    design = np.column_stack(cols)
    coef, *_ = np.linalg.lstsq(design / sigma[:, None], vel.rv / sigma, rcond=None)
    fitted = design @ coef
    chi2 = float(np.sum(((vel.rv - fitted) / sigma) ** 2))
    return chi2, dict(zip(keys, coef)), fitted


def inside_support(prior, value):
    """``value`` moved just inside the support of ``prior``."""
    if prior.is_fixed:
        return prior.value
    low, high = prior.low, prior.high
    if low < value < high:
        return float(value)
    # Outside (or on the edge): just inside, by a step small against any sensible scale.
    width = high - low if np.isfinite(high - low) else max(abs(value), 1.0)
    return float(np.clip(value, low + 1e-9 * width, high - 1e-9 * width))


def _velocity_nuisance(model, coef, fitted):
    """Starting offsets, trend and jitters from a linear fit."""
    vel = model.velocity_rows
    rv = {"offset": {}, "jitter": {}, "slope": coef.get(("slope", None), 0.0),
          "curvature": coef.get(("curvature", None), 0.0)}
    for j, label in enumerate(vel.labels):
        rows = vel.instrument == j
        excess = np.mean((vel.rv[rows] - fitted[rows]) ** 2) - np.mean(vel.err2[rows])
        guess = max(np.sqrt(max(excess, 0.0)), 0.1 * np.sqrt(np.median(vel.err2[rows])))
        rv["jitter"][label] = inside_support(vel.jitters[j], guess)
        offset = coef[("offset", label)]
        rv["offset"][label] = offset if vel.offsets[j] is None else inside_support(vel.offsets[j],
                                                                            offset)
    return rv


def _one(orbit):
    return {key: np.atleast_1d(np.asarray(value, dtype=float)) for key, value in orbit.items()
            if np.isscalar(value) or np.ndim(value) == 0}


def velocity_only_start(model):
    """Companion by companion: periodogram, linear scan over (P, e, phase), polish."""
    names = list(model.companions)
    found = {}
    for count, name in enumerate(names):
        sub = model if len(names) == 1 else _velocity_sub_model(model, names[:count + 1])
        solutions = _velocity_candidates(sub, name, found)
        if not solutions:
            raise ModelError(f"no orbit of companion '{name}' fits its velocities within "
                             f"the priors; check its rows, or widen its period_prior")
        best = solutions[0]
        found = {n: best["values"][n] for n in names[:count + 1]}
    theta, chi2 = best["theta"], best["chi2"]
    model.recentre(theta)
    modes = []
    for alt in solutions[1:3]:
        delta = alt["chi2"] - chi2
        if delta < COMPARABLE_DELTA_CHI2:
            modes.append({"body": names[-1], "period": alt["period"], "central_mass": None,
                          "delta_chi2": float(delta), "best_period": best["period"]})
    per = {name: {"period": float(found[name]["period"]), "central_mass": None,
                  "chi2": chi2} for name in names}
    return Start(theta=theta, chi2=chi2, covariance=covariance_at(model, theta), modes=modes,
                 per_companion=per)


def _velocity_sub_model(model, names):
    obs = model.observations
    vel = obs.velocities
    keep = (vel.body == obs.primary) | np.isin(vel.body, names)
    sub_obs = replace(obs, velocities=vel.select(keep))
    sub_spec = replace(model.spec, companions={n: model.companions[n] for n in names},
                       strict_companions=True)
    return OrbitModel(sub_obs, sub_spec)


def _velocity_candidates(sub, name, found):
    """Polished solutions for ``name`` with the companions in ``found`` kept in."""
    vel = sub.velocity_rows
    fixed = {n: [sub.velocity_shape(n, _one(orbit))[0]] for n, orbit in found.items()}
    _, coef, fitted = _velocity_fit(sub, fixed)
    rows = vel.owner < 0 if np.any(vel.owner < 0) else vel.owner == list(sub.companions).index(name)
    series = [((vel.rv - fitted)[rows], np.sqrt(vel.err2[rows]))]
    t = vel.t - sub.reference_epoch(name)
    comp = sub.companions[name]
    candidates = []
    for period in candidate_periods(t[rows], series, comp.period):
        for ecc in ECC_GRID:
            if comp.eccentricity.is_fixed:
                ecc = comp.eccentricity.value
            for m0 in np.linspace(0.0, 2 * np.pi, PHASE_GRID, endpoint=False):
                nu = kepler.true_anomaly(kepler.solve_kepler(m0 + 2 * np.pi * t / period,
                                                             ecc), ecc)
                bases = dict(fixed, **{name: [np.cos(nu), np.sin(nu)]})
                chi2, coef, fitted = _velocity_fit(sub, bases)
                candidates.append((chi2, period, ecc, m0, coef, fitted))
    candidates.sort(key=lambda c: c[0])
    solutions = []
    for chi2, period, ecc, m0, coef, fitted in candidates[:POLISH * 3]:
        if len(solutions) >= POLISH:
            break
        values = {"central_mass": None, "parallax": None,
                  "rv": _velocity_nuisance(sub, coef, fitted)}
        values.update({n: dict(orbit) for n, orbit in found.items()})
        for n in found:
            for kind in ("primary", "own"):
                if (n, kind, 0) in coef:
                    values[n][f"k_{'primary' if kind == 'primary' else 'companion'}"] = \
                        inside_support(sub.companions[n].semi_amplitude
                                or DEFAULT_SEMI_AMPLITUDE_PRIOR, abs(coef[(n, kind, 0)]))
        values[name] = _scan_orbit(sub, name, coef, period, ecc, m0)
        theta = solve_least_squares(sub, values)
        if theta is None:
            continue
        phys = sub.physical(theta)
        solutions.append({"chi2": chi2_at(sub, theta), "theta": theta,
                          "period": float(phys["companions"][name]["period"][0]),
                          "values": values_from_theta(sub, theta)})
    solutions.sort(key=lambda s: s["chi2"])
    return distinct_periods(solutions)


def _scan_orbit(sub, name, coef, period, ecc, m0):
    """Elements of a scanned orbit from its cos(nu), sin(nu) amplitudes."""
    prior = sub.companions[name].semi_amplitude or DEFAULT_SEMI_AMPLITUDE_PRIOR
    orbit = {"period": period, "ecc": max(ecc, 1e-3), "mean_anomaly_ref": m0}
    best = 0.0
    for kind, key in (("primary", "k_primary"), ("own", "k_companion")):
        if (name, kind, 0) not in coef:
            continue
        # -K1 f on the primary's rows, +K2 f on the companion's: the same omega.
        c_a, c_b = coef[(name, kind, 0)], coef[(name, kind, 1)]
        amplitude = float(np.hypot(c_a, c_b))
        orbit[key] = inside_support(prior, amplitude)
        if amplitude >= best:
            best = amplitude
            orbit["omega"] = float(np.arctan2(-c_b, c_a))
    return orbit


def with_velocities(model, values):
    """Joint start: signs, distance and reflex masses from the velocities' amplitudes.

    Astrometry leaves (omega, node) and (omega + pi, node + pi) alike; the sign of
    each companion's velocity amplitude picks one. A companion's own amplitude sets
    the length scale (so the parallax) where the parallax is free, and the primary's
    reflex sets each companion's mass.
    """
    vel = model.velocity_rows
    values = dict(values)
    shapes = {n: [model.velocity_shape(n, _one(values[n]))[0]] for n in model.companions}
    _, coef, fitted = _velocity_fit(model, shapes)
    amplitude = {}
    for k, name in enumerate(model.companions):
        orbit = dict(values[name])
        c1 = coef.get((name, "primary", 0), 0.0)
        c2 = coef.get((name, "own", 0), 0.0)
        if (c2 < 0) if np.any(vel.owner == k) else (c1 < 0):
            orbit["omega"] += np.pi
            orbit["node"] += np.pi
        amplitude[name] = (abs(c1), abs(c2))
        values[name] = orbit
    if model.parallax_from_velocities:
        _scale_from_velocities(model, values, amplitude)
    for name, (k1, _) in amplitude.items():
        comp = model.companions[name]
        if comp.mass.is_fixed or not model.primary_has_velocities:
            continue
        orbit = values[name]
        total = values["central_mass"] + orbit.get("mass", 0.0)
        k_rel = _relative_amplitude(orbit, total)
        share = float(np.clip(k1 / k_rel, 1e-9, 0.9)) if k_rel > 0 else 1e-6
        orbit["mass"] = inside_support(comp.mass, share * total)
        values["central_mass"] = max(total - orbit["mass"], 1e-30)
    values["rv"] = _velocity_nuisance(model, coef, fitted)
    if model.spec.frame is not None:
        # The instruments' zero points are the frame's: the fitted systemic velocity
        # of the first instrument starts the primary's own velocity.
        values["frame"] = dict(values.get("frame", {}),
                               velocity=float(coef[("offset", vel.labels[0])]))
    return values


def _relative_amplitude(orbit, total_mass):
    """K of the relative orbit (km/s) from its elements and total mass (M_sun)."""
    a = np.cbrt(GM_SUN * total_mass * orbit["period"] ** 2 / (4 * np.pi ** 2))
    return float(KM_S_PER_AU_DAY * kepler.radial_velocity_amplitude(
        a, orbit["period"], orbit["ecc"], orbit["inc"]))


def _scale_from_velocities(model, values, amplitude):
    """Rescale lengths (parallax and masses) so a companion's own K is matched."""
    vel = model.velocity_rows
    for k, name in enumerate(model.companions):
        k1, k2 = amplitude[name]
        if not np.any(vel.owner == k) or k2 <= 0:
            continue
        orbit = values[name]
        total = values["central_mass"] + orbit.get("mass", 0.0)
        k_now = _relative_amplitude(orbit, total)
        k_seen = k1 + k2 if model.primary_has_velocities else k2
        ratio = k_seen / k_now  # lengths scale as K, masses as K^3, parallax as 1/K
        values["parallax"] = inside_support(model.spec.parallax, values["parallax"] / ratio)
        values["central_mass"] *= ratio ** 3
        for other in model.companions:
            if "mass" in values[other]:
                values[other]["mass"] *= ratio ** 3
        return

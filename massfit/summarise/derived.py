"""From a chain to physical numbers: derived samples, intervals and the summary dict.

Intervals follow the conventions: the median, the 68.27 % interval from the 15.865th to
the 84.135th percentile and the 95.45 % interval from the 2.275th to the 97.725th.
"""

from __future__ import annotations

import numpy as np

from massfit.constants import AU_KM, DAY_S, G_REL_UNCERTAINTY, GM_SUN_KM3_S2, MASS_UNITS
from massfit.model.specs import DEFAULT_CENTRAL_MASS_PRIOR
from massfit.model.orbit_model import OrbitModel
from massfit.summarise.dark_mass import extra_samples
from massfit.summarise.quantities import MASS_UNIT_KEYS, MASS_UNIT_LABELS

__all__ = ["interval", "derived_samples", "mass_function", "in_best_mass_unit",
           "best_mass_unit", "PERCENTILES", "MASS_UNIT_LABELS", "SCALED_MASSES"]

#: Companion masses that are given in the unit that reads best (M_sun, M_jup or M_earth).
SCALED_MASSES = ("mass", "minimum_mass", "mass_sin3i")

PERCENTILES = (2.275, 15.865, 50.0, 84.135, 97.725)


def best_mass_unit(mass_msun: float) -> str:
    """The mass unit that reads best for a central mass in solar masses."""
    if mass_msun >= 0.01:
        return "Msun"
    if mass_msun * MASS_UNITS["Msun"] / MASS_UNITS["Mjup"] >= 0.01:
        return "Mjup"
    return "Mearth"


def in_best_mass_unit(block: dict) -> tuple:
    """An interval block in M_sun rescaled to the unit that reads best (as the central
    mass's): ``(block, unit)`` with unit "Msun", "Mjup" or "Mearth"."""
    if block.get("median") is None:
        return block, "Msun"
    unit = best_mass_unit(abs(block["median"]))
    scale = MASS_UNITS["Msun"] / MASS_UNITS[unit]
    scaled = {k: (v * scale if isinstance(v, float) else v) for k, v in block.items()}
    scaled["unit"] = {"Msun": "M_sun", "Mjup": "M_jup", "Mearth": "M_earth"}[unit]
    return scaled, unit


def interval(values, unit) -> dict:
    """The conventions' interval block of a sample array."""
    values = np.asarray(values, dtype=float)
    values = values[np.isfinite(values)]
    if values.size == 0:
        return {"unit": unit, "median": None, "lower_68": None, "upper_68": None,
                "lower_95": None, "upper_95": None}
    lo95, lo68, med, hi68, hi95 = np.percentile(values, PERCENTILES)
    return {"unit": unit, "median": float(med), "lower_68": float(lo68),
            "upper_68": float(hi68), "lower_95": float(lo95), "upper_95": float(hi95)}


def _unwrap(angle, period):
    """Samples of a circular quantity unwrapped about their circular mean."""
    phase = 2 * np.pi * angle / period
    centre = np.arctan2(np.mean(np.sin(phase)), np.mean(np.cos(phase)))
    offset = np.mod(phase - centre + np.pi, 2 * np.pi) - np.pi
    return (centre + offset) * period / (2 * np.pi)


def _shift_into(values, period):
    """Shift all samples by one multiple of ``period`` so the median is in [0, period)."""
    turns = np.floor(np.median(values) / period)
    return values - turns * period, turns


def derived_samples(model: OrbitModel, samples: np.ndarray, *, seed=None) -> dict:
    """Physical quantities for every posterior sample.

    Parameters
    ----------
    model : OrbitModel
    samples : ndarray, shape (n, n_dim)
    seed : int, optional
        Seed of the draws of Newton's constant that carry its uncertainty into the
        mass in kg.

    Returns
    -------
    dict
        ``central_gm`` (km^3/s^2), ``central_mass`` (kg), ``central_mass_solar``,
        ``central_mass_jupiter``, ``central_mass_earth``, ``parallax`` (mas, or absent)
        and ``companions``: name -> dict of ``period`` (d), ``semi_major_axis`` (au),
        ``semi_major_axis_km``, ``semi_major_axis_angle`` (mas, where angular),
        ``eccentricity``, ``inclination``, ``periapsis_argument``,
        ``ascending_node`` (deg), ``periapsis_time`` (JD, TDB) and ``mass`` (M_sun,
        where sampled).
    """
    phys = model.physical(samples)
    rng = np.random.default_rng(seed)
    if model.velocity_only:
        return _velocity_only_samples(model, phys, rng)
    out = _central_samples(phys["central_mass"], rng)
    if phys["parallax"] is not None:
        out["parallax"] = phys["parallax"]
    out["companions"] = {}
    for name, orbit in phys["companions"].items():
        out["companions"][name] = _companion_samples(model, name, orbit, phys["parallax"])
        if "k_primary" in orbit:
            out["companions"][name].update(_amplitude_samples(model, name, orbit))
    out.update(extra_samples(model, phys))
    if "rv" in phys:
        out["rv"] = _velocity_terms(model, phys["rv"])
    return out


def _central_samples(mass_msun, rng) -> dict:
    gm = mass_msun * GM_SUN_KM3_S2
    out = {"central_gm": gm}
    # The data fix GM; the mass in kg also carries the uncertainty of G itself.
    g_draws = 1.0 + G_REL_UNCERTAINTY * rng.standard_normal(gm.size)
    out["central_mass"] = _mass_kg(gm, g_draws)
    for name, gm_unit in MASS_UNITS.items():
        out[MASS_UNIT_KEYS[name]] = gm / gm_unit
    return out


def mass_function(period, semi_amplitude, ecc):
    """f = P K^3 (1 - e^2)^(3/2) / (2 pi G), nominal solar masses.

    Parameters
    ----------
    period : array_like
        Period, days.
    semi_amplitude : array_like
        Semi-amplitude of the velocities seen, km/s.
    ecc : array_like
        Eccentricity.
    """
    gm = (period * DAY_S) * semi_amplitude ** 3 * (1.0 - ecc * ecc) ** 1.5 / (2 * np.pi)
    return gm / GM_SUN_KM3_S2


def _solve_mass(f, other, sin_i):
    """The mass m solving (m sin i)^3 / (m + other)^2 = f (all in M_sun).

    The fixed point m = (f (m + other)^2)^(1/3) / sin i contracts (its slope is
    below 2/3), so plain iteration converges from m = 0.
    """
    m = np.zeros_like(np.asarray(f, dtype=float))
    for _ in range(200):
        m = np.cbrt(f * (m + other) ** 2) / sin_i
    return m


def _sin_inclination(comp, rng, n):
    """Draws of sin i from the companion's inclination prior (None if it has none)."""
    if comp.inclination is None:
        return None
    return np.abs(np.sin(comp.inclination.sample(rng, n)))


def _amplitude_samples(model, name, orbit) -> dict:
    """Semi-amplitudes and mass functions where the velocities show them."""
    out = {}
    k = list(model.companions).index(name)
    if model.primary_has_velocities:
        out["rv_semi_amplitude"] = orbit["k_primary"]
        out["mass_function"] = mass_function(orbit["period"], orbit["k_primary"],
                                             orbit["ecc"])
    if np.any(model.velocity_rows.owner == k):
        out["rv_semi_amplitude_companion"] = orbit["k_companion"]
        out["mass_function_companion"] = mass_function(orbit["period"],
                                                       orbit["k_companion"], orbit["ecc"])
    return out


def _velocity_terms(model, rv) -> dict:
    labels = model.velocity_rows.labels
    out = {"offset": {lab: rv["offset"][:, j] for j, lab in enumerate(labels)},
           "jitter": {lab: rv["jitter"][:, j] for j, lab in enumerate(labels)}}
    for term in ("slope", "curvature"):
        if model.trend_has(term):
            out[term] = rv[term]
    return out


def primary_mass_given(model) -> bool:
    """True where the user stated the primary's mass (fixed or with a prior)."""
    return model.spec.central_mass != DEFAULT_CENTRAL_MASS_PRIOR


def _velocity_only_samples(model, phys, rng) -> dict:
    """Velocities alone: amplitudes, mass functions and whatever masses follow."""
    n = phys["companions"][next(iter(phys["companions"]))]["period"].size
    primary_mass = (model.spec.central_mass.sample(rng, n) if primary_mass_given(model)
                    else None)
    out = {"companions": {}}
    central = None
    central_from = None
    for name, orbit in phys["companions"].items():
        comp = model.companions[name]
        block = _timing_samples(model, name, orbit)
        block.update(_amplitude_samples(model, name, orbit))
        sin_i = _sin_inclination(comp, rng, n)
        if "inclination" not in block and sin_i is not None:
            block["inclination"] = np.degrees(np.arcsin(sin_i))
        k1, k2 = orbit.get("k_primary"), orbit.get("k_companion")
        if k1 is not None and k2 is not None:
            # Double-lined: (K1 + K2)^2 K_i P (1 - e^2)^(3/2) / (2 pi G) = M_j sin^3 i.
            scale = mass_function(orbit["period"], k1 + k2, orbit["ecc"]) / (k1 + k2)
            block["mass_sin3i"] = scale * k1
            block["primary_mass_sin3i"] = scale * k2
            block["mass_ratio"] = k1 / k2
            if sin_i is not None:
                block["mass"] = block["mass_sin3i"] / sin_i ** 3
                if central is None:
                    central, central_from = block["primary_mass_sin3i"] / sin_i ** 3, name
        elif k1 is not None and primary_mass is not None:
            f = block["mass_function"]
            block["minimum_mass"] = _solve_mass(f, primary_mass, 1.0)
            if sin_i is not None:
                block["mass"] = _solve_mass(f, primary_mass, sin_i)
        elif k2 is not None and k1 is None and sin_i is not None and central is None:
            mass = comp.mass.sample(rng, n) if comp.mass is not None else np.zeros(n)
            central = _solve_mass(block["mass_function_companion"], mass, sin_i)
            central_from = name
        out["companions"][name] = block
    if central is not None:
        out.update(_central_samples(central, rng))
    out["central_mass_note"] = _central_note(model, central_from, primary_mass)
    out["rv"] = _velocity_terms(model, phys["rv"])
    return out


def _central_note(model, central_from, primary_mass):
    if central_from is not None:
        return (f"radial velocities alone: the central mass follows from companion "
                f"'{central_from}' through its stated inclination prior; it is only "
                f"as good as that prior")
    note = ("radial velocities alone do not fix the central mass: they give the "
            "mass function (and, with both bodies' velocities, M sin^3 i), not the "
            "inclination")
    if model.primary_has_velocities and primary_mass is not None:
        note += ("; the minimum masses use the primary mass as stated ("
                 f"{model.spec.central_mass.describe('M_sun')}), not a measurement")
    elif model.primary_has_velocities:
        note += ("; give the primary's mass (central_mass_prior) for the companions' "
                 "minimum masses")
    return note + "; give an inclination prior (e.g. from an eclipse) for the masses"


def _timing_samples(model, name, orbit) -> dict:
    """Period, e, omega and the periapsis time, shared by every kind of fit."""
    omega, _ = _shift_into(_unwrap(orbit["omega"], 2 * np.pi), 2 * np.pi)
    mean_ref = _unwrap(orbit["mean_anomaly_ref"], 2 * np.pi)
    period = orbit["period"]
    t_ref = model.epoch_jd + model.reference_epoch(name)
    return {"period": period, "eccentricity": orbit["ecc"],
            "periapsis_argument": np.degrees(omega),
            "periapsis_time": t_ref - mean_ref * period / (2 * np.pi)}


def _mass_kg(gm_km3_s2, g_draws):
    from massfit.constants import G_SI

    return gm_km3_s2 * 1e9 / (G_SI * g_draws)


def _companion_samples(model, name, orbit, parallax):
    width = model.node_width[name]
    node, _ = _shift_into(_unwrap(orbit["node"], width), width)
    # Each sample's node moved by whole windows (the unwrapping and the shift both
    # move it); with a window of pi every such step carries omega by pi as well.
    turns = np.round((node - orbit["node"]) / width)
    # Moving (omega, node) by pi together leaves the mean anomaly as it is.
    omega = orbit["omega"] + (np.pi * turns if width < 2 * np.pi else 0.0)
    out = _timing_samples(model, name, dict(orbit, omega=omega))
    a = orbit["semi_major_axis"]
    out.update(semi_major_axis=a, semi_major_axis_km=a * AU_KM,
               inclination=np.degrees(orbit["inc"]), ascending_node=np.degrees(node))
    pole = model.primary_pole()
    if pole is not None:
        from massfit.orbits.viewing import against_equator

        out["inclination_to_equator"], out["node_on_equator"] = against_equator(
            orbit["inc"], orbit["node"], *pole)
    angular = _angular_scale(model, name, parallax)
    if angular is not None:
        out["semi_major_axis_angle"] = a * angular
    if not model.companions[name].mass.is_fixed:
        out["mass"] = orbit["mass"]
    return out


def _angular_scale(model, name, parallax):
    """mas per au for this companion: the parallax, or the median per-row distance."""
    rows = model.rows[name]
    if parallax is not None and np.any(rows.uses_parallax):
        return parallax
    distance = model.observations.astrometry.distance[rows.index]
    distance = distance[np.isfinite(distance)]
    if distance.size:
        return 1e3 / np.median(distance)
    return None

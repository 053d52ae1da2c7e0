"""From a chain to physical numbers: derived samples, intervals and the summary dict.

Intervals follow the conventions: the median, the 68.27 % interval from the 15.865th to
the 84.135th percentile and the 95.45 % interval from the 2.275th to the 97.725th.
"""

from __future__ import annotations

import numpy as np

from .constants import AU_KM, G_REL_UNCERTAINTY, GM_SUN, GM_SUN_KM3_S2, MASS_UNITS
from .model import OrbitModel

__all__ = ["interval", "derived_samples", "PERCENTILES", "MASS_UNIT_LABELS"]

PERCENTILES = (2.275, 15.865, 50.0, 84.135, 97.725)
MASS_UNIT_LABELS = {"Msun": r"M_\odot", "Mjup": r"M_\mathrm{J}", "Mearth": r"M_\oplus"}


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
        ``central_gm`` (km^3/s^2), ``central_mass`` (kg), ``central_mass_Msun``,
        ``central_mass_Mjup``, ``central_mass_Mearth``, ``parallax`` (mas, or absent)
        and ``companions``: name -> dict of ``period`` (d), ``semi_major_axis`` (au),
        ``semi_major_axis_km``, ``semi_major_axis_mas`` (where angular),
        ``eccentricity``, ``inclination``, ``periapsis_argument``,
        ``ascending_node`` (deg), ``periapsis_time`` (JD, TDB) and ``mass`` (M_sun,
        where sampled).
    """
    phys = model.physical(samples)
    rng = np.random.default_rng(seed)
    gm = phys["central_mass"] * GM_SUN_KM3_S2
    out = {"central_gm": gm}
    # The data fix GM; the mass in kg also carries the uncertainty of G itself.
    g_draws = 1.0 + G_REL_UNCERTAINTY * rng.standard_normal(gm.size)
    out["central_mass"] = _mass_kg(gm, g_draws)
    for name, gm_unit in MASS_UNITS.items():
        out[f"central_mass_{name}"] = gm / gm_unit
    if phys["parallax"] is not None:
        out["parallax"] = phys["parallax"]
    out["companions"] = {}
    for name, orbit in phys["companions"].items():
        out["companions"][name] = _companion_samples(model, name, orbit, phys["parallax"])
    return out


def _mass_kg(gm_km3_s2, g_draws):
    from .constants import G_SI

    return gm_km3_s2 * 1e9 / (G_SI * g_draws)


def _companion_samples(model, name, orbit, parallax):
    width = model.node_width[name]
    node, _ = _shift_into(_unwrap(orbit["node"], width), width)
    # Each sample's node moved by whole windows (the unwrapping and the shift both
    # move it); with a window of pi every such step carries omega by pi as well.
    turns = np.round((node - orbit["node"]) / width)
    omega = orbit["omega"] + (np.pi * turns if width < 2 * np.pi else 0.0)
    omega, _ = _shift_into(_unwrap(omega, 2 * np.pi), 2 * np.pi)
    # Moving (omega, node) by pi together leaves the mean anomaly as it is.
    mean_ref = _unwrap(orbit["mean_anomaly_ref"], 2 * np.pi)
    period = orbit["period"]
    t_ref = model.epoch_jd + model.reference_epoch(name)
    a = orbit["semi_major_axis"]
    out = {
        "period": period,
        "semi_major_axis": a,
        "semi_major_axis_km": a * AU_KM,
        "eccentricity": orbit["ecc"],
        "inclination": np.degrees(orbit["inc"]),
        "periapsis_argument": np.degrees(omega),
        "ascending_node": np.degrees(node),
        "periapsis_time": t_ref - mean_ref * period / (2 * np.pi),
    }
    angular = _angular_scale(model, name, parallax)
    if angular is not None:
        out["semi_major_axis_mas"] = a * angular
    if not model.companions[name].mass.is_fixed:
        out["mass"] = orbit["mass"]
    return out


def _angular_scale(model, name, parallax):
    """mas per au for this companion: the parallax, or the median per-row distance."""
    rows = model._rows[name]
    if parallax is not None and np.any(rows.uses_parallax):
        return parallax
    distance = model.observations.astrometry.distance[rows.index]
    distance = distance[np.isfinite(distance)]
    if distance.size:
        return 1e3 / np.median(distance)
    return None

"""The frame terms, the relativistic terms, the distance and its correlation with the
mass: samples, summary blocks and the adequacy entries of each relativistic term.

Summary keys (where the fit has them):

``frame``
    Interval blocks ``east``, ``north`` (mas), ``motion_east``, ``motion_north``
    (mas/yr), ``velocity`` (km/s) of the primary in the data's frame, and
    ``reference_epoch_jd`` (JD TDB, the epoch of the position).
``relativity``
    The switches, ``precession_scale`` (an interval block; fixed values as such) and
    per companion ``periapsis_advance`` (arcmin per orbit, the relativistic value
    6 pi GM / (c^2 a (1 - e^2)) before the scale).
``distance``
    The distance in pc (1000 / parallax in mas), an interval block.
``mass_distance_correlation``
    Pearson correlation of log mass and log distance over the samples, and of mass
    and distance themselves.
"""

from __future__ import annotations

import copy
from dataclasses import replace

import numpy as np

from massfit.constants import GM_SUN
from massfit.orbits.relativity import TERMS, periapsis_advance
from massfit.summarise.quantities import SYSTEM, SYSTEM_SAMPLED

__all__ = ["extra_samples", "summary_blocks", "relativity_adequacy", "relativity_lines",
           "summary_lines", "corner_quantity", "corner_defaults", "table_entries",
           "system_blocks"]

ARCMIN_PER_RAD = 180.0 * 60.0 / np.pi


def extra_samples(model, phys) -> dict:
    """Samples of the frame terms, the precession scale, each companion's periapsis
    advance per orbit (arcmin) and the distance (pc)."""
    out = {}
    if phys.get("frame") is not None:
        out["frame"] = {term: np.asarray(values) for term, values in phys["frame"].items()
                        if f"frame.{term}" in model.column_of}
    rel = model.spec.relativity
    if rel is not None:
        block = {"advance": {}}
        if "precession_scale" in phys:
            block["precession_scale"] = phys["precession_scale"]
        for name, orbit in phys["companions"].items():
            gm = GM_SUN * (phys["central_mass"] + orbit["mass"])
            block["advance"][name] = ARCMIN_PER_RAD * periapsis_advance(
                gm, orbit["semi_major_axis"], orbit["ecc"])
        out["relativity"] = block
    if phys.get("parallax") is not None and "parallax" in model.column_of:
        out["distance"] = 1e3 / phys["parallax"]
    return out


def _correlation(x, y):
    if np.std(x) == 0 or np.std(y) == 0:
        return None
    return float(np.corrcoef(x, y)[0, 1])


def summary_blocks(model, samples, interval) -> dict:
    """The summary's ``frame``, ``relativity``, ``distance`` and
    ``mass_distance_correlation`` entries (``interval(values, unit)`` makes a block)."""
    out = {}
    if "frame" in samples:
        out["frame"] = {term: interval(values, SYSTEM[f"frame.{term}"].unit_text)
                        for term, values in samples["frame"].items()}
        out["frame"]["reference_epoch_jd"] = float(model.epoch_jd)
    if "relativity" in samples:
        rel = samples["relativity"]
        block = model.spec.relativity.describe()
        if "precession_scale" in rel:
            block["precession_scale"] = interval(rel["precession_scale"],
                                                 SYSTEM["precession_scale"].unit_text)
        block["periapsis_advance"] = {name: interval(values, "arcmin / orbit")
                                      for name, values in rel["advance"].items()}
        out["relativity"] = block
    if "distance" in samples:
        out["distance"] = interval(samples["distance"], SYSTEM["distance"].unit_text)
        mass = samples["central_mass_solar"]
        out["mass_distance_correlation"] = {
            "log_mass_log_distance": _correlation(np.log(mass), np.log(samples["distance"])),
            "mass_distance": _correlation(mass, samples["distance"])}
    return out


def _switched_off(model, term):
    """A copy of ``model`` with one relativistic term (or the light time) off; the
    parameters stay the same, so the same theta can be evaluated."""
    other = copy.copy(model)
    spec = model.spec
    if term == "romer_delay":
        other.spec = replace(spec, romer_delay=False)
    else:
        other.spec = replace(spec, relativity=replace(spec.relativity, **{term: False}))
    return other


def relativity_adequacy(model, theta):
    """chi^2 at ``theta`` with each relativistic term in the fit, and without it.

    Returns None where the fit has none. The chi^2 without a term is at the same
    parameters, not refitted: it says how much the data see the term at the best fit
    (a refit without it can absorb part of it into the orbits and the frame terms).
    """
    rel = model.spec.relativity
    terms = []
    if rel is not None:
        terms = [t for t in TERMS if getattr(rel, t)]
    if model.spec.romer_delay:
        terms.append("romer_delay")
    if not terms:
        return None
    theta = np.asarray(theta, dtype=float)[None, :]

    def chi2(m):
        res = m.residuals(theta)[0]
        return float(res @ res)

    with_all = chi2(model)
    n_values = int(model.residuals(theta).shape[1])
    out = {"chi2": with_all, "n_values": n_values, "terms": {},
           "note": "chi2 without a term is at the best fit's parameters, not refitted"}
    for term in terms:
        without = chi2(_switched_off(model, term))
        out["terms"][term] = {"chi2_without": without, "delta_chi2": without - with_all}
    return out


def relativity_lines(block) -> list:
    """Terminal lines of the relativistic terms' adequacy entries."""
    if not block:
        return []
    lines = [f"  relativistic terms at the best fit (chi2 {block['chi2']:.1f}; without "
             f"each, not refitted):"]
    for term, entry in block["terms"].items():
        lines.append(f"    {term.replace('_', ' '):<24} chi2 without "
                     f"{entry['chi2_without']:.1f} (delta {entry['delta_chi2']:+.1f})")
    return lines



def summary_lines(summary, format_value) -> list:
    """Terminal lines of the distance, the mass-distance correlation, the frame terms
    and the precession scale (``format_value(block)`` writes an interval block)."""
    lines = []
    if summary.get("distance"):
        corr = summary["mass_distance_correlation"]["log_mass_log_distance"]
        lines.append(f"  distance = {format_value(summary['distance'])} pc   "
                     f"(correlation of log mass and log distance: "
                     f"{'n/a' if corr is None else f'{corr:+.3f}'})")
    frame = summary.get("frame")
    if frame:
        lines.append(f"Frame terms of the central mass (position at JD "
                     f"{frame['reference_epoch_jd']:.1f} TDB)")
        for term, block in frame.items():
            if term != "reference_epoch_jd":
                lines.append(f"  {term:<13}= {format_value(block)} {block['unit']}")
    rel = summary.get("relativity")
    if rel:
        on = [k.replace("_", " ") for k in TERMS if rel.get(k)]
        lines.append(f"Relativistic terms: {', '.join(on) or 'none'}")
        scale = rel["precession_scale"]
        if isinstance(scale, dict):
            lines.append(f"  precession scale = {format_value(scale)} (1 = relativistic)")
        for name, block in rel["periapsis_advance"].items():
            lines.append(f"  {name}: periapsis advance {format_value(block)} arcmin/orbit "
                         f"(relativistic value)")
    return lines


def _sampled_values(samples, key):
    """Samples of one of :data:`SYSTEM_SAMPLED`'s keys, or None."""
    if key == "distance":
        return samples.get("distance")
    if key == "precession_scale":
        return samples.get("relativity", {}).get("precession_scale")
    return samples.get("frame", {}).get(key.split(".", 1)[1])


def corner_quantity(samples, key):
    """(values, symbol, LaTeX unit, unit text) of a corner key this module adds
    (``distance``, ``precession_scale``, ``frame.<term>``), or None; the words and
    units from :data:`massfit.summarise.quantities.SYSTEM`."""
    if key not in SYSTEM_SAMPLED:
        return None
    values = _sampled_values(samples, key)
    d = SYSTEM[key]
    return None if values is None else (values, d.symbol, d.unit_latex, d.unit_text)


def corner_defaults(samples) -> list:
    """The corner keys of a fit with frame or relativistic terms: the distance, the
    precession scale and the frame terms that were sampled."""
    return [key for key in SYSTEM_SAMPLED if corner_quantity(samples, key) is not None]


def system_blocks(summary) -> dict:
    """The summary's interval block of each of :data:`SYSTEM_SAMPLED`'s keys (None
    where the fit has no such sampled quantity)."""
    scale = (summary.get("relativity") or {}).get("precession_scale")
    blocks = {"distance": summary.get("distance"),
              "precession_scale": scale if isinstance(scale, dict) else None}
    for term, block in (summary.get("frame") or {}).items():
        if isinstance(block, dict):
            blocks[f"frame.{term}"] = block
    return {key: blocks.get(key) for key in SYSTEM_SAMPLED}


def table_entries(summary) -> list:
    """Rows for the parameter tables: (key, words, symbol, LaTeX unit, unit text,
    interval block) of the distance, the precession scale and the frame terms."""
    return [(key, SYSTEM[key].words, SYSTEM[key].symbol,
             f"${SYSTEM[key].unit_latex}$" if SYSTEM[key].unit_latex else "",
             SYSTEM[key].unit_text, block)
            for key, block in system_blocks(summary).items() if block is not None]

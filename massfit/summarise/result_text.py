"""The terminal's text of a fit's summary: the lines of each companion, of the
velocities and of the fit quality, and the rounding of each value (a result's
:meth:`~massfit.result.fit_result.FitResult.report` puts them together)."""

from __future__ import annotations

from massfit.summarise.derived import SCALED_MASSES, in_best_mass_unit
from massfit.summarise.quantities import COMPANION
from massfit.summarise.rounding import format_interval

__all__ = ["companion_lines", "companion_line", "velocity_lines", "value_or_fixed",
           "format_value", "quality_line", "angle_text", "COMPANION_LINES"]


#: Terminal lines of a companion: (summary key, a note after the unit).
COMPANION_LINES = (
    ("period", ""), ("eccentricity", ""), ("inclination", ""),
    ("periapsis_argument", " (the companion's; the primary's is omega + 180)"),
    ("ascending_node", ""), ("mass", ""), ("rv_semi_amplitude", " (primary)"),
    ("rv_semi_amplitude_companion", " (companion)"), ("mass_function", ""),
    ("minimum_mass", " (m sin i: i = 90 deg)"), ("mass_sin3i", ""), ("primary_mass_sin3i", ""),
    ("inclination_to_equator", " (to the primary's equator)"),
    ("node_on_equator", " (on the primary's equator)"),
)


def companion_lines(comp, period_lines=None) -> list:
    """A companion's terminal lines; ``period_lines`` (separated modes) replace the
    period's."""
    lines = []
    for key, unit_note in COMPANION_LINES:
        if key not in comp:
            continue
        if key == "period" and period_lines:
            lines.extend(period_lines)
        else:
            lines.append(companion_line(comp, key, unit_note))
        if key == "period" and "semi_major_axis" in comp:
            a_line = (f"  {'a':<8}= {format_value(comp['semi_major_axis'])} au"
                      f" = {format_value(comp['semi_major_axis_km'])} km")
            if "semi_major_axis_angle" in comp:
                a_line += " = " + angle_text(comp["semi_major_axis_angle"])
            lines.append(a_line)
    return lines


def companion_line(comp, key, unit_note) -> str:
    label, unit = COMPANION[key].plain, COMPANION[key].unit_text.replace(" / ", "/")
    unit += unit_note
    note = ""
    if key == "periapsis_argument" and comp.get("node_ambiguity_deg"):
        note = "; or +180 with node +180"
    block = comp[key]
    if key in SCALED_MASSES:
        block, _ = in_best_mass_unit(block)
        unit = unit.replace("M_sun", block["unit"], 1)
    if note:
        unit = unit[:-1] + note + ")" if unit.endswith(")") else f"{unit} ({note[2:]})"
    return f"  {label:<8}= {format_value(block)} {unit}".rstrip()


def velocity_lines(rv) -> list:
    """The systemic velocity, jitter and trend of each instrument, for the terminal."""
    lines = ["Radial velocities (per instrument)"]
    for label in rv["offset"]:
        name = label or "(no instrument)"
        for term, key in (("gamma", "offset"), ("jitter", "jitter")):
            lines.append(f"  {term:<8}= {value_or_fixed(rv[key][label])} km/s   {name}")
    for term, unit in (("trend_slope", "km/s/d"), ("trend_curvature", "km/s/d^2")):
        if term in rv:
            lines.append(f"  {term.split('_')[1]:<8}= {format_value(rv[term])} {unit}")
    return lines


def value_or_fixed(block) -> str:
    """``fixed at v`` for a value that was not sampled (an interval of no width), else
    the interval as :func:`format_value` writes it."""
    if block["lower_95"] == block["upper_95"] == block["median"]:
        return f"fixed at {block['median']:g}"
    return format_value(block)


def format_value(block) -> str:
    """``median +upper -lower`` (or ``median +/- error``) rounded by the interval.

    See :func:`massfit.summarise.rounding.round_interval` for the rounding rule.
    """
    return format_interval(block)


def quality_line(quality) -> str:
    """The terminal's line for the summary's fit_quality verdict."""
    if quality["verdict"] == "not tested":
        return f"Fit quality: not tested ({quality.get('note', '')})"
    return (f"Fit quality: {quality['verdict']} (chi2 = {quality['chi2']:.4g} for "
            f"{quality['n_values']} values and {quality['n_parameters']} parameters, "
            f"p = {quality['p_value']:.2g}; poor below p = "
            f"{quality['poor_below_p_value']:g})")


def angle_text(block_mas):
    """An angular interval block (mas) in mas or arcsec, whichever reads better."""
    if block_mas["median"] is not None and block_mas["median"] >= 1e4:
        scaled = {k: (v / 1e3 if isinstance(v, float) else v) for k, v in block_mas.items()}
        return f"{format_value(scaled)} arcsec"
    return f"{format_value(block_mas)} mas"

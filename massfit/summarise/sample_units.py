"""The unit of every posterior quantity, in one place.

The summary (``summary.json``), the samples table (``samples.ecsv``) and the ArviZ
export all take their units from here. Strings are astropy unit strings, except
``"JD (TDB)"`` (a Julian date, no unit) and ``""`` (dimensionless).
"""

from __future__ import annotations

__all__ = ["SAMPLE_UNITS", "COMPANION_SAMPLE_UNITS", "VELOCITY_SAMPLE_UNITS"]

#: Units of the central body's samples (keys of ``FitResult.samples``).
SAMPLE_UNITS = {"central_gm": "km3 / s2", "central_mass": "kg", "central_mass_Msun": "M_sun",
                "central_mass_Mjup": "M_jup", "central_mass_Mearth": "M_earth",
                "parallax": "mas"}

#: Units of each companion's samples (keys of ``FitResult.samples["companions"][name]``).
COMPANION_SAMPLE_UNITS = {
    "period": "d", "semi_major_axis": "au", "semi_major_axis_km": "km",
    "semi_major_axis_mas": "mas", "eccentricity": "", "inclination": "deg",
    "periapsis_argument": "deg", "ascending_node": "deg", "periapsis_time": "JD (TDB)",
    "rv_semi_amplitude": "km / s", "rv_semi_amplitude_companion": "km / s",
    "mass_ratio": "", "inclination_to_equator": "deg", "node_on_equator": "deg",
    **{key: "M_sun" for key in ("mass", "mass_function", "mass_function_companion",
                                "minimum_mass", "mass_sin3i", "primary_mass_sin3i")},
}

#: Units of the velocity terms (keys of ``FitResult.samples["rv"]``).
VELOCITY_SAMPLE_UNITS = {"offset": "km / s", "jitter": "km / s", "slope": "km / s / d",
                         "curvature": "km / s / d2"}

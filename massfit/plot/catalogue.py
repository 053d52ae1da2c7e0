"""The figures by name, without importing them: each file stem and where its function
lives. :mod:`massfit.plot.figures` resolves them (``FIGURES``); the command line lists
the names from here, so that ``massfit --help`` does not load matplotlib.
"""

from __future__ import annotations

__all__ = ["FIGURE_FUNCTIONS", "ON_REQUEST"]

#: File stem in an output folder -> (module, function) of the figure.
FIGURE_FUNCTIONS = {
    "corner": ("massfit.plot.corner", "corner_plot"),
    "orbits": ("massfit.plot.sky", "orbit_plot"),
    "residuals": ("massfit.plot.residuals", "residual_plot"),
    "periodogram": ("massfit.plot.residuals", "periodogram_plot"),
    "rv": ("massfit.plot.velocities", "velocity_plot"),
    "rv_time": ("massfit.plot.velocities", "velocity_time_plot"),
    "equator_residuals": ("massfit.plot.residuals", "equator_residual_plot"),
    "corner_full": ("massfit.plot.corner", "full_corner_plot"),
    "frame_orbits": ("massfit.plot.dark_mass", "frame_orbit_plot"),
    "rv_redshift": ("massfit.plot.dark_mass", "redshift_plot"),
}

#: Figures drawn only when asked for by name (not part of every output folder).
ON_REQUEST = ("corner_full",)

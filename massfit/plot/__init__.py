"""Step 7a, plot: the figures, each a function that returns a matplotlib Figure.

Each takes a :class:`~massfit.result.fit_result.FitResult` and returns a Figure sized for
a journal: one column (3.5 in) or the full page width (7.1 in), fonts of 7-8 pt, vector
output when saved as PDF.

Modules by figure family: ``style`` (sizes, settings, colours, saving), ``corner``,
``sky`` (orbits on the sky and their O-C), ``residuals`` (normalised residuals,
periodograms, the O-C in a planet's frame), ``velocities`` (folded and against time),
and ``figures`` (the registry :data:`FIGURES`: file stem -> function).
"""

from massfit.plot.corner import (DEFAULT_COMPANION_QUANTITIES, corner_plot, default_corner_parameters,
                                 full_corner_plot)
from massfit.plot.figures import FIGURES, applicable_figures
from massfit.plot.residuals import equator_residual_plot, periodogram_plot, residual_plot
from massfit.plot.sky import error_ellipses, orbit_plot
from massfit.plot.style import COLUMN_WIDTH, PAGE_WIDTH, STYLE, math_name, save_figure, style
from massfit.plot.velocities import velocity_plot, velocity_time_plot

__all__ = ["corner_plot", "full_corner_plot", "orbit_plot", "residual_plot", "periodogram_plot", "velocity_plot",
           "velocity_time_plot", "equator_residual_plot", "error_ellipses",
           "default_corner_parameters", "DEFAULT_COMPANION_QUANTITIES", "save_figure", "style",
           "math_name", "FIGURES", "applicable_figures", "COLUMN_WIDTH", "PAGE_WIDTH", "STYLE"]

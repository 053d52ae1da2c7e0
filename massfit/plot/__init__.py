"""Step 7a, plot: the figures, each a function that returns a matplotlib Figure.

Each takes a :class:`~massfit.result.fit_result.FitResult` and returns a Figure sized for
a journal: one column (3.5 in) or the full page width (7.1 in), fonts of 7-8 pt, vector
output when saved as PDF.

Modules by figure family: ``style`` (sizes, settings, colours, saving), ``corner``,
``sky`` (orbits on the sky and their O-C), ``residuals`` (normalised residuals,
periodograms, the O-C in a planet's frame), ``velocities`` (folded and against time),
and ``figures`` (the registry :data:`FIGURES`: file stem -> function).
"""

# Each public name and its module, imported on first use (``massfit.plot.catalogue``
from massfit.lazy import lazy_names

# is read by the command line without loading matplotlib).
_WHERE = {
    "corner_plot": "massfit.plot.corner", "full_corner_plot": "massfit.plot.corner",
    "default_corner_parameters": "massfit.plot.corner",
    "DEFAULT_COMPANION_QUANTITIES": "massfit.plot.corner",
    "FIGURES": "massfit.plot.figures", "applicable_figures": "massfit.plot.figures",
    "equator_residual_plot": "massfit.plot.residuals",
    "periodogram_plot": "massfit.plot.residuals", "residual_plot": "massfit.plot.residuals",
    "error_ellipses": "massfit.plot.sky", "orbit_plot": "massfit.plot.sky",
    "COLUMN_WIDTH": "massfit.plot.style", "PAGE_WIDTH": "massfit.plot.style",
    "STYLE": "massfit.plot.style", "math_name": "massfit.plot.style",
    "save_figure": "massfit.plot.style", "style": "massfit.plot.style",
    "velocity_plot": "massfit.plot.velocities",
    "velocity_time_plot": "massfit.plot.velocities",
}


__getattr__, __dir__ = lazy_names(globals(), _WHERE)


__all__ = ["corner_plot", "full_corner_plot", "orbit_plot", "residual_plot", "periodogram_plot", "velocity_plot",
           "velocity_time_plot", "equator_residual_plot", "error_ellipses",
           "default_corner_parameters", "DEFAULT_COMPANION_QUANTITIES", "save_figure", "style",
           "math_name", "FIGURES", "applicable_figures", "COLUMN_WIDTH", "PAGE_WIDTH", "STYLE"]

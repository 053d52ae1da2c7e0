"""The registry of figures: the file stem each is written under in an output folder, and
which of them a fit's data can fill.

A new figure is a function ``(result, **options) -> Figure`` in the module of its family
(or a new module beside them) and one entry in :data:`FIGURES`.
"""

from __future__ import annotations

import numpy as np

from massfit.plot.corner import corner_plot, full_corner_plot
from massfit.plot.dark_mass import frame_orbit_plot, redshift_plot
from massfit.plot.residuals import equator_residual_plot, periodogram_plot, residual_plot
from massfit.plot.sky import orbit_plot
from massfit.plot.velocities import velocity_plot, velocity_time_plot

__all__ = ["FIGURES", "ON_REQUEST", "applicable_figures"]

#: File stem in an output folder -> figure function.
FIGURES = {"corner": corner_plot, "orbits": orbit_plot, "residuals": residual_plot,
           "periodogram": periodogram_plot, "rv": velocity_plot, "rv_time": velocity_time_plot,
           "equator_residuals": equator_residual_plot, "corner_full": full_corner_plot,
           "frame_orbits": frame_orbit_plot, "rv_redshift": redshift_plot}

#: Figures drawn only when asked for by name (not part of every output folder).
ON_REQUEST = ("corner_full",)

#: Figures that need relative astrometry.
_SKY_FIGURES = ("orbits",)
#: Figures that need radial velocities.
_VELOCITY_FIGURES = ("rv", "rv_time")


def applicable_figures(result) -> list:
    """Stems of :data:`FIGURES` that this fit's data can fill, in order (those of
    :data:`ON_REQUEST` left out)."""
    model = result.model
    return [stem for stem in FIGURES
            if stem not in ON_REQUEST
            and not (stem in _SKY_FIGURES and model.velocity_only)
            and not (stem in _VELOCITY_FIGURES and not model.has_velocities)
            and not (stem == "equator_residuals" and getattr(model, "sight", None) is None)
            and _frame_or_relativity_allows(stem, model)]


def _frame_or_relativity_allows(stem, model) -> bool:
    """With frame terms the orbits are drawn about the fitted mass position
    (``frame_orbits``, not ``orbits``); with frame or relativistic terms the stars'
    velocities with their relativistic shift (``rv_redshift``, not ``rv`` and
    ``rv_time``, unless the primary's own velocities need those)."""
    framed = getattr(model.spec, "frame", None) is not None
    special = framed or getattr(model.spec, "relativity", None) is not None
    own = model.has_velocities and bool(np.any(model.velocity_rows.owner >= 0))
    if stem == "orbits":
        return not framed
    if stem in _VELOCITY_FIGURES:
        return not special or model.primary_has_velocities
    if stem == "frame_orbits":
        return framed
    if stem == "rv_redshift":
        return special and own
    return True

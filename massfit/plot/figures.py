"""The registry of figures: the file stem each is written under in an output folder, and
which of them a fit's data can fill.

A new figure is a function ``(result, **options) -> Figure`` in the module of its family
(or a new module beside them) and one entry in
:data:`massfit.plot.catalogue.FIGURE_FUNCTIONS`.
"""

from __future__ import annotations

import importlib

import numpy as np

from massfit.plot.catalogue import FIGURE_FUNCTIONS, ON_REQUEST

__all__ = ["FIGURES", "ON_REQUEST", "applicable_figures"]

#: File stem in an output folder -> figure function (named in
#: :data:`massfit.plot.catalogue.FIGURE_FUNCTIONS`).
FIGURES = {stem: getattr(importlib.import_module(module), function)
           for stem, (module, function) in FIGURE_FUNCTIONS.items()}

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

"""The frame terms and the relativistic terms as the joint model uses them: their
checks, their sampled parameters, their values per walker and the relativistic
velocity terms at the velocity rows.

:class:`massfit.model.orbit_model.OrbitModel` calls these through small hooks; the
physics lives in :mod:`massfit.model.frame` and :mod:`massfit.orbits.relativity`.
"""

from __future__ import annotations

import numpy as np

from massfit.constants import GM_SUN
from massfit.errors import ModelError
from massfit.model import frame as frame_terms
from massfit.orbits.dynamics import Keplerian, romer_factor
from massfit.orbits.relativity import velocity_terms_of_state

__all__ = ["check", "parameters", "frame_values", "precession_scale", "velocity_terms"]

#: Name of the sampled precession scale.
PRECESSION_SCALE = "relativity.precession_scale"


def check(model) -> None:
    """Frame terms need astrometry on one sky frame; relativity the two-body model."""
    spec = model.spec
    if spec.frame is not None:
        if model.velocity_only:
            raise ModelError("frame terms (the primary's position and motion) need "
                             "astrometry")
        frame_terms.check_rows(model)
    if spec.relativity is not None and type(model.dynamics) is not Keplerian:
        raise ModelError(f"relativistic terms need the keplerian model, not the "
                         f"{model.dynamics.label} one")
    if spec.relativity is not None and model.velocity_only:
        raise ModelError("relativistic terms need astrometry (the orbit's size)")


def parameters(spec, has_velocities) -> list:
    """The sampled frame terms and precession scale: (name, label, prior or None for
    a flat prior), in order."""
    out = []
    frame = spec.frame
    for term in (() if frame is None else frame_terms.FRAME_TERMS):
        if term == "velocity" and not has_velocities:
            continue  # no velocity to carry it
        prior = frame.prior(term)
        if prior is None or not prior.is_fixed:
            out.append((f"frame.{term}", frame.label(term), prior))
    rel = spec.relativity
    if rel is not None and rel.precession and rel.precession_scale is not None \
            and not rel.precession_scale.is_fixed:
        out.append((PRECESSION_SCALE, r"$f_{\rm prec}$", rel.precession_scale))
    return out


def frame_values(spec, column_of, col, n):
    """The frame terms (mas, mas/yr, km/s), each shape (n,), or None without them."""
    frame = spec.frame
    if frame is None:
        return None
    out = {}
    for term in frame_terms.FRAME_TERMS:
        prior = frame.prior(term)
        if f"frame.{term}" in column_of:
            out[term] = col(f"frame.{term}")
        else:
            out[term] = np.full(n, prior.value if prior is not None else 0.0)
    return out


def precession_scale(spec, column_of, col, n):
    """The precession scale per walker (sampled, fixed, or 1)."""
    if PRECESSION_SCALE in column_of:
        return col(PRECESSION_SCALE)
    scale = spec.relativity.precession_scale
    return np.full(n, 1.0 if scale is None else scale.value)


def velocity_terms(model, phys) -> dict:
    """The relativistic terms (and the light time) on the companions' own velocities,
    km/s, each shape (n, n_rows); zero on the primary's rows."""
    vel = model.velocity_rows
    n = next(iter(phys["companions"].values()))["period"].shape[0]
    out = {key: np.zeros((n, vel.t.size)) for key in
           ("gravitational_redshift", "transverse_doppler", "romer")}
    for k, (name, orbit) in enumerate(phys["companions"].items()):
        own = np.flatnonzero(vel.owner == k)
        if own.size == 0:
            continue
        position, velocity = model.dynamics.states_at(model, phys, name, vel.t[own])
        gm = GM_SUN * (phys["central_mass"] + orbit["mass"])
        romer = None
        if model.spec.romer_delay:
            romer = romer_factor(phys["central_mass"], orbit["mass"])
        terms = velocity_terms_of_state(position, velocity, gm, model.spec.relativity,
                                        romer)
        for key, value in terms.items():
            out[key][:, own] = value
    return out

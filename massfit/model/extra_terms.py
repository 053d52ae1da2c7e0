"""The frame terms and the relativistic terms as the joint model uses them: their
checks, their sampled parameters, their values per walker and the relativistic
velocity terms at the velocity rows.

:class:`massfit.model.orbit_model.OrbitModel` calls these through small hooks; the
physics lives in :mod:`massfit.model.frame` and :mod:`massfit.orbits.relativity`.
"""

from __future__ import annotations

import numpy as np

from massfit.constants import C_AU_PER_DAY, GM_SUN, KM_S_PER_AU_DAY
from massfit.errors import ModelError
from massfit.model import frame as frame_terms
from massfit.orbits.dynamics import Keplerian, romer_factor
from massfit.orbits.relativity import exact_shift, velocity_terms_of_state

__all__ = ["check", "parameters", "frame_values", "precession_scale", "velocity_terms",
           "star_velocity_terms"]

#: Light-time iterations for the emission epochs of the exact Doppler factor (the
#: delay changes by (v/c) of itself per iteration: two leave ~1e-4 of a day's delay).
EMISSION_ITERATIONS = 2

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
    out = {}
    for k, name in enumerate(phys["companions"]):
        own = np.flatnonzero(vel.owner == k)
        if own.size == 0:
            continue
        for key, value in star_velocity_terms(model, phys, name, vel.t[own]).items():
            out.setdefault(key, np.zeros((n, vel.t.size)))[:, own] = value
    return out


def star_velocity_terms(model, phys, name, t, *, newtonian=None) -> dict:
    """The terms on one companion's own velocity at days ``t`` (km/s, each shape
    (n, len(t))): ``gravitational_redshift``, ``transverse_doppler`` and ``romer``
    (the light time, to first order), and ``exact_doppler`` (the part of the whole
    Doppler and redshift factor beyond those, where switched on).

    ``newtonian`` collects the state at ``t`` where a dict is given (``velocity_z``:
    the companion's own line-of-sight velocity, km/s), for the figures.
    """
    orbit = phys["companions"][name]
    position, velocity = model.dynamics.states_at(model, phys, name, t)
    central = phys["central_mass"]
    gm = GM_SUN * (central + orbit["mass"])
    romer = romer_factor(central, orbit["mass"]) if model.spec.romer_delay else None
    rel = model.spec.relativity
    terms = velocity_terms_of_state(position, velocity, gm, rel, romer)
    share = central / (central + orbit["mass"])
    own = share[:, None] * velocity[2] * KM_S_PER_AU_DAY
    if newtonian is not None:
        newtonian["velocity_z"] = own
    if rel is not None and rel.exact_doppler:
        first = own + sum(terms.values())
        emitted = _emission_states(model, phys, name, t, (position, velocity), share)
        exact = exact_shift(*emitted, gm, rel, share)
        if phys.get("frame") is not None:
            # The mass's own line-of-sight motion: Doppler factors multiply.
            exact = exact + exact * phys["frame"]["velocity"][:, None] / (
                C_AU_PER_DAY * KM_S_PER_AU_DAY)
        terms["exact_doppler"] = exact - first
    return terms


def _emission_states(model, phys, name, t, state, share):
    """The companion's state at the emission epochs of light received at ``t``
    (t - z_own / c, iterated; ``state`` at ``t`` itself without the light time)."""
    if not model.spec.romer_delay:
        return state
    received = np.asarray(t, dtype=float)[None, :]
    for _ in range(EMISSION_ITERATIONS):
        delay = share[:, None] * state[0][2] / C_AU_PER_DAY
        state = model.dynamics.states_at(model, phys, name, received - delay)
    return state

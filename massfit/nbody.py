"""Companions that pull on each other: direct N-body integration.

The sampled elements of each companion are read as its **astrocentric osculating
elements** (position and velocity relative to the primary, with GM = G (M1 + m_k) in
Kepler's third law, as in the two-body model) at the model's epoch, the mean time of
all the astrometry. Each companion's phase is still sampled at its own mid-data epoch
and carried to the common epoch with its osculating mean motion; as the masses go to
zero the model becomes the two-body model exactly.

From there the astrocentric equations of motion,

    r_k'' = -G (M1 + m_k) r_k / |r_k|^3
            + sum_{j != k} G m_j [ (r_j - r_k) / |r_j - r_k|^3 - r_j / |r_j|^3 ],

(the indirect term because the primary itself is pulled; e.g. Murray & Dermott,
*Solar System Dynamics*, ch. 6, from memory) are integrated with scipy's DOP853, all
walkers stacked into one system so that one call integrates them all. The step is
shared by the stack and the error norm is taken over it; the default relative
tolerance (1e-10) leaves every walker's error far below astrometric precision.

The companions' masses are parameters: a companion whose mass is left at its default
(fixed at zero) gets the prior ``mass_prior`` (log-uniform from 1e-12 to 10 M_sun
unless stated).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from .constants import GM_SUN
from .dynamics import Keplerian, orbit_state
from .errors import ConfigError
from .priors import Fixed, LogUniform

__all__ = ["NBody", "integrate_system", "total_energy", "DEFAULT_MASS_PRIOR"]

TWO_PI = 2.0 * np.pi
#: Prior for companion masses the user left unstated (nominal solar masses).
DEFAULT_MASS_PRIOR = LogUniform(1e-12, 10.0)


def _accelerations(pos, gm_central, gm_bodies):
    """Astrocentric accelerations; pos (n, K, 3), gm_central (n,), gm_bodies (n, K)."""
    r3 = np.sum(pos * pos, axis=-1) ** 1.5  # (n, K)
    direct = -(gm_central[:, None] + gm_bodies)[..., None] * pos / r3[..., None]
    if pos.shape[1] == 1:
        return direct
    sep = pos[:, None, :, :] - pos[:, :, None, :]  # [w, k, j] = r_j - r_k
    d3 = np.sum(sep * sep, axis=-1) ** 1.5
    k = pos.shape[1]
    d3[:, np.arange(k), np.arange(k)] = np.inf  # no self-pull
    pull = np.sum(gm_bodies[:, None, :, None] * sep / d3[..., None], axis=2)
    # The primary's own acceleration towards every other companion (j != k; the
    # j = k share is already in the direct term's m_k).
    own = gm_bodies[..., None] * pos / r3[..., None]
    indirect = np.sum(own, axis=1, keepdims=True) - own
    return direct + pull - indirect


def integrate_system(times, central_mass, masses, position0, velocity0, *, rtol=1e-10):
    """Integrate primary plus companions from an astrocentric state at time 0.

    Parameters
    ----------
    times : ndarray, shape (T,)
        Output times, days from the epoch of the initial state (any order, any sign).
    central_mass : ndarray, shape (n,)
        M1 of each of n independent systems, nominal solar masses.
    masses : ndarray, shape (n, K)
        The companions' masses, nominal solar masses.
    position0, velocity0 : ndarray, shape (n, K, 3)
        Astrocentric positions (au) and velocities (au/day) at time 0.
    rtol : float
        Relative tolerance of DOP853.

    Returns
    -------
    positions, velocities : ndarray, shape (n, K, T, 3)
        NaN where the integration failed (a close encounter, say).
    """
    from scipy.integrate import solve_ivp

    times = np.asarray(times, dtype=float)
    n, k = masses.shape
    gm_central = GM_SUN * np.asarray(central_mass, dtype=float)
    gm_bodies = GM_SUN * np.asarray(masses, dtype=float)
    y0 = np.concatenate([position0, velocity0], axis=-1).reshape(-1)
    r_scale = np.max(np.linalg.norm(position0, axis=-1), axis=0)  # per companion
    v_scale = np.max(np.linalg.norm(velocity0, axis=-1), axis=0)
    scale = np.broadcast_to(np.concatenate([np.repeat(r_scale[:, None], 3, 1),
                                            np.repeat(v_scale[:, None], 3, 1)], axis=1),
                            (n, k, 6)).reshape(-1)

    def rhs(_, y):
        state = y.reshape(n, k, 6)
        acc = _accelerations(state[..., :3], gm_central, gm_bodies)
        return np.concatenate([state[..., 3:], acc], axis=-1).reshape(-1)

    out = np.full((n, k, times.size, 6), np.nan)
    for side in (times >= 0, times < 0):
        if not np.any(side):
            continue
        t_side = times[side]
        order = np.argsort(np.abs(t_side))
        end = float(t_side[order[-1]])
        if end == 0.0:
            out[:, :, np.flatnonzero(side), :] = y0.reshape(n, k, 1, 6)
            continue
        with np.errstate(all="ignore"):
            sol = solve_ivp(rhs, (0.0, end), y0, method="DOP853", t_eval=t_side[order],
                            rtol=rtol, atol=rtol * scale)
        if sol.status != 0 or sol.y.shape[1] != t_side.size:
            continue  # stays NaN: the walkers' log-likelihood becomes -inf
        values = np.empty((y0.size, t_side.size))
        values[:, order] = sol.y
        out[:, :, np.flatnonzero(side), :] = values.reshape(n, k, 6, -1).transpose(0, 1, 3, 2)
    return out[..., :3], out[..., 3:]


def total_energy(central_mass, masses, positions, velocities):
    """Total energy in the barycentric frame, M_sun au^2 / day^2 (for checks).

    ``positions`` and ``velocities`` are astrocentric, shape (..., K, 3) with
    ``masses`` (..., K) and ``central_mass`` (...).
    """
    central_mass = np.asarray(central_mass, dtype=float)
    total = central_mass + np.sum(masses, axis=-1)
    weights = masses[..., None] / total[..., None, None]
    centre_v = np.sum(weights * velocities, axis=-2)
    v_primary = -centre_v
    v_bodies = velocities - centre_v[..., None, :]
    kinetic = 0.5 * central_mass * np.sum(v_primary ** 2, axis=-1) + 0.5 * np.sum(
        masses * np.sum(v_bodies ** 2, axis=-1), axis=-1)
    potential = -GM_SUN * central_mass * np.sum(masses / np.linalg.norm(positions, axis=-1),
                                               axis=-1)
    k = masses.shape[-1]
    for i in range(k):
        for j in range(i + 1, k):
            d = np.linalg.norm(positions[..., i, :] - positions[..., j, :], axis=-1)
            potential = potential - GM_SUN * masses[..., i] * masses[..., j] / d
    return kinetic + potential


class NBody(Keplerian):
    """Companions that perturb each other (and the primary), integrated directly.

    Parameters
    ----------
    rtol : float
        Relative tolerance of the integrator (DOP853), from 1e-14 to 1e-6.
    mass_prior : Prior, optional
        Prior for the masses of companions whose mass is left unstated;
        :data:`DEFAULT_MASS_PRIOR` by default. A companion with a stated mass or mass
        prior keeps it.

    Notes
    -----
    Each log-posterior call integrates every walker over the whole time span: the cost
    grows with the number of orbits of the fastest companion in the data span (the
    step follows it) and with the number of walkers.
    """

    label = "n-body"

    def __init__(self, rtol=1e-10, mass_prior=None):
        if isinstance(rtol, bool) or not isinstance(rtol, (int, float)) \
                or not 1e-14 <= rtol <= 1e-6:
            raise ConfigError(f"the integrator's relative tolerance must be a number "
                              f"from 1e-14 to 1e-6, got {rtol!r}", key="dynamics.rtol")
        self.rtol = float(rtol)
        self.mass_prior = mass_prior if mass_prior is not None else DEFAULT_MASS_PRIOR
        self.settings = {"rtol": rtol}

    def describe(self) -> dict:
        return {"model": self.label, "rtol": self.rtol,
                "coordinates": "astrocentric osculating elements at the model epoch"}

    def prepare(self, model) -> None:
        """Give companions with an unstated (zero, fixed) mass the mass prior."""
        for name, comp in model.companions.items():
            if isinstance(comp.mass, Fixed) and comp.mass.value == 0.0:
                model.companions[name] = replace(comp, mass=self.mass_prior)

    def states(self, model, phys, *, want_velocity=False) -> dict:
        names = list(model._rows)
        central = phys["central_mass"]
        orbits = [phys["companions"][name] for name in names]
        masses = np.column_stack([o["mass"] for o in orbits])
        pos0 = np.empty(masses.shape + (3,))
        vel0 = np.empty_like(pos0)
        for k, (name, orbit) in enumerate(zip(names, orbits)):
            n_motion = TWO_PI / orbit["period"]
            # Osculating mean anomaly at the common epoch (time 0).
            mean0 = orbit["mean_anomaly_ref"] - n_motion * model.reference_epoch(name)
            with np.errstate(invalid="ignore"):
                position, velocity = orbit_state(orbit["semi_major_axis"], orbit["ecc"],
                                                 orbit["inc"], orbit["omega"],
                                                 orbit["node"], mean0, n_motion)
            pos0[:, k] = np.column_stack(position)
            vel0[:, k] = np.column_stack(velocity)
        all_t = np.concatenate([model._rows[name].t for name in names])
        unique_t, where = np.unique(all_t, return_inverse=True)
        out = {}
        bad = ~np.all(np.isfinite(pos0) & np.isfinite(vel0), axis=(1, 2))
        positions = np.full(masses.shape + (unique_t.size, 3), np.nan)
        velocities = np.full_like(positions, np.nan)
        good = np.flatnonzero(~bad)
        if good.size:
            positions[good], velocities[good] = integrate_system(
                unique_t, central[good], masses[good], pos0[good], vel0[good],
                rtol=self.rtol)
        start = 0
        for k, name in enumerate(names):
            rows = where[start:start + model._rows[name].t.size]
            start += rows.size
            pos = positions[:, k][:, rows]
            vel = velocities[:, k][:, rows]
            out[name] = ((pos[..., 0], pos[..., 1], pos[..., 2]),
                         (vel[..., 0], vel[..., 1], vel[..., 2]) if want_velocity else None)
        return out

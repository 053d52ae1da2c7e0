"""First-order relativistic terms of a star's orbit about a compact mass.

Plain floats and numpy arrays in the internal units (days, au, au/day, radians; GM in
au^3/day^2). Every term is of first order in (v/c)^2 ~ GM/(r c^2):

* the in-plane (Schwarzschild) advance of the periapsis, per radial period
  ``6 pi GM / (c^2 a (1 - e^2))``, applied secularly: the argument of periapsis turns
  at a constant rate ``f * advance / P`` about the companion's reference epoch, with
  ``f`` the precession scale (1 = the relativistic value, 0 = Newton);
* the gravitational redshift of a star's light, ``GM / (r c^2)`` of c;
* the transverse (second-order) Doppler shift, ``v^2 / (2 c^2)`` of c;
* the light time across the orbit (the Romer delay) on a star's own velocities:
  the velocity is the one at ``t - k z / c`` (``k`` from
  :func:`massfit.orbits.dynamics.romer_factor`), to first order
  ``v_z + (GM z / r^3) k z / c``.

The redshift and the transverse Doppler shift add to the measured radial velocity
(``c z_shift`` in km/s, a positive shift reads as recession).

:class:`RelativitySpec` says which terms a fit includes.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from massfit.constants import C_AU_PER_DAY, KM_S_PER_AU_DAY

__all__ = ["RelativitySpec", "periapsis_advance", "precession_rate", "omega_at",
           "gravitational_redshift", "transverse_doppler", "velocity_terms_of_state",
           "TERMS"]

#: The switchable velocity and orbit terms, by the name the adequacy report uses.
TERMS = ("precession", "gravitational_redshift", "transverse_doppler")


@dataclass
class RelativitySpec:
    """Which first-order relativistic terms a fit includes.

    Parameters
    ----------
    precession : bool
        Turn each star's periapsis at the Schwarzschild rate times the precession scale.
    precession_scale : Prior or None
        Prior of the precession scale f (1 = the relativistic advance). None keeps it
        fixed at 1; a prior makes it a sampled parameter ``relativity.precession_scale``.
    gravitational_redshift : bool
        Add GM / (r c) to each star's own radial velocities.
    transverse_doppler : bool
        Add v^2 / (2 c) to each star's own radial velocities.
    """

    precession: bool = True
    precession_scale: object | None = None
    gravitational_redshift: bool = True
    transverse_doppler: bool = True

    def any_velocity_term(self) -> bool:
        """True where a term changes the stars' velocities beyond the orbit."""
        return self.gravitational_redshift or self.transverse_doppler

    def describe(self) -> dict:
        """The switches, for the summary."""
        scale = self.precession_scale
        return {"precession": self.precession,
                "precession_scale": ("fixed 1" if scale is None else
                                     f"fixed {scale.value:g}" if scale.is_fixed
                                     else "sampled"),
                "gravitational_redshift": self.gravitational_redshift,
                "transverse_doppler": self.transverse_doppler}


def periapsis_advance(gm, a, ecc):
    """Periapsis advance per radial period, radians: 6 pi GM / (c^2 a (1 - e^2)).

    ``gm`` in au^3/day^2 (G times the total mass), ``a`` in au.
    """
    with np.errstate(invalid="ignore", divide="ignore"):
        return 6.0 * np.pi * gm / (C_AU_PER_DAY ** 2 * a * (1.0 - ecc * ecc))


def precession_rate(gm, a, ecc, period, scale=1.0):
    """Mean turning rate of the argument of periapsis, rad/day (``scale`` times GR)."""
    return scale * periapsis_advance(gm, a, ecc) / period


def omega_at(column, t, t_ref):
    """The argument of periapsis at times ``t`` (days), shape (n, n_times).

    ``column`` holds the orbit's arrays as columns (shape (n, 1)); without an
    ``omega_rate`` the orbit does not turn and omega comes back as it is.
    """
    rate = column.get("omega_rate")
    if rate is None:
        return column["omega"]
    return column["omega"] + rate * (np.asarray(t)[None, :] - t_ref)


def gravitational_redshift(gm, r):
    """GM / (r c^2): the fractional redshift of light climbing out from radius ``r``."""
    return gm / (r * C_AU_PER_DAY ** 2)


def transverse_doppler(speed2):
    """v^2 / (2 c^2): the fractional redshift of a moving clock (time dilation)."""
    return 0.5 * speed2 / C_AU_PER_DAY ** 2


def velocity_terms_of_state(position, velocity, gm, spec, romer=None) -> dict:
    """Each relativistic velocity term (km/s) of stars in the given states.

    Parameters
    ----------
    position, velocity : tuple of ndarray
        (north, east, z) in au and au/day, each shape (n, n_rows).
    gm : ndarray, shape (n,)
        G times the total mass, au^3/day^2.
    spec : RelativitySpec
    romer : ndarray or None
        Shape (n,): the Romer factor (M1 - m2)/(M1 + m2) where the light time is
        applied, else None.

    Returns
    -------
    dict
        ``gravitational_redshift``, ``transverse_doppler`` and ``romer`` (zeros where
        switched off), each shape (n, n_rows), km/s.
    """
    r = np.sqrt(sum(p * p for p in position))
    gm = np.asarray(gm)[:, None]
    zeros = np.zeros_like(r)
    out = {"gravitational_redshift": zeros, "transverse_doppler": zeros, "romer": zeros}
    c_km_s = C_AU_PER_DAY * KM_S_PER_AU_DAY
    if spec is not None and spec.gravitational_redshift:
        out["gravitational_redshift"] = c_km_s * gravitational_redshift(gm, r)
    if spec is not None and spec.transverse_doppler:
        speed2 = sum(v * v for v in velocity)
        out["transverse_doppler"] = c_km_s * transverse_doppler(speed2)
    if romer is not None:
        z = position[2]
        delay = romer[:, None] * z / C_AU_PER_DAY
        out["romer"] = KM_S_PER_AU_DAY * gm * z / r ** 3 * delay
    return out

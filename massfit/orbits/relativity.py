"""First-order relativistic terms of a star's orbit about a compact mass.

Plain floats and numpy arrays in the internal units (days, au, au/day, radians; GM in
au^3/day^2). Every term is of first order in (v/c)^2 ~ GM/(r c^2):

* the in-plane (Schwarzschild) advance of the periapsis, per radial period
  ``6 pi GM / (c^2 a (1 - e^2))``: the argument of periapsis turns with the true
  anomaly, ``omega = omega_ref + f k (theta - theta_ref)``, ``k`` the advance over
  2 pi and ``theta`` the true anomaly counted on through the orbits (the 1PN
  quasi-Keplerian form; the orbit's velocity includes the turning), with ``f`` the
  precession scale (1 = the relativistic value, 0 = Newton);
* the gravitational redshift of a star's light, ``GM / (r c^2)`` of c;
* the transverse (second-order) Doppler shift, ``v^2 / (2 c^2)`` of c;
* the light time across the orbit (the Romer delay) on a star's own velocities:
  the velocity is the one at ``t - k z / c`` (``k`` from
  :func:`massfit.orbits.dynamics.romer_factor`), to first order
  ``v_z + (GM z / r^3) k z / c``.

The redshift and the transverse Doppler shift add to the measured radial velocity
(``c z_shift`` in km/s, a positive shift reads as recession).

Beyond first order (``exact_doppler``, off by default): the measured velocity is ``c z``
with the whole factor ``1 + z = gamma (1 + beta_z) / sqrt(1 - 2 GM / (r c^2))``
(special-relativistic Doppler factor times the Schwarzschild redshift, e.g. Rindler,
*Relativity: Special, General, and Cosmological*, 2006, eqs. 4.37 and 11.13), of the
star's state at its emission time. Its part beyond the first-order terms,
``beta_z (beta^2 / 2 + GM / (r c^2))`` of c and smaller, is a few km/s at the
closest passages of stars a few tens of au from millions of solar masses. It is of
the same order as the first post-Newtonian orbit's changes of shape, which the model
leaves out (it keeps only the periapsis's turn); on simulated stars with both
(``validation/dark_mass.py``, ``docs/validation.md``) the first-order terms alone
left the smaller bias, hence the default.

:class:`RelativitySpec` says which terms a fit includes.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from massfit.constants import C_AU_PER_DAY, KM_S_PER_AU_DAY
from massfit.orbits.kepler import TWO_PI, kepler_cs

__all__ = ["RelativitySpec", "periapsis_advance", "precession_per_anomaly",
           "accumulated_anomaly", "true_anomaly_of_mean", "omega_at", "turning_periapsis",
           "gravitational_redshift", "transverse_doppler", "velocity_terms_of_state",
           "exact_shift", "as_row_times", "TERMS"]

#: The switchable velocity and orbit terms, by the name the adequacy report uses.
TERMS = ("precession", "gravitational_redshift", "transverse_doppler", "exact_doppler")


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
    exact_doppler : bool
        Take the Doppler factor and the redshift (those switched on) whole, at the
        star's emission time, in place of the sum of their first-order terms: adds the
        part beyond first order (the term ``exact_doppler`` of the velocities).
    """

    precession: bool = True
    precession_scale: object | None = None
    gravitational_redshift: bool = True
    transverse_doppler: bool = True
    exact_doppler: bool = False

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
                "transverse_doppler": self.transverse_doppler,
                "exact_doppler": self.exact_doppler}


def periapsis_advance(gm, a, ecc):
    """Periapsis advance per radial period, radians: 6 pi GM / (c^2 a (1 - e^2)).

    ``gm`` in au^3/day^2 (G times the total mass), ``a`` in au.
    """
    with np.errstate(invalid="ignore", divide="ignore"):
        return 6.0 * np.pi * gm / (C_AU_PER_DAY ** 2 * a * (1.0 - ecc * ecc))


def precession_per_anomaly(gm, a, ecc, scale=1.0):
    """k = ``scale`` 3 GM / (c^2 a (1 - e^2)): the periapsis's turn per radian of true
    anomaly (the advance per orbit over 2 pi)."""
    return scale * periapsis_advance(gm, a, ecc) / (2.0 * np.pi)


def accumulated_anomaly(mean, cos_nu, sin_nu):
    """The true anomaly counted on through the orbits (rad): nu plus 2 pi for every
    orbit in the mean anomaly ``mean`` (nu and the mean anomaly reduced to
    [-pi, pi] share their half-turn, so the whole turns are those of ``mean``)."""
    return np.arctan2(sin_nu, cos_nu) + TWO_PI * np.round(mean / TWO_PI)


def true_anomaly_of_mean(mean, ecc):
    """(accumulated true anomaly, cos E, sin E) at mean anomalies ``mean``."""
    _, cos_e, sin_e = kepler_cs(mean, ecc)
    with np.errstate(invalid="ignore", divide="ignore"):
        denominator = 1.0 - ecc * cos_e
        cos_nu = (cos_e - ecc) / denominator
        sin_nu = np.sqrt(1.0 - ecc * ecc) * sin_e / denominator
    return accumulated_anomaly(mean, cos_nu, sin_nu), cos_e, sin_e


def omega_at(column, mean, anomaly):
    """The argument of periapsis where the accumulated true anomaly is ``anomaly``
    (at mean anomaly ``mean``), shape (n, n_times): ``omega + k (theta - theta_ref)``.

    The 1PN quasi-Keplerian orbit's periapsis turns with the true anomaly, not
    uniformly in time (Damour & Deruelle 1985, Ann. Inst. Henri Poincare 43, 107:
    omega = omega_0 + k A_e(u)); most of each orbit's advance happens near periapsis.
    ``column`` holds the orbit's arrays as columns (shape (n, 1)); without an
    ``omega_per_anomaly`` (k) the orbit does not turn and omega comes back as it is.
    ``theta_ref`` is the accumulated anomaly at the reference epoch, where omega is
    the orbit's ``omega``.
    """
    k = column.get("omega_per_anomaly")
    if k is None:
        return column["omega"]
    reference, _, _ = true_anomaly_of_mean(column["mean_anomaly_ref"], column["ecc"])
    return column["omega"] + k * (anomaly - reference)


def turning_periapsis(column, mean):
    """(omega, d omega / dt) at mean anomalies ``mean`` for a turning periapsis, or
    (omega, None) without one. d omega/dt = k d nu/dt = k n sqrt(1 - e^2) /
    (1 - e cos E)^2, n = 2 pi / P."""
    if column.get("omega_per_anomaly") is None:
        return column["omega"], None
    ecc = column["ecc"]
    anomaly, cos_e, _ = true_anomaly_of_mean(mean, ecc)
    omega = omega_at(column, mean, anomaly)
    with np.errstate(invalid="ignore", divide="ignore"):
        rate = (column["omega_per_anomaly"] * TWO_PI / column["period"]
                * np.sqrt(1.0 - ecc * ecc) / (1.0 - ecc * cos_e) ** 2)
    return omega, rate


def as_row_times(t):
    """Times as a (1, n_times) row, or as they are where already (n, n_times) (each
    walker its own times, e.g. emission times)."""
    t = np.asarray(t, dtype=float)
    return t if t.ndim == 2 else t[None, :]


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


def exact_shift(position, velocity, gm, spec, share=1.0):
    """``c z`` (km/s) of ``1 + z = gamma (1 + beta_z) / sqrt(1 - 2 GM / (r c^2))``.

    The special-relativistic Doppler factor of a source moving at ``beta`` (line of
    sight ``beta_z``, positive receding) times the redshift of light climbing out of
    the Schwarzschild field from radius ``r``, each factor where ``spec`` switches its
    first-order term on (the line-of-sight factor always). ``position``, ``velocity``
    as in :func:`velocity_terms_of_state` (the states at the emission times);
    ``share`` (shape (n,) or a float) scales the relative line-of-sight velocity to
    the star's own (M1 / (M1 + m2)). The speed in gamma is the relative one, as in
    the first-order transverse Doppler term.
    """
    c = C_AU_PER_DAY
    share = np.asarray(share, dtype=float)
    factor = 1.0 + (share[:, None] if share.ndim else share) * velocity[2] / c
    if spec.transverse_doppler:
        speed2 = sum(v * v for v in velocity)
        factor = factor / np.sqrt(1.0 - speed2 / c ** 2)
    if spec.gravitational_redshift:
        r = np.sqrt(sum(p * p for p in position))
        factor = factor / np.sqrt(1.0 - 2.0 * np.asarray(gm)[:, None] / (r * c ** 2))
    return c * KM_S_PER_AU_DAY * (factor - 1.0)

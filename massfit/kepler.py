"""The Keplerian kernel: Kepler's equation and the relative orbit on the sky.

Plain floats and numpy arrays only; no I/O, no astropy objects. Internal units are
days for times, au for lengths, au/day for velocities and radians for angles. Every
function broadcasts over its arguments, so one call evaluates all walkers at all
epochs.

The formulas are those of the project's conventions (Thiele-Innes constants, the
third axis pointing away from the observer, the ascending node being the receding
one).
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "solve_kepler",
    "solve_kepler_numpy",
    "thiele_innes",
    "relative_orbit",
    "radial_velocity_amplitude",
    "true_anomaly",
    "HAVE_NUMBA",
]

TWO_PI = 2.0 * np.pi

# Tolerance on |E - e sin E - M|; the Newton loop stops once every element is below it.
_TOL = 1e-14
_MAX_ITER = 60


def _reduce(mean_anomaly):
    """Mean anomaly folded into [-pi, pi), and the whole turns taken off."""
    turns = np.floor((mean_anomaly + np.pi) / TWO_PI)
    return mean_anomaly - turns * TWO_PI, turns


def _starting_guess(m, e):
    # A start that keeps Newton's method monotone for every e < 1 (Danby's 0.85 e
    # rule, common practice); away from periapsis it is already within ~0.1 rad.
    return m + 0.85 * e * np.sign(np.sin(m))


def solve_kepler_numpy(mean_anomaly, ecc):
    """Eccentric anomaly E solving ``E - e sin E = M`` with numpy only.

    Parameters
    ----------
    mean_anomaly : array_like
        Mean anomaly M in radians, any value.
    ecc : array_like
        Eccentricity, 0 <= e < 1; broadcast against ``mean_anomaly``.

    Returns
    -------
    ndarray
        E in radians, on the same turn as M.
    """
    m, turns = _reduce(np.asarray(mean_anomaly, dtype=float))
    e = np.broadcast_to(np.asarray(ecc, dtype=float), m.shape)
    big_e = _starting_guess(m, e)
    for _ in range(_MAX_ITER):
        sin_e = np.sin(big_e)
        cos_e = np.cos(big_e)
        f = big_e - e * sin_e - m
        if np.all(np.abs(f) <= _TOL):
            break
        fp = 1.0 - e * cos_e
        fpp = e * sin_e
        # Halley's step: cubic convergence, and safe because fp > 0 for e < 1.
        big_e = big_e - f / (fp - 0.5 * f * fpp / fp)
    return big_e + turns * TWO_PI


try:  # numba is optional: the numpy path above gives the same numbers.
    import numba as _numba

    @_numba.njit(cache=True, fastmath=False)
    def _solve_scalar(m, e):  # pragma: no cover - compiled
        turns = np.floor((m + np.pi) / TWO_PI)
        m = m - turns * TWO_PI
        s = np.sin(m)
        big_e = m + 0.85 * e * (1.0 if s > 0 else (-1.0 if s < 0 else 0.0))
        for _ in range(_MAX_ITER):
            sin_e = np.sin(big_e)
            cos_e = np.cos(big_e)
            f = big_e - e * sin_e - m
            if abs(f) <= _TOL:
                break
            fp = 1.0 - e * cos_e
            big_e = big_e - f / (fp - 0.5 * f * e * sin_e / fp)
        return big_e + turns * TWO_PI

    @_numba.vectorize(["float64(float64, float64)"], cache=True)
    def _solve_ufunc(m, e):  # pragma: no cover - compiled
        return _solve_scalar(m, e)

    HAVE_NUMBA = True
except ImportError:  # pragma: no cover - exercised where numba is absent
    _solve_ufunc = None
    HAVE_NUMBA = False


def solve_kepler(mean_anomaly, ecc):
    """Eccentric anomaly E solving Kepler's equation ``E - e sin E = M``.

    Uses a compiled kernel when numba is installed and the numpy loop otherwise; both
    reach ``|E - e sin E - M| <= 1e-12`` for every M and 0 <= e <= 0.999.

    Parameters
    ----------
    mean_anomaly : array_like
        Mean anomaly M in radians.
    ecc : array_like
        Eccentricity, broadcast against ``mean_anomaly``.

    Returns
    -------
    ndarray
        Eccentric anomaly in radians.
    """
    if _solve_ufunc is not None:
        return _solve_ufunc(np.asarray(mean_anomaly, dtype=float),
                            np.asarray(ecc, dtype=float))
    return solve_kepler_numpy(mean_anomaly, ecc)


def true_anomaly(ecc_anomaly, ecc):
    """True anomaly from the eccentric anomaly (radians)."""
    half = 0.5 * ecc_anomaly
    return 2.0 * np.arctan2(np.sqrt(1.0 + ecc) * np.sin(half),
                            np.sqrt(1.0 - ecc) * np.cos(half))


def thiele_innes(a, inc, omega, node):
    """Thiele-Innes constants A, B, F, G of a relative orbit.

    Parameters
    ----------
    a : array_like
        Semi-major axis (any unit; the constants carry it).
    inc, omega, node : array_like
        Inclination, argument of periapsis of the companion and position angle of the
        ascending node, radians.

    Returns
    -------
    A, B, F, G : ndarray
        So that ``north = A X + F Y`` and ``east = B X + G Y``.
    """
    cw, sw = np.cos(omega), np.sin(omega)
    cn, sn = np.cos(node), np.sin(node)
    ci = np.cos(inc)
    big_a = a * (cw * cn - sw * sn * ci)
    big_b = a * (cw * sn + sw * cn * ci)
    big_f = a * (-sw * cn - cw * sn * ci)
    big_g = a * (-sw * sn + cw * cn * ci)
    return big_a, big_b, big_f, big_g


def radial_velocity_amplitude(a, period, ecc, inc):
    """Semi-amplitude K = 2 pi a sin i / (P sqrt(1 - e^2)) of the relative orbit."""
    return TWO_PI * a * np.sin(inc) / (period * np.sqrt(1.0 - ecc * ecc))


def relative_orbit(t, period, ecc, mean_anomaly_ref, a, inc, omega, node,
                   *, t_ref=0.0, want_velocity=False):
    """Position (and optionally line-of-sight velocity) of the companion about the primary.

    Parameters
    ----------
    t : array_like
        Times, days (same origin as ``t_ref``).
    period : array_like
        Period, days.
    ecc : array_like
        Eccentricity.
    mean_anomaly_ref : array_like
        Mean anomaly at ``t_ref``, radians.
    a : array_like
        Semi-major axis of the relative orbit, au.
    inc, omega, node : array_like
        Inclination, argument of periapsis, position angle of the ascending node (rad).
    t_ref : float or array_like, optional
        Reference epoch of ``mean_anomaly_ref``, days.
    want_velocity : bool, optional
        Also return dz/dt, au/day.

    Returns
    -------
    east, north, z : ndarray
        Offsets of the companion from the primary, au; ``z`` points away from the
        observer.
    vz : ndarray
        Only if ``want_velocity``: the relative radial velocity, au/day, positive
        receding.
    """
    mean_anomaly = mean_anomaly_ref + TWO_PI * (t - t_ref) / period
    big_e = solve_kepler(mean_anomaly, ecc)
    cos_e = np.cos(big_e)
    sin_e = np.sin(big_e)
    root = np.sqrt(1.0 - ecc * ecc)
    x = cos_e - ecc
    y = root * sin_e
    big_a, big_b, big_f, big_g = thiele_innes(a, inc, omega, node)
    north = big_a * x + big_f * y
    east = big_b * x + big_g * y
    sin_i = np.sin(inc)
    z = a * sin_i * (x * np.sin(omega) + y * np.cos(omega))
    if not want_velocity:
        return east, north, z
    # dz/dt from dE/dt = n / (1 - e cos E): equals K (cos(nu + omega) + e cos omega).
    e_dot = (TWO_PI / period) / (1.0 - ecc * cos_e)
    vz = a * sin_i * e_dot * (-sin_e * np.sin(omega) + root * cos_e * np.cos(omega))
    return east, north, z, vz

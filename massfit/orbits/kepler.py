"""The Keplerian kernel: Kepler's equation and the relative orbit on the sky.

Plain floats and numpy arrays only; no I/O, no astropy objects. Internal units are
days for times, au for lengths, au/day for velocities and radians for angles. Every
function broadcasts over its arguments, so one call evaluates all walkers at all
epochs.

The formulas are those of the project's conventions (Thiele-Innes constants, the
third axis pointing away from the observer, the ascending node being the receding
one). One state evaluator: :func:`orbit_state` (position and velocity as
(north, east, z), from the unit vectors of :func:`orbit_axes`); :func:`relative_orbit`
is its (east, north, z) view by time, :func:`thiele_innes` its constants, and
:func:`sky_offsets` the likelihood's compiled hot path, tested against it.
"""

from __future__ import annotations

import os

import numpy as np

__all__ = [
    "solve_kepler",
    "orbit_axes",
    "solve_kepler_numpy",
    "kepler_cs",
    "sky_offsets",
    "thiele_innes",
    "relative_orbit",
    "orbit_state",
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
    return _kepler_cs_numpy(mean_anomaly, ecc)[0]


def _kepler_cs_numpy(mean_anomaly, ecc):
    """E, cos E and sin E with numpy only: Halley's method from Danby's start."""
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
        big_e = big_e - f / (fp - 0.5 * f * e * sin_e / fp)
    else:  # pragma: no cover - only for e >= 1 or non-finite input
        sin_e, cos_e = np.sin(big_e), np.cos(big_e)
    return big_e + turns * TWO_PI, cos_e, sin_e


try:  # numba is optional: the numpy path above gives the same numbers.
    import numba as _numba
except ImportError:  # pragma: no cover - exercised where numba is absent
    _numba = None

HAVE_NUMBA = _numba is not None

if HAVE_NUMBA:
    # Threads that wait between calls spin for a few milliseconds, then sleep: on a
    # machine shared with other work a thread spinning without end holds a core, and a
    # call waits for every thread (a fit on two such threads at load 20 was 7 times
    # slower in wall time than on one); a thread that sleeps at once must be woken for
    # each of the sampler's parallel calls, a fraction of a millisecond apart (two
    # threads then ran the Tarrant chain 2.4x slower than one; with the spin 1.5-1.9x
    # faster, benchmarks/RESULTS.md, threads). libgomp's own short spin is 300 000
    # rounds (about 3 ms). Read by the OpenMP runtime when numba first starts its
    # threads; a user's own settings are kept.
    if "OMP_WAIT_POLICY" not in os.environ and "GOMP_SPINCOUNT" not in os.environ:
        os.environ["GOMP_SPINCOUNT"] = "300000"
    os.environ.setdefault("OMP_WAIT_POLICY", "PASSIVE")
    from massfit.orbits import _kepler_numba as numba_kernel
    # The whole two-body log-posterior (massfit.model.compiled_posterior packs for it).
    from massfit.orbits import _posterior_numba as posterior_kernel
else:  # pragma: no cover
    numba_kernel = posterior_kernel = None


def kepler_cs(mean_anomaly, ecc):
    """Eccentric anomaly with its cosine and sine, in one pass.

    Callers that go on to the orbit need cos E and sin E; the compiled kernel has
    them at no extra cost, which saves two trigonometric calls per point.

    Parameters
    ----------
    mean_anomaly : array_like
        Mean anomaly M in radians.
    ecc : array_like
        Eccentricity, broadcast against ``mean_anomaly``.

    Returns
    -------
    E, cos_E, sin_E : ndarray
        Broadcast shape of the inputs.
    """
    if numba_kernel is None:
        return _kepler_cs_numpy(mean_anomaly, ecc)
    m, e = np.broadcast_arrays(np.asarray(mean_anomaly, dtype=float),
                               np.asarray(ecc, dtype=float))
    shape = m.shape
    m = np.ascontiguousarray(m).ravel()
    e = np.ascontiguousarray(e).ravel()
    big_e, cos_e, sin_e = np.empty_like(m), np.empty_like(m), np.empty_like(m)
    numba_kernel.solve(m, e, big_e, cos_e, sin_e)
    return big_e.reshape(shape), cos_e.reshape(shape), sin_e.reshape(shape)


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
    if numba_kernel is None:
        return solve_kepler_numpy(mean_anomaly, ecc)
    return kepler_cs(mean_anomaly, ecc)[0]


def sky_offsets(t, period, ecc, mean_anomaly_ref, a, inc, omega, node, *, t_ref=0.0,
                compiled=None):
    """East and north offsets of companions, one row per orbit, one column per time.

    The likelihood's hot path: it solves Kepler's equation and projects with the
    Thiele-Innes constants in one pass, without the line-of-sight coordinate.

    Parameters
    ----------
    t : array_like, shape (n_times,)
        Times, days (same origin as ``t_ref``).
    period, ecc, mean_anomaly_ref, a, inc, omega, node : array_like, shape (n_orbits,)
        Elements as in :func:`relative_orbit` (days, au, radians).
    t_ref : float
        Reference epoch of ``mean_anomaly_ref``, days.
    compiled : bool or None
        Force (True) or avoid (False) the compiled kernel; None uses it when present.

    Returns
    -------
    east, north : ndarray, shape (n_orbits, n_times)
        au.
    """
    t = np.ascontiguousarray(t, dtype=float).ravel()
    elements = [np.ascontiguousarray(v, dtype=float).ravel()
                for v in (period, ecc, mean_anomaly_ref, a, inc, omega, node)]
    if len({v.size for v in elements}) > 1:
        elements = [np.ascontiguousarray(v) for v in np.broadcast_arrays(*elements)]
    period, ecc, m0, a, inc, omega, node = elements
    big_a, big_b, big_f, big_g = thiele_innes(a, inc, omega, node)
    root = np.sqrt(1.0 - ecc * ecc)
    motion = TWO_PI / period
    use_fast = numba_kernel is not None if compiled is None else bool(compiled)
    if use_fast:
        if numba_kernel is None:
            raise RuntimeError("the compiled kernel needs numba, which is not installed")
        east = np.empty((period.size, t.size))
        north = np.empty_like(east)
        numba_kernel.sky(t - t_ref, motion, m0, ecc, root, big_a, big_b, big_f, big_g, east, north)
        return east, north
    col = (lambda v: v[:, None])
    _, cos_e, sin_e = _kepler_cs_numpy(col(m0) + col(motion) * (t[None, :] - t_ref),
                                       col(ecc))
    x = cos_e - col(ecc)
    y = col(root) * sin_e
    return col(big_b) * x + col(big_g) * y, col(big_a) * x + col(big_f) * y


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
    p_vec, q_vec = orbit_axes(inc, omega, node)
    return a * p_vec[0], a * p_vec[1], a * q_vec[0], a * q_vec[1]


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
    motion = TWO_PI / period
    position, velocity = orbit_state(a, ecc, inc, omega, node,
                                     mean_anomaly_ref + motion * (t - t_ref), motion,
                                     want_velocity=want_velocity)
    north, east, z = position
    if not want_velocity:
        return east, north, z
    return east, north, z, velocity[2]


def orbit_axes(inc, omega, node):
    """Unit vectors P (towards periapsis) and Q (a quarter-turn ahead), as the
    triples (north, east, z) of the sky frame, or (x, y, z) of ICRS axes."""
    cw, sw = np.cos(omega), np.sin(omega)
    cn, sn = np.cos(node), np.sin(node)
    ci, si = np.cos(inc), np.sin(inc)
    p_vec = (cw * cn - sw * sn * ci, cw * sn + sw * cn * ci, sw * si)
    q_vec = (-sw * cn - cw * sn * ci, -sw * sn + cw * cn * ci, cw * si)
    return p_vec, q_vec


def orbit_state(a, ecc, inc, omega, node, mean_anomaly, mean_motion, *, want_velocity=True,
                omega_dot=None):
    """Position and velocity on a Keplerian ellipse, in the sky frame.

    Parameters
    ----------
    a, ecc, inc, omega, node : array_like
        Semi-major axis (au), eccentricity, inclination, argument of periapsis and
        position angle of the ascending node (rad), broadcast together.
    mean_anomaly : array_like
        Mean anomaly (rad).
    mean_motion : array_like
        dM/dt (rad/day), used for the velocity only.
    want_velocity : bool
        Also return the velocity.
    omega_dot : array_like or None
        d omega / dt (rad/day) of a turning periapsis: the velocity gains the turning,
        omega_dot times d position / d omega = omega_dot a (x Q - y P).

    Returns
    -------
    position : tuple of ndarray
        (north, east, z), au.
    velocity : tuple of ndarray or None
        (d north/dt, d east/dt, dz/dt), au/day.

    Notes
    -----
    The unit vectors are the Thiele-Innes constants divided by a, with the z row of
    the conventions: P = (A, B, sin w sin i)/a along periapsis, Q = (F, G, cos w sin i)/a
    a quarter-turn ahead.
    """
    big_e = solve_kepler(mean_anomaly, ecc)
    cos_e, sin_e = np.cos(big_e), np.sin(big_e)
    root = np.sqrt(1.0 - ecc * ecc)
    p_vec, q_vec = orbit_axes(inc, omega, node)
    x = cos_e - ecc
    y = root * sin_e
    position = tuple(a * (x * p + y * q) for p, q in zip(p_vec, q_vec))
    if not want_velocity:
        return position, None
    e_dot = mean_motion / (1.0 - ecc * cos_e)
    vx = -a * e_dot * sin_e
    vy = a * e_dot * root * cos_e
    if omega_dot is not None:
        vx, vy = vx - omega_dot * a * y, vy + omega_dot * a * x
    velocity = tuple(vx * p + vy * q for p, q in zip(p_vec, q_vec))
    return position, velocity

"""Compiled Kepler kernel (numba); imported by :mod:`massfit.orbits.kepler` only when numba is.

How it is fast
--------------
The loop body has no branches and no library calls, so LLVM turns it into SIMD code
(four or eight elements per instruction):

1. M is folded into [0, pi] (E(-M) = -E(M)); sin M and cos M come from Taylor
   polynomials about pi/2 (degree 21/22, error below 1e-17 on that interval).
2. A fourth-order step of Danby's iteration from E = M needs only sin M and cos M.
3. The new sin E and cos E follow by rotating through the step d with polynomials in d
   (|d| <= e < 1), and two more fourth-order steps, whose rotations are small (|d| <=
   0.05, where a short polynomial is exact to 1e-17), reach full precision.

Points where this fixed sequence has not reached |E - e sin E - M| <= 4e-15, or where a
late step was too long for the short polynomial (about 1.5 % of random (M, e), mostly
e > 0.6), are flagged and solved again by a safeguarded Halley loop with the library's
sin and cos. Every returned value therefore meets the tolerance; the flag only decides
which code computed it.

``error_model='numpy'`` matters: with Python's error model every division checks for
zero and the loop cannot be vectorised.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from massfit.constants import C_AU_PER_DAY

PI = math.pi
TWO_PI = 2.0 * math.pi
HALF_PI = 0.5 * math.pi
INV_TWO_PI = 1.0 / TWO_PI
#: Tolerance of the fixed sequence on |E - e sin E - M| (radians).
FAST_TOL = 4e-15
#: Longest late step the short polynomials are trusted for.
SMALL_STEP = 0.05
_MAX_ITER = 60

_jit = dict(cache=True, error_model="numpy", fastmath=False)
_inline = dict(_jit, inline="always")


@numba.njit(**_inline)
def _sin_long(x):  # pragma: no cover - compiled
    # Taylor series to x^21: truncation below 2e-18 for |x| <= pi/2.
    z = x * x
    return x * (1.0 + z * (-1.6666666666666666e-01 + z * (8.333333333333333e-03 + z * (
        -1.984126984126984e-04 + z * (2.7557319223985893e-06 + z * (
            -2.505210838544172e-08 + z * (1.6059043836821613e-10 + z * (
                -7.647163731819816e-13 + z * (2.8114572543455206e-15 + z * (
                    -8.22063524662433e-18 + z * 1.9572941063391263e-20))))))))))


@numba.njit(**_inline)
def _cos_long(x):  # pragma: no cover - compiled
    # Taylor series to x^22: truncation below 1e-19 for |x| <= pi/2.
    z = x * x
    return 1.0 + z * (-0.5 + z * (4.1666666666666664e-02 + z * (-1.388888888888889e-03 + z * (
        2.48015873015873e-05 + z * (-2.755731922398589e-07 + z * (2.08767569878681e-09 + z * (
            -1.1470745597729725e-11 + z * (4.779477332387385e-14 + z * (
                -1.5619206968586225e-16 + z * (4.110317623312165e-19 + z * (
                    -8.896791392450574e-22)))))))))))


@numba.njit(**_inline)
def _sin_short(x):  # pragma: no cover - compiled
    z = x * x  # to x^7: truncation below 1e-17 for |x| <= 0.05
    return x * (1.0 + z * (-1.6666666666666666e-01 + z * (8.333333333333333e-03 + z * (
        -1.984126984126984e-04))))


@numba.njit(**_inline)
def _cos_short(x):  # pragma: no cover - compiled
    z = x * x  # to x^8
    return 1.0 + z * (-0.5 + z * (4.1666666666666664e-02 + z * (-1.388888888888889e-03 + z * (
        2.48015873015873e-05))))


@numba.njit(**_inline)
def _danby_step(f, fp, fpp, fppp):  # pragma: no cover - compiled
    # Danby's fourth-order correction -f / (f' + d2 f''/2 + d2^2 f'''/6), d2 the Halley
    # step -f f' / (f'^2 - f f''/2), written with a single division.
    n = -f * fp
    dd = fp * fp - 0.5 * f * fpp
    dd2 = dd * dd
    return -f * dd2 / (fp * dd2 + 0.5 * n * dd * fpp + n * n * fppp * (1.0 / 6.0))


@numba.njit(**_inline)
def _late_step(d, e, se, ce, hi):  # pragma: no cover - compiled
    f = d - e * se
    new = min(max(d + _danby_step(f, 1.0 - e * ce, e * se, e * ce), 0.0), hi)
    step = new - d
    sd = _sin_short(step)
    cd = _cos_short(step)
    return new, se * cd + ce * sd, ce * cd - se * sd, abs(step)


@numba.njit(**_inline)
def _core(m, e):  # pragma: no cover - compiled
    """(E, cos E, sin E, trusted) for one point, branch-free."""
    turns = np.floor((m + PI) * INV_TWO_PI)
    r = m - turns * TWO_PI
    a = abs(r)
    sign = math.copysign(1.0, r)
    x = a - HALF_PI
    se = _cos_long(x)  # sin(a) = cos(a - pi/2)
    ce = -_sin_long(x)
    hi = min(e, PI - a)  # E - M = e sin E lies in [0, min(e, pi - M)] for M in [0, pi]
    d = min(max(_danby_step(-e * se, 1.0 - e * ce, e * se, e * ce), 0.0), hi)
    sd = _sin_long(d)
    cd = _cos_long(d)
    se, ce = se * cd + ce * sd, ce * cd - se * sd
    d, se, ce, s2 = _late_step(d, e, se, ce, hi)
    d, se, ce, s3 = _late_step(d, e, se, ce, hi)
    good = (abs(d - e * se) <= FAST_TOL) & (max(s2, s3) <= SMALL_STEP)
    return sign * (a + d) + turns * TWO_PI, ce, sign * se, good


@numba.njit(**_jit)
def _safe(m, e):  # pragma: no cover - compiled
    """Safeguarded Halley loop with library trigonometry: the fallback."""
    turns = np.floor((m + PI) * INV_TWO_PI)
    m = m - turns * TWO_PI
    s = math.sin(m)
    big_e = m + 0.85 * e * (1.0 if s > 0 else (-1.0 if s < 0 else 0.0))
    sin_e = math.sin(big_e)
    cos_e = math.cos(big_e)
    for _ in range(_MAX_ITER):
        f = big_e - e * sin_e - m
        if abs(f) <= 1e-15:
            break
        fp = 1.0 - e * cos_e
        big_e = big_e - f / (fp - 0.5 * f * e * sin_e / fp)
        sin_e = math.sin(big_e)
        cos_e = math.cos(big_e)
    return big_e + turns * TWO_PI, cos_e, sin_e


@numba.njit(**_jit)
def solve(m, e, big_e, cos_e, sin_e):  # pragma: no cover - compiled
    """Fill E, cos E, sin E for 1-D contiguous ``m`` and ``e``."""
    n = m.size
    for i in range(n):
        value, c, s, good = _core(m[i], e[i])
        big_e[i] = value if good else np.nan
        cos_e[i] = c
        sin_e[i] = s
    for i in range(n):
        if big_e[i] != big_e[i]:
            big_e[i], cos_e[i], sin_e[i] = _safe(m[i], e[i])


@numba.njit(**_jit)
def sky(dt, motion, m0, e, root, big_a, big_b, big_f, big_g,
        east, north):  # pragma: no cover - compiled
    """East/north (n_orbits, n_times) from per-orbit elements and Thiele-Innes constants."""
    n_orbits, n_times = east.shape
    for w in range(n_orbits):
        mw, m0w, ew, rw = motion[w], m0[w], e[w], root[w]
        aw, bw, fw, gw = big_a[w], big_b[w], big_f[w], big_g[w]
        for j in range(n_times):
            _, c, s, good = _core(m0w + mw * dt[j], ew)
            x = c - ew
            y = rw * s
            east[w, j] = bw * x + gw * y if good else np.nan
            north[w, j] = aw * x + fw * y
        for j in range(n_times):
            if east[w, j] != east[w, j]:
                _, c, s = _safe(m0w + mw * dt[j], ew)
                x = c - ew
                y = rw * s
                east[w, j] = bw * x + gw * y
                north[w, j] = aw * x + fw * y


@numba.njit(**_jit)
def astrometry_chi2(dt, period, m0, e, a, inc, omega, node, parallax_scale, scale,
                    uses_parallax, n_cart, obs1, obs2, err1, err2, corr, corr_factor,
                    chi2):  # pragma: no cover - compiled
    """Add each orbit's chi^2 over one companion's rows to ``chi2`` (n_orbits,).

    The same sums as the model's whitened residuals, without the (n_orbits, n_times)
    arrays: rows ``[0, n_cart)`` are east/north offsets (``obs1``, ``obs2``, with the
    correlation ``corr``), the rest separation and position angle. ``scale`` turns au
    into the row's unit, times ``parallax_scale[w]`` where ``uses_parallax``. The
    elements are per orbit (days, au, radians), as for :func:`sky`.
    """
    n_times = dt.size
    east = np.empty(n_times)
    north = np.empty(n_times)
    for w in range(period.size):
        chi2[w] += companion_chi2(dt, period[w], m0[w], e[w], a[w], inc[w], omega[w],
                                  node[w], parallax_scale[w], scale, uses_parallax, 0,
                                  n_cart, n_times, obs1, obs2, err1, err2, corr,
                                  corr_factor, east, north)


@numba.njit(**_jit)
def companion_chi2(dt, period, m0, ew, a, inc, omega, node, pw, scale, uses_parallax,
                   first, end_cart, end, obs1, obs2, err1, err2, corr, corr_factor,
                   east, north):  # pragma: no cover - compiled
    """chi^2 of one orbit over rows ``[first, end)`` of the row arrays.

    Rows ``[first, end_cart)`` are east/north, ``[end_cart, end)`` separation and
    position angle (see :func:`astrometry_chi2`); ``east`` and ``north`` are scratch
    space of at least ``end - first`` elements.
    """
    mw = TWO_PI / period
    rw = math.sqrt(1.0 - ew * ew)
    # Thiele-Innes constants, as kepler.thiele_innes.
    cw, sw = math.cos(omega), math.sin(omega)
    cn, sn = math.cos(node), math.sin(node)
    ci = math.cos(inc)
    aw = a * (cw * cn - sw * sn * ci)
    bw = a * (cw * sn + sw * cn * ci)
    fw = a * (-sw * cn - cw * sn * ci)
    gw = a * (-sw * sn + cw * cn * ci)
    for j in range(first, end):
        _, c, s, good = _core(m0 + mw * dt[j], ew)
        x = c - ew
        y = rw * s
        east[j - first] = bw * x + gw * y if good else np.nan
        north[j - first] = aw * x + fw * y
    for j in range(first, end):
        if east[j - first] != east[j - first]:
            _, c, s = _safe(m0 + mw * dt[j], ew)
            x = c - ew
            y = rw * s
            east[j - first] = bw * x + gw * y
            north[j - first] = aw * x + fw * y
    return _residual_chi2(pw, scale, uses_parallax, first, end_cart, end, obs1, obs2,
                          err1, err2, corr, corr_factor, east, north)


@numba.njit(**_jit)
def companion_chi2_sight(dt, period, m0, ew, a, inc, omega, node, pw, scale,
                         uses_parallax, first, end_cart, end, obs1, obs2, err1, err2, corr,
                         corr_factor, sight, delay_factor, east,
                         north):  # pragma: no cover - compiled
    """:func:`companion_chi2` seen along a per-row line of sight.

    The orbit is read in ICRS axes (x, y, z) as :func:`massfit.orbits.kepler.orbit_state`
    gives it; each row's position is taken ``delay_factor * (d . r) / c`` earlier
    (the light time, first order; no delay where ``delay_factor`` is 0) and projected
    onto the tangent plane at the primary as :func:`massfit.orbits.viewing.project`
    does: angle times the primary's distance D, D (e . r) / (D + d . r). ``sight``
    rows 0-2, 3-5, 6-8 are the unit vectors d, e, n of each row, row 9 is D (au).
    """
    mw = TWO_PI / period
    rw = math.sqrt(1.0 - ew * ew)
    cw, sw = math.cos(omega), math.sin(omega)
    cn, sn = math.cos(node), math.sin(node)
    ci, si = math.cos(inc), math.sin(inc)
    # orbit_axes: P towards periapsis, Q a quarter-turn ahead
    p0, p1, p2 = cw * cn - sw * sn * ci, cw * sn + sw * cn * ci, sw * si
    q0, q1, q2 = -sw * cn - cw * sn * ci, -sw * sn + cw * cn * ci, cw * si
    # cos E and sin E first (in east and north), in a loop without branches that the
    # compiler vectorises; the rare points the fast sequence does not trust after it
    for j in range(first, end):
        _, c, s, good = _core(m0 + mw * dt[j], ew)
        east[j - first] = c if good else np.nan
        north[j - first] = s
    for j in range(first, end):
        if east[j - first] != east[j - first]:
            _, east[j - first], north[j - first] = _safe(m0 + mw * dt[j], ew)
    for j in range(first, end):
        c, s = east[j - first], north[j - first]
        x = c - ew
        y = rw * s
        r0, r1, r2 = a * (x * p0 + y * q0), a * (x * p1 + y * q1), a * (x * p2 + y * q2)
        # the light time (r - v * 0 is r where there is none: no branch in the loop)
        e_dot = mw / (1.0 - ew * c)
        vx = -a * e_dot * s
        vy = a * e_dot * rw * c
        depth = sight[0, j] * r0 + sight[1, j] * r1 + sight[2, j] * r2
        delay = delay_factor * depth / C_AU_PER_DAY
        r0 = r0 - (vx * p0 + vy * q0) * delay
        r1 = r1 - (vx * p1 + vy * q1) * delay
        r2 = r2 - (vx * p2 + vy * q2) * delay
        distance = sight[9, j]
        depth = distance + (sight[0, j] * r0 + sight[1, j] * r1 + sight[2, j] * r2)
        factor = distance / depth
        east[j - first] = factor * (sight[3, j] * r0 + sight[4, j] * r1 + sight[5, j] * r2)
        north[j - first] = factor * (sight[6, j] * r0 + sight[7, j] * r1 + sight[8, j] * r2)
    return _residual_chi2(pw, scale, uses_parallax, first, end_cart, end, obs1, obs2,
                          err1, err2, corr, corr_factor, east, north)


@numba.njit(**_jit)
def _residual_chi2(pw, scale, uses_parallax, first, end_cart, end, obs1, obs2, err1,
                   err2, corr, corr_factor, east, north):  # pragma: no cover - compiled
    """chi^2 of the offsets ``east``, ``north`` (au, rows ``[first, end)``) against the
    east/north rows, then the separation/position-angle rows."""
    total = 0.0
    for j in range(first, end_cart):
        f = scale[j] * pw if uses_parallax[j] else scale[j]
        r1 = (obs1[j] - east[j - first] * f) / err1[j]
        r2 = ((obs2[j] - north[j - first] * f) / err2[j] - corr[j] * r1) * corr_factor[j]
        total += r1 * r1 + r2 * r2
    for j in range(end_cart, end):
        f = scale[j] * pw if uses_parallax[j] else scale[j]
        xe = east[j - first] * f
        xn = north[j - first] * f
        r1 = (obs1[j] - math.hypot(xe, xn)) / err1[j]
        d = obs2[j] - math.atan2(xe, xn) + PI
        r2 = (d - TWO_PI * math.floor(d * INV_TWO_PI) - PI) / err2[j]
        total += r1 * r1 + r2 * r2
    return total


#: The one-point solver under public names, for the other compiled kernels: the fast
#: branch-free sequence (E, cos E, sin E, trusted) and its safeguarded fallback.
point = _core
point_safe = _safe

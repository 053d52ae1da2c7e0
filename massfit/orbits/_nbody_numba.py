"""Compiled N-body integrator (numba); imported by :mod:`massfit.orbits.nbody` only when numba is.

The forces: the primary's point mass and zonal harmonics J2, J4 about its pole, and
the companions' mutual pulls (with the indirect term), as ``field`` says per walker
(see :func:`massfit.orbits.nbody.integrate_system`). Walkers are shared among numba's threads.

The same method as the numpy path: DOP853 (Dormand and Prince's 8(5,3) Runge-Kutta
pair, with scipy's coefficients and its step-size control), but each walker is
integrated on its own with its own step size, in compiled loops. The stacked numpy
path must take the step of its worst walker and pays Python's overhead on every stage;
here neither happens.

Output times are reached by shortening the step that would pass them (no dense
output): each output time costs at most one extra step, and the value there is a
full-order step rather than an interpolant.
"""

from __future__ import annotations

import math

import numba
import numpy as np
from scipy.integrate._ivp import dop853_coefficients as _coef

N_STAGES = _coef.N_STAGES
A = np.ascontiguousarray(_coef.A[:N_STAGES, :N_STAGES], dtype=np.float64)
B = np.ascontiguousarray(_coef.B, dtype=np.float64)
C = np.ascontiguousarray(_coef.C[:N_STAGES], dtype=np.float64)
E3 = np.ascontiguousarray(_coef.E3, dtype=np.float64)
E5 = np.ascontiguousarray(_coef.E5, dtype=np.float64)
# scipy's step control (scipy.integrate._ivp.rk): safety factor, bounds of the change.
SAFETY, MIN_FACTOR, MAX_FACTOR = 0.9, 0.2, 10.0
ERROR_EXPONENT = -1.0 / 8.0  # the error estimator is of order 7
MAX_STEPS = 2_000_000

_jit = dict(cache=True, error_model="numpy", fastmath=False)


@numba.njit(**_jit)
def _central_field(x, y, z, field):  # pragma: no cover - compiled
    """Acceleration per unit GM of the primary at (x, y, z), as a tuple.

    ``field`` is (J2 R^2, J4 R^4, pole_x, pole_y, pole_z, mutual pulls on/off): the
    point mass plus the zonal harmonics J2 and J4 about the pole (the gradient of
    the zonal potential; see :mod:`massfit.orbits.perturbed`). Further terms of the primary's
    own field (relativity, say) belong here, so that the direct and the indirect
    terms of the equations of motion both get them.
    """
    r2 = x * x + y * y + z * z
    r = math.sqrt(r2)
    inv_r3 = 1.0 / (r2 * r)
    ax = -x * inv_r3
    ay = -y * inv_r3
    az = -z * inv_r3
    c2 = field[0]
    c4 = field[1]
    if c2 != 0.0 or c4 != 0.0:
        s = x * field[2] + y * field[3] + z * field[4]  # along the pole
        u2 = s * s / r2
        inv_r5 = inv_r3 / r2
        inv_r7 = inv_r5 / r2
        radial = -1.5 * c2 * inv_r5 * (1.0 - 5.0 * u2) \
            + c4 * inv_r7 * 1.875 * (1.0 - 14.0 * u2 + 21.0 * u2 * u2)
        polar = s * (-3.0 * c2 * inv_r5 + c4 * inv_r7 * 2.5 * (3.0 - 7.0 * u2))
        ax += radial * x + polar * field[2]
        ay += radial * y + polar * field[3]
        az += radial * z + polar * field[4]
    return ax, ay, az


@numba.njit(**_jit)
def _derivative(y, gm_central, gm_bodies, field, out, g):  # pragma: no cover - compiled
    """d/dt of the astrocentric state y (K*6: x, y, z, vx, vy, vz per companion),
    in the primary's field with the companions' pulls as ``field`` says; ``g`` (K, 3)
    is scratch space for the primary's field at each companion."""
    if field[0] == 0.0 and field[1] == 0.0 and field[5] != 0.0:
        _derivative_point(y, gm_central, gm_bodies, out)
    else:
        _derivative_zonal(y, gm_central, gm_bodies, field, out, g)


@numba.njit(**_jit)
def _derivative_point(y, gm_central, gm_bodies, out):  # pragma: no cover - compiled
    """A point-mass primary with pulls: the general form below without the zonal
    terms, written out because it runs 1.5 times faster (measured)."""
    k_bodies = gm_bodies.shape[0]
    for k in range(k_bodies):
        base = 6 * k
        x, yy, z = y[base], y[base + 1], y[base + 2]
        r2 = x * x + yy * yy + z * z
        inv_r3 = 1.0 / (r2 * math.sqrt(r2))
        g = gm_central + gm_bodies[k]
        out[base] = y[base + 3]
        out[base + 1] = y[base + 4]
        out[base + 2] = y[base + 5]
        ax = -g * x * inv_r3
        ay = -g * yy * inv_r3
        az = -g * z * inv_r3
        for j in range(k_bodies):
            if j == k:
                continue
            other = 6 * j
            xj, yj, zj = y[other], y[other + 1], y[other + 2]
            dx, dy, dz = xj - x, yj - yy, zj - z
            d2 = dx * dx + dy * dy + dz * dz
            inv_d3 = 1.0 / (d2 * math.sqrt(d2))
            rj2 = xj * xj + yj * yj + zj * zj
            inv_rj3 = 1.0 / (rj2 * math.sqrt(rj2))
            gj = gm_bodies[j]
            # Direct pull of j, minus the primary's acceleration towards j.
            ax += gj * (dx * inv_d3 - xj * inv_rj3)
            ay += gj * (dy * inv_d3 - yj * inv_rj3)
            az += gj * (dz * inv_d3 - zj * inv_rj3)
        out[base + 3] = ax
        out[base + 4] = ay
        out[base + 5] = az


@numba.njit(**_jit)
def _derivative_zonal(y, gm_central, gm_bodies, field, out, g):  # pragma: no cover - compiled
    """The general form: the primary's zonal field, pulls on or off. The field per
    unit GM at each companion is evaluated once (into ``g``) and serves both the
    direct term of that companion and the indirect term of every other, and each
    pair's separation once for both of its members: with four moons, 0.22 us per
    derivative against 0.54 us evaluating both again for each ordered pair
    (measured side by side, one core)."""
    k_bodies = gm_bodies.shape[0]
    for k in range(k_bodies):
        base = 6 * k
        gx, gy, gz = _central_field(y[base], y[base + 1], y[base + 2], field)
        g[k, 0] = gx
        g[k, 1] = gy
        g[k, 2] = gz
        gk = gm_central + gm_bodies[k]
        out[base] = y[base + 3]
        out[base + 1] = y[base + 4]
        out[base + 2] = y[base + 5]
        out[base + 3] = gk * gx
        out[base + 4] = gk * gy
        out[base + 5] = gk * gz
    if field[5] == 0.0:
        return
    for k in range(k_bodies):
        base = 6 * k
        for j in range(k + 1, k_bodies):
            other = 6 * j
            dx = y[other] - y[base]
            dy = y[other + 1] - y[base + 1]
            dz = y[other + 2] - y[base + 2]
            d2 = dx * dx + dy * dy + dz * dz
            inv_d3 = 1.0 / (d2 * math.sqrt(d2))
            # On k: the direct pull of j, plus the primary's own acceleration towards
            # j (the field per unit GM of the primary, which points at it); on j the
            # same with the roles swapped.
            gj = gm_bodies[j]
            gk = gm_bodies[k]
            out[base + 3] += gj * (dx * inv_d3 + g[j, 0])
            out[base + 4] += gj * (dy * inv_d3 + g[j, 1])
            out[base + 5] += gj * (dz * inv_d3 + g[j, 2])
            out[other + 3] += gk * (g[k, 0] - dx * inv_d3)
            out[other + 4] += gk * (g[k, 1] - dy * inv_d3)
            out[other + 5] += gk * (g[k, 2] - dz * inv_d3)


@numba.njit(**_jit)
def _error_norm(stages, h, scale):  # pragma: no cover - compiled
    """scipy's DOP853 error norm: the 5th-order estimate, damped by the 3rd."""
    n = scale.shape[0]
    e5 = 0.0
    e3 = 0.0
    for i in range(n):
        s5 = 0.0
        s3 = 0.0
        for s in range(N_STAGES + 1):
            s5 += stages[s, i] * E5[s]
            s3 += stages[s, i] * E3[s]
        s5 /= scale[i]
        s3 /= scale[i]
        e5 += s5 * s5
        e3 += s3 * s3
    if e5 == 0.0 and e3 == 0.0:
        return 0.0
    return abs(h) * e5 / math.sqrt((e5 + 0.01 * e3) * n)


@numba.njit(**_jit)
def _initial_step(y, f, gm_central, gm_bodies, field, direction, span, rtol, atol,
                  work, f1, g):  # pragma: no cover - compiled
    """scipy's empirical first step (Hairer, Norsett and Wanner, sec. II.4)."""
    n = y.shape[0]
    d0 = 0.0
    d1 = 0.0
    for i in range(n):
        sc = atol[i] + abs(y[i]) * rtol
        d0 += (y[i] / sc) ** 2
        d1 += (f[i] / sc) ** 2
    d0 = math.sqrt(d0 / n)
    d1 = math.sqrt(d1 / n)
    h0 = 1e-6 if (d0 < 1e-5 or d1 < 1e-5) else 0.01 * d0 / d1
    h0 = min(h0, span)
    for i in range(n):
        work[i] = y[i] + h0 * direction * f[i]
    _derivative(work, gm_central, gm_bodies, field, f1, g)
    d2 = 0.0
    for i in range(n):
        sc = atol[i] + abs(y[i]) * rtol
        d2 += ((f1[i] - f[i]) / sc) ** 2
    d2 = math.sqrt(d2 / n) / h0
    if d1 <= 1e-15 and d2 <= 1e-15:
        h1 = max(1e-6, h0 * 1e-3)
    else:
        h1 = (0.01 / max(d1, d2)) ** (1.0 / 8.0)
    return min(100.0 * h0, h1, span)


@numba.njit(**_jit)
def _rk_step(y, h, gm_central, gm_bodies, field, stages, work, g,
             y_new):  # pragma: no cover - compiled
    """One DOP853 step of length h from y, whose derivative is already in stages[0]:
    the other stages into ``stages`` and the eighth-order solution into ``y_new``."""
    n = y.shape[0]
    for s in range(1, N_STAGES):
        for i in range(n):
            acc = 0.0
            for r in range(s):
                acc += A[s, r] * stages[r, i]
            work[i] = y[i] + h * acc
        _derivative(work, gm_central, gm_bodies, field, stages[s], g)
    for i in range(n):
        acc = 0.0
        for r in range(N_STAGES):
            acc += B[r] * stages[r, i]
        y_new[i] = y[i] + h * acc


@numba.njit(**_jit)
def _integrate_one(y0, gm_central, gm_bodies, field, targets, rtol, atol, out):  # pragma: no cover
    """Integrate one system from t = 0 to each of ``targets`` (same sign, sorted by |t|).

    Writes the state at each target into the rows of ``out``; returns False where
    the step became too small or the state stopped being finite.
    """
    n = y0.shape[0]
    if targets.shape[0] == 0:
        return True
    direction = 1.0 if targets[targets.shape[0] - 1] > 0 else -1.0
    y = y0.copy()
    y_new = np.empty(n)
    work = np.empty(n)
    f = np.empty(n)
    stages = np.empty((N_STAGES + 1, n))
    scale = np.empty(n)
    g = np.empty((gm_bodies.shape[0], 3))
    _derivative(y, gm_central, gm_bodies, field, f, g)
    t = 0.0
    span = abs(targets[targets.shape[0] - 1])
    h_abs = _initial_step(y, f, gm_central, gm_bodies, field, direction, span, rtol, atol,
                          work, y_new, g)
    steps = 0
    for j in range(targets.shape[0]):
        t_target = targets[j]
        while direction * (t_target - t) > 0.0:
            steps += 1
            if steps > MAX_STEPS:
                return False
            rejected = False
            while True:
                min_step = 10.0 * abs(np.nextafter(t, direction * np.inf) - t)
                if h_abs < min_step:
                    return False
                remaining = abs(t_target - t)
                landing = h_abs >= remaining
                h = direction * (remaining if landing else h_abs)
                for i in range(n):
                    stages[0, i] = f[i]
                _rk_step(y, h, gm_central, gm_bodies, field, stages, work, g, y_new)
                _derivative(y_new, gm_central, gm_bodies, field, stages[N_STAGES], g)
                finite = True
                for i in range(n):
                    scale[i] = atol[i] + max(abs(y[i]), abs(y_new[i])) * rtol
                    if not math.isfinite(y_new[i]):
                        finite = False
                if not finite:
                    return False
                err = _error_norm(stages, h, scale)
                if err < 1.0:
                    factor = MAX_FACTOR if err == 0.0 else min(
                        MAX_FACTOR, SAFETY * err ** ERROR_EXPONENT)
                    if rejected:
                        factor = min(1.0, factor)
                    # A step shortened to land on an output time keeps the length
                    # the error allows, not the shortened one.
                    h_abs = max(h_abs, abs(h) * factor) if landing else abs(h) * factor
                    break
                h_abs = abs(h) * max(MIN_FACTOR, SAFETY * err ** ERROR_EXPONENT)
                rejected = True
            t = t_target if landing else t + h
            for i in range(n):
                y[i] = y_new[i]
                f[i] = stages[N_STAGES, i]
        for i in range(n):
            out[j, i] = y[i]
    return True


@numba.njit(parallel=True, **_jit)
def integrate(y0, gm_central, gm_bodies, field, forward, backward, rtol, atol,
              out):  # pragma: no cover - compiled
    """Every walker w: y0[w] (K*6) integrated to the times ``forward`` (ascending,
    >= 0) and ``backward`` (descending, < 0); out[w] is (len(forward) +
    len(backward), K*6), forward rows first. Failed walkers are left NaN. The
    walkers are shared among numba's threads (each is independent of the others)."""
    n_walkers = y0.shape[0]
    n_fwd = forward.shape[0]
    for w in numba.prange(n_walkers):
        ok = _integrate_one(y0[w], gm_central[w], gm_bodies[w], field[w], forward, rtol,
                            atol[w], out[w, :n_fwd])
        if ok:
            ok = _integrate_one(y0[w], gm_central[w], gm_bodies[w], field[w], backward,
                                rtol, atol[w], out[w, n_fwd:])
        if not ok:
            out[w, :, :] = np.nan


@numba.njit(**_jit)
def _fixed_one(y0, gm_central, gm_bodies, field, targets, h_max, out):  # pragma: no cover
    """Integrate one system from t = 0 to each of ``targets`` (same sign, sorted by
    |t|) with DOP853's eighth-order solution at fixed steps: each stretch between two
    output times is cut into the fewest equal steps no longer than ``h_max``. No
    error estimate, no rejected steps; the grid depends on the output times and on
    ``h_max`` only, so the result is a smooth function of the initial state (what a
    least-squares Jacobian by finite differences needs). Returns False where the
    state stopped being finite."""
    n = y0.shape[0]
    y = y0.copy()
    y_new = np.empty(n)
    work = np.empty(n)
    stages = np.empty((N_STAGES, n))
    g = np.empty((gm_bodies.shape[0], 3))
    t = 0.0
    for j in range(targets.shape[0]):
        span = targets[j] - t
        count = int(math.ceil(abs(span) / h_max * (1.0 - 1e-12)))
        if count > 0:
            h = span / count
            for _ in range(count):
                _derivative(y, gm_central, gm_bodies, field, stages[0], g)
                _rk_step(y, h, gm_central, gm_bodies, field, stages, work, g, y_new)
                for i in range(n):
                    y[i] = y_new[i]
        t = targets[j]
        for i in range(n):
            if not math.isfinite(y[i]):
                return False
            out[j, i] = y[i]
    return True


@numba.njit(parallel=True, **_jit)
def integrate_fixed(y0, gm_central, gm_bodies, field, forward, backward, h_max,
                    out):  # pragma: no cover - compiled
    """:func:`integrate` with fixed steps of at most ``h_max[w]`` days per walker
    (:func:`_fixed_one`) instead of the adaptive ones."""
    n_walkers = y0.shape[0]
    n_fwd = forward.shape[0]
    for w in numba.prange(n_walkers):
        ok = math.isfinite(h_max[w]) and h_max[w] > 0.0
        if ok:
            ok = _fixed_one(y0[w], gm_central[w], gm_bodies[w], field[w], forward, h_max[w],
                            out[w, :n_fwd])
        if ok:
            ok = _fixed_one(y0[w], gm_central[w], gm_bodies[w], field[w], backward,
                            h_max[w], out[w, n_fwd:])
        if not ok:
            out[w, :, :] = np.nan

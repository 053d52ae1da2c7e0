"""Compiled log-posterior of two-body models (numba): sampler coordinates in, one
log-posterior per walker out, the walkers spread over threads.

:mod:`massfit.model.compiled_posterior` packs a model (and the sampler's change of
coordinates) into the plain tables this kernel reads, and decides which models qualify;
the Python path (:meth:`massfit.model.orbit_model.OrbitModel.log_prob` and
:meth:`massfit.sample.reparameterisation.SamplerCoordinates.to_model`) is the
reference, and every step here repeats its arithmetic in the same order, so the two
agree to rounding (tests/test_compiled_posterior.py).

Tables (all rows of int64 or float64; -1 marks a fixed value in a column slot):

``comp_i`` per companion: log10 P, sqrt(e) cos w, sqrt(e) sin w, omega, cos i, node,
phase, mass columns; the mass's kind (0 fixed, 1 sampled, 2 log10 sampled); the
first, last east/north and last row of its astrometry; with velocities alone, the kind
and column of the primary's and the companion's semi-amplitudes.
``comp_f`` per companion: fixed e, fixed i, fixed mass, the velocity reference epoch.
``glob_i``: central-mass column, parallax column, parallax needed (0/1), slope and
curvature columns, velocities alone (0/1), a line of sight per row (0/1), the light
time along it (0/1). ``sight`` (10, rows): each row's unit vectors towards the primary,
east and north (ICRS), and its distance (au); empty without a line of sight. ``glob_f``: fixed central mass, fixed parallax (mas), the
likelihood's normalisation, the trend's epoch, fixed slope, fixed curvature, the
prior's constant.

``lin_theta0`` (n_dim,), ``lin_power`` (n_dim,), ``lin_mix`` (n_dim, n_dim),
``lin_base`` (2, rows), ``lin_slope`` (2, rows, n_dim): where a model is sampled
through the linearised surrogate (:mod:`massfit.model.surrogate`), with the step
u(theta) - u(theta0) (u = 10^theta in the columns where ``lin_power`` is 1, theta
elsewhere), the two-body orbits are computed at theta0 + mix step and each row's two
predicted values (data units: east and north, or separation and position angle) get
base + slope step + sum_l quad[:, :, l] (step . forms[l] step), with ``lin_forms``
(terms, n_dim, n_dim) and ``lin_quad`` (2, rows, terms) the surrogate's second-order
terms (none: zero terms); the prior stays at theta. All empty otherwise.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from massfit.constants import GM_SUN, KM_S_PER_AU_DAY
from massfit.orbits._kepler_numba import (companion_chi2, companion_chi2_sight, point,
                                          point_safe)

TWO_PI = 2.0 * math.pi
LN10 = math.log(10.0)
LOG_PI = math.log(math.pi)

_jit = dict(cache=True, error_model="numpy", fastmath=False)

# Column slots of comp_i.
C_LOGP, C_H, C_K, C_OMEGA, C_COSI, C_NODE, C_PHASE, C_MASS, C_MASS_KIND = range(9)
C_FIRST, C_END_CART, C_END = 9, 10, 11
# Velocities alone: the semi-amplitudes' kinds (0 none, 1 sampled, 2 log10) and columns.
C_KP_KIND, C_KP, C_KC_KIND, C_KC = 12, 13, 14, 15
# Slots of comp_f.
F_ECC, F_INC, F_MASS, F_TREF = range(4)
# glob_i and glob_f.
G_CENTRAL, G_PLX, G_NEEDS_PLX, G_SLOPE, G_CURV, G_VELOCITY_ONLY, G_SIGHT, G_LIGHT_TIME = range(8)
GF_CENTRAL, GF_PLX, GF_NORM, GF_TTREND, GF_SLOPE, GF_CURV, GF_CONST = range(7)
# Transform and prior codes of the coordinates whose prior density varies.
T_IDENTITY, T_LOG10, T_COS, T_DISC = range(4)
P_UNIFORM, P_LOGUNIFORM, P_NORMAL = range(3)


@numba.njit(**_jit)
def _mod(a, b):  # pragma: no cover - compiled
    return np.mod(a, b)  # numpy's float remainder (the sign of the divisor)


@numba.njit(**_jit)
def _scaled(theta, col, kind, fixed):  # pragma: no cover - compiled
    if kind == 0:
        return fixed
    if kind == 2:
        return 10.0 ** theta[col]
    return theta[col]


@numba.njit(**_jit)
def _prior_density(x, code, p):  # pragma: no cover - compiled
    # The priors' own log_pdf (massfit.priors), -inf outside [p[2], p[3]].
    if not (x >= p[2] and x <= p[3]):
        return -np.inf
    if code == P_UNIFORM:
        return -math.log(p[3] - p[2])
    if code == P_LOGUNIFORM:
        return -math.log(x) - p[1]  # p[1] = log(log(high / low))
    z = (x - p[0]) / p[1]
    return -0.5 * z * z - p[4]  # p[4] = log(sd sqrt(2 pi))


@numba.njit(**_jit)
def log_prior(theta, low, high, constant, discs_i, discs_f, win_i, win_f, var_i,
              var_f):  # pragma: no cover - compiled
    """The model's log_prior for one coordinate vector (the same plan: a box with a
    constant, the sqrt(e) discs, the angle windows and the varying coordinates)."""
    inside = True
    for k in range(theta.size):
        inside = inside and (theta[k] >= low[k]) and (theta[k] <= high[k])
    for d in range(discs_i.shape[0]):
        ecc = theta[discs_i[d, 0]] ** 2 + theta[discs_i[d, 1]] ** 2
        inside = inside and (ecc >= discs_f[d, 0]) and (ecc <= discs_f[d, 1])
    lp = constant
    for v in range(var_i.shape[0]):
        col, transform, code = var_i[v, 0], var_i[v, 1], var_i[v, 2]
        u = theta[col]
        p = var_f[v]
        if transform == T_LOG10:
            x = 10.0 ** u
            value = _prior_density(x, code, p) + math.log(x * LN10)
        elif transform == T_IDENTITY:
            value = _prior_density(u, code, p)
        elif transform == T_COS:
            inc = math.acos(min(max(u, -1.0), 1.0))
            value = _prior_density(inc, code, p) - math.log(math.sin(inc))
        else:  # T_DISC: e from the pair
            partner = theta[var_i[v, 3]]
            value = _prior_density(u * u + partner * partner, code, p) - LOG_PI
        if not (u >= p[5] and u <= p[6]):
            value = -np.inf
        lp += value
    windows = 0.0
    for j in range(win_i.size):
        u = theta[win_i[j]]
        if not (u >= win_f[j, 0] and u < win_f[j, 1]):
            windows = -np.inf
    lp += windows
    if not inside or lp != lp:
        return -np.inf
    return lp


@numba.njit(**_jit)
def _longitude(s, theta, lon_i, lon_f):  # pragma: no cover - compiled
    # SamplerCoordinates.to_model for the sky-fixed angles; returns the log-Jacobian.
    log_jac = 0.0
    for b in range(lon_i.shape[0]):
        h, k = s[lon_i[b, 1]], s[lon_i[b, 2]]
        node, phase = s[lon_i[b, 4]], s[lon_i[b, 5]]
        turn = lon_f[b, 0] * node
        cos_t, sin_t = math.cos(turn), math.sin(turn)
        theta[lon_i[b, 1]] = h * cos_t + k * sin_t
        theta[lon_i[b, 2]] = -h * sin_t + k * cos_t
        low = lon_f[b, 2]
        theta[lon_i[b, 5]] = low + _mod(phase - turn - low, TWO_PI)
        centre = lon_f[b, 1]
        if phase < centre - math.pi or phase >= centre + math.pi:
            log_jac = -np.inf
    return log_jac


@numba.njit(**_jit)
def _state(s, theta, st_i, st_f, gm, log_jac):  # pragma: no cover - compiled
    # SamplerCoordinates.to_model for one state-vector body (elements_of_state and
    # the model's columns); returns the log-Jacobian so far.
    cols = st_i
    d1, d2 = s[cols[2]], s[cols[5]]
    scale, angle = st_f[0], st_f[1]
    if st_f[2] > 0.0 and d1 < 0.0:
        log_jac = -np.inf
    ca, sa = math.cos(angle), math.sin(angle)
    rn, re, rz = s[cols[0]], s[cols[1]], d1 * ca - d2 * sa
    vn, ve, vz = s[cols[3]], s[cols[4]], (d1 * sa + d2 * ca) / scale
    log_jac -= math.log(scale)
    radius = math.sqrt(rn * rn + re * re + rz * rz)
    speed2 = vn * vn + ve * ve + vz * vz
    energy = 0.5 * speed2 - gm / radius
    a = -gm / (2.0 * energy)
    hn, he, hz = re * vz - rz * ve, rz * vn - rn * vz, rn * ve - re * vn
    h_norm = math.sqrt(hn * hn + he * he + hz * hz)
    cos_inc = hz / h_norm
    sin_inc = math.sqrt(max(1.0 - cos_inc * cos_inc, 0.0))
    node = math.atan2(hn, -he)
    en = (ve * hz - vz * he) / gm - rn / radius
    ee = (vz * hn - vn * hz) / gm - re / radius
    ez = (vn * he - ve * hn) / gm - rz / radius
    ecc = math.sqrt(en * en + ee * ee + ez * ez)
    cn, sn = math.cos(node), math.sin(node)
    omega = math.atan2(en * (-cos_inc * sn) + ee * (cos_inc * cn) + ez * sin_inc,
                       en * cn + ee * sn + ez * 0.0)
    latitude = math.atan2(rn * (-cos_inc * sn) + re * (cos_inc * cn) + rz * sin_inc,
                          rn * cn + re * sn + rz * 0.0)
    nu = latitude - omega
    big_e = 2.0 * math.atan2(math.sqrt(1.0 - ecc) * math.sin(0.5 * nu),
                             math.sqrt(1.0 + ecc) * math.cos(0.5 * nu))
    mean_anomaly = big_e - ecc * math.sin(big_e)
    period = TWO_PI * math.sqrt(a ** 3.0 / gm)  # pow, as numpy (a ** 3 multiplies)
    lj = (math.log(3.0 / (2.0 * LN10)) - 1.5 * math.log(gm) - 1.5 * math.log(a)
          - math.log(ecc))
    if not (energy < 0.0 and ecc < 1.0 and h_norm > 0.0):
        lj = -np.inf
    log_jac += lj
    # The model's columns, folded into the node and phase windows.
    node_low, width, phase_low = st_f[3], st_f[4], st_f[5]
    turns = math.floor((node - node_low) / width)
    node = node - turns * width
    if width < TWO_PI:
        omega = omega + turns * math.pi
    root = math.sqrt(ecc)
    theta[cols[0]] = math.log10(period)
    theta[cols[1]] = root * math.cos(omega)
    theta[cols[2]] = root * math.sin(omega)
    theta[cols[3]] = cos_inc
    theta[cols[4]] = node
    theta[cols[5]] = phase_low + _mod(mean_anomaly + omega - phase_low, TWO_PI)
    return log_jac


@numba.njit(**_jit)
def _chi2(theta, comp_i, comp_f, glob_i, glob_f, rows, uses_parallax, sight, vel, vel_i,
          inst_i, inst_f, east, north):  # pragma: no cover - compiled
    # OrbitModel.physical and the chi^2 of the astrometry and the velocities.
    central = _scaled(theta, glob_i[G_CENTRAL], 0 if glob_i[G_CENTRAL] < 0 else 2,
                      glob_f[GF_CENTRAL])
    pw = 1.0
    if glob_i[G_NEEDS_PLX] > 0:
        plx = glob_f[GF_PLX] if glob_i[G_PLX] < 0 else theta[glob_i[G_PLX]]
        pw = plx * 1e-3
    n_comp = comp_i.shape[0]
    n_vel = vel.shape[1]
    chi2 = 0.0
    model_v = np.zeros(n_vel)
    cos_all = np.empty(n_vel)
    sin_all = np.empty(n_vel)
    trusted = np.empty(n_vel, dtype=np.bool_)
    for v in range(n_vel):  # the systemic part: offset and trend
        j = vel_i[0, v]
        offset = inst_f[j, 0] if inst_i[j, 0] < 0 else theta[inst_i[j, 0]]
        slope = glob_f[GF_SLOPE] if glob_i[G_SLOPE] < 0 else theta[glob_i[G_SLOPE]]
        curv = glob_f[GF_CURV] if glob_i[G_CURV] < 0 else theta[glob_i[G_CURV]]
        dt = vel[0, v] - glob_f[GF_TTREND]
        model_v[v] = offset + slope * dt + curv * dt * dt
    for k in range(n_comp):
        ci, cf = comp_i[k], comp_f[k]
        period = 10.0 ** theta[ci[C_LOGP]]
        if ci[C_H] < 0:
            ecc = cf[F_ECC]
            omega = theta[ci[C_OMEGA]] if ci[C_OMEGA] >= 0 else 0.0
        else:
            h, kk = theta[ci[C_H]], theta[ci[C_K]]
            ecc = h * h + kk * kk
            omega = math.atan2(kk, h)
        m0 = theta[ci[C_PHASE]] - omega
        if glob_i[G_VELOCITY_ONLY]:  # the semi-amplitudes themselves are parameters
            k_primary = _scaled(theta, ci[C_KP], ci[C_KP_KIND], 0.0)
            k_companion = _scaled(theta, ci[C_KC], ci[C_KC_KIND], 0.0)
        else:
            inc = cf[F_INC] if ci[C_COSI] < 0 else math.acos(
                min(max(theta[ci[C_COSI]], -1.0), 1.0))
            node = theta[ci[C_NODE]]
            mass = _scaled(theta, ci[C_MASS], ci[C_MASS_KIND], cf[F_MASS])
            gm = GM_SUN * (central + mass)
            a = np.cbrt(gm * period ** 2 / (4.0 * math.pi ** 2))
            if glob_i[G_SIGHT]:  # a line of sight per row (ICRS orbit, light time)
                delay = (central - mass) / (central + mass) if glob_i[G_LIGHT_TIME] else 0.0
                chi2 += companion_chi2_sight(
                    rows[0], period, m0, ecc, a, inc, omega, node, pw, rows[1],
                    uses_parallax, ci[C_FIRST], ci[C_END_CART], ci[C_END], rows[2],
                    rows[3], rows[4], rows[5], rows[6], rows[7], sight, delay, east, north)
            else:
                chi2 += companion_chi2(rows[0], period, m0, ecc, a, inc, omega, node, pw,
                                       rows[1], uses_parallax, ci[C_FIRST], ci[C_END_CART],
                                       ci[C_END], rows[2], rows[3], rows[4], rows[5],
                                       rows[6], rows[7], east, north)
            if n_vel == 0:
                continue
            k_rel = KM_S_PER_AU_DAY * (TWO_PI * a * math.sin(inc)
                                       / (period * math.sqrt(1.0 - ecc * ecc)))
            share = mass / (central + mass)
            k_primary = share * k_rel
            k_companion = (1.0 - share) * k_rel
        cos_w, sin_w = math.cos(omega), math.sin(omega)
        root = math.sqrt(1.0 - ecc * ecc)
        # The fast solver over every row first (a branch-free loop the compiler
        # vectorises: ~4x faster than row by row with the fallback inline), then the
        # rare rows it does not trust, then the velocities.
        for v in range(n_vel):
            mean = m0 + TWO_PI * (vel[0, v] - cf[F_TREF]) / period
            _, cos_all[v], sin_all[v], trusted[v] = point(mean, ecc)
        for v in range(n_vel):
            if not trusted[v]:
                mean = m0 + TWO_PI * (vel[0, v] - cf[F_TREF]) / period
                _, cos_all[v], sin_all[v] = point_safe(mean, ecc)
        for v in range(n_vel):
            cos_e, sin_e = cos_all[v], sin_all[v]
            denominator = 1.0 - ecc * cos_e
            cos_nu = (cos_e - ecc) / denominator
            sin_nu = root * sin_e / denominator
            shape = cos_w * (cos_nu + ecc) - sin_w * sin_nu
            part = -k_primary * shape
            if vel_i[1, v] == k:
                part += (k_primary + k_companion) * shape
            model_v[v] += part
    jitter2 = np.empty(inst_i.shape[0])  # each instrument's jitter^2, once
    for j in range(inst_i.shape[0]):
        jitter2[j] = _scaled(theta, inst_i[j, 1], inst_i[j, 2], inst_f[j, 1]) ** 2
    for v in range(n_vel):
        j2 = jitter2[vel_i[0, v]]
        whitened = (vel[1, v] - model_v[v]) / math.sqrt(vel[2, v] + j2)
        extra = math.log1p(j2 / vel[2, v]) if j2 != 0.0 else 0.0
        chi2 += whitened * whitened + extra
    return chi2


@numba.njit(**_jit)
def _corrected(rows, theta, theta0, power, mix, base, slope, forms,
               quad):  # pragma: no cover - compiled
    # The rows with each observed pair moved by -(base + slope step + sum_l quad_l
    # step.forms_l step), and the two-body coordinates theta0 + mix step (step:
    # u(theta) - u(theta0), u = 10^theta where ``power`` is 1).
    out = rows.copy()
    n_dim = theta0.size
    step = np.empty(n_dim)
    for k in range(n_dim):
        if power[k] == 1:
            step[k] = 10.0 ** theta[k] - 10.0 ** theta0[k]
        else:
            step[k] = theta[k] - theta0[k]
    orbit = theta0.copy()
    for i in range(n_dim):
        for k in range(n_dim):
            orbit[i] += mix[i, k] * step[k]
    n_terms = forms.shape[0]
    term = np.zeros(n_terms)
    for t in range(n_terms):
        for i in range(n_dim):
            inner = 0.0
            for k in range(n_dim):
                inner += forms[t, i, k] * step[k]
            term[t] += step[i] * inner
    for j in range(rows.shape[1]):
        first, second = base[0, j], base[1, j]
        for k in range(n_dim):
            first += slope[0, j, k] * step[k]
            second += slope[1, j, k] * step[k]
        for t in range(n_terms):
            first += quad[0, j, t] * term[t]
            second += quad[1, j, t] * term[t]
        out[2, j] -= first
        out[3, j] -= second
    return out, orbit


@numba.njit(parallel=True, **_jit)
def log_posterior(sampled, out, comp_i, comp_f, glob_i, glob_f, rows, uses_parallax,
                  sight, vel, vel_i, inst_i, inst_f, low, high, discs_i, discs_f, win_i, win_f, var_i,
                  var_f, lon_i, lon_f, st_i, st_f, st_comp, angular_i, mass_i, lin_theta0,
                  lin_power, lin_mix, lin_base, lin_slope, lin_forms,
                  lin_quad):  # pragma: no cover - compiled
    """Fill ``out`` (n_walkers,) with the log-posterior of each row of ``sampled``.

    The walkers are shared among numba's threads (``numba.set_num_threads``).
    ``angular_i`` = (mass column, parallax column) where the mass is sampled as
    log10(M plx^3) and the state vectors in angular units, else (-1, -1);
    ``mass_i`` the columns of companions' log10 masses sampled as the mass itself. With a
    linear correction (``lin_theta0`` not empty) each walker's observed values are
    moved by minus the correction, which is the correction added to the prediction.
    """
    for w in numba.prange(sampled.shape[0]):
        out[w] = walker_log_posterior(
            sampled[w], comp_i, comp_f, glob_i, glob_f, rows, uses_parallax, sight, vel,
            vel_i, inst_i, inst_f, low, high, discs_i, discs_f, win_i, win_f, var_i, var_f,
            lon_i, lon_f, st_i, st_f, st_comp, angular_i, mass_i, lin_theta0, lin_power,
            lin_mix, lin_base, lin_slope, lin_forms, lin_quad)


@numba.njit(**_jit)
def walker_log_posterior(sampled, comp_i, comp_f, glob_i, glob_f, rows, uses_parallax,
                         sight, vel, vel_i, inst_i, inst_f, low, high, discs_i, discs_f,
                         win_i, win_f, var_i, var_f, lon_i, lon_f, st_i, st_f, st_comp,
                         angular_i, mass_i, lin_theta0, lin_power, lin_mix, lin_base,
                         lin_slope, lin_forms, lin_quad):  # pragma: no cover - compiled
    """The log-posterior of one walker's coordinates ``sampled`` (n_dim,), -inf outside
    the support: :func:`log_posterior`'s work for one row, callable from other
    compiled code (the sampler's compiled steps)."""
    n_dim = sampled.shape[0]
    n_rows = rows.shape[1]
    s = sampled.copy()
    log_angular = 0.0
    for c in mass_i:
        # A companion's mass sampled as itself: back to log10 (|d log10 m / dm| =
        # 1 / (m ln 10)).
        if not s[c] > 0.0:
            return -np.inf
        log_angular -= math.log(s[c] * LN10)
        s[c] = math.log10(s[c])
    if angular_i[0] >= 0:
        # Angular units back to physical ones: log10(M plx^3) to log10 M (Jacobian
        # 1), state vectors in mas and mas/day to au and au/day (plx^-6 each).
        plx = s[angular_i[1]]
        if not plx > 0.0:
            return -np.inf
        s[angular_i[0]] -= 3.0 * math.log10(plx)
        for b in range(st_i.shape[0]):
            for c in range(6):
                s[st_i[b, c]] /= plx
            log_angular -= 6.0 * math.log(plx)
    theta = s.copy()
    log_jac = _longitude(s, theta, lon_i, lon_f) + log_angular
    for b in range(st_i.shape[0]):
        k = st_comp[b]
        central = _scaled(s, glob_i[G_CENTRAL], 0 if glob_i[G_CENTRAL] < 0 else 2,
                          glob_f[GF_CENTRAL])
        mass = _scaled(s, comp_i[k, C_MASS], comp_i[k, C_MASS_KIND], comp_f[k, F_MASS])
        log_jac = _state(s, theta, st_i[b], st_f[b], GM_SUN * (central + mass), log_jac)
    for j in range(n_dim):
        if not math.isfinite(theta[j]):
            log_jac = -np.inf
    if not math.isfinite(log_jac):
        return -np.inf
    lp = log_prior(theta, low, high, glob_f[GF_CONST], discs_i, discs_f, win_i, win_f,
                   var_i, var_f)
    if math.isfinite(lp):
        east = np.empty(n_rows)
        north = np.empty(n_rows)
        seen, orbit = rows, theta
        if lin_theta0.size > 0:
            seen, orbit = _corrected(rows, theta, lin_theta0, lin_power, lin_mix, lin_base,
                                     lin_slope, lin_forms, lin_quad)
        chi2 = _chi2(orbit, comp_i, comp_f, glob_i, glob_f, seen, uses_parallax, sight,
                     vel, vel_i, inst_i, inst_f, east, north)
        lp += -0.5 * chi2 + glob_f[GF_NORM] if math.isfinite(chi2) else -np.inf
    lp = lp + log_jac
    return lp if math.isfinite(lp) else -np.inf

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
*Solar System Dynamics*, ch. 6, from memory) are integrated with DOP853, forward and
backward from the epoch to the observation times. Two integrators give the same
numbers to their tolerance:

* compiled (numba, :mod:`massfit.orbits._nbody_numba`; the default where numba is
  installed): each walker on its own with its own steps, in compiled loops;
* numpy (scipy's ``solve_ivp``): all walkers stacked into one system, the step shared
  by the stack and the error norm taken over it.

Which tolerance
---------------
The global error grows with the number of orbits integrated and with the strength of
the interaction. On the invented pair of :func:`simulate_interacting_pair` (ten
orbits of the inner companion) with errors of 2e-5 au, the log-likelihood of walkers
near the truth is off from a 1e-14 reference by up to 0.17 at rtol 1e-10, 0.013 at
1e-11, 0.003 at 1e-12 and 0.0003 at 1e-13; with companions ten times heavier, by 7,
1, 0.1 and 0.01. The compiled integrator's cost grows only by a factor 1.7 from
1e-10 to 1e-13. The default is therefore 1e-12; for longer baselines, more precise
data or stronger interactions tighten it, and check a fit by repeating its best
solution's chi^2 at a tighter tolerance.

The companions' masses are parameters: a companion whose mass is left at its default
(fixed at zero) gets the prior ``mass_prior`` (log-uniform from 1e-12 to 10 M_sun
unless stated).
"""

from __future__ import annotations

import numpy as np

from massfit.constants import GM_SUN
from massfit.orbits.dynamics import orbit_state

__all__ = ["integrate_system", "fixed_step", "total_energy", "zonal_field", "zonal_potential",
           "POINT_MASS_FIELD", "write_offsets",
           "PAIR_TRUTH", "simulate_interacting_pair"]

TWO_PI = 2.0 * np.pi

try:  # numba is optional: the stacked numpy path gives the same numbers to tolerance.
    from massfit.orbits import _nbody_numba as _fast
except ImportError:  # pragma: no cover - exercised where numba is absent
    _fast = None

#: True where the compiled integrator is available.
HAVE_NUMBA = _fast is not None


def zonal_field(pos, pole, c2=0.0, c4=0.0):
    """Acceleration per unit GM of a primary with zonal harmonics, at ``pos``.

    The gradient of the potential per unit GM

        V = -1/r + c2 P2(u) / r^3 + c4 P4(u) / r^5,     u = (r . k) / r,

    with c2 = J2 R^2, c4 = J4 R^4, k the pole and P2, P4 the Legendre polynomials
    (the zonal expansion of an axisymmetric body; e.g. Murray & Dermott, *Solar
    System Dynamics*, ch. 4.5, from memory): a = -grad V =

        -r/r^3 - (3/2) c2 / r^5 [(1 - 5u^2) r + 2 (r . k) k]
               + c4 / r^7 [(15/8)(1 - 14u^2 + 21u^4) r + (5/2)(3 - 7u^2) (r . k) k].

    ``pos`` is (..., 3), ``pole`` broadcasts against it, c2 and c4 against
    ``pos[..., 0]``. The compiled kernel writes the same sums out term by term
    (:func:`massfit.orbits._nbody_numba._central_field`).
    """
    c2 = np.asarray(c2, dtype=float)[..., None]
    c4 = np.asarray(c4, dtype=float)[..., None]
    r2 = np.sum(pos * pos, axis=-1, keepdims=True)
    r = np.sqrt(r2)
    s = np.sum(pos * pole, axis=-1, keepdims=True)
    u2 = s * s / r2
    radial = (-1.5 * c2 * (1.0 - 5.0 * u2) / r ** 5
              + 1.875 * c4 * (1.0 - 14.0 * u2 + 21.0 * u2 * u2) / r ** 7)
    polar = s * (-3.0 * c2 / r ** 5 + 2.5 * c4 * (3.0 - 7.0 * u2) / r ** 7)
    return -pos / (r2 * r) + radial * pos + polar * pole


def zonal_potential(pos, pole, c2=0.0, c4=0.0):
    """The potential per unit GM whose gradient :func:`zonal_field` is (for checks)."""
    r = np.linalg.norm(pos, axis=-1)
    u = np.sum(pos * pole, axis=-1) / r
    p2 = 0.5 * (3.0 * u * u - 1.0)
    p4 = (35.0 * u ** 4 - 30.0 * u * u + 3.0) / 8.0
    return -1.0 / r + np.asarray(c2) * p2 / r ** 3 + np.asarray(c4) * p4 / r ** 5


#: The field of a point-mass primary with mutual pulls on: (J2 R^2, J4 R^4, pole, pulls).
POINT_MASS_FIELD = np.array([0.0, 0.0, 0.0, 0.0, 1.0, 1.0])


def _accelerations(pos, gm_central, gm_bodies, field):
    """Astrocentric accelerations; pos (n, K, 3), gm_central (n,), gm_bodies (n, K),
    field (n, 6) as in :data:`POINT_MASS_FIELD`."""
    pole = field[:, None, 2:5]
    g = zonal_field(pos, pole, field[:, 0:1], field[:, 1:2])  # (n, K, 3) per unit GM
    direct = (gm_central[:, None] + gm_bodies)[..., None] * g
    if pos.shape[1] == 1:
        return direct
    sep = pos[:, None, :, :] - pos[:, :, None, :]  # [w, k, j] = r_j - r_k
    d3 = np.sum(sep * sep, axis=-1) ** 1.5
    k = pos.shape[1]
    d3[:, np.arange(k), np.arange(k)] = np.inf  # no self-pull
    pull = np.sum(gm_bodies[:, None, :, None] * sep / d3[..., None], axis=2)
    # The primary's own acceleration towards every other companion (j != k; the
    # j = k share is already in the direct term's m_k): + G m_j g(r_j).
    own = gm_bodies[..., None] * g
    indirect = np.sum(own, axis=1, keepdims=True) - own
    pulls = field[:, 5, None, None]
    return direct + pulls * (pull + indirect)


def integrate_system(times, central_mass, masses, position0, velocity0, *, rtol=1e-12,
                     compiled=None, field=None, steps_per_orbit=None):
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
    compiled : bool, optional
        Use the compiled integrator (numba; each walker with its own steps) or the
        numpy one (scipy's solve_ivp on the stacked walkers). Default: compiled
        where numba is installed.
    field : ndarray, shape (n, 6), optional
        The primary's field and the pulls, per system: (J2 R^2 in au^2, J4 R^4 in
        au^4, the pole's unit vector, 1 for mutual pulls or 0 without);
        default :data:`POINT_MASS_FIELD` (a point mass, pulls on).
    steps_per_orbit : int, optional
        Fixed steps instead of adaptive ones (``rtol`` is then unused): DOP853's
        eighth-order solution with steps of at most :func:`fixed_step` days, i.e.
        ``steps_per_orbit`` steps per orbit of the fastest companion (counted at its
        periapsis rate). None: adaptive DOP853 at ``rtol``.

    Returns
    -------
    positions, velocities : ndarray, shape (n, K, T, 3)
        NaN where the integration failed (a close encounter, say).
    """
    times = np.asarray(times, dtype=float)
    n, k = masses.shape
    gm_central = GM_SUN * np.asarray(central_mass, dtype=float)
    gm_bodies = GM_SUN * np.asarray(masses, dtype=float)
    field = np.ascontiguousarray(np.broadcast_to(
        POINT_MASS_FIELD if field is None else np.asarray(field, dtype=float), (n, 6)))
    use_compiled = _fast is not None if compiled is None else bool(compiled)
    if use_compiled and _fast is None:
        raise RuntimeError("the compiled integrator needs numba, which is not installed")
    if steps_per_orbit is not None:
        h_max = fixed_step(gm_central, gm_bodies, position0, velocity0, steps_per_orbit)
        if use_compiled:
            return _integrate_compiled(times, gm_central, gm_bodies, position0, velocity0,
                                       None, field, h_max)
        return _integrate_stacked_fixed(times, gm_central, gm_bodies, position0, velocity0,
                                        field, h_max)
    if use_compiled:
        return _integrate_compiled(times, gm_central, gm_bodies, position0, velocity0,
                                   rtol, field)
    return _integrate_stacked(times, gm_central, gm_bodies, position0, velocity0, rtol,
                              field)


def fixed_step(gm_central, gm_bodies, position0, velocity0, steps_per_orbit):
    """The longest fixed step (days) per system: min over its companions of
    P (1 - e)^1.5 / (1 + e)^0.5 / ``steps_per_orbit``.

    P and e are each companion's two-body (osculating) period and eccentricity at
    time 0 under G (M1 + m_k); P (1 - e)^1.5 / (1 + e)^0.5 is 2 pi over its angular
    rate at periapsis, so an eccentric orbit gets the steps its fastest part needs.
    NaN for a system with an unbound companion (its walker then fails).

    Parameters
    ----------
    gm_central : ndarray, shape (n,)
    gm_bodies : ndarray, shape (n, K)
        au^3/day^2.
    position0, velocity0 : ndarray, shape (n, K, 3)
    steps_per_orbit : float
    """
    gm = (gm_central[:, None] + gm_bodies)[..., None]
    radius = np.linalg.norm(position0, axis=-1, keepdims=True)
    speed2 = np.sum(velocity0 * velocity0, axis=-1, keepdims=True)
    energy = 0.5 * speed2 - gm / radius
    with np.errstate(invalid="ignore", divide="ignore"):
        a = -gm / (2.0 * energy)
        e_vec = ((speed2 - gm / radius) * position0
                 - np.sum(position0 * velocity0, axis=-1, keepdims=True) * velocity0) / gm
        ecc = np.linalg.norm(e_vec, axis=-1)
        period = 2.0 * np.pi * np.sqrt(a[..., 0] ** 3 / gm[..., 0])
        step = period * (1.0 - ecc) ** 1.5 / np.sqrt(1.0 + ecc) / float(steps_per_orbit)
    step = np.where((energy[..., 0] < 0) & (ecc < 1.0), step, np.nan)
    return np.min(step, axis=1)


def _integrate_compiled(times, gm_central, gm_bodies, position0, velocity0, rtol, field,
                        h_max=None):
    """Adaptive steps at ``rtol``, or fixed ones of at most ``h_max`` (n,) days."""
    n, k = gm_bodies.shape
    y0 = np.ascontiguousarray(np.concatenate([position0, velocity0], axis=-1).reshape(n, -1),
                              dtype=float)
    # Absolute tolerance per walker and companion: rtol times its own distance and
    # speed (so that a component passing through zero does not ask for the impossible).
    forward, backward = _sides(times)
    raw = np.empty((n, times.size, 6 * k))
    masses = (np.ascontiguousarray(gm_central), np.ascontiguousarray(gm_bodies))
    with np.errstate(all="ignore"):
        if h_max is not None:
            _fast.integrate_fixed(y0, *masses, field, times[forward].copy(),
                                  times[backward].copy(), np.ascontiguousarray(h_max), raw)
        else:
            r_scale = np.linalg.norm(position0, axis=-1)
            v_scale = np.linalg.norm(velocity0, axis=-1)
            atol = rtol * np.concatenate([np.repeat(r_scale[..., None], 3, -1),
                                          np.repeat(v_scale[..., None], 3, -1)], axis=-1)
            _fast.integrate(y0, *masses, field, times[forward].copy(),
                            times[backward].copy(), float(rtol),
                            np.ascontiguousarray(atol.reshape(n, -1)), raw)
    out = np.empty_like(raw)
    out[:, np.concatenate([forward, backward])] = raw
    out = out.reshape(n, times.size, k, 6).transpose(0, 2, 1, 3)
    return out[..., :3], out[..., 3:]


def _sides(times):
    """Indices of the times >= 0 in ascending order and of those < 0 descending."""
    forward = np.flatnonzero(times >= 0)
    forward = forward[np.argsort(times[forward], kind="stable")]
    backward = np.flatnonzero(times < 0)
    backward = backward[np.argsort(-times[backward], kind="stable")]
    return forward, backward


def _integrate_stacked_fixed(times, gm_central, gm_bodies, position0, velocity0, field,
                             h_max):
    """The fixed-step path in numpy, all walkers stacked with the shortest of their
    steps (so it may take more steps than the compiled path, never fewer)."""
    from scipy.integrate._ivp import dop853_coefficients as coef

    n, k = gm_bodies.shape
    out = np.full((n, times.size, k, 6), np.nan)
    h_max = float(np.min(h_max))
    if not (np.isfinite(h_max) and h_max > 0):
        return out.transpose(0, 2, 1, 3)[..., :3], out.transpose(0, 2, 1, 3)[..., 3:]
    stages_a, weights = coef.A[:coef.N_STAGES, :coef.N_STAGES], coef.B

    def rhs(state):
        return np.concatenate([state[..., 3:], _accelerations(
            state[..., :3], gm_central, gm_bodies, field)], axis=-1)

    for side in _sides(times):
        state = np.concatenate([position0, velocity0], axis=-1)
        t = 0.0
        for index in side:
            span = times[index] - t
            count = int(np.ceil(abs(span) / h_max * (1.0 - 1e-12)))
            for _ in range(count):
                h = span / count
                stages = [rhs(state)]
                for s in range(1, coef.N_STAGES):
                    stages.append(rhs(state + h * sum(
                        stages_a[s, r] * stages[r] for r in range(s))))
                state = state + h * sum(w * f for w, f in zip(weights, stages))
            t = times[index]
            out[:, index] = state
    out = out.transpose(0, 2, 1, 3)
    return out[..., :3], out[..., 3:]


def _integrate_stacked(times, gm_central, gm_bodies, position0, velocity0, rtol, field):
    from scipy.integrate import solve_ivp

    n, k = gm_bodies.shape
    y0 = np.concatenate([position0, velocity0], axis=-1).reshape(-1)
    r_scale = np.max(np.linalg.norm(position0, axis=-1), axis=0)  # per companion
    v_scale = np.max(np.linalg.norm(velocity0, axis=-1), axis=0)
    scale = np.broadcast_to(np.concatenate([np.repeat(r_scale[:, None], 3, 1),
                                            np.repeat(v_scale[:, None], 3, 1)], axis=1),
                            (n, k, 6)).reshape(-1)

    def rhs(_, y):
        state = y.reshape(n, k, 6)
        acc = _accelerations(state[..., :3], gm_central, gm_bodies, field)
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


def total_energy(central_mass, masses, positions, velocities, field=None):
    """Total energy in the barycentric frame, M_sun au^2 / day^2 (for checks).

    ``positions`` and ``velocities`` are astrocentric, shape (..., K, 3) with
    ``masses`` (..., K) and ``central_mass`` (...); ``field`` (6,) as in
    :func:`integrate_system` adds the zonal potential of the primary (the pole held
    fixed, so the energy is still conserved).
    """
    field = POINT_MASS_FIELD if field is None else np.asarray(field, dtype=float)
    central_mass = np.asarray(central_mass, dtype=float)
    total = central_mass + np.sum(masses, axis=-1)
    weights = masses[..., None] / total[..., None, None]
    centre_v = np.sum(weights * velocities, axis=-2)
    v_primary = -centre_v
    v_bodies = velocities - centre_v[..., None, :]
    kinetic = 0.5 * central_mass * np.sum(v_primary ** 2, axis=-1) + 0.5 * np.sum(
        masses * np.sum(v_bodies ** 2, axis=-1), axis=-1)
    unit = zonal_potential(positions, field[2:5], field[0], field[1])
    potential = GM_SUN * central_mass * np.sum(masses * unit, axis=-1)
    k = masses.shape[-1]
    for i in range(k):
        for j in range(i + 1, k):
            d = np.linalg.norm(positions[..., i, :] - positions[..., j, :], axis=-1)
            potential = potential - GM_SUN * masses[..., i] * masses[..., j] / d
    return kinetic + potential


PAIR_TRUTH = {"central_mass": 1.0, "companions": {
    "Arvel": dict(mass=0.003, period=100.0, ecc=0.08, inc=62.0, omega=40.0, node=110.0,
                  mean0=0.5),
    "Brisk": dict(mass=0.006, period=250.0, ecc=0.15, inc=66.0, omega=300.0, node=115.0,
                  mean0=2.4)}}


def simulate_interacting_pair(path, *, seed=11, n_obs=60, span=1000.0, err_au=2e-4):
    """Write the invented pair's astrometry (au, as from an absolute orbit at a known
    distance) as an ECSV table, integrated with DOP853 at rtol 1e-12.

    Parameters
    ----------
    path : path
        The ECSV file to write.
    seed : int
        Seed of the observing times and the noise.
    n_obs : int
        Epochs per companion, uniform over ``span`` days centred on the epoch.
    span : float
        Days.
    err_au : float
        1-sigma error of east and north, au.

    Returns
    -------
    path
    """
    rng = np.random.default_rng(seed)
    bodies = PAIR_TRUTH["companions"]
    names = list(bodies)
    central = PAIR_TRUTH["central_mass"]
    masses = np.array([[bodies[n]["mass"] for n in names]])
    pos0 = np.empty((1, len(names), 3))
    vel0 = np.empty_like(pos0)
    for k, name in enumerate(names):
        el = bodies[name]
        a = np.cbrt(GM_SUN * (central + el["mass"]) * el["period"] ** 2 / (4 * np.pi ** 2))
        pos, vel = orbit_state(a, el["ecc"], np.radians(el["inc"]), np.radians(el["omega"]),
                               np.radians(el["node"]), el["mean0"], TWO_PI / el["period"])
        pos0[0, k], vel0[0, k] = pos, vel
    times = [np.sort(rng.uniform(-span / 2, span / 2, n_obs)) for _ in names]
    # Every companion's rows share the mid-time of all rows as the epoch of the elements.
    shift = np.mean(np.concatenate(times))
    times = [t - shift for t in times]
    east, north = [], []
    for k, t in enumerate(times):
        positions, _ = integrate_system(t, np.array([central]), masses, pos0, vel0,
                                        rtol=1e-12)
        north.append(positions[0, k, :, 0] + err_au * rng.standard_normal(t.size))
        east.append(positions[0, k, :, 1] + err_au * rng.standard_normal(t.size))
    return write_offsets(path, 2461500.0, names, times, east, north, err_au, "au",
                         "Invented interacting pair of companions, integrated with "
                         "DOP853 (massfit validation)")


def write_offsets(path, t0_jd, names, times, east, north, err, unit, description):
    """Write simulated offsets as an ECSV table (one list entry per body).

    ``times`` are days from ``t0_jd`` (TDB); ``east``, ``north`` and the error ``err``
    are in ``unit`` (``"au"``, ``"km"``). Returns ``path``.
    """
    import astropy.units as u
    from astropy.table import Table
    from astropy.time import Time

    unit = u.Unit(unit)
    table = Table()
    table["time"] = Time(t0_jd + np.concatenate(times), format="jd", scale="tdb")
    table["body"] = np.concatenate([[name] * len(t) for name, t in zip(names, times)])
    table["east"] = np.concatenate(east) * unit
    table["north"] = np.concatenate(north) * unit
    table["east_err"] = table["north_err"] = np.full(len(table), err) * unit
    table.meta["description"] = description
    table.write(path, format="ascii.ecsv", overwrite=True)
    return path

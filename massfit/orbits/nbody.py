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

from dataclasses import replace

import numpy as np

from massfit.constants import GM_SUN
from massfit.orbits.dynamics import Keplerian, orbit_state
from massfit.errors import ConfigError
from massfit.priors import Fixed, LogUniform

__all__ = ["NBody", "integrate_system", "total_energy", "DEFAULT_MASS_PRIOR",
           "PAIR_TRUTH", "simulate_interacting_pair"]

TWO_PI = 2.0 * np.pi

try:  # numba is optional: the stacked numpy path gives the same numbers to tolerance.
    from massfit.orbits import _nbody_numba as _fast
except ImportError:  # pragma: no cover - exercised where numba is absent
    _fast = None

#: True where the compiled integrator is available.
HAVE_NUMBA = _fast is not None
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


def integrate_system(times, central_mass, masses, position0, velocity0, *, rtol=1e-12,
                     compiled=None):
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

    Returns
    -------
    positions, velocities : ndarray, shape (n, K, T, 3)
        NaN where the integration failed (a close encounter, say).
    """
    times = np.asarray(times, dtype=float)
    n, k = masses.shape
    gm_central = GM_SUN * np.asarray(central_mass, dtype=float)
    gm_bodies = GM_SUN * np.asarray(masses, dtype=float)
    use_compiled = _fast is not None if compiled is None else bool(compiled)
    if use_compiled:
        if _fast is None:
            raise RuntimeError("the compiled integrator needs numba, which is not installed")
        return _integrate_compiled(times, gm_central, gm_bodies, position0, velocity0,
                                   rtol)
    return _integrate_stacked(times, gm_central, gm_bodies, position0, velocity0, rtol)


def _integrate_compiled(times, gm_central, gm_bodies, position0, velocity0, rtol):
    n, k = gm_bodies.shape
    y0 = np.ascontiguousarray(np.concatenate([position0, velocity0], axis=-1).reshape(n, -1),
                              dtype=float)
    # Absolute tolerance per walker and companion: rtol times its own distance and
    # speed (so that a component passing through zero does not ask for the impossible).
    r_scale = np.linalg.norm(position0, axis=-1)
    v_scale = np.linalg.norm(velocity0, axis=-1)
    atol = rtol * np.concatenate([np.repeat(r_scale[..., None], 3, -1),
                                  np.repeat(v_scale[..., None], 3, -1)], axis=-1)
    forward = np.flatnonzero(times >= 0)
    forward = forward[np.argsort(times[forward], kind="stable")]
    backward = np.flatnonzero(times < 0)
    backward = backward[np.argsort(-times[backward], kind="stable")]
    raw = np.empty((n, times.size, 6 * k))
    with np.errstate(all="ignore"):
        _fast.integrate(y0, np.ascontiguousarray(gm_central),
                        np.ascontiguousarray(gm_bodies), times[forward].copy(),
                        times[backward].copy(), float(rtol),
                        np.ascontiguousarray(atol.reshape(n, -1)), raw)
    out = np.empty_like(raw)
    out[:, np.concatenate([forward, backward])] = raw
    out = out.reshape(n, times.size, k, 6).transpose(0, 2, 1, 3)
    return out[..., :3], out[..., 3:]


def _integrate_stacked(times, gm_central, gm_bodies, position0, velocity0, rtol):
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
    compiled : bool, optional
        Which integrator :func:`integrate_system` uses (None: the compiled one where
        numba is installed); for checks and benchmarks, not a config setting.

    Notes
    -----
    Each log-posterior call integrates every walker over the whole time span: the cost
    grows with the number of orbits of the fastest companion in the data span (the
    step follows it) and with the number of walkers.
    """

    label = "n-body"

    def __init__(self, rtol=1e-12, mass_prior=None, compiled=None):
        if isinstance(rtol, bool) or not isinstance(rtol, (int, float)) \
                or not 1e-14 <= rtol <= 1e-6:
            raise ConfigError(f"the integrator's relative tolerance must be a number "
                              f"from 1e-14 to 1e-6, got {rtol!r}", key="dynamics.rtol")
        self.rtol = float(rtol)
        self.mass_prior = mass_prior if mass_prior is not None else DEFAULT_MASS_PRIOR
        self.settings = {"rtol": rtol}
        self.compiled = compiled

    def describe(self) -> dict:
        return {"model": self.label, "rtol": self.rtol,
                "coordinates": "astrocentric osculating elements at the model epoch"}

    def prepare(self, model) -> None:
        """Give companions with an unstated (zero, fixed) mass the mass prior."""
        for name, comp in model.companions.items():
            if isinstance(comp.mass, Fixed) and comp.mass.value == 0.0:
                model.companions[name] = replace(comp, mass=self.mass_prior)

    #: Companion masses tried at the start, as shares of the system's mass (lightest
    #: first: weak pulls keep the two-body solution near the N-body one).
    START_SHARES = (1e-4, 1e-3, 1e-2)

    def node_widths(self, model, widths) -> dict:
        """The full circle for every companion's node but the first.

        On the sky alone, (omega, node) and (omega + pi, node + pi) look the same:
        the orbit mirrored through the sky plane. Mirroring *every* orbit leaves the
        mutual pulls as they were, so the first companion keeps its half window; but
        mirroring one orbit and not another changes the mutual inclination, which
        the N-body model sees.
        """
        names = list(widths)
        return {name: widths[name] if k == 0 else TWO_PI for k, name in enumerate(names)}

    def from_two_body(self, model, values) -> list:
        """Starting values: both relative mirror images, several companion masses.

        A two-body fit of astrometry alone fixes only M1 + m_k for each orbit, so its
        companion masses say nothing, and it cannot tell an orbit from its mirror
        image through the sky plane (see :meth:`node_widths`). Each candidate keeps
        the mean M1 + m_k and puts every companion whose mass is sampled at 1e-4, 1e-3
        or 1e-2 of it (inside its prior), with each companion after the first as
        fitted or mirrored; the two-body solution as it came is tried last.
        """
        import itertools

        names = list(model.companions)
        total = float(np.mean([values["central_mass"] + values[name].get("mass", 0.0)
                               for name in names]))
        out = []
        for share in self.START_SHARES:
            for flips in itertools.product((False, True), repeat=len(names) - 1):
                candidate = dict(values)
                masses = {}
                for name, flip in zip(names, (False,) + flips):
                    prior = model.companions[name].mass
                    masses[name] = (prior.value if prior.is_fixed else
                                    float(np.clip(share * total, prior.low * 1.001,
                                                  prior.high * 0.999)))
                    orbit = dict(values[name], mass=masses[name])
                    if flip:
                        orbit["omega"] += np.pi
                        orbit["node"] += np.pi
                    candidate[name] = orbit
                candidate["central_mass"] = total - float(np.mean(list(masses.values())))
                out.append(candidate)
        return out + [values]

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
                rtol=self.rtol, compiled=self.compiled)
        start = 0
        for k, name in enumerate(names):
            rows = where[start:start + model._rows[name].t.size]
            start += rows.size
            pos = positions[:, k][:, rows]
            vel = velocities[:, k][:, rows]
            out[name] = ((pos[..., 0], pos[..., 1], pos[..., 2]),
                         (vel[..., 0], vel[..., 1], vel[..., 2]) if want_velocity else None)
        return out


#: The invented interacting pair *Tessaly*: a 1.0 M_sun star with two companions of
#: 0.003 and 0.006 M_sun (about 3 and 6 Jupiter masses) near a 5:2 period ratio
#: (astrocentric osculating elements at the data's mid-time; angles in degrees, mean
#: anomaly in radians).
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
    import astropy.units as u
    from astropy.table import Table
    from astropy.time import Time

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
    table = Table()
    east, north = [], []
    for k, t in enumerate(times):
        positions, _ = integrate_system(t, np.array([central]), masses, pos0, vel0,
                                        rtol=1e-12)
        north.append(positions[0, k, :, 0] + err_au * rng.standard_normal(t.size))
        east.append(positions[0, k, :, 1] + err_au * rng.standard_normal(t.size))
    table["time"] = Time(2461500.0 + np.concatenate(times), format="jd", scale="tdb")
    table["body"] = np.concatenate([[name] * t.size for name, t in zip(names, times)])
    table["east"] = np.concatenate(east) * u.au
    table["north"] = np.concatenate(north) * u.au
    table["east_err"] = table["north_err"] = np.full(len(table), err_au) * u.au
    table.meta["description"] = ("Invented interacting pair of companions, integrated "
                                 "with DOP853 (massfit validation)")
    table.write(path, format="ascii.ecsv", overwrite=True)
    return path

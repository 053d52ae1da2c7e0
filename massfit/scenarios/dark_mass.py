"""Stars about an unseen compact mass, simulated independently of the fitting model.

The stars are test particles integrated by REBOUND (IAS15) with REBOUNDx's ``gr``
force (the first post-Newtonian field of one dominant mass), so the periapsis turns
as the field makes it turn, not by the fitting model's secular rate. Each
observation is made from the integrated state at the star's emission time, found by
iterating ``t_obs = t_emit + z(t_emit) / c`` (the light time across the orbit), and:

* positions: the mass's place in the frame, ``x0 + mu (t - t0)``, plus the star's
  offset from it, au times the parallax; Gaussian noise;
* velocities: the exact special-relativistic Doppler factor of the star's velocity
  (its orbit plus the mass's line-of-sight velocity ``v0``) times the Schwarzschild
  redshift, ``1 + z = gamma (1 + beta_z) / sqrt(1 - 2 GM / (r c^2))``, read as
  ``c z``; Gaussian noise.

Nothing here calls massfit's orbit kernel; only the constants are shared. The
fitting model's terms are first-order; the simulation is exact in the Doppler factor
and first post-Newtonian in the dynamics.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

from massfit.constants import C_AU_PER_DAY, GM_SUN, KM_S_PER_AU_DAY

__all__ = ["Star", "DarkMassSystem", "star_states", "observe", "brannock_system",
           "brannock_schedule", "tables", "fit_spec", "simulated_observations"]

DAYS_PER_YEAR = 365.25


@dataclass
class Star:
    """A star's osculating elements at the system's start time (days, degrees)."""

    period: float
    ecc: float
    inc: float
    omega: float
    node: float
    periapsis_time: float  # JD TDB


@dataclass
class DarkMassSystem:
    """The unseen mass, its distance, its place and motion in the frame, its stars."""

    mass: float  # nominal solar masses
    distance_pc: float
    start_jd: float  # the elements' epoch (JD TDB)
    frame_epoch_jd: float  # t0 of the frame position
    frame: dict  # east, north (mas), motion_east, motion_north (mas/yr), velocity (km/s)
    stars: dict  # name -> Star
    relativity: bool = True

    @property
    def parallax_mas(self) -> float:
        return 1e3 / self.distance_pc

    def truth(self) -> dict:
        """What a fit should find, for truth.json and the validation."""
        return {"central_mass_Msun": self.mass, "distance_pc": self.distance_pc,
                "parallax_mas": self.parallax_mas, "frame": dict(self.frame),
                "frame_epoch_jd": self.frame_epoch_jd,
                "precession_scale": 1.0 if self.relativity else 0.0,
                "elements_epoch_jd": self.start_jd,
                "stars": {name: asdict(star) for name, star in self.stars.items()}}


def _simulation(system, star):
    import rebound

    sim = rebound.Simulation()
    sim.G = GM_SUN  # au^3 / day^2 per nominal solar mass
    sim.integrator = "ias15"
    sim.t = system.start_jd
    sim.add(m=system.mass)
    sim.add(m=0.0, P=star.period, e=star.ecc, inc=np.radians(star.inc),
            omega=np.radians(star.omega), Omega=np.radians(star.node),
            T=star.periapsis_time, primary=sim.particles[0])
    sim.N_active = 1
    if system.relativity:
        import reboundx

        extras = reboundx.Extras(sim)
        force = extras.load_force("gr")
        extras.add_force(force)
        force.params["c"] = C_AU_PER_DAY
        return sim, extras  # the extras must live as long as the simulation
    return sim, None


def star_states(system, name, times):
    """The star's position (au) and velocity (au/day) relative to the mass at the
    given times (JD TDB, any order), as arrays of (north, east, z) rows.

    REBOUND's x, y, z are read as north, east and away from the observer: then its
    node (from x towards y) and inclination are the conventions' Omega and i.
    """
    times = np.asarray(times, dtype=float)
    order = np.argsort(times)
    sim, _extras = _simulation(system, system.stars[name])
    position = np.empty((times.size, 3))
    velocity = np.empty((times.size, 3))
    for k in order:
        sim.integrate(times[k], exact_finish_time=1)
        star, mass = sim.particles[1], sim.particles[0]
        position[k] = (star.x - mass.x, star.y - mass.y, star.z - mass.z)
        velocity[k] = (star.vx - mass.vx, star.vy - mass.vy, star.vz - mass.vz)
    return position, velocity


def emitted_states(system, name, times, *, iterations=4):
    """States at the emission times of light received at ``times`` (light time
    across the orbit, ``t_obs = t_emit + z / c``, iterated)."""
    times = np.asarray(times, dtype=float)
    emit = times.copy()
    for _ in range(iterations):
        position, velocity = star_states(system, name, emit)
        emit = times - position[:, 2] / C_AU_PER_DAY
    return star_states(system, name, emit)


def sky_positions(system, name, times):
    """Noise-free east and north (mas) in the frame at ``times`` (JD TDB)."""
    position, _ = emitted_states(system, name, times)
    years = (np.asarray(times) - system.frame_epoch_jd) / DAYS_PER_YEAR
    f = system.frame
    east = f["east"] + f["motion_east"] * years + position[:, 1] * system.parallax_mas
    north = f["north"] + f["motion_north"] * years + position[:, 0] * system.parallax_mas
    return east, north


def radial_velocities(system, name, times):
    """Noise-free measured radial velocities (km/s) at ``times`` (JD TDB): the exact
    Doppler factor times the Schwarzschild redshift (Newtonian Doppler, no redshift,
    where ``system.relativity`` is off)."""
    position, velocity = emitted_states(system, name, times)
    c_km_s = C_AU_PER_DAY * KM_S_PER_AU_DAY
    v = velocity * KM_S_PER_AU_DAY
    v[:, 2] += system.frame["velocity"]
    if not system.relativity:
        return v[:, 2]
    beta = v / c_km_s
    beta2 = np.sum(beta * beta, axis=1)
    radius = np.sqrt(np.sum(position * position, axis=1))
    potential = GM_SUN * system.mass / (radius * C_AU_PER_DAY ** 2)
    one_plus_z = (1.0 + beta[:, 2]) / np.sqrt(1.0 - beta2) / np.sqrt(1.0 - 2.0 * potential)
    return c_km_s * (one_plus_z - 1.0)


def observe(system, schedule, *, seed, noise=True):
    """Noisy observations of every star (``noise=False``: the exact values, the
    errors still stated, for measuring a model's own bias).

    ``schedule`` maps a star to ``{"astrometry": (times, error_mas), "velocities":
    (times, error_km_s)}`` (times JD TDB). Returns (astrometry rows, velocity rows),
    each a dict of columns.
    """
    rng = np.random.default_rng(seed)
    scale = 1.0 if noise else 0.0
    ast = {"time": [], "body": [], "east": [], "north": [], "east_err": [],
           "north_err": []}
    vel = {"time": [], "body": [], "rv": [], "rv_err": []}
    for name in system.stars:
        times, error = schedule[name]["astrometry"]
        east, north = sky_positions(system, name, times)
        error = np.broadcast_to(np.asarray(error, dtype=float), np.shape(times))
        ast["time"].append(times)
        ast["body"].append(np.full(len(times), name))
        ast["east"].append(east + scale * error * rng.standard_normal(len(times)))
        ast["north"].append(north + scale * error * rng.standard_normal(len(times)))
        ast["east_err"].append(error)
        ast["north_err"].append(error)
        if "velocities" not in schedule[name]:
            continue
        times, error = schedule[name]["velocities"]
        error = np.broadcast_to(np.asarray(error, dtype=float), np.shape(times))
        rv = radial_velocities(system, name, times)
        vel["time"].append(times)
        vel["body"].append(np.full(len(times), name))
        vel["rv"].append(rv + scale * error * rng.standard_normal(len(times)))
        vel["rv_err"].append(error)
    return ({k: np.concatenate(v) for k, v in ast.items()},
            {k: np.concatenate(v) for k, v in vel.items()})


# ------------------------------------------------------------------ the demo
def brannock_system(*, relativity=True, names=None) -> DarkMassSystem:
    """*Brannock*: an invented unseen mass of 2.2 million solar masses at 5.6 kpc with
    four stars on 9 to 31-year orbits (numbers that echo no real object)."""
    start = 2447000.5
    stars = {
        "Brannock-a": Star(period=14.2 * DAYS_PER_YEAR, ecc=0.91, inc=131.0, omega=62.0,
                           node=214.0, periapsis_time=start + 8.3 * DAYS_PER_YEAR),
        "Brannock-b": Star(period=23.5 * DAYS_PER_YEAR, ecc=0.62, inc=48.0, omega=305.0,
                           node=97.0, periapsis_time=start + 15.1 * DAYS_PER_YEAR),
        "Brannock-c": Star(period=31.0 * DAYS_PER_YEAR, ecc=0.78, inc=74.0, omega=141.0,
                           node=330.0, periapsis_time=start + 21.7 * DAYS_PER_YEAR),
        "Brannock-d": Star(period=9.7 * DAYS_PER_YEAR, ecc=0.45, inc=22.0, omega=18.0,
                           node=160.0, periapsis_time=start + 3.9 * DAYS_PER_YEAR),
    }
    if names is not None:
        stars = {name: stars[name] for name in names}
    return DarkMassSystem(
        mass=2.2e6, distance_pc=5600.0, start_jd=start,
        frame_epoch_jd=start + 16.0 * DAYS_PER_YEAR,
        frame={"east": 1.3, "north": -0.8, "motion_east": 0.12, "motion_north": -0.05,
               "velocity": -21.0},
        stars=stars, relativity=relativity)


def brannock_schedule(system, *, years=32, seed=7, astrometric_error=0.4,
                      close_error=0.1, velocity_error=15.0):
    """Yearly astrometry over ``years`` (one night in a season that wanders), yearly
    velocities from the ninth year, and monthly positions and velocities every ten
    days within 0.4 yr of each periapsis passage in the span."""
    rng = np.random.default_rng(seed)
    start = system.start_jd
    # Seasons from two months after the elements' epoch (the integration runs forward).
    yearly = start + 60.0 + DAYS_PER_YEAR * np.arange(years) + rng.uniform(-30, 30, years)
    schedule = {}
    for name, star in system.stars.items():
        passages = star.periapsis_time + star.period * np.arange(-5, 6)
        passages = passages[(passages > start) & (passages < start + years * DAYS_PER_YEAR)]
        close_ast = np.concatenate([p + np.arange(-0.4, 0.41, 1 / 12) * DAYS_PER_YEAR
                                    for p in passages]) if passages.size else np.array([])
        close_rv = np.concatenate([p + np.arange(-146.0, 147.0, 10.0)
                                   for p in passages]) if passages.size else np.array([])
        t_ast = np.concatenate([yearly + rng.uniform(-3, 3, years), close_ast])
        err_ast = np.concatenate([np.full(years, astrometric_error),
                                  np.full(close_ast.size, close_error)])
        t_rv = np.concatenate([yearly[8:] + rng.uniform(-5, 5, years - 8), close_rv])
        order, order_rv = np.argsort(t_ast), np.argsort(t_rv)
        schedule[name] = {"astrometry": (t_ast[order], err_ast[order]),
                          "velocities": (t_rv[order_rv], np.full(t_rv.size,
                                                                 velocity_error))}
    return schedule


def tables(astrometry, velocities, *, description=""):
    """The observations as astropy tables (JD TDB times, mas, km/s), ready for ECSV."""
    import astropy.units as u
    from astropy.table import Table

    out = {}
    for key, rows, units, decimals in (
            ("positions.ecsv", astrometry, {"east": u.mas, "north": u.mas,
                                            "east_err": u.mas, "north_err": u.mas}, 4),
            ("velocities.ecsv", velocities, {"rv": u.km / u.s, "rv_err": u.km / u.s}, 2)):
        table = Table()
        table["time"] = np.round(rows["time"], 6)
        table["body"] = rows["body"]
        for column, unit in units.items():
            table[column] = np.round(rows[column], decimals) * unit
        table.sort(["time", "body"])
        table.meta.update(time_format="jd", time_scale="tdb", description=description)
        out[key] = table
    return out


def fit_spec(system, *, relativity=True, precession_scale=None):
    """The fit's assumptions for a simulated system: the frame terms, the stars'
    periods between 1 and 100 years (what decades of positions show at a glance),
    errors as stated (no jitter); with ``relativity`` the precession (its scale
    sampled with ``precession_scale``, default uniform on [-5, 10]), the redshift, the
    transverse Doppler shift and the light time; without, none of them."""
    from massfit.model.specs import CompanionSpec, SystemSpec
    from massfit.model.frame import FrameSpec
    from massfit.orbits.relativity import RelativitySpec
    from massfit.priors import Fixed, LogUniform, Uniform

    companions = {name: CompanionSpec(name, period=LogUniform(DAYS_PER_YEAR,
                                                              100 * DAYS_PER_YEAR))
                  for name in system.stars}
    rel = None
    if relativity:
        rel = RelativitySpec(precession_scale=precession_scale or Uniform(-5.0, 10.0))
    return SystemSpec(primary="dark mass", frame=FrameSpec(), relativity=rel,
                      romer_delay=relativity, companions=companions, jitter=Fixed(0.0))


def simulated_observations(system, schedule, *, seed, folder, noise=True):
    """Noisy (or, ``noise=False``, exact) observations written as ECSV into
    ``folder`` and read back by massfit."""
    from pathlib import Path

    from massfit.read.tables import read_observations

    ast, vel = observe(system, schedule, seed=seed, noise=noise)
    paths = []
    for file_name, table in tables(ast, vel).items():
        table.write(Path(folder) / file_name, format="ascii.ecsv", overwrite=True)
        paths.append(Path(folder) / file_name)
    return read_observations(paths)


# ------------------------------------------------------------- the example folder
BRANNOCK_CONFIG = """# Brannock: the mass and distance of an invented unseen mass from four stars' orbits.
[data]
files = ["positions.ecsv", "velocities.ecsv"]

[system]
primary = "Brannock"
romer_delay = true                # the light time across the orbits (days here)

[companions.Brannock-a]
period_prior = {kind = "log-uniform", low = "1 yr", high = "100 yr"}

[companions.Brannock-b]
period_prior = {kind = "log-uniform", low = "1 yr", high = "100 yr"}

[companions.Brannock-c]
period_prior = {kind = "log-uniform", low = "1 yr", high = "100 yr"}

[companions.Brannock-d]
period_prior = {kind = "log-uniform", low = "1 yr", high = "100 yr"}

[velocities]
jitter_prior = {kind = "fixed", value = "0 km/s"}

[frame]                           # the mass is not seen: its place and motion are fitted

[relativity]
precession_scale_prior = {kind = "uniform", low = -5, high = 10}

[sampler]
seed = 5

[output]
folder = "fit-out"
"""

BRANNOCK_README = """# Brannock: stars about an invented unseen mass

Invented for massfit's examples; no real object is described.

- **Truth**: an unseen mass of {mass:.3g} solar masses at {distance:g} pc (parallax
  {parallax:.5f} mas). In the frame of the positions it sits at ({east}, {north}) mas at
  JD {epoch} and drifts by ({motion_east}, {motion_north}) mas/yr (east, north); its own
  line-of-sight velocity is {velocity} km/s. Four stars, Brannock-a to -d, on orbits of
  {periods} years (e = {eccs}); every element (osculating at JD {start}) is in
  `truth.json`. Brannock-a passes {periapsis:.0f} au from the mass at {speed:.0f} km/s.
- **How it was made**: `massfit.scenarios.dark_mass` (seed {seed}): REBOUND (IAS15) with
  REBOUNDx's first post-Newtonian force, the light time across the orbits, the exact
  Doppler factor with the gravitational redshift; not the fitting model's formulas.
  `positions.ecsv`: one night a year for 32 years ({ast_err} mas) and monthly
  positions within 0.4 yr of each periapsis passage ({close_err} mas), in the frame
  (east, north of the frame's origin). `velocities.ecsv`: yearly from the ninth year
  and every ten days within 146 days of each passage ({rv_err} km/s).
- **Fit**: `massfit fit config.toml` (the frame terms, the precession with its scale
  free, the redshift, the transverse Doppler shift and the light time; the distance
  comes from the stars' velocities against their motion on the sky).
"""

BRANNOCK_SEED = 20261219


def brannock(seed=BRANNOCK_SEED):
    """The Brannock example: ({file name: table}, truth)."""
    system = brannock_system()
    schedule = brannock_schedule(system)
    ast, vel = observe(system, schedule, seed=seed)
    description = ("Invented example: {what} of four stars about the unseen mass Brannock. "
                   "Made by massfit.scenarios.dark_mass.brannock().")
    out = tables(ast, vel)
    out["positions.ecsv"].meta["description"] = description.format(
        what="east/north positions in the frame (mas)")
    out["velocities.ecsv"].meta["description"] = description.format(
        what="radial velocities (km/s)")
    truth = dict(system.truth(), seed=seed, astrometric_error_mas=0.4,
                 close_passage_error_mas=0.1, velocity_error_km_s=15.0)
    return out, truth


def brannock_readme(truth) -> str:
    """The example folder's README from its truth."""
    stars = truth["stars"].values()
    a = truth["stars"]["Brannock-a"]
    gm = GM_SUN * truth["central_mass_Msun"]
    axis = np.cbrt(gm * a["period"] ** 2 / (4 * np.pi ** 2))
    periapsis = axis * (1 - a["ecc"])
    speed = np.sqrt(gm * (1 + a["ecc"]) / periapsis) * KM_S_PER_AU_DAY
    f = truth["frame"]
    return BRANNOCK_README.format(
        mass=truth["central_mass_Msun"], distance=truth["distance_pc"],
        parallax=truth["parallax_mas"], epoch=truth["frame_epoch_jd"],
        start=truth["elements_epoch_jd"], seed=truth["seed"],
        periods=", ".join(f"{s['period'] / DAYS_PER_YEAR:g}" for s in stars),
        eccs=", ".join(f"{s['ecc']:g}" for s in stars), periapsis=periapsis, speed=speed,
        ast_err=truth["astrometric_error_mas"], close_err=truth["close_passage_error_mas"],
        rv_err=truth["velocity_error_km_s"], **f)

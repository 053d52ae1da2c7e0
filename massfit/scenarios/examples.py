"""Invented example systems: how the bundled example data were made.

``python -m massfit.scenarios.examples`` rewrites every scenario into ``example_obs/`` (and the
copy of the demo that ships inside the package). Nothing here describes a real object:
the names and numbers are invented.

The demo scenario, *Orvane*: a gas giant of 0.61 Jupiter masses in an invented planetary
system, with four moons (Pell, Ymra, Doss, Tirrin). The observer lives on an inner
planet on a tilted 0.93 au orbit, so Orvane's distance and direction change from night
to night; each row carries both (a moving line of sight), and the offsets are made
independently of the model (:mod:`massfit.scenarios.moving_observer`).

*Mirren*: an invented K dwarf of 0.78 solar masses at 41.3 mas, with a directly imaged
companion, Mirren-b, of 14 Jupiter masses on a 41-year orbit. Two invented imaging
campaigns cover 12 years, a third of the orbit including its periastron: one reports
separation and position angle, the other east/north offsets with correlated errors.
The parallax is known to 0.05 mas; the companion's mass is known roughly from its
brightness (a prior), so the relative orbit gives the star's own mass.

*Sorrel*: an invented double-lined binary, Sorrel-A (1.15 M_sun) and Sorrel-B
(0.82 M_sun) on a 2.9-year orbit, with a visual orbit from invented interferometry and
the velocities of both stars from two invented spectrographs (Halden and Quillon, whose
zero points differ by 0.9 km/s). No parallax is given: the visual orbit in mas and the
velocity orbit in km/s give the distance, and both masses follow.

*Brannock*: an invented unseen mass of 2.2 million solar masses at 5.6 kpc and four
stars about it (:mod:`massfit.scenarios.dark_mass`: REBOUND with REBOUNDx's first
post-Newtonian force), positions in a frame where the mass is not at the origin and
velocities with the gravitational redshift; yearly positions over 32 years, dense
positions and velocities near each periapsis passage.

*Tamsin* (tests and validation only, not in ``example_obs``): a companion of an
invented 1.15 M_sun star at 25 mas on a 305-day orbit, imaged on twelve nights one
year apart. Its period aliases with the yearly cadence (1/P -+ 1/yr: about 1825 and
166 days, with central masses 25 times smaller and 3 times larger) fit nearly as well.
"""

from __future__ import annotations

from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.time import Time

from massfit.constants import GM_SUN_KM3_S2, MASS_UNITS
from massfit.scenarios import dark_mass
from massfit.scenarios.simulate import Elements, simulate_astrometry, write_scenario
from massfit.read.timescales import quiet_leap_seconds

__all__ = ["orvane", "mirren", "sorrel", "tamsin", "demo_setup", "write_all", "planning_system",
           "DEMO_DIR", "PACKAGE_DATA", "SCENARIOS"]

PACKAGE_DATA = Path(__file__).parents[1] / "data"
DEMO_DIR = PACKAGE_DATA / "orvane"


#: Orvane's path about its star and the observer's (invented; ICRS axes).
ORVANE_PATH = dict(radius=6.1, period=5500.0, inclination=18.0, node=40.0, longitude=30.0,
                   epoch_jd=2461000.5)
OBSERVER_PATH = dict(radius=0.93, period=330.0, inclination=25.0, node=5.0,
                     longitude=200.0, epoch_jd=2461000.5)
#: Orvane's north pole (invented), ICRS right ascension and declination, deg.
ORVANE_POLE = (251.3, 57.8)


def orvane(seed=20261201):
    """The Orvane system: (table, truth). The offsets are made by
    :func:`massfit.scenarios.moving_observer.observe_moons`, independently of the model."""
    from massfit.scenarios.moving_observer import CircularPath, MoonOrbit, observe_moons

    mass_mjup = 0.61
    central = mass_mjup * MASS_UNITS["Mjup"] / MASS_UNITS["Msun"]
    # Near Orvane's equator: its pole (251.3, 57.8) puts that plane at i = 32.2 deg,
    # node = 341.3 deg against the ICRS equator.
    elements = {
        "Pell": Elements(period=2.71, ecc=0.006, inc=32.0, omega=41.0, node=341.0,
                         periapsis_time=2461101.20),
        "Ymra": Elements(period=5.93, ecc=0.014, inc=32.6, omega=122.0, node=341.8,
                         periapsis_time=2461102.75),
        "Doss": Elements(period=13.4, ecc=0.023, inc=31.9, omega=250.0, node=340.6,
                         periapsis_time=2461104.10),
        "Tirrin": Elements(period=37.8, ecc=0.041, inc=33.4, omega=318.0, node=342.5,
                           periapsis_time=2461111.60),
    }
    rng = np.random.default_rng(seed)
    # Some 70 clear nights over two observing seasons, a moon missed now and then.
    nights = 2461100.5 + np.sort(np.concatenate([rng.choice(120, 40, replace=False),
                                                 400 + rng.choice(100, 30, replace=False)]))
    times = {}
    for k, name in enumerate(elements):
        seen = rng.random(nights.size) > 0.12
        t = nights[seen] + 0.25 + 0.1 * rng.random(seen.sum()) + 0.02 * k
        times[name] = Time(t, format="jd", scale="tdb")
    moons = {name: MoonOrbit(**el) for name, el in elements.items()}
    table = observe_moons(times, moons, central, CircularPath(**ORVANE_PATH),
                          CircularPath(**OBSERVER_PATH), error=0.03 * u.arcsec,
                          seed=seed + 1)
    table["time"] = Time(table["time"], format="jd", scale="tdb")
    table["primary_ra"].info.format = table["primary_dec"].info.format = ".9f"
    truth = {
        "scenario": "Orvane: an invented gas giant with four moons, seen from a moving "
                    "observer",
        "central_mass_Mjup": mass_mjup,
        "central_mass_Msun": central,
        "central_gm_km3_s2": central * GM_SUN_KM3_S2,
        "companions": {name: dict(el) for name, el in elements.items()},
        "elements_frame": "ICRS",
        "pole_ra_deg": ORVANE_POLE[0], "pole_dec_deg": ORVANE_POLE[1],
        "planet_path": ORVANE_PATH, "observer_path": OBSERVER_PATH,
        "astrometric_error_arcsec": 0.03,
        "seed": seed,
    }
    return table, truth


#: Tamsin's true period (days) and the sampling cadence (days) that aliases it.
TAMSIN_PERIOD = 305.0
TAMSIN_CADENCE = 365.25


def tamsin(seed=4, *, error=3.5 * u.mas, wander=8.0, epochs=12):
    """Tamsin seen once a year: (table, truth); the nights wander by ``wander`` days."""
    rng = np.random.default_rng(seed)
    t = 2458500.0 + TAMSIN_CADENCE * np.arange(epochs) + rng.normal(0.0, wander, epochs)
    elements = {"Tamsin": Elements(period=TAMSIN_PERIOD, ecc=0.18, inc=62.0, omega=120.0,
                                   node=35.0, periapsis_time=2458610.0)}
    table = simulate_astrometry({"Tamsin": Time(t, format="jd", scale="tdb")}, elements,
                                1.15, parallax=25 * u.mas, error=error, seed=seed)
    truth = {"central_mass_Msun": 1.15, "parallax_mas": 25.0,
             "companions": {k: dict(v) for k, v in elements.items()}}
    return table, truth


def demo_setup():
    """The fit set-up of the demo: the bundled Orvane data with default priors."""
    from massfit.config.fit import FitSetup
    from massfit.model.specs import SystemSpec
    from massfit.sample.chain import SamplerSettings
    from massfit.orbits.viewing import ViewingSpec

    return FitSetup(files=[DEMO_DIR / "moons.ecsv"], read_options={},
                    system=SystemSpec(primary="Orvane", viewing=ViewingSpec(
                        pole_ra=np.radians(ORVANE_POLE[0]),
                        pole_dec=np.radians(ORVANE_POLE[1]))),
                    sampler=SamplerSettings(seed=7), source={"demo": "orvane"})


def planning_system(name, **elements):
    """An invented system for the observation planner's validation and benchmark.

    ``name`` is ``"Wren"`` (a 0.74 M_sun star at 24 mas with an 11.8-year companion,
    the system of ``example_obs/plan_wren``), ``"Pipit"`` (a 0.21 M_sun dwarf at
    85 mas, fixed parallax, with a 612-day companion) or ``"Eld+Fenn"`` (a giant
    planet of 1.6 M_jup with two moons, offsets in km). Keyword arguments replace
    the (single) companion's elements, e.g. ``ecc=0.55``.
    """
    import astropy.units as u

    from massfit.plan.system import AssumedSystem

    def tdb(text):
        return Time(text, scale="tdb")

    if name == "Wren":
        system = AssumedSystem(
            central_mass=0.74 * u.M_sun, parallax=24.0 * u.mas, parallax_err=0.05 * u.mas,
            companions={"Wren": dict(period=4310.0, ecc=0.42, inc=58.0, omega=212.0,
                                     node=104.0, periapsis_time=tdb("2029-05-14T00:00:00"))})
    elif name == "Pipit":
        system = AssumedSystem(
            central_mass=0.21 * u.M_sun, parallax=85.0 * u.mas,
            companions={"Pipit": dict(period=612.0, ecc=0.08, inc=121.0, omega=30.0,
                                      node=250.0, periapsis_time=tdb("2026-08-01T00:00:00"),
                                      mass=0.02 * u.M_sun)})
    elif name == "Eld+Fenn":
        system = AssumedSystem(
            central_mass=1.6 * u.M_jup,
            companions={"Eld": dict(period=3.71, ecc=0.01, inc=87.0, omega=10.0, node=33.0,
                                    periapsis_time=tdb("2027-01-02T00:00:00")),
                        "Fenn": dict(period=11.9, ecc=0.05, inc=86.0, omega=200.0,
                                     node=34.0, periapsis_time=tdb("2027-01-05T00:00:00"))})
    else:
        raise ValueError(f"no planning system called {name!r}")
    if elements:
        (body,) = system.companions
        system.companions[body] = {k: v for k, v in dict(system.companions[body],
                                                         **elements).items()
                                   if v is not None}
    return system


def _offsets_table(simulated, decimals, description):
    """East/north offsets (mas, rounded) with JD TDB times, ready to write as ECSV."""
    from astropy.table import Table

    table = Table()
    table["time"] = simulated["time"].tdb.jd
    table["body"] = simulated["body"]
    for col in ("east", "north", "east_err", "north_err"):
        table[col] = np.round(simulated[col].to_value(u.mas), decimals) * u.mas
    table["corr"] = simulated["corr"]
    table.meta.update(time_format="jd", time_scale="tdb", description=description)
    return table


def mirren(seed=20261202):
    """The Mirren system: ({file name: table}, truth)."""
    from astropy.table import Table

    mjup_in_msun = MASS_UNITS["Mjup"] / MASS_UNITS["Msun"]
    host = 0.78
    companion = 14.0 * mjup_in_msun
    parallax = 41.3 * u.mas
    elements = {"Mirren-b": Elements(period=41.0 * 365.25, ecc=0.52, inc=63.0,
                                     omega=212.0, node=118.0,
                                     periapsis_time=2462100.0, mass=companion)}
    rng = np.random.default_rng(seed)
    # Campaign A (separation, position angle): 11 epochs over 12 years, once or twice
    # a season; campaign B (east, north): 7 epochs in the later years.
    t_a = 2460200.5 + np.sort(rng.uniform(0, 12 * 365.25, 11))
    t_b = 2461300.5 + np.sort(rng.uniform(0, 8 * 365.25, 7))
    exact = simulate_astrometry(
        {"Mirren-b": Time(t_a, format="jd", scale="tdb")}, elements, host,
        parallax=parallax, error=1e-9 * u.mas, seed=seed)
    east = exact["east"].to_value(u.mas)
    north = exact["north"].to_value(u.mas)
    sep_err, pa_err = 1.8, 0.25  # mas, deg
    polar = Table()
    with quiet_leap_seconds():
        polar["time"] = Time(exact["time"].tdb.jd, format="jd", scale="tdb").tt.isot
    polar["body"] = exact["body"]
    polar["sep"] = np.round(np.hypot(east, north) + sep_err * rng.standard_normal(len(t_a)),
                            2) * u.mas
    polar["pa"] = np.round(np.mod(np.degrees(np.arctan2(east, north))
                                  + pa_err * rng.standard_normal(len(t_a)), 360), 3) * u.deg
    polar["sep_err"] = np.full(len(t_a), sep_err) * u.mas
    polar["pa_err"] = np.full(len(t_a), pa_err) * u.deg
    polar.meta.update(time_format="isot", time_scale="tt", description=(
        "Invented example: campaign A's separations and position angles of Mirren-b. "
        "Made by massfit.scenarios.examples.mirren()."))
    offsets = simulate_astrometry(
        {"Mirren-b": Time(t_b, format="jd", scale="tdb")}, elements, host,
        parallax=parallax, error=1.2 * u.mas, corr=-0.35, seed=seed + 1)
    cartesian = _offsets_table(offsets, 3, (
        "Invented example: campaign B's east/north offsets of Mirren-b with correlated "
        "errors. Made by massfit.scenarios.examples.mirren()."))
    truth = {
        "scenario": "Mirren: an invented K dwarf with an imaged companion on a partial orbit",
        "central_mass_Msun": host,
        "central_gm_km3_s2": host * GM_SUN_KM3_S2,
        "parallax_mas": parallax.to_value(u.mas),
        "parallax_err_mas": 0.05,
        "companions": {name: dict(el) for name, el in elements.items()},
        "companion_mass_prior_Msun": {"mean": companion, "sd": 3.0 * mjup_in_msun},
        "campaign_a_errors": {"sep_mas": sep_err, "pa_deg": pa_err},
        "campaign_b_errors": {"east_north_mas": 1.2, "east_north_correlation": -0.35},
        "seed": seed,
    }
    return {"campaign_a_polar.ecsv": polar, "campaign_b_offsets.ecsv": cartesian}, truth


def sorrel(seed=20261203):
    """The Sorrel binary: ({file name: table}, truth)."""
    from astropy.table import Table

    from massfit.scenarios.simulate import simulate_velocities

    primary_mass, companion_mass = 1.15, 0.82
    parallax = 22.4 * u.mas
    elements = {"Sorrel-B": Elements(period=1060.0, ecc=0.38, inc=71.0, omega=48.0,
                                     node=152.0, periapsis_time=2460420.0,
                                     mass=companion_mass)}
    rng = np.random.default_rng(seed)
    t_ast = Time(2460000.5 + np.sort(rng.uniform(0, 6 * 365.25, 14)), format="jd",
                 scale="tdb")
    ast = simulate_astrometry({"Sorrel-B": t_ast}, elements, primary_mass,
                              parallax=parallax, error=0.15 * u.mas, corr=0.25,
                              seed=seed + 1)
    astrometry = _offsets_table(ast, 4, (
        "Invented example: interferometric east/north offsets of Sorrel-B from "
        "Sorrel-A. Made by massfit.scenarios.examples.sorrel()."))
    gamma = -12.4
    blocks = []
    for label, start, years, n, err, zero_point, k in (
            ("Halden", 2459900.5, 3.5, 18, 0.25, 0.0, 2),
            ("Quillon", 2461000.5, 3.5, 12, 0.40, 0.9, 3)):
        t = Time(start + np.sort(rng.uniform(0, years * 365.25, n)), format="jd",
                 scale="tdb")
        blocks.append(simulate_velocities(
            {"Sorrel-A": t, "Sorrel-B": t}, elements, primary_mass, primary="Sorrel-A",
            gamma=(gamma + zero_point) * u.km / u.s, error=err * u.km / u.s,
            instrument=label, seed=seed + k))
    velocities = Table()
    velocities["time"] = np.concatenate([b["time"].tdb.jd for b in blocks])
    velocities["body"] = np.concatenate([np.asarray(b["body"]) for b in blocks])
    velocities["rv"] = np.round(np.concatenate([b["rv"].to_value(u.km / u.s)
                                                for b in blocks]), 3) * u.km / u.s
    velocities["rv_err"] = np.concatenate([b["rv_err"].to_value(u.km / u.s)
                                           for b in blocks]) * u.km / u.s
    velocities["instrument"] = np.concatenate([np.asarray(b["instrument"]) for b in blocks])
    velocities.sort("time")
    velocities.meta.update(time_format="jd", time_scale="tdb", description=(
        "Invented example: radial velocities of both stars of Sorrel from two "
        "spectrographs. Made by massfit.scenarios.examples.sorrel()."))
    truth = {
        "scenario": "Sorrel: an invented double-lined binary with a visual orbit",
        "central_mass_Msun": primary_mass,
        "central_gm_km3_s2": primary_mass * GM_SUN_KM3_S2,
        "companion_mass_Msun": companion_mass,
        "parallax_mas": parallax.to_value(u.mas),
        "systemic_velocity_km_s": gamma,
        "instrument_zero_points_km_s": {"Halden": 0.0, "Quillon": 0.9},
        "companions": {name: dict(el) for name, el in elements.items()},
        "astrometric_error_mas": 0.15, "east_north_correlation": 0.25,
        "velocity_errors_km_s": {"Halden": 0.25, "Quillon": 0.40},
        "seed": seed,
    }
    return {"visual_orbit.ecsv": astrometry, "velocities.ecsv": velocities}, truth


_README = {
    "orvane": """# Orvane: four moons of an invented gas giant

Invented for massfit's demo; no real object is described.

- **Truth**: Orvane has {central_mass_Mjup} Jupiter masses (GM = {central_gm_km3_s2:.6g}
  km^3/s^2). Its moons Pell, Ymra, Doss and Tirrin have periods of {periods} days on
  nearly circular orbits near Orvane's equator (ICRS inclinations {inclinations} deg;
  Orvane's pole at RA {pole_ra_deg} deg, Dec {pole_dec_deg} deg); every element is in
  `truth.json`, against the ICRS equator.
- **How it was made**: `massfit.scenarios.examples.orvane()` (seed {seed}). Orvane circles its
  star at 6.1 au; the observer circles it at 0.93 au on a tilted orbit, so both the
  distance and the direction of Orvane change from night to night: each row carries
  Orvane's direction (`primary_ra`, `primary_dec`) and distance (`distance`). The
  offsets are the tangent-plane angles between the moon and the planet, each seen at
  its own light time, made with 3-D vectors and astropy's sky-offset frame
  (`massfit.scenarios.moving_observer`), not with the fitting model. Some 70 nights over two
  seasons, each moon missed on ~12 % of them; errors of {astrometric_error_arcsec}
  arcsec in east and north.
- **Files**: `moons.ecsv` (time ISO TDB, body, east, north, errors, primary_ra,
  primary_dec, distance).
- **Fit**: `massfit demo`, or `massfit fit moons.ecsv --out fit-out --pole
  '251.3 deg, 57.8 deg'`.
""",
    "mirren": """# Mirren: a host star's mass from a partial orbit and a parallax

Invented for massfit's examples; no real object is described.

- **Truth**: the K dwarf Mirren has {central_mass_Msun} solar masses (GM =
  {central_gm_km3_s2:.6g} km^3/s^2) at a parallax of {parallax_mas} mas. Its companion
  Mirren-b has 14 Jupiter masses ({b_mass:.5f} M_sun) on an orbit of {b_period:.1f} d
  ({b_years:.0f} yr), e = {b_ecc}, i = {b_inc} deg, omega = {b_omega} deg, Omega =
  {b_node} deg, periastron at JD {b_tp}; all in `truth.json`.
- **How it was made**: `massfit.scenarios.examples.mirren()` (seed {seed}). Two invented imaging
  campaigns over 12 years (a third of the orbit, periastron included):
  `campaign_a_polar.ecsv`, 11 epochs of separation and position angle (errors
  {sep_err} mas and {pa_err} deg), and `campaign_b_offsets.ecsv`, 7 epochs of east/north
  offsets (errors {en_err} mas, east-north correlation {en_corr}).
- **Fit**: the parallax is known as {parallax_mas} +/- {parallax_err_mas} mas; the
  companion's mass from its brightness, as a normal prior of 14 +/- 3 Jupiter masses
  (`config.toml` says both). `massfit fit config.toml`.
""",
    "sorrel": """# Sorrel: a double-lined binary with a visual orbit

Invented for massfit's examples; no real object is described.

- **Truth**: Sorrel-A has {central_mass_Msun} and Sorrel-B {companion_mass_Msun} solar
  masses, at a parallax of {parallax_mas} mas; systemic velocity {systemic_velocity_km_s}
  km/s. The orbit: P = {b_period} d, e = {b_ecc}, i = {b_inc} deg, omega = {b_omega} deg
  (of Sorrel-B about Sorrel-A), Omega = {b_node} deg (the node where Sorrel-B recedes),
  periastron at JD {b_tp}; all in `truth.json`.
- **How it was made**: `massfit.scenarios.examples.sorrel()` (seed {seed}).
  `visual_orbit.ecsv`: 14 epochs of east/north offsets of Sorrel-B over 6 years
  (errors {astrometric_error_mas} mas, correlation {east_north_correlation}).
  `velocities.ecsv`: both stars' velocities from the spectrographs Halden (18 epochs,
  0.25 km/s) and Quillon (12 epochs, 0.40 km/s; its zero point is 0.9 km/s higher).
- **Fit**: `massfit fit config.toml`. No parallax is given: the fit measures it (an
  orbital parallax), and the two stars' velocities give the mass ratio, so both masses
  follow; the velocities also tell the ascending node from the descending one.
""",
}

_SORREL_CONFIG = """# Sorrel: both masses and the distance from a visual orbit and two stars' velocities.
[data]
files = ["visual_orbit.ecsv", "velocities.ecsv"]

[system]
primary = "Sorrel-A"

[companions.Sorrel-B]
mass_prior = {kind = "log-uniform", low = "0.01 Msun", high = "10 Msun"}

[sampler]
seed = 3

[output]
folder = "fit-out"
"""

_MIRREN_CONFIG = """# Mirren: fit the host star's mass from the companion's partial orbit.
[data]
files = ["campaign_a_polar.ecsv", "campaign_b_offsets.ecsv"]

[system]
primary = "Mirren"
parallax = "41.3 mas"
parallax_err = "0.05 mas"
central_mass_prior = {kind = "log-uniform", low = "0.01 Msun", high = "10 Msun"}

[companions.Mirren-b]
mass_prior = {kind = "normal", mean = "0.01336 Msun", sd = "0.00286 Msun", low = "0 Msun"}

[sampler]
seed = 5

[output]
folder = "fit-out"
"""


def _readme(name, truth):
    if name == "brannock":
        return dark_mass.brannock_readme(truth)
    if name == "orvane":
        comps = truth["companions"].values()
        return _README[name].format(
            periods=", ".join(f"{c['period']:g}" for c in comps),
            inclinations=", ".join(f"{c['inc']:g}" for c in comps), **truth)
    b = next(iter(truth["companions"].values()))
    fields = dict(b_mass=b["mass"], b_period=b["period"], b_years=b["period"] / 365.25,
                  b_ecc=b["ecc"], b_inc=b["inc"], b_omega=b["omega"], b_node=b["node"],
                  b_tp=b["periapsis_time"])
    if name == "mirren":
        fields.update(sep_err=truth["campaign_a_errors"]["sep_mas"],
                      pa_err=truth["campaign_a_errors"]["pa_deg"],
                      en_err=truth["campaign_b_errors"]["east_north_mas"],
                      en_corr=truth["campaign_b_errors"]["east_north_correlation"])
    return _README[name].format(**fields, **truth)


def _write_tables(folder, make, config):
    import json

    tables, truth = make()
    folder.mkdir(parents=True, exist_ok=True)
    for file_name, table in tables.items():
        table.write(folder / file_name, format="ascii.ecsv", overwrite=True)
    with open(folder / "truth.json", "w") as handle:
        json.dump(truth, handle, indent=2)
    (folder / "config.toml").write_text(config)
    return truth


def _write_orvane(folder):
    table, truth = orvane()
    description = ("Invented example: relative astrometry of the four moons of the gas "
                   "giant Orvane, with the planet's direction and distance on each "
                   "night (a moving observer). Made by massfit.scenarios.examples.orvane().")
    write_scenario(folder, table, truth, name="moons.ecsv", description=description)
    return truth


#: Scenario name -> writer of its folder (returns the truth).
SCENARIOS = {"orvane": _write_orvane,
             "mirren": lambda folder: _write_tables(folder, mirren, _MIRREN_CONFIG),
             "sorrel": lambda folder: _write_tables(folder, sorrel, _SORREL_CONFIG),
             "brannock": lambda folder: _write_tables(folder, dark_mass.brannock,
                                                      dark_mass.BRANNOCK_CONFIG)}


def write_all(root="example_obs"):
    """Write every scenario into ``root`` and its copy into the package's data."""
    for name, writer in SCENARIOS.items():
        for folder in (Path(root) / name, PACKAGE_DATA / name):
            truth = writer(Path(folder))
            (Path(folder) / "README.md").write_text(_readme(name, truth))


if __name__ == "__main__":
    write_all()

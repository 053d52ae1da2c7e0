"""A small fitted system shared by the figure, table and reload tests (cached per run).

Two invented companions of a 1.2 M_sun star at 25 mas: *Aster* given as east/north
with correlated errors, *Brel* given as separation and position angle. The sampler is
stopped early (the figures need samples, not convergence).
"""

from __future__ import annotations

import functools

import astropy.units as u
import numpy as np
from astropy.table import Table
from astropy.time import Time

from massfit.scenarios.simulate import Elements, simulate_astrometry

TRUTH_MASS_MSUN = 1.2
PARALLAX_MAS = 25.0
ELEMENTS = {
    "Aster": Elements(period=420.0, ecc=0.3, inc=55.0, omega=70.0, node=130.0,
                      periapsis_time=2460300.0),
    "Brel": Elements(period=1500.0, ecc=0.1, inc=120.0, omega=200.0, node=40.0,
                     periapsis_time=2460900.0),
}


def write_system(folder):
    """Write the two tables (ECSV) into ``folder``; returns their paths."""
    rng = np.random.default_rng(11)
    times = {name: Time(2460000.5 + np.sort(rng.uniform(0, 1800, 24)), format="jd",
                        scale="tdb") for name in ELEMENTS}
    table = simulate_astrometry(times, ELEMENTS, TRUTH_MASS_MSUN,
                                parallax=PARALLAX_MAS * u.mas, error=0.3 * u.mas,
                                corr=0.4, seed=5)
    paths = []
    aster = table[table["body"] == "Aster"]
    out = Table()
    out["time"] = aster["time"].jd
    out["body"] = aster["body"]
    for col in ("east", "north", "east_err", "north_err"):
        out[col] = aster[col].to(u.mas)
    out["corr"] = aster["corr"]
    out.meta.update(time_format="jd", time_scale="tdb")
    paths.append(folder / "aster.ecsv")
    out.write(paths[-1], format="ascii.ecsv", overwrite=True)
    brel = table[table["body"] == "Brel"]
    east, north = brel["east"].to_value(u.mas), brel["north"].to_value(u.mas)
    polar = Table()
    polar["time"] = brel["time"].jd
    polar["body"] = brel["body"]
    polar["sep"] = np.hypot(east, north) * u.mas
    polar["pa"] = np.degrees(np.arctan2(east, north)) % 360 * u.deg
    polar["sep_err"] = np.full(len(brel), 0.3) * u.mas
    polar["pa_err"] = np.degrees(0.3 / np.hypot(east, north)) * u.deg
    polar.meta.update(time_format="jd", time_scale="tdb")
    paths.append(folder / "brel.ecsv")
    polar.write(paths[-1], format="ascii.ecsv", overwrite=True)
    return paths


@functools.lru_cache(maxsize=None)
def small_result():
    """A FitResult of the two-companion system, fitted once per test run."""
    import tempfile
    from pathlib import Path

    import massfit

    paths = write_system(Path(tempfile.mkdtemp(prefix="massfit-figures-")))
    return massfit.fit([str(p) for p in paths], parallax=f"{PARALLAX_MAS} mas",
                       parallax_err="0.2 mas", seed=2, max_steps=400, walkers=40,
                       progress=False)


@functools.lru_cache(maxsize=None)
def sorrel_result():
    """A short fit of the Sorrel double-lined binary (example_obs), once per run."""
    import warnings
    from pathlib import Path

    import massfit

    folder = Path(__file__).resolve().parents[1] / "example_obs" / "sorrel"
    setup = massfit.load_config(folder / "config.toml")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        obs = massfit.read_observations(setup.files, **setup.read_options)
    return massfit.fit(obs, setup.system, seed=3, max_steps=150, progress=False)


#: An invented planet seen only in the star's velocities, written in m/s with MJD (UTC)
#: times and no instrument column: the form a planet search's table often has.
PLANET = Elements(period=61.3, ecc=0.15, inc=90.0, omega=40.0, node=0.0,
                  periapsis_time=2460110.0, mass=1.9e-3)
PLANET_GAMMA_KMS = -12.3


def write_planet_velocities(folder):
    """Write the planet's velocity table (m/s, MJD UTC); returns its path."""
    from massfit.scenarios.simulate import simulate_velocities

    rng = np.random.default_rng(41)
    times = Time(2460000.5 + np.sort(rng.uniform(0, 420, 36)), format="jd", scale="tdb")
    table = simulate_velocities({"Pell": times}, {"Pell-b": PLANET}, 1.05, primary="Pell",
                                gamma=PLANET_GAMMA_KMS * u.km / u.s, error=4.0 * u.m / u.s,
                                seed=42)
    out = Table()
    out["time"] = times.utc.mjd
    out["body"] = table["body"]
    out["rv"] = table["rv"].to(u.m / u.s)
    out["rv_err"] = table["rv_err"].to(u.m / u.s)
    out.meta.update(time_format="mjd", time_scale="utc")
    path = folder / "pell_velocities.ecsv"
    out.write(path, format="ascii.ecsv", overwrite=True)
    return path


@functools.lru_cache(maxsize=None)
def planet_result():
    """A short velocity-only fit of the invented planet, once per run."""
    import tempfile
    from pathlib import Path

    import massfit
    from massfit.model.orbit_model import SystemSpec

    path = write_planet_velocities(Path(tempfile.mkdtemp(prefix="massfit-planet-")))
    obs = massfit.read_observations(path, primary="Pell")
    system = SystemSpec(primary="Pell", central_mass=massfit.Normal(1.05, 0.05, low=0.0),
                        companions={"Pell-b": massfit.CompanionSpec("Pell-b")},
                        strict_companions=True)
    return massfit.fit(obs, system, seed=4, max_steps=300, walkers=32, progress=False)

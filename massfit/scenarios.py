"""Invented example systems: how the bundled example data were made.

``python -m massfit.scenarios`` rewrites every scenario into ``example_obs/`` (and the
copy of the demo that ships inside the package). Nothing here describes a real object:
the names and numbers are invented.

The demo scenario, *Orvane*: a gas giant of 0.83 Jupiter masses in an invented planetary
system, with four moons (Pell, Ymra, Doss, Tirrin). The observer lives on an inner
planet on a circular 1 au orbit, so the distance to Orvane changes from night to night
(4.3 to 6.3 au) and each row carries it; the light time is in the simulated positions.
"""

from __future__ import annotations

from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.time import Time

from .constants import GM_SUN_KM3_S2, MASS_UNITS
from .simulate import Elements, simulate_astrometry, write_scenario

__all__ = ["orvane", "demo_setup", "write_all", "DEMO_DIR"]

DEMO_DIR = Path(__file__).parent / "data" / "orvane"


def _observer_distance(t_jd):
    """Distance (au) from an observer on a 1 au, 365.25 d orbit to a planet at 5.3 au."""
    phase_obs = 2 * np.pi * (t_jd - 2461000.5) / 365.25
    phase_planet = 2 * np.pi * (t_jd - 2461000.5) / 4457.0 + 1.1
    obs = np.column_stack([np.cos(phase_obs), np.sin(phase_obs)])
    planet = 5.3 * np.column_stack([np.cos(phase_planet), np.sin(phase_planet)])
    return np.hypot(*(planet - obs).T)


def orvane(seed=20261201):
    """The Orvane system: (table, truth)."""
    mass_mjup = 0.83
    central = mass_mjup * MASS_UNITS["Mjup"] / MASS_UNITS["Msun"]
    elements = {
        "Pell": Elements(period=1.9427, ecc=0.004, inc=84.1, omega=41.0, node=27.3,
                         periapsis_time=2461101.20),
        "Ymra": Elements(period=4.1153, ecc=0.011, inc=84.6, omega=122.0, node=27.9,
                         periapsis_time=2461102.75),
        "Doss": Elements(period=8.7321, ecc=0.021, inc=83.8, omega=250.0, node=26.8,
                         periapsis_time=2461104.10),
        "Tirrin": Elements(period=19.6014, ecc=0.035, inc=85.2, omega=318.0, node=28.4,
                           periapsis_time=2461111.60),
    }
    rng = np.random.default_rng(seed)
    # Some 70 clear nights over two observing seasons, a moon missed now and then.
    nights = 2461100.5 + np.sort(np.concatenate([rng.choice(120, 40, replace=False),
                                                 400 + rng.choice(100, 30, replace=False)]))
    times, distance = {}, {}
    for k, name in enumerate(elements):
        seen = rng.random(nights.size) > 0.12
        t = nights[seen] + 0.25 + 0.1 * rng.random(seen.sum()) + 0.02 * k
        times[name] = Time(t, format="jd", scale="utc")
        distance[name] = _observer_distance(t) * u.au
    table = simulate_astrometry(times, elements, central, distance=distance,
                                error=0.04 * u.arcsec, corr=0.1, seed=seed + 1)
    table["time"] = table["time"].utc
    truth = {
        "scenario": "Orvane: an invented gas giant with four moons",
        "central_mass_Mjup": mass_mjup,
        "central_mass_Msun": central,
        "central_gm_km3_s2": central * GM_SUN_KM3_S2,
        "companions": {name: dict(el) for name, el in elements.items()},
        "astrometric_error_arcsec": 0.04,
        "east_north_correlation": 0.1,
        "seed": seed,
    }
    return table, truth


def demo_setup():
    """The fit set-up of the demo: the bundled Orvane data with default priors."""
    from .config import FitSetup
    from .model import SystemSpec
    from .sample import SamplerSettings

    return FitSetup(files=[DEMO_DIR / "moons.ecsv"], read_options={},
                    system=SystemSpec(primary="Orvane"),
                    sampler=SamplerSettings(seed=7), source={"demo": "orvane"})


def write_all(root="example_obs"):
    """Write every scenario into ``root`` and the demo's copy into the package."""
    table, truth = orvane()
    description = ("Invented example: relative astrometry of the four moons of the gas "
                   "giant Orvane, with the observer-planet distance of each night. "
                   "Made by massfit.scenarios.orvane().")
    for folder in (Path(root) / "orvane", DEMO_DIR):
        write_scenario(folder, table.copy(), truth, name="moons.ecsv",
                       description=description)


if __name__ == "__main__":
    write_all()

"""Pulls of the double-lined mass ratio K1/K2 over noise realisations.

An invented double-lined binary is simulated with many noise seeds; for each, the
least-squares start (massfit.start.search.find_start) gives K1/K2 and its error from the
start's covariance. The pulls (fitted - true) / error should have mean ~0 and standard
deviation ~1; a bias in the velocity model (sign, share of the reflex) would show as a
mean far from 0. Run: ``PYTHONPATH=. python validation/velocity_pulls.py [n_seeds]``.
"""

from __future__ import annotations

import sys
import tempfile
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.time import Time

import massfit
from massfit.model.orbit_model import OrbitModel
from massfit.scenarios.simulate import Elements, simulate_velocities, write_scenario
from massfit.start.search import find_start

TRUTH = dict(period=11.83, ecc=0.12, inc=81.0, omega=63.0, node=0.0,
             periapsis_time=2459004.1, mass=0.74)
PRIMARY = 1.05


def pull(seed: int, folder: Path) -> float:
    rng = np.random.default_rng(31)
    t = Time(2459000.5 + np.sort(rng.uniform(0.0, 200.0, 24)), format="jd", scale="tdb")
    table = simulate_velocities({"primary": t, "Cass": t}, {"Cass": Elements(**TRUTH)},
                                PRIMARY, gamma=14.0 * u.km / u.s, error=0.5 * u.km / u.s,
                                seed=seed, instrument="Osk")
    write_scenario(folder, table, None, name="sb2.ecsv")
    model = OrbitModel(massfit.read_observations(folder / "sb2.ecsv"))
    start = find_start(model)
    orbit = model.physical(start.theta)["companions"]["Cass"]
    k1, k2 = orbit["k_primary"][0], orbit["k_companion"][0]
    ratio = k1 / k2
    grad = np.zeros(model.n_dim)
    grad[model.column_of["Cass.k_primary"]] = 1.0 / k2
    grad[model.column_of["Cass.k_companion"]] = -ratio / k2
    return float((ratio - TRUTH["mass"] / PRIMARY) / np.sqrt(grad @ start.covariance @ grad))


def main(n_seeds: int = 40) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        pulls = np.array([pull(100 + k, Path(tmp)) for k in range(n_seeds)])
    print(f"{n_seeds} seeds: mean pull {pulls.mean():+.3f} "
          f"(expected 0 +- {1 / np.sqrt(n_seeds):.3f}), sd {pulls.std(ddof=1):.3f} "
          f"(expected ~1)")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 40)

"""A real planet's four large moons seen from the moving Earth: GM and per-moon fit.

Data: ``pymeeus.JupiterMoons`` (Meeus, Astronomical Algorithms, 2nd ed., ch. 44, after
Lieske's E5 theory), 150 epochs over two years from 2026 Jan, 200 km errors, the
planet's direction and distance from astropy's built-in ephemeris (see
``tests/meeus_moons.py``). Each data set is fitted by least squares from massfit's own
start (``find_start``) with

* the per-row line of sight (``primary_ra``, ``primary_dec``, ``distance``), and
* one fixed sky plane (today's model before the line of sight; the negative control).

The GM is compared with the published value (JUP230, from memory). The theory has
the moons' mutual perturbations (the Laplace resonance) and the planet's J2, which a
two-body fit cannot follow, so the per-moon reduced chi^2 stays far above 1 for the
resonant moons; the outer moon is nearly Keplerian.

Writes ``validation/results/real_moons.json``; about 3 minutes on two cores.
"""

from __future__ import annotations

import json
import sys
import time
from dataclasses import replace
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent / "tests"))
sys.path.insert(0, str(HERE.parent))

from meeus_moons import PUBLISHED_GM, meeus_table  # noqa: E402

from massfit.constants import GM_SUN_KM3_S2  # noqa: E402
from massfit.model.orbit_model import OrbitModel, SystemSpec  # noqa: E402
from massfit.read.tables import read_observations  # noqa: E402
from massfit.start.search import find_start  # noqa: E402


def fitted(observations):
    model = OrbitModel(observations, SystemSpec())
    clock = time.perf_counter()
    start = find_start(model)
    seconds = time.perf_counter() - clock
    phys = model.physical(start.theta[None])
    mass = float(phys["central_mass"][0])
    residuals = model.residuals(start.theta[None])[0]
    per_moon, offset = {}, 0
    for name, rows in model.rows.items():
        count = 2 * len(rows.t)
        part = np.concatenate([residuals[offset:offset + len(rows.t)],
                               residuals[offset + len(rows.t):offset + count]])
        offset += count
        per_moon[name] = {"reduced_chi2": float(np.sum(part ** 2) / (count - 6)),
                          "period_d": float(phys["companions"][name]["period"][0])}
    sigma = float(np.sqrt(start.covariance[0, 0]) * np.log(10.0))
    return {"gm_km3_s2": mass * GM_SUN_KM3_S2,
            "relative_to_published": mass * GM_SUN_KM3_S2 / PUBLISHED_GM - 1.0,
            "relative_sigma": sigma, "reduced_chi2": float(start.chi2 / (residuals.size
                                                                         - model.n_dim)),
            "moons": per_moon, "seconds": seconds}


def main():
    path = HERE / "results" / "real_moons_data.ecsv"
    path.parent.mkdir(exist_ok=True)
    meeus_table(n_epochs=150).write(path, overwrite=True)
    observations = read_observations(path)
    plane = replace(observations, astrometry=replace(
        observations.astrometry, primary_ra=None, primary_dec=None))
    out = {"published_gm_km3_s2": PUBLISHED_GM, "epochs": 150, "error_km": 200.0,
           "line_of_sight": fitted(observations), "fixed_plane": fitted(plane)}
    path.unlink()
    (HERE / "results" / "real_moons.json").write_text(json.dumps(out, indent=2) + "\n")
    for key in ("line_of_sight", "fixed_plane"):
        res = out[key]
        print(f"{key:14s} GM/published - 1 = {res['relative_to_published']:+.2e} "
              f"(sigma {res['relative_sigma']:.1e}), reduced chi2 {res['reduced_chi2']:.3g}")
        for name, moon in res["moons"].items():
            print(f"    {name:9s} reduced chi2 {moon['reduced_chi2']:.3g}")


if __name__ == "__main__":
    main()

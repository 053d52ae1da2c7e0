"""What differential aberration does to GM when it is left out of the model.

Invented moons on Keplerian orbits about an invented planet, seen from an invented
observer on a circular path (``massfit.scenarios.moving_observer.observe_moons``: 3-D
vectors, light time iterated, astropy's sky-offset frame). The same times and the
same noise draw are simulated twice: astrometric offsets, and apparent ones (each
direction aberrated by the observer's velocity, first order in v/c, the simulator's
own formula). Both tables are fitted by least squares from massfit's start with the
default (astrometric) model and the moving line of sight; the difference of the two
GMs is the effect of ignoring the aberration, compared with GM's own sigma.

(The model's ``offsets = "apparent"`` takes the observer's velocity from the Earth's
ephemeris, so it cannot be checked on an invented observer's path; this study measures
what leaving it out costs.)

    PYTHONPATH=. python validation/aberration.py [--error-mas 1 0.1]

Writes ``validation/results/aberration.json``; a minute or two.
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

import astropy.units as u  # noqa: E402

from massfit import SystemSpec, read_observations  # noqa: E402
from massfit.model.orbit_model import OrbitModel  # noqa: E402
from massfit.scenarios.moving_observer import (CircularPath, MoonOrbit,  # noqa: E402
                                               moon_times, observe_moons)
from massfit.start.search import find_start  # noqa: E402

RESULTS = HERE / "results" / "aberration.json"
#: An invented planet (7.9e-4 of the star's mass) 5.6 au out, seen from 1.02 au, and
#: three invented moons (periods in days).
PLANET_MASS = 7.9e-4
PLANET = CircularPath(5.6, 4800.0, 1.3, 80.0, 300.0, 2462000.5)
OBSERVER = CircularPath(1.02, 372.0, 0.0, 0.0, 40.0, 2462000.5)
MOONS = {"Ilse": MoonOrbit(2.9, 0.004, 24.0, 30.0, 12.0, 2462001.0),
         "Marrow": MoonOrbit(6.3, 0.012, 23.5, 200.0, 11.0, 2462002.0),
         "Quill": MoonOrbit(19.4, 0.006, 24.4, 110.0, 13.0, 2462004.0)}


def _fit(path):
    model = OrbitModel(read_observations(path), SystemSpec())
    start = find_start(model)
    k = model.names.index("central.log10_mass")
    mass = 10 ** start.theta[k]
    sigma = mass * np.log(10.0) * np.sqrt(start.covariance[k, k])
    dof = model.residuals(start.theta[None]).shape[1] - model.n_dim
    return {"mass": float(mass), "sigma": float(sigma), "chi2": float(start.chi2),
            "dof": int(dof)}


def run(error_mas, folder, seed=3):
    times = {name: moon_times(2462000.5, 600.0, 60, seed=k)
             for k, name in enumerate(MOONS)}
    out = {"error_mas": error_mas}
    for label, apparent in (("astrometric_data", False), ("apparent_data", True)):
        table = observe_moons(times, MOONS, PLANET_MASS, PLANET, OBSERVER,
                              error=error_mas * u.mas, seed=seed, aberration=apparent)
        path = folder / f"{label}.ecsv"
        table.write(path, overwrite=True)
        out[label] = _fit(path)
    shift = out["apparent_data"]["mass"] - out["astrometric_data"]["mass"]
    out["relative_gm_shift"] = shift / out["astrometric_data"]["mass"]
    out["gm_shift_in_sigma"] = shift / out["astrometric_data"]["sigma"]
    out["true_mass"] = PLANET_MASS
    return out


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--error-mas", type=float, nargs="+", default=[1.0, 0.1])
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        runs = [run(e, Path(tmp)) for e in args.error_mas]
    RESULTS.write_text(json.dumps({"runs": runs}, indent=1) + "\n")
    for r in runs:
        print(f"errors {r['error_mas']} mas: GM shift {r['relative_gm_shift']:+.2e} "
              f"({r['gm_shift_in_sigma']:+.2f} sigma); chi2/dof astrometric "
              f"{r['astrometric_data']['chi2']:.0f}/{r['astrometric_data']['dof']}, "
              f"apparent {r['apparent_data']['chi2']:.0f}/{r['apparent_data']['dof']}")


if __name__ == "__main__":
    main()

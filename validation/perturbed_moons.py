"""Invented moons of an invented oblate planet with mutual pulls: the staged start.

The invented planet *Corrabel* (``massfit.orbits.perturbed.MOONS_TRUTH``: J2, J4, three moons,
two near a 2:1 period ratio), integrated with J2, J4 and the pulls at rtol 1e-13, 40
epochs per moon over 360 days, errors of 150 km. For each noise seed the start step
(two-body search, then the perturbed least squares in stages) is run with the
perturbed model and with the two-body model; it prints GM against the truth in units
of the start's Laplace sigma and each moon's reduced chi^2.

    PYTHONPATH=. python validation/perturbed_moons.py [--seeds 5 6 ...]

Writes ``validation/results/perturbed_moons.json``. Too slow for the default test
run (minutes per seed on two cores), hence here.
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

from massfit import Perturbed, SystemSpec, read_observations  # noqa: E402
from massfit.summarise.adequacy import assess  # noqa: E402
from massfit.constants import GM_SUN_KM3_S2  # noqa: E402
from massfit.model.orbit_model import OrbitModel  # noqa: E402
from massfit.orbits.perturbed import MOONS_TRUTH, simulate_perturbed_moons  # noqa: E402
from massfit.start.search import find_start  # noqa: E402

RESULTS = HERE / "results" / "perturbed_moons.json"


def run_seed(seed, folder):
    truth = MOONS_TRUTH
    obs = read_observations(simulate_perturbed_moons(folder / f"moons_{seed}.ecsv",
                                                     seed=seed, n_obs=40))
    dynamics = Perturbed(j2=truth["j2"], j4=truth["j4"],
                         equatorial_radius=f"{truth['radius_km']} km",
                         equator_inclination=f"{truth['equator_inclination_deg']} deg",
                         equator_node=f"{truth['equator_node_deg']} deg")
    out = {"seed": seed}
    for label, dyn in (("perturbed", dynamics), ("two_body", None)):
        clock = time.process_time()
        model = OrbitModel(obs, SystemSpec(dynamics=dyn))
        start = find_start(model, progress=True)
        k = model.names.index("central.log10_mass")
        gm = 10 ** start.theta[k] * GM_SUN_KM3_S2
        sd = gm * np.log(10) * np.sqrt(start.covariance[k, k])
        block = assess(model, start.theta, compare=False)
        out[label] = {"gm": gm, "gm_sigma": sd,
                      "pull": (gm - truth["gm_km3_s2"]) / sd,
                      "reduced_chi2": {n: c["reduced_chi2"]
                                       for n, c in block["companions"].items()},
                      "notes": start.notes, "cpu_seconds": time.process_time() - clock}
        print(seed, label, json.dumps(out[label]), flush=True)
    return out


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--seeds", type=int, nargs="+", default=list(range(5, 15)))
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        report = [run_seed(seed, Path(tmp)) for seed in args.seeds]
    RESULTS.write_text(json.dumps(report, indent=1) + "\n")


if __name__ == "__main__":
    main()

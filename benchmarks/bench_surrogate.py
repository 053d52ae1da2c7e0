"""The perturbed model's log-posterior: the integrator against the linearised surrogate.

A giant planet's four large moons from an independent theory (``tests/meeus_moons.py``,
600 rows over two years, moving line of sight; J2, J4 and the mutual pulls, 24 fixed
steps per orbit), walkers about the perturbed start that ``validation/real_moons.py
--perturbed`` saved. Measured side by side in one run (CPU seconds of this process,
best of a few): one call of the exact log-posterior (the integrator, every walker),
one call of the surrogate's (:class:`massfit.model.surrogate.LinearisedPosterior`,
compiled), the one-time linearisation and the exact check of 300 draws. Both
single-threaded, so that the ratio is the work's, not the cores'.

    python benchmarks/bench_surrogate.py     # writes benchmarks/surrogate_results.json
"""

from __future__ import annotations

import json
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
for sub in ("", "tests", "validation"):
    sys.path.insert(0, str(ROOT / sub))

WALKERS = 60
REPEATS = 3


def _best(fn, repeats=REPEATS):
    fn()  # warm up (the compiled kernels are cached after the first run)
    best = np.inf
    for _ in range(repeats):
        cpu = time.process_time()
        fn()
        best = min(best, time.process_time() - cpu)
    return best


def main():
    import numba

    from meeus_moons import meeus_table
    from real_moons import perturbed_dynamics

    from massfit.model.orbit_model import OrbitModel
    from massfit.model.specs import SystemSpec
    from massfit.model.surrogate import LinearisedPosterior, surrogate_check
    from massfit.read.tables import read_observations
    from massfit.start.least_squares import covariance_at

    numba.set_num_threads(1)
    saved = json.loads((ROOT / "validation" / "results" / "real_moons.json").read_text())
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "moons.ecsv"
        meeus_table(n_epochs=150).write(path)
        model = OrbitModel(read_observations(path),
                           SystemSpec(dynamics=perturbed_dynamics(steps_per_orbit=24)))
    theta0 = model.recentre(np.array(saved["perturbed"]["start_theta"]))
    cov = covariance_at(model, theta0)
    rng = np.random.default_rng(5)
    walkers = rng.multivariate_normal(theta0, cov, size=WALKERS)
    cpu = time.process_time()
    surrogate = LinearisedPosterior(model, theta0, np.sqrt(np.diag(cov)))
    linearise = time.process_time() - cpu
    exact = _best(lambda: model.log_prob_python(walkers), 1)
    fast = _best(lambda: surrogate(walkers))
    draws = rng.multivariate_normal(theta0, cov, size=300)
    cpu = time.process_time()
    check = surrogate_check(model, surrogate, draws)
    checked = time.process_time() - cpu
    check.pop("weights")
    out = {"data": "real moons (J2, J4, pulls, 24 fixed steps per orbit), 600 rows",
           "walkers": WALKERS, "threads": 1,
           "exact_cpu_ms_per_call": 1e3 * exact, "surrogate_cpu_ms_per_call": 1e3 * fast,
           "ratio": exact / fast, "linearise_cpu_seconds": linearise,
           "integrations_to_linearise": surrogate.integrations,
           "check_cpu_seconds_300_draws": checked,
           "check_at_laplace_draws": check,
           "note": "walkers and draws from the start's Laplace approximation; CPU time "
                   "of one process, numba on one thread"}
    (HERE / "surrogate_results.json").write_text(json.dumps(out, indent=1) + "\n")
    print(json.dumps(out, indent=1))


if __name__ == "__main__":
    main()

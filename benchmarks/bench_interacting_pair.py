"""A whole fit of two interacting companions: the integrator sampled, against its surrogate.

The invented pair *Tessaly* (``massfit.orbits.nbody.PAIR_TRUTH``: two companions near a
5:2 period ratio, 60 epochs each over 1000 days, ``validation/interacting_pair.py``),
fitted end to end by :func:`massfit.fit` with the n-body model (the companions' masses
free, log-uniform) twice in one run: sampling the integrated model itself, and through
the linearised surrogate (``surrogate="linearised"``: the compiled two-body kernel plus
the integrator's departure, checked at 300 draws of the chain against the integrator).
Wall and CPU seconds of each whole fit (start, sampling, check, summary; no figures),
whether it converged, and the central mass each gives.

    python benchmarks/bench_interacting_pair.py   # writes benchmarks/interacting_pair_results.json
"""

from __future__ import annotations

import json
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))
sys.path.insert(0, str(HERE))

from common import machine  # noqa: E402

from massfit import CompanionSpec, NBody, SystemSpec, fit, read_observations  # noqa: E402
from massfit.orbits.nbody import PAIR_TRUTH, simulate_interacting_pair  # noqa: E402
from massfit.priors import LogUniform  # noqa: E402

RESULTS = HERE / "interacting_pair_results.json"


def one_fit(obs, surrogate, seed=1):
    spec = SystemSpec(companions={name: CompanionSpec(name, mass=LogUniform(1e-4, 0.5))
                                  for name in PAIR_TRUTH["companions"]},
                      dynamics=NBody(surrogate=surrogate))
    wall, cpu = time.perf_counter(), time.process_time()
    result = fit(obs, spec, seed=seed, progress=False)
    wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
    mass = 10 ** result.chain.samples[:, result.model.names.index("central.log10_mass")]
    diag = result.summary["diagnostics"]
    return {"surrogate": surrogate, "wall_seconds": wall, "cpu_seconds": cpu,
            "converged": bool(result.converged), "steps": diag["steps"],
            "max_autocorr_steps": diag["max_autocorr_steps"],
            "acceptance_fraction": diag["acceptance_fraction"],
            "sampling_seconds": diag["sampling_seconds"],
            "central_mass": [float(np.median(mass)), float(np.std(mass))],
            "true_central_mass": PAIR_TRUTH["central_mass"],
            "surrogate_check_passed": (result.summary.get("surrogate") or {}).get("passed")}


def main():
    folder = Path(tempfile.mkdtemp())
    obs = read_observations(simulate_interacting_pair(folder / "tessaly_1.ecsv", seed=1))
    runs = [one_fit(obs, surrogate) for surrogate in ("linearised", "none")]
    out = {"machine": machine(), "rows": len(obs.astrometry), "runs": runs,
           "wall_ratio": runs[1]["wall_seconds"] / runs[0]["wall_seconds"]}
    RESULTS.write_text(json.dumps(out, indent=1))
    print(json.dumps(out, indent=1))


if __name__ == "__main__":
    main()

"""Stars about a dark mass: the Laplace intervals of the study against a sampled chain.

``validation/dark_mass.py`` calibrates the start step's Laplace intervals (least
squares and its covariance). Here one noise seed is also sampled (``massfit.fit``,
a chain of ``--steps`` steps, about 40 autocorrelation times at 4000: not formally
converged, the summary says so) and the chain's median and spread of the mass, the
distance and the precession scale are compared with the Laplace values.

Run: ``PYTHONPATH=. python validation/dark_mass_chain.py [--seed 6] [--steps 4000]
[--exact-doppler]``; writes ``validation/results/dark_mass_chain_seed<N>.json``.
(The recorded seed 6 ran with the whole Doppler factor, ``--exact-doppler``.)
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).parent
sys.path.insert(0, str(HERE))

import massfit  # noqa: E402
from dark_mass import laplace  # noqa: E402
from massfit.scenarios import dark_mass  # noqa: E402


def compare(seed, steps, exact_doppler) -> dict:
    system = dark_mass.brannock_system()
    schedule = dark_mass.brannock_schedule(system)
    truth = {"mass": system.mass, "distance": system.distance_pc, "precession_scale": 1.0}
    spec = dark_mass.fit_spec(system)
    spec.relativity.exact_doppler = exact_doppler
    with tempfile.TemporaryDirectory() as folder:
        obs = dark_mass.simulated_observations(system, schedule, seed=seed, folder=folder)
        t0 = time.time()
        result = massfit.fit(obs, spec, seed=seed, progress=False, max_steps=steps)
    found = laplace(result.model, result.start)
    summary = result.summary
    out = {"seed": seed, "steps": steps, "exact_doppler": exact_doppler,
           "seconds": time.time() - t0, "converged": summary["converged"],
           "max_autocorr_steps": summary["diagnostics"]["max_autocorr_steps"],
           "effective_samples": summary["diagnostics"]["effective_samples"]}
    samples = {"mass": result.samples["central_mass_solar"],
               "distance": result.samples["distance"],
               "precession_scale": result.samples["relativity"]["precession_scale"]}
    for q, values in samples.items():
        low, median, high = np.percentile(values, [2.275, 50.0, 97.725])
        value, sigma = found[q]
        out[q] = {"chain_median": median, "chain_lower_95": low, "chain_upper_95": high,
                  "chain_sd": float(np.std(values)), "laplace_value": value,
                  "laplace_sd": sigma,
                  "sd_ratio_chain_over_laplace": float(np.std(values) / sigma),
                  "chain_pull": (median - truth[q]) / np.std(values),
                  "laplace_pull": (value - truth[q]) / sigma}
    return out


def main():
    args = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    args.add_argument("--seed", type=int, default=6)
    args.add_argument("--steps", type=int, default=4000)
    args.add_argument("--exact-doppler", action="store_true")
    options = args.parse_args()
    out = compare(options.seed, options.steps, options.exact_doppler)
    path = HERE / "results" / f"dark_mass_chain_seed{options.seed}.json"
    path.write_text(json.dumps(out, indent=1, default=float) + "\n")
    print(json.dumps(out, indent=1, default=float))


if __name__ == "__main__":
    main()

"""Where sampling a companion as a state vector beats sampling its elements.

massfit samples a companion whose data span less than ``ARC_FRACTION`` of its best-fit
period as its position and velocity at the middle of its data
(:mod:`massfit.sample.reparameterisation`), and every other companion as elements. This script
measures the autocorrelation times behind that choice: invented one-companion systems
seen over a range of fractions of an orbit (12 epochs, the same noise), each sampled
for the same number of steps from the same walkers in three coordinate sets: the
model's elements, the elements with sky-fixed angles (what massfit uses for companions
seen over longer arcs) and the state vector.

Run from the repository root (not part of the test suite; a few minutes)::

    PYTHONPATH=. python validation/state_coordinates.py

It writes ``validation/results/state_coordinates.json`` and prints a table.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
from pathlib import Path

os.environ.setdefault("MPLBACKEND", "Agg")

import astropy.units as u  # noqa: E402
import numpy as np  # noqa: E402
from astropy.time import Time  # noqa: E402

from massfit.sample.reparameterisation import ARC_FRACTION, SamplerCoordinates  # noqa: E402
from massfit.model.specs import CompanionSpec
from massfit.model.orbit_model import OrbitModel  # noqa: E402
from massfit.model.specs import SystemSpec  # noqa: E402
from massfit.priors import LogUniform, Uniform  # noqa: E402
from massfit.sample.chain import SamplerSettings, run_sampler  # noqa: E402
from massfit.scenarios.simulate import Elements, read_back, simulate_astrometry  # noqa: E402
from massfit.start.search import find_start  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
SPAN_DAYS = 1000.0
FRACTIONS = (0.2, 0.35, 0.5, 0.6, 0.75, 1.0, 1.5, 3.0)


def system(fraction, seed):
    """An invented companion ('Veyl') seen over ``fraction`` of its orbit, and its model."""
    rng = np.random.default_rng([seed, int(1000 * fraction)])
    period = SPAN_DAYS / fraction
    elements = {"Veyl": Elements(period=period, ecc=float(rng.uniform(0.0, 0.7)),
                                 inc=float(np.degrees(np.arccos(rng.uniform(-1, 1)))),
                                 omega=float(rng.uniform(0, 360)),
                                 node=float(rng.uniform(0, 360)),
                                 periapsis_time=2460000.0 + float(rng.uniform(0, period)))}
    times = {"Veyl": Time(np.sort(2460000.0 + rng.uniform(0, SPAN_DAYS, 12)), format="jd",
                          scale="tdb")}
    table = simulate_astrometry(times, elements, 1.0, error=0.02 * u.au, seed=seed)
    spec = SystemSpec(central_mass=LogUniform(0.5, 2.0), strict_companions=True,
                      companions={"Veyl": CompanionSpec(
                          "Veyl", period=LogUniform(period / 2, period * 2),
                          eccentricity=Uniform(0.0, 0.8))})
    obs = read_back(table, name="veyl.ecsv")
    return OrbitModel(obs, spec)


def compare(fraction, seed, steps, walkers=24):
    model = system(fraction, seed)
    start = find_start(model)
    initial = start.walkers(model, walkers, np.random.default_rng(seed))
    settings = SamplerSettings(max_steps=steps, check_every=steps, seed=seed,
                               progress=False)
    out = {"fraction": fraction, "seed": seed, "steps": steps,
           "chosen": bool(SamplerCoordinates.for_start(model, start.theta).bodies)}
    for label, coords in (
            ("elements", SamplerCoordinates(model)),
            ("sky_fixed", SamplerCoordinates.for_start(model, start.theta, arc_fraction=0)),
            ("state", SamplerCoordinates.for_start(model, start.theta, arc_fraction=np.inf))):
        chain = run_sampler(coords.log_prob, coords.to_sampled(initial), settings)
        out[label] = {"tau_mass": float(chain.tau[0]), "tau_max": float(np.max(chain.tau)),
                      "acceptance": chain.acceptance_fraction}
    return out


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--seeds", type=int, default=3)
    parser.add_argument("--steps", type=int, default=6000)
    args = parser.parse_args(argv)
    rows = []
    print(f"{'arc':>5} {'seed':>4}  max tau: {'elements':>8} {'sky-fixed':>9} {'state':>6}"
          f"   chosen (ARC_FRACTION = {ARC_FRACTION})")
    for fraction in FRACTIONS:
        for seed in range(1, args.seeds + 1):
            row = compare(fraction, seed, args.steps)
            rows.append(row)
            taus = [row[k]["tau_max"] for k in ("elements", "sky_fixed", "state")]
            print(f"{fraction:5.2f} {seed:4d}           {taus[0]:8.0f} {taus[1]:9.0f} "
                  f"{taus[2]:6.0f}   {'state' if row['chosen'] else 'sky-fixed'}",
                  flush=True)
    out = ROOT / "validation" / "results" / "state_coordinates.json"
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(json.dumps(rows, indent=1) + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())

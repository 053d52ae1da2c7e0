"""The weights of the two mirror images when radial velocities tell them apart.

Astrometry alone cannot tell (node, omega) from (node + pi, omega + pi); the sign of a
companion's radial velocity can. With a few noisy velocities both images keep some
posterior mass. An invented orbit (P = 600 d, e = 0.3, 0.8 M_sun, i = 50 deg, 18
random nights over 1500 d with 1 mas errors, parallax 40 mas known) with ``--rvs``
velocities of the companion (``--rv-err`` km/s, the systemic velocity and a jitter
free) is weighed three ways:

- the nested engine as it now runs (:func:`massfit.sample.nested.run_nested`): each
  image in its half of the node circle, ``--runs`` runs per half, several seeds;
- the nested engine over the whole node circle in one box (how it ran before): the
  share of its samples in each half;
- the Laplace estimate about each image's least-squares solution (the start's and its
  mirror, polished), the reference for the order of magnitude.

    PYTHONPATH=. python validation/mirror_weights.py [--live 60] [--seeds 1 2]

Writes ``validation/results/mirror_weights.json``.
"""

from __future__ import annotations

import argparse
import json
import tempfile
import time
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.time import Time

import massfit
from massfit.model.orbit_model import OrbitModel
from massfit.sample.nested import NestedSettings, nested_box, run_nested
from massfit.sample.nested_boxes import own_box
from massfit.scenarios.simulate import Elements, simulate_astrometry, simulate_velocities
from massfit.start.least_squares import (covariance_at, parameter_bounds,
                                         solve_least_squares, values_from_theta)
from massfit.start.modes import laplace_log_mass
from massfit.start.search import find_start

OUT = Path(__file__).parent / "results" / "mirror_weights.json"
NAME = "Brin"


def observations(folder, rv_err, n_rv, seed=5):
    rng = np.random.default_rng(seed)
    t = 2458000.0 + np.sort(rng.uniform(0.0, 1500.0, 18))
    elements = {NAME: Elements(period=600.0, ecc=0.3, inc=50.0, omega=70.0, node=120.0,
                               periapsis_time=2458100.0)}
    sky = simulate_astrometry({NAME: Time(t, format="jd", scale="tdb")}, elements, 0.8,
                              parallax=40 * u.mas, error=1.0 * u.mas, seed=3)
    t_rv = 2458000.0 + np.sort(rng.uniform(0.0, 1500.0, n_rv))
    rv = simulate_velocities({NAME: Time(t_rv, format="jd", scale="tdb")}, elements, 0.8,
                             error=rv_err * u.km / u.s, seed=4)
    sky.write(folder / "sky.ecsv", format="ascii.ecsv", overwrite=True)
    rv.write(folder / "rv.ecsv", format="ascii.ecsv", overwrite=True)
    return massfit.read_observations([folder / "sky.ecsv", folder / "rv.ecsv"])


def laplace_weights(model, start):
    """Laplace ln Z of the start's image and of its mirror (polished); the weights."""
    log_mass, nodes = [], []
    low, high = parameter_bounds(model)
    values = values_from_theta(model, start.theta)
    mirror = dict(values, **{NAME: dict(values[NAME], node=values[NAME]["node"] + np.pi,
                                        omega=values[NAME]["omega"] + np.pi)})
    for image in ("start", "mirror"):
        # (one after the other: the mirror's least squares moves the angle windows)
        theta = start.theta if image == "start" else solve_least_squares(model, mirror)
        cov = covariance_at(model, theta)
        log_mass.append(laplace_log_mass(model.log_prob, theta, cov, widths=high - low))
        nodes.append(float(np.degrees(theta[model.column_of[f"{NAME}.node"]]) % 360))
    model.recentre(start.theta)
    x = np.array(log_mass)
    w = np.exp(x - x.max())
    return {"log_laplace_mass": x.tolist(), "node_deg": nodes, "weights": (w / w.sum()).tolist()}


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--live", type=int, default=60)
    parser.add_argument("--runs", type=int, default=2)
    parser.add_argument("--seeds", type=int, nargs="+", default=[1, 2])
    parser.add_argument("--rvs", type=int, default=5)
    parser.add_argument("--rv-err", type=float, default=15.0)
    args = parser.parse_args(argv)
    obs = observations(Path(tempfile.mkdtemp(prefix="mirror_")), args.rv_err, args.rvs)
    model = OrbitModel(obs, massfit.SystemSpec(parallax=massfit.Fixed(40.0)))
    start = find_start(model)
    out = {"settings": vars(args), "laplace": laplace_weights(model, start),
           "halves": [], "whole_circle": []}
    print("Laplace:", out["laplace"], flush=True)
    k = model.column_of[f"{NAME}.node"]
    centre = model.centres[NAME]["node"]
    for seed in args.seeds:
        clock = time.perf_counter()
        chain = run_nested(model, start, NestedSettings(live_points=args.live,
                                                        runs=args.runs, seed=seed))
        out["halves"].append({
            "seed": seed, "log_evidence": chain.evidence["log_evidence"],
            "log_evidence_err": chain.evidence["log_evidence_err"],
            "converged": chain.converged,
            "modes": [{key: m.get(key) for key in ("node_half_centre_deg", "probability",
                                                   "probability_err", "probability_runs",
                                                   "log_z_runs", "log_z_err_runs")}
                      for m in chain.modes],
            "seconds": time.perf_counter() - clock})
        print("halves", out["halves"][-1], flush=True)
        clock = time.perf_counter()
        run = nested_box(model, NestedSettings(live_points=args.live), seed,
                         own_box(start, model))
        near = np.abs(np.angle(np.exp(1j * (run["samples"][:, k] - centre)))) < np.pi / 2
        out["whole_circle"].append({
            "seed": seed, "log_z": run["log_z"] + run["log_box_mass"],
            "log_z_err": run["log_z_err"],
            "share_near_start_node": float(np.sum(run["weights"][near])),
            "seconds": time.perf_counter() - clock})
        print("whole circle", out["whole_circle"][-1], flush=True)
        OUT.write_text(json.dumps(out, indent=1))


if __name__ == "__main__":
    main()

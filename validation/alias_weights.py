"""The start's Laplace weights of period aliases against nested sampling, mode by mode.

The invented yearly-sampled system of :func:`massfit.scenarios.examples.tamsin` has three
aliases (about 305, 1825 and 166 days). Here each alias is integrated on its own by
nested sampling (dynesty, an open library independent of massfit's start): the same
likelihood (``OrbitModel.log_likelihood``) and the same default priors, with the
period restricted to the alias's box (:func:`massfit.start.modes.period_box`), so that

    Z_k = Z(box k) * P(box k),   P(box k) = prior probability of the box
        = (log10 of the box's width) / (log10 of the prior's width)  (log-uniform P)

and the reference weights are Z_k / sum_j Z_j. Whole-range nested runs lose modes on
such posteriors; one run per box does not. Every box is run twice with independent
seeds, and the two must agree within their stated errors.

The mass marginalised over the modes is the mixture of the per-box posterior samples
with those weights.

Usage::

    PYTHONPATH=. python validation/alias_weights.py            # ~ several minutes
    PYTHONPATH=. python validation/alias_weights.py --seeds 4 5

Writes ``validation/results/alias_weights.json``.
"""

from __future__ import annotations

import argparse
import json
import time
from pathlib import Path

import numpy as np

from massfit.model.orbit_model import OrbitModel
from massfit.model.specs import SystemSpec
from massfit.start.modes import MIN_WEIGHT, period_box
from massfit.priors import Fixed
from massfit.scenarios.examples import tamsin
from massfit.scenarios.simulate import read_back
from massfit.start.search import find_start

OUT = Path(__file__).parent / "results" / "alias_weights.json"


def prior_transform(model, name, box):
    """Unit cube -> the model's sampled coordinates, distributed as its prior (with the
    period restricted to ``box``)."""
    names = model.names
    mass_prior = model.spec.central_mass
    ecc_prior = model.companions[name].eccentricity
    node_low, node_high = model.window(name, "node")
    phase_low, phase_high = model.window(name, "phase")
    log_box = np.log10(box)
    log_mass = np.log10([mass_prior.low, mass_prior.high])
    expected = ["central.log10_mass", f"{name}.log10_period", f"{name}.sqrt_e_cos_w",
                f"{name}.sqrt_e_sin_w", f"{name}.cos_inc", f"{name}.node", f"{name}.phase"]
    if names != expected:
        raise SystemExit(f"this study expects the coordinates {expected}, not {names}")

    def transform(u):
        ecc = ecc_prior.low + u[2] * (ecc_prior.high - ecc_prior.low)
        omega = 2 * np.pi * u[3]
        return np.array([log_mass[0] + u[0] * (log_mass[1] - log_mass[0]),
                         log_box[0] + u[1] * (log_box[1] - log_box[0]),
                         np.sqrt(ecc) * np.cos(omega), np.sqrt(ecc) * np.sin(omega),
                         -1.0 + 2.0 * u[4],
                         node_low + u[5] * (node_high - node_low),
                         phase_low + u[6] * (phase_high - phase_low)])
    return transform


def nested_box(model, name, box, seed, nlive, dlogz=0.05):
    """(ln Z of the box with its prior probability, its error, mass samples, weights)."""
    import dynesty

    def log_like(theta):
        value = model.log_likelihood(theta[None, :])[0]
        return float(value) if np.isfinite(value) else -1e300

    # Random walks from live points: dynesty's uniform draws within ellipsoids lose
    # their efficiency on the narrow curved ridges of an orbit's posterior.
    sampler = dynesty.NestedSampler(log_like, prior_transform(model, name, box),
                                    model.n_dim, nlive=nlive, sample="rwalk",
                                    rstate=np.random.default_rng(seed))
    sampler.run_nested(dlogz=dlogz, print_progress=False)
    res = sampler.results
    print(f"  box {box[0]:.5g}-{box[1]:.5g} d, seed {seed}: ln Z {res.logz[-1]:.3f} "
          f"+- {res.logzerr[-1]:.3f}", flush=True)
    prior = model.companions[name].period
    log_share = np.log(np.log(box[1] / box[0]) / np.log(prior.high / prior.low))
    weights = np.exp(res.logwt - res.logz[-1])
    masses = 10.0 ** res.samples[:, 0]
    return float(res.logz[-1] + log_share), float(res.logzerr[-1]), masses, weights


def weighted_quantiles(x, w, q):
    order = np.argsort(x)
    cdf = np.cumsum(w[order]) / np.sum(w)
    return np.interp(q, cdf, x[order])


def study(seed, nlive, repeats=2, dlogz=0.05):
    table, truth = tamsin(seed)
    model = OrbitModel(read_back(table), SystemSpec(parallax=Fixed(25.0)))
    started = time.perf_counter()
    start = find_start(model)
    start_seconds = time.perf_counter() - started
    modes = [m for m in start.candidate_modes if m["weight"] >= MIN_WEIGHT]
    rows = []
    for mode in modes:
        others = [m for m in start.candidate_modes if m is not mode]
        box = period_box(mode, others, "Tamsin")
        runs = []
        for rep in range(repeats):
            runs.append(nested_box(model, "Tamsin", box, 1000 * seed + rep, nlive, dlogz))
        rows.append({"period": mode["periods"]["Tamsin"], "box": box,
                     "central_mass": mode["central_mass"], "laplace_weight": mode["weight"],
                     "runs": runs})
    out = {"seed": seed, "start_seconds": start_seconds, "modes": []}
    for rep in range(repeats):
        log_z = np.array([row["runs"][rep][0] for row in rows])
        w = np.exp(log_z - log_z.max())
        w /= w.sum()
        for row, weight in zip(rows, w):
            row.setdefault("nested_weights", []).append(float(weight))
    for row in rows:
        logz = [r[0] for r in row["runs"]]
        err = [r[1] for r in row["runs"]]
        out["modes"].append({"period": row["period"], "box": row["box"],
                             "central_mass": row["central_mass"],
                             "laplace_weight": row["laplace_weight"],
                             "nested_weights": row["nested_weights"],
                             "log_z": logz, "log_z_err": err})
    # The mass over all modes (first run of each box), mixed by the nested weights.
    masses = np.concatenate([row["runs"][0][2] for row in rows])
    mix = np.concatenate([row["runs"][0][3] / row["runs"][0][3].sum() * wt
                          for row, wt in zip(rows, [r["nested_weights"][0] for r in rows])])
    q = weighted_quantiles(masses, mix, [0.02275, 0.15865, 0.5, 0.84135, 0.97725])
    out["mass_over_modes_Msun"] = dict(zip(["lower_95", "lower_68", "median", "upper_68",
                                            "upper_95"], map(float, q)))
    out["truth_Msun"] = truth["central_mass_Msun"]
    return out


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seeds", type=int, nargs="+", default=[4])
    parser.add_argument("--nlive", type=int, default=400)
    parser.add_argument("--dlogz", type=float, default=0.05,
                        help="dynesty's stopping tolerance on ln Z")
    args = parser.parse_args(argv)
    results = [study(seed, args.nlive, dlogz=args.dlogz) for seed in args.seeds]
    OUT.parent.mkdir(parents=True, exist_ok=True)
    OUT.write_text(json.dumps(results, indent=2))
    for res in results:
        print(f"seed {res['seed']}: start {res['start_seconds']:.1f} s")
        for m in res["modes"]:
            nested = " / ".join(f"{w:.3f}" for w in m["nested_weights"])
            errs = " / ".join(f"{e:.2f}" for e in m["log_z_err"])
            print(f"  P = {m['period']:8.2f} d  M = {m['central_mass']:.4g}  Laplace "
                  f"{m['laplace_weight']:.3f}  nested {nested}  (ln Z errors {errs})")
        q = res["mass_over_modes_Msun"]
        print(f"  mass over the modes: median {q['median']:.4g}, 68 % {q['lower_68']:.4g}"
              f"..{q['upper_68']:.4g}, 95 % {q['lower_95']:.4g}..{q['upper_95']:.4g} "
              f"M_sun (truth {res['truth_Msun']})")


if __name__ == "__main__":
    main()

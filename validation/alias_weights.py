"""The weights of period aliases on a sparse yearly set: nested engine, importance
sampling and the start's Laplace estimate, box by box.

The invented yearly-sampled system of :func:`massfit.scenarios.examples.tamsin` has three
aliases (about 305, 1825 and 166 days). Each alias is integrated on its own, with the
period restricted to the alias's box (:func:`massfit.start.modes.period_box`), so that

    Z_k = Z(box k) * P(box k),   P(box k) = prior probability of the box,

and the weights are Z_k / sum_j Z_j. Two independent integrators:

- massfit's nested engine (:func:`massfit.sample.nested.nested_box`, dynesty), ``--runs``
  independent runs per box with ``--live`` live points;
- importance sampling, the reference: ``--draws`` draws per box from a heavy-tailed
  proposal (Student t, 4 degrees of freedom, 1.5 times the covariance of the box's own
  least-squares solution) and, as its check, from a wider one (2 degrees of freedom,
  4 times the covariance). Both are unbiased for any proposal that covers the
  posterior; the spread between them and their effective sample sizes say how well.

ln Z is absolute for both: the importance sampling integrates the model's
log-posterior, whose constant leaves out the normalisation of some priors; the
difference (the proper prior's log-density less the model's, a constant for these
priors) is added (:func:`prior_offset`).

Usage::

    PYTHONPATH=. python validation/alias_weights.py --live 500 --runs 3   # ~ 20 min
    PYTHONPATH=. python validation/alias_weights.py --laplace-seeds 20    # the weights'
                                               # spread over noise realisations, ~2 min

Writes ``validation/results/alias_weights.json`` (and ``alias_weights_seeds.json``).
"""

from __future__ import annotations

import argparse
import json
import time
from pathlib import Path

import numpy as np
from scipy.special import logsumexp

from massfit.model.orbit_model import OrbitModel
from massfit.model.specs import SystemSpec
from massfit.modechains import boxed_spec
from massfit.priors import Fixed
from massfit.sample.nested import NestedSettings, boxes_of, nested_box, weigh_boxes
from massfit.scenarios.examples import tamsin
from massfit.scenarios.simulate import read_back
from massfit.start.modes import MIN_WEIGHT
from massfit.start.search import find_start

OUT = Path(__file__).parent / "results" / "alias_weights.json"
SEEDS_OUT = Path(__file__).parent / "results" / "alias_weights_seeds.json"
LEVELS = [0.02275, 0.15865, 0.5, 0.84135, 0.97725]


def prior_offset(model, theta) -> float:
    """ln(proper prior density) - (model's log_prob - log_likelihood) at ``theta``, for
    the default priors of a one-companion astrometric model (log-uniform mass and
    period, uniform eccentricity on the sqrt(e) disc, isotropic orientation, node
    over its window, phase over a turn): each a constant density in the sampled
    coordinates."""
    spec = model.spec
    comp = next(iter(model.companions.values()))
    name = comp.name
    proper = -(np.log(np.log10(spec.central_mass.high / spec.central_mass.low))
               + np.log(np.log10(comp.period.high / comp.period.low))
               + np.log(np.pi * comp.eccentricity.high) + np.log(2.0)
               + np.log(model.node_width[name]) + np.log(2 * np.pi))
    own = float(model.log_prob(theta[None])[0] - model.log_likelihood(theta[None])[0])
    return float(proper - own)


def importance(model, theta, covariance, box, rng, draws, scale, df):
    """(ln Z of the box with its prior probability, its error, effective fraction)."""
    from scipy.stats import multivariate_t

    col = model.column_of[f"{next(iter(model.companions))}.log10_period"]
    low, high = np.log10(box)
    model.recentre(theta)
    proposal = multivariate_t(theta, scale * covariance, df=df, allow_singular=True)
    parts = []
    for _ in range(max(draws // 100_000, 1)):
        x = proposal.rvs(size=min(draws, 100_000), random_state=rng)
        log_w = model.log_prob(x) - proposal.logpdf(x)
        log_w[(x[:, col] < low) | (x[:, col] > high)] = -np.inf
        parts.append(log_w)
    log_w = np.concatenate(parts)
    log_z = float(logsumexp(log_w) - np.log(log_w.size))
    ratio = np.exp(log_w - log_z)
    err = float(np.std(ratio) / np.sqrt(log_w.size))  # relative error of Z ~ of ln Z
    ess = float(np.sum(ratio) ** 2 / np.sum(ratio ** 2) / log_w.size)
    return log_z + prior_offset(model, theta), err, ess


def weighted_quantiles(x, w, q):
    order = np.argsort(x)
    cdf = np.cumsum(w[order]) / np.sum(w)
    return np.interp(q, cdf, x[order])


def study(seed, live, runs, sample, draws):
    table, truth = tamsin(seed)
    observations = read_back(table)
    model = OrbitModel(observations, SystemSpec(parallax=Fixed(25.0)))
    started = time.perf_counter()
    start = find_start(model)
    start_seconds = time.perf_counter() - started
    plan = boxes_of(start, model)
    rng = np.random.default_rng(11)
    settings = NestedSettings(live_points=live, sample=sample, runs=runs)
    rows, nested_runs = [], []
    for b, (mode, boxes) in enumerate(plan):
        others = [c for c in start.candidate_modes if c is not mode]
        box_start = find_start(OrbitModel(observations, boxed_spec(model, mode, others)))
        box = boxes["Tamsin"]
        reference = [importance(model, box_start.theta, box_start.covariance, box, rng,
                                draws, scale, df) for scale, df in ((1.5, 4), (4.0, 2))]
        model.recentre(start.theta)
        box_runs = [nested_box(model, settings, 1000 * seed + 10 * b + r, boxes,
                               mode.get("window_centres")) for r in range(runs)]
        nested_runs.append(box_runs)
        rows.append({"period": mode["periods"]["Tamsin"], "box": list(box),
                     "central_mass": mode["central_mass"], "laplace_weight": mode["weight"],
                     "log_z_importance": [r[0] for r in reference],
                     "log_z_importance_err": [r[1] for r in reference],
                     "importance_effective_fraction": [r[2] for r in reference],
                     "log_z_nested": [r["log_z"] + r["log_box_mass"] for r in box_runs],
                     "log_z_nested_err": [r["log_z_err"] for r in box_runs],
                     "nested_calls": [r["calls"] for r in box_runs],
                     "nested_seconds": [r["seconds"] for r in box_runs]})
        print(json.dumps(rows[-1]), flush=True)
    weighed = weigh_boxes(nested_runs, seed=seed)
    for row, box in zip(rows, weighed["boxes"]):
        row.update(nested_weight=box["probability"], nested_weight_err=box["probability_err"],
                   nested_weight_runs=box["probability_runs"], runs_agree=box["runs_agree"])
    for j in range(2):
        log_z = np.array([row["log_z_importance"][j] for row in rows])
        for row, w in zip(rows, np.exp(log_z - logsumexp(log_z))):
            row.setdefault("importance_weight", []).append(float(w))
    masses, mix = [], []
    for row, box_runs in zip(rows, nested_runs):
        for r in box_runs:
            masses.append(10.0 ** r["samples"][:, model.column_of["central.log10_mass"]])
            mix.append(r["weights"] * row["nested_weight"] / len(box_runs))
    q = weighted_quantiles(np.concatenate(masses), np.concatenate(mix), LEVELS)
    return {"seed": seed, "live_points": live, "runs": runs, "sample": sample,
            "importance_draws": draws, "start_seconds": start_seconds, "modes": rows,
            "log_evidence": weighed["log_evidence"],
            "log_evidence_err": weighed["log_evidence_err"],
            "mass_over_modes_Msun": dict(zip(["lower_95", "lower_68", "median",
                                              "upper_68", "upper_95"], map(float, q))),
            "truth_Msun": truth["central_mass_Msun"]}


def laplace_over_seeds(seeds):
    """The start's modes and Laplace weights on other noise realisations of the set."""
    out = []
    for seed in seeds:
        table, _ = tamsin(seed)
        start = find_start(OrbitModel(read_back(table), SystemSpec(parallax=Fixed(25.0))))
        heavy = [m for m in start.candidate_modes if m["weight"] >= MIN_WEIGHT]
        out.append({"seed": seed, "modes": [
            {"period": m["periods"]["Tamsin"], "central_mass": m["central_mass"],
             "chi2": m["chi2"], "weight": m["weight"]} for m in heavy]})
        print(seed, " ".join(f"{m['periods']['Tamsin']:.0f} d {m['weight']:.3f}"
                             for m in heavy), flush=True)
    return out


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seeds", type=int, nargs="+", default=[4])
    parser.add_argument("--live", type=int, default=500)
    parser.add_argument("--runs", type=int, default=3)
    parser.add_argument("--sample", default="rslice")
    parser.add_argument("--draws", type=int, default=1_000_000)
    parser.add_argument("--laplace-seeds", type=int, default=0,
                        help="only the Laplace weights of this many noise realisations")
    parser.add_argument("--out", default=None)
    args = parser.parse_args(argv)
    if args.laplace_seeds:
        result = laplace_over_seeds(range(1, args.laplace_seeds + 1))
        Path(args.out or SEEDS_OUT).write_text(json.dumps(result, indent=1))
        return
    results = [study(seed, args.live, args.runs, args.sample, args.draws)
               for seed in args.seeds]
    out = Path(args.out or OUT)
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(json.dumps(results, indent=1))
    for res in results:
        print(f"seed {res['seed']}: {res['live_points']} live points, {res['runs']} runs")
        for m in res["modes"]:
            print(f"  P = {m['period']:8.2f} d  Laplace {m['laplace_weight']:.3f}  "
                  f"importance {' / '.join(f'{w:.3f}' for w in m['importance_weight'])}  "
                  f"nested {m['nested_weight']:.3f} +- {m['nested_weight_err']:.3f} "
                  f"(runs {' / '.join(f'{w:.3f}' for w in m['nested_weight_runs'])})")
        q = res["mass_over_modes_Msun"]
        print(f"  mass over the modes: median {q['median']:.4g}, 95 % {q['lower_95']:.4g}"
              f"..{q['upper_95']:.4g} M_sun (truth {res['truth_Msun']})")


if __name__ == "__main__":
    main()

"""Short arcs: the sampled central-mass posterior against a brute-force reference.

A companion seen over a fraction of its orbit (10 %, 20 % and 30 % here) leaves the
period, the eccentricity and the mass strongly correlated and the posterior far from
Gaussian, which is where a sampler is most likely to go wrong. The reference needs no
sampler: draw parameter vectors from the prior (at least 10^6), weight each by its
likelihood (importance sampling with the prior as the proposal), and read the central
mass's posterior off the weighted draws. The script compares it with massfit's chain
by the Kolmogorov-Smirnov distance between the two distribution functions and asks for
at most 0.05; the effective number of weighted draws is printed beside it, since the
reference is only as good as that number. Two more checks go with it: over every
prior draw, the model's log-posterior minus the draw's log-weight must be one constant
(else the chain and the reference would target different densities), and the
marginals of the period, the eccentricity and cos i are compared too.

Run from the repository root (not part of the test suite)::

    PYTHONPATH=. python validation/short_arc.py

It writes ``validation/results/short_arc.json`` and ``docs/figures/short_arc.png``.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
from pathlib import Path

os.environ.setdefault("MPLBACKEND", "Agg")

import astropy.units as u  # noqa: E402
import numpy as np  # noqa: E402
from astropy.time import Time  # noqa: E402

import massfit  # noqa: E402
from massfit.model.specs import CompanionSpec
from massfit.model.specs import SystemSpec  # noqa: E402
from massfit.priors import LogUniform, Uniform  # noqa: E402
from massfit.scenarios.simulate import Elements, read_back, simulate_astrometry  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
KS_LIMIT = 0.05
PERIOD = 3000.0  # days
TRUE_MASS = 1.1  # M_sun
PRIOR_MASS = (0.5, 2.5)
PRIOR_PERIOD = (1500.0, 15000.0)
ECC_HIGH = 0.9
ERROR_PER_TENTH = 0.5  # au, for an arc of 10 % of the orbit (a = 4.3 au)


def scenario(fraction, seed=17):
    """Observations of one invented companion over ``fraction`` of its orbit."""
    elements = {"Hollin": Elements(period=PERIOD, ecc=0.3, inc=62.0, omega=130.0,
                                   node=75.0, periapsis_time=2459000.0 + 0.1 * PERIOD)}
    t = 2459000.0 + np.linspace(0.0, fraction * PERIOD, 10)
    # The error grows with the arc, so that every case leaves the mass equally loose
    # (and the prior draws a usable number of effective samples).
    error = ERROR_PER_TENTH * fraction / 0.1
    table = simulate_astrometry({"Hollin": Time(t, format="jd", scale="tdb")}, elements,
                                TRUE_MASS, error=error * u.au, seed=seed)
    spec = SystemSpec(central_mass=LogUniform(*PRIOR_MASS), strict_companions=True,
                      companions={"Hollin": CompanionSpec(
                          "Hollin", period=LogUniform(*PRIOR_PERIOD),
                          eccentricity=Uniform(0.0, ECC_HIGH))})
    obs = read_back(table, name="hollin.ecsv")
    return obs, spec


def prior_draws(model, n, rng):
    """``n`` draws from the model's prior, in its sampled coordinates."""
    theta = np.empty((n, model.n_dim))
    for k, param in enumerate(model.parameters):
        name = param.name
        if param.transform == "log10":
            theta[:, k] = np.log10(param.prior.sample(rng, n))
        elif name.endswith("sqrt_e_cos_w"):
            # Uniform e and omega: sqrt(e) (cos w, sin w).
            ecc = param.prior.sample(rng, n)
            omega = rng.uniform(0.0, 2 * np.pi, n)
            theta[:, k] = np.sqrt(ecc) * np.cos(omega)
            theta[:, k + 1] = np.sqrt(ecc) * np.sin(omega)
        elif name.endswith("sqrt_e_sin_w"):
            continue
        elif param.transform == "cos":
            theta[:, k] = rng.uniform(-1.0, 1.0, n)
        elif param.transform == "window":
            body, kind = name.rsplit(".", 1)
            low, high = model.window(body, kind)
            theta[:, k] = rng.uniform(low, high, n)
        else:
            raise ValueError(f"no prior draw for {name}")
    return theta


#: Coordinates besides the mass whose marginals are compared too (name, from theta).
MARGINALS = {
    "log10_period": lambda model, th: th[:, model.names.index("Hollin.log10_period")],
    "eccentricity": lambda model, th: (th[:, model.names.index("Hollin.sqrt_e_cos_w")] ** 2
                                       + th[:, model.names.index("Hollin.sqrt_e_sin_w")] ** 2),
    "cos_inc": lambda model, th: th[:, model.names.index("Hollin.cos_inc")],
}


def reference(model, n_draws, rng, batch=200_000):
    """Importance sampling from the prior.

    Returns the log10 masses and the other compared coordinates of the draws that
    carry weight (those below 1e-12 of the largest weight, a negligible total, are
    dropped to save memory), their normalised weights, the effective number of draws,
    and the spread over all draws of the model's log-posterior minus the reference's
    log-weight. That difference must be one constant (the log prior density of the
    sampled coordinates): a spread above rounding would mean that the chain and the
    reference target different densities.
    """
    kept, log_like, spread = [], [], [np.inf, -np.inf]
    for start in range(0, n_draws, batch):
        theta = prior_draws(model, min(batch, n_draws - start), rng)
        # Draws come from the prior, so the weight is the likelihood alone.
        ll = model.log_likelihood(theta)
        diff = model.log_prob(theta) - ll
        spread = [min(spread[0], float(np.min(diff))), max(spread[1], float(np.max(diff)))]
        log_like.append(ll)
        kept.append(np.column_stack(
            [theta[:, model.names.index("central.log10_mass")]]
            + [f(model, theta) for f in MARGINALS.values()]).astype(np.float32))
    log_like = np.concatenate(log_like)
    w = np.exp(log_like - np.max(log_like))
    ess = float(np.sum(w) ** 2 / np.sum(w * w))
    keep = w > 1e-12
    values = np.concatenate(kept)[keep].astype(float)
    w = w[keep] / np.sum(w[keep])
    return values, w, ess, spread[1] - spread[0]


def ks_distance(samples, values, weights):
    """Largest difference between an empirical and a weighted distribution function."""
    grid = np.sort(np.concatenate([samples, values]))
    cdf_a = np.searchsorted(np.sort(samples), grid, side="right") / samples.size
    order = np.argsort(values)
    cdf_w = np.concatenate([[0.0], np.cumsum(weights[order])])
    cdf_b = cdf_w[np.searchsorted(values[order], grid, side="right")]
    return float(np.max(np.abs(cdf_a - cdf_b)))


def run_case(fraction, n_draws, seed, *, max_steps, walkers):
    obs, spec = scenario(fraction)
    started = time.perf_counter()
    result = massfit.fit(obs, spec, seed=seed, walkers=walkers, max_steps=max_steps,
                         progress=False)
    sampled = np.log10(result.samples["central_mass_solar"])
    model = result.model  # the same windows for node and phase as the chain used
    values, w, ess, spread = reference(model, n_draws, np.random.default_rng(seed))
    ks = ks_distance(sampled, values[:, 0], w)
    chain = result.chain.samples
    others = {name: ks_distance(f(model, chain), values[:, k + 1], w)
              for k, (name, f) in enumerate(MARGINALS.items())}
    return {"fraction_of_orbit": fraction, "draws": n_draws,
            "reference_effective_draws": ess, "chain_samples": int(sampled.size),
            "chain_effective_samples": result.summary["diagnostics"]["effective_samples"],
            "converged": result.converged, "ks_distance": ks, "ks_limit": KS_LIMIT,
            "passed": ks <= KS_LIMIT, "ks_other_marginals": others,
            "log_posterior_minus_log_weight_spread": spread,
            "prior_sensitive": bool((result.summary.get("prior_sensitivity") or {})
                                    .get("sensitive", False)),
            "mass_median_chain": float(10 ** np.median(sampled)),
            "mass_median_reference": float(10 ** _weighted_median(values[:, 0], w)),
            "seconds": time.perf_counter() - started}, sampled, (values[:, 0], w)


def _weighted_median(values, weights):
    order = np.argsort(values)
    return float(values[order][np.searchsorted(np.cumsum(weights[order]), 0.5)])


def figure(cases, path):
    import matplotlib.pyplot as plt

    fig, axes = plt.subplots(1, len(cases), figsize=(4.2 * len(cases), 3.6), squeeze=False)
    for ax, (summary, sampled, (log_mass, w)) in zip(axes[0], cases):
        bins = np.linspace(np.log10(PRIOR_MASS[0]), np.log10(PRIOR_MASS[1]), 60)
        ax.hist(log_mass, bins=bins, weights=w, density=True, histtype="stepfilled",
                color="0.8", label=f"prior draws x likelihood\n"
                f"({summary['draws']:.0e}, ESS {summary['reference_effective_draws']:.0f})")
        ax.hist(sampled, bins=bins, density=True, histtype="step", color="C0", lw=1.5,
                label="massfit chain")
        ax.axvline(np.log10(TRUE_MASS), color="k", ls=":", label="truth")
        ax.set_xlabel(r"$\log_{10} M / M_\odot$")
        ax.set_title(f"{100 * summary['fraction_of_orbit']:.0f} % of an orbit: "
                     f"KS = {summary['ks_distance']:.3f}", fontsize=9)
        ax.legend(fontsize=7)
    fig.tight_layout()
    path.parent.mkdir(parents=True, exist_ok=True)
    fig.savefig(path, dpi=150)
    plt.close(fig)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--draws", type=int, default=20_000_000)
    parser.add_argument("--fractions", type=float, nargs="+", default=[0.1, 0.2, 0.3])
    parser.add_argument("--max-steps", type=int, default=30_000)
    parser.add_argument("--walkers", type=int, default=48)
    parser.add_argument("--seed", type=int, default=5)
    parser.add_argument("--results", default=str(ROOT / "validation" / "results"
                                                 / "short_arc.json"))
    parser.add_argument("--figure", default=str(ROOT / "docs" / "figures" / "short_arc.png"))
    args = parser.parse_args(argv)
    if args.draws < 1_000_000:
        parser.error("the reference needs at least 10^6 draws")
    cases = []
    for fraction in args.fractions:
        case = run_case(fraction, args.draws, args.seed, max_steps=args.max_steps,
                        walkers=args.walkers)
        print(json.dumps(case[0]), flush=True)
        cases.append(case)
    figure(cases, Path(args.figure))
    out = Path(args.results)
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(json.dumps([c[0] for c in cases], indent=2) + "\n")
    return 0 if all(c[0]["passed"] for c in cases) else 1


if __name__ == "__main__":
    sys.exit(main())

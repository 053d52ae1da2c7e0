"""Stars about a dark mass: mass, distance and precession scale over ten noise seeds.

The invented Brannock system (:mod:`massfit.scenarios.dark_mass`: REBOUND with
REBOUNDx's first post-Newtonian force, the exact Doppler factor and the light time,
none of it the fitting model's code) is observed with noise seeds 1-10 (``--seeds
30`` for the coverage). Each is fitted with the frame terms and the relativistic terms
(the precession scale sampled; the Doppler and redshift terms to first order, the
default), again with the whole Doppler and redshift factor (``exact_doppler``), and without
the relativistic terms (the negative control). ``--no-noise`` fits the exact data:
the model's own bias in sigmas.

Intervals are the start step's Laplace intervals (least squares and its covariance,
median +- 2 sigma: the 95.45 % interval of a normal posterior). ``--mcmc N`` also runs
the full sampler (``massfit.fit``) on the first N seeds and records its 95.45 %
intervals beside the Laplace ones (slow: tens of minutes per seed on two cores).

Run: ``PYTHONPATH=. python validation/dark_mass.py [--seeds 10] [--mcmc 0]``;
writes ``validation/results/dark_mass.json`` and ``docs/figures/dark_mass.png``.
"""

from __future__ import annotations

import tempfile
import time
from pathlib import Path

import numpy as np
from scipy.stats import binom

from massfit.model.orbit_model import OrbitModel
from massfit.scenarios import dark_mass
from massfit.start.search import find_start

HERE = Path(__file__).parent
QUANTITIES = ("mass", "distance", "precession_scale")


def laplace(model, start) -> dict:
    """Best values and 1-sigma errors of the mass (M_sun), distance (pc) and
    precession scale from the start's covariance (first-order propagation)."""
    theta, cov = start.theta, start.covariance
    col = model.column_of
    sd = np.sqrt(np.diag(cov))
    log_m = theta[col["central.log10_mass"]]
    plx = theta[col["parallax"]]
    out = {"mass": (10 ** log_m, 10 ** log_m * np.log(10) * sd[col["central.log10_mass"]]),
           "distance": (1e3 / plx, 1e3 / plx ** 2 * sd[col["parallax"]]),
           "chi2": float(start.chi2)}
    if "relativity.precession_scale" in col:
        k = col["relativity.precession_scale"]
        out["precession_scale"] = (theta[k], sd[k])
    i, j = col["central.log10_mass"], col["parallax"]
    out["mass_parallax_correlation"] = float(cov[i, j] / (sd[i] * sd[j]))
    return {k: (tuple(float(x) for x in v) if isinstance(v, tuple) else v)
            for k, v in out.items()}


#: The fits of each seed: label -> fit_spec options (``exact_doppler`` absent: the
#: default, the first-order Doppler and redshift terms).
FITS = {"relativistic": {"relativity": True},
        "exact_doppler": {"relativity": True, "exact_doppler": True},
        "newtonian": {"relativity": False}}


def one_seed(seed, mcmc=False, control=True, labels=("relativistic", "exact_doppler"),
             noise=True) -> dict:
    system = dark_mass.brannock_system()
    schedule = dark_mass.brannock_schedule(system)
    truth = {"mass": system.mass, "distance": system.distance_pc, "precession_scale": 1.0}
    record = {"seed": seed}
    labels = tuple(labels) + (("newtonian",) if control else ())
    with tempfile.TemporaryDirectory() as folder:
        obs = dark_mass.simulated_observations(system, schedule, seed=seed, folder=folder,
                                               noise=noise)
        for label in labels:
            t0 = time.time()
            options = FITS[label]
            spec = dark_mass.fit_spec(system, relativity=options["relativity"])
            if "exact_doppler" in options:
                spec.relativity.exact_doppler = options["exact_doppler"]
            model = OrbitModel(obs, spec)
            found = laplace(model, find_start(model))
            found["seconds"] = time.time() - t0
            for q in QUANTITIES:
                if q in found:
                    value, sigma = found[q]
                    found[f"{q}_pull"] = (value - truth[q]) / sigma
                    found[f"{q}_inside_95"] = bool(abs(value - truth[q]) <= 2 * sigma)
            record[label] = found
        if mcmc:
            record["mcmc"] = sampled(obs, system, seed, truth)
    return record


def sampled(obs, system, seed, truth) -> dict:
    """The full sampler's 95.45 % intervals (massfit.fit) for one seed."""
    import massfit

    t0 = time.time()
    result = massfit.fit(obs, dark_mass.fit_spec(system), seed=seed, progress=False)
    summary = result.summary
    out = {"converged": bool(summary["converged"]), "seconds": time.time() - t0}
    blocks = {"mass": summary["central_mass"], "distance": summary["distance"],
              "precession_scale": summary["relativity"]["precession_scale"]}
    for q, block in blocks.items():
        scale = 1.0 / 1.98847e30 if block["unit"] == "kg" else 1.0
        low, high = block["lower_95"] * scale, block["upper_95"] * scale
        out[q] = {"median": block["median"] * scale, "lower_95": low, "upper_95": high,
                  "inside_95": bool(low <= truth[q] <= high)}
    return out


def summarise(report) -> dict:
    seeds = report["seeds"]
    out = {}
    for label in FITS:
        if any(label not in s for s in seeds):
            continue
        part = {}
        for q in QUANTITIES:
            pulls = [s[label][f"{q}_pull"] for s in seeds if f"{q}_pull" in s[label]]
            if not pulls:
                continue
            part[q] = {"inside_95": int(sum(s[label][f"{q}_inside_95"] for s in seeds)),
                       "of": len(pulls), "mean_pull": float(np.mean(pulls)),
                       "sd_pull": float(np.std(pulls, ddof=1)) if len(pulls) > 1 else None}
            first = [s[label][f"{q}_inside_95"] for s in seeds if 1 <= s["seed"] <= 10]
            part[q]["seeds_1_to_10_inside"] = f"{sum(first)} of {len(first)}"
            # How often a model whose intervals hold 95.45 % would have as few inside.
            part[q]["binomial_p_as_few"] = float(binom.cdf(part[q]["inside_95"], len(pulls),
                                                           0.9545))
        part["median_chi2"] = float(np.median([s[label]["chi2"] for s in seeds]))
        out[label] = part
    out["criterion"] = (">= 8 of seeds 1-10 inside the 95 % interval (relativistic fit), "
                        "and over all seeds binomial_p_as_few > 0.05")
    rel = out.get("relativistic")
    out["passed"] = rel is not None and all(
        int(rel[q]["seeds_1_to_10_inside"].split()[0]) >= 8
        and rel[q]["binomial_p_as_few"] > 0.05 for q in QUANTITIES)
    mcmc = [s["mcmc"] for s in seeds if "mcmc" in s]
    if mcmc:
        out["mcmc"] = {q: f"{sum(m[q]['inside_95'] for m in mcmc)} of {len(mcmc)}"
                       for q in QUANTITIES}
        out["mcmc"]["converged"] = f"{sum(m['converged'] for m in mcmc)} of {len(mcmc)}"
    return out


def figure(report, path) -> None:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    seeds = report["seeds"]
    fig, axes = plt.subplots(1, 3, figsize=(11, 3.9), layout="constrained")
    for ax, q in zip(axes, ("mass", "distance", "precession_scale")):
        for offset, label, colour in ((-0.2, "relativistic", "C0"),
                                      (0.0, "exact_doppler", "C2"),
                                      (0.2, "newtonian", "C3")):
            pulls = [s.get(label, {}).get(f"{q}_pull") for s in seeds]
            x = [s["seed"] + offset for s, p in zip(seeds, pulls) if p is not None]
            y = [p for p in pulls if p is not None]
            if y:
                ax.errorbar(x, y, yerr=2.0, fmt="o", color=colour, capsize=2,
                            label=f"{label} fit (±2σ)")
        ax.axhline(0.0, color="k", lw=0.8)
        ax.set_xlabel("noise seed")
        ax.set_ylabel(f"({q.replace('_', ' ')} − truth) / σ")
        ax.set_title(q.replace("_", " "))
    fig.legend(*axes[0].get_legend_handles_labels(), loc="outside lower center", ncol=3,
               fontsize=8, frameon=False)
    fig.suptitle("Invented stars about a dark mass (REBOUNDx 1PN simulation): "
                 "fitted minus true, in Laplace sigmas")
    path.parent.mkdir(parents=True, exist_ok=True)
    fig.savefig(path, dpi=110)


def main():
    from _study import parser, run_or_redraw

    args = parser(__doc__, HERE / "results" / "dark_mass.json",
                  HERE.parent / "docs" / "figures" / "dark_mass.png")
    args.add_argument("--seeds", type=int, default=10)
    args.add_argument("--mcmc", type=int, default=0)
    args.add_argument("--first", type=int, default=1, help="first noise seed")
    args.add_argument("--no-control", action="store_true",
                      help="skip the fits without relativity")
    args.add_argument("--no-noise", action="store_true",
                      help="exact data (errors stated, no noise): the model's own bias")
    options = args.parse_args()

    def compute():
        seeds = []
        for seed in range(options.first, options.first + options.seeds):
            seeds.append(one_seed(seed, mcmc=seed < options.first + options.mcmc,
                                  control=not options.no_control,
                                  noise=not options.no_noise))
            print(seed, {k: [round(seeds[-1][k].get(f"{q}_pull", np.nan), 2)
                             for q in QUANTITIES] for k in FITS if k in seeds[-1]},
                  flush=True)
        return {"seeds": seeds}

    run_or_redraw(options, compute, summarise, figure)


if __name__ == "__main__":
    main()

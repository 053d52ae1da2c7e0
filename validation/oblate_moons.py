"""Invented moons of an oblate planet, fitted end to end with and without J2.

The data come from integrating the full J2 field (massfit.orbits.oblate.
simulate_equatorial_moons: the invented planet *Vessaline*, two inner moons in its
equator), not from the secular model that is fitted. For each noise seed the same
table is fitted twice with :func:`massfit.fit` (start search, emcee, summary): once
with the oblate model (the true J2 and radius) and once with the two-body model. The
J2 fits should hold the true GM inside their intervals about as often as the
intervals say (68 %, 95 %); the two-body fits should miss it, with a far worse chi^2.

    PYTHONPATH=. python validation/oblate_moons.py [--seeds N] [--half-span DAYS]
    PYTHONPATH=. python validation/oblate_moons.py --report-only   # redraw the figure

Writes ``validation/results/oblate_moons.json`` and ``docs/figures/oblate_moons.png``.
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))
sys.path.insert(0, str(HERE))

import _study  # noqa: E402

from massfit import Oblate, SystemSpec, fit, read_observations  # noqa: E402
from massfit.constants import GM_SUN_KM3_S2  # noqa: E402
from massfit.orbits.oblate import simulate_equatorial_moons  # noqa: E402

RESULTS = HERE / "results" / "oblate_moons.json"
FIGURE = HERE.parent / "docs" / "figures" / "oblate_moons.png"


def run_seed(seed, *, half_span, n_obs, max_steps, folder):
    """Both fits of one simulated table; a dict per model."""
    path, truth = simulate_equatorial_moons(folder / f"vessaline_{seed}.ecsv", seed=seed,
                                            half_span=half_span, n_obs=n_obs)
    obs = read_observations(path)
    gm_true = truth["gm_km3_s2"]
    out = {"seed": seed, "true_gm_km3_s2": gm_true, "n_values": 2 * len(obs.astrometry)}
    models = (("j2", Oblate(truth["j2"], f"{truth['radius_km']} km")), ("keplerian", None))
    for label, dynamics in models:
        clock = time.perf_counter()
        result = fit(obs, SystemSpec(dynamics=dynamics), seed=seed, max_steps=max_steps,
                     progress=False)
        gm = result.summary["central_gm"]
        half = 0.5 * (gm["upper_68"] - gm["lower_68"])
        k = result.model.names.index("central.log10_mass")
        adequacy = result.summary["adequacy"]
        out[label] = {
            "gm": gm, "converged": bool(result.converged),
            "inside_68": gm["lower_68"] <= gm_true <= gm["upper_68"],
            "inside_95": gm["lower_95"] <= gm_true <= gm["upper_95"],
            "offset_in_sigma": (gm["median"] - gm_true) / half,
            "relative_offset": gm["median"] / gm_true - 1,
            "start_chi2": float(result.start.chi2),
            "total_chi2": adequacy["total"]["chi2"],
            "reduced_chi2": adequacy["total"]["reduced_chi2"],
            "comparison": adequacy["comparison"],
            "verdicts": adequacy["verdicts"],
            "steps": result.summary["diagnostics"]["steps"],
            "seconds": time.perf_counter() - clock,
            # The GM samples of the first seed, for the figure's histogram.
            "gm_samples": (10 ** result.chain.samples[::4, k] * GM_SUN_KM3_S2
                           ).tolist() if seed == 1 else None,
        }
        print(f"seed {seed} {label:>9}: GM {gm['median']:.8g} (68 %: {gm['lower_68']:.8g}"
              f" .. {gm['upper_68']:.8g}); offset {out[label]['offset_in_sigma']:+.2f} "
              f"sigma; inside 68/95: {out[label]['inside_68']}/{out[label]['inside_95']};"
              f" chi2 {out[label]['total_chi2']:.0f} / {out['n_values']}; converged "
              f"{result.converged}; {out[label]['seconds']:.0f} s", flush=True)
    return out


def figure(report, path):
    import matplotlib.pyplot as plt

    from massfit.plot import PAGE_WIDTH, STYLE

    runs = report["runs"]
    with plt.rc_context(STYLE):
        fig, (left, right) = plt.subplots(1, 2, figsize=(PAGE_WIDTH, 3.0))
        for shift, label, colour in ((-0.12, "j2", "C0"), (0.12, "keplerian", "C3")):
            for k, run in enumerate(runs):
                gm, true = run[label]["gm"], run["true_gm_km3_s2"]
                scale = 1e-4 * true
                y = k + 1 + shift
                left.plot([(gm["lower_95"] - true) / scale, (gm["upper_95"] - true) / scale],
                          [y, y], color=colour, lw=0.8)
                left.plot([(gm["lower_68"] - true) / scale, (gm["upper_68"] - true) / scale],
                          [y, y], color=colour, lw=2.5,
                          label=(("J2 model" if label == "j2" else "two-body model")
                                 if k == 0 else None))
                left.plot((gm["median"] - true) / scale, y, "o", color=colour, ms=3)
        left.axvline(0.0, color="k", lw=0.8, ls="--")
        left.set_xlabel(r"fitted GM $-$ true GM [$10^{-4}$ GM]")
        left.set_ylabel("noise seed")
        left.set_yticks(range(1, len(runs) + 1))
        left.legend(loc="best", fontsize="small")
        left.set_title("68 % (thick) and 95 % intervals", fontsize="small")
        first = runs[0]
        true = first["true_gm_km3_s2"]
        for label, colour, name in (("j2", "C0", "J2 model"),
                                    ("keplerian", "C3", "two-body model")):
            samples = np.asarray(first[label]["gm_samples"])
            right.hist((samples - true) / (1e-4 * true), bins=40, color=colour, alpha=0.6,
                       density=True, label=f"{name} (reduced $\\chi^2$ "
                                           f"{first[label]['reduced_chi2']:.3g})")
        right.axvline(0.0, color="k", lw=0.8, ls="--", label="truth")
        right.set_xlabel(r"GM $-$ true GM [$10^{-4}$ GM]")
        right.set_ylabel("posterior density")
        right.set_title(f"seed {first['seed']}: GM posteriors", fontsize="small")
        right.legend(loc="upper center", fontsize="x-small")
        fig.tight_layout()
        path.parent.mkdir(parents=True, exist_ok=True)
        fig.savefig(path, dpi=150)
    plt.close(fig)


def summarise(report):
    runs = report["runs"]
    out = {}
    for label in ("j2", "keplerian"):
        offsets = np.array([r[label]["offset_in_sigma"] for r in runs])
        out[label] = {
            "inside_68": int(sum(r[label]["inside_68"] for r in runs)),
            "inside_95": int(sum(r[label]["inside_95"] for r in runs)),
            "converged": int(sum(r[label]["converged"] for r in runs)),
            "runs": len(runs),
            "median_abs_offset_in_sigma": float(np.median(np.abs(offsets))),
            "mean_relative_offset": float(np.mean([r[label]["relative_offset"]
                                                   for r in runs])),
            "median_reduced_chi2": float(np.median([r[label]["reduced_chi2"]
                                                    for r in runs])),
        }
    return out


def main(argv=None):
    parser = _study.parser(__doc__, RESULTS, FIGURE)
    parser.add_argument("--seeds", type=int, default=10)
    parser.add_argument("--half-span", type=float, default=150.0,
                        help="the data run from -H to +H days about the epoch")
    parser.add_argument("--n-obs", type=int, default=80, help="epochs per moon")
    parser.add_argument("--max-steps", type=int, default=20000)
    args = parser.parse_args(argv)

    def compute():
        folder = Path(tempfile.mkdtemp(prefix="massfit-oblate-"))
        runs = [run_seed(seed, half_span=args.half_span, n_obs=args.n_obs,
                         max_steps=args.max_steps, folder=folder)
                for seed in range(1, args.seeds + 1)]
        return {"setup": {"half_span_days": args.half_span, "epochs_per_moon": args.n_obs,
                          "max_steps": args.max_steps,
                          "data": "full J2 field integrated with DOP853 "
                                  "(simulate_equatorial_moons)"},
                "runs": runs}

    _study.run_or_redraw(args, compute, summarise, figure)


if __name__ == "__main__":
    main()

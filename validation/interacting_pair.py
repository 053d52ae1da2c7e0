"""An invented interacting pair: recover the central mass and both companions' masses.

The invented system *Tessaly* (``massfit.orbits.nbody.PAIR_TRUTH``): a 1.0 M_sun star with
two companions of 0.003 and 0.006 M_sun (about 3 and 6 Jupiter masses) near a 5:2
period ratio (100 d and 250 d), observed on 60 epochs each over 1000 days in length
units (au, as from an absolute orbit at a known distance), errors 2e-4 au. The data are integrated with
DOP853 at rtol 1e-12; the fits use the n-body model at its default tolerance (1e-12).

For each noise seed the same table is fitted end to end with :func:`massfit.fit`
(two-body search, N-body least squares, emcee) twice:

* the **N-body model**, companions' masses log-uniform from 1e-4 to 0.5 M_sun: the
  mutual pulls measure each mass, and the central mass follows;
* the **two-body model** as a user would run it by default (companions' masses zero):
  each orbit then gives its own M1 + m_k, and one shared mass cannot fit both.

The N-body fit's adequacy block also compares it with a two-body least-squares fit in
which the companions' masses are free too (same parameters), which isolates the
mutual perturbations.

    PYTHONPATH=. python validation/interacting_pair.py [--seeds N] [--max-steps N]
    PYTHONPATH=. python validation/interacting_pair.py --report-only

Writes ``validation/results/interacting_pair.json`` and
``docs/figures/interacting_pair.png``.
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

from massfit import CompanionSpec, NBody, SystemSpec, fit, read_observations  # noqa: E402
from massfit.orbits.nbody import PAIR_TRUTH, simulate_interacting_pair  # noqa: E402
from massfit.priors import LogUniform  # noqa: E402

RESULTS = HERE / "results" / "interacting_pair.json"
FIGURE = HERE.parent / "docs" / "figures" / "interacting_pair.png"
MASS_PRIOR = LogUniform(1e-4, 0.5)


def _interval(samples, truth):
    lo68, med, hi68 = np.percentile(samples, [15.865, 50.0, 84.135])
    lo95, hi95 = np.percentile(samples, [2.275, 97.725])
    return {"median": float(med), "lower_68": float(lo68), "upper_68": float(hi68),
            "lower_95": float(lo95), "upper_95": float(hi95), "truth": truth,
            "inside_68": bool(lo68 <= truth <= hi68),
            "inside_95": bool(lo95 <= truth <= hi95),
            "offset_in_sigma": float((med - truth) / (0.5 * (hi68 - lo68)))}


def _masses(result):
    """Posterior samples (M_sun) of the central mass and of each sampled companion mass."""
    model, samples = result.model, result.chain.samples
    out = {"central": 10 ** samples[:, model.names.index("central.log10_mass")]}
    for name in PAIR_TRUTH["companions"]:
        key = f"{name}.log10_mass"
        if key in model.names:
            out[name] = 10 ** samples[:, model.names.index(key)]
    return out


def run_seed(seed, *, max_steps, folder, keep_samples):
    path = simulate_interacting_pair(folder / f"tessaly_{seed}.ecsv", seed=seed)
    obs = read_observations(path)
    truth = {"central": PAIR_TRUTH["central_mass"],
             **{n: el["mass"] for n, el in PAIR_TRUTH["companions"].items()}}
    out = {"seed": seed, "n_values": 2 * len(obs.astrometry)}
    specs = {
        "n_body": SystemSpec(companions={n: CompanionSpec(n, mass=MASS_PRIOR)
                                         for n in PAIR_TRUTH["companions"]},
                             dynamics=NBody()),
        "keplerian": SystemSpec(),
    }
    for label, spec in specs.items():
        clock = time.perf_counter()
        result = fit(obs, spec, seed=seed, max_steps=max_steps, progress=False)
        masses = _masses(result)
        adequacy = result.summary["adequacy"]
        out[label] = {
            "converged": bool(result.converged),
            "steps": result.summary["diagnostics"]["steps"],
            "max_autocorr_steps": result.summary["diagnostics"]["max_autocorr_steps"],
            "masses": {name: _interval(values, truth[name])
                       for name, values in masses.items()},
            "start_chi2": float(result.start.chi2),
            "total_chi2": adequacy["total"]["chi2"],
            "reduced_chi2": adequacy["total"]["reduced_chi2"],
            "comparison": adequacy["comparison"],
            "verdicts": adequacy["verdicts"],
            "warnings": result.summary["warnings"],
            "seconds": time.perf_counter() - clock,
            "samples": ({name: values[::5].tolist() for name, values in masses.items()}
                        if keep_samples else None),
        }
        for name, block in out[label]["masses"].items():
            print(f"seed {seed} {label:>9} {name:>8}: {block['median']:.6g} (68 %: "
                  f"{block['lower_68']:.6g} .. {block['upper_68']:.6g}); truth "
                  f"{block['truth']}; {block['offset_in_sigma']:+.2f} sigma", flush=True)
        print(f"seed {seed} {label:>9}: chi2 {out[label]['total_chi2']:.1f} / "
              f"{out['n_values']}; converged {result.converged} after "
              f"{out[label]['steps']} steps; {out[label]['seconds']:.0f} s", flush=True)
    return out


def figure(report, path):
    import matplotlib.pyplot as plt

    from massfit.plot import PAGE_WIDTH, STYLE

    first = report["runs"][0]
    names = list(PAIR_TRUTH["companions"])
    with plt.rc_context(STYLE):
        fig, axes = plt.subplots(1, 3, figsize=(PAGE_WIDTH, 2.6))
        ax = axes[0]
        for label, colour, text in (("n_body", "C0", "N-body model"),
                                    ("keplerian", "C3", "two-body model")):
            ax.hist(first[label]["samples"]["central"], bins=40, density=True, alpha=0.6,
                    color=colour, label=f"{text} ($\\chi^2_\\nu$ "
                                        f"{first[label]['reduced_chi2']:.3g})")
        ax.axvline(PAIR_TRUTH["central_mass"], color="k", ls="--", lw=0.8, label="truth")
        ax.set_xlabel(r"central mass [$M_\odot$]")
        ax.set_ylabel("posterior density")
        ax.legend(fontsize="xx-small", loc="upper left")
        for ax, name in zip(axes[1:], names):
            ax.hist(first["n_body"]["samples"][name], bins=40, density=True, alpha=0.6,
                    color="C0")
            ax.axvline(PAIR_TRUTH["companions"][name]["mass"], color="k", ls="--", lw=0.8)
            ax.set_xlabel(rf"mass of {name} [$M_\odot$]")
            ax.set_yticks([])
        fig.suptitle(f"invented interacting pair, seed {first['seed']} "
                     "(dashed: truth; companions: N-body model)", fontsize="small")
        fig.tight_layout()
        path.parent.mkdir(parents=True, exist_ok=True)
        fig.savefig(path, dpi=150)
    plt.close(fig)


def summarise(report):
    out = {}
    for label in ("n_body", "keplerian"):
        runs = [r[label] for r in report["runs"]]
        out[label] = {"runs": len(runs), "converged": sum(r["converged"] for r in runs),
                      "median_reduced_chi2": float(np.median([r["reduced_chi2"]
                                                              for r in runs]))}
        for name in runs[0]["masses"]:
            out[label][name] = {
                "inside_68": sum(r["masses"][name]["inside_68"] for r in runs),
                "inside_95": sum(r["masses"][name]["inside_95"] for r in runs),
                "offsets_in_sigma": [r["masses"][name]["offset_in_sigma"] for r in runs]}
    return out


def main(argv=None):
    parser = _study.parser(__doc__, RESULTS, FIGURE)
    parser.add_argument("--seeds", type=int, default=3)
    parser.add_argument("--max-steps", type=int, default=30000)
    args = parser.parse_args(argv)

    def compute():
        folder = Path(tempfile.mkdtemp(prefix="massfit-pair-"))
        runs = [run_seed(seed, max_steps=args.max_steps, folder=folder,
                         keep_samples=(seed == 1)) for seed in range(1, args.seeds + 1)]
        return {"setup": {"truth": PAIR_TRUTH, "max_steps": args.max_steps,
                          "companion_mass_prior": "log-uniform 1e-4 .. 0.5 M_sun"},
                "runs": runs}

    _study.run_or_redraw(args, compute, summarise, figure)


if __name__ == "__main__":
    main()

"""Simulation-based calibration of the central mass.

Draws invented systems from a known prior (1 to 4 companions; good phase coverage, where
the data span several orbits, or poor, where they cover a fifth to a half of one),
simulates noisy relative astrometry, fits each with massfit under that same prior, and
counts how often the true central mass falls inside the reported 68.27 % and 95.45 %
intervals. If the posteriors are calibrated, each count is binomial with those
probabilities; the script says whether the counts lie inside the binomial bounds and
draws the figures in ``docs/figures/``.

Run from the repository root (not part of the test suite; about 200 small fits)::

    PYTHONPATH=. python validation/calibration.py --systems 200 --workers 2

Results are appended to ``validation/results/calibration.jsonl`` one system at a time,
so an interrupted study continues where it stopped.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("MPLBACKEND", "Agg")

import numpy as np  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _study import read_records  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
SPAN_DAYS = 1000.0  # time covered by the data of every system
ERROR_AU = 0.02  # 1-sigma error of each offset, the same for every system
MASS_RANGE = (0.5, 2.0)  # log-uniform prior of the central mass, M_sun
ECC_HIGH = 0.8  # uniform eccentricity prior on [0, ECC_HIGH)
PERIOD_RANGES = {"good": (SPAN_DAYS / 8, SPAN_DAYS / 2),  # 2 to 8 orbits in the span
                 "poor": (2 * SPAN_DAYS, 5 * SPAN_DAYS)}  # 20 to 50 % of one orbit
NAMES = ("Arlo", "Brin", "Cesk", "Dunmo")
LEVELS = (0.6827, 0.9545)


def system_design(index, base_seed=2026, *, companions=None, coverage=None, epochs=12):
    """Companions, coverage and true parameters of simulated system ``index``.

    By default the systems cycle through 1 to 4 companions, and alternate between good
    and poor coverage every four systems; ``companions`` and ``coverage`` fix them.
    """
    rng = np.random.default_rng([base_seed, index])
    n_comp = companions if companions is not None else 1 + index % 4
    if coverage is None:
        coverage = "good" if (index // 4) % 2 == 0 else "poor"
    low, high = PERIOD_RANGES[coverage]
    mass = float(np.exp(rng.uniform(*np.log(MASS_RANGE))))
    companions = {}
    for name in NAMES[:n_comp]:
        period = float(np.exp(rng.uniform(np.log(low), np.log(high))))
        companions[name] = {
            "period": period, "ecc": float(rng.uniform(0.0, ECC_HIGH)),
            "inc": float(np.degrees(np.arccos(rng.uniform(-1.0, 1.0)))),
            "omega": float(rng.uniform(0.0, 360.0)), "node": float(rng.uniform(0.0, 360.0)),
            "periapsis_time": float(2460000.0 + rng.uniform(0.0, period)),
            "epochs": np.sort(2460000.0 + rng.uniform(0.0, SPAN_DAYS, epochs)).tolist(),
        }
    return {"index": index, "n_companions": n_comp, "coverage": coverage,
            "central_mass": mass, "companions": companions, "noise_seed": 7919 * index + 1}


def fit_system(design, *, walkers=None, max_steps=50_000, check_every=250,
               keep_samples=False):
    """Simulate and fit one system; return the truth's place in the posterior.

    With ``keep_samples`` the record also holds the central-mass samples (M_sun).
    """
    import astropy.units as u
    from astropy.time import Time

    import massfit
    from massfit.model.specs import CompanionSpec, SystemSpec
    from massfit.priors import LogUniform, Uniform
    from massfit.scenarios.simulate import Elements, read_back, simulate_astrometry

    elements, times = {}, {}
    for name, comp in design["companions"].items():
        elements[name] = Elements(**{k: v for k, v in comp.items() if k != "epochs"})
        times[name] = Time(comp["epochs"], format="jd", scale="tdb")
    table = simulate_astrometry(times, elements, design["central_mass"],
                                error=ERROR_AU * u.au, seed=design["noise_seed"])
    low, high = PERIOD_RANGES[design["coverage"]]
    spec = SystemSpec(central_mass=LogUniform(*MASS_RANGE), strict_companions=True,
                      companions={name: CompanionSpec(name, period=LogUniform(low, high),
                                                      eccentricity=Uniform(0.0, ECC_HIGH))
                                  for name in elements})
    started = time.perf_counter()
    obs = read_back(table, name="system.ecsv")
    n_dim = 1 + 6 * design["n_companions"]
    result = massfit.fit(obs, spec, seed=design["index"] + 1,
                         walkers=walkers or max(24, 2 * n_dim + 2), max_steps=max_steps,
                         check_every=check_every, progress=False)
    masses = result.samples["central_mass_solar"]
    truth = design["central_mass"]
    rank = float(np.mean(masses < truth))  # the truth's posterior quantile
    record = {"index": design["index"], "n_companions": design["n_companions"],
            "coverage": design["coverage"], "truth": truth, "quantile": rank,
            "median": float(np.median(masses)), "converged": result.converged,
            "steps": result.summary["diagnostics"]["steps"],
            "effective_samples": result.summary["diagnostics"]["effective_samples"],
            "prior_sensitive": bool((result.summary.get("prior_sensitivity") or {})
                                    .get("sensitive", False)),
            # Why a fit is not converged: too few autocorrelation times (needs 50, and
            # an estimate that has settled), or walkers stuck in separate modes.
            "autocorr_multiple": result.summary["diagnostics"]["steps"]
            / result.summary["diagnostics"]["max_autocorr_steps"],
            "unmixed_modes": sum(not m["walkers_cross"]
                                 for m in result.checks["posterior_modes"]),
            "sampled_as_state": result.summary["diagnostics"]["sampled_as_state"],
            "seconds": time.perf_counter() - started}
    if keep_samples:
        record["samples"] = np.asarray(masses)
    return record


def inside(quantile, level):
    """Whether a truth at posterior quantile ``quantile`` is in the central interval."""
    tail = 0.5 * (1.0 - level)
    return tail <= quantile <= 1.0 - tail


def binomial_bounds(n, p, confidence=0.99):
    """Counts between which a Binomial(n, p) falls with the given probability."""
    from scipy.stats import binom

    low, high = binom.interval(confidence, n, p)
    return int(low), int(high)


def assess(records, confidence=0.99):
    """Counts of truths inside each interval, their binomial bounds and a verdict."""
    n = len(records)
    out = {"systems": n, "converged": int(sum(r["converged"] for r in records)),
           "confidence_of_bounds": confidence, "levels": {}}
    for level in LEVELS:
        count = int(sum(inside(r["quantile"], level) for r in records))
        low, high = binomial_bounds(n, level, confidence)
        out["levels"][f"{level:.4f}"] = {"inside": count, "fraction": count / n,
                                         "bounds": [low, high],
                                         "within_bounds": low <= count <= high}
    return out


def figures(records, folder):
    """Rank histogram, coverage curve and coverage by class; returns the paths."""
    import matplotlib.pyplot as plt
    from scipy.stats import binom

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    q = np.array([r["quantile"] for r in records])
    n = q.size
    paths = []

    fig, ax = plt.subplots(figsize=(5.5, 3.8))
    bins = 10
    ax.hist(q, bins=bins, range=(0, 1), color="0.6", edgecolor="k")
    low, high = binom.interval(0.99, n, 1 / bins)
    ax.axhspan(low, high, color="C0", alpha=0.2, label="99 % binomial band (calibrated)")
    ax.axhline(n / bins, color="C0")
    ax.set_xlabel("posterior quantile of the true central mass")
    ax.set_ylabel("systems")
    ax.set_title(f"Simulation-based calibration, {n} invented systems")
    ax.legend(loc="lower center", fontsize=8)
    fig.tight_layout()
    paths.append(folder / "calibration_ranks.png")
    fig.savefig(paths[-1], dpi=150)
    plt.close(fig)

    fig, ax = plt.subplots(figsize=(4.6, 4.2))
    levels = np.linspace(0.02, 0.98, 49)
    frac = np.array([np.mean([inside(x, lv) for x in q]) for lv in levels])
    lo, hi = binom.interval(0.99, n, levels)
    ax.fill_between(levels, lo / n, hi / n, color="C0", alpha=0.2, label="99 % binomial band")
    ax.plot([0, 1], [0, 1], color="C0")
    ax.plot(levels, frac, color="k", label="massfit")
    for level in LEVELS:
        ax.axvline(level, color="0.7", ls=":")
    ax.set_xlabel("credibility of the central interval")
    ax.set_ylabel("fraction of true masses inside")
    ax.legend(fontsize=8)
    fig.tight_layout()
    paths.append(folder / "calibration_coverage.png")
    fig.savefig(paths[-1], dpi=150)
    plt.close(fig)

    fig, ax = plt.subplots(figsize=(6.4, 3.8))
    labels, x = [], 0
    for coverage in ("good", "poor"):
        for n_comp in (1, 2, 3, 4):
            group = [r for r in records if r["coverage"] == coverage
                     and r["n_companions"] == n_comp]
            if not group:
                continue
            for k, level in enumerate(LEVELS):
                m = len(group)
                f = np.mean([inside(r["quantile"], level) for r in group])
                lo, hi = binom.interval(0.99, m, level)
                ax.errorbar(x + 0.18 * (2 * k - 1), level, yerr=[[level - lo / m],
                            [hi / m - level]], color=f"C{k}", alpha=0.4, capsize=3)
                ax.plot(x + 0.18 * (2 * k - 1), f, "o", color=f"C{k}",
                        label=f"{level * 100:.2f} % interval" if x == 0 else None)
            labels.append(f"{n_comp} comp.\n{coverage}\n(n={len(group)})")
            x += 1
    ax.set_xticks(range(len(labels)), labels, fontsize=7)
    ax.set_ylabel("fraction of true masses inside")
    ax.set_ylim(0, 1.05)
    ax.legend(fontsize=8, loc="lower left")
    ax.set_title("Coverage by class (bars: 99 % binomial range)", fontsize=9)
    fig.tight_layout()
    paths.append(folder / "calibration_classes.png")
    fig.savefig(paths[-1], dpi=150)
    plt.close(fig)
    return paths


def _worker(args):
    index, options = args
    design = system_design(index)
    try:
        return fit_system(design, **options)
    except Exception as exc:  # a failed fit is a result of the study: record it
        return {"index": index, "n_companions": design["n_companions"],
                "coverage": design["coverage"], "failed": f"{type(exc).__name__}: {exc}"}


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--systems", type=int, default=200)
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--max-steps", type=int, default=50_000,
                        help="step cap of each fit (default: massfit's own)")
    parser.add_argument("--results", default=str(ROOT / "validation" / "results"
                                                 / "calibration.jsonl"))
    parser.add_argument("--figures", default=str(ROOT / "docs" / "figures"))
    parser.add_argument("--report-only", action="store_true",
                        help="only assess and draw what is already in the results file")
    parser.add_argument("--refit-capped", type=int, metavar="MAX_STEPS", default=None,
                        help="refit the systems of the results file that did not "
                             "converge, with this step cap, into calibration_refit.jsonl "
                             "beside it (resumes; the first study is left as it is)")
    args = parser.parse_args(argv)
    if args.refit_capped is not None:
        return refit_capped(Path(args.results), args.refit_capped, args.workers,
                            fit=not args.report_only)
    results = Path(args.results)
    results.parent.mkdir(parents=True, exist_ok=True)
    done = read_records(results)
    todo = [k for k in range(args.systems) if k not in done]
    if todo and not args.report_only:
        from multiprocessing import Pool

        options = {"max_steps": args.max_steps}
        with Pool(args.workers) as pool, open(results, "a") as handle:
            for record in pool.imap_unordered(_worker, [(k, options) for k in todo]):
                handle.write(json.dumps(record) + "\n")
                handle.flush()
                done[record["index"]] = record
                if "failed" in record:
                    print(f"system {record['index']:3d}: FAILED {record['failed']}", flush=True)
                    continue
                print(f"system {record['index']:3d}: {record['n_companions']} companion(s), "
                      f"{record['coverage']:4s} coverage, quantile {record['quantile']:.3f}, "
                      f"converged {record['converged']}, {record['seconds']:.0f} s",
                      flush=True)
    everything = [done[k] for k in sorted(done) if k < args.systems]
    records = [r for r in everything if "failed" not in r]
    verdict = assess(records)
    verdict["failed_fits"] = [{"index": r["index"], "reason": r["failed"]}
                              for r in everything if "failed" in r]
    verdict["converged_only"] = assess([r for r in records if r["converged"]])
    figures(records, args.figures)
    (results.parent / "calibration_summary.json").write_text(json.dumps(verdict, indent=2)
                                                             + "\n")
    print(json.dumps(verdict, indent=2))
    ok = all(v["within_bounds"] for v in verdict["levels"].values())
    return 0 if ok else 1


def refit_capped(results, max_steps, workers, *, fit=True):
    """Refit the unconverged systems of ``results`` with a longer step cap.

    Writes ``calibration_refit.jsonl`` and ``calibration_refit_summary.json`` beside
    ``results``: the refitted systems alone, and the whole study with each refitted
    system's new fit in place of its capped one (systems not yet refitted keep theirs).
    """
    from multiprocessing import Pool

    first = read_records(results)
    capped = sorted(k for k, r in first.items() if "failed" not in r and not r["converged"])
    store = results.parent / "calibration_refit.jsonl"
    refits = read_records(store)
    todo = [k for k in capped if k not in refits] if fit else []
    options = {"max_steps": max_steps}
    with Pool(workers) as pool, open(store, "a") as handle:
        for record in pool.imap_unordered(_worker, [(k, options) for k in todo]):
            record["max_steps"] = max_steps
            handle.write(json.dumps(record) + "\n")
            handle.flush()
            refits[record["index"]] = record
            print(f"system {record['index']:3d}: refitted, converged "
                  f"{record.get('converged')}, quantile {record.get('quantile', float('nan')):.3f}, "
                  f"{record.get('seconds', 0):.0f} s", flush=True)
    done = [r for r in refits.values() if "failed" not in r]
    merged = [refits.get(k, r) for k, r in sorted(first.items()) if "failed" not in r]
    verdict = {"max_steps": max_steps, "capped_in_first_study": len(capped),
               "refitted_so_far": len(done),
               "refitted": assess(done) if done else None,
               "refitted_converged": assess([r for r in done if r["converged"]])
               if any(r["converged"] for r in done) else None,
               "whole_study_with_refits": assess(merged),
               "whole_study_with_refits_converged_only":
                   assess([r for r in merged if r["converged"]])}
    (results.parent / "calibration_refit_summary.json").write_text(
        json.dumps(verdict, indent=2) + "\n")
    print(json.dumps(verdict, indent=2))
    return 0


if __name__ == "__main__":
    sys.exit(main())

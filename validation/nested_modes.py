"""The nested engine's mode weights against known weights, over many seeds.

A posterior with two separated modes of set masses (the toy model of
``tests/test_nested.py``: two narrow bumps in log10 P under a log-uniform period
prior, and a nuisance coordinate). For each seed :func:`massfit.sample.nested.run_nested`
weighs the modes, each in its own period box; the pull (found - true) / stated error of
the first mode's weight should be about standard normal (|pull| < 1 in ~68 % of seeds,
< 2 in ~95 %). A negative control pulls against the wrong weights.

    PYTHONPATH=. python validation/nested_modes.py --seeds 20 --live 100

Writes ``validation/results/nested_modes.json``.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path
from types import SimpleNamespace

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent / "tests"))

from test_nested import _two_mode_model  # noqa: E402

from massfit.sample.nested import NestedSettings, run_nested  # noqa: E402

OUT = HERE / "results" / "nested_modes.json"


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seeds", type=int, default=20)
    parser.add_argument("--live", type=int, default=100)
    parser.add_argument("--weights", type=float, nargs=2, default=[0.7, 0.3])
    args = parser.parse_args(argv)
    weights, centres = tuple(args.weights), (0.8, 2.1)
    truth = weights[0] / sum(weights)
    model = _two_mode_model(weights, centres)
    start = SimpleNamespace(candidate_modes=[
        {"periods": {"b": 10 ** c}, "log10_period_sd": {"b": 0.01}, "weight": 0.5}
        for c in centres])
    rows = []
    for seed in range(args.seeds):
        chain = run_nested(model, start, NestedSettings(live_points=args.live, runs=2,
                                                        seed=seed))
        first = chain.modes[0]
        rows.append({"seed": seed, "weight": first["probability"],
                     "error": first["probability_err"],
                     "runs": first["probability_runs"], "converged": chain.converged,
                     "pull": (first["probability"] - truth) / first["probability_err"],
                     "pull_wrong": (first["probability"] - (1 - truth))
                     / first["probability_err"]})
        print(f"seed {seed}: {first['probability']:.3f} +- {first['probability_err']:.3f} "
              f"(runs {first['probability_runs']}), pull {rows[-1]['pull']:+.2f}", flush=True)
    pulls = np.array([r["pull"] for r in rows])
    wrong = np.array([r["pull_wrong"] for r in rows])
    summary = {"true_weight": truth, "live_points": args.live, "seeds": args.seeds,
               "within_1_sigma": float(np.mean(np.abs(pulls) < 1)),
               "within_2_sigma": float(np.mean(np.abs(pulls) < 2)),
               "pull_mean": float(pulls.mean()), "pull_sd": float(pulls.std(ddof=1)),
               "wrong_within_2_sigma": float(np.mean(np.abs(wrong) < 2)),
               "all_converged": all(r["converged"] for r in rows), "rows": rows}
    OUT.parent.mkdir(parents=True, exist_ok=True)
    OUT.write_text(json.dumps(summary, indent=1))
    print({k: v for k, v in summary.items() if k != "rows"})


if __name__ == "__main__":
    main()

"""dynesty's ways of sampling compared on massfit's own posterior (why the defaults).

The posterior of the invented yearly-sampled :func:`massfit.scenarios.examples.tamsin`
(seed 4), each alias in its own period box (:mod:`massfit.sample.nested`). For each
setting (static or dynamic sampler; random slices "rslice" or random walks "rwalk")
every box is run ``--repeats`` times with independent seeds. Reported per setting and
box: the mean stated ln Z error, the scatter of ln Z between the repeats (the stated
error is honest when the two agree), the likelihood calls and the seconds.

Usage::

    PYTHONPATH=. python validation/nested_engines.py --live 100 --repeats 3

Writes ``validation/results/nested_engines.json``.
"""

from __future__ import annotations

import argparse
import json
from pathlib import Path

import numpy as np

from massfit.model.orbit_model import OrbitModel
from massfit.model.specs import SystemSpec
from massfit.priors import Fixed
from massfit.sample.nested import NestedSettings, boxes_of, nested_box
from massfit.scenarios.examples import tamsin
from massfit.scenarios.simulate import read_back
from massfit.start.search import find_start

OUT = Path(__file__).parent / "results" / "nested_engines.json"
SETTINGS = {"static rslice": dict(sample="rslice", dynamic=False),
            "static rwalk": dict(sample="rwalk", dynamic=False),
            "dynamic rslice": dict(sample="rslice", dynamic=True)}


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--live", type=int, default=100)
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--settings", nargs="+", default=list(SETTINGS))
    parser.add_argument("--boxes", type=int, nargs="+", default=None,
                        help="only these boxes (0: the heaviest by Laplace weight)")
    parser.add_argument("--out", default=str(OUT))
    args = parser.parse_args(argv)
    table, _ = tamsin(4)
    model = OrbitModel(read_back(table), SystemSpec(parallax=Fixed(25.0)))
    start = find_start(model)
    plan = boxes_of(start, model)
    plan = plan if args.boxes is None else [plan[k] for k in args.boxes]
    out = []
    for label in args.settings:
        settings = NestedSettings(live_points=args.live, **SETTINGS[label])
        for mode, boxes in plan:
            centres = None if mode is None else mode.get("window_centres")
            runs = [nested_box(model, settings, 100 + r, boxes, centres)
                    for r in range(args.repeats)]
            log_z = np.array([r["log_z"] + r["log_box_mass"] for r in runs])
            row = {"setting": label, "period": mode["periods"] if mode else None,
                   "log_z": log_z.tolist(),
                   "stated_err": float(np.mean([r["log_z_err"] for r in runs])),
                   "scatter": float(np.std(log_z, ddof=1)),
                   "calls": float(np.mean([r["calls"] for r in runs])),
                   "seconds": float(np.mean([r["seconds"] for r in runs]))}
            out.append(row)
            print(f"{label:15s} P {row['period']}: ln Z {np.round(log_z, 2)}  stated "
                  f"{row['stated_err']:.2f}  scatter {row['scatter']:.2f}  calls "
                  f"{row['calls']:.0f}  {row['seconds']:.0f} s", flush=True)
            Path(args.out).parent.mkdir(parents=True, exist_ok=True)
            Path(args.out).write_text(json.dumps({"live_points": args.live, "rows": out}, indent=1))


if __name__ == "__main__":
    main()

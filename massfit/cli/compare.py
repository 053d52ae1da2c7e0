"""``massfit compare``: one data set under several models, weighed by their evidence.

Each model is a TOML config (its dynamics, companions, trend, priors); every config
must read the same observation files (the same content). Thin over
:func:`massfit.compare.compare_models`.
"""

from __future__ import annotations

import hashlib
import sys
from dataclasses import replace
from pathlib import Path

from massfit.cli.status import EXIT_NOT_CONVERGED, EXIT_OK
from massfit.errors import ConfigError

__all__ = ["add_parser", "run"]

DESCRIPTION = ("Fit one data set under several models, one TOML config each (two-body, "
               "J2, mutual pulls; N or N+1 companions; with or without a velocity trend), "
               "with the nested sampler, and report each model's log-evidence with its "
               "error, the Bayes factors, the central mass under each model and averaged "
               "over them. Exit status: 0 every model's fit converged, 2 bad input, 3 "
               "some fit did not converge.")


def add_parser(sub):
    """Add the ``compare`` command to the subparsers ``sub``."""
    parser = sub.add_parser("compare", help="compare models of one data set by evidence",
                            description=DESCRIPTION)
    parser.add_argument("configs", nargs="+", metavar="CONFIG.toml",
                        help="one config per model (labelled by the file's name)")
    parser.add_argument("--out", metavar="DIR", required=True,
                        help="folder for comparison.json and comparison.txt")
    parser.add_argument("--seed", type=int, metavar="N", help="random seed (repeats the run)")
    parser.add_argument("--live-points", type=int, metavar="N",
                        help="live points per nested run (default: each config's, or 75 "
                             "per sampled coordinate)")
    parser.add_argument("--force", action="store_true",
                        help="replace a comparison massfit wrote in the output folder")
    parser.add_argument("--quiet", action="store_true", help="print only the table")
    return parser


def _digest(paths):
    out = []
    for path in paths:
        try:
            out.append(hashlib.sha256(Path(path).read_bytes()).hexdigest())
        except OSError as exc:
            raise ConfigError(f"cannot read the observation file ({exc.strerror})",
                              key=str(path)) from None
    return sorted(out)


def run(args) -> int:
    """Run the comparison the parsed ``args`` ask for; returns the exit status."""
    from massfit.compare import compare_models
    from massfit.config.fit import load_config
    from massfit.read.tables import read_observations
    from massfit.sample.chain import check_seed
    from massfit.write.folder import check_output_folder

    check_seed(args.seed, key="--seed")
    if len(args.configs) < 2:
        raise ConfigError("give at least two configs, one per model", key="configs")
    setups = {}
    for name in args.configs:
        label = Path(name).stem
        if label in setups:
            raise ConfigError(f"two configs are both labelled '{label}' (by their file "
                              f"names); rename one", key=name)
        setups[label] = load_config(name)
    first_label, first = next(iter(setups.items()))
    data = _digest(first.files)
    for label, setup in setups.items():
        if _digest(setup.files) != data:
            raise ConfigError(f"its [data] files differ from those of '{first_label}'; "
                              f"every model must be fitted to the same observations",
                              key=f"{label}.toml: data.files")
    inputs = [f for setup in setups.values() for f in setup.files]
    check_output_folder(Path(args.out), force=args.force, inputs=inputs)
    nested = first.nested
    if args.live_points is not None:
        nested = replace(nested, live_points=args.live_points)
        nested.check(key_prefix="--")
    observations = read_observations(first.files, **first.read_options)
    if not args.quiet:
        print(f"massfit: comparing {len(setups)} models of {observations.rows_used} rows "
              f"with the nested sampler...", file=sys.stderr)
    comparison = compare_models(observations, {k: s.system for k, s in setups.items()},
                                nested=nested, seed=args.seed)
    comparison.save(args.out, force=args.force, inputs=inputs)
    print(comparison.report())
    print(f"\nwritten to {args.out}/")
    return EXIT_OK if comparison.summary["all_converged"] else EXIT_NOT_CONVERGED

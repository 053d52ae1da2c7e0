"""``massfit batch``: fit many systems and gather one results table."""

from __future__ import annotations

import sys
from pathlib import Path

from massfit.cli.options import sampler_options, sampler_overrides
from massfit.cli.status import EXIT_INTERRUPTED, EXIT_NOT_CONVERGED, EXIT_OK

__all__ = ["add_parser", "run"]


def add_parser(sub):
    batch = sub.add_parser(
        "batch", help="fit many systems and gather one results table",
        description="Fit every system of a folder of TOML configs, or of a table (CSV/"
                    "ECSV) with columns system, files (';'-separated) and optionally "
                    "config, parallax, parallax_err, distance, seed. Writes "
                    "OUT/results.ecsv and OUT/systems/<system>/; systems already "
                    "finished are read back, not fitted again.",
        epilog="Exit status: 0 every system converged, 2 bad input or option, 3 some "
               "system failed or did not converge (see results.ecsv), 130 interrupted "
               "(results.ecsv marks the unfinished systems 'not run').")
    batch.add_argument("source", metavar="FOLDER | TABLE",
                       help="a folder of *.toml configs, or a table of systems")
    batch.add_argument("--out", metavar="DIR", required=True, help="output folder")
    where = batch.add_mutually_exclusive_group()
    where.add_argument("--workers", type=int, metavar="N",
                       help="local worker processes (default: one per CPU)")
    where.add_argument("--scheduler", metavar="ADDRESS",
                       help="run on an existing dask.distributed cluster, e.g. "
                            "tcp://10.0.0.5:8786")
    sampler_options(batch)
    batch.add_argument("--plots", action="store_true", help="write each system's figures")
    batch.add_argument("--rerun", action="store_true",
                       help="fit again the systems that already have a result")


def run(args):
    from massfit.batch import NOT_RUN, RESULTS_FILE, collect_jobs, run_batch

    # The seed is the batch's base seed (each system gets its own from it).
    overrides = sampler_overrides(args, ("walkers", "max_steps", "check_every", "threads"))
    jobs = collect_jobs(args.source, args.out, seed=args.seed, sampler=overrides,
                        plots=args.plots)
    results = Path(args.out) / RESULTS_FILE
    try:
        table = run_batch(jobs, args.out, workers=args.workers, scheduler=args.scheduler,
                          rerun=args.rerun)
    except KeyboardInterrupt:
        print(f"massfit batch: interrupted; {results} lists the systems finished and "
              f"marks the others '{NOT_RUN}' (run the same command to fit them)",
              file=sys.stderr)
        return EXIT_INTERRUPTED
    counts = {status: int(sum(table["status"] == status))
              for status in ("converged", "not converged", "failed")}
    open_mass = int(sum((table["status"] == "converged")
                        & (table["measured"] == "mass function only")))
    of_them = (f" ({open_mass} of them from velocities alone: mass function and minimum "
               f"mass only)" if open_mass else "")
    print(f"massfit batch: {len(table)} system(s): {counts['converged']} converged"
          f"{of_them}, {counts['not converged']} not converged, {counts['failed']} "
          f"failed; table in {results}")
    for row in table:
        if row["status"] == "failed":
            print(f"  {row['system']}: {row['failure']}", file=sys.stderr)
    return EXIT_OK if counts["converged"] == len(table) else EXIT_NOT_CONVERGED

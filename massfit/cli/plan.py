"""``massfit plan``: forecast the mass precision of a schedule and choose the next epochs."""

from __future__ import annotations

from pathlib import Path

from massfit.cli.status import EXIT_OK

__all__ = ["add_parser", "run"]


def add_parser(sub):
    plan = sub.add_parser(
        "plan", help="forecast the mass precision of a schedule and choose the next epochs",
        description="Forecast the central mass's precision for candidate epochs and rank "
                    "them. Give a plan config (TOML, with an [assumed] system or a "
                    "fit_folder), or a finished fit's output folder with the candidate "
                    "epochs as options.")
    plan.add_argument("source", metavar="PLAN.toml | FIT_FOLDER",
                      help="a plan config, or the output folder of 'massfit fit'")
    plan.add_argument("--candidates", metavar="FILE", help="candidate epochs: a CSV/ECSV "
                      "table with 'time' and 'error' (optional 'body', 'distance')")
    plan.add_argument("--start", metavar="TIME", help="first candidate epoch of an evenly "
                      "spaced range (ISO date, or a number with --time-format)")
    plan.add_argument("--stop", metavar="TIME", help="last candidate epoch of the range")
    plan.add_argument("--every", metavar="'VALUE UNIT'", help="cadence of the range, "
                      "e.g. '30 d'")
    plan.add_argument("--error", metavar="'VALUE UNIT'", help="expected 1-sigma error of "
                      "each of east and north, e.g. '0.5 mas' (for the range, or a file "
                      "without an error column)")
    plan.add_argument("--error-unit", metavar="UNIT", help="unit of a plain CSV's error "
                      "column, e.g. 'mas'")
    plan.add_argument("--observed", metavar="FILE", help="epochs already in hand (an "
                      "assumed system only)")
    plan.add_argument("--next", type=int, metavar="N", dest="n_next",
                      help="how many next epochs to choose (default 5)")
    plan.add_argument("--check", type=int, metavar="N", help="simulate and fit N schedules "
                      "(0-3: planned, evenly spaced, all candidates) to test the forecast")
    plan.add_argument("--check-steps", type=int, metavar="N",
                      help="step cap of each check's chain (default 2000)")
    plan.add_argument("--seed", type=int, metavar="N", help="random seed")
    plan.add_argument("--time-format", metavar="NAME", help="astropy Time format of "
                      "numeric times (jd, mjd, jyear, ...)")
    plan.add_argument("--time-scale", metavar="NAME", help="time scale of the times given "
                      "(utc, tt, tdb, ...)")
    plan.add_argument("--out", metavar="DIR", help="output folder (required unless the "
                      "config names one)")
    plan.add_argument("--no-plots", action="store_true", help="skip the figure")
    plan.add_argument("--force", action="store_true", help="replace a plan or result "
                      "massfit wrote in the output folder (only its own files)")



def run(args):
    from massfit.write.folder import check_output_folder
    from massfit.plan.planner import plan_observations
    from massfit.config.plan import plan_setup

    options = {k: getattr(args, k) for k in (
        "candidates", "start", "stop", "every", "error", "error_unit", "observed", "n_next",
        "check",
        "check_steps", "seed", "time_format", "time_scale", "out")}
    setup = plan_setup(args.source, **options)
    out = Path(setup.output)
    force = args.force or setup.replace_existing
    inputs = [p for p in (args.source, args.candidates, args.observed) if p is not None]
    check_output_folder(out, force=force, inputs=inputs)
    result = plan_observations(setup.source, setup.candidates, observed=setup.observed,
                               n_next=setup.n_next, check=setup.check,
                               check_steps=setup.check_steps, seed=setup.seed)
    result.save(out, plots=setup.plots and not args.no_plots, force=force)
    print(result.report())
    print(f"\nwritten to {out}/")
    return EXIT_OK


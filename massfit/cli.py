"""The ``massfit`` command: a thin layer over the Python API.

Exit status: 0 done and converged; 2 a problem with the input, the config or an option
(one line on stderr, no traceback); 3 the fit finished but did not converge (the
result is written and flagged); 130 interrupted (``fit`` keeps a checkpoint in the
output folder's partial area, and ``--resume`` continues from it).
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from .errors import ConfigError, MassfitError

__all__ = ["main", "EXIT_OK", "EXIT_USER_ERROR", "EXIT_NOT_CONVERGED"]

EXIT_OK = 0
EXIT_USER_ERROR = 2
EXIT_NOT_CONVERGED = 3
EXIT_INTERRUPTED = 130


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="massfit",
        description="Measure the mass of a central body from the orbits of its "
                    "companions (relative astrometry and radial velocities), sampled "
                    "with emcee.",
        epilog="Exit status: 0 converged, 2 bad input or option, 3 not converged.")
    from . import __version__

    parser.add_argument("--version", action="version", version=f"massfit {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")

    fit = sub.add_parser(
        "fit", help="fit observation files or a TOML config",
        description="Fit all companions with one shared central mass. Give a TOML config, "
                    "or observation files (CSV/ECSV): every body in them becomes a "
                    "companion of one primary, with default priors.")
    fit.add_argument("inputs", nargs="+", metavar="CONFIG.toml | FILE",
                     help="a TOML config, or one or more observation tables")
    fit.add_argument("--out", metavar="DIR", help="output folder (required unless the "
                     "config names one)")
    fit.add_argument("--parallax", metavar="'VALUE UNIT'", help="system parallax, e.g. "
                     "'48.2 mas'; fixed unless --parallax-err is given")
    fit.add_argument("--parallax-err", metavar="'VALUE UNIT'",
                     help="1-sigma error of the parallax (Gaussian prior)")
    fit.add_argument("--distance", metavar="'VALUE UNIT'", help="fixed distance, e.g. "
                     "'20.7 pc'")
    fit.add_argument("--time-format", metavar="NAME", help="astropy Time format of a plain "
                     "CSV 'time' column (jd, mjd, isot, jyear, ...)")
    fit.add_argument("--time-scale", metavar="NAME", help="its time scale (utc, tt, tdb, ...)")
    fit.add_argument("--units", metavar="COL=UNIT,...", help="units of plain CSV columns, "
                     "e.g. 'east=mas,north=mas,east_err=mas,north_err=mas'")
    fit.add_argument("--skip-bad-rows", action="store_true", help="reject unusable rows "
                     "(listed in summary.json) instead of stopping at the first")
    fit.add_argument("--primary", metavar="NAME", help="the body name of the primary's own "
                     "radial velocities (default: primary)")
    fit.add_argument("--trend", choices=("none", "linear", "quadratic"),
                     help="a polynomial trend in every radial velocity (an unseen outer "
                          "body)")
    _sampler_options(fit)
    _dynamics_options(fit)
    fit.add_argument("--no-plots", action="store_true", help="skip the figures")
    fit.add_argument("--force", action="store_true", help="replace an existing result "
                     "(or the checkpoint of an interrupted run)")
    fit.add_argument("--resume", action="store_true", help="continue an interrupted run "
                     "from its checkpoint; same inputs and options give the same result "
                     "as an uninterrupted run")
    fit.add_argument("--quiet", action="store_true", help="print only the result")

    demo = sub.add_parser(
        "demo", help="fit the bundled invented example and compare with its truth",
        description="Fit the bundled example (four moons of an invented gas giant) and "
                    "print the result beside the truth it was simulated from.")
    demo.add_argument("--out", metavar="DIR", default="massfit-demo",
                      help="output folder (default: %(default)s)")
    _sampler_options(demo)
    demo.add_argument("--no-plots", action="store_true", help="skip the figures")
    demo.add_argument("--force", action="store_true", default=True, help=argparse.SUPPRESS)
    demo.add_argument("--quiet", action="store_true", help="print only the result")

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
    _sampler_options(batch)
    batch.add_argument("--plots", action="store_true", help="write each system's figures")
    batch.add_argument("--rerun", action="store_true",
                       help="fit again the systems that already have a result")
    _plan_parser(sub)
    _redraw_parser(sub)
    return parser


def _plan_parser(sub):
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
    plan.add_argument("--force", action="store_true", help="replace an existing plan")


def _redraw_parser(sub):
    from .plots import FIGURES

    redraw = sub.add_parser(
        "redraw", help="draw the figures and tables of a saved result again",
        description="Redraw figures and tables from an output folder written by "
                    "'massfit fit', without refitting: the model is rebuilt from the "
                    "folder's own copy of the observations and its posterior samples.")
    redraw.add_argument("folder", metavar="DIR", help="a massfit output folder")
    redraw.add_argument("--figures", metavar="NAME,...", default=",".join(FIGURES),
                        help="figures to draw, from: %(default)s")
    redraw.add_argument("--formats", metavar="EXT,...", default="png,pdf",
                        help="file formats (any matplotlib writes: png, pdf, svg, "
                             "eps...; default %(default)s)")
    redraw.add_argument("--to", metavar="DIR", help="write into DIR instead of the "
                        "result's folder")
    redraw.add_argument("--no-tables", action="store_true",
                        help="skip the LaTeX, Markdown and ECSV tables")


def _cmd_redraw(args):
    import matplotlib
    from matplotlib.figure import Figure

    from .plots import FIGURES
    from .saved import load_result

    matplotlib.use("Agg")  # files only: no window, whatever the environment says
    formats = [f.strip().lower().lstrip(".") for f in args.formats.split(",") if f.strip()]
    supported = Figure().canvas.get_supported_filetypes()
    bad = [f for f in formats if f not in supported]
    if bad or not formats:
        raise ConfigError(f"cannot write {', '.join(bad) or 'no format'}; accepted: "
                          f"{', '.join(sorted(supported))}", key="--formats")
    figures = [f.strip() for f in args.figures.split(",") if f.strip()]
    unknown = [f for f in figures if f not in FIGURES]
    if unknown or not figures:
        raise ConfigError(f"no figure called {', '.join(unknown) or '(none given)'}; "
                          f"accepted: {', '.join(FIGURES)}", key="--figures")
    result = load_result(args.folder)
    out = Path(args.to) if args.to else Path(args.folder)
    out.mkdir(parents=True, exist_ok=True)
    written = result.write_figures(out, figures=figures, formats=formats)
    if not args.no_tables:
        written += result.write_tables(out)
    for path in written:
        print(path)
    return EXIT_OK


def _dynamics_options(parser):
    group = parser.add_argument_group("beyond two-body orbits (override the config)")
    group.add_argument("--dynamics", choices=("keplerian", "oblate", "n-body"),
                       help="how the companions move (default keplerian)")
    group.add_argument("--j2", type=float, metavar="J2", help="oblate: the primary's J2")
    group.add_argument("--equatorial-radius", metavar="'VALUE UNIT'",
                       help="oblate: the reference radius of J2, e.g. '71492 km'")
    group.add_argument("--equator-inclination", metavar="'VALUE UNIT'",
                       help="oblate: the equator's inclination on the sky (with "
                            "--equator-node; default: each orbit lies in the equator)")
    group.add_argument("--equator-node", metavar="'VALUE UNIT'",
                       help="oblate: position angle of the equator's ascending node")
    group.add_argument("--rtol", type=float, metavar="TOL",
                       help="n-body: relative tolerance of the integrator (default 1e-12)")
    group.add_argument("--romer-delay", action="store_true",
                       help="delay each companion by the light time across the system")


_DYNAMICS_OPTIONS = ("j2", "equatorial_radius", "equator_inclination", "equator_node",
                     "rtol")


def _apply_dynamics_options(args, system):
    """The config's dynamics, changed where the command line says so."""
    from dataclasses import replace

    from .dynamics import make_dynamics

    given = {k: getattr(args, k, None) for k in _DYNAMICS_OPTIONS}
    given = {k: v for k, v in given.items() if v is not None}
    if getattr(args, "romer_delay", False):
        system = replace(system, romer_delay=True)
    if getattr(args, "dynamics", None) is None and not given:
        return system
    current = getattr(system.dynamics, "label", "keplerian")
    model = args.dynamics or current
    # Settings the command line leaves alone keep the config's values.
    merged = dict(getattr(system.dynamics, "settings", {})) if model == current else {}
    merged.update(given)
    return replace(system, dynamics=make_dynamics(model, key_prefix="--", **merged))


def _sampler_options(parser):
    parser.add_argument("--seed", type=int, metavar="N", help="random seed (repeats the run)")
    parser.add_argument("--walkers", type=int, metavar="N", help="number of emcee walkers")
    parser.add_argument("--max-steps", type=int, metavar="N", help="step cap (default 50000)")
    parser.add_argument("--check-every", type=int, metavar="N", help="steps between "
                        "convergence checks (default 500)")


def main(argv=None) -> int:
    """Entry point of the ``massfit`` command; returns the exit status."""
    parser = _parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help()
        return EXIT_USER_ERROR
    try:
        if args.command == "fit":
            return _cmd_fit(args)
        if args.command == "batch":
            return _cmd_batch(args)
        if args.command == "plan":
            return _cmd_plan(args)
        if args.command == "redraw":
            return _cmd_redraw(args)
        return _cmd_demo(args)
    except MassfitError as exc:
        print(f"massfit: error: {exc}", file=sys.stderr)
        return EXIT_USER_ERROR
    except KeyboardInterrupt:
        print("massfit: interrupted", file=sys.stderr)
        return EXIT_INTERRUPTED


def _units_option(text):
    units = {}
    for part in text.split(","):
        if "=" not in part:
            raise ConfigError(f"'{part}' is not COLUMN=UNIT", key="--units")
        col, unit = (piece.strip() for piece in part.split("=", 1))
        if col in units:
            raise ConfigError(f"column '{col}' is given twice ({col}={units[col]} and "
                              f"{col}={unit}); give each column one unit", key="--units")
        units[col] = unit
    return units


def _setup_from_args(args):
    from .config import FitSetup, load_config
    from .model import SystemSpec
    from .sample import SamplerSettings, check_seed

    check_seed(args.seed, key="--seed")
    inputs = [Path(p) for p in args.inputs]
    if len(inputs) == 1 and inputs[0].suffix.lower() == ".toml":
        setup = load_config(inputs[0])
    else:
        for p in inputs:
            if p.suffix.lower() == ".toml":
                raise ConfigError("give a config alone, or observation files without one",
                                  key=str(p))
        setup = FitSetup(files=inputs, system=SystemSpec(), sampler=SamplerSettings())
    options = setup.read_options
    for key in ("time_format", "time_scale"):
        if getattr(args, key) is not None:
            options[key] = getattr(args, key)
    if args.units:
        options["units"] = _units_option(args.units)
    if args.skip_bad_rows:
        options["skip_bad_rows"] = True
    if args.primary:
        options["primary"] = args.primary
        setup.system.primary = args.primary
    if args.trend:
        setup.system.trend = args.trend
    if args.out:
        setup.output = Path(args.out)
    if setup.output is None:
        raise ConfigError("say where to write the result with --out DIR", key="--out")
    setup.system = _apply_dynamics_options(args, setup.system)
    return setup


def _run(setup, args, *, record):
    from dataclasses import replace

    from .checkpoint import checkpoint_path, discard
    from .read import read_observations
    from .run import distance_prior, fit

    observations = read_observations(setup.files, **setup.read_options)
    system = setup.system
    plx = distance_prior(getattr(args, "parallax", None), getattr(args, "parallax_err", None),
                         getattr(args, "distance", None))
    if plx is not None:
        system = replace(system, parallax=plx)
    overrides = {k: getattr(args, k) for k in ("seed", "walkers", "max_steps", "check_every")
                 if getattr(args, k) is not None}
    sampler = replace(setup.sampler, **overrides)
    if not args.quiet:
        velocities = observations.velocities
        n_rv = 0 if velocities is None else len(velocities)
        print(f"massfit: read {observations.rows_used} rows ({n_rv} radial velocities) "
              f"of {len(observations.companions)} companion(s) from "
              f"{len(observations.files)} file(s); finding a starting orbit...",
              file=sys.stderr)
    result = fit(observations, system, sampler=sampler, record=record,
                 checkpoint=checkpoint_path(setup.output),
                 resume=getattr(args, "resume", False))
    result.save(setup.output, plots=setup.plots and not args.no_plots, force=args.force)
    discard(setup.output)
    return result


def _record(args, setup):
    from .runrecord import run_record

    return run_record(argv=sys.argv, config=setup.source, files=setup.files)


def _finish(result, out):
    print(result.report())
    print(f"\nwritten to {out}/")
    if not result.converged:
        print("massfit: the fit did NOT converge; the numbers above are flagged in "
              "summary.json (converged: false)", file=sys.stderr)
        return EXIT_NOT_CONVERGED
    return EXIT_OK


def _cmd_fit(args):
    from .checkpoint import checkpoint_path, discard

    setup = _setup_from_args(args)
    if (Path(setup.output) / "summary.json").exists() and not args.force:
        raise ConfigError(f"'{setup.output}' already holds a result; choose another folder "
                          f"or pass --force", key="--out")
    saved = checkpoint_path(setup.output)
    if args.resume and not saved.exists():
        raise ConfigError(f"there is nothing to resume: no checkpoint at '{saved}'; run "
                          f"without --resume to start the fit", key="--resume")
    if not args.resume and saved.exists():
        if not args.force:
            raise ConfigError(f"an interrupted run left its checkpoint at '{saved}'; "
                              f"continue it with --resume, or start afresh with --force",
                              key="--resume")
        discard(setup.output)
    try:
        result = _run(setup, args, record=_record(args, setup))
    except KeyboardInterrupt:
        if saved.exists():
            print(f"massfit: interrupted; the progress is saved in '{saved}': run the "
                  f"same command with --resume to continue", file=sys.stderr)
        raise
    return _finish(result, setup.output)


def _cmd_demo(args):
    from .config import FitSetup
    from .scenarios import demo_setup

    setup: FitSetup = demo_setup()
    setup.output = Path(args.out)
    result = _run(setup, argparse.Namespace(**vars(args), parallax=None, parallax_err=None,
                                            distance=None), record=_record(args, setup))
    status = _finish(result, setup.output)
    truth = json.loads((Path(setup.files[0]).parent / "truth.json").read_text())
    print("\n" + _compare_with_truth(result, truth))
    return status


def _cmd_plan(args):
    from .plan import plan_observations
    from .planconfig import plan_setup

    options = {k: getattr(args, k) for k in (
        "candidates", "start", "stop", "every", "error", "error_unit", "observed", "n_next",
        "check",
        "check_steps", "seed", "time_format", "time_scale", "out")}
    setup = plan_setup(args.source, **options)
    out = Path(setup.output)
    if (out / "plan.json").exists() and not args.force:
        raise ConfigError(f"'{out}' already holds a plan; choose another folder or pass "
                          f"--force", key="--out")
    result = plan_observations(setup.source, setup.candidates, observed=setup.observed,
                               n_next=setup.n_next, check=setup.check,
                               check_steps=setup.check_steps, seed=setup.seed)
    result.save(out, plots=setup.plots and not args.no_plots, force=args.force)
    print(result.report())
    print(f"\nwritten to {out}/")
    return EXIT_OK


def _compare_with_truth(result, truth):
    from .results import format_value

    s = result.summary
    rows = [("GM [km^3/s^2]", s["central_gm"], truth["central_gm_km3_s2"]),
            ("mass [M_jup]", s["central_mass_jupiter"], truth["central_mass_Mjup"])]
    for name, elements in truth["companions"].items():
        comp = s["companions"][name]
        rows.append((f"{name} P [d]", comp["period"], elements["period"]))
        rows.append((f"{name} e", comp["eccentricity"], elements["ecc"]))
        rows.append((f"{name} i [deg]", comp["inclination"], elements["inc"]))
    lines = ["Fit beside the truth the example was simulated from:"]
    for label, block, true in rows:
        inside = block["lower_95"] <= true <= block["upper_95"]
        lines.append(f"  {label:<16} fitted {format_value(block):<34} true {true:<12.8g}"
                     f" {'inside' if inside else 'OUTSIDE'} the 95% interval")
    lines.append(f"  (of {len(rows)} quantities, about {0.0455 * len(rows):.1f} are expected "
                 f"outside their 95% intervals by chance alone)")
    return "\n".join(lines)


def _cmd_batch(args):
    from .batch import NOT_RUN, RESULTS_FILE, collect_jobs, run_batch

    overrides = {k: getattr(args, k) for k in ("walkers", "max_steps")
                 if getattr(args, k) is not None}
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
    print(f"massfit batch: {len(table)} system(s): {counts['converged']} converged, "
          f"{counts['not converged']} not converged, {counts['failed']} failed; "
          f"table in {results}")
    for row in table:
        if row["status"] == "failed":
            print(f"  {row['system']}: {row['failure']}", file=sys.stderr)
    return EXIT_OK if counts["converged"] == len(table) else EXIT_NOT_CONVERGED

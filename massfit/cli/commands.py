"""The ``massfit`` command: a thin layer over the Python API.

Exit status: 0 done, converged and a good fit; 1 the checkpoint or the result could not
be written (a full disc: one line says what was kept and whether ``--resume``
continues); 2 a problem with the input, the config, an option or the output folder (one
line on stderr, no traceback); 3 the fit finished but did not converge (the result is
written and flagged); 4 the best fit's chi^2 is improbable for the stated errors
(``fit_quality`` poor; the result is written and flagged; 4 wins over 3, since a longer
chain cannot mend it); 130 interrupted (``fit`` keeps a checkpoint in the output
folder's partial area, and ``--resume`` continues from it).
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from massfit.model.fit_quality import POOR_FIT_P_VALUE
from massfit.errors import ConfigError, MassfitError, WriteError
from massfit.sample.nested import ENGINES
from massfit.cli import compare

__all__ = ["main", "EXIT_OK", "EXIT_WRITE_FAILED", "EXIT_USER_ERROR", "EXIT_NOT_CONVERGED",
           "EXIT_POOR_FIT"]

EXIT_OK = 0
EXIT_WRITE_FAILED = 1
EXIT_USER_ERROR = 2
EXIT_NOT_CONVERGED = 3
EXIT_POOR_FIT = 4
EXIT_INTERRUPTED = 130


_FIT_EXIT_STATUS = (
    "Exit status: 0 converged and a good fit; 1 the checkpoint or the result could not be "
    "written (a full disc; --resume continues); 2 bad input, option or output folder; 3 "
    f"not converged; 4 a poor fit (chi^2 improbable for the stated errors, p < "
    f"{POOR_FIT_P_VALUE:g}; wins over 3); 130 interrupted.")


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="massfit",
        description="Measure the mass of a central body from the orbits of its "
                    "companions (relative astrometry and radial velocities), sampled "
                    "with emcee.",
        epilog="massfit fit: " + _FIT_EXIT_STATUS)
    from massfit.version import __version__

    parser.add_argument("--version", action="version", version=f"massfit {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")

    fit = sub.add_parser(
        "fit", help="fit observation files or a TOML config",
        description="Fit all companions with one shared central mass. Give a TOML config, "
                    "or observation files (CSV/ECSV): every body in them becomes a "
                    "companion of one primary, with default priors.",
        epilog=_FIT_EXIT_STATUS)
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
    _viewing_options(fit)
    fit.add_argument("--no-plots", action="store_true", help="skip the figures")
    fit.add_argument("--sampler", choices=ENGINES, help="emcee's ensemble (default) or "
                     "nested sampling with dynesty: each mode of the posterior weighed in "
                     "its own period box, and the evidence")
    fit.add_argument("--live-points", type=int, metavar="N",
                     help="nested: live points per run (default 400)")
    fit.add_argument("--weigh-modes", action="store_true",
                     help="where the walkers missed modes of the posterior, sample each "
                          "in its own period box and give the mass over all of them "
                          "(Laplace weights: an approximation; exit status stays 3)")
    fit.add_argument("--force", action="store_true", help="replace a result massfit wrote "
                     "in the output folder (only its own files), or the checkpoint of an "
                     "interrupted run")
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
    compare.add_parser(sub)
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
    plan.add_argument("--force", action="store_true", help="replace a plan or result "
                      "massfit wrote in the output folder (only its own files)")


def _redraw_parser(sub):
    from massfit.plot.figures import FIGURES

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

    from massfit.plot.figures import FIGURES
    from massfit.result.loading import load_result

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
    group.add_argument("--dynamics", choices=("keplerian", "oblate", "perturbed", "n-body"),
                       help="how the companions move (default keplerian; oblate: secular "
                            "J2; perturbed: integrated J2, J4 and mutual pulls; n-body: "
                            "mutual pulls only)")
    group.add_argument("--j2", type=float, metavar="J2",
                       help="oblate, perturbed: the primary's J2")
    group.add_argument("--j4", type=float, metavar="J4", help="perturbed: the primary's J4")
    group.add_argument("--equatorial-radius", metavar="'VALUE UNIT'",
                       help="oblate, perturbed: the reference radius of the harmonics, "
                            "e.g. '58300 km'")
    group.add_argument("--equator-inclination", metavar="'VALUE UNIT'",
                       help="oblate, perturbed: the equator's inclination on the sky (with "
                            "--equator-node; default: oblate, each orbit in the equator; "
                            "perturbed, the mean orbit normal)")
    group.add_argument("--equator-node", metavar="'VALUE UNIT'",
                       help="oblate, perturbed: position angle of the equator's "
                            "ascending node")
    group.add_argument("--mutual-pulls", action=argparse.BooleanOptionalAction, default=None,
                       help="perturbed: the companions pull on each other (default on)")
    group.add_argument("--rtol", type=float, metavar="TOL",
                       help="perturbed, n-body: relative tolerance of the integrator "
                            "(default 1e-12)")
    group.add_argument("--start-evaluations", type=int, metavar="N",
                       help="perturbed, n-body: cap on the evaluations of each "
                            "least-squares pass of the start (default 300)")
    group.add_argument("--romer-delay", action="store_true",
                       help="delay each companion by the light time across the system")


_DYNAMICS_OPTIONS = ("j2", "j4", "equatorial_radius", "equator_inclination",
                     "equator_node", "mutual_pulls", "rtol", "start_evaluations")


def _apply_dynamics_options(args, system):
    """The config's dynamics, changed where the command line says so."""
    from dataclasses import replace

    from massfit.orbits.registry import make_dynamics

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


def _viewing_options(parser):
    group = parser.add_argument_group("a primary inside the solar system (override the "
                                      "config's [viewing])")
    group.add_argument("--ephemeris-body", metavar="NAME",
                       help="the primary's direction and distance per row from astropy's "
                            "ephemeris, e.g. 'jupiter'")
    group.add_argument("--ephemeris", metavar="KERNEL",
                       help="'builtin' (default) or the path of a JPL kernel (.bsp)")
    group.add_argument("--site", metavar="'LON, LAT, HEIGHT'",
                       help="observatory, e.g. '-68.4 deg, -24.1 deg, 2150 m' (default: "
                            "the Earth's centre)")
    group.add_argument("--offsets", choices=("astrometric", "apparent"),
                       help="apparent: the offsets carry the differential aberration of "
                            "the observer's velocity (default astrometric)")
    group.add_argument("--pole", metavar="'RA, DEC'",
                       help="the primary's north pole, e.g. '251.3 deg, 57.8 deg': "
                            "elements also against its equator")


def _apply_viewing_options(args, system):
    """The config's [viewing], changed where the command line says so."""
    from dataclasses import replace

    from massfit.orbits.viewing import viewing_from_settings

    given = {k: getattr(args, k, None) for k in ("ephemeris_body", "ephemeris", "site",
                                                  "offsets")}
    pole = getattr(args, "pole", None)
    if pole is not None:
        parts = pole.split(",")
        if len(parts) != 2:
            raise ConfigError("give the pole as 'RA, DEC', e.g. '251.3 deg, 57.8 deg'",
                              key="--pole")
        given["pole_ra"], given["pole_dec"] = (p.strip() for p in parts)
    given = {k: v for k, v in given.items() if v is not None}
    if not given:
        return system
    current = system.viewing
    merged = {} if current is None else {
        "ephemeris_body": current.ephemeris_body, "ephemeris": current.ephemeris,
        "offsets": current.offsets}
    merged.update(given)
    spec = viewing_from_settings(merged, key_prefix="--")
    if current is not None and "site" not in given:
        spec.site = current.site
    if current is not None and "pole_ra" not in given:
        spec.pole_ra, spec.pole_dec = current.pole_ra, current.pole_dec
    return replace(system, viewing=spec)


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
        if args.command == "compare":
            return compare.run(args)
        return _cmd_demo(args)
    except WriteError as exc:
        print(f"massfit: error: {exc}", file=sys.stderr)
        return EXIT_WRITE_FAILED
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
    from massfit.config.fit import FitSetup, load_config
    from massfit.model.orbit_model import SystemSpec
    from massfit.sample.chain import SamplerSettings, check_seed

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
    setup.system = _apply_viewing_options(args, setup.system)
    return setup


def _run(setup, args, *, record, force):
    from dataclasses import replace

    from massfit.sample.checkpoint import checkpoint_path, discard
    from massfit.read.tables import read_observations
    from massfit.run import distance_prior, fit

    observations = read_observations(setup.files, **setup.read_options)
    system = setup.system
    plx = distance_prior(getattr(args, "parallax", None), getattr(args, "parallax_err", None),
                         getattr(args, "distance", None))
    if plx is not None:
        system = replace(system, parallax=plx)
    overrides = {k: getattr(args, k) for k in ("seed", "walkers", "max_steps", "check_every")
                 if getattr(args, k) is not None}
    sampler = replace(setup.sampler, **overrides)
    engine = getattr(args, "sampler", None) or setup.engine
    nested = setup.nested
    if getattr(args, "live_points", None) is not None:
        if engine != "nested":
            raise ConfigError("live points are the nested sampler's: give --sampler nested "
                              "(or [sampler] engine = \"nested\") with them",
                              key="--live-points")
        nested = replace(nested, live_points=args.live_points)
        nested.check(key_prefix="--")
    if not args.quiet:
        velocities = observations.velocities
        n_rv = 0 if velocities is None else len(velocities)
        print(f"massfit: read {observations.rows_used} rows ({n_rv} radial velocities) "
              f"of {len(observations.companions)} companion(s) from "
              f"{len(observations.files)} file(s); finding a starting orbit...",
              file=sys.stderr)
    result = fit(observations, system, sampler=sampler, record=record,
                 checkpoint=checkpoint_path(setup.output),
                 resume=getattr(args, "resume", False),
                 weigh_modes=getattr(args, "weigh_modes", False), engine=engine,
                 nested=nested)
    _save(result, setup.output, plots=setup.plots and not args.no_plots, force=force)
    discard(setup.output)
    return result


def _save(result, out, *, plots, force):
    """Write the result; a figure that fails is one warning line, a failed write one error."""
    import warnings

    from massfit.sample.checkpoint import checkpoint_path
    from massfit.errors import os_error_text
    from massfit.result.fit_result import FigureWarning

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", FigureWarning)
        try:
            result.save(out, plots=plots, force=force)
        except OSError as exc:
            raise WriteError(f"cannot write the result into '{out}': {os_error_text(exc)}; "
                             f"the chain is kept in '{checkpoint_path(out)}': make room, "
                             f"then run the same command with --resume to write the "
                             f"result without sampling again") from None
    for warning in caught:
        if issubclass(warning.category, FigureWarning):
            print(f"massfit: warning: {warning.message}", file=sys.stderr)
        else:
            warnings.warn_explicit(warning.message, warning.category, warning.filename,
                                   warning.lineno)


def _record(args, setup):
    from massfit.write.run_record import run_record

    return run_record(argv=sys.argv, config=setup.source, files=setup.files)


def _finish(result, out):
    print(result.report())
    print(f"\nwritten to {out}/")
    if result.poor_fit:
        print("massfit: the best fit is POOR: its chi^2 is improbable for the stated "
              "errors; the result is flagged in summary.json (fit_quality: poor)",
              file=sys.stderr)
    if not result.converged:
        print("massfit: the fit did NOT converge; the numbers above are flagged in "
              "summary.json (converged: false)", file=sys.stderr)
    # A longer chain cannot mend a poor fit: that is the first thing to know.
    if result.poor_fit:
        return EXIT_POOR_FIT
    return EXIT_OK if result.converged else EXIT_NOT_CONVERGED


def _notice(text):
    print(f"massfit: {text}", file=sys.stderr)


def _fit_into(setup, args, *, force, inputs):
    """Check and lock the output folder, then fit and save; returns the FitResult."""
    from massfit.sample.checkpoint import checkpoint_path, discard, exclusive_run
    from massfit.write.folder import check_output_folder

    out = setup.output
    check_output_folder(out, force=force, inputs=inputs)
    resume = getattr(args, "resume", False)
    saved = checkpoint_path(out)
    with exclusive_run(out, notice=_notice):
        if resume and not saved.exists():
            raise ConfigError(f"there is nothing to resume: no checkpoint at '{saved}'; "
                              f"run without --resume to start the fit", key="--resume")
        if not resume and saved.exists():
            if not force:
                raise ConfigError(f"an interrupted run left its checkpoint at '{saved}'; "
                                  f"continue it with --resume, or start afresh with "
                                  f"--force", key="--resume")
            discard(out)
        try:
            return _run(setup, args, record=_record(args, setup), force=force)
        except KeyboardInterrupt:
            if saved.exists():
                print(f"massfit: interrupted; the progress is saved in '{saved}': run the "
                      f"same command with --resume to continue", file=sys.stderr)
            raise


def _cmd_fit(args):
    setup = _setup_from_args(args)
    inputs = [*setup.files, *(Path(p) for p in args.inputs)]
    result = _fit_into(setup, args, force=args.force or setup.replace_existing,
                       inputs=inputs)
    return _finish(result, setup.output)


def _cmd_demo(args):
    from massfit.config.fit import FitSetup
    from massfit.scenarios.examples import demo_setup

    setup: FitSetup = demo_setup()
    setup.output = Path(args.out)
    # The demo replaces its own earlier result, never a folder massfit did not write.
    result = _fit_into(setup, argparse.Namespace(**vars(args), parallax=None,
                                                 parallax_err=None, distance=None),
                       force=True, inputs=setup.files)
    status = _finish(result, setup.output)
    truth = json.loads((Path(setup.files[0]).parent / "truth.json").read_text())
    print("\n" + _compare_with_truth(result, truth))
    return status


def _cmd_plan(args):
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


def _compare_with_truth(result, truth):
    from massfit.result.fit_result import format_value

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
    from massfit.batch import NOT_RUN, RESULTS_FILE, collect_jobs, run_batch

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

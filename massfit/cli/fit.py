"""``massfit fit``: observation files or a TOML config -> a result folder.

``fit_into`` and ``finish`` are shared with ``massfit demo``.
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

from massfit.cli.options import (apply_central_mass_options, apply_dynamics_options,
                                 apply_viewing_options, central_mass_options,
                                 dynamics_options, sampler_options, sampler_overrides, units_option,
                                 viewing_options)
from massfit.cli.status import (EXIT_NOT_CONVERGED, EXIT_OK, EXIT_POOR_FIT, FIT_EXIT_STATUS,
                                notice)
from massfit.errors import ConfigError, WriteError
from massfit.sample import ENGINES

__all__ = ["add_parser", "run", "fit_into", "finish"]


def add_parser(sub):
    fit = sub.add_parser(
        "fit", help="fit observation files or a TOML config",
        description="Fit all companions with one shared central mass. Give a TOML config, "
                    "or observation files (CSV/ECSV): every body in them becomes a "
                    "companion of one primary, with default priors.",
        epilog=FIT_EXIT_STATUS)
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
    central_mass_options(fit)
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
    sampler_options(fit)
    dynamics_options(fit)
    viewing_options(fit)
    fit.add_argument("--no-plots", action="store_true", help="skip the figures")
    fit.add_argument("--arviz", action="store_true", help="also write the posterior as "
                     "ArviZ InferenceData (NetCDF), posterior.nc; needs massfit[arviz]")
    fit.add_argument("--sampler", choices=ENGINES, help="emcee's ensemble (default) or "
                     "nested sampling with dynesty: each mode of the posterior weighed in "
                     "its own period box, and the evidence")
    fit.add_argument("--live-points", type=int, metavar="N",
                     help="nested: live points per run (default 75 per sampled "
                          "coordinate: 525 for one companion and a known parallax)")
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


def run(args):
    setup = _setup_from_args(args)
    if args.arviz:
        from massfit.result.inference_data import require_arviz

        require_arviz()  # before the fit, not after it
    inputs = [*setup.files, *(Path(p) for p in args.inputs)]
    result = fit_into(setup, args, force=args.force or setup.replace_existing,
                      inputs=inputs)
    return finish(result, setup.output)


def _setup_from_args(args):
    from massfit.config.fit import FitSetup, load_config
    from massfit.model.specs import SystemSpec
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
        options["units"] = units_option(args.units)
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
    setup.system = apply_dynamics_options(args, setup.system)
    setup.system = apply_central_mass_options(args, setup.system)
    setup.system = apply_viewing_options(args, setup.system)
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
    sampler = replace(setup.sampler, **sampler_overrides(args))
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
        print(f"massfit: {_read_text(observations)}; finding a starting orbit...",
              file=sys.stderr)
    result = fit(observations, system, sampler=sampler, record=record,
                 checkpoint=checkpoint_path(setup.output),
                 resume=getattr(args, "resume", False),
                 weigh_modes=getattr(args, "weigh_modes", False), engine=engine,
                 nested=nested)
    _save(result, setup.output, plots=setup.plots and not args.no_plots, force=force,
          arviz=getattr(args, "arviz", False))
    discard(setup.output)
    return result


def _read_text(observations) -> str:
    """What was read, by body: the companions named in the data, or the primary alone."""
    velocities = observations.velocities
    n_rv = 0 if velocities is None else len(velocities)
    bodies = observations.companions
    whose = (f"of {len(bodies)} companion(s) ({', '.join(bodies)})" if bodies else
             f"of the primary '{observations.primary}' alone (its companion is unseen)")
    return (f"read {observations.rows_used} rows ({n_rv} radial velocities) {whose} "
            f"from {len(observations.files)} file(s)")


def _save(result, out, *, plots, force, arviz=False):
    """Write the result; a figure that fails is one warning line, a failed write one error."""
    import warnings

    from massfit.sample.checkpoint import checkpoint_path
    from massfit.errors import os_error_text
    from massfit.result.fit_result import FigureWarning

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", FigureWarning)
        try:
            # The corner plot in a second process where there is a second core.
            result.save(out, plots=plots, force=force, arviz=arviz,
                        processes=min(2, os.cpu_count() or 1))
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


def finish(result, out):
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


def fit_into(setup, args, *, force, inputs):
    """Check and lock the output folder, then fit and save; returns the FitResult."""
    from massfit.sample.checkpoint import checkpoint_path, discard, exclusive_run
    from massfit.write.folder import check_output_folder

    out = setup.output
    check_output_folder(out, force=force, inputs=inputs)
    resume = getattr(args, "resume", False)
    saved = checkpoint_path(out)
    with exclusive_run(out, notice=notice):
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


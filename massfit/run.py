"""One fit, end to end: model, starting point, sampling, result."""

from __future__ import annotations

import datetime as _dt
import sys

import numpy as np

from massfit.errors import ConfigError
from massfit.model.orbit_model import OrbitModel
from massfit.model.specs import SystemSpec
from massfit.read.observations import Observations
from massfit.priors import Fixed, Normal
from massfit.result.fit_result import FitResult
from massfit.sample.reparameterisation import SamplerCoordinates
from massfit.sample.chain import SamplerSettings, run_sampler
from massfit.sample.nested import ENGINES, NestedSettings, require_dynesty, run_nested
from massfit.start.search import find_start

__all__ = ["fit", "distance_prior", "not_converged_text", "NESTED_PROPOSAL"]

#: What the report proposes when emcee's walkers leave separated modes unweighed.
NESTED_PROPOSAL = ("the posterior has separated modes that emcee's walkers cannot weigh: "
                   "fit again with --sampler nested (config: [sampler] engine = "
                   "\"nested\"), which integrates each mode in its own period box and "
                   "gives each mode's probability and the mass over all of them")
#: Walkers per sampled coordinate where a fit samples the linearised surrogate and no
#: walker count is given (the emcee default is 2 n_dim + 2, at least 32).
SURROGATE_WALKERS_PER_DIMENSION = 8


def distance_prior(parallax=None, parallax_err=None, distance=None, *, key_prefix="--"):
    """The parallax prior (mas) from a parallax with its error, or a fixed distance.

    Parameters
    ----------
    parallax, parallax_err, distance : str or Quantity, optional
        ``"12.3 mas"``, ``"0.2 mas"``, ``"81 pc"``. A parallax without an error is
        held fixed.

    Returns
    -------
    Prior or None
    """
    import astropy.units as u

    from massfit.quantities import parse_quantity

    if distance is not None and parallax is not None:
        raise ConfigError("give either a parallax or a distance, not both",
                          key=f"{key_prefix}distance")
    if distance is not None:
        d = parse_quantity(distance, expect=u.pc, key=f"{key_prefix}distance")
        if d.value <= 0:
            raise ConfigError("the distance must be positive", key=f"{key_prefix}distance")
        return Fixed(float(d.to_value(u.mas, equivalencies=u.parallax())))
    if parallax is None:
        if parallax_err is not None:
            raise ConfigError("a parallax error needs a parallax",
                              key=f"{key_prefix}parallax-err")
        return None
    value = _angle_mas(parallax, f"{key_prefix}parallax")
    if value <= 0:
        raise ConfigError("the parallax must be positive", key=f"{key_prefix}parallax")
    if parallax_err is None:
        return Fixed(value)
    err = _angle_mas(parallax_err, f"{key_prefix}parallax-err")
    if err <= 0:
        raise ConfigError("the parallax error must be positive",
                          key=f"{key_prefix}parallax-err")
    return Normal(value, err, low=0.0)


def _angle_mas(text, key):
    """A parallax (or its error) in mas; a length is refused, not read as a distance."""
    import astropy.units as u

    from massfit.quantities import parse_quantity

    quantity = parse_quantity(text, expect=u.mas, key=key)
    if not quantity.unit.is_equivalent(u.mas):
        raise ConfigError(f"'{text}' is not an angle; a parallax is an angle such as "
                          f"'41.3 mas' (a distance goes in distance)", key=key)
    return float(quantity.to_value(u.mas))


def fit(observations, system: SystemSpec | None = None, *, sampler: SamplerSettings | None = None,
        parallax=None, parallax_err=None, distance=None, seed=None, walkers=None,
        max_steps=None, check_every=None, progress=None, threads=None, record=None,
        checkpoint=None, resume=False, weigh_modes=False, engine="emcee",
        nested=None) -> FitResult:
    """Fit every companion's orbit with one shared central mass and sample the posterior.

    Parameters
    ----------
    observations : Observations or path or list of paths
        What :func:`massfit.read_observations` returns, or files to read with its
        defaults (ECSV that states its units and times).
    system : SystemSpec, optional
        Priors and assumptions; defaults for anything not stated.
    sampler : SamplerSettings, optional
        Walkers, step cap, seed and progress bar.
    parallax, parallax_err, distance : str or Quantity, optional
        Shortcuts for the system's parallax prior (``"12.3 mas"``, ``"81 pc"``).
    seed, walkers, max_steps, check_every, progress, threads : optional
        Shortcuts that override ``sampler`` (``threads``: the cores the compiled
        log-posterior uses; every core by default).
    record : dict, optional
        Extra entries for the run record (run.json): command line, config, checksums.
    checkpoint : path, optional
        Checkpoint file; the chain is saved in blocks beside it (see
        :mod:`massfit.sample.checkpoint`).
    resume : bool
        Continue the interrupted run saved in ``checkpoint``; with the same data,
        model and seed the result is the one an uninterrupted run gives.
    weigh_modes : bool
        Where the walkers missed modes of the posterior, sample each such mode in
        its own period box and give the central mass over all modes, weighted by
        the modes' Laplace weights (an approximation; see
        :mod:`massfit.modechains`). The fit stays not converged.
    engine : {"emcee", "nested"}
        The sampler: emcee's ensemble (default), or nested sampling with dynesty
        (:mod:`massfit.sample.nested`), which weighs separated modes, each in its own
        period box, and gives the evidence. Its checkpoint keeps each finished run;
        a resumed nested fit repeats only the run that was cut short.
    nested : NestedSettings, optional
        Live points, runs per box and the like for ``engine="nested"``; its seed is
        the fit's.

    Returns
    -------
    FitResult
    """
    from dataclasses import asdict, replace

    if not isinstance(observations, Observations):
        from massfit.read.tables import read_observations

        observations = read_observations(observations)
    spec = system if system is not None else SystemSpec()
    plx = distance_prior(parallax, parallax_err, distance, key_prefix="")
    if plx is not None:
        spec = replace(spec, parallax=plx)
    settings = sampler if sampler is not None else SamplerSettings()
    overrides = {k: v for k, v in dict(seed=seed, walkers=walkers, max_steps=max_steps,
                                       check_every=check_every, progress=progress,
                                       threads=threads).items() if v is not None}
    settings = replace(settings, **overrides)
    settings.check()
    if engine not in ENGINES:
        raise ConfigError(f"unknown sampler {engine!r}; accepted: {', '.join(ENGINES)}",
                          key="sampler")
    if engine == "nested":
        require_dynesty()  # before any work: one line if it is missing
    if settings.seed is None and not resume:
        # Draw the seed here so that the run record always holds one that repeats it.
        settings = replace(settings, seed=int(np.random.SeedSequence().generate_state(1)[0]))
    started = _dt.datetime.now(_dt.timezone.utc).isoformat()
    if spec.viewing is not None:
        from massfit.orbits.viewing import with_ephemeris

        # A named solar-system primary: each row's direction and distance, once.
        observations = with_ephemeris(observations, spec.viewing)
        record = dict(record or {}, viewing=spec.viewing.describe())
    model = OrbitModel(observations, spec)
    surrogate, notes = _surrogate(model, engine)
    if surrogate and settings.walkers is None:
        # The surrogate makes a walker cheap; an ensemble of a few times the dimension
        # mixes better in the tens of correlated coordinates of a moon system (on the
        # real moons 240 walkers gave 3.6x the effective samples of 60 in the same
        # sampling time; SamplerSettings.walkers).
        settings = replace(settings, walkers=SURROGATE_WALKERS_PER_DIMENSION * model.n_dim)
    resumed = None
    if resume:
        if checkpoint is None:
            raise ConfigError("resuming needs the checkpoint of the interrupted run",
                              key="checkpoint")
        from massfit.sample.checkpoint import read_meta

        saved = read_meta(checkpoint, model=model, settings=settings)
        settings = replace(settings, seed=saved["settings"]["seed"])
        start, initial = saved["start"], saved["initial"]
        resumed, started = started, saved["started_utc"]
    else:
        start = find_start(model, progress=settings.progress)
        rng = np.random.default_rng(settings.seed)
        initial = start.walkers(model, settings.n_walkers(model.n_dim), rng)
        if checkpoint is not None:
            from massfit.sample.checkpoint import write_meta

            write_meta(checkpoint, model=model, start=start, initial=initial,
                       settings=settings, started_utc=started)
    if engine == "nested":
        nested = replace(nested or NestedSettings(), seed=settings.seed)
        nested.check()
        chain = run_nested(model, start, nested, checkpoint=checkpoint)
    elif surrogate:
        from massfit.linearised_fit import sample_linearised

        # The integrated model sampled through its linearised surrogate, then checked
        # against the integrator at draws of the chain (massfit/linearised_fit.py).
        chain = sample_linearised(model, start, initial, settings, checkpoint=checkpoint,
                                  resume=resume)
    else:
        # The sampler's own coordinates (short arcs as a position and velocity, other
        # orbits with sky-fixed angles); the choice depends only on the start, so a
        # resumed run makes the same one.
        coordinates = SamplerCoordinates.for_start(model, start.theta)
        chain = run_sampler(coordinates.log_prob, coordinates.to_sampled(initial),
                            settings, checkpoint=checkpoint, resume=resume,
                            key=coordinates.mass_key(),
                            compiled=coordinates.compiled_arguments())
        coordinates.restore(chain)
    chain.notes = list(getattr(chain, "notes", [])) + notes
    run_record = {"started_utc": started,
                  "finished_utc": _dt.datetime.now(_dt.timezone.utc).isoformat(),
                  "seed": settings.seed, "python": sys.version.split()[0],
                  "sampler": {k: v for k, v in asdict(settings).items() if k != "progress"}}
    if resumed is not None:
        run_record["resumed_utc"] = resumed
        run_record["resumed_from_step"] = chain.resumed_from
    run_record.update(record or {})
    return assemble_result(model, chain, start, settings, record=run_record,
                           weigh_with=observations if weigh_modes else None)


def _surrogate(model, engine):
    """(whether the fit samples the linearised surrogate, notes for the warnings)."""
    if getattr(model.dynamics, "surrogate", "none") != "linearised":
        return False, []
    if engine != "emcee":
        return False, [f"the linearised surrogate is for emcee; the {engine} engine "
                       f"evaluated the integrated model itself"]
    from massfit.model.surrogate import why_not_linearised

    reason = why_not_linearised(model)
    if reason is not None:
        return False, [f"the linearised surrogate was not used ({reason}): the "
                       f"integrated model was sampled itself"]
    return True, []


def assemble_result(model, chain, start, settings, *, record=None,
                    weigh_with=None) -> FitResult:
    """The FitResult of a finished chain, after the checks the 50-tau test cannot make.

    Walkers that sit in separated modes without ever crossing between them leave the
    modes' weights unmeasured: such a chain is marked not converged whatever its
    autocorrelation time. A central mass that moves under a second vague prior is
    flagged as prior-sensitive. Both go into the summary and its warnings. Modes of
    the start that the walkers never visited make it not converged too; given the
    observations as ``weigh_with``, each is then sampled on its own
    (:func:`massfit.modechains.weigh_modes`).
    """
    from massfit.summarise.posterior_checks import posterior_modes, prior_sensitivity
    from massfit.start.modes import chain_census, unexplored, unexplored_warning

    # The step-count warning first: it speaks of the autocorrelation test alone.
    warnings = _warnings(chain, start)
    warnings += list(getattr(chain, "notes", []))
    modes = posterior_modes(model, chain)
    unmixed = [m for m in modes if not m["walkers_cross"]]
    if unmixed:
        chain.converged = False
    candidates = getattr(start, "candidate_modes", [])
    census = chain_census(model, candidates, chain.samples)
    missing = unexplored(census)
    over_modes = None
    if missing and weigh_with is not None:
        from massfit.modechains import weigh_modes

        over_modes = weigh_modes(model, chain.samples, census, candidates, weigh_with,
                                 settings, fit=fit, main_converged=chain.converged)
    if missing:
        chain.converged = False
    sensitivity = prior_sensitivity(model, chain.samples)
    warnings += _velocity_warnings(model)
    warnings += [_modes_warning(m) for m in modes]
    warnings += list(getattr(model.observations, "notes", []))
    if missing:
        warnings.append(unexplored_warning(census, candidates, missing))
    if (missing or unmixed) and not getattr(chain, "evidence", None):
        warnings.append(NESTED_PROPOSAL)
    if sensitivity is not None and sensitivity["sensitive"]:
        warnings.append(
            f"the central mass depends on the prior: with a second prior "
            f"({sensitivity['alternative']}) its median moves by "
            f"{sensitivity['median_shift']:+.2f} of its 68 % half-width and the width "
            f"changes by a factor {sensitivity['width_ratio']:.2f}; "
            f"{100 * sensitivity['at_prior_edge']:.0f} % of the samples lie at an edge "
            f"of its prior, and its spread is {100 * sensitivity['width_of_prior']:.0f} % "
            f"of the prior's; quote it together with its prior, or add data that cover "
            f"more of the orbit")
    return FitResult(model, chain, start, settings=settings, warnings=warnings,
                     record=record, checks={"posterior_modes": modes,
                                            "candidate_modes": census,
                                            "central_mass_over_modes": over_modes,
                                            "prior_sensitivity": sensitivity})


def not_converged_text(chain):
    """Why the autocorrelation test failed: the chain too short, or its estimate unsettled."""
    from massfit.sample.chain import TAU_MULTIPLE, TAU_STABILITY

    times = chain.steps / max(np.max(chain.tau), 1)
    text = (f"not converged after {chain.steps} steps: the chain is {times:.1f} "
            f"autocorrelation times long ({TAU_MULTIPLE:.0f} needed)")
    history = list(getattr(chain, "tau_history", []) or [])
    if times >= TAU_MULTIPLE and len(history) >= 2:
        before, last = history[-2][1], history[-1][1]
        change = abs(last - before) / max(last, 1e-300)
        text += (f", but its autocorrelation times still changed between the last two "
                 f"checks (the longest by {100 * change:.0f} %; {100 * TAU_STABILITY:.0f} "
                 f"% allowed for each): the estimate has not settled")
    return text + "; raise max_steps"


def _modes_warning(found):
    where = ", ".join(f"{m['median']:.6g} {found['unit']} ({100 * m['fraction']:.0f} %)"
                      for m in found["modes"])
    text = f"the posterior of {found['parameter']} has {len(found['modes'])} separated modes: {where}"
    if not found["walkers_cross"]:
        text += ("; no walker moves between them, so their relative weights are not "
                 "measured and the chain is not converged")
    return text



def _velocity_warnings(model):
    out = []
    if model.velocity_only and not model.primary_has_velocities:
        names = ", ".join(f"'{n}'" for n in model.companions)
        out.append(f"no radial velocities of the primary '{model.observations.primary}': "
                   f"the rows of {names} are read as a companion's own velocities; if "
                   f"one of them is the primary, name it (system.primary or --primary)")
    if model.velocity_only and len(model.companions) > 1:
        out.append("velocities alone: the companions' names were given to the signals in "
                   "the order found (strongest first); give each a period prior to pin "
                   "which is which")
    return out


def _warnings(chain, start):
    out = list(start.notes)
    if getattr(chain, "evidence", None):
        if not chain.converged:
            out.append("not converged: " + chain.engine["convergence_basis"] + " does not "
                       "hold (see weighed_modes: log_z_runs); raise live_points")
        return out  # the nested engine weighs the start's modes itself
    if not chain.converged and getattr(chain, "autocorr_converged", None) is not True:
        # (where the autocorrelation test passed, the chain's notes say what failed)
        out.append(not_converged_text(chain))
    for mode in start.modes:
        if "weight" in mode:
            continue  # weighed: the candidate modes' census reports it
        out.append(f"another solution fits nearly as well: {mode['body']} with "
                   f"P = {mode['period']:.6g} d (delta chi2 = {mode['delta_chi2']:.1f}); "
                   f"the sampler explored only the best one")
    return out

"""Starting points without guesses: periodograms, a linear scan, then least squares.

For each companion on its own:

1. Candidate periods (:mod:`massfit.start.aliases`): Lomb-Scargle peaks of the east and north
   offsets, the aliases the sampling cadence makes of the best peaks (below half the
   spacing of the data too), and periods longer than the time span for short arcs.
2. For each candidate period, a grid of eccentricities and periapsis times makes the
   offsets linear in the Thiele-Innes constants, solved by weighted least squares.
3. The best grid points are polished by non-linear least squares (scipy) on that
   companion alone, with its own central mass.

Then all companions are joined with one central mass and polished together. Distinct
solutions whose chi^2 is close to the best are polished jointly as candidate *modes*
(period aliases, mostly) and weighed by their posterior mass (the Laplace estimate of
:mod:`massfit.start.modes`); the walkers start in a small ball about the heaviest one,
shaped by the least-squares covariance.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass, field, replace

import numpy as np
from scipy.optimize import least_squares

from massfit.orbits import kepler
from massfit.start.aliases import candidate_periods
from massfit.constants import GM_SUN, KM_S_PER_AU_DAY
from massfit.orbits.dynamics import Keplerian
from massfit.errors import ModelError
from massfit.model.derivatives import difference_jacobian
from massfit.model.orbit_model import DEFAULT_SEMI_AMPLITUDE_PRIOR, OrbitModel, SystemSpec
from massfit.start.modes import laplace_log_mass, merge_same_modes
from massfit.priors import Fixed, Normal

__all__ = ["Start", "find_start"]

#: Modes whose chi^2 is within this of the best are reported as comparable. A
#: difference of 2 ln L = 25 is decisive by common practice (a "5 sigma" step).
COMPARABLE_DELTA_CHI2 = 25.0
#: Single-companion solutions within this chi^2 of the best are polished jointly and
#: weighed: beyond it a mode would need a prior volume e^20 / 100 (5e6) times the
#: best one's to reach a weight of 1 %.
WEIGH_DELTA_CHI2 = 40.0
#: Runner-up solutions of each companion weighed at most.
_ALTERNATIVES = 4
_ECC_GRID = (0.0, 0.25, 0.5, 0.75, 0.9)
_PHASE_GRID = 12
_POLISH = 6
_COMBINE = 5
_JOINT_TRIES = 4
#: A single-companion candidate is dropped when, after a first pass of this many
#: evaluations, its chi^2 exceeds this factor times (best chi^2 so far + residuals).
_SCREEN_EVALUATIONS = 30
_SCREEN_FACTOR = 10.0
#: The single-companion search looks at most at this many rows of a companion (a
#: seeded random subset): its cost grows with the rows, the solution it finds hardly.
_SEARCH_ROWS = 4000
_SEARCH_SEED = 20261202


@dataclass
class Start:
    """The outcome of :func:`find_start`.

    Attributes
    ----------
    theta : ndarray
        Best joint solution in the model's sampled coordinates.
    chi2 : float
        Its chi^2.
    covariance : ndarray
        Least-squares covariance at ``theta`` (a Laplace approximation).
    modes : list of dict
        Other solutions with comparable chi^2: ``body``, ``period`` (d),
        ``central_mass`` (M_sun), ``delta_chi2``, ``best_period``, ``weight``.
    candidate_modes : list of dict
        Every distinct joint solution found, largest posterior mass first (see
        :mod:`massfit.start.modes`): ``periods`` and ``log10_period_sd`` per companion,
        ``central_mass`` (M_sun), ``chi2``, ``log_laplace_mass``, ``weight`` and
        ``started`` (the walkers start in that one).
    per_companion : dict
        name -> best single-companion solution (``period``, ``central_mass``, and
        ``chi2`` over the ``rows`` it was searched on: a random subset of
        ``_SEARCH_ROWS`` where the companion has more).
    notes : list of str
        What the summary's warnings must say about the start (e.g. a least-squares
        pass stopped at its cap of evaluations).
    """

    theta: np.ndarray
    chi2: float
    covariance: np.ndarray
    modes: list = field(default_factory=list)
    per_companion: dict = field(default_factory=dict)
    candidate_modes: list = field(default_factory=list)
    notes: list = field(default_factory=list)

    def walkers(self, model: OrbitModel, n_walkers: int, rng) -> np.ndarray:
        """A ball of ``n_walkers`` starting points, all inside the prior's support."""
        scale = np.sqrt(np.clip(np.diag(self.covariance), 1e-16, None))
        cov = self.covariance if np.all(np.isfinite(self.covariance)) else np.diag(scale ** 2)
        # Ensemble moves only explore the span of the walkers: a rank-deficient
        # covariance (a degenerate combination of parameters) would trap them in a
        # subspace, so every direction gets a little width of its own.
        cov = cov + np.diag((1e-3 * scale) ** 2)
        points = np.empty((n_walkers, model.n_dim))
        filled = 0
        for shrink in (1.0, 0.3, 0.1, 0.03, 0.01, 1e-3, 1e-4):
            try:
                trial = rng.multivariate_normal(self.theta, cov * shrink ** 2,
                                                size=4 * n_walkers,
                                                check_valid="ignore")
            except np.linalg.LinAlgError:
                trial = self.theta + shrink * scale * rng.standard_normal(
                    (4 * n_walkers, model.n_dim))
            filled = _take_inside(model, trial, points, filled)
            if filled == n_walkers:
                return points
        # The best fit can sit on the edge of several priors at once (short arcs run
        # to the largest period, mass and eccentricity allowed), where a ball about it
        # is mostly outside: fall back on a tiny box ball pulled inside the bounds.
        low, high = parameter_bounds(model)
        width = np.where(np.isfinite(high - low), high - low, 1.0)
        for _ in range(20):
            trial = self.theta + 1e-6 * width * rng.standard_normal((4 * n_walkers,
                                                                     model.n_dim))
            trial = np.clip(trial, low + 1e-7 * width, high - 1e-7 * width)
            filled = _take_inside(model, trial, points, filled)
            if filled == n_walkers:
                return points
        raise ModelError("could not place the walkers inside the prior's support: the "
                         "best fit lies at the edge of a prior; widen that prior")


def _take_inside(model, trial, points, filled) -> int:
    """Copy the ``trial`` points inside the prior's support into ``points`` after the
    first ``filled``, as many as fit; return the new count."""
    good = trial[np.isfinite(model.log_prob(trial))]
    take = min(len(good), len(points) - filled)
    points[filled:filled + take] = good[:take]
    return filled + take


def find_start(model: OrbitModel, *, rng=None, progress=None) -> Start:
    """Find the best joint solution and any comparable modes.

    Parameters
    ----------
    model : OrbitModel
        The joint model; its angle windows are re-centred on the result.
    rng : numpy.random.Generator, optional
        Used only to break ties in the walker ball later; the search is deterministic.
    progress : bool, optional
        Report the stages of an integrated model's start on stderr (default: when
        stderr is a terminal).

    Returns
    -------
    Start
    """
    if model.velocity_only:
        return _velocity_only_start(model)
    if getattr(model.dynamics, "start_evaluations", None):
        return _staged_start(model, progress)
    if type(model.dynamics) is not Keplerian:
        return _perturbed_start(model)
    if model.sight is not None:
        return _sight_start(model)
    singles = {name: _single_companion_modes(model, name) for name in model.companions}
    best, joint = _best_combination(model, singles)
    found = [_mode_record(model, joint, best)]
    # Each companion's runner-ups, swapped into the joint solution, are candidate
    # modes. They are weighed by their posterior mass, not by chi^2: a worse fit in a
    # wider stretch of the log-uniform priors can hold more of the posterior.
    for name, candidates in singles.items():
        for alt in _comparable(candidates, WEIGH_DELTA_CHI2)[:_ALTERNATIVES + 1]:
            if alt is best[name]:
                continue
            trial = dict(best, **{name: alt})
            result = _joint_polish(model, trial)
            if result[0] is not None:
                found.append(_mode_record(model, result, trial))
    weighed = merge_same_modes(found)
    chosen = weighed[0]  # the walkers start in the mode of largest weight
    theta, chi2, covariance = chosen.pop("_joint")
    chosen_values = chosen.pop("_values")
    model.recentre(theta)
    modes = []
    for mode in weighed[1:]:
        mode.pop("_joint"), mode.pop("_values")
        delta = mode["chi2"] - chi2
        if delta < COMPARABLE_DELTA_CHI2:
            body = _differing_body(mode, chosen)
            modes.append({"body": body, "period": mode["periods"][body],
                          "central_mass": mode["central_mass"], "delta_chi2": float(delta),
                          "best_period": chosen["periods"][body],
                          "weight": mode["weight"]})
    chosen["started"] = True
    for mode in weighed[1:]:
        mode["started"] = False
    per = {name: {"period": m["period"], "central_mass": m["central_mass"],
                  "chi2": m["chi2"], "rows": m["rows"]} for name, m in chosen_values.items()}
    return Start(theta=theta, chi2=chi2, covariance=covariance, modes=modes,
                 per_companion=per, candidate_modes=weighed)


def _mode_record(model, joint, values):
    """A joint solution as a candidate mode: periods, mass, Laplace mass.

    Evaluated right after its polish, while the angle windows are centred on it.
    """
    theta, chi2, covariance = joint
    model.recentre(theta)
    low, high = parameter_bounds(model)
    phys = model.physical(theta[None, :])
    names = model.names
    periods, sd = {}, {}
    for name in model.companions:
        periods[name] = float(phys["companions"][name]["period"][0])
        k = names.index(f"{name}.log10_period") if f"{name}.log10_period" in names else None
        sd[name] = 0.0 if k is None else float(np.sqrt(max(covariance[k, k], 0.0)))
    mass = phys["central_mass"]
    return {"periods": periods, "log10_period_sd": sd,
            "central_mass": None if mass is None else float(mass[0]),
            "chi2": float(chi2),
            "log_laplace_mass": laplace_log_mass(model.log_prob, theta, covariance,
                                                 widths=high - low),
            "_joint": joint, "_values": values}


def _differing_body(mode, other):
    """The companion whose period differs most between two modes."""
    return max(mode["periods"],
               key=lambda n: abs(np.log10(mode["periods"][n] / other["periods"][n])))


def _perturbed_start(model):
    """Start the secular J2 model from the two-body search, then polish.

    The periodograms, linear scans and alias choice work on Keplerian ellipses, so they
    run on the two-body model of the same data and companions. Its solution is mapped
    into the perturbed model's elements by the dynamics (``from_two_body``: e.g. the
    J2 model turns the fitted mean-longitude rate into its anomalistic period and the
    central mass into the one its corrected third law needs; the N-body model offers
    several companion masses) and polished there by least squares, candidate by
    candidate until one fits acceptably (the poor-fit criterion of the summary). The
    two-body model's comparable modes are reported as found.
    """
    _, found, values = two_body_start(model)
    best, best_chi2 = None, np.inf
    for candidate in model.dynamics.from_two_body(model, values):
        for name, comp in model.companions.items():
            if not comp.mass.is_fixed:
                mass = candidate[name].get("mass", 0.0)
                if not comp.mass.low < mass < comp.mass.high:
                    candidate[name] = dict(candidate[name],
                                           mass=_inside(comp.mass, _prior_centre(comp.mass)))
        theta = solve_least_squares(model, candidate, rounds=3)
        if theta is None:
            continue
        chi2 = _chi2(model, theta)
        if chi2 < best_chi2:
            best, best_chi2 = model.recentre(theta), chi2
        if _acceptable(model, theta, chi2):
            break  # good enough: the other candidates are for harder cases
    return _perturbed_result(model, best, found)


def _acceptable(model, theta, chi2):
    """Whether a fit passes the summary's poor-fit criterion (model/fit_quality.py)."""
    from massfit.model.fit_quality import is_poor

    n_values = model.residuals(theta[None, :]).shape[1]
    return n_values > model.n_dim and not is_poor(chi2, n_values, model.n_dim)


def _perturbed_result(model, best, found, notes=()):
    """The Start of a perturbed model from its best polish and the two-body search."""
    if best is None:
        raise ModelError(f"the {model.dynamics.label} model's least-squares fit failed "
                         f"from the two-body solution; check its settings (or fit the "
                         f"two-body model first)")
    theta = model.recentre(best)
    modes = [dict(mode, searched_with="keplerian") for mode in found.modes]
    per = {name: dict(sol, searched_with="keplerian")
           for name, sol in found.per_companion.items()}
    weighed = [dict(mode, searched_with="keplerian") for mode in found.candidate_modes]
    return Start(theta=theta, chi2=_chi2(model, theta), covariance=_covariance(model, theta),
                 modes=modes, per_companion=per, candidate_modes=weighed,
                 notes=list(notes))


def _sight_start(model):
    """Start a model whose line of sight moves: the fixed-plane search, then ICRS.

    The periodograms and linear scans run on a fixed sky plane (the same rows, the
    offsets from the primary only, each row's distance kept). Each orbit found there
    is turned into ICRS elements about the rows' mean line of sight, in the mirror
    image that fits better (a fixed plane cannot tell which way the orbit tilts; the
    moving line of sight can), and polished by least squares in the full model; the
    other image of a companion is tried where the fit stays poor.
    """
    from massfit.orbits.viewing import mean_direction, orientation_in_icrs

    data = model.observations.astrometry
    own = np.ones(len(data), dtype=bool) if data.reference_body is None else (
        data.reference_body == "")
    plane_rows = replace(data.select(own), primary_ra=None, primary_dec=None,
                         reference_body=None)
    plane = OrbitModel(replace(model.observations, astrometry=plane_rows),
                       replace(model.spec, companions=dict(model.companions),
                               strict_companions=True))
    # Each companion's own search, and the combination whose masses agree; the
    # runner-up swaps of the fixed-plane fit are skipped: on a turning line of sight
    # every fixed-plane chi^2 is large, so they would all count as comparable.
    singles = {name: _single_companion_modes(plane, name) for name in plane.companions}
    chosen_modes, (plane_theta, _, _) = _best_combination(plane, singles)
    values = _values_from_theta(plane, plane_theta)
    toward = mean_direction(model.sight)

    def turned(trial, name, turn):
        orbit = dict(values[name])
        inc, omega, node = orientation_in_icrs(
            orbit["inc"], orbit["omega"] + turn, orbit["node"] + turn, toward)
        # The same mean anomaly, carried to this model's reference epoch.
        shift = (model.epoch_jd + model.reference_epoch(name)
                 - plane.epoch_jd - plane.reference_epoch(name))
        orbit.update(inc=inc, omega=omega, node=node, mean_anomaly_ref=(
            orbit["mean_anomaly_ref"] + 2.0 * np.pi * shift / orbit["period"]))
        return dict(trial, **{name: orbit})

    # Each companion's mirror image chosen by the chi^2 at the turned solution (the
    # others held): the wrong one is off by the orbit's depth times the turn of the
    # line of sight. Then least squares; the other image of each companion is
    # polished too only where the first choice does not fit acceptably.
    trial = dict(values)
    for name in model.companions:
        trial = turned(trial, name, 0.0)
    chosen = {}
    for name in model.companions:
        scores = [_chi2(model, _theta_of(model, turned(trial, name, turn)))
                  for turn in (0.0, np.pi)]
        chosen[name] = (0.0, np.pi)[int(np.argmin(scores))]
        trial = turned(trial, name, chosen[name])
    best = solve_least_squares(model, trial, rounds=3)
    best_chi2 = np.inf if best is None else _chi2(model, best)
    for name in model.companions:
        if best is not None and _acceptable(model, best, best_chi2):
            break
        other = turned(_values_from_theta(model, best) if best is not None else trial,
                       name, np.pi - chosen[name])
        theta = solve_least_squares(model, other, rounds=3)
        if theta is not None and _chi2(model, theta) < best_chi2:
            best, best_chi2 = theta, _chi2(model, theta)
    if best is None:
        raise ModelError("the least-squares fit with the moving line of sight failed from "
                         "the fixed-plane solution; check the primary_ra, primary_dec and "
                         "distance columns")
    theta = model.recentre(best)
    per = {name: {"period": m["period"], "central_mass": m["central_mass"],
                  "chi2": m["chi2"], "rows": m["rows"], "searched_with": "fixed sky plane"}
           for name, m in chosen_modes.items()}
    return Start(theta=theta, chi2=best_chi2, covariance=_covariance(model, theta),
                 modes=[], per_companion=per)


def _theta_of(model, values):
    """Sampled coordinates of physical values, with the windows centred on them."""
    model.recentre(_centre_guess(model, values))
    return model.from_physical(values)


#: Candidates of an integrated model's start kept after the first stage's screening.
_STAGED_CANDIDATES = 3
#: Rows each companion needs inside a stage's time window.
_STAGE_ROWS = 8


def _staged_start(model, progress=None):
    """Start an integrated model (J2, J4, pulls) from the two-body search, in stages.

    The two-body solution follows each orbit's mean path; over a long span the
    perturbed orbit drifts away from it (resonant pulls, precession), so a least
    squares from there over all the data may not find its way. It is polished first
    on the rows within a short time window about the model's epoch, where both paths
    still agree, and the window is doubled stage by stage up to all the data. The
    first stage screens the dynamics' candidates (companion masses, mirror images);
    the best few go on. Every least-squares pass stops at the dynamics'
    ``start_evaluations``; a pass that stops there is reported in ``notes``.
    """
    import sys

    show = sys.stderr.isatty() if progress is None else bool(progress)
    dynamics = model.dynamics
    limit = dynamics.start_evaluations
    _, found, values = two_body_start(model)
    windows = _stage_windows(model, values)
    models = [_window_model(model, half) for half in windows[:-1]] + [model]

    def say(text):
        if show:
            print(f"start ({dynamics.label}): {text}", file=sys.stderr, flush=True)

    say(f"two-body search done; {len(models)} stage(s), windows of +/- "
        + ", ".join(f"{h:.4g}" for h in windows) + " d about the epoch")
    screened = []
    for candidate in dynamics.from_two_body(model, values):
        candidate = _shift_phases(candidate, model, models[0])
        theta = solve_least_squares(models[0], candidate, rounds=1, max_nfev=_SCREEN_EVALUATIONS)
        if theta is not None:
            screened.append((_chi2(models[0], theta), _values_from_theta(models[0], theta)))
    screened.sort(key=lambda c: c[0])
    best, best_chi2, notes = None, np.inf, []
    for rank, (_, trial) in enumerate(screened[:_STAGED_CANDIDATES]):
        theta, capped = _run_stages(models, trial, limit, say, rank)
        if theta is None:
            continue
        chi2 = _chi2(model, theta)
        if chi2 < best_chi2:
            best, best_chi2, notes = theta, chi2, capped
        if _acceptable(model, theta, chi2):
            break
    return _perturbed_result(model, best, found, notes)


def _run_stages(models, values, limit, say, rank):
    """One candidate through every stage: (theta of the last model or None, notes)."""
    notes = []
    theta = None
    for k, stage in enumerate(models):
        if k:
            values = _shift_phases(values, models[k - 1], stage)
        capped = []
        theta = solve_least_squares(stage, values, rounds=2, max_nfev=limit, capped=capped)
        if theta is None:
            say(f"candidate {rank + 1}, stage {k + 1}/{len(models)}: least squares failed")
            return None, notes
        if capped:
            notes.append(f"the start's least squares stopped at its cap of {limit} "
                         f"evaluations in stage {k + 1} of {len(models)} "
                         f"({len(stage.observations.astrometry)} rows); the starting point "
                         f"may not be the best fit: raise start_evaluations")
        chi2 = _chi2(stage, theta)
        say(f"candidate {rank + 1}, stage {k + 1}/{len(models)}: "
            f"{len(stage.observations.astrometry)} rows, chi2 {chi2:.6g}"
            + (" (stopped at the cap)" if capped else ""))
        values = _values_from_theta(stage, theta)
    return theta, notes


def _stage_windows(model, values):
    """Half-widths (days) of the stages' windows about the model's epoch, the last one
    covering all rows: from 1/16 of the span (at least two of the longest periods),
    doubling; a window of more than 3/4 of the whole is left to the last stage."""
    t = np.concatenate([rows.t for rows in model.rows.values()])
    full = float(np.max(np.abs(t)))
    longest = max(values[name]["period"] for name in model.companions)
    half = max(full / 16.0, 2.0 * longest)
    out = []
    while half < 0.75 * full:
        if all(np.sum(np.abs(rows.t) <= half) >= _STAGE_ROWS
               for rows in model.rows.values()):
            out.append(half)
        half *= 2.0
    return out + [full]


def _window_model(model, half):
    """The model on the astrometry within +/- ``half`` days of its epoch, with the
    elements still referred to that epoch."""
    obs = model.observations
    t = obs.astrometry.time.tdb.jd - model.epoch_jd
    sub_obs = replace(obs, astrometry=obs.astrometry.select(np.abs(t) <= half),
                      velocities=None)
    spec = replace(model.spec, dynamics=model.dynamics.at_epoch(model.epoch_jd),
                   companions=dict(model.companions), strict_companions=True)
    return OrbitModel(sub_obs, spec)


def _shift_phases(values, source, target):
    """Physical values of ``source`` as ``target``'s: each mean anomaly moved from one
    model's reference epoch to the other's (the elements' own epoch is shared)."""
    out = dict(values)
    for name in target.companions:
        orbit = dict(values[name])
        shift = (target.epoch_jd + target.reference_epoch(name)
                 - source.epoch_jd - source.reference_epoch(name))
        orbit["mean_anomaly_ref"] += 2.0 * np.pi * shift / orbit["period"]
        out[name] = orbit
    return out


def two_body_start(model):
    """The two-body search on a model's data: (two-body model, its Start, its values).

    The companions' masses are fixed at zero there: astrometry alone fixes only
    M1 + m_k for each orbit, and leaving the masses free would only give the least
    squares degenerate directions to wander along (and cost it time).
    """
    companions = {name: replace(comp, mass=Fixed(0.0))
                  for name, comp in model.companions.items()}
    spec = replace(model.spec, dynamics=Keplerian(), companions=companions,
                   strict_companions=True)
    two_body = OrbitModel(model.observations, spec)
    found = find_start(two_body)
    return two_body, found, _values_from_theta(two_body, found.theta)


def _comparable(modes, delta=COMPARABLE_DELTA_CHI2):
    """Single solutions (best first) whose chi^2 is within ``delta`` of the best one's
    (or 10 % of it, for fits poorer than their errors)."""
    limit = modes[0]["chi2"] + max(delta, 0.1 * modes[0]["chi2"])
    return [m for m in modes if m["chi2"] <= limit]


def _best_combination(model, singles):
    """The joint start from the companions' single solutions that agree on the mass.

    Sparse sampling leaves a companion with several aliases of nearly equal chi^2,
    each implying its own central mass; only the shared mass tells them apart. The
    combinations of comparable single solutions whose masses agree best are polished
    jointly, and the lowest joint chi^2 wins.
    """
    comparable = {name: _comparable(modes)[:_COMBINE] for name, modes in singles.items()}
    combos = list(itertools.islice(itertools.product(*comparable.values()), 20_000))
    spread = [np.var([np.log(max(m["central_mass"], 1e-300)) for m in combo])
              for combo in combos]
    order = np.argsort(spread, kind="stable")[:_JOINT_TRIES]
    trials = [dict(zip(comparable, combos[k])) for k in order]
    first = {name: modes[0] for name, modes in singles.items()}
    if first not in trials:
        trials.insert(0, first)
    best, joint = None, (None, np.inf, None)
    for chosen in trials:
        result = _joint_polish(model, chosen)
        if result[0] is not None and result[1] < joint[1]:
            best, joint = chosen, result
    if best is None:
        raise ModelError("the joint fit of all companions failed from every starting "
                         "orbit; fit the companions one by one to find the one at fault")
    return best, joint


# ------------------------------------------------------------------ one body alone
def _single_companion_modes(model, name):
    """Distinct least-squares solutions for one companion, best first."""
    sub = _sub_model(model, name)
    t, east, north, sig_e, sig_n = _offsets_au(sub, name)
    by_period = {}
    series = [(east, sig_e), (north, sig_n)]
    for period in candidate_periods(t, series, model.companions[name].period):
        for chi2, values in _linear_scan(t, east, north, sig_e, sig_n, period):
            if period not in by_period or chi2 < by_period[period][0]:
                by_period[period] = (chi2, values)
    # The best grid point of each candidate period, so that aliases of equal power
    # each get polished instead of many grid points of one period.
    candidates = sorted(by_period.values(), key=lambda c: c[0])
    solutions = []
    n_residuals = 2 * len(t)
    for _, values in candidates[:_POLISH * 2]:
        values = _to_model_values(values, name)
        best = min((sol["chi2"] for sol in solutions), default=np.inf)
        sol = _polish_single(sub, name, values,
                             give_up_above=_SCREEN_FACTOR * (best + n_residuals))
        if sol is not None:
            solutions.append(sol)
    if not solutions:
        raise ModelError(f"no orbit of companion '{name}' fits its data within the "
                         f"priors; check its rows, or widen its period_prior")
    solutions.sort(key=lambda s: s["chi2"])
    return _distinct(solutions)


def _sub_model(model, name):
    obs = model.observations
    mine = obs.astrometry.body == name
    if np.sum(mine) > _SEARCH_ROWS:
        # A big data set: search on a random subset, drawn with a fixed seed so the
        # start stays deterministic, and random so that no even thinning can alias a
        # short period. The joint polish afterwards uses every row.
        index = np.flatnonzero(mine)
        keep = np.random.default_rng(_SEARCH_SEED).choice(index.size, _SEARCH_ROWS,
                                                          replace=False)
        mine = np.zeros(mine.size, dtype=bool)
        mine[index[np.sort(keep)]] = True
    rows = obs.astrometry.select(mine)
    sub_obs = replace(obs, astrometry=rows, velocities=None)
    spec = model.spec
    parallax = spec.parallax
    if parallax is not None and not parallax.is_fixed:
        parallax = Fixed(_parallax_guess(parallax))
    comp = model.companions[name]
    if not comp.mass.is_fixed and model.primary_has_velocities:
        # Astrometry alone cannot part the companion's mass from the central one;
        # the joint step sets it from the primary's reflex.
        comp = replace(comp, mass=Fixed(0.0))
    # One star's search is on its own: the frame terms and relativity wait for the
    # joint polish (they are small against an orbit, and shared by every star).
    sub_spec = replace(spec, parallax=parallax, companions={name: comp}, frame=None,
                       relativity=None)
    return OrbitModel(sub_obs, sub_spec)


def _parallax_guess(prior):
    if isinstance(prior, Normal):
        return prior.mean
    if prior.is_fixed:
        return prior.value
    low, high = prior.low, prior.high
    return np.sqrt(max(low, 1e-3) * high) if np.isfinite(high) else 10.0


def _offsets_au(sub, name):
    """East/north offsets in au-equivalent units (for the linear stage only)."""
    rows = sub.rows[name]
    parallax = sub.spec.parallax.value if sub.needs_parallax else 1.0
    scale = rows.scale * np.where(rows.uses_parallax, parallax * 1e-3, 1.0)
    n = len(rows.t)
    east = np.empty(n)
    north = np.empty(n)
    sig_e = np.empty(n)
    sig_n = np.empty(n)
    c, p = rows.cart, rows.polar
    east[c], north[c] = rows.east, rows.north
    sig_e[c], sig_n[c] = rows.east_err, rows.north_err
    east[p] = rows.sep * np.sin(rows.pa)
    north[p] = rows.sep * np.cos(rows.pa)
    sig = np.maximum(rows.sep_err, rows.sep * rows.pa_err)
    sig_e[p] = sig_n[p] = sig
    return rows.t, east / scale, north / scale, sig_e / scale, sig_n / scale


def _linear_scan(t, east, north, sig_e, sig_n, period):
    """Grid over (e, periapsis time) with Thiele-Innes constants solved linearly.

    All grid points at once: one kernel call for every (e, phase) pair, and the
    2 x 2 weighted normal equations of each solved as a stack (the pseudo-inverse
    gives lstsq's minimum-norm answer where the design is degenerate).
    """
    ecc = np.repeat(np.asarray(_ECC_GRID, dtype=float), _PHASE_GRID)
    m0 = np.tile(np.linspace(0.0, 2 * np.pi, _PHASE_GRID, endpoint=False), len(_ECC_GRID))
    step = max(1, _CHUNK_ELEMENTS // max(len(t), 1))
    chi2 = np.zeros(len(ecc))
    north_c, east_c = np.empty((len(ecc), 2)), np.empty((len(ecc), 2))
    for k in range(0, len(ecc), step):
        block = slice(k, k + step)
        chi2[block], north_c[block], east_c[block] = _scan_block(
            t, east, north, sig_e, sig_n, period, ecc[block], m0[block])
    return [(float(chi2[k]), {"period": period, "ecc": float(ecc[k]), "m0": float(m0[k]),
                              "A": float(north_c[k, 0]), "B": float(east_c[k, 0]),
                              "F": float(north_c[k, 1]), "G": float(east_c[k, 1])})
            for k in range(len(ecc))]


def _scan_block(t, east, north, sig_e, sig_n, period, ecc, m0):
    _, cos_e, sin_e = kepler.kepler_cs(m0[:, None] + 2 * np.pi * t[None, :] / period,
                                       ecc[:, None])
    design = np.stack([cos_e - ecc[:, None],
                       np.sqrt(1 - ecc * ecc)[:, None] * sin_e], axis=-1)  # (grid, n, 2)
    chi2 = np.zeros(len(ecc))
    consts = []
    for values, sig in ((north, sig_n), (east, sig_e)):
        w = design / sig[None, :, None]
        target = values / sig
        normal = np.einsum("gni,gnj->gij", w, w)
        coef = np.einsum("gij,gj->gi", np.linalg.pinv(normal),
                         np.einsum("gni,n->gi", w, target))
        chi2 += np.sum((np.einsum("gni,gi->gn", w, coef) - target) ** 2, axis=1)
        consts.append(coef)
    return chi2, consts[0], consts[1]


def elements_from_thiele_innes(big_a, big_b, big_f, big_g):
    """(a, inc, omega, node) from the Thiele-Innes constants (radians)."""
    plus = np.hypot(big_a + big_g, big_b - big_f)  # a (1 + cos i)
    minus = np.hypot(big_a - big_g, big_b + big_f)  # a (1 - cos i)
    total = np.arctan2(big_b - big_f, big_a + big_g)  # omega + node
    diff = np.arctan2(-big_b - big_f, big_a - big_g)  # omega - node
    a = 0.5 * (plus + minus)
    cos_i = (plus - minus) / (plus + minus)
    return a, np.arccos(cos_i), 0.5 * (total + diff), 0.5 * (total - diff)


def _to_model_values(grid, name):
    a, inc, omega, node = elements_from_thiele_innes(grid["A"], grid["B"], grid["F"],
                                                     grid["G"])
    gm = 4 * np.pi ** 2 * a ** 3 / grid["period"] ** 2
    return {"central_mass": max(gm / GM_SUN, 1e-30), "parallax": None,
            name: {"period": grid["period"], "ecc": max(grid["ecc"], 1e-4),
                   "omega": omega, "inc": inc, "node": node,
                   "mean_anomaly_ref": grid["m0"], "mass": 0.0}}


def _polish_single(sub, name, values, *, give_up_above=np.inf):
    """Least-squares polish of one companion's grid solution; None if it fails.

    A candidate whose chi^2 after a short first pass still exceeds ``give_up_above``
    is dropped: such hopeless periods used to take most of the start's time (hundreds
    of Jacobians each) only to end orders of magnitude worse than the best.
    """
    # The linear stage measured the phase at t = 0; move it to the body's reference.
    orbit = dict(values[name])
    orbit["mean_anomaly_ref"] += 2 * np.pi * sub.reference_epoch(name) / orbit["period"]
    comp = sub.companions[name]
    if not comp.mass.is_fixed:
        orbit["mass"] = _prior_centre(comp.mass)
    values = dict(values, **{name: orbit})
    values["central_mass"] = max(values["central_mass"] - orbit["mass"], 1e-30)
    if np.isfinite(give_up_above):
        first = solve_least_squares(sub, values, rounds=1, max_nfev=_SCREEN_EVALUATIONS)
        if first is None or _chi2(sub, first) > give_up_above:
            return None
    theta = solve_least_squares(sub, values)
    if theta is None:
        return None
    chi2 = _chi2(sub, theta)
    phys = sub.physical(theta)
    return {"chi2": chi2, "rows": len(sub.observations.astrometry), "theta": theta,
            "orbit": _orbit_dict(phys, name),
            "period": float(phys["companions"][name]["period"][0]),
            "central_mass": float(phys["central_mass"][0])}


def _prior_centre(prior):
    if prior.is_fixed:
        return prior.value
    if isinstance(prior, Normal):
        return max(prior.mean, 0.0)
    return np.sqrt(prior.low * prior.high) if prior.low > 0 else 0.5 * (prior.low + prior.high)


def _orbit_dict(phys, name):
    return {k: float(v[0]) for k, v in phys["companions"][name].items()}


def _distinct(solutions):
    """Drop solutions that repeat a better one (same period within 0.5 %)."""
    kept = []
    for sol in solutions:
        if all(abs(sol["period"] / k["period"] - 1) > 5e-3 for k in kept):
            kept.append(sol)
    return kept


# ------------------------------------------------------------- least squares
def parameter_bounds(model):
    low = np.empty(model.n_dim)
    high = np.empty(model.n_dim)
    for k, param in enumerate(model.parameters):
        lo, hi = param.low, param.high
        if param.transform == "log10":
            lo = np.log10(param.prior.low) if param.prior.low > 0 else -np.inf
            hi = np.log10(param.prior.high) if np.isfinite(param.prior.high) else np.inf
        elif param.transform == "identity":
            lo, hi = max(lo, param.prior.low), min(hi, param.prior.high)
        elif param.transform == "disc":
            lo, hi = -0.995, 0.995
        elif param.transform == "window" and not param.name.endswith(".omega"):
            body, kind = param.name.rsplit(".", 1)
            lo, hi = model.window(body, kind)
        low[k], high[k] = lo, hi
    return low, high


def _prior_residuals(model, theta):
    """Gaussian priors on directly sampled quantities act as extra residuals."""
    out = []
    for k, param in enumerate(model.parameters):
        if param.transform == "identity" and isinstance(param.prior, Normal):
            out.append((theta[k] - param.prior.mean) / param.prior.sd)
    return np.array(out)


def residual_function(model):
    def fun(theta):
        return _batch_residuals(model, theta[None, :])[0]
    return fun


#: Parameter vectors times data rows evaluated in one piece (bounds memory on big sets).
_CHUNK_ELEMENTS = 2_000_000


def _batch_residuals(model, thetas):
    step = max(1, _CHUNK_ELEMENTS // max(_rows(model), 1))
    res = np.concatenate([model.residuals(thetas[k:k + step], lenient=True)
                          for k in range(0, len(thetas), step)])
    prior = np.array([_prior_residuals(model, theta) for theta in thetas])
    res = np.concatenate([res, prior.reshape(len(thetas), -1)], axis=1)
    return np.where(np.isfinite(res), res, 1e6)


def _jacobian_function(model, low=None, high=None, rel_step=None):
    """Forward-difference Jacobian with every shifted point in ONE vectorised call.

    The step defaults to scipy's for '2-point' (sqrt(eps) max(1, |x|)), taken
    backwards where a forward step would leave the bounds.
    """
    rel = np.sqrt(np.finfo(float).eps) if rel_step is None else rel_step

    def jac(theta):
        step = rel * np.maximum(1.0, np.abs(theta))
        if high is not None:
            step = np.where(theta + step > high, -step, step)
        # A big data set: one shifted point at a time into one array (the same numbers)
        big = (theta.size + 1) * _rows(model) > _CHUNK_ELEMENTS
        return difference_jacobian(lambda points: _batch_residuals(model, points), theta, step,
                                   one_at_a_time=big)
    return jac


def _trust_region_solver(model) -> str:
    """scipy's 'exact' steps (an SVD of the Jacobian) unless the data set is big.

    The SVD holds three more copies of the Jacobian (~400 MB at 1e6 rows); LSMR
    works with products alone.
    """
    values = 2 * _rows(model)  # two per astrometric row (one per velocity: an upper bound)
    return "lsmr" if values * model.n_dim > _EXACT_ELEMENTS else "exact"


#: Jacobian elements (values x parameters) beyond which the start's steps use LSMR.
_EXACT_ELEMENTS = 5_000_000


def _rows(model) -> int:
    obs = model.observations
    return sum(len(part) for part in (obs.astrometry, obs.velocities) if part is not None)


def solve_least_squares(model, values, *, rounds=2, max_nfev=None, capped=None):
    """Polish physical starting values; returns sampled coordinates or None.

    ``capped``, a list, gets an entry for each pass that stopped at ``max_nfev``."""
    model.recentre(_centre_guess(model, values))
    theta = model.from_physical(values)
    fun = residual_function(model)
    for _ in range(rounds):
        low, high = parameter_bounds(model)
        width = np.where(np.isfinite(high - low), high - low, 1.0)
        theta = np.clip(theta, low + 1e-9 * width, high - 1e-9 * width)
        try:
            fit = least_squares(fun, theta, jac=_jacobian_function(model, low, high),
                                bounds=(low, high), method="trf", x_scale="jac",
                                max_nfev=max_nfev or 400 * model.n_dim,
                                tr_solver=_trust_region_solver(model))
        except (ValueError, np.linalg.LinAlgError):
            return None
        if capped is not None and fit.status == 0:
            capped.append(fit.nfev)
        theta = model.recentre(fit.x)
        theta = model.from_physical(_values_from_theta(model, theta))
    if not np.isfinite(model.log_prob(theta[None, :])[0]):
        return None
    return theta


def _centre_guess(model, values):
    theta = np.zeros(model.n_dim)
    for name in model.companions:
        orbit = values[name]
        if not model.velocity_only:
            theta[model.column_of[f"{name}.node"]] = orbit["node"]
        theta[model.column_of[f"{name}.phase"]] = orbit["mean_anomaly_ref"] + orbit["omega"]
    return theta


def _values_from_theta(model, theta):
    phys = model.physical(theta[None, :], lenient=True)
    values = {"central_mass": None if phys["central_mass"] is None
              else float(phys["central_mass"][0]),
              "parallax": None if phys["parallax"] is None else float(phys["parallax"][0])}
    for name in model.companions:
        values[name] = _orbit_dict(phys, name)
        # Stay inside the eccentricity prior: the least-squares box on the disc
        # coordinates allows e up to 0.99 whatever the prior's upper end.
        ecc_prior = model.companions[name].eccentricity
        top = 0.98 if ecc_prior.is_fixed else min(0.98, 0.999 * ecc_prior.high)
        values[name]["ecc"] = min(values[name]["ecc"], top)
    if phys.get("frame") is not None:
        values["frame"] = {key: float(value[0]) for key, value in phys["frame"].items()}
    if "precession_scale" in phys:
        values["precession_scale"] = float(phys["precession_scale"][0])
    if "rv" in phys:
        rv = phys["rv"]
        labels = model.velocity_rows.labels
        values["rv"] = {"offset": dict(zip(labels, rv["offset"][0])),
                        "jitter": dict(zip(labels, rv["jitter"][0])),
                        "slope": float(rv["slope"][0]),
                        "curvature": float(rv["curvature"][0])}
    return values


def _chi2(model, theta):
    res = model.residuals(theta[None, :])[0]
    return float(np.sum(res * res))


# -------------------------------------------------------------------- joint fit
def _joint_polish(model, chosen):
    values = {"central_mass": _joint_mass(model, chosen)}
    if model.needs_parallax and model.spec.parallax is not None:
        values["parallax"] = _parallax_guess(model.spec.parallax)
    for name, sol in chosen.items():
        values[name] = dict(sol["orbit"])
    if model.velocity_rows is not None:
        values = _with_velocities(model, values)
    theta = solve_least_squares(model, values, rounds=3)
    if theta is None:
        return None, np.inf, None
    return theta, _chi2(model, theta), _covariance(model, theta)


def _joint_mass(model, chosen):
    # Weight each companion's own mass estimate by its number of rows: a rough but
    # robust start; the joint least squares does the real combining.
    masses = np.array([sol["central_mass"] for sol in chosen.values()])
    weights = np.array([len(model.rows[name].t) for name in chosen])
    return float(np.exp(np.sum(weights * np.log(masses)) / np.sum(weights)))


def _covariance(model, theta):
    jac = _jacobian_function(model, rel_step=1e-6)(theta)
    try:
        cov = np.linalg.pinv(jac.T @ jac)
    except np.linalg.LinAlgError:
        cov = np.diag(np.full(theta.size, 1e-6))
    return 0.5 * (cov + cov.T)


# ------------------------------------------------------------ radial velocities
def _velocity_fit(model, bases):
    """Weighted linear least squares of the velocities on given time functions.

    ``bases`` maps each companion to a list of functions of time (arrays over all
    velocity rows). Each function enters with a free amplitude on the primary's rows
    (with the reflex's minus sign) and another on the companion's own rows; the
    instrument offsets and trend terms are free too. Returns (chi2, coefficients,
    fitted velocities); coefficients are keyed ("offset", label), ("slope", None),
    ("curvature", None) and (name, "primary" or "own", index of the function).
    """
    vel = model.velocity_rows
    sigma = np.sqrt(vel.err2)
    cols, keys = [], []
    for j, label in enumerate(vel.labels):
        cols.append((vel.instrument == j).astype(float))
        keys.append(("offset", label))
    dt = vel.t - vel.t_trend
    for term, power in (("slope", 1), ("curvature", 2)):
        if model.trend_has(term):
            cols.append(dt ** power)
            keys.append((term, None))
    primary = vel.owner < 0
    for k, (name, funcs) in enumerate(bases.items()):
        own = vel.owner == k
        for b, func in enumerate(funcs):
            if np.any(primary):
                cols.append(-func * primary)
                keys.append((name, "primary", b))
            if np.any(own):
                cols.append(func * own)
                keys.append((name, "own", b))
    design = np.column_stack(cols)
    coef, *_ = np.linalg.lstsq(design / sigma[:, None], vel.rv / sigma, rcond=None)
    fitted = design @ coef
    chi2 = float(np.sum(((vel.rv - fitted) / sigma) ** 2))
    return chi2, dict(zip(keys, coef)), fitted


def _inside(prior, value):
    """``value`` moved just inside the support of ``prior``."""
    if prior.is_fixed:
        return prior.value
    low, high = prior.low, prior.high
    if low < value < high:
        return float(value)
    # Outside (or on the edge): just inside, by a step small against any sensible scale.
    width = high - low if np.isfinite(high - low) else max(abs(value), 1.0)
    return float(np.clip(value, low + 1e-9 * width, high - 1e-9 * width))


def _velocity_nuisance(model, coef, fitted):
    """Starting offsets, trend and jitters from a linear fit."""
    vel = model.velocity_rows
    rv = {"offset": {}, "jitter": {}, "slope": coef.get(("slope", None), 0.0),
          "curvature": coef.get(("curvature", None), 0.0)}
    for j, label in enumerate(vel.labels):
        rows = vel.instrument == j
        excess = np.mean((vel.rv[rows] - fitted[rows]) ** 2) - np.mean(vel.err2[rows])
        guess = max(np.sqrt(max(excess, 0.0)), 0.1 * np.sqrt(np.median(vel.err2[rows])))
        rv["jitter"][label] = _inside(vel.jitters[j], guess)
        offset = coef[("offset", label)]
        rv["offset"][label] = offset if vel.offsets[j] is None else _inside(vel.offsets[j],
                                                                            offset)
    return rv


def _one(orbit):
    return {key: np.atleast_1d(np.asarray(value, dtype=float)) for key, value in orbit.items()
            if np.isscalar(value) or np.ndim(value) == 0}


def _velocity_only_start(model):
    """Companion by companion: periodogram, linear scan over (P, e, phase), polish."""
    names = list(model.companions)
    found = {}
    for count, name in enumerate(names):
        sub = model if len(names) == 1 else _velocity_sub_model(model, names[:count + 1])
        solutions = _velocity_candidates(sub, name, found)
        if not solutions:
            raise ModelError(f"no orbit of companion '{name}' fits its velocities within "
                             f"the priors; check its rows, or widen its period_prior")
        best = solutions[0]
        found = {n: best["values"][n] for n in names[:count + 1]}
    theta, chi2 = best["theta"], best["chi2"]
    model.recentre(theta)
    modes = []
    for alt in solutions[1:3]:
        delta = alt["chi2"] - chi2
        if delta < COMPARABLE_DELTA_CHI2:
            modes.append({"body": names[-1], "period": alt["period"], "central_mass": None,
                          "delta_chi2": float(delta), "best_period": best["period"]})
    per = {name: {"period": float(found[name]["period"]), "central_mass": None,
                  "chi2": chi2} for name in names}
    return Start(theta=theta, chi2=chi2, covariance=_covariance(model, theta), modes=modes,
                 per_companion=per)


def _velocity_sub_model(model, names):
    obs = model.observations
    vel = obs.velocities
    keep = (vel.body == obs.primary) | np.isin(vel.body, names)
    sub_obs = replace(obs, velocities=vel.select(keep))
    sub_spec = replace(model.spec, companions={n: model.companions[n] for n in names},
                       strict_companions=True)
    return OrbitModel(sub_obs, sub_spec)


def _velocity_candidates(sub, name, found):
    """Polished solutions for ``name`` with the companions in ``found`` kept in."""
    vel = sub.velocity_rows
    fixed = {n: [sub.velocity_shape(n, _one(orbit))[0]] for n, orbit in found.items()}
    _, coef, fitted = _velocity_fit(sub, fixed)
    rows = vel.owner < 0 if np.any(vel.owner < 0) else vel.owner == list(sub.companions).index(name)
    series = [((vel.rv - fitted)[rows], np.sqrt(vel.err2[rows]))]
    t = vel.t - sub.reference_epoch(name)
    comp = sub.companions[name]
    candidates = []
    for period in candidate_periods(t[rows], series, comp.period):
        for ecc in _ECC_GRID:
            if comp.eccentricity.is_fixed:
                ecc = comp.eccentricity.value
            for m0 in np.linspace(0.0, 2 * np.pi, _PHASE_GRID, endpoint=False):
                nu = kepler.true_anomaly(kepler.solve_kepler(m0 + 2 * np.pi * t / period,
                                                             ecc), ecc)
                bases = dict(fixed, **{name: [np.cos(nu), np.sin(nu)]})
                chi2, coef, fitted = _velocity_fit(sub, bases)
                candidates.append((chi2, period, ecc, m0, coef, fitted))
    candidates.sort(key=lambda c: c[0])
    solutions = []
    for chi2, period, ecc, m0, coef, fitted in candidates[:_POLISH * 3]:
        if len(solutions) >= _POLISH:
            break
        values = {"central_mass": None, "parallax": None,
                  "rv": _velocity_nuisance(sub, coef, fitted)}
        values.update({n: dict(orbit) for n, orbit in found.items()})
        for n in found:
            for kind in ("primary", "own"):
                if (n, kind, 0) in coef:
                    values[n][f"k_{'primary' if kind == 'primary' else 'companion'}"] = \
                        _inside(sub.companions[n].semi_amplitude
                                or DEFAULT_SEMI_AMPLITUDE_PRIOR, abs(coef[(n, kind, 0)]))
        values[name] = _scan_orbit(sub, name, coef, period, ecc, m0)
        theta = solve_least_squares(sub, values)
        if theta is None:
            continue
        phys = sub.physical(theta)
        solutions.append({"chi2": _chi2(sub, theta), "theta": theta,
                          "period": float(phys["companions"][name]["period"][0]),
                          "values": _values_from_theta(sub, theta)})
    solutions.sort(key=lambda s: s["chi2"])
    return _distinct(solutions)


def _scan_orbit(sub, name, coef, period, ecc, m0):
    """Elements of a scanned orbit from its cos(nu), sin(nu) amplitudes."""
    prior = sub.companions[name].semi_amplitude or DEFAULT_SEMI_AMPLITUDE_PRIOR
    orbit = {"period": period, "ecc": max(ecc, 1e-3), "mean_anomaly_ref": m0}
    best = 0.0
    for kind, key in (("primary", "k_primary"), ("own", "k_companion")):
        if (name, kind, 0) not in coef:
            continue
        # -K1 f on the primary's rows, +K2 f on the companion's: the same omega.
        c_a, c_b = coef[(name, kind, 0)], coef[(name, kind, 1)]
        amplitude = float(np.hypot(c_a, c_b))
        orbit[key] = _inside(prior, amplitude)
        if amplitude >= best:
            best = amplitude
            orbit["omega"] = float(np.arctan2(-c_b, c_a))
    return orbit


def _with_velocities(model, values):
    """Joint start: signs, distance and reflex masses from the velocities' amplitudes.

    Astrometry leaves (omega, node) and (omega + pi, node + pi) alike; the sign of
    each companion's velocity amplitude picks one. A companion's own amplitude sets
    the length scale (so the parallax) where the parallax is free, and the primary's
    reflex sets each companion's mass.
    """
    vel = model.velocity_rows
    values = dict(values)
    shapes = {n: [model.velocity_shape(n, _one(values[n]))[0]] for n in model.companions}
    _, coef, fitted = _velocity_fit(model, shapes)
    amplitude = {}
    for k, name in enumerate(model.companions):
        orbit = dict(values[name])
        c1 = coef.get((name, "primary", 0), 0.0)
        c2 = coef.get((name, "own", 0), 0.0)
        if (c2 < 0) if np.any(vel.owner == k) else (c1 < 0):
            orbit["omega"] += np.pi
            orbit["node"] += np.pi
        amplitude[name] = (abs(c1), abs(c2))
        values[name] = orbit
    if model.parallax_from_velocities:
        _scale_from_velocities(model, values, amplitude)
    for name, (k1, _) in amplitude.items():
        comp = model.companions[name]
        if comp.mass.is_fixed or not model.primary_has_velocities:
            continue
        orbit = values[name]
        total = values["central_mass"] + orbit.get("mass", 0.0)
        k_rel = _relative_amplitude(orbit, total)
        share = float(np.clip(k1 / k_rel, 1e-9, 0.9)) if k_rel > 0 else 1e-6
        orbit["mass"] = _inside(comp.mass, share * total)
        values["central_mass"] = max(total - orbit["mass"], 1e-30)
    values["rv"] = _velocity_nuisance(model, coef, fitted)
    if model.spec.frame is not None:
        # The instruments' zero points are the frame's: the fitted systemic velocity
        # of the first instrument starts the primary's own velocity.
        values["frame"] = dict(values.get("frame", {}),
                               velocity=float(coef[("offset", vel.labels[0])]))
    return values


def _relative_amplitude(orbit, total_mass):
    """K of the relative orbit (km/s) from its elements and total mass (M_sun)."""
    a = np.cbrt(GM_SUN * total_mass * orbit["period"] ** 2 / (4 * np.pi ** 2))
    return float(KM_S_PER_AU_DAY * kepler.radial_velocity_amplitude(
        a, orbit["period"], orbit["ecc"], orbit["inc"]))


def _scale_from_velocities(model, values, amplitude):
    """Rescale lengths (parallax and masses) so a companion's own K is matched."""
    vel = model.velocity_rows
    for k, name in enumerate(model.companions):
        k1, k2 = amplitude[name]
        if not np.any(vel.owner == k) or k2 <= 0:
            continue
        orbit = values[name]
        total = values["central_mass"] + orbit.get("mass", 0.0)
        k_now = _relative_amplitude(orbit, total)
        k_seen = k1 + k2 if model.primary_has_velocities else k2
        ratio = k_seen / k_now  # lengths scale as K, masses as K^3, parallax as 1/K
        values["parallax"] = _inside(model.spec.parallax, values["parallax"] / ratio)
        values["central_mass"] *= ratio ** 3
        for other in model.companions:
            if "mass" in values[other]:
                values[other]["mass"] *= ratio ** 3
        return

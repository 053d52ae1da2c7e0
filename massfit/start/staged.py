"""Starts of models that the linear scans cannot search directly: perturbed models (secular J2,
integrated J2/J4/pulls, in stages from a short window to all the data) and a moving line of
sight, each from the two-body search on a fixed plane.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from massfit.errors import ModelError
from massfit.model.orbit_model import OrbitModel
from massfit.start.joint import best_combination
from massfit.start.linearised import linearised_least_squares
from massfit.start.least_squares import (
    centre_guess,
    chi2_at,
    covariance_at,
    solve_least_squares,
    values_from_theta,
)
from massfit.start.progress import start_reporter
from massfit.start.result import Start
from massfit.start.scan import (SCREEN_EVALUATIONS, own_rows, prior_centre,
                                single_companion_modes)
from massfit.start.velocities import inside_support

__all__ = ["perturbed_start", "sight_start", "staged_start"]


def perturbed_start(model, two_body):
    """Start the secular J2 model from the two-body search, then polish.

    The periodograms, linear scans and alias choice work on Keplerian ellipses, so they
    run on the two-body model of the same data and companions. Its solution is mapped
    into the perturbed model's elements by the dynamics (``from_two_body``: e.g. the
    J2 model turns the fitted mean-longitude rate into its anomalistic period and the
    central mass into the one its corrected third law needs; the N-body model offers
    several companion masses) and polished there by least squares, candidate by
    candidate until one fits acceptably (the poor-fit criterion of the summary). The
    two-body model's comparable modes are reported as found. ``two_body`` is what
    :func:`two_body_start` returned for the model.
    """
    _, found, values = two_body
    best, best_chi2 = None, np.inf
    for candidate in model.dynamics.from_two_body(model, values):
        for name, comp in model.companions.items():
            if not comp.mass.is_fixed:
                mass = candidate[name].get("mass", 0.0)
                if not comp.mass.low < mass < comp.mass.high:
                    candidate[name] = dict(candidate[name],
                                           mass=inside_support(comp.mass, prior_centre(comp.mass)))
        theta = solve_least_squares(model, candidate, rounds=3)
        if theta is None:
            continue
        chi2 = chi2_at(model, theta)
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
    return Start(theta=theta, chi2=chi2_at(model, theta), covariance=covariance_at(model, theta),
                 modes=modes, per_companion=per, candidate_modes=weighed,
                 notes=list(notes))


def sight_start(model):
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
    own = own_rows(data)
    plane_rows = replace(data.select(own), primary_ra=None, primary_dec=None,
                         reference_body=None)
    plane = OrbitModel(replace(model.observations, astrometry=plane_rows),
                       replace(model.spec, companions=dict(model.companions),
                               strict_companions=True))
    # Each companion's own search, and the combination whose masses agree; the
    # runner-up swaps of the fixed-plane fit are skipped: on a turning line of sight
    # every fixed-plane chi^2 is large, so they would all count as comparable.
    singles = {name: single_companion_modes(plane, name) for name in plane.companions}
    chosen_modes, (plane_theta, _, _) = best_combination(plane, singles)
    values = values_from_theta(plane, plane_theta)
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
        scores = [chi2_at(model, _theta_of(model, turned(trial, name, turn)))
                  for turn in (0.0, np.pi)]
        chosen[name] = (0.0, np.pi)[int(np.argmin(scores))]
        trial = turned(trial, name, chosen[name])
    best = solve_least_squares(model, trial, rounds=3)
    best_chi2 = np.inf if best is None else chi2_at(model, best)
    for name in model.companions:
        if best is not None and _acceptable(model, best, best_chi2):
            break
        other = turned(values_from_theta(model, best) if best is not None else trial,
                       name, np.pi - chosen[name])
        theta = solve_least_squares(model, other, rounds=3)
        if theta is not None and chi2_at(model, theta) < best_chi2:
            best, best_chi2 = theta, chi2_at(model, theta)
    if best is None:
        raise ModelError("the least-squares fit with the moving line of sight failed from "
                         "the fixed-plane solution; check the primary_ra, primary_dec and "
                         "distance columns")
    theta = model.recentre(best)
    per = {name: {"period": m["period"], "central_mass": m["central_mass"],
                  "chi2": m["chi2"], "rows": m["rows"], "searched_with": "fixed sky plane"}
           for name, m in chosen_modes.items()}
    return Start(theta=theta, chi2=best_chi2, covariance=covariance_at(model, theta),
                 modes=[], per_companion=per)


def _theta_of(model, values):
    """Sampled coordinates of physical values, with the windows centred on them."""
    model.recentre(centre_guess(model, values))
    return model.from_physical(values)

#: Candidates of an integrated model's start kept after the first stage's screening.
_STAGED_CANDIDATES = 3

#: Rows each companion needs inside a stage's time window.
_STAGE_ROWS = 8


def staged_start(model, two_body, progress=None):
    """Start an integrated model (J2, J4, pulls) from the two-body search, in stages.

    The two-body solution follows each orbit's mean path; over a long span the
    perturbed orbit drifts away from it (resonant pulls, precession), so a least
    squares from there over all the data may not find its way. It is polished first
    on the rows within a short time window about the model's epoch, where both paths
    still agree, and the window is doubled stage by stage up to all the data. The
    first stage screens the dynamics' candidates (companion masses, mirror images);
    the best few go on. Every least-squares pass stops at the dynamics'
    ``start_evaluations``; a pass that stops there is reported in ``notes``.
    ``two_body`` is what :func:`two_body_start` returned for the model.
    """
    dynamics = model.dynamics
    limit = dynamics.start_evaluations
    _, found, values = two_body
    windows = _stage_windows(model, values)
    models = [_window_model(model, half) for half in windows[:-1]] + [model]

    say = start_reporter(progress, dynamics.label)
    say(f"two-body search done; {len(models)} stage(s), windows of +/- "
        + ", ".join(f"{h:.4g}" for h in windows) + " d about the epoch")
    screened = []
    for candidate in dynamics.from_two_body(model, values):
        candidate = _shift_phases(candidate, model, models[0])
        theta = solve_least_squares(models[0], candidate, rounds=1, max_nfev=SCREEN_EVALUATIONS)
        if theta is not None:
            screened.append((chi2_at(models[0], theta), values_from_theta(models[0], theta)))
    screened.sort(key=lambda c: c[0])
    best, best_chi2, notes = None, np.inf, []
    for rank, (_, trial) in enumerate(screened[:_STAGED_CANDIDATES]):
        theta, capped = _run_stages(models, trial, limit, say, rank)
        if theta is None:
            continue
        chi2 = chi2_at(model, theta)
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
        # Through the linearised departure first (a few integrations a round); the last
        # stage, whose solution the sampler starts from, then by the exact least
        # squares from there (few iterations from so near).
        polished = _linearised_polish(stage, values, say)
        theta = polished
        if polished is None or k == len(models) - 1:
            theta = solve_least_squares(
                stage, values if polished is None else values_from_theta(stage, polished),
                rounds=1 if polished is not None else 2, max_nfev=limit, capped=capped)
        if theta is None:
            say(f"candidate {rank + 1}, stage {k + 1}/{len(models)}: least squares failed")
            return None, notes
        if capped:
            notes.append(f"the start's least squares stopped at its cap of {limit} "
                         f"evaluations in stage {k + 1} of {len(models)} "
                         f"({len(stage.observations.astrometry)} rows); the starting point "
                         f"may not be the best fit: raise start_evaluations")
        chi2 = chi2_at(stage, theta)
        say(f"candidate {rank + 1}, stage {k + 1}/{len(models)}: "
            f"{len(stage.observations.astrometry)} rows, chi2 {chi2:.6g}"
            + (" (stopped at the cap)" if capped else ""))
        values = values_from_theta(stage, theta)
    return theta, notes


def _linearised_polish(model, values, say):
    """The stage's least squares through the linearised departure from two-body orbits
    (:mod:`massfit.start.linearised`), or None where it did not lower chi^2 (then the
    exact least squares runs)."""
    theta = _theta_of(model, values)
    if not np.isfinite(model.log_prior(theta[None])[0]):
        return None
    polished, chi2, _ = linearised_least_squares(model, theta, say=say)
    if not np.isfinite(chi2) or np.array_equal(polished, theta):  # no round lowered it
        return None
    return model.recentre(polished)


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

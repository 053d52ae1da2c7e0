"""One companion on its own: candidate periods, a linear Thiele-Innes scan over a grid of
eccentricities and periapsis times, and the best grid points polished by least squares.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from massfit.constants import GM_SUN
from massfit.errors import ModelError
from massfit.model.orbit_model import OrbitModel
from massfit.model.parts import data_files
from massfit.orbits import kepler
from massfit.priors import Fixed, Normal
from massfit.start.aliases import candidate_periods
from massfit.start.least_squares import CHUNK_ELEMENTS, chi2_at, orbit_dict, solve_least_squares

__all__ = [
    "check_rows_from_primary",
    "own_rows",
    "ECC_GRID",
    "PHASE_GRID",
    "POLISH",
    "SCREEN_EVALUATIONS",
    "SEARCH_ROWS",
    "distinct_periods",
    "elements_from_thiele_innes",
    "parallax_guess",
    "prior_centre",
    "single_companion_modes",
]

#: The linear scan's grid: the eccentricities and the number of periapsis phases tried
#: per candidate period, and how many of the best grid points are polished.
ECC_GRID = (0.0, 0.25, 0.5, 0.75, 0.9)
PHASE_GRID = 12
POLISH = 6

#: A single-companion candidate is dropped when, after a first pass of this many
#: evaluations, its chi^2 exceeds this factor times (best chi^2 so far + residuals).
SCREEN_EVALUATIONS = 30

_SCREEN_FACTOR = 10.0

#: The single-companion search looks at most at this many rows of a companion (a
#: seeded random subset): its cost grows with the rows, the solution it finds hardly.
SEARCH_ROWS = 4000

_SEARCH_SEED = 20261202


# ------------------------------------------------------------------ one body alone
def single_companion_modes(model, name):
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
    for _, values in candidates[:POLISH * 2]:
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
    return distinct_periods(solutions)


def own_rows(astrometry):
    """Rows measured from the primary (a row measured from another companion needs
    that companion's orbit, which a one-companion search does not have)."""
    if astrometry.reference_body is None:
        return np.ones(len(astrometry), dtype=bool)
    return astrometry.reference_body == ""


def check_rows_from_primary(model):
    """Every companion with astrometry has enough rows measured from the primary for
    its own period search (4 epochs), else a ModelError naming it and its rows."""
    data = model.observations.astrometry
    if data is None or data.reference_body is None:
        return
    own = own_rows(data)
    for name in np.unique(data.body):
        rows = data.body == name
        epochs = len(np.unique(data.time[rows & own].jd))
        if epochs < 4:
            others = sorted(set(data.reference_body[rows & ~own]))
            raise ModelError(
                f"{data_files(data.file[rows])}: companion '{name}' has {epochs} epoch(s) "
                f"measured from the primary (its other {int(np.sum(rows & ~own))} row(s) "
                f"from {', '.join(others)}); the start searches each orbit on rows "
                f"measured from the primary and needs at least 4 epochs of them")


def _sub_model(model, name):
    obs = model.observations
    mine = (obs.astrometry.body == name) & own_rows(obs.astrometry)
    if np.sum(mine) > SEARCH_ROWS:
        # A big data set: search on a random subset, drawn with a fixed seed so the
        # start stays deterministic, and random so that no even thinning can alias a
        # short period. The joint polish afterwards uses every row.
        index = np.flatnonzero(mine)
        keep = np.random.default_rng(_SEARCH_SEED).choice(index.size, SEARCH_ROWS,
                                                          replace=False)
        mine = np.zeros(mine.size, dtype=bool)
        mine[index[np.sort(keep)]] = True
    rows = obs.astrometry.select(mine)
    sub_obs = replace(obs, astrometry=rows, velocities=None)
    spec = model.spec
    parallax = spec.parallax
    if parallax is not None and not parallax.is_fixed:
        parallax = Fixed(parallax_guess(parallax))
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


def parallax_guess(prior):
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
    ecc = np.repeat(np.asarray(ECC_GRID, dtype=float), PHASE_GRID)
    m0 = np.tile(np.linspace(0.0, 2 * np.pi, PHASE_GRID, endpoint=False), len(ECC_GRID))
    step = max(1, CHUNK_ELEMENTS // max(len(t), 1))
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
        orbit["mass"] = prior_centre(comp.mass)
    values = dict(values, **{name: orbit})
    values["central_mass"] = max(values["central_mass"] - orbit["mass"], 1e-30)
    if np.isfinite(give_up_above):
        first = solve_least_squares(sub, values, rounds=1, max_nfev=SCREEN_EVALUATIONS)
        if first is None or chi2_at(sub, first) > give_up_above:
            return None
    theta = solve_least_squares(sub, values)
    if theta is None:
        return None
    chi2 = chi2_at(sub, theta)
    phys = sub.physical(theta)
    return {"chi2": chi2, "rows": len(sub.observations.astrometry), "theta": theta,
            "orbit": orbit_dict(phys, name),
            "period": float(phys["companions"][name]["period"][0]),
            "central_mass": float(phys["central_mass"][0])}


def prior_centre(prior):
    if prior.is_fixed:
        return prior.value
    if isinstance(prior, Normal):
        return max(prior.mean, 0.0)
    return np.sqrt(prior.low * prior.high) if prior.low > 0 else 0.5 * (prior.low + prior.high)


def distinct_periods(solutions):
    """Drop solutions that repeat a better one (same period within 0.5 %)."""
    kept = []
    for sol in solutions:
        if all(abs(sol["period"] / k["period"] - 1) > 5e-3 for k in kept):
            kept.append(sol)
    return kept

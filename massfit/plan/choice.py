"""The greedy choice of next epochs, and the same number evenly spaced for comparison."""
from __future__ import annotations

import math

import astropy.units as u
import numpy as np
from astropy.table import Table


# ===================================================================== planning
def evenly_spaced(times_jd, n):
    """Indices of ``n`` candidates nearest to evenly spaced times across their span."""
    if n >= times_jd.size:
        return list(range(times_jd.size))
    targets = np.linspace(times_jd.min(), times_jd.max(), n) if n > 1 else \
        np.array([0.5 * (times_jd.min() + times_jd.max())])
    chosen = []
    for target in targets:
        dist = np.abs(times_jd - target)
        dist[chosen] = np.inf
        chosen.append(int(np.argmin(dist)))
    return sorted(chosen)


def _trial_variances(info, chosen, left, ridge):
    """Variance after each of ``left``; where the data leave every trial undetermined,
    the weak ``ridge`` prior decides (so that the first epochs can be chosen at all)."""
    trial = info.trial_variances(chosen, left)
    if ridge is not None and not np.any(np.isfinite(trial)):
        trial = info.trial_variances(chosen, left, ridge=ridge)
    return trial


def _refine_choice(info, baseline, chosen, candidates, ridge):
    """Swap chosen epochs for unchosen ones while that lowers the variance.

    A greedy choice is myopic: the best single epoch need not belong to the best pair.
    Exchanging one epoch at a time until no swap helps finds a better set of the same
    size (a local optimum). Only sets the data determine are compared.
    """
    chosen = list(chosen)
    variance = info.variance(list(baseline) + chosen)
    if not math.isfinite(variance):
        return chosen
    for _ in range(10):  # sweeps; each strictly lowers the variance or stops
        improved = False
        for j in range(len(chosen)):
            others = chosen[:j] + chosen[j + 1:]
            left = [c for c in candidates if c not in chosen]
            if not left:
                return chosen
            trial = info.trial_variances(list(baseline) + others, left)
            k = int(np.argmin(np.where(np.isfinite(trial), trial, np.inf)))
            if trial[k] < variance * (1 - 1e-9):
                chosen[j] = left[k]
                variance = float(trial[k])
                improved = True
        if not improved:
            break
    return chosen


def planned_curve(info, baseline, cand, times_jd, n_next, mass, ridge=None):
    """The planner's best sets of 1..n_next epochs, beside evenly spaced ones.

    Returns the best set of ``n_next`` epochs in order of importance (each the best
    addition to those before it), the variance after each of them, and the curve of
    precision against the number of added epochs.
    """
    rows = []
    chosen = []
    for n in range(1, min(n_next, len(cand)) + 1):
        left = [c for c in cand if c not in chosen]
        trial = _trial_variances(info, list(baseline) + chosen, left, ridge)
        if not np.any(np.isfinite(trial)):
            break
        chosen = _refine_choice(info, baseline, chosen + [left[int(np.argmin(trial))]], cand, ridge)
        even = [cand[k] for k in evenly_spaced(times_jd, n)]
        # Local search from a second start, the evenly spaced set, keeps whichever is
        # better: the planner's set is then never worse than even spacing.
        alt = _refine_choice(info, baseline, even, cand, ridge)
        if info.variance(list(baseline) + alt) < info.variance(list(baseline) + chosen):
            chosen = alt
        rows.append((n, sigma_of(info.variance(list(baseline) + chosen)),
                     sigma_of(info.variance(list(baseline) + even))))
    order = []
    for _ in range(len(chosen)):
        left = [c for c in chosen if c not in order]
        order.append(left[int(np.argmin(_trial_variances(info, list(baseline) + order, left, ridge)))])
    planned = [info.variance(list(baseline) + order[:k + 1]) for k in range(len(order))]
    curve = Table(rows=rows or None, names=("n_epochs", "planned_gm_rel_sigma",
                                            "even_gm_rel_sigma"),
                  dtype=(int, float, float))
    curve["planned_mass_sigma"] = curve["planned_gm_rel_sigma"] * mass
    curve["even_mass_sigma"] = curve["even_gm_rel_sigma"] * mass
    return order, planned, curve


def sigma_of(variance):
    return math.sqrt(variance) if math.isfinite(variance) else math.inf


def ranking_table(candidates, cand, order, planned, singles, now_var, spread=None,
                   spread_unit=None):
    now_sigma = sigma_of(now_var)
    sigma_after = np.array([sigma_of(v) for v in singles])
    with np.errstate(divide="ignore", invalid="ignore"):
        shrink = np.where(np.isfinite(now_sigma) & np.isfinite(sigma_after),
                          100 * (1 - sigma_after / now_sigma), np.nan)
        gain = np.where(np.isfinite(now_var) & np.isfinite(singles),
                        0.5 * np.log(now_var / np.asarray(singles)), np.nan)
    table = Table()
    table["candidate"] = np.arange(len(cand))
    table["time_utc"] = candidates.utc_isot
    table["time_jd"] = candidates.tdb_jd
    table["time_jd"].description = "JD (TDB)"
    table["error"] = candidates.error
    table["gm_rel_sigma_after"] = sigma_after
    table["shrink_percent"] = shrink
    table["information_gain"] = gain
    table["information_gain"].unit = u.dimensionless_unscaled
    table["information_gain"].description = "0.5 ln(var now / var after), nat"
    if spread is not None:
        table["predicted_spread"] = spread * spread_unit
        table["predicted_spread"].description = "posterior-predictive spread of the offset"
    planned_order = np.zeros(len(cand), dtype=int) - 1
    planned_sigma = np.full(len(cand), np.nan)
    for k, (c, v) in enumerate(zip(order, planned)):
        planned_order[cand.index(c)] = k + 1
        planned_sigma[cand.index(c)] = sigma_of(v)
    table["planned_order"] = planned_order
    table["planned_gm_rel_sigma"] = planned_sigma
    table.meta["columns"] = ("gm_rel_sigma_after: 1-sigma of GM over GM with this epoch "
                             "alone added; planned_order: position in the greedy choice "
                             "(-1: not chosen); planned_gm_rel_sigma: after the chosen "
                             "epochs up to this one")
    key = np.where(np.isfinite(sigma_after), sigma_after, np.inf)
    if not np.any(np.isfinite(key)):
        key = np.where(planned_order > 0, planned_order, 10 ** 9).astype(float)
    table = table[np.argsort(key, kind="stable")]
    table.add_column(np.arange(1, len(table) + 1), name="rank", index=0)
    return table

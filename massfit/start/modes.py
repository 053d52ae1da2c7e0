"""Weighing the separate solutions a fit can have, and checking the walkers saw them.

The start step (:mod:`massfit.start.search`) finds every distinct least-squares solution that
fits comparably (period aliases, mostly). Which of them matters is set by its
posterior *mass*, not by its chi^2 alone: a mode's share of the posterior is its
evidence,

    Z_k = integral over mode k of p(data | theta) p(theta) dtheta,

and the Laplace approximation about the mode's peak theta_k, with Sigma_k the
posterior covariance there, in the coordinates the prior is a density of, is

    ln Z_k ~ ln p(data | theta_k) + ln p(theta_k) + (d / 2) ln 2 pi + (1/2) ln det Sigma_k

(exact for a Gaussian posterior; MacKay 2003, *Information Theory, Inference, and
Learning Algorithms*, ch. 27). massfit's sampled coordinates carry the prior's
volume effects: the log-uniform period and mass priors are flat in log10 P and
log10 M, so an alias at a long period, whose posterior is wider in log10 P, gains
weight through det Sigma_k even at a worse chi^2. The weights are exp(ln Z_k)
normalised over the modes found.

Directions the data do not fix (a degenerate combination) have no finite
least-squares covariance; there the prior's own box (its variance, width^2 / 12)
bounds the posterior and is added to the information matrix.

A chain whose walkers never visit a mode of non-negligible weight
(:data:`MIN_WEIGHT`) has not explored its posterior: :func:`mode_census` finds such
modes in a finished chain.
"""

from __future__ import annotations

import numpy as np

__all__ = ["laplace_log_mass", "laplace_weights", "merge_same_modes", "mode_census",
           "chain_census", "in_mode", "unexplored", "unexplored_warning", "period_box",
           "MIN_WEIGHT", "SAME_MODE_SIGMAS", "WEIGHT_BASIS"]

#: A mode with at least this Laplace weight must be visited for a converged fit.
MIN_WEIGHT = 0.01
#: Two solutions whose log10 periods (every companion's) lie within this many
#: combined Laplace standard deviations are one mode.
SAME_MODE_SIGMAS = 5.0
#: A chain visits a mode when its samples come within this many of the mode's Laplace
#: standard deviations of its log10 period (every companion's)...
VISIT_SIGMAS = 5.0
#: ...or within this relative period difference, whichever is wider.
VISIT_RELATIVE = 5e-3
#: How the weights are computed, for the summary.
WEIGHT_BASIS = ("Laplace approximation about each least-squares solution: "
                "ln Z = ln posterior + (d/2) ln(2 pi) + (1/2) ln det(covariance) in the "
                "sampled coordinates (log10 P, log10 M: the log-uniform priors' volume "
                "included), normalised over the modes found")


def laplace_log_mass(log_prob, theta, covariance, *, widths=None) -> float:
    """Laplace estimate of ln(integral of exp(log_prob)) about the peak ``theta``.

    Parameters
    ----------
    log_prob : callable
        Log-posterior density (prior included) of an (n, d) array, shape (n,).
    theta : ndarray, shape (d,)
        The peak.
    covariance : ndarray, shape (d, d)
        Posterior covariance at the peak (inverse Hessian of -log_prob); may be
        singular in directions the data do not fix.
    widths : ndarray, shape (d,), optional
        Prior support width of each coordinate (inf where unbounded): its variance
        width^2 / 12 bounds the covariance in directions it leaves free.

    Returns
    -------
    float
        -inf where the peak is outside the prior.
    """
    theta = np.asarray(theta, dtype=float)
    peak = float(np.asarray(log_prob(theta[None, :])).ravel()[0])
    if not np.isfinite(peak):
        return -np.inf
    cov = 0.5 * (np.asarray(covariance, float) + np.asarray(covariance, float).T)
    information = np.linalg.pinv(cov, hermitian=True)
    if widths is not None:
        widths = np.asarray(widths, dtype=float)
        box = np.where(np.isfinite(widths) & (widths > 0), 12.0 / widths ** 2, 0.0)
        information = information + np.diag(box)
    sign, log_det_info = np.linalg.slogdet(information)
    if sign <= 0:
        return -np.inf  # an unbounded direction: no finite mass to compare
    return peak + 0.5 * theta.size * np.log(2 * np.pi) - 0.5 * log_det_info


def laplace_weights(log_masses) -> np.ndarray:
    """Normalised weights exp(ln Z_k) / sum_j exp(ln Z_j)."""
    x = np.asarray(log_masses, dtype=float)
    if not np.any(np.isfinite(x)):
        return np.full(x.size, 1.0 / max(x.size, 1))
    w = np.exp(x - np.max(x[np.isfinite(x)]))
    w = np.where(np.isfinite(w), w, 0.0)
    return w / np.sum(w)


def _period_distance(a, b) -> float:
    """Largest |delta log10 P| over the companions, in combined standard deviations."""
    worst = 0.0
    for name, period in a["periods"].items():
        sd = np.hypot(a["log10_period_sd"][name], b["log10_period_sd"][name])
        diff = abs(np.log10(period / b["periods"][name]))
        worst = max(worst, diff / max(sd, 1e-300))
    return worst


def merge_same_modes(modes) -> list:
    """Keep one entry per mode (the larger Laplace mass), and set the weights.

    ``modes`` are dicts with ``periods`` and ``log10_period_sd`` (per companion) and
    ``log_laplace_mass``; two of them are the same mode when every companion's log10
    period agrees within :data:`SAME_MODE_SIGMAS` combined standard deviations (a
    broad ridge polished to two points is one mode, not two). Returns them, largest
    weight first, each with ``weight``.
    """
    order = sorted(modes, key=lambda m: -m["log_laplace_mass"])
    kept = []
    for mode in order:
        if all(_period_distance(mode, other) > SAME_MODE_SIGMAS for other in kept):
            kept.append(dict(mode))
    for mode, weight in zip(kept, laplace_weights([m["log_laplace_mass"] for m in kept])):
        mode["weight"] = float(weight)
    return kept


def in_mode(mode, periods):
    """Boolean mask of the samples within the mode's neighbourhood in every period
    (``periods``: companion name -> sampled periods, days); None if none applies."""
    inside = None
    for name, period in mode["periods"].items():
        if name not in periods:
            continue
        tol = max(VISIT_SIGMAS * mode["log10_period_sd"][name],
                  np.log10(1.0 + VISIT_RELATIVE))
        near = np.abs(np.log10(periods[name] / period)) <= tol
        inside = near if inside is None else inside & near
    return inside


def _visited_fraction(mode, periods) -> float:
    """Fraction of samples within the mode's neighbourhood in every period."""
    inside = in_mode(mode, periods)
    return 0.0 if inside is None or inside.size == 0 else float(np.mean(inside))


def mode_census(candidates, periods) -> list:
    """The start's modes, each with the fraction of the chain's samples in it.

    Parameters
    ----------
    candidates : list of dict
        The start's weighed modes (``Start.candidate_modes``).
    periods : dict
        Companion name -> array of sampled periods (days).

    Returns
    -------
    list of dict
        JSON-ready, largest weight first: ``periods`` (d, per companion),
        ``log10_period_sd`` (the Laplace standard deviation of log10 P), ``central_mass`` (M_sun, None where not sampled), ``chi2`` (at the mode's
        least-squares peak), ``log_laplace_mass``, ``weight`` (Laplace), ``started``
        (the walkers started there), ``sample_fraction`` (of the chain's samples
        within the mode's neighbourhood) and ``visited``.
    """
    out = []
    for mode in candidates:
        fraction = _visited_fraction(mode, periods)
        entry = {key: mode[key] for key in ("periods", "log10_period_sd", "central_mass",
                                            "chi2",
                                            "log_laplace_mass", "weight", "started")
                 if key in mode}
        entry["sample_fraction"] = fraction
        entry["visited"] = bool(fraction > 0.0)
        out.append(entry)
    return out


def unexplored(census, *, min_weight=MIN_WEIGHT) -> list:
    """Modes of at least ``min_weight`` that no sample visited."""
    return [m for m in census if not m["visited"] and m["weight"] >= min_weight]


def chain_census(model, candidates, samples) -> list:
    """:func:`mode_census` of the samples (model coordinates) of a finished chain.

    Modes found by the two-body search of a perturbed model (``searched_with``) have
    two-body periods, which the perturbed model's periods differ from by its own
    corrections: they are scaled by the ratio of the chain's median period to the
    started mode's, companion by companion, before the comparison.
    """
    if not candidates or samples is None or len(samples) == 0:
        return []
    phys = model.physical(samples, lenient=True)
    periods = {name: np.asarray(phys["companions"][name]["period"])
               for name in model.companions}
    started = next((c for c in candidates if c.get("started")), None)
    if started is not None and any(c.get("searched_with") for c in candidates):
        scale = {n: float(np.median(p)) / started["periods"][n]
                 for n, p in periods.items() if n in started["periods"]}
        periods = {n: p / scale.get(n, 1.0) for n, p in periods.items()}
    return mode_census(candidates, periods)


def period_box(mode, others, name):
    """(low, high) days: a period prior about ``mode`` that holds no other mode.

    Ten of the mode's standard deviations in log10 P (at least 2 %) each way, but
    no further than half way (in log10 P) to the nearest other mode's period.
    """
    centre = np.log10(mode["periods"][name])
    half = max(10.0 * mode["log10_period_sd"][name], np.log10(1.02))
    for other in others:
        gap = abs(np.log10(other["periods"][name]) - centre)
        if gap > 0:
            half = min(half, 0.5 * gap)
    return float(10 ** (centre - half)), float(10 ** (centre + half))


def unexplored_warning(census, candidates, missing) -> str:
    """One warning naming the unvisited modes and what to do about them."""
    parts = []
    for mode in missing:
        full = next(c for c in candidates if c["periods"] == mode["periods"])
        others = [c for c in candidates if c is not full]
        boxes = []
        for name, period in mode["periods"].items():
            low, high = period_box(full, others, name)
            boxes.append(f"{name} P = {period:.6g} d (period_prior {low:.6g} to "
                         f"{high:.6g} d)")
        mass = ("" if mode["central_mass"] is None
                else f", central mass {mode['central_mass']:.4g} M_sun")
        parts.append(f"{'; '.join(boxes)}{mass}, Laplace weight "
                     f"{100 * mode['weight']:.1f} %")
    visited = sum(m["weight"] for m in census if m["visited"])
    return (f"the walkers never visited {len(missing)} mode(s) that the data allow and "
            f"the prior contains: {' | '.join(parts)}; the visited mode(s) hold only "
            f"{100 * visited:.0f} % of the posterior by the Laplace weights, so the "
            f"chain is not converged and its intervals hold for the visited mode "
            f"alone. Fit each mode on its own with the period prior given (a "
            f"log-uniform box about it) and combine the results by the weights "
            f"(candidate_modes in summary.json), or add observations that tell the "
            f"modes apart")

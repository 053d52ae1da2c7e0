"""Where the nested sampler integrates: the period boxes, and the checks of a box.

A nested run over the whole prior of a sharp likelihood fails: with many orbits in
the data's span the likelihood in the period is a comb of narrow peaks (aliases)
spaced by about P / (orbits covered), and the live points settle on a wrong tooth
long before the one that holds the posterior is found (measured: 40 nights of a moon
over 60 days, P = 0.48 d, sigma(log10 P) = 3e-7 against a prior of one decade; both
models ended "not converged" with ln Z of -3.6e7). Each run is therefore made in
period boxes about solutions the start found (:mod:`massfit.start.search`):

- several modes: each weighty mode in its own box (:func:`massfit.start.modes.period_box`);
- one solution: a box of :data:`BOX_SIGMAS` of its least-squares standard deviation
  in log10 P each way (within the prior). Its posterior must not reach the box's
  edges (:func:`edge_weight`); where it does, the box is widened by :data:`WIDEN`
  and the runs repeated (at most :data:`MAX_WIDENINGS` times), else the whole prior
  is used.

Mirror images. Astrometry alone cannot tell (node, omega) from (node + pi, omega + pi);
radial velocities can. Where a companion's node runs over a whole turn (its
velocities fix the sign), the two images are two modes, pi apart in the node: each
box is split into two halves of the node circle about the solution's node
(:func:`mirror_halves`, the box key ``"<companion>.node"``, radians), each of prior
probability 1/2. The two halves cover the whole circle, so nothing is assumed about
what lies outside them; each half's weight is the probability of that image.

In all cases Z = Z(box) * P(box), P(box) the prior probability of the box, and
what lies outside the boxes is taken to hold no posterior mass. Two checks against
the start's least-squares solution make that assumption testable:
:func:`laplace_log_evidence` (the Laplace estimate of ln Z about it, in the same
normalisation as the nested ln Z) and the highest likelihood the runs reached, which
must come within :func:`peak_margin` of the start's (a run that never reached the
best solution the start found has not integrated the posterior).
"""

from __future__ import annotations

import numpy as np

from massfit.start.modes import MIN_WEIGHT, period_box

__all__ = ["boxes_of", "own_box", "edge_weight", "laplace_log_evidence", "peak_margin",
           "mirror_bodies", "mirror_halves", "node_key", "in_node_half", "period_boxes",
           "BOX_SIGMAS", "EDGE_SHARE", "EDGE_LIMIT", "WIDEN", "MAX_WIDENINGS"]

#: A single solution's box: this many least-squares standard deviations of log10 P
#: each way.
BOX_SIGMAS = 10.0
#: The outer share of a box's width (in log10 P, at each end) whose posterior weight
#: is checked...
EDGE_SHARE = 0.1
#: ...and the weight it may hold before the box is called too narrow (a Gaussian
#: mode of BOX_SIGMAS sigma half-width holds ~1e-15 there).
EDGE_LIMIT = 1e-3
#: A box too narrow is widened by this factor...
WIDEN = 4.0
#: ...at most this many times; then the whole prior is used.
MAX_WIDENINGS = 2


def _period_column(model, name):
    return model.column_of.get(f"{name}.log10_period")


def own_box(start, model, factor=1.0) -> dict:
    """{companion: (low, high) days}: BOX_SIGMAS x ``factor`` of the start's least-squares
    standard deviation of log10 P each way about its solution, cut to the prior;
    companions whose box would hold the whole prior (or whose deviation is not
    finite) are left out."""
    out = {}
    if getattr(start, "theta", None) is None:
        return out
    cov = np.asarray(start.covariance, dtype=float)
    for name, comp in model.companions.items():
        k = _period_column(model, name)
        if k is None or comp.period.is_fixed:
            continue
        sd = float(np.sqrt(cov[k, k])) if np.isfinite(cov[k, k]) and cov[k, k] > 0 else 0.0
        if sd <= 0:
            continue
        half = BOX_SIGMAS * factor * sd
        low = max(10 ** (start.theta[k] - half), comp.period.low)
        high = min(10 ** (start.theta[k] + half), comp.period.high)
        if low > comp.period.low or high < comp.period.high:
            out[name] = (float(low), float(high))
    return out


def _searched_candidates(start, model) -> list:
    """The start's candidate modes; those found by the two-body search of a perturbed
    model (``searched_with``) scaled, companion by companion, to this model's periods by
    the ratio of the start's own period to the started mode's."""
    candidates = [dict(c) for c in (getattr(start, "candidate_modes", []) or [])]
    started = next((c for c in candidates if c.get("started")), None)
    if started is None or not any(c.get("searched_with") for c in candidates):
        return candidates
    scale = {}
    for name, period in started["periods"].items():
        k = _period_column(model, name)
        scale[name] = 1.0 if k is None else float(10 ** start.theta[k]) / period
    for c in candidates:
        c["periods"] = {n: p * scale.get(n, 1.0) for n, p in c["periods"].items()}
        c.pop("window_centres", None)  # the two-body model's, not this one's
    return candidates


def boxes_of(start, model, factor=1.0):
    """Period boxes: list of (mode, {body: (lo, hi)}).

    Several candidate modes: one box per mode of weight >= MIN_WEIGHT, with the mode's
    record (its ``window_centres``, which the start records, centre its run's angle
    windows). One solution: [(None, :func:`own_box`)] (``factor`` widens it);
    [(None, {})] is a run over the whole prior.
    """
    return mirror_halves(_period_plan(start, model, factor), model)


def _period_plan(start, model, factor):
    candidates = _searched_candidates(start, model)
    # One heavy mode among lighter ones is boxed too: a run over the whole prior can
    # settle in a light alias and never find a narrow heavy mode (measured on a sparse
    # yearly set: the start's 863-d mode of weight 1.0 lost to its 629-d alias of
    # weight 1e-5, chi^2 32.6 against 9.7; docs/validation.md).
    if len(candidates) < 2:
        return [(None, own_box(start, model, factor))]
    out = []
    for mode in (m for m in candidates if m["weight"] >= MIN_WEIGHT):
        others = [c for c in candidates if c is not mode]
        boxes = {}
        for name in mode["periods"]:
            if not model.companions[name].period.is_fixed:
                boxes[name] = period_box(mode, others, name)
        out.append((mode, boxes))
    return out


def node_key(name) -> str:
    """The box key of a companion's node half (companion names hold no dot)."""
    return f"{name}.node"


def period_boxes(boxes) -> dict:
    """The period boxes alone (companion -> (low, high) days) of a box dict."""
    return {n: v for n, v in boxes.items() if "." not in n}


def mirror_bodies(model) -> list:
    """Companions whose mirror images the data can tell apart: a node window of a
    whole turn (radial velocities fix its sign) with sky positions."""
    if getattr(model, "velocity_only", False):
        return []
    widths = getattr(model, "node_width", {})
    return [name for name in model.companions
            if widths.get(name, 0.0) >= 2 * np.pi - 1e-12 and f"{name}.node" in model.column_of]


def mirror_halves(plan, model, centres=None) -> list:
    """Each entry of ``plan`` split into the two halves of each mirror companion's
    node circle about the mode's node (its ``window_centres``, else the model's
    centre): [c - pi/2, c + pi/2] and [c + pi/2, c + 3 pi/2]."""
    out = []
    for mode, boxes in plan:
        split = [(mode, dict(boxes))]
        for name in mirror_bodies(model):
            own = ((mode or {}).get("window_centres") or centres or model.centres).get(name, {})
            c = float(own.get("node", model.centres[name]["node"]))
            split = [(m, dict(b, **{node_key(name): (c + shift - np.pi / 2,
                                                     c + shift + np.pi / 2)}))
                     for m, b in split for shift in (0.0, np.pi)]
        out.extend(split)
    return out


def in_node_half(node, half) -> np.ndarray:
    """Whether nodes (radians) lie in the half ``(low, high)`` of the circle."""
    low, high = half
    return np.mod(np.asarray(node) - low, 2 * np.pi) < (high - low)


def edge_weight(model, runs, boxes) -> float:
    """The largest posterior weight, over the runs and the boxed periods, in the outer
    :data:`EDGE_SHARE` of a box (in log10 P) at an end that is not the prior's own."""
    worst = 0.0
    for name, (low, high) in period_boxes(boxes).items():
        k = _period_column(model, name)
        prior = model.companions[name].period
        lo, hi = np.log10(low), np.log10(high)
        band = EDGE_SHARE * (hi - lo)
        for run in runs:
            x, w = run["samples"][:, k], run["weights"]
            if low > prior.low:
                worst = max(worst, float(np.sum(w[x < lo + band])))
            if high < prior.high:
                worst = max(worst, float(np.sum(w[x > hi - band])))
    return worst


def laplace_log_evidence(model, start, transform) -> float | None:
    """The Laplace estimate of ln Z about the start's solution, in the nested ln Z's
    normalisation (the likelihood's Gaussian constant and the proper prior's density,
    :meth:`massfit.sample.nested.PriorTransform.log_density`, unboxed):

        ln Z ~ ln L(theta) + ln pi(theta) + (d/2) ln 2 pi + (1/2) ln det Sigma

    (MacKay 2003, ch. 27), Sigma the least-squares covariance; None where it has no
    finite value."""
    from massfit.start.least_squares import parameter_bounds
    from massfit.start.modes import laplace_log_mass

    theta = np.asarray(start.theta, dtype=float)
    log_prior = transform.log_density(theta)
    if not np.isfinite(log_prior):
        return None
    low, high = parameter_bounds(model)

    def log_post(points):
        return model.log_likelihood(points) + log_prior

    value = laplace_log_mass(log_post, theta, start.covariance, widths=high - low)
    return float(value) if np.isfinite(value) else None


def peak_margin(n_dim) -> float:
    """How far (in ln L) below the start's least-squares peak the runs' best point may
    stay: n_dim / 2 + 2. A posterior draw of a d-dimensional Gaussian lies d / 2 below
    the peak on average; the runs' best of many points comes far closer."""
    return 0.5 * n_dim + 2.0

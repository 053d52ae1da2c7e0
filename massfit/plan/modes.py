"""Planning with modes: the epochs that best tell a fit's separated modes apart.

Where a fit weighed several modes (period aliases; ``weighed_modes`` of a nested fit),
shrinking sigma(GM) within one mode matters less than learning which mode is true.
Each mode k (probability w_k) predicts, at a candidate epoch, a distribution of the
offsets there: over the mode's posterior samples, mean mu_k and covariance C_k, to
which the measurement adds its noise (sigma^2 on each of east and north). Two modes
i, j are then told apart by one measurement as well as the two Gaussians
N(mu_i, C_i + sigma^2) and N(mu_j, C_j + sigma^2) differ; their Bhattacharyya
distance

    D_ij = (1/8) d^T S^-1 d + (1/2) ln(det S / sqrt(det S_i det S_j)),   S = (S_i + S_j) / 2

(Bhattacharyya 1943; Fukunaga 1990, *Introduction to Statistical Pattern Recognition*,
section 3.4; from memory) bounds the probability of picking the wrong mode after the
measurement by sum_{i<j} sqrt(w_i w_j) exp(-D_ij). Before any measurement the bound is
sum_{i<j} sqrt(w_i w_j). Each candidate epoch is ranked by the bound after it (lower is
better).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

__all__ = ["read_modes", "mode_labels", "bhattacharyya", "separating_epochs"]


def read_modes(folder) -> list:
    """The weighed modes of a fit's output folder (``summary.json``), [] if none."""
    path = Path(folder) / "summary.json"
    try:
        summary = json.loads(path.read_text())
    except (OSError, ValueError):
        return []
    modes = summary.get("weighed_modes") if isinstance(summary, dict) else None
    if not isinstance(modes, list) or len(modes) < 2:
        return []
    # Mirror images (the same period box, the node half a turn apart) are told apart by
    # velocities, not by the epochs' sky positions this planner weighs: the planner
    # takes each period box once, the images' probabilities summed.
    out = []
    for mode in (m for m in modes if isinstance(m, dict) and m.get("period_boxes_days")):
        same = next((o for o in out if o["period_boxes_days"] == mode["period_boxes_days"]),
                    None)
        if same is None:
            out.append(dict(mode))
        else:
            same["probability"] = same.get("probability", 0.0) + mode.get("probability", 0.0)
    return out if len(out) > 1 else []


def mode_labels(companions, modes) -> np.ndarray:
    """Index of the mode each posterior sample lies in (-1: in none), by the modes'
    period boxes (``period_boxes_days``: companion -> [low, high])."""
    n = next(iter(companions.values()))["period"].size
    labels = np.full(n, -1)
    for k, mode in enumerate(modes):
        inside = np.ones(n, dtype=bool)
        for name, (low, high) in mode["period_boxes_days"].items():
            if name in companions:
                period = companions[name]["period"]
                inside &= (period >= low) & (period <= high)
        labels[inside & (labels < 0)] = k
    return labels


def bhattacharyya(mean_a, cov_a, mean_b, cov_b) -> float:
    """Bhattacharyya distance between two normal distributions (see the module notes)."""
    cov = 0.5 * (cov_a + cov_b)
    d = mean_a - mean_b
    _, logdet = np.linalg.slogdet(cov)
    _, logdet_a = np.linalg.slogdet(cov_a)
    _, logdet_b = np.linalg.slogdet(cov_b)
    return float(0.125 * d @ np.linalg.solve(cov, d)
                 + 0.5 * (logdet - 0.5 * (logdet_a + logdet_b)))


def separating_epochs(posterior, schedule, labels, probabilities) -> list:
    """Each candidate epoch with the bound on picking the wrong mode after it.

    Parameters
    ----------
    posterior : Posterior
        :class:`massfit.plan.posterior.Posterior` of a fit.
    schedule : Schedule
        The candidate epochs with their expected errors.
    labels : ndarray of int
        The mode of each posterior sample (:func:`mode_labels`).
    probabilities : sequence of float
        Each mode's probability.

    Returns
    -------
    list of dict
        Best first: ``time_utc``, ``time_jd_tdb``, ``wrong_mode_bound_after`` and
        ``wrong_mode_bound_now`` (the bound before it), ``largest_separation_sigma``
        (the largest |mu_i - mu_j| over the pairs of modes, in measurement errors).
    """
    w = np.asarray(probabilities, dtype=float)
    w = w / w.sum()
    epoch, east, north = posterior.predicted(schedule)
    pairs = [(i, j) for i in range(w.size) for j in range(i + 1, w.size)]
    now = float(sum(np.sqrt(w[i] * w[j]) for i, j in pairs))
    out = []
    for e in range(len(schedule)):
        cols = np.flatnonzero(epoch == e)
        if cols.size == 0:
            continue
        sigma = float(schedule.error.value[e])
        values = np.concatenate([east[:, cols], north[:, cols]], axis=1) / sigma
        stats = []
        for k in range(w.size):
            member = values[labels == k]
            cov = np.cov(member, rowvar=False).reshape(values.shape[1], -1)
            stats.append((member.mean(axis=0), cov + np.eye(values.shape[1])))
        bound, widest = 0.0, 0.0
        for i, j in pairs:
            distance = bhattacharyya(stats[i][0], stats[i][1], stats[j][0], stats[j][1])
            bound += np.sqrt(w[i] * w[j]) * np.exp(-distance)
            widest = max(widest, float(np.max(np.abs(stats[i][0] - stats[j][0]))))
        out.append({"time_utc": str(schedule.utc_isot[e]),
                    "time_jd_tdb": float(schedule.tdb_jd[e]),
                    "wrong_mode_bound_after": float(bound), "wrong_mode_bound_now": now,
                    "largest_separation_sigma": widest})
    out.sort(key=lambda row: row["wrong_mode_bound_after"])
    return out

"""Checks on a finished chain that the convergence criterion cannot make.

Two things can make a posterior look more trustworthy than it is:

- **Separated modes** (period aliases, mostly). emcee's autocorrelation time is
  computed walker by walker about each walker's own mean, so an ensemble whose walkers
  sit in two modes that they never cross can pass the 50-tau test while the relative
  weight of the modes is set by where the walkers started, not by the data.
  :func:`posterior_modes` finds modes separated by empty gaps in the samples of each
  period and of the central mass, and whether any walker moves between them.
- **Prior dependence** (short arcs, mostly). When the data leave the mass loose, the
  interval mostly restates the prior. :func:`prior_sensitivity` reweights the samples
  to a second, equally defensible prior and measures how far the central mass moves.
"""

from __future__ import annotations

import numpy as np

from massfit.priors import LogUniform, Normal, Uniform
from massfit.summarise.derived import interval
from massfit.summarise.rounding import NARROW_LABEL, WIDE_LABEL, format_interval, format_range

__all__ = ["split_modes", "posterior_modes", "prior_sensitivity", "mode_report_lines",
           "weighed_mode_blocks",
           "SEPARATION", "MIN_MODE_FRACTION", "SHIFT_LIMIT"]

#: Two groups of samples are separate modes when the empty gap between them is wider
#: than this many times the mean spacing of the samples next to it: the density in
#: the gap is below 1/SEPARATION of the density at the facing edges. For samples from
#: one smooth mode the widest gap is about ln(n) mean spacings (the largest of n
#: exponential spacings), so 30 is rarely reached by chance.
SEPARATION = 30.0
#: A mode holds at least this fraction of the samples (smaller groups are tails).
MIN_MODE_FRACTION = 0.01
#: The mass is called prior-sensitive when a second prior moves its median by more
#: than this fraction of its 68 % half-width...
SHIFT_LIMIT = 0.5
#: ...or changes the width of its 68 % interval by more than this factor...
WIDTH_LIMIT = 1.5
#: ...or more than EDGE_FRACTION of the samples lie within EDGE_WIDTH (a fraction of
#: the prior's range, in log10 for a log-uniform prior) of one of its bounds: the
#: posterior runs against the prior's edge, and the bound is doing the work.
EDGE_WIDTH = 0.02
EDGE_FRACTION = 0.05
#: ...or the posterior's standard deviation (in log10 for a log-uniform prior) is more
#: than this fraction of the prior's own: the data have not even halved the prior's
#: spread, so the interval is largely the prior's (the "posterior contraction" of
#: the Bayesian-workflow literature; the value 0.5 is a choice, not a standard).
PRIOR_WIDTH_LIMIT = 0.5


def split_modes(values, *, separation=SEPARATION, min_fraction=MIN_MODE_FRACTION):
    """Split 1-D samples into groups separated by empty gaps.

    The widest gap with at least ``min_fraction`` of the samples (and 10 samples) on
    each side splits the samples when it is wider than ``separation`` times the mean
    spacing of those edge samples on either side; each part is then split again.

    Parameters
    ----------
    values : array_like
        Samples.

    Returns
    -------
    list of (low, high)
        Value ranges of the groups, in increasing order; one range for a unimodal
        sample.
    """
    x = np.sort(np.asarray(values, dtype=float).ravel())
    x = x[np.isfinite(x)]
    if x.size == 0:
        return []
    edge = max(10, int(np.ceil(min_fraction * x.size)))
    ranges = []

    def split(seg):
        if seg.size >= 2 * edge:
            gaps = np.diff(seg)[edge - 1:seg.size - edge]
            if gaps.size:
                k = int(np.argmax(gaps)) + edge - 1
                left = seg[k] - seg[k + 1 - edge]
                right = seg[k + edge] - seg[k + 1]
                spacing = 0.5 * (left + right) / (edge - 1)
                if gaps[k - edge + 1] > separation * spacing:
                    split(seg[:k + 1])
                    split(seg[k + 1:])
                    return
        ranges.append((float(seg[0]), float(seg[-1])))

    split(x)
    return ranges


def _mode_blocks(column, ranges, walkers):
    """Per mode: fraction of samples, median, range and the walkers that visit it."""
    flat = column.ravel()
    blocks = []
    for low, high in ranges:
        member = (column >= low) & (column <= high)
        blocks.append({"fraction": float(np.mean(member)),
                       "median": float(np.median(flat[member.ravel()])),
                       "low": low, "high": high,
                       "walkers": np.flatnonzero(member.any(axis=0)).tolist()})
    return blocks


def posterior_modes(model, chain) -> list:
    """Separated modes in the posterior of each period and of the central mass.

    Parameters
    ----------
    model : OrbitModel
    chain : Chain
        With ``walker_steps`` (the kept steps, walker by walker).

    Returns
    -------
    list of dict
        One entry per multimodal quantity: ``parameter`` (``central_mass`` or
        ``<body>.period``), ``unit``, ``modes`` (each with ``fraction``, ``median``,
        ``low``, ``high``, ``walkers``: how many walkers visit it) and
        ``walkers_cross`` (False when no walker ever moves from one mode to another,
        so that the modes' weights are not measured).
    """
    steps = chain.walker_steps
    if steps is None or steps.size == 0:
        return []
    found = []
    for k, name in enumerate(model.names):
        if name == "central.log10_mass":
            label, unit = "central_mass", "M_sun"
        elif name.endswith(".log10_period"):
            label, unit = name.replace(".log10_period", ".period"), "d"
        else:
            continue
        column = steps[:, :, k]
        ranges = split_modes(column)
        if len(ranges) < 2:
            continue
        blocks = _mode_blocks(column, ranges, steps.shape[1])
        visits = np.zeros(steps.shape[1], dtype=int)
        for block in blocks:
            visits[block["walkers"]] += 1
        modes = [{"fraction": b["fraction"], "median": 10.0 ** b["median"],
                  "low": 10.0 ** b["low"], "high": 10.0 ** b["high"],
                  "walkers": len(b["walkers"])} for b in blocks]
        found.append({"parameter": label, "unit": unit, "modes": modes,
                      "walkers_cross": bool(np.any(visits > 1))})
    return found


def _alternative(prior, values):
    """Log-weight to a second prior for a positive quantity, and its description."""
    if isinstance(prior, LogUniform):
        return np.log(values), "uniform instead of log-uniform"
    if isinstance(prior, Uniform) and prior.low >= 0:
        with np.errstate(divide="ignore"):
            return -np.log(values), "log-uniform instead of uniform"
    return None, None


def _weighted_percentiles(x, w, q):
    order = np.argsort(x)
    cdf = np.cumsum(w[order])
    cdf /= cdf[-1]
    return np.interp(np.asarray(q) / 100.0, cdf - 0.5 * w[order] / np.sum(w), x[order])


def prior_sensitivity(model, samples) -> dict | None:
    """How much the central mass moves under a second, equally vague prior.

    The second prior swaps log-uniform and uniform for the central mass and every
    period (those with either prior), and replaces a uniform eccentricity prior
    starting at 0 by one rising as e (favouring eccentric orbits). The samples are
    importance-reweighted by the ratio of the two priors, so nothing is refitted.

    Parameters
    ----------
    model : OrbitModel
    samples : ndarray, shape (n, n_dim)

    Returns
    -------
    dict or None
        ``alternative`` (what was changed), ``median_shift`` (in units of the 68 %
        half-width under the fit's prior), ``width_ratio`` (68 % width under the second
        prior over that under the first), ``effective_fraction`` (effective sample
        size of the weights over the number of samples) and ``sensitive``. None where
        every prior is informative (normal or fixed) and there is nothing to swap.
    """
    if samples.shape[0] < 10 or "central.log10_mass" not in model.names:
        return None  # nothing sampled to be sensitive (fixed, or velocities alone)
    phys = model.physical(samples)
    log_w = np.zeros(samples.shape[0])
    changed = []
    spec = model.spec
    if not spec.central_mass.is_fixed:
        lw, text = _alternative(spec.central_mass, phys["central_mass"])
        if lw is not None:
            log_w += lw
            changed.append(f"central mass {text}")
    for name, comp in model.companions.items():
        orbit = phys["companions"][name]
        if not comp.period.is_fixed:
            lw, text = _alternative(comp.period, orbit["period"])
            if lw is not None:
                log_w += lw
                changed.append(f"{name} period {text}")
        ecc = comp.eccentricity
        if isinstance(ecc, Uniform) and ecc.low == 0.0:
            with np.errstate(divide="ignore"):
                log_w += np.log(orbit["ecc"])
            changed.append(f"{name} eccentricity rising as e instead of uniform")
    if not changed:
        return None
    log_w = np.where(np.isfinite(log_w), log_w, -np.inf)
    w = np.exp(log_w - np.max(log_w))
    w /= np.sum(w)
    x = np.log10(phys["central_mass"])
    lo1, med1, hi1 = np.percentile(x, (15.865, 50.0, 84.135))
    lo2, med2, hi2 = _weighted_percentiles(x, w, (15.865, 50.0, 84.135))
    half = max(0.5 * (hi1 - lo1), 1e-300)
    shift = float((med2 - med1) / half)
    ratio = float((hi2 - lo2) / max(hi1 - lo1, 1e-300))
    effective = float(1.0 / np.sum(w * w) / w.size)
    edge = _edge_fraction(spec.central_mass, phys["central_mass"])
    of_prior = _width_of_prior(spec.central_mass, phys["central_mass"])
    sensitive = bool(abs(shift) > SHIFT_LIMIT or not 1 / WIDTH_LIMIT < ratio < WIDTH_LIMIT
                     or effective * w.size < 50 or edge > EDGE_FRACTION
                     or of_prior > PRIOR_WIDTH_LIMIT)
    return {"alternative": "; ".join(changed), "median_shift": shift,
            "width_ratio": ratio, "effective_fraction": effective,
            "at_prior_edge": edge, "width_of_prior": of_prior, "shift_limit": SHIFT_LIMIT,
            "width_limit": WIDTH_LIMIT, "edge_limit": EDGE_FRACTION,
            "width_of_prior_limit": PRIOR_WIDTH_LIMIT, "sensitive": sensitive}


def _width_of_prior(prior, values):
    """Posterior standard deviation over the prior's, in the prior's own coordinate.

    0 where the prior has no finite spread to compare with.
    """
    if isinstance(prior, LogUniform):
        spread = np.log10(prior.high / prior.low) / np.sqrt(12.0)
        values = np.log10(values)
    elif isinstance(prior, Uniform) and np.isfinite(prior.high - prior.low):
        spread = (prior.high - prior.low) / np.sqrt(12.0)
    elif isinstance(prior, Normal):
        spread = prior.sd  # a truncated one is narrower: the ratio errs low, not high
    else:
        return 0.0
    return float(np.std(values) / spread) if spread > 0 else 0.0


def _edge_fraction(prior, values):
    """Fraction of samples within EDGE_WIDTH of a finite bound of the prior."""
    low, high = prior.low, prior.high
    if not (np.isfinite(low) and np.isfinite(high)):
        return 0.0
    if isinstance(prior, LogUniform):
        values, low, high = np.log10(values), np.log10(low), np.log10(high)
    margin = EDGE_WIDTH * (high - low)
    return float(np.mean((values < low + margin) | (values > high - margin)))


def mode_report_lines(census, over_modes=None) -> list:
    """Terminal lines: one per mode, with its weight and whether it was visited, and
    (where each mode was sampled) its mass and the mass over all modes."""
    lines = ["  modes found by the start (weights: Laplace approximation):"]
    for mode in census:
        periods = ", ".join(f"{n} P = {p:.6g} d" for n, p in mode["periods"].items())
        mass = ("" if mode["central_mass"] is None
                else f", central mass {mode['central_mass']:.4g} M_sun")
        seen = (f"visited ({100 * mode['sample_fraction']:.0f} % of samples)"
                if mode["visited"] else "NOT visited")
        lines.append(f"    {100 * mode['weight']:5.1f} %  {periods}{mass}, "
                     f"chi2 = {mode['chi2']:.1f}; {seen}")
        if "chain" in mode:
            block = mode["chain"]["central_mass_solar"]
            lines.append(f"            its chain ({mode['chain']['sampled']}): central "
                         f"mass {_block_text(block)} M_sun")
    if over_modes:
        lines.append(f"  central mass over the {over_modes['modes']} modes: "
                     f"{_block_text(over_modes['central_mass_solar'])} M_sun "
                     f"({over_modes['approximation']})")
    return lines


def _block_text(block) -> str:
    return (f"{format_interval(block)} ({NARROW_LABEL}: {format_range(block, '68')}; "
            f"{WIDE_LABEL}: {format_range(block)})")


def weighed_mode_blocks(modes, members, samples) -> list:
    """The nested sampler's modes for the summary: each mode's probability with its
    error, and the central mass and every period within it (interval blocks).

    Parameters
    ----------
    modes : list of dict
        :attr:`massfit.sample.nested.NestedChain.modes`.
    members : list of ndarray
        Per mode, the boolean mask of the samples drawn from it.
    samples : dict
        :func:`massfit.summarise.derived.derived_samples` of those samples.
    """
    out = []
    for mode, member in zip(modes, members):
        block = {key: mode[key] for key in (
            "probability", "probability_err", "probability_runs", "log_z", "log_z_err",
            "log_z_runs", "log_z_err_runs", "runs_agree", "period_boxes_days",
            "start_periods", "laplace_weight", "node_half_centre_deg") if key in mode}
        block["draws"] = int(np.sum(member))
        if "central_mass_solar" in samples:
            block["central_mass_solar"] = interval(samples["central_mass_solar"][member],
                                                   "M_sun")
        block["period"] = {name: interval(comp["period"][member], "d")
                           for name, comp in samples["companions"].items()}
        if "node_half_centre_deg" in mode:  # a mirror image: its node tells it apart
            block["ascending_node"] = {
                name: interval(samples["companions"][name]["ascending_node"][member], "deg")
                for name in mode["node_half_centre_deg"]}
        out.append(block)
    return out

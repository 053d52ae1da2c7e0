"""Candidate periods of a sampled signal: periodogram peaks and their sampling aliases.

Sparse or seasonal sampling turns one signal into a family of periodogram peaks. If
the observing times repeat with a near-regular cadence (once a year, once a night),
the *spectral window* of the times has strong peaks at that cadence's frequency
``s`` and its harmonics, and a signal at frequency ``f`` looks almost the same at
``|f +- k s|``. Some of those aliases lie below half the sampling interval, where a
plain periodogram grid usually stops; they are found here by construction:

1. The Lomb-Scargle periodogram (astropy) of each series on a grid of 10 points per
   1/span, from 1/(3 span) down to half the shortest spacing of the times (or the
   prior's bound): its highest peaks are candidates, with twice their period (an
   eccentric orbit's first harmonic can be the strongest).
2. The spectral window ``W(f) = |sum_j exp(2 pi i f t_j)|^2 / n^2`` on the same grid;
   its strongest peaks are the sampling cadences. Each cadence's harmonics ``k s``
   are kept while ``W(k s)`` stays above :data:`WINDOW_POWER`, for k up to
   :data:`MAX_HARMONIC` and frequencies up to 1 / (the prior's lower bound, but not
   below :data:`PERIOD_FLOOR` days).
3. The aliases ``|f +- k s|`` of the best periodogram peaks are ranked by their
   periodogram power, and the best :data:`ALIASES_KEPT` are refined on a fine local
   grid and added.
4. Periods of 1 to 20 spans, for arcs shorter than one orbit.

The search costs a few periodogram evaluations on a few hundred frequencies on top
of the plain grid, so a long sampling baseline with a low period bound does not need
a grid of millions of frequencies.
"""

from __future__ import annotations

import warnings

import numpy as np
from astropy.timeseries import LombScargle

try:  # the compiled periodograms; astropy's give the same numbers without numba
    from massfit.start import _periodogram_numba as _compiled
except ImportError:  # pragma: no cover - exercised where numba is absent
    _compiled = None

__all__ = ["candidate_periods", "sampling_cadences", "window_power", "grid_power",
           "grid_window", "PERIOD_FLOOR",
           "WINDOW_POWER", "MAX_HARMONIC", "ALIASES_KEPT"]

#: No period below this (days) is searched, whatever the prior allows (86 s).
PERIOD_FLOOR = 1e-3
#: A harmonic of a sampling cadence makes aliases while the spectral window keeps at
#: least this power there (1 for perfectly regular sampling; jitter of the times
#: lowers it as exp(-(2 pi k s sigma_t)^2)).
WINDOW_POWER = 0.3
#: Harmonics of a cadence searched at most (k in f +- k s).
MAX_HARMONIC = 60
#: Periodogram peaks kept from the plain grid.
MAX_PEAKS = 12
#: Peaks whose aliases are searched.
ALIAS_PARENTS = 4
#: Strongest window peaks taken as cadences.
MAX_CADENCES = 2
#: Aliases (beyond the plain grid) kept after ranking by periodogram power.
ALIASES_KEPT = 8
#: Frequencies of the plain grid at most.
MAX_GRID = 200_000
#: Short-arc candidates, in units of the time span.
_ARC_MULTIPLES = (1.0, 1.5, 2.5, 4.0, 7.0, 12.0, 20.0)


def candidate_periods(t, series, prior) -> list:
    """Periods worth a closer look for a signal sampled at times ``t``.

    Parameters
    ----------
    t : ndarray
        Times, days.
    series : list of (values, errors)
        Series sampled at ``t`` (e.g. east and north offsets).
    prior : Prior
        The period's prior (days): the search stays inside its support.

    Returns
    -------
    list of float
        Candidate periods (days), in no particular order, all inside the prior.
    """
    if prior.is_fixed:
        return [prior.value]
    t = np.asarray(t, dtype=float)
    span = float(np.ptp(t)) if t.size else 0.0
    low_p, high_p = prior.low, prior.high
    periods = []
    if span > 0:
        periods.extend(_periodogram_candidates(t, series, span, low_p, high_p))
    periods.extend(span * np.array(_ARC_MULTIPLES))
    periods = [float(p) for p in periods if low_p <= p <= high_p]
    if not periods:
        periods = [float(np.sqrt(low_p * min(high_p, 1e6)))]
    return periods


def _periodogram_candidates(t, series, span, low_p, high_p):
    dt = np.diff(np.unique(np.round(t, 6)))
    spacing = float(np.min(dt)) if dt.size else low_p
    # The plain grid stops at half the shortest spacing: below it, only the sampling's
    # aliases of what the grid finds can fit (step 2), and a grid reaching there would
    # need millions of frequencies on a long baseline.
    min_period = max(low_p, 0.5 * spacing, span / (MAX_GRID / 10.0), PERIOD_FLOOR)
    max_period = min(high_p, 20.0 * span)
    f_min = 1.0 / min(max_period, 3.0 * span)
    f_max = 1.0 / min_period
    if not f_max > f_min:
        return []
    n_freq = int(min(MAX_GRID, 10 * span * (f_max - f_min) + 100))
    freq = np.linspace(f_min, f_max, n_freq)
    power = grid_power(t, series, freq)
    top = _peaks(power)[:MAX_PEAKS]
    periods = [p for k in top for p in (1.0 / freq[k], 2.0 / freq[k])]
    cadences = sampling_cadences(t, freq, top_frequency=1.0 / max(low_p, PERIOD_FLOOR),
                                 power=grid_window(t, freq))
    parents = freq[top[:ALIAS_PARENTS]]
    periods.extend(_alias_periods(t, series, parents, cadences, span,
                                  1.0 / max_period, 1.0 / max(low_p, PERIOD_FLOOR)))
    return periods


def _power(t, series, freq):
    """Summed Lomb-Scargle power of the series at ``freq``."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return sum(LombScargle(t, values, sig).power(freq) for values, sig in series)


def grid_power(t, series, freq):
    """:func:`_power` on an evenly spaced grid ``freq``: compiled where numba is (the
    same numbers to ~1e-12, tested against astropy's exact sums), else astropy's."""
    if _compiled is None or len(freq) < 2:
        return _power(t, series, freq)
    t = np.asarray(t, dtype=float)
    centred = t - t.mean()
    df = (freq[-1] - freq[0]) / (len(freq) - 1)
    total = np.zeros(len(freq))
    for values, sig in series:
        weight = 1.0 / np.asarray(sig, dtype=float) ** 2
        total += _compiled.floating_mean_power(centred, np.asarray(values, dtype=float),
                                               weight / weight.sum(), float(freq[0]),
                                               float(df), len(freq))
    return total


def grid_window(t, freq):
    """:func:`window_power` on an evenly spaced grid ``freq`` (compiled where numba is)."""
    if _compiled is None or len(freq) < 2:
        return window_power(t, freq)
    t = np.asarray(t, dtype=float)
    df = (freq[-1] - freq[0]) / (len(freq) - 1)
    return _compiled.window(t - t.mean(), float(freq[0]), float(df), len(freq))


def _peaks(power):
    """Indices of the local maxima of ``power``, highest first."""
    peaks = np.flatnonzero((power[1:-1] > power[:-2]) & (power[1:-1] >= power[2:])) + 1
    return peaks[np.argsort(power[peaks])[::-1]]


def window_power(t, freq):
    """Spectral window of the times ``t`` at ``freq``: 1 at 0, in [0, 1]."""
    t = np.asarray(t, dtype=float)
    out = np.empty(len(freq))
    step = max(1, 2_000_000 // max(t.size, 1))
    for k in range(0, len(freq), step):
        phase = 2 * np.pi * np.outer(freq[k:k + step], t - t.mean())
        out[k:k + step] = (np.cos(phase).sum(axis=1) ** 2
                           + np.sin(phase).sum(axis=1) ** 2) / t.size ** 2
    return out


def sampling_cadences(t, freq, *, top_frequency, power=None) -> np.ndarray:
    """Frequencies ``k s`` at which the sampling makes strong aliases.

    ``s`` are the strongest peaks of the spectral window on the grid ``freq`` (at
    least two cycles over the span, power at least :data:`WINDOW_POWER`); each is
    followed through its harmonics while the window stays strong, up to
    ``top_frequency`` and :data:`MAX_HARMONIC`.

    ``power``, if given, is the window on ``freq`` already computed.

    Returns
    -------
    ndarray
        The alias shifts (1/d), sorted, without repeats.
    """
    span = float(np.ptp(t))
    if span <= 0:
        return np.array([])
    power = window_power(t, freq) if power is None else power
    found = []
    for k in _peaks(power):
        if freq[k] < 2.0 / span or power[k] < WINDOW_POWER:
            continue
        if any(abs(freq[k] / s - round(freq[k] / s)) < 0.5 / (span * s) for s in found):
            continue  # a harmonic of a cadence already taken
        found.append(freq[k])
        if len(found) == MAX_CADENCES:
            break
    shifts = []
    local = np.linspace(-0.5, 0.5, 21) / span
    for base in found:
        for harmonic in range(1, MAX_HARMONIC + 1):
            centre = harmonic * base
            if centre > top_frequency:
                break
            grid = centre + local
            near = window_power(t, grid)
            best = int(np.argmax(near))
            if near[best] < WINDOW_POWER:
                break
            shifts.append(grid[best])
            base = grid[best] / harmonic  # follow the cadence as it is measured
    return np.unique(np.round(shifts, 12))


def _alias_periods(t, series, parents, shifts, span, f_low, f_high):
    """The strongest aliases |f +- s| of the ``parents``, refined locally."""
    if not len(shifts) or not len(parents):
        return []
    trial = np.abs(np.concatenate([parents[:, None] + shifts[None, :],
                                   parents[:, None] - shifts[None, :]]).ravel())
    trial = trial[(trial >= f_low) & (trial <= f_high)]
    if not trial.size:
        return []
    trial = np.unique(trial)
    power = _power(t, series, trial)
    best = trial[np.argsort(power)[::-1][:ALIASES_KEPT]]
    local = np.linspace(-1.0, 1.0, 41) / span
    out = []
    for centre in best:
        grid = centre + local
        grid = grid[grid > 0]
        out.append(1.0 / grid[int(np.argmax(_power(t, series, grid)))])
    return out

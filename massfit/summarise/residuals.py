"""Residuals of a fit and the leftover signal in them.

The normalised residual of a measurement is (observed - model) / error, in the
coordinates the measurement was given in (east and north, or separation and position
angle). A Lomb-Scargle periodogram of a companion's normalised residuals shows what the
orbit left unexplained (a further companion, a wrong eccentricity); astropy gives its
false-alarm probability.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Residuals", "astrometric_residuals", "velocity_residuals", "residual_periodogram",
           "leftover_signals", "model_residuals", "model_velocity_residuals", "peak_text",
           "VELOCITY_PANEL", "FAP_THRESHOLD"]

#: The name under which the radial velocities' residuals stand beside the companions'
#: (the figures' panel, the adequacy block's ``velocities`` entry).
VELOCITY_PANEL = "radial velocities"

#: A periodogram peak with a false-alarm probability below this is flagged as leftover
#: signal (1 %, common practice).
FAP_THRESHOLD = 0.01


@dataclass
class Residuals:
    """Residuals of one companion's astrometry.

    Attributes
    ----------
    time : astropy.time.Time
        Times of the rows (TDB).
    component : ndarray of str
        ``east``, ``north``, ``sep`` or ``pa`` for each residual.
    row : ndarray of int
        Index of the residual's row in the observations' astrometry.
    normalised : ndarray
        (observed - model) / error.
    """

    time: object
    component: np.ndarray
    row: np.ndarray
    normalised: np.ndarray

    @property
    def chi2(self) -> float:
        return float(np.sum(self.normalised ** 2))


def best_sample(result) -> np.ndarray:
    """The posterior sample of highest posterior density (the "best orbit")."""
    return result.chain.samples[int(np.argmax(result.chain.log_prob))]


def astrometric_residuals(result, theta=None) -> dict:
    """Normalised residuals of every companion at one parameter vector.

    Parameters
    ----------
    result : FitResult
    theta : ndarray, optional
        Sampled coordinates; the best posterior sample by default.

    Returns
    -------
    dict
        companion name -> :class:`Residuals`.
    """
    theta = best_sample(result) if theta is None else np.asarray(theta)
    return model_residuals(result.model, theta)


def model_residuals(model, theta) -> dict:
    """:func:`astrometric_residuals` of a model at ``theta`` (no result needed)."""
    data = model.observations.astrometry
    out = {}
    for name, rows in model.rows.items():
        east, north = (v[0] for v in model.predicted_offsets(theta, name))
        idx = rows.index
        polar = data.polar[idx]
        parts = []
        for comp, obs, pred, err in (
                ("east", data.east[idx], east, data.east_err[idx]),
                ("north", data.north[idx], north, data.north_err[idx])):
            keep = ~polar
            parts.append((comp, idx[keep], (obs[keep] - pred[keep]) / err[keep]))
        sep = np.hypot(east, north)
        pa = np.arctan2(east, north)
        keep = polar
        parts.append(("sep", idx[keep], (data.sep[idx][keep] - sep[keep])
                      / data.sep_err[idx][keep]))
        d_pa = np.mod(data.pa[idx][keep] - pa[keep] + np.pi, 2 * np.pi) - np.pi
        parts.append(("pa", idx[keep], d_pa / data.pa_err[idx][keep]))
        component = np.concatenate([np.full(len(p[1]), p[0]) for p in parts])
        row = np.concatenate([p[1] for p in parts]).astype(int)
        order = np.argsort(data.time.jd[row], kind="stable")
        out[name] = Residuals(time=data.time[row[order]], component=component[order],
                              row=row[order],
                              normalised=np.concatenate([p[2] for p in parts])[order])
    return out


def velocity_residuals(result, theta=None) -> Residuals:
    """Normalised residuals of the radial velocities (the jitter in the error).

    The component of each residual is its instrument's label, so that a periodogram
    centres each instrument on its own mean.
    """
    theta = best_sample(result) if theta is None else np.asarray(theta)
    return model_velocity_residuals(result.model, theta)


def model_velocity_residuals(model, theta) -> Residuals:
    """:func:`velocity_residuals` of a model at ``theta`` (no result needed)."""
    vel = model.velocity_rows
    phys = model.physical(np.atleast_2d(theta))
    total = model.velocity_parts(phys)["total"][0]
    sigma = np.sqrt(vel.err2 + phys["rv"]["jitter"][0, vel.instrument] ** 2)
    from astropy.time import Time

    order = np.argsort(vel.t, kind="stable")
    labels = np.asarray(vel.labels, dtype=object)[vel.instrument].astype(str)
    return Residuals(time=Time(model.epoch_jd + vel.t[order], format="jd", scale="tdb"),
                     component=labels[order], row=order,
                     normalised=((vel.rv - total) / sigma)[order])


#: Residual periodograms look at most at this many values (a seeded random subset):
#: astropy's fast Lomb-Scargle takes about a minute for a million, and a subset this
#: big still shows any periodic signal the fit left behind at a small amplitude.
PERIODOGRAM_VALUES = 50_000


def periodogram_subset(n: int, limit: int = PERIODOGRAM_VALUES) -> np.ndarray:
    """Indices (sorted) of at most ``limit`` of ``n`` values, the same ones each run."""
    if n <= limit:
        return np.arange(n)
    return np.sort(np.random.default_rng(20261202).choice(n, limit, replace=False))


def residual_periodogram(residuals: Residuals, *, orbital_period=None,
                         samples_per_peak=10, max_points=20000) -> dict:
    """Lomb-Scargle periodogram of one companion's normalised residuals.

    The components (east and north, or separation and position angle) are searched
    together: each is centred on its own mean, and a signal common to them shows as
    one peak. Frequencies run from one over the time span to the larger of five times
    the orbital frequency and half the inverse median spacing of the epochs.

    Returns
    -------
    dict
        ``frequency`` (1/d), ``power``, ``best_period`` (d), ``best_power``,
        ``fap`` (false-alarm probability of the highest peak, Baluev's
        approximation as astropy implements it), ``levels``: power at FAP 1 % and
        0.1 %, and ``model``: the astropy LombScargle object. Beyond
        :data:`PERIODOGRAM_VALUES` values a seeded random subset of them is searched
        (``values`` says how many).
    """
    from astropy.timeseries import LombScargle

    t = residuals.time.tdb.jd
    y = residuals.normalised.copy()
    for comp in np.unique(residuals.component):
        pick = residuals.component == comp
        y[pick] -= np.mean(y[pick])
    keep = periodogram_subset(len(t))
    t, y = t[keep], y[keep]
    span = float(np.ptp(t))
    if span <= 0 or len(t) < 5:
        return None
    epochs = np.unique(np.round(t, 6))
    spacing = np.median(np.diff(epochs)) if len(epochs) > 1 else span
    f_max = 0.5 / max(spacing, 1e-6)
    if orbital_period is not None and np.isfinite(orbital_period):
        f_max = max(f_max, 5.0 / orbital_period)
    f_min = 1.0 / span
    n = int(min(max_points, samples_per_peak * span * (f_max - f_min) + 1))
    frequency = np.linspace(f_min, f_max, max(n, 2000))  # smooth to the eye as well
    ls = LombScargle(t, y, dy=np.ones_like(y), normalization="standard")
    power = ls.power(frequency)
    k = int(np.argmax(power))
    fap = float(ls.false_alarm_probability(power[k], minimum_frequency=f_min,
                                           maximum_frequency=f_max))
    levels = ls.false_alarm_level([FAP_THRESHOLD, 0.1 * FAP_THRESHOLD],
                                  minimum_frequency=f_min, maximum_frequency=f_max)
    return {"frequency": frequency, "power": power, "best_period": 1.0 / frequency[k],
            "best_power": float(power[k]), "fap": fap,
            "levels": {FAP_THRESHOLD: float(levels[0]),
                       0.1 * FAP_THRESHOLD: float(levels[1])},
            "values": int(len(t)), "model": ls}


def peak_text(peak) -> str:
    """``peak at 688.1 d, FAP 0.52``: the one way a residual peak is written, in the
    terminal and in the figures. ``peak`` is the adequacy block's ``periodogram`` entry
    (``peak_period``, ``false_alarm_probability``) or a :func:`residual_periodogram`."""
    if "peak_period" in peak:
        period, fap = peak["peak_period"], peak["false_alarm_probability"]
    else:
        period, fap = peak["best_period"], peak["fap"]
    return f"peak at {period:.4g} d, FAP {fap:.2g}"


def leftover_signals(result, *, threshold: float = FAP_THRESHOLD) -> list:
    """Companions whose residuals hold a periodic signal the fit did not explain.

    Returns
    -------
    list of dict
        One per flagged companion: ``body``, ``period`` (d, of the highest residual
        peak), ``fap``.
    """
    out = []
    periods = {name: comp["period"]["median"]
               for name, comp in result.summary["companions"].items()}
    panels = dict(astrometric_residuals(result))
    if result.model.has_velocities:
        panels["radial velocities"] = velocity_residuals(result)
    for name, res in panels.items():
        pgram = residual_periodogram(res, orbital_period=periods.get(name))
        if pgram is not None and pgram["fap"] < threshold:
            out.append({"body": name, "period": float(pgram["best_period"]),
                        "fap": pgram["fap"]})
    return out

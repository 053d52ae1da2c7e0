"""Planning from a finished fit: the posterior samples as an ensemble.

The posterior already holds the data, so the planner uses the samples themselves: the
spread of each candidate epoch's predicted offsets over the posterior and their
covariance with ln GM. Conditioning that ensemble linearly on a new measurement with the
stated error (the update a Gaussian posterior would get) gives the expected variance of
ln GM after it; the ensemble is then updated and the next epoch chosen.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.table import Table

from massfit.constants import GM_SUN_KM3_S2, LIGHT_DAYS_PER_PC
from massfit.errors import InputError
from massfit.plan.schedule import Schedule, distance_pc, epoch_rows

#: Posterior samples used by the ensemble update (enough for a 1 % covariance).
_ENSEMBLE_SIZE = 4000


# ============================================================ posterior ensemble
@dataclass
class Posterior:
    """Posterior samples of a finished fit, as physical elements.

    Attributes
    ----------
    gm : ndarray
        Central GM, km^3/s^2.
    parallax : ndarray or None
        mas.
    companions : dict
        name -> dict of arrays ``period`` (d), ``ecc``, ``inc``, ``omega``, ``node``
        (rad), ``periapsis_time`` (JD, TDB), ``semi_major_axis`` (au).
    source : str
    converged : bool or None
        What the fit said about its own convergence.
    dropped : int
        Samples left out because some element was not finite.
    """

    gm: np.ndarray
    parallax: np.ndarray | None
    companions: dict
    source: str = "<posterior>"
    converged: bool | None = None
    dropped: int = 0

    def central_mass(self) -> u.Quantity:
        """Median central mass (nominal M_sun, i.e. GM / GM_sun)."""
        return float(np.median(self.gm) / GM_SUN_KM3_S2) * u.M_sun

    def predicted(self, schedule: Schedule, *, light_time=True):
        """Predicted offsets at each row of the schedule for every sample.

        Returns
        -------
        rows : ndarray of int
            Epoch of each predicted row.
        east, north : ndarray, shape (n_samples, n_rows)
            In the unit of the schedule's errors.
        """
        from massfit.orbits import kepler

        names = list(self.companions)
        epoch, body = epoch_rows(names, schedule, "the fit")
        unit = schedule.error.unit
        length = unit.physical_type == "length"
        distance = distance_pc(schedule)[epoch]
        if not length and self.parallax is None and np.any(~np.isfinite(distance)):
            raise InputError("this fit has no parallax: give each candidate epoch its "
                             "distance (a 'distance' column), or errors in a length unit",
                             file=schedule.source, column="distance")
        t_jd = schedule.tdb_jd[epoch]
        n = self.gm.size
        east = np.empty((n, epoch.size))
        north = np.empty((n, epoch.size))
        for name in names:
            cols = np.flatnonzero(body == name)
            if cols.size == 0:
                continue
            el = {k: v[:, None] for k, v in self.companions[name].items()}
            t = t_jd[cols][None, :]
            d = distance[cols][None, :]
            if light_time and not length:
                t = t - np.where(np.isfinite(d), d * LIGHT_DAYS_PER_PC, 0.0)
            e_au, n_au, _ = kepler.relative_orbit(
                t, el["period"], el["ecc"], 0.0, el["semi_major_axis"], el["inc"],
                el["omega"], el["node"], t_ref=el["periapsis_time"])
            if length:
                scale = (1.0 * u.au).to_value(unit)
            else:
                arcsec_per_au = np.where(np.isfinite(d), 1.0 / np.where(np.isfinite(d), d, 1),
                                         np.nan if self.parallax is None else
                                         self.parallax[:, None] * 1e-3)
                scale = arcsec_per_au * (1.0 * u.arcsec).to_value(unit)
            east[:, cols] = e_au * scale
            north[:, cols] = n_au * scale
        return epoch, east, north


def read_posterior(folder) -> Posterior:
    """The posterior of a finished fit from its output folder (``samples.ecsv``).

    Parameters
    ----------
    folder : path
        A folder written by ``massfit fit`` or :meth:`FitResult.save`.

    Returns
    -------
    Posterior
    """
    folder = Path(folder)
    path = folder / "samples.ecsv"
    if not path.is_file():
        raise InputError("not a fit's output folder: it has no samples.ecsv", file=folder)
    try:
        table = Table.read(path, format="ascii.ecsv")
    except Exception as exc:  # astropy raises many kinds for a malformed table
        raise InputError(f"cannot read the posterior samples ({exc})", file=path) from None
    if "central_gm" not in table.colnames:
        raise InputError("the samples have no 'central_gm' column", file=path,
                         column="central_gm")
    names = [c[:-len(".periapsis_time")] for c in table.colnames
             if c.endswith(".periapsis_time")]
    if not names:
        raise InputError("the samples have no companion elements", file=path)
    need = {"period": 1.0, "eccentricity": 1.0, "inclination": "deg",
            "periapsis_argument": "deg", "ascending_node": "deg",
            "periapsis_time": 1.0, "semi_major_axis": 1.0}
    keys = {"period": "period", "eccentricity": "ecc", "inclination": "inc",
            "periapsis_argument": "omega", "ascending_node": "node",
            "periapsis_time": "periapsis_time", "semi_major_axis": "semi_major_axis"}
    companions = {}
    for name in names:
        orbit = {}
        for column, kind in need.items():
            full = f"{name}.{column}"
            if full not in table.colnames:
                raise InputError("a companion's elements are incomplete", file=path,
                                 column=full)
            values = np.asarray(table[full], dtype=float)
            orbit[keys[column]] = np.radians(values) if kind == "deg" else values
        companions[name] = orbit
    gm = np.asarray(table["central_gm"], dtype=float)
    good = np.isfinite(gm)
    for orbit in companions.values():
        for values in orbit.values():
            good &= np.isfinite(values)
    parallax = None
    if "parallax" in table.colnames:
        parallax = np.asarray(table["parallax"], dtype=float)
        good &= np.isfinite(parallax)
    if good.sum() < 100:
        raise InputError(f"only {int(good.sum())} usable posterior samples; the planner "
                         f"needs at least 100", file=path)
    companions = {name: {k: v[good] for k, v in orbit.items()}
                  for name, orbit in companions.items()}
    return Posterior(gm=gm[good], parallax=None if parallax is None else parallax[good],
                     companions=companions, source=str(folder),
                     converged=table.meta.get("converged"), dropped=int((~good).sum()))


class EnsembleInformation:
    """The linear (Kalman) update of posterior samples by candidate epochs.

    Anomalies (samples minus their mean, over sqrt(n - 1)) of ln GM and of every
    candidate's predicted offsets, divided by the candidate's error, so that each
    measurement has unit noise. Conditioning on an epoch replaces the anomalies by
    ``(I + B B^T)^(-1/2) A`` with ``B`` the epoch's anomalies: a low-rank update.
    """

    def __init__(self, posterior: Posterior, schedule: Schedule, *, seed=0):
        rng = np.random.default_rng(seed)
        n = posterior.gm.size
        take = np.sort(rng.choice(n, _ENSEMBLE_SIZE, replace=False)) \
            if n > _ENSEMBLE_SIZE else np.arange(n)
        sub = Posterior(gm=posterior.gm[take],
                        parallax=None if posterior.parallax is None else
                        posterior.parallax[take],
                        companions={k: {q: v[take] for q, v in o.items()}
                                    for k, o in posterior.companions.items()},
                        source=posterior.source)
        epoch, east, north = sub.predicted(schedule)
        err = schedule.error.value[epoch]
        columns = np.hstack([np.log(sub.gm)[:, None], east / err, north / err])
        self.owner = np.concatenate([[-1], epoch, epoch])
        anomalies = columns - columns.mean(axis=0)
        self.anomalies = anomalies / math.sqrt(max(len(take) - 1, 1))
        self.spread = np.sqrt(np.var(east, axis=0) + np.var(north, axis=0))
        self.epoch_of_row = epoch
        self.n_epochs = len(schedule)
        self._cols = [np.flatnonzero(self.owner == k) for k in range(len(schedule))]

    def _conditioned(self, chosen):
        a = self.anomalies
        for k in chosen:
            b = a[:, self._cols[k]]
            u_, s, _ = np.linalg.svd(b, full_matrices=False)
            factor = 1.0 / np.sqrt(1.0 + s * s) - 1.0
            a = a + u_ @ (factor[:, None] * (u_.T @ a))
        return a

    def variance(self, chosen) -> float:
        a = self._conditioned(chosen)
        return float(a[:, 0] @ a[:, 0])

    def trial_variances(self, chosen, candidates) -> np.ndarray:
        a = self._conditioned(chosen)
        g = a[:, 0]
        out = np.empty(len(candidates))
        for j, k in enumerate(candidates):
            b = a[:, self._cols[k]]
            gram = b.T @ b + np.eye(b.shape[1])
            cross = b.T @ g
            out[j] = float(g @ g - cross @ np.linalg.solve(gram, cross))
        return out

    def spread_per_epoch(self) -> np.ndarray:
        """Largest predicted-offset spread (error's unit) among each epoch's rows."""
        out = np.zeros(self.n_epochs)
        np.maximum.at(out, self.epoch_of_row, self.spread)
        return out

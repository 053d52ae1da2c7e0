"""Containers for validated observations, in massfit's internal units.

The readers in :mod:`massfit.read.tables` fill these; the model in :mod:`massfit.model.orbit_model` reads
them. Every array has one entry per usable row, in the order read. Internal units:

- angles of position angle in radians; angular offsets in arcsec;
- offsets given in length units in au (``length`` is True for those rows);
- velocities in km/s; distances in pc; times as :class:`astropy.time.Time` in TDB.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from astropy.time import Time

__all__ = ["AstrometryData", "VelocityData", "Rejection", "Observations"]


@dataclass(frozen=True)
class Rejection:
    """A row that was read but not used, with the reason."""

    file: str
    line: int
    reason: str

    def as_dict(self) -> dict:
        return {"file": self.file, "line": int(self.line), "reason": self.reason}


@dataclass
class AstrometryData:
    """Relative astrometry of companions about the primary.

    Attributes
    ----------
    body : ndarray of str
        Companion name of each row.
    time : astropy.time.Time
        Observation times, TDB.
    polar : ndarray of bool
        True where the row was given as separation and position angle.
    east, north, east_err, north_err, corr : ndarray of float
        Offsets of the companion from the primary and their 1-sigma errors (arcsec, or
        au where ``length``), and the east-north correlation coefficient (0 when absent).
        NaN on polar rows.
    sep, sep_err : ndarray of float
        Separation and its error (arcsec, or au where ``length``); NaN on east/north rows.
    pa, pa_err : ndarray of float
        Position angle (north through east) and its error, radians; NaN on east/north rows.
    length : ndarray of bool
        True where the offsets were given in a length unit and need no distance.
    distance : ndarray of float
        Distance from the observer for the row (pc); NaN where none was given.
    file : ndarray of str
        The file each row came from.
    line : ndarray of int
        Its 1-based physical line number in that file.
    primary_ra, primary_dec : ndarray of float or None
        The primary's direction at the row's time (radians, ICRS); None where no
        file gave it (a distant primary on a fixed sky plane).
    reference_body : ndarray of str or None
        The body the offset is measured from ("" for the primary); None where no
        file has the column.
    """

    body: np.ndarray
    time: Time
    polar: np.ndarray
    east: np.ndarray
    north: np.ndarray
    east_err: np.ndarray
    north_err: np.ndarray
    corr: np.ndarray
    sep: np.ndarray
    sep_err: np.ndarray
    pa: np.ndarray
    pa_err: np.ndarray
    length: np.ndarray
    distance: np.ndarray
    file: np.ndarray
    line: np.ndarray
    primary_ra: np.ndarray | None = None
    primary_dec: np.ndarray | None = None
    reference_body: np.ndarray | None = None

    def __len__(self) -> int:
        return len(self.body)

    def select(self, mask) -> "AstrometryData":
        """Return the rows where ``mask`` is true."""
        mask = np.asarray(mask)
        return AstrometryData(**{name: _rows_of(getattr(self, name), mask)
                                 for name in self.__dataclass_fields__})

    @property
    def has_sight(self) -> bool:
        """True where the rows carry the primary's direction (a moving line of sight)."""
        return self.primary_ra is not None


def _rows_of(values, mask):
    return None if values is None else values[mask]


@dataclass
class VelocityData:
    """Radial velocities (barycentric, positive receding).

    Attributes
    ----------
    body : ndarray of str
        Whose velocity: the primary's name or a companion's.
    time : astropy.time.Time
        Observation times, TDB.
    rv, rv_err : ndarray of float
        Velocity and its 1-sigma error, km/s.
    instrument : ndarray of str
        Instrument label ("" where the file has none).
    file, line : ndarray
        Origin of each row, as for :class:`AstrometryData`.
    """

    body: np.ndarray
    time: Time
    rv: np.ndarray
    rv_err: np.ndarray
    instrument: np.ndarray
    file: np.ndarray
    line: np.ndarray

    def __len__(self) -> int:
        return len(self.body)

    def select(self, mask) -> "VelocityData":
        """Return the rows where ``mask`` is true."""
        mask = np.asarray(mask)
        return VelocityData(**{name: getattr(self, name)[mask]
                               for name in self.__dataclass_fields__})


@dataclass
class Observations:
    """Everything read for one fit.

    Attributes
    ----------
    astrometry : AstrometryData or None
    velocities : VelocityData or None
    files : list of str
        The files read, in order.
    rows_read : int
        Data rows read (comment and header lines not counted).
    rejected : list of Rejection
        Rows read but not used (only when bad rows were asked to be skipped).
    unused_columns : dict
        For each file, the columns that were present but not used.
    primary : str
        The name under which the primary's own velocities are listed.
    notes : list of str
        What the reading did that a user should know and the rows do not show (UTC
        dates converted outside the leap-second table); the fit's warnings repeat them.
    stated : dict
        For each file, how it gave its values: ``time_format`` and ``time_scale`` of the
        time column, and ``units``: each measured column's unit as text. Figures and
        tables show values back in these forms (see :meth:`time_form`,
        :meth:`velocity_unit`).
    """

    astrometry: AstrometryData | None = None
    velocities: VelocityData | None = None
    files: list = field(default_factory=list)
    rows_read: int = 0
    rejected: list = field(default_factory=list)
    unused_columns: dict = field(default_factory=dict)
    primary: str = "primary"
    notes: list = field(default_factory=list)
    stated: dict = field(default_factory=dict)

    def time_form(self) -> tuple[str, str] | None:
        """(format, scale) of the time column shared by every file, or None where the
        files differ or did not say (times are then shown as TDB Julian dates)."""
        forms = {(v.get("time_format"), v.get("time_scale")) for v in self.stated.values()}
        if len(forms) != 1:
            return None
        form = forms.pop()
        return form if None not in form else None

    def velocity_unit(self) -> str | None:
        """The unit of ``rv`` shared by every velocity file (astropy text), or None."""
        units = {v["units"]["rv"] for v in self.stated.values() if "rv" in v.get("units", {})}
        return units.pop() if len(units) == 1 and "" not in units else None

    @property
    def rows_used(self) -> int:
        n = 0
        if self.astrometry is not None:
            n += len(self.astrometry)
        if self.velocities is not None:
            n += len(self.velocities)
        return n

    @property
    def companions(self) -> list:
        """Names of the companions, in order of first appearance."""
        names = []
        if self.astrometry is not None:
            names.extend(self.astrometry.body.tolist())
        if self.velocities is not None:
            names.extend(b for b in self.velocities.body.tolist() if b != self.primary)
        return list(dict.fromkeys(names))

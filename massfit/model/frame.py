"""The central mass's own place and motion in the frame the positions are measured in.

Where the central body is not seen (a dark mass among stars) or the offsets are
measured against background stars, the positions are not offsets *from* the primary:
each row is the companion's relative orbit plus the primary's own position in the
frame,

    east_obs  = east_rel  + x0 + mu_east  (t - t0)
    north_obs = north_rel + y0 + mu_north (t - t0)

and every radial velocity (the primary's and the companions') carries the primary's
line-of-sight velocity ``v0``. Five parameters shared by every companion:

``frame.east``, ``frame.north``
    The primary's position (mas) at the model's epoch t0 (the mean time of the
    astrometry, in the summary as ``frame.reference_epoch_jd``).
``frame.motion_east``, ``frame.motion_north``
    Its proper motion, mas per Julian year (365.25 d), east = d(alpha cos delta)/dt.
``frame.velocity``
    Its line-of-sight velocity, km/s (positive receding). With frame terms the
    instruments' velocity zero points are fixed at 0 unless a prior is given for
    them: otherwise they and ``frame.velocity`` would be the same number.

A term with a ``Fixed`` prior is not sampled. Priors are flat where none is given.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from massfit.errors import ModelError

__all__ = ["FrameSpec", "FRAME_TERMS", "FRAME_UNITS", "DAYS_PER_YEAR", "frame_shift"]

#: Julian year in days (the unit of the proper motion).
DAYS_PER_YEAR = 365.25
#: The frame terms in order: parameter name suffix -> unit at the boundary.
FRAME_UNITS = {"east": "mas", "north": "mas", "motion_east": "mas / yr",
               "motion_north": "mas / yr", "velocity": "km / s"}
FRAME_TERMS = tuple(FRAME_UNITS)
_LABELS = {"east": r"$x_0$ [mas]", "north": r"$y_0$ [mas]",
           "motion_east": r"$\mu_{x}$ [mas/yr]", "motion_north": r"$\mu_{y}$ [mas/yr]",
           "velocity": r"$v_{z,0}$ [km/s]"}


@dataclass
class FrameSpec:
    """Priors of the central mass's position, proper motion and velocity in the frame.

    Parameters
    ----------
    east, north : Prior or None
        Position at the model's epoch, mas. None is flat.
    motion_east, motion_north : Prior or None
        Proper motion, mas/yr. None is flat.
    velocity : Prior or None
        Line-of-sight velocity, km/s. None is flat.
    """

    east: object | None = None
    north: object | None = None
    motion_east: object | None = None
    motion_north: object | None = None
    velocity: object | None = None

    def prior(self, term):
        """The prior of one term (None: flat)."""
        return getattr(self, term)

    @staticmethod
    def label(term) -> str:
        """Axis label of a term for tables and corner plots."""
        return _LABELS[term]


def check_rows(model) -> None:
    """Frame terms need angular offsets without a per-row distance (one sky frame)."""
    data = model.observations.astrometry
    if data is None or len(data) == 0:
        return
    bad = np.flatnonzero(data.length | np.isfinite(data.distance))
    if bad.size:
        row = int(bad[0])
        raise ModelError(f"{data.file[row]} line {int(data.line[row])}: frame terms "
                         f"(the primary's position and motion) need angular offsets on "
                         f"one sky frame; this row is in a length unit or has its own "
                         f"distance")
    if model.sight is not None:
        raise ModelError("frame terms and a moving line of sight (primary_ra, "
                         "primary_dec) cannot be combined")


def frame_shift(values, t):
    """The primary's (east, north) in arcsec at times ``t`` (days from the epoch).

    Parameters
    ----------
    values : dict
        term -> array (n,) in the boundary units (mas, mas/yr).
    t : ndarray, shape (n_rows,)

    Returns
    -------
    east, north : ndarray, shape (n, n_rows), arcsec
    """
    years = np.asarray(t)[None, :] / DAYS_PER_YEAR
    east = values["east"][:, None] + values["motion_east"][:, None] * years
    north = values["north"][:, None] + values["motion_north"][:, None] * years
    return 1e-3 * east, 1e-3 * north

"""The columns massfit reads: each kind of table, each column's dimension, and the checks on its values."""
from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import astropy.units as u


@dataclass(frozen=True, eq=False)  # the same kind only when the same object
class Dimension:
    """A kind of unit a column may carry, and the internal unit it is stored in."""

    target: u.UnitBase
    description: str
    unit_required: bool = True


_ANGLE = Dimension(u.arcsec, "an angle unit (such as mas, arcsec or deg)")


LENGTH = Dimension(u.au, "a length unit (such as km or au)")


_POSITION_ANGLE = Dimension(u.rad, "an angle unit (such as deg or rad)")


_VELOCITY = Dimension(u.km / u.s, "a velocity unit (such as km/s or m/s)")


_DISTANCE = Dimension(u.pc, "a length unit (such as pc or au)")


_PURE_NUMBER = Dimension(u.dimensionless_unscaled, "no unit", unit_required=False)


# Offsets and their errors: angles or lengths, but one of the two for a whole file.
OFFSET = (_ANGLE, LENGTH)


# The measurement columns of each kind of file (all required) and the units they take.
SETS = {
    "cartesian": {"east": OFFSET, "north": OFFSET, "east_err": OFFSET, "north_err": OFFSET},
    "polar": {"sep": OFFSET, "sep_err": OFFSET,
              "pa": (_POSITION_ANGLE,), "pa_err": (_POSITION_ANGLE,)},
    "rv": {"rv": (_VELOCITY,), "rv_err": (_VELOCITY,)},
}


# The primary's direction per row (a moving line of sight): angles, stored in radians.
SIGHT = {"primary_ra": (_POSITION_ANGLE,), "primary_dec": (_POSITION_ANGLE,)}


OPTIONAL = {
    "cartesian": {"corr": (_PURE_NUMBER,), "distance": (_DISTANCE,), **SIGHT},
    "polar": {"distance": (_DISTANCE,), **SIGHT},
    "rv": {},
}


#: Every column that takes a unit, in any kind of file.
UNIT_COLUMNS = frozenset(name for table in (*SETS.values(), *OPTIONAL.values())
                          for name in table)


KIND_NAMES = {"cartesian": "east/north astrometry", "polar": "sep/pa astrometry",
               "rv": "radial velocities"}


ALWAYS = ("time", "body")


def check_positive(value: float) -> str | None:
    return None if value > 0 else f"must be greater than zero (got {value:.6g})"


def check_correlation(value: float) -> str | None:
    # |corr| = 1 makes the 2x2 covariance singular, so the bound is strict.
    return None if -1 < value < 1 else f"must lie strictly between -1 and 1 (got {value:.6g})"


CHECKS: dict[str, Callable[[float], str | None]] = {
    "east_err": check_positive, "north_err": check_positive, "sep": check_positive, "sep_err": check_positive,
    "pa_err": check_positive, "rv_err": check_positive, "distance": check_positive, "corr": check_correlation,
}


# An empty distance cell means "no distance for this row" (stored as NaN, as documented
# in AstrometryData); every other empty numeric cell is an error.
MAY_BE_EMPTY = frozenset({"distance"})

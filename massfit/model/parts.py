"""The pieces a model is built from: its parameter slots, the rows of data per companion and
per instrument as the model keeps them, the prior plan, and small helpers.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from massfit.constants import AU_PER_PC
from massfit.priors import LogUniform, Prior

__all__ = [
    "AstrometryRows", "KernelRows", "LN10", "ParameterSlot", "PriorPlan", "TWO_PI",
    "VelocityRows", "data_files", "file_stem", "scale_parameter", "sight_of", "wrap_angle"
]


LN10 = np.log(10.0)

TWO_PI = 2.0 * np.pi


@dataclass
class ParameterSlot:
    name: str
    label: str
    prior: Prior
    transform: str  # "identity", "log10", "cos", "flat", or window/disc coordinates
    low: float = -np.inf
    high: float = np.inf
    target: tuple | None = None  # for velocity terms: (kind, instrument label or None)


@dataclass
class VelocityRows:
    """All radial velocities, ready for the kernel."""

    t: np.ndarray  # days since the model's epoch
    rv: np.ndarray  # km/s
    err2: np.ndarray  # squared errors, (km/s)^2
    instrument: np.ndarray  # index into ``labels`` per row
    owner: np.ndarray  # index of the companion whose velocity it is; -1 for the primary
    labels: list  # instrument labels
    t_trend: float  # reference epoch of the trend, days since the model's epoch
    offsets: list  # per instrument: prior or None (flat)
    jitters: list  # per instrument: prior


@dataclass
class AstrometryRows:
    """Per-companion astrometry, ready for the kernel (all plain arrays)."""

    index: np.ndarray  # rows in the observation order
    t: np.ndarray  # emission time, days since the model's epoch
    scale: np.ndarray  # arcsec per au where fixed (1/d, or 1 for length rows)
    uses_parallax: np.ndarray  # multiply by the parallax (arcsec) on these rows
    cart: np.ndarray  # rows (within this companion) given as east/north
    polar: np.ndarray  # rows given as sep/pa
    east: np.ndarray
    north: np.ndarray
    east_err: np.ndarray
    north_err: np.ndarray
    corr_factor: np.ndarray  # 1 / sqrt(1 - rho^2)
    corr: np.ndarray
    sep: np.ndarray
    sep_err: np.ndarray
    pa: np.ndarray
    pa_err: np.ndarray
    sight: object | None = None  # viewing.Sight of these rows, or None (fixed plane)
    reference: np.ndarray | None = None  # per row the body measured from ("" primary)


@dataclass
class PriorPlan:
    """The prior as the model evaluates it: a box with a constant density, plus the
    coordinates whose density varies and the sqrt(e) discs' bounds on e."""

    low: np.ndarray
    high: np.ndarray
    constant: float
    varying: list  # coordinate indices evaluated one by one
    discs: list  # (index of sqrt_e_cos_w, index of sqrt_e_sin_w, e low, e high)


@dataclass
class KernelRows:
    """One companion's astrometry for the fused chi^2: east/north rows, then sep/pa."""

    dt: np.ndarray  # days from the companion's reference epoch
    scale: np.ndarray
    uses_parallax: np.ndarray
    n_cart: int
    obs1: np.ndarray  # east, then separation
    obs2: np.ndarray  # north, then position angle
    err1: np.ndarray
    err2: np.ndarray
    corr: np.ndarray
    corr_factor: np.ndarray


def scale_parameter(name, prior) -> ParameterSlot:
    """A positive scale (semi-amplitude, jitter): log10 for a log-uniform prior."""
    if isinstance(prior, LogUniform):
        body, kind = name.rsplit(".", 1)
        return ParameterSlot(f"{body}.log10_{kind}", "", prior, "log10")
    return ParameterSlot(name, "", prior, "identity", 0.0, np.inf)


def sight_of(astrometry, viewing):
    """The rows' lines of sight from their primary_ra, primary_dec and distance, with
    the aberration maps where the offsets are apparent."""
    from massfit.orbits.viewing import aberration_maps, observer_velocity, sight_from_angles

    sight = sight_from_angles(astrometry.primary_ra, astrometry.primary_dec,
                              astrometry.distance * AU_PER_PC)
    if viewing is not None and viewing.offsets == "apparent":
        velocity = observer_velocity(astrometry.time, site=viewing.site,
                                     ephemeris=viewing.ephemeris)
        sight.apparent = aberration_maps(sight, velocity)
    return sight


def file_stem(path) -> str:
    """Instrument label of rows that have none: the name of their file."""
    return Path(str(path)).stem


def data_files(names) -> str:
    """The distinct file names of some rows, for a message."""
    return ", ".join(dict.fromkeys(str(n) for n in names))


def wrap_angle(angle):
    """Angle folded into [-pi, pi)."""
    return np.mod(angle + np.pi, TWO_PI) - np.pi

"""What a fit is asked to do: the system, its companions and instruments (specs with their
priors), and the default priors.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from massfit.model.frame import FrameSpec
from massfit.orbits.relativity import RelativitySpec
from massfit.priors import LogUniform, Prior, Uniform

__all__ = [
    "CompanionSpec", "DEFAULT_CENTRAL_MASS_PRIOR", "DEFAULT_ECCENTRICITY_PRIOR",
    "DEFAULT_FREE_PARALLAX_PRIOR", "DEFAULT_PERIOD_PRIOR", "DEFAULT_REFLEX_MASS_PRIOR",
    "DEFAULT_SEMI_AMPLITUDE_PRIOR", "InstrumentSpec", "SystemSpec", "TRENDS"
]


#: Default prior on the central mass (nominal solar masses): log-uniform from a large
#: asteroid (1e-12) to the most massive black holes known (1e11); wide on purpose.
DEFAULT_CENTRAL_MASS_PRIOR = LogUniform(1e-12, 1e11)

#: Default period prior (days): log-uniform from 15 minutes to about 2.7 million years.
DEFAULT_PERIOD_PRIOR = LogUniform(1e-2, 1e9)

#: Default eccentricity prior: uniform below 0.99 (above it the orbit is a near-parabola
#: that relative astrometry of bound companions almost never needs).
DEFAULT_ECCENTRICITY_PRIOR = Uniform(0.0, 0.99)

#: Default prior on a companion's mass where the primary's velocities need it (nominal
#: solar masses): log-uniform from 1e-8 (about 0.003 Earth masses) to 1000; wide on
#: purpose, scale-free.
DEFAULT_REFLEX_MASS_PRIOR = LogUniform(1e-8, 1e3)

#: Default prior on the parallax (mas) where velocities of a companion fix the distance
#: and no parallax is stated: log-uniform from 1e-3 mas (1 Mpc) to 1e4 mas (0.1 pc).
DEFAULT_FREE_PARALLAX_PRIOR = LogUniform(1e-3, 1e4)

#: Default prior on a semi-amplitude in a velocity-only fit (km/s): uniform from 0 to a
#: tenth of the speed of light.
DEFAULT_SEMI_AMPLITUDE_PRIOR = Uniform(0.0, 3e4)

#: Accepted values of ``SystemSpec.trend``.
TRENDS = ("none", "linear", "quadratic")


@dataclass
class CompanionSpec:
    """What is assumed about one companion.

    Parameters
    ----------
    name : str
        The ``body`` name used in the observation files.
    period : Prior
        Prior on the period, days.
    eccentricity : Prior
        Prior on e.
    inclination : Prior or None
        Prior on i in radians; None means isotropic (uniform in cos i).
    mass : Prior or None
        The companion's own mass in nominal solar masses. None (the default) means
        fixed at 0 (a test particle), or :data:`DEFAULT_REFLEX_MASS_PRIOR` where the
        primary's own velocities need it.
    semi_amplitude : Prior or None
        Prior on each semi-amplitude (km/s) of a velocity-only fit; None gives
        :data:`DEFAULT_SEMI_AMPLITUDE_PRIOR`.
    """

    name: str
    period: Prior = field(default_factory=lambda: DEFAULT_PERIOD_PRIOR)
    eccentricity: Prior = field(default_factory=lambda: DEFAULT_ECCENTRICITY_PRIOR)
    inclination: Prior | None = None
    mass: Prior | None = None
    semi_amplitude: Prior | None = None


@dataclass
class InstrumentSpec:
    """Priors of one instrument's velocity zero point and jitter (km/s).

    Parameters
    ----------
    offset : Prior or None
        Prior on the offset (the systemic velocity on this instrument's zero point);
        None is flat.
    jitter : Prior or None
        Prior on the extra scatter added in quadrature to the errors; None takes the
        system's default (uniform from 0 to the spread of the instrument's velocities).
    """

    offset: Prior | None = None
    jitter: Prior | None = None


@dataclass
class SystemSpec:
    """What is assumed about the system as a whole.

    Parameters
    ----------
    primary : str
        Name of the central body (the ``body`` of its own radial velocities).
    central_mass : Prior
        Prior on the central mass, nominal solar masses.
    parallax : Prior or None
        Prior on the parallax in mas (``Fixed`` for a known distance); None where every
        offset is in length units or carries its own distance.
    companions : dict
        name -> CompanionSpec. Bodies found in the data but not listed get defaults,
        unless ``strict_companions`` is set.
    light_time : bool
        Evaluate the orbit at t - d/c for rows with a per-row distance.
    romer_delay : bool
        Also delay each companion by the light time across the system (the Romer
        delay along z, see :func:`massfit.orbits.dynamics.observed_offsets`); off by default.
    dynamics : object or None
        How the companions move: None or :class:`massfit.orbits.dynamics.Keplerian` for
        two-body orbits, :class:`massfit.orbits.oblate.Oblate` for a J2 primary,
        :class:`massfit.orbits.perturbed.NBody` for companions that perturb each other.
    frame : FrameSpec or None
        The primary's own position, proper motion and line-of-sight velocity in the
        frame of the data (:mod:`massfit.model.frame`); None: offsets are from the
        primary and velocities on the instruments' zero points (the default).
    relativity : RelativitySpec or None
        First-order relativistic terms (:mod:`massfit.orbits.relativity`); None: none.
    viewing : massfit.orbits.viewing.ViewingSpec or None
        The line of sight to a primary inside the solar system: an ephemeris body
        (resolved into per-row columns by :func:`massfit.orbits.viewing.with_ephemeris`),
        astrometric or apparent offsets, the primary's pole. None: the rows'
        ``primary_ra``/``primary_dec`` columns if any, astrometric offsets.
    compare_keplerian : bool
        With a perturbed ``dynamics``, the adequacy report also fits the two-body
        model and compares the two (an extra least-squares fit).
    strict_companions : bool
        Refuse data of bodies that are not listed in ``companions``.
    trend : {"none", "linear", "quadratic"}
        A polynomial in time added to every velocity (an unseen outer body).
    slope, curvature : Prior or None
        Priors on the trend's coefficients (km/s/day, km/s/day^2); None is flat.
    jitter : Prior or None
        Jitter prior (km/s) of every instrument without its own.
    instruments : dict
        label -> InstrumentSpec. Each label must have velocity rows.
    """

    primary: str = "primary"
    central_mass: Prior = field(default_factory=lambda: DEFAULT_CENTRAL_MASS_PRIOR)
    parallax: Prior | None = None
    companions: dict = field(default_factory=dict)
    light_time: bool = True
    strict_companions: bool = False
    trend: str = "none"
    slope: Prior | None = None
    curvature: Prior | None = None
    jitter: Prior | None = None
    instruments: dict = field(default_factory=dict)
    romer_delay: bool = False
    dynamics: object | None = None
    compare_keplerian: bool = True
    viewing: object | None = None
    frame: FrameSpec | None = None
    relativity: RelativitySpec | None = None

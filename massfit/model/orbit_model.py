"""The joint orbit model: one central mass shared by every companion.

A :class:`SystemSpec` says what is assumed (priors, fixed values, switches); an
:class:`OrbitModel` binds it to the observations and evaluates the log-posterior for
many parameter vectors at once (one row per emcee walker).

Sampled coordinates
-------------------
Chosen for mixing; each prior is still a density on the physical quantity, and the
Jacobian of the change of coordinates is added here.

``central.log10_mass``
    log10 of the central mass in nominal solar masses (GM / GM_sun, IAU 2015).
``parallax``
    Parallax in mas, when the distance is not fixed and some offsets are angular.
``<body>.log10_period``
    log10 of the period in days.
``<body>.sqrt_e_cos_w``, ``<body>.sqrt_e_sin_w``
    sqrt(e) cos(omega) and sqrt(e) sin(omega): uniform over the unit disc is uniform in
    e and omega, and omega stays defined as e goes to zero.
``<body>.cos_inc``
    cos i in [-1, 1]; uniform is an isotropic orientation. i > 90 deg is retrograde
    (position angle decreasing with time).
``<body>.node``
    Position angle of the ascending node (rad), sampled in a window of width pi
    (astrometry alone cannot tell the ascending node from the descending one:
    (omega, node) and (omega + pi, node + pi) give the same sky positions) or 2 pi
    where radial velocities break that tie. The start step centres the window on
    the best fit so that no mode sits against its edge.
``<body>.phase``
    Mean anomaly at the body's reference epoch (the middle of its data) plus omega,
    in a window of width 2 pi centred on the best fit. Nearly uncorrelated with the
    period because the epoch is mid-data, and defined for circular orbits.
``<body>.mass`` or ``<body>.log10_mass``
    Only where the companion's mass has a prior rather than a fixed value
    (log10 for a log-uniform prior), nominal solar masses.

Semi-major axes are derived, never sampled: a^3 = G (M1 + m2) P^2 / (4 pi^2).

Radial velocities
-----------------
Where velocities are given, each instrument adds ``rv.<label>.offset`` (km/s, the
systemic velocity on that instrument's zero point; flat prior unless one is given) and
``rv.<label>.jitter`` (km/s, added in quadrature to the errors; uniform from 0 to the
spread of that instrument's velocities unless a prior is given, ``log10_jitter`` for a
log-uniform prior). Rows without an instrument label are grouped by file. An optional
trend common to all velocities adds ``rv.trend.slope`` (km/s/day) and
``rv.trend.curvature`` (km/s/day^2) about the middle of the velocity data.

Velocities follow the conventions: with v_rel = dz/dt of the relative orbit,
v_primary = gamma - sum_k m_k / (M1 + m_k) v_rel,k and a companion's own velocity is
v_primary + v_rel,j (for one companion, gamma + M1 / (M1 + m2) v_rel). Velocities of
the primary need each companion's mass: unless it is stated, it gets the prior
:data:`DEFAULT_REFLEX_MASS_PRIOR`. Velocities of a companion together with angular
astrometry fix the distance: without a stated parallax it is sampled with
:data:`DEFAULT_FREE_PARALLAX_PRIOR`.

Velocities alone (no astrometry) fix neither the inclination nor the node, so the
model then samples, per companion, ``log10_period``, the eccentricity coordinates,
``phase`` and the semi-amplitudes ``k_primary`` (the primary's reflex, where the
primary has velocities) and ``k_companion`` (where the companion has its own), km/s.
No central mass is sampled: the summary derives the mass function, minimum masses
and, given an inclination prior, the masses.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np

from massfit.orbits import kepler
from massfit.constants import AU_PER_PC, GM_SUN, KM_S_PER_AU_DAY, LIGHT_DAYS_PER_PC
from massfit.orbits.dynamics import Keplerian, observed_offsets
from massfit.orbits.relativity import RelativitySpec, omega_at, precession_rate
from massfit.model import extra_terms
from massfit.model.frame import FrameSpec, frame_shift
from massfit.model.compiled_posterior import compiled_posterior
from massfit.errors import ConfigError, InputError, ModelError
from massfit.read.observations import Observations
from massfit.priors import Fixed, LogUniform, Normal, Prior, Uniform

__all__ = ["CompanionSpec", "SystemSpec", "InstrumentSpec", "OrbitModel", "FrameSpec",
           "RelativitySpec", "DEFAULT_CENTRAL_MASS_PRIOR", "TRENDS"]

LN10 = np.log(10.0)
TWO_PI = 2.0 * np.pi

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

# Rows of walkers times rows of data evaluated in one piece; bounds memory for big sets.
_CHUNK_ELEMENTS = 2_000_000


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


@dataclass
class _Parameter:
    name: str
    label: str
    prior: Prior
    transform: str  # "identity", "log10", "cos", "flat", or window/disc coordinates
    low: float = -np.inf
    high: float = np.inf
    target: tuple | None = None  # for velocity terms: (kind, instrument label or None)


@dataclass
class _VelocityRows:
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
class _AstrometryRows:
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
class _PriorPlan:
    """The prior as the model evaluates it: a box with a constant density, plus the
    coordinates whose density varies and the sqrt(e) discs' bounds on e."""

    low: np.ndarray
    high: np.ndarray
    constant: float
    varying: list  # coordinate indices evaluated one by one
    discs: list  # (index of sqrt_e_cos_w, index of sqrt_e_sin_w, e low, e high)


@dataclass
class _KernelRows:
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


class OrbitModel:
    """Log-posterior of a system's parameters given its observations.

    Parameters
    ----------
    observations : Observations
        Validated observations (:func:`massfit.read_observations`).
    spec : SystemSpec, optional
        Assumptions; defaults for everything not stated.
    distinct_epochs : bool, optional
        Count a companion's astrometric epochs as distinct times (the default: rows at
        one time measure one position) when checking that its data can fix an orbit.
        The planner's Fisher forecast passes False: it asks of any schedule how well it
        fixes the mass, and says "undetermined" itself.

    Notes
    -----
    Call :meth:`log_prob` with an array of shape ``(n_walkers, n_dim)``; it returns one
    log-posterior per walker (``-inf`` outside the prior's support).
    """

    def __init__(self, observations: Observations, spec: SystemSpec | None = None, *,
                 distinct_epochs: bool = True):
        self.observations = observations
        self._distinct_epochs = distinct_epochs
        self.spec = spec if spec is not None else SystemSpec()
        if self.spec.trend not in TRENDS:
            raise ConfigError(f"unknown trend {self.spec.trend!r}; accepted: "
                              f"{', '.join(TRENDS)}", key="velocities.trend")
        astrometry = observations.astrometry
        velocities = observations.velocities
        has_astrometry = astrometry is not None and len(astrometry) > 0
        self.has_velocities = velocities is not None and len(velocities) > 0
        if not has_astrometry and not self.has_velocities:
            raise ModelError("no rows to fit; give at least one file of east/north or "
                             "sep/pa offsets, or of radial velocities")
        #: True where there is no astrometry: the velocity-only parametrisation.
        self.velocity_only = not has_astrometry
        times = astrometry.time if has_astrometry else velocities.time
        self.epoch_jd = float(np.mean(times.tdb.jd))
        self.companions = self._companion_specs(observations)
        self.velocity_rows = self._prepare_velocities() if self.has_velocities else None
        self.needs_parallax = has_astrometry and bool(
            np.any(~astrometry.length & ~np.isfinite(astrometry.distance)))
        #: True where the parallax is sampled only because companion velocities fix it.
        self.parallax_from_velocities = False
        self.dynamics = self.spec.dynamics if self.spec.dynamics is not None else Keplerian()
        if type(self.dynamics) is not Keplerian and self.has_velocities:
            raise ModelError(f"the {self.dynamics.label} model fits astrometry only; radial "
                             f"velocities need the keplerian model for now")
        self.dynamics.prepare(self)
        #: The primary's line of sight per astrometric row (a :class:`viewing.Sight`),
        #: or None for a distant primary on one fixed sky plane.
        self.sight = (_sight_of(astrometry, self.spec.viewing)
                      if has_astrometry and astrometry.has_sight else None)
        if has_astrometry:
            self._check_references(astrometry)
        extra_terms.check(self)
        if self.sight is not None and self.has_velocities:
            raise ModelError("radial velocities with a moving line of sight (primary_ra, "
                             "primary_dec) are not modelled yet; fit the astrometry alone")
        if self.needs_parallax and self.spec.parallax is None:
            if self.velocity_rows is not None and np.any(self.velocity_rows.owner >= 0):
                self.spec = replace(self.spec, parallax=DEFAULT_FREE_PARALLAX_PRIOR)
                self.parallax_from_velocities = True
            else:
                angular = ~astrometry.length & ~np.isfinite(astrometry.distance)
                raise ModelError(
                    f"{_files(astrometry.file[angular])}: "
                    "angular offsets without a distance: give the parallax (with its "
                    "error) or a fixed distance, add a 'distance' column, give the "
                    "offsets in a length unit (km, au), or add a companion's radial "
                    "velocities (they fix the distance)")
        self.rows = ({} if self.velocity_only else
                      {name: self._prepare_rows(name) for name in self.companions})
        self.node_width = self.dynamics.node_widths(
            self, {name: TWO_PI if self._has_velocity_of(name) or self.sight is not None
                   else np.pi for name in self.companions})
        self.centres = {name: {"node": 0.5 * np.pi, "phase": np.pi} for name in self.companions}
        self.parameters = self._layout()
        self.n_dim = len(self.parameters)
        self.column_of = {p.name: k for k, p in enumerate(self.parameters)}
        self._log_norm = self._gaussian_normalisation()
        self._kernel_rows = self._pack_for_kernel()
        self._prior_plan = self._plan_prior()
        #: The compiled log-posterior, or None where the model takes the general path.
        self.compiled = compiled_posterior(self)
        n_velocities = len(velocities) if self.has_velocities else 0
        if self.velocity_only and n_velocities <= self.n_dim:
            raise ModelError(f"{n_velocities} radial velocities cannot fix the "
                             f"{self.n_dim} parameters of this model; more epochs are "
                             f"needed")

    # ----------------------------------------------------------------- set-up
    @property
    def primary_has_velocities(self) -> bool:
        """True where the primary's own velocities are among the data."""
        return self.velocity_rows is not None and bool(np.any(self.velocity_rows.owner < 0))

    def _has_velocity_of(self, name) -> bool:
        # The primary's reflex carries every companion's signal; a companion's own
        # velocities carry its own.
        if self.velocity_rows is None:
            return False
        k = list(self.companions).index(name)
        return bool(np.any(self.velocity_rows.owner == k) or np.any(self.velocity_rows.owner < 0))

    def _companion_specs(self, observations):
        primary = observations.primary
        velocities = observations.velocities
        astrometric = ([] if self.velocity_only else
                       list(dict.fromkeys(observations.astrometry.body.tolist())))
        spectroscopic = []
        if velocities is not None:
            spectroscopic = [b for b in dict.fromkeys(velocities.body.tolist())
                             if b != primary]
        for name in spectroscopic:
            if self.velocity_only or name in astrometric:
                continue
            row = int(np.flatnonzero(velocities.body == name)[0])
            raise InputError(
                f"radial velocities of body '{name}', which has no astrometry; a joint "
                f"fit needs every companion's positions (or is '{name}' the primary? "
                f"its rows are named '{primary}')", file=velocities.file[row],
                line=int(velocities.line[row]), column="body")
        names = astrometric or spectroscopic
        if self.velocity_only and not names:
            # Only the primary's velocities: the companions are those listed, or one.
            names = list(self.spec.companions) or ["companion"]
        primary_rv = velocities is not None and bool(np.any(velocities.body == primary))
        # A listed companion without data is the first thing to say: an unlisted body
        # in the data is often the same one under another name.
        for name in self.spec.companions:
            if name not in names:
                raise ModelError(f"companion '{name}' is listed in the model ([companions."
                                 f"{name}]) but no row of the data has body '{name}'; "
                                 f"bodies in the data: {', '.join(names) or 'none'}")
        specs = {}
        for name in names:
            if name in self.spec.companions:
                comp = self.spec.companions[name]
            elif self.spec.strict_companions:
                raise self._unlisted_body(observations, name)
            else:
                comp = CompanionSpec(name)
            if comp.mass is None:
                reflex = primary_rv and not self.velocity_only
                comp = replace(comp, mass=DEFAULT_REFLEX_MASS_PRIOR if reflex
                               else Fixed(0.0))
            specs[name] = comp
        for name in astrometric:
            rows = observations.astrometry.body == name
            # Rows at one time are one epoch however many there are.
            times = observations.astrometry.time[rows].jd
            n_epochs = len(np.unique(times)) if self._distinct_epochs else len(times)
            if 2 * n_epochs < 7 and not primary_rv and name not in spectroscopic:
                raise ModelError(
                    f"{_files(observations.astrometry.file[rows])}: "
                    f"companion '{name}' has {n_epochs} astrometric epoch(s) (distinct "
                    f"times) in {int(rows.sum())} row(s); an orbit and the central mass "
                    f"need at least 4 (7 numbers for 7 unknowns)")
        return specs

    def viewing_description(self) -> dict:
        """How the line of sight was known (summary key ``viewing``)."""
        from massfit.orbits.viewing import ViewingSpec

        return (self.spec.viewing or ViewingSpec()).describe()

    def primary_pole(self):
        """(ra, dec) of the primary's pole in radians where given with a line of
        sight, else None."""
        viewing = self.spec.viewing
        if self.sight is None or viewing is None or viewing.pole_ra is None:
            return None
        return viewing.pole_ra, viewing.pole_dec

    def _check_references(self, astrometry):
        """Offsets measured from another body name a companion of this fit."""
        reference = astrometry.reference_body
        if reference is None:
            return
        for row in np.flatnonzero(reference != ""):
            if reference[row] not in self.companions:
                raise InputError(
                    f"names '{reference[row]}', which is neither the primary "
                    f"('{self.observations.primary}') nor a companion with astrometry "
                    f"({', '.join(self.companions)})", file=astrometry.file[row],
                    line=int(astrometry.line[row]), column="reference_body")
        if type(self.dynamics) is not Keplerian:
            raise ModelError(f"offsets measured from another companion (reference_body) "
                             f"need the keplerian model for now, not the "
                             f"{self.dynamics.label} one")

    def _unlisted_body(self, observations, name):
        message = (f"the data have a body '{name}' that the model does not list; add "
                   f"it under [companions] or remove its rows")
        for data in (observations.astrometry, observations.velocities):
            if data is not None and np.any(data.body == name):
                row = int(np.flatnonzero(data.body == name)[0])
                return InputError(message, file=data.file[row], line=int(data.line[row]),
                                  column="body")
        return ModelError(message)

    def _prepare_velocities(self) -> _VelocityRows:
        data = self.observations.velocities
        labels = np.where(data.instrument == "",
                          [f"{_file_stem(f)}" for f in data.file], data.instrument)
        names = list(dict.fromkeys(labels.tolist()))
        for label in self.spec.instruments:
            if label not in names:
                raise self._missing_instrument(label)
        index = np.array([names.index(x) for x in labels], dtype=int)
        companions = list(self.companions)
        owner = np.array([-1 if b == self.observations.primary else companions.index(b)
                          for b in data.body], dtype=int)
        t = data.time.tdb.jd - self.epoch_jd
        offsets, jitters = [], []
        for j, label in enumerate(names):
            own = self.spec.instruments.get(label, InstrumentSpec())
            rv = data.rv[index == j]
            err = data.rv_err[index == j]
            spread = max(float(np.ptp(rv)), 10.0 * float(np.median(err)))
            # With frame terms the primary's velocity is frame.velocity: a free zero
            # point per instrument would be the same number again.
            offsets.append(own.offset if own.offset is not None or self.spec.frame is None
                           else Fixed(0.0))
            jitters.append(own.jitter or self.spec.jitter or Uniform(0.0, spread))
        return _VelocityRows(t=t, rv=data.rv.astype(float), err2=data.rv_err ** 2,
                             instrument=index, owner=owner, labels=names,
                             t_trend=float(np.mean(t)), offsets=offsets, jitters=jitters)

    def _missing_instrument(self, label):
        rejected = [r for r in self.observations.rejected]
        where = "; ".join(f"{r.file} line {r.line}: {r.reason}" for r in rejected[:5])
        more = f" (rows rejected: {where})" if where else ""
        return ConfigError(f"instrument '{label}' has no usable radial velocities{more}; "
                           f"remove its entry or fix its rows",
                           key=f"velocities.instruments.{label}")

    def _prepare_rows(self, name) -> _AstrometryRows:
        data = self.observations.astrometry
        index = np.flatnonzero(data.body == name)
        t = data.time.tdb.jd[index] - self.epoch_jd
        distance = data.distance[index]
        has_distance = np.isfinite(distance)
        if self.spec.light_time:
            t = t - np.where(has_distance, distance * LIGHT_DAYS_PER_PC, 0.0)
        length = data.length[index]
        scale = np.where(length, 1.0, np.where(has_distance, 1.0 / np.where(
            has_distance, distance, 1.0), 1.0))
        uses_parallax = ~length & ~has_distance
        polar = data.polar[index]
        corr = np.where(polar, 0.0, data.corr[index])
        return _AstrometryRows(
            index=index, t=t, scale=scale, uses_parallax=uses_parallax,
            cart=np.flatnonzero(~polar), polar=np.flatnonzero(polar),
            east=data.east[index][~polar], north=data.north[index][~polar],
            east_err=data.east_err[index][~polar], north_err=data.north_err[index][~polar],
            corr=corr[~polar], corr_factor=1.0 / np.sqrt(1.0 - corr[~polar] ** 2),
            sep=data.sep[index][polar], sep_err=data.sep_err[index][polar],
            pa=data.pa[index][polar], pa_err=data.pa_err[index][polar],
            sight=None if self.sight is None else self.sight.select(index),
            reference=(None if data.reference_body is None
                       or not np.any(data.reference_body[index] != "")
                       else data.reference_body[index]),
        )

    def _pack_for_kernel(self):
        """Each companion's rows as the fused compiled chi^2 takes them, or None.

        Only plain two-body astrometry goes through the fused kernel: velocities, other
        dynamics and the Romer delay keep the general path (the same sums, assembled
        from the residual arrays).
        """
        if (self.velocity_rows is not None or type(self.dynamics) is not Keplerian
                or getattr(self.spec, "romer_delay", False) or self.sight is not None
                or self.spec.frame is not None or self.spec.relativity is not None
                or any(rows.reference is not None for rows in self.rows.values())):
            return None
        return self.packed_rows()

    def packed_rows(self) -> dict:
        """Each companion's astrometry as the compiled kernels take it: east/north rows
        first, then sep/pa, times from the companion's reference epoch."""
        packs = {}
        for name, rows in self.rows.items():
            order = np.concatenate([rows.cart, rows.polar])
            n_polar = rows.polar.size
            packs[name] = _KernelRows(
                dt=np.ascontiguousarray(rows.t[order] - self.reference_epoch(name)),
                scale=np.ascontiguousarray(rows.scale[order], dtype=float),
                uses_parallax=np.ascontiguousarray(rows.uses_parallax[order]),
                n_cart=int(rows.cart.size),
                obs1=np.concatenate([rows.east, rows.sep]),
                obs2=np.concatenate([rows.north, rows.pa]),
                err1=np.concatenate([rows.east_err, rows.sep_err]),
                err2=np.concatenate([rows.north_err, rows.pa_err]),
                corr=np.concatenate([rows.corr, np.zeros(n_polar)]),
                corr_factor=np.concatenate([rows.corr_factor, np.ones(n_polar)]))
        return packs

    def reference_epoch(self, name) -> float:
        """Reference epoch of a companion's phase, days since :attr:`epoch_jd`."""
        if self.velocity_only:
            return float(self.velocity_rows.t_trend)
        return float(np.mean(self.rows[name].t))

    def _layout(self):
        spec = self.spec
        params = []
        if not self.velocity_only and not spec.central_mass.is_fixed:
            params.append(_Parameter("central.log10_mass", r"$\log_{10} M/M_\odot$",
                                     spec.central_mass, "log10"))
        if self.needs_parallax and not spec.parallax.is_fixed:
            params.append(_Parameter("parallax", r"$\varpi$ [mas]", spec.parallax,
                                     "identity", 0.0, np.inf))
        for k, (name, comp) in enumerate(self.companions.items()):
            params.append(_Parameter(f"{name}.log10_period", rf"$\log_{{10}} P_{{{name}}}$",
                                     comp.period, "log10"))
            if not comp.eccentricity.is_fixed:
                params.append(_Parameter(f"{name}.sqrt_e_cos_w", "", comp.eccentricity,
                                         "disc", -1.0, 1.0))
                params.append(_Parameter(f"{name}.sqrt_e_sin_w", "", comp.eccentricity,
                                         "disc", -1.0, 1.0))
            elif comp.eccentricity.value > 0:
                params.append(_Parameter(f"{name}.omega", "", Uniform(-np.inf, np.inf),
                                         "window"))
            if self.velocity_only:
                params.append(_Parameter(f"{name}.phase", "", Uniform(-np.inf, np.inf),
                                         "window"))
                prior = comp.semi_amplitude or DEFAULT_SEMI_AMPLITUDE_PRIOR
                if self.primary_has_velocities:
                    params.append(_scale_parameter(f"{name}.k_primary", prior))
                if np.any(self.velocity_rows.owner == k):
                    params.append(_scale_parameter(f"{name}.k_companion", prior))
                continue
            if not (comp.inclination is not None and comp.inclination.is_fixed):
                params.append(_Parameter(f"{name}.cos_inc", "", comp.inclination or
                                         Uniform(0.0, np.pi), "cos", -1.0, 1.0))
            params.append(_Parameter(f"{name}.node", "", Uniform(-np.inf, np.inf), "window"))
            params.append(_Parameter(f"{name}.phase", "", Uniform(-np.inf, np.inf), "window"))
            if not comp.mass.is_fixed:
                transform = "log10" if isinstance(comp.mass, LogUniform) else "identity"
                prefix = "log10_" if transform == "log10" else ""
                params.append(_Parameter(f"{name}.{prefix}mass", "", comp.mass, transform,
                                         0.0 if transform == "identity" else -np.inf))
        for name, label, prior in extra_terms.parameters(spec, self.velocity_rows is not None):
            params.append(_Parameter(name, label, Uniform(-np.inf, np.inf), "flat")
                          if prior is None else _Parameter(name, label, prior, "identity"))
        if self.velocity_rows is not None:
            params.extend(self._velocity_layout())
        return params

    def _velocity_layout(self):
        vel = self.velocity_rows
        params = []
        for label, offset, jitter in zip(vel.labels, vel.offsets, vel.jitters):
            if offset is None:
                params.append(_Parameter(f"rv.{label}.offset", "", Uniform(-np.inf, np.inf),
                                         "flat", target=("offset", label)))
            elif not offset.is_fixed:
                params.append(_Parameter(f"rv.{label}.offset", "", offset, "identity",
                                         target=("offset", label)))
            if not jitter.is_fixed:
                param = _scale_parameter(f"rv.{label}.jitter", jitter)
                param.target = ("jitter", label)
                params.append(param)
        terms = {"none": (), "linear": ("slope",), "quadratic": ("slope", "curvature")}
        for term in terms[self.spec.trend]:
            prior = getattr(self.spec, term)
            if prior is None:
                params.append(_Parameter(f"rv.trend.{term}", "", Uniform(-np.inf, np.inf),
                                         "flat", target=(term, None)))
            elif not prior.is_fixed:
                params.append(_Parameter(f"rv.trend.{term}", "", prior, "identity",
                                         target=(term, None)))
        return params

    def _gaussian_normalisation(self) -> float:
        total = 0.0
        for rows in self.rows.values():
            total -= np.sum(np.log(TWO_PI * rows.east_err * rows.north_err / rows.corr_factor))
            total -= np.sum(np.log(TWO_PI * rows.sep_err * rows.pa_err))
        if self.velocity_rows is not None:
            # The jitter's share of the normalisation is in the residuals (see there).
            total -= 0.5 * np.sum(np.log(TWO_PI * self.velocity_rows.err2))
        return float(total)

    @property
    def prior_plan(self) -> _PriorPlan:
        """The prior as a box with a constant density, the discs and the rest."""
        return self._prior_plan

    @property
    def log_normalisation(self) -> float:
        """The Gaussian likelihood's constant (velocities' jitter terms aside)."""
        return self._log_norm

    # ------------------------------------------------------------- coordinates
    @property
    def names(self) -> list:
        """Names of the sampled coordinates, in order."""
        return [p.name for p in self.parameters]

    def window(self, name, kind):
        """(low, high) of an angle window: kind is 'node' or 'phase'."""
        width = self.node_width[name] if kind == "node" else TWO_PI
        centre = self.centres[name][kind]
        return centre - 0.5 * width, centre + 0.5 * width

    def physical(self, theta, *, lenient=False):
        """Physical parameters for each row of ``theta``.

        Parameters
        ----------
        theta : ndarray, shape (n, n_dim) or (n_dim,)
        lenient : bool
            Clip eccentricity into range instead of producing NaN (for optimisers).

        Returns
        -------
        dict
            ``central_mass`` (nominal M_sun), ``parallax`` (mas, or None) and, per
            companion, a dict with ``period`` (d), ``ecc``, ``omega``, ``inc``,
            ``node``, ``mean_anomaly_ref`` (rad), ``mass`` (M_sun) and
            ``semi_major_axis`` (au), and where there are velocities the primary's and
            the companion's semi-amplitudes ``k_primary`` and ``k_companion`` (km/s).
            A velocity-only model has no ``central_mass`` (None), ``inc``, ``node``,
            ``mass`` or ``semi_major_axis``. With velocities, ``rv`` holds
            ``offset`` and ``jitter`` (shape (n, n_instruments), km/s), ``slope`` and
            ``curvature``. Arrays of shape (n,).
        """
        theta = np.atleast_2d(theta)
        n = theta.shape[0]
        col = self._column(theta)
        spec = self.spec
        masses = None if self.velocity_only else self.physical_masses(theta)
        central = None if masses is None else masses["central_mass"]
        parallax = None
        if self.needs_parallax:
            parallax = (np.full(n, spec.parallax.value) if spec.parallax.is_fixed
                        else col("parallax"))
        out = {"central_mass": central, "parallax": parallax, "companions": {},
               "frame": extra_terms.frame_values(spec, self.column_of, col, n)}
        rel = self.spec.relativity
        precessing = rel is not None and rel.precession
        if precessing:
            out["precession_scale"] = extra_terms.precession_scale(spec, self.column_of, col, n)
        for name, comp in self.companions.items():
            period = 10.0 ** col(f"{name}.log10_period")
            if comp.eccentricity.is_fixed:
                ecc = np.full(n, comp.eccentricity.value)
                omega = col(f"{name}.omega") if comp.eccentricity.value > 0 else np.zeros(n)
            else:
                h, k = col(f"{name}.sqrt_e_cos_w"), col(f"{name}.sqrt_e_sin_w")
                ecc = h * h + k * k
                omega = np.arctan2(k, h)
                if lenient:
                    ecc = np.minimum(ecc, 0.999)
            orbit = {"period": period, "ecc": ecc, "omega": omega,
                     "mean_anomaly_ref": col(f"{name}.phase") - omega}
            if self.velocity_only:
                for kind in ("k_primary", "k_companion"):
                    if self._has_name(f"{name}.{kind}", f"{name}.log10_{kind}"):
                        orbit[kind] = self._scale_value(
                            col, f"{name}.{kind}",
                            comp.semi_amplitude or DEFAULT_SEMI_AMPLITUDE_PRIOR, n)
                out["companions"][name] = orbit
                continue
            if comp.inclination is not None and comp.inclination.is_fixed:
                inc = np.full(n, comp.inclination.value)
            else:
                inc = np.arccos(np.clip(col(f"{name}.cos_inc"), -1.0, 1.0))
            mass = masses["companions"][name]
            orbit.update(inc=inc, node=col(f"{name}.node"), mass=mass)
            # Kepler's third law, or its corrected form where the dynamics change it.
            a = self.dynamics.semi_major_axis(GM_SUN * (central + mass), period, orbit)
            orbit["semi_major_axis"] = a
            if precessing:
                orbit["omega_rate"] = precession_rate(GM_SUN * (central + mass), a, ecc,
                                                      period, out["precession_scale"])
            if self.velocity_rows is not None:
                with np.errstate(invalid="ignore", divide="ignore"):
                    k_rel = KM_S_PER_AU_DAY * kepler.radial_velocity_amplitude(
                        a, period, ecc, inc)
                    share = mass / (central + mass)
                orbit["k_primary"] = share * k_rel
                orbit["k_companion"] = (1.0 - share) * k_rel
            out["companions"][name] = orbit
        if self.velocity_rows is not None:
            out["rv"] = self._velocity_physical(col, n)
        return out

    def physical_masses(self, theta) -> dict:
        """Only the masses of :meth:`physical`: ``central_mass`` (n,) and per companion
        its ``mass`` (n,), nominal M_sun; they need no orbital coordinate."""
        theta = np.atleast_2d(theta)
        n = theta.shape[0]
        col = self._column(theta)
        spec = self.spec
        central = (np.full(n, spec.central_mass.value) if spec.central_mass.is_fixed
                   else 10.0 ** col("central.log10_mass"))
        return {"central_mass": central,
                "companions": {name: self._scale_value(col, f"{name}.mass", comp.mass, n)
                               for name, comp in self.companions.items()}}

    def _velocity_physical(self, col, n):
        vel = self.velocity_rows
        n_inst = len(vel.labels)
        offset = np.zeros((n, n_inst))
        jitter = np.zeros((n, n_inst))
        for j, label in enumerate(vel.labels):
            prior = vel.offsets[j]
            if prior is not None and prior.is_fixed:
                offset[:, j] = prior.value
            else:
                offset[:, j] = col(f"rv.{label}.offset")
            jitter[:, j] = self._scale_value(col, f"rv.{label}.jitter", vel.jitters[j], n)
        out = {"offset": offset, "jitter": jitter}
        for term in ("slope", "curvature"):
            if f"rv.trend.{term}" in self.column_of:
                out[term] = col(f"rv.trend.{term}")
            else:
                prior = getattr(self.spec, term)
                used = self.trend_has(term) and prior is not None
                out[term] = np.full(n, prior.value if used else 0.0)
        return out

    def trend_has(self, term) -> bool:
        return (term == "slope" and self.spec.trend != "none"
                or term == "curvature" and self.spec.trend == "quadratic")

    def _has_name(self, *names) -> bool:
        return any(name in self.column_of for name in names)

    def _scale_value(self, col, name, prior, n):
        """A positive quantity sampled directly, as log10, or fixed."""
        if prior.is_fixed:
            return np.full(n, prior.value)
        if isinstance(prior, LogUniform):
            body, kind = name.rsplit(".", 1)
            return 10.0 ** col(f"{body}.log10_{kind}")
        return col(name)

    def _column(self, theta):
        def col(name):
            return theta[:, self.column_of[name]]
        return col

    # ----------------------------------------------------------------- priors
    def log_prior(self, theta):
        """Log prior density of the sampled coordinates, shape (n,)."""
        theta = np.atleast_2d(theta)
        plan = self._prior_plan
        # One errstate for the whole loop: entering it costs as much as a small prior.
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            # Most coordinates have a prior that is flat where they are sampled (a
            # log-uniform period in log10 P, a uniform e on the sqrt(e) disc, an
            # isotropic cos i): one box test and a constant stand for them all.
            inside = np.all((theta >= plan.low) & (theta <= plan.high), axis=1)
            for k, j, low, high in plan.discs:
                ecc = theta[:, k] ** 2 + theta[:, j] ** 2
                inside &= (ecc >= low) & (ecc <= high)
            lp = np.full(theta.shape[0], plan.constant)
            for k in plan.varying:
                lp += self._log_prior_one(self.parameters[k], theta[:, k], theta)
            lp += self._log_prior_windows(theta)
            lp = np.where(inside, lp, -np.inf)
        return np.where(np.isnan(lp), -np.inf, lp)

    def _plan_prior(self) -> _PriorPlan:
        """Split the prior into a box with a constant density, and the rest."""
        low = np.full(self.n_dim, -np.inf)
        high = np.full(self.n_dim, np.inf)
        constant, varying, discs = 0.0, [], []
        for k, param in enumerate(self.parameters):
            prior, kind = param.prior, param.transform
            value = None
            if kind == "window":
                continue  # all of them in one piece, from the current centres
            if kind == "flat":
                value, box = 0.0, (param.low, param.high)
            elif kind == "identity" and type(prior) is Uniform:
                value, box = -np.log(prior.high - prior.low), (prior.low, prior.high)
            elif kind == "log10" and type(prior) is LogUniform:
                # p(x) dx = dx / (x ln(high/low)), and dx = x ln10 du.
                value = np.log(LN10) - np.log(np.log(prior.high / prior.low))
                box = (np.log10(prior.low), np.log10(prior.high))
            elif kind == "cos" and type(prior) is Uniform and prior.low == 0.0 \
                    and prior.high == np.pi:
                value, box = 0.0, (param.low, param.high)
            elif kind == "disc" and param.name.endswith("sqrt_e_sin_w"):
                value, box = 0.0, (param.low, param.high)  # counted with its partner
            elif kind == "disc" and type(prior) is Uniform:
                partner = self.column_of[param.name.replace("cos_w", "sin_w")]
                discs.append((k, partner, prior.low, prior.high))
                value = -np.log(prior.high - prior.low) - np.log(np.pi)
                box = (param.low, param.high)
            if value is None or not np.isfinite(value):
                varying.append(k)
                continue
            constant += value
            low[k] = max(box[0], param.low)
            high[k] = min(box[1], param.high)
        return _PriorPlan(low=low, high=high, constant=float(constant),
                          varying=varying, discs=discs)

    def _log_prior_windows(self, theta):
        # Angle windows are flat: only "inside all of them" matters, so one comparison
        # of every window column replaces a pass per angle (the same numbers).
        cols, lows, highs = [], [], []
        for k, param in enumerate(self.parameters):
            if param.transform != "window" or param.name.endswith(".omega"):
                continue
            low, high = self.window(*param.name.rsplit(".", 1))
            cols.append(k)
            lows.append(low)
            highs.append(high)
        if not cols:
            return 0.0
        u = theta[:, cols]
        return np.where(np.all((u >= lows) & (u < highs), axis=1), 0.0, -np.inf)

    def _log_prior_one(self, param, u, theta):
        inside = (u >= param.low) & (u <= param.high)
        if param.transform == "log10":
            x = 10.0 ** u
            value = param.prior.log_pdf(x) + np.log(x * LN10)
        elif param.transform == "identity":
            value = param.prior.log_pdf(u)
        elif param.transform == "flat":  # an improper flat prior (offsets, trends)
            value = np.zeros_like(u)
        elif param.transform == "cos":
            inc = np.arccos(np.clip(u, -1.0, 1.0))
            # Uniform in cos i is isotropic; any other prior on i needs 1/sin i.
            if isinstance(param.prior, Uniform) and param.prior.low == 0.0 \
                    and param.prior.high == np.pi:
                value = np.zeros_like(u)
            else:
                value = param.prior.log_pdf(inc) - np.log(np.sin(inc))
        elif param.transform == "disc":
            if param.name.endswith("sqrt_e_sin_w"):
                return np.where(inside, 0.0, -np.inf)  # counted with its partner
            k = theta[:, self.column_of[param.name.replace("cos_w", "sin_w")]]
            ecc = u * u + k * k
            # Uniform on the disc is uniform in e and omega: p(h, k) = p(e) / pi.
            value = param.prior.log_pdf(ecc) - np.log(np.pi)
        else:  # an angle window
            body, kind = param.name.rsplit(".", 1)
            if kind == "omega":
                return np.zeros_like(u)
            low, high = self.window(body, kind)
            inside = (u >= low) & (u < high)
            value = np.zeros_like(u)
        return np.where(inside, value, -np.inf)

    # ------------------------------------------------------------- likelihood
    def residuals(self, theta, *, lenient=False):
        """Whitened residuals, shape (n, n_residuals): their squares sum to chi^2.

        With radial velocities each velocity adds its residual over
        sqrt(err^2 + jitter^2) and one more term, sqrt(ln(1 + jitter^2 / err^2)), so
        that the sum of squares stays -2 ln L up to a constant while the jitter varies
        (which lets least squares fit the jitter too).
        """
        theta = np.atleast_2d(theta)
        phys = self.physical(theta, lenient=lenient)
        offsets = observed_offsets(self, phys)
        parts = []
        for name, rows in self.rows.items():
            parts.append(self._astrometry_residuals(rows, offsets[name], phys))
        if self.velocity_rows is not None:
            parts.append(self._velocity_residuals(phys))
        return np.concatenate(parts, axis=1)

    def velocity_parts(self, phys) -> dict:
        """The modelled velocities, split into their parts (km/s, shape (n, n_rows)).

        Parameters
        ----------
        phys : dict
            What :meth:`physical` returns.

        Returns
        -------
        dict
            ``systemic`` (instrument offset plus trend), ``companions`` (name -> that
            companion's share: its reflex on the primary's rows, its own motion on its
            rows) and ``total``.
        """
        vel = self.velocity_rows
        rv = phys["rv"]
        dt = vel.t[None, :] - vel.t_trend
        systemic = (rv["offset"][:, vel.instrument] + rv["slope"][:, None] * dt
                    + rv["curvature"][:, None] * dt * dt)
        if phys.get("frame") is not None:
            systemic = systemic + phys["frame"]["velocity"][:, None]
        total = systemic.copy()
        shares = {}
        for k, (name, orbit) in enumerate(phys["companions"].items()):
            shape = self.velocity_shape(name, orbit)
            k_primary = orbit.get("k_primary", np.zeros(shape.shape[0]))[:, None]
            k_companion = orbit.get("k_companion", np.zeros(shape.shape[0]))[:, None]
            # v_primary = gamma - K1 f; a companion's own = v_primary + (K1 + K2) f.
            share = -k_primary * shape
            own = vel.owner == k
            share[:, own] += ((k_primary + k_companion) * shape)[:, own]
            shares[name] = share
            total += share
        parts = {"systemic": systemic, "companions": shares, "total": total}
        if self.spec.relativity is not None or self.spec.romer_delay:
            parts["relativity"] = extra_terms.velocity_terms(self, phys)
            for term in parts["relativity"].values():
                total += term
        return parts

    def velocity_shape(self, name, orbit, t=None):
        """cos(nu + omega) + e cos(omega) at every velocity row (or at ``t``): v_rel / K."""
        column = {key: value[:, None] for key, value in orbit.items()}
        t = self.velocity_rows.t if t is None else t
        mean = column["mean_anomaly_ref"] + TWO_PI * (
            t[None, :] - self.reference_epoch(name)) / column["period"]
        ecc = column["ecc"]
        with np.errstate(invalid="ignore"):
            _, cos_e, sin_e = kepler.kepler_cs(mean, ecc)
            # cos nu and sin nu straight from E: no arctan, no further trigonometry.
            denominator = 1.0 - ecc * cos_e
            cos_nu = (cos_e - ecc) / denominator
            sin_nu = np.sqrt(1.0 - ecc * ecc) * sin_e / denominator
        omega = omega_at(column, t, self.reference_epoch(name))
        cos_w, sin_w = np.cos(omega), np.sin(omega)
        return cos_w * (cos_nu + ecc) - sin_w * sin_nu

    def _velocity_residuals(self, phys):
        vel = self.velocity_rows
        model = self.velocity_parts(phys)["total"]
        jitter2 = phys["rv"]["jitter"][:, vel.instrument] ** 2
        with np.errstate(invalid="ignore", divide="ignore"):
            whitened = (vel.rv - model) / np.sqrt(vel.err2 + jitter2)
            extra = np.sqrt(np.log1p(jitter2 / vel.err2))
        return np.concatenate([whitened, extra], axis=1)

    def predicted_offsets(self, theta, name):
        """Model east and north offsets of one companion at its data rows.

        Parameters
        ----------
        theta : ndarray, shape (n, n_dim) or (n_dim,)
        name : str
            The companion.

        Returns
        -------
        east, north : ndarray, shape (n, n_rows)
            In each row's own units (arcsec, or au for length rows), rows in the order
            of ``model.rows[name].index``.
        """
        phys = self.physical(np.atleast_2d(theta))
        east, north = observed_offsets(self, phys)[name]
        return self._in_frame(self.rows[name], east, north, phys)

    def _in_frame(self, rows, east, north, phys):
        """Offsets from the primary (au) as the data give them: scaled to arcsec, and
        moved by the primary's own place in the frame where frame terms are on."""
        east, north = self._scaled(rows, east, north, phys["parallax"])
        if phys.get("frame") is None:
            return east, north
        shift_east, shift_north = frame_shift(phys["frame"], rows.t)
        return east + shift_east, north + shift_north

    def _scaled(self, rows, east, north, parallax):
        scale = np.broadcast_to(rows.scale, east.shape)
        if parallax is not None and np.any(rows.uses_parallax):
            scale = scale * np.where(rows.uses_parallax, parallax[:, None] * 1e-3, 1.0)
        return east * scale, north * scale

    def _astrometry_residuals(self, rows, offsets, phys):
        east, north = self._in_frame(rows, *offsets, phys)
        c, p = rows.cart, rows.polar
        # Where every row is east/north, take the arrays as they are (no gather copy).
        east_c, north_c = (east, north) if p.size == 0 else (east[:, c], north[:, c])
        r_east = (rows.east - east_c) / rows.east_err
        r_north = ((rows.north - north_c) / rows.north_err
                   - rows.corr * r_east) * rows.corr_factor
        sep = np.hypot(east[:, p], north[:, p])
        pa = np.arctan2(east[:, p], north[:, p])
        r_sep = (rows.sep - sep) / rows.sep_err
        r_pa = _wrap(rows.pa - pa) / rows.pa_err
        return np.concatenate([r_east, r_north, r_sep, r_pa], axis=1)

    def log_likelihood(self, theta):
        """Gaussian log-likelihood, normalisation included, shape (n,)."""
        theta = np.atleast_2d(theta)
        if self._kernel_rows is not None and kepler.numba_kernel is not None:
            chi2 = self._chi2_fused(theta)
        else:
            res = self.residuals(theta)
            chi2 = np.sum(res * res, axis=1)
        return np.where(np.isfinite(chi2), -0.5 * chi2 + self._log_norm, -np.inf)

    def _chi2_fused(self, theta):
        # One compiled pass per companion straight to chi^2: at a few hundred rows the
        # residual arrays and their Python assembly cost more than the orbits.
        phys = self.physical(theta)
        n = theta.shape[0]
        parallax = phys["parallax"]
        parallax_scale = (np.ones(n) if parallax is None
                          else np.ascontiguousarray(parallax * 1e-3, dtype=float))
        chi2 = np.zeros(n)
        for name, pack in self._kernel_rows.items():
            orbit = phys["companions"][name]
            elements = [np.ascontiguousarray(orbit[key], dtype=float)
                        for key in ("period", "mean_anomaly_ref", "ecc", "semi_major_axis",
                                    "inc", "omega", "node")]
            period, m0, ecc, a, inc, omega, node = elements
            kepler.numba_kernel.astrometry_chi2(
                pack.dt, period, m0, ecc, a, inc, omega, node, parallax_scale, pack.scale,
                pack.uses_parallax, pack.n_cart, pack.obs1, pack.obs2, pack.err1,
                pack.err2, pack.corr, pack.corr_factor, chi2)
        return chi2

    def log_prob(self, theta):
        """Log-posterior (up to a constant) for each row of ``theta``; emcee's target.

        Compiled (:mod:`massfit.model.compiled_posterior`) where the model qualifies
        and numba is installed; otherwise :meth:`log_prob_python`, the reference.
        """
        if self.compiled is not None and self.compiled.available:
            return self.compiled(theta)
        return self.log_prob_python(theta)

    def log_prob_python(self, theta):
        """:meth:`log_prob` on the general path (numpy, the fused chi^2 where allowed)."""
        theta = np.atleast_2d(theta)
        lp = self.log_prior(theta)
        good = np.flatnonzero(np.isfinite(lp))
        if good.size:
            n_rows = self.observations.rows_used
            step = max(1, _CHUNK_ELEMENTS // max(n_rows, 1))
            for start in range(0, good.size, step):
                chunk = good[start:start + step]
                lp[chunk] += self.log_likelihood(theta[chunk])
        return np.where(np.isfinite(lp), lp, -np.inf)

    # ----------------------------------------------------------- conversions
    def from_physical(self, values: dict) -> np.ndarray:
        """Sampled coordinates from physical values.

        ``values`` has ``central_mass`` (M_sun), optional ``parallax`` (mas), and per
        companion name a dict with ``period``, ``ecc``, ``omega``, ``inc``, ``node``,
        ``mean_anomaly_ref``, optional ``mass`` and (velocity-only) ``k_primary``,
        ``k_companion``. With velocities, ``rv`` holds ``offset`` and ``jitter``
        (dicts by instrument label, km/s), ``slope`` and ``curvature``. Angles are
        wrapped into the current windows.
        """
        values = dict(values)
        for name in self.companions:
            if not self.velocity_only:
                values[name] = self._fold_node(name, dict(values[name]))
        theta = np.empty(self.n_dim)
        for k, param in enumerate(self.parameters):
            theta[k] = self._coordinate(param, values)
        return theta

    def _fold_node(self, name, orbit):
        # Where only astrometry constrains the body, (omega + pi, node + pi) is the
        # same orbit on the sky: move both together into the node window.
        low, _ = self.window(name, "node")
        turns = np.floor((orbit["node"] - low) / self.node_width[name])
        orbit["node"] = orbit["node"] - turns * self.node_width[name]
        if self.node_width[name] < TWO_PI:
            orbit["omega"] = orbit["omega"] + turns * np.pi
        return orbit

    def _coordinate(self, param, values):
        name = param.name
        if param.target is not None:
            kind, label = param.target
            value = values["rv"][kind] if label is None else values["rv"][kind][label]
            return float(np.log10(value) if param.transform == "log10" else value)
        if name == "central.log10_mass":
            return np.log10(values["central_mass"])
        if name == "parallax":
            return values["parallax"]
        if name.startswith("frame."):
            return float(values.get("frame", {}).get(name.split(".", 1)[1], 0.0))
        if name == "relativity.precession_scale":
            return float(values.get("precession_scale", 1.0))
        body, kind = name.rsplit(".", 1)
        orbit = values[body]
        simple = {
            "log10_period": lambda: np.log10(orbit["period"]),
            "sqrt_e_cos_w": lambda: np.sqrt(orbit["ecc"]) * np.cos(orbit["omega"]),
            "sqrt_e_sin_w": lambda: np.sqrt(orbit["ecc"]) * np.sin(orbit["omega"]),
            "omega": lambda: orbit["omega"],
            "cos_inc": lambda: np.cos(orbit["inc"]),
            "log10_mass": lambda: np.log10(orbit["mass"]),
            "mass": lambda: orbit["mass"],
        }
        for amplitude in ("k_primary", "k_companion"):
            simple[amplitude] = lambda key=amplitude: orbit[key]
            simple[f"log10_{amplitude}"] = lambda key=amplitude: np.log10(orbit[key])
        if kind in simple:
            return float(simple[kind]())
        if kind == "node":
            return float(orbit["node"])
        low, high = self.window(body, "phase")
        phase = orbit["mean_anomaly_ref"] + orbit["omega"]
        return float(low + np.mod(phase - low, high - low))

    def recentre(self, theta):
        """Centre the node and phase windows on ``theta`` (1-D) and return it."""
        theta = np.array(theta, dtype=float)
        kinds = ("phase",) if self.velocity_only else ("node", "phase")
        for name in self.companions:
            for kind in kinds:
                k = self.column_of[f"{name}.{kind}"]
                self.centres[name][kind] = float(theta[k])
        return theta


def _scale_parameter(name, prior) -> _Parameter:
    """A positive scale (semi-amplitude, jitter): log10 for a log-uniform prior."""
    if isinstance(prior, LogUniform):
        body, kind = name.rsplit(".", 1)
        return _Parameter(f"{body}.log10_{kind}", "", prior, "log10")
    return _Parameter(name, "", prior, "identity", 0.0, np.inf)


def _sight_of(astrometry, viewing):
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


def _file_stem(path) -> str:
    """Instrument label of rows that have none: the name of their file."""
    return Path(str(path)).stem


def _files(names) -> str:
    """The distinct file names of some rows, for a message."""
    return ", ".join(dict.fromkeys(str(n) for n in names))


def _wrap(angle):
    """Angle folded into [-pi, pi)."""
    return np.mod(angle + np.pi, TWO_PI) - np.pi

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
and, given an inclination prior, the masses."""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from massfit.constants import GM_SUN, KM_S_PER_AU_DAY
from massfit.errors import ConfigError, ModelError
from massfit.model import extra_terms
from massfit.model.compiled_posterior import compiled_posterior
from massfit.model.data_rows import ModelData
from massfit.model.frame import frame_shift
from massfit.model.layout import ParameterLayout
from massfit.model.parts import TWO_PI, data_files, sight_of, wrap_angle
from massfit.model.prior_terms import PriorTerms
from massfit.model.specs import (
    DEFAULT_FREE_PARALLAX_PRIOR,
    DEFAULT_SEMI_AMPLITUDE_PRIOR,
    TRENDS,
    SystemSpec,
)
from massfit.orbits import kepler
from massfit.orbits.dynamics import Keplerian, observed_offsets, offsets_from_primary
from massfit.orbits.relativity import accumulated_anomaly, omega_at, precession_per_anomaly
from massfit.orbits.viewing import angles_of, sky_basis
from massfit.priors import LogUniform
from massfit.read.observations import Observations

__all__ = ["OrbitModel", "POLE_AGREEMENT_DEG"]

#: How far apart (deg) the primary's pole may be where it is given twice, by the viewing
#: settings and by the dynamics' equator: rounding of the same pole, not two poles.
POLE_AGREEMENT_DEG = 0.01

# Rows of walkers times rows of data evaluated in one piece; bounds memory for big sets.
_CHUNK_ELEMENTS = 2_000_000


class OrbitModel(ModelData, ParameterLayout, PriorTerms):
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
        self.sight = (sight_of(astrometry, self.spec.viewing)
                      if has_astrometry and astrometry.has_sight else None)
        if has_astrometry:
            self._check_references(astrometry)
        if self.sight is not None:
            self._check_pole()
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
                    f"{data_files(astrometry.file[angular])}: "
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

    def viewing_description(self) -> dict:
        """How the line of sight was known (summary key ``viewing``)."""
        from massfit.orbits.viewing import ViewingSpec

        return (self.spec.viewing or ViewingSpec()).describe()

    def primary_pole(self):
        """(ra, dec) of the primary's north pole, rad (ICRS), or None.

        Only with a moving line of sight (the orbits then have ICRS axes). The pole
        is given either by the viewing settings (``pole_ra``, ``pole_dec``) or by the
        dynamics' equator (``equator_inclination`` i and ``equator_node`` N, in the
        convention of an orbit's elements: the equator's normal
        (sin i sin N, -sin i cos N, cos i) points at RA = N - 90 deg,
        Dec = 90 deg - i). Where both are given they must agree (the model refuses
        them otherwise, :data:`POLE_AGREEMENT_DEG`) and the dynamics' one is
        returned: it is the one the forces use.
        """
        if self.sight is None:
            return None
        stated = self.dynamics.stated_pole()
        if stated is not None:
            return angles_of(stated)
        viewing = self.spec.viewing
        if viewing is None or viewing.pole_ra is None:
            return None
        return viewing.pole_ra, viewing.pole_dec

    def _check_pole(self):
        """Refuse a pole given twice (viewing and dynamics) that disagrees."""
        viewing = self.spec.viewing
        stated = self.dynamics.stated_pole()
        if viewing is None or viewing.pole_ra is None or stated is None:
            return
        given = sky_basis(viewing.pole_ra, viewing.pole_dec)[0][0]
        apart = np.degrees(np.arccos(np.clip(given @ stated, -1.0, 1.0)))
        if apart > POLE_AGREEMENT_DEG:
            ra, dec = np.degrees(angles_of(stated))
            raise ConfigError(
                f"the primary's pole is given twice and the two disagree by {apart:.3g} "
                f"deg: the viewing pole points at RA {np.degrees(viewing.pole_ra):.4f} "
                f"deg, Dec {np.degrees(viewing.pole_dec):.4f} deg, the dynamics' equator "
                f"(dynamics.equator_inclination/equator_node, --equator-inclination/"
                f"--equator-node) at RA {ra:.4f} deg, Dec "
                f"{dec:.4f} deg (RA = node - 90 deg, Dec = 90 deg - inclination); give "
                f"one of them, or both alike within {POLE_AGREEMENT_DEG} deg",
                key="viewing.pole_ra/pole_dec (--pole)")

    def reference_epoch(self, name) -> float:
        """Reference epoch of a companion's phase, days since :attr:`epoch_jd`."""
        if self.velocity_only:
            return float(self.velocity_rows.t_trend)
        return float(np.mean(self.rows[name].t))

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
                orbit["omega_per_anomaly"] = precession_per_anomaly(
                    GM_SUN * (central + mass), a, ecc, out["precession_scale"])
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
        """cos(nu + omega) + e cos(omega) at every velocity row (or at ``t``): v_rel / K
        (with a turning periapsis, omega at each row and the turning's term)."""
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
        if "omega_per_anomaly" not in column:
            cos_w, sin_w = np.cos(column["omega"]), np.sin(column["omega"])
            return cos_w * (cos_nu + ecc) - sin_w * sin_nu
        # A turning periapsis (relativity): omega at this anomaly, and the turning's
        # own velocity, omega_dot r sin i cos(nu + omega) = k (1 + e cos nu) K cos(..).
        omega = omega_at(column, mean, accumulated_anomaly(mean, cos_nu, sin_nu))
        cos_w, sin_w = np.cos(omega), np.sin(omega)
        along = cos_w * cos_nu - sin_w * sin_nu
        return along + ecc * cos_w + column["omega_per_anomaly"] * (
            1.0 + ecc * cos_nu) * along

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

    def offsets_from_primary(self, theta, name, *, along=None):
        """:meth:`predicted_offsets` with every row taken from the primary, rows
        measured from another companion included, and with ``along`` (a unit vector,
        ICRS; a moving line of sight only) seen orthographically along that direction
        instead of each row's own line of sight: the view the orbit figure draws
        (:func:`massfit.orbits.dynamics.offsets_from_primary`). Each row's own units."""
        phys = self.physical(np.atleast_2d(theta))
        east, north = offsets_from_primary(self, phys, along=along)[name]
        return self._in_frame(self.rows[name], east, north, phys)

    def all_predicted_offsets(self, theta) -> dict:
        """:meth:`predicted_offsets` of every companion with astrometry from one
        evaluation of the dynamics (one integration where they are integrated):
        name -> (east, north), each (n, n_rows)."""
        phys = self.physical(np.atleast_2d(theta))
        offsets = observed_offsets(self, phys)
        return {name: self._in_frame(self.rows[name], *offsets[name], phys)
                for name in self.rows}

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
        r_pa = wrap_angle(rows.pa - pa) / rows.pa_err
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


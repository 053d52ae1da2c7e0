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
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from . import kepler
from .constants import GM_SUN, LIGHT_DAYS_PER_PC
from .errors import ModelError
from .observations import Observations
from .priors import Fixed, LogUniform, Normal, Prior, Uniform

__all__ = ["CompanionSpec", "SystemSpec", "OrbitModel", "DEFAULT_CENTRAL_MASS_PRIOR"]

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
    mass : Prior
        The companion's own mass in nominal solar masses; fixed at 0 (a test particle)
        unless stated.
    """

    name: str
    period: Prior = field(default_factory=lambda: DEFAULT_PERIOD_PRIOR)
    eccentricity: Prior = field(default_factory=lambda: DEFAULT_ECCENTRICITY_PRIOR)
    inclination: Prior | None = None
    mass: Prior = field(default_factory=lambda: Fixed(0.0))


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
    strict_companions : bool
        Refuse data of bodies that are not listed in ``companions``.
    """

    primary: str = "primary"
    central_mass: Prior = field(default_factory=lambda: DEFAULT_CENTRAL_MASS_PRIOR)
    parallax: Prior | None = None
    companions: dict = field(default_factory=dict)
    light_time: bool = True
    strict_companions: bool = False


@dataclass
class _Parameter:
    name: str
    label: str
    prior: Prior
    transform: str  # "identity", "log10", "cos" or "none" (window/disc coordinates)
    low: float = -np.inf
    high: float = np.inf


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


class OrbitModel:
    """Log-posterior of a system's parameters given its observations.

    Parameters
    ----------
    observations : Observations
        Validated observations (:func:`massfit.read_observations`).
    spec : SystemSpec, optional
        Assumptions; defaults for everything not stated.

    Notes
    -----
    Call :meth:`log_prob` with an array of shape ``(n_walkers, n_dim)``; it returns one
    log-posterior per walker (``-inf`` outside the prior's support).
    """

    def __init__(self, observations: Observations, spec: SystemSpec | None = None):
        self.observations = observations
        self.spec = spec if spec is not None else SystemSpec()
        astrometry = observations.astrometry
        if astrometry is None or len(astrometry) == 0:
            raise ModelError("no astrometry rows to fit; give at least one file of "
                             "east/north or sep/pa offsets")
        self.epoch_jd = float(np.mean(astrometry.time.tdb.jd))
        self.companions = self._companion_specs(observations)
        self.needs_parallax = bool(np.any(~astrometry.length & ~np.isfinite(astrometry.distance)))
        if self.needs_parallax and self.spec.parallax is None:
            raise ModelError(
                "angular offsets without a distance: give the parallax (with its "
                "error) or a fixed distance, add a 'distance' column, or give the "
                "offsets in a length unit (km, au)")
        self._rows = {name: self._prepare_rows(name) for name in self.companions}
        self.node_width = {name: np.pi for name in self.companions}
        self.centres = {name: {"node": 0.5 * np.pi, "phase": np.pi} for name in self.companions}
        self.parameters = self._layout()
        self.n_dim = len(self.parameters)
        self._index = {p.name: k for k, p in enumerate(self.parameters)}
        self._log_norm = self._gaussian_normalisation()

    # ----------------------------------------------------------------- set-up
    def _companion_specs(self, observations):
        names = list(dict.fromkeys(observations.astrometry.body.tolist()))
        specs = {}
        for name in names:
            if name in self.spec.companions:
                specs[name] = self.spec.companions[name]
            elif self.spec.strict_companions:
                raise ModelError(f"the data have a body '{name}' that the model does not "
                                 f"list; add it under [companions] or remove its rows")
            else:
                specs[name] = CompanionSpec(name)
        for name in self.spec.companions:
            if name not in specs:
                raise ModelError(f"companion '{name}' is in the model but has no rows in "
                                 f"the data")
        for name in specs:
            n_rows = int(np.sum(observations.astrometry.body == name))
            if 2 * n_rows < 7:
                raise ModelError(
                    f"companion '{name}' has {n_rows} astrometric epoch(s); an orbit "
                    f"and the central mass need at least 4 (7 numbers for 7 unknowns)")
        return specs

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
        )

    def reference_epoch(self, name) -> float:
        """Reference epoch of a companion's phase, days since :attr:`epoch_jd`."""
        return float(np.mean(self._rows[name].t))

    def _layout(self):
        spec = self.spec
        params = []
        if not spec.central_mass.is_fixed:
            params.append(_Parameter("central.log10_mass", r"$\log_{10} M/M_\odot$",
                                     spec.central_mass, "log10"))
        if self.needs_parallax and not spec.parallax.is_fixed:
            params.append(_Parameter("parallax", r"$\varpi$ [mas]", spec.parallax,
                                     "identity", 0.0, np.inf))
        for name, comp in self.companions.items():
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
        return params

    def _gaussian_normalisation(self) -> float:
        total = 0.0
        for rows in self._rows.values():
            total -= np.sum(np.log(TWO_PI * rows.east_err * rows.north_err / rows.corr_factor))
            total -= np.sum(np.log(TWO_PI * rows.sep_err * rows.pa_err))
        return float(total)

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
            ``semi_major_axis`` (au). Arrays of shape (n,).
        """
        theta = np.atleast_2d(theta)
        n = theta.shape[0]
        col = self._column(theta)
        spec = self.spec
        central = (np.full(n, spec.central_mass.value) if spec.central_mass.is_fixed
                   else 10.0 ** col("central.log10_mass"))
        parallax = None
        if self.needs_parallax:
            parallax = (np.full(n, spec.parallax.value) if spec.parallax.is_fixed
                        else col("parallax"))
        out = {"central_mass": central, "parallax": parallax, "companions": {}}
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
            if comp.inclination is not None and comp.inclination.is_fixed:
                inc = np.full(n, comp.inclination.value)
            else:
                inc = np.arccos(np.clip(col(f"{name}.cos_inc"), -1.0, 1.0))
            mass = self._companion_mass(comp, col, name, n)
            gm = GM_SUN * (central + mass)
            with np.errstate(invalid="ignore"):
                a = np.cbrt(gm * period ** 2 / (4.0 * np.pi ** 2))
            out["companions"][name] = {
                "period": period, "ecc": ecc, "omega": omega, "inc": inc,
                "node": col(f"{name}.node"),
                "mean_anomaly_ref": col(f"{name}.phase") - omega,
                "mass": mass, "semi_major_axis": a,
            }
        return out

    def _companion_mass(self, comp, col, name, n):
        if comp.mass.is_fixed:
            return np.full(n, comp.mass.value)
        if isinstance(comp.mass, LogUniform):
            return 10.0 ** col(f"{name}.log10_mass")
        return col(f"{name}.mass")

    def _column(self, theta):
        def col(name):
            return theta[:, self._index[name]]
        return col

    # ----------------------------------------------------------------- priors
    def log_prior(self, theta):
        """Log prior density of the sampled coordinates, shape (n,)."""
        theta = np.atleast_2d(theta)
        lp = np.zeros(theta.shape[0])
        for k, param in enumerate(self.parameters):
            u = theta[:, k]
            with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
                lp += self._log_prior_one(param, u, theta)
        return np.where(np.isnan(lp), -np.inf, lp)

    def _log_prior_one(self, param, u, theta):
        inside = (u >= param.low) & (u <= param.high)
        if param.transform == "log10":
            x = 10.0 ** u
            value = param.prior.log_pdf(x) + np.log(x * LN10)
        elif param.transform == "identity":
            value = param.prior.log_pdf(u)
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
            k = theta[:, self._index[param.name.replace("cos_w", "sin_w")]]
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
        """Whitened residuals, shape (n, n_residuals): their squares sum to chi^2."""
        theta = np.atleast_2d(theta)
        phys = self.physical(theta, lenient=lenient)
        parts = []
        for name, rows in self._rows.items():
            parts.append(self._astrometry_residuals(rows, phys["companions"][name],
                                                    phys["parallax"], name))
        return np.concatenate(parts, axis=1)

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
            of ``model._rows[name].index``.
        """
        phys = self.physical(np.atleast_2d(theta))
        return self._offsets(self._rows[name], phys["companions"][name],
                             phys["parallax"], name)

    def _offsets(self, rows, orbit, parallax, name):
        t_ref = self.reference_epoch(name)
        with np.errstate(invalid="ignore", divide="ignore"):
            # The fused kernel: Kepler's equation and the projection in one pass.
            east, north = kepler.sky_offsets(
                rows.t, orbit["period"], orbit["ecc"], orbit["mean_anomaly_ref"],
                orbit["semi_major_axis"], orbit["inc"], orbit["omega"], orbit["node"],
                t_ref=t_ref)
        scale = np.broadcast_to(rows.scale, east.shape)
        if parallax is not None and np.any(rows.uses_parallax):
            scale = scale * np.where(rows.uses_parallax, parallax[:, None] * 1e-3, 1.0)
        return east * scale, north * scale

    def _astrometry_residuals(self, rows, orbit, parallax, name):
        east, north = self._offsets(rows, orbit, parallax, name)
        c, p = rows.cart, rows.polar
        r_east = (rows.east - east[:, c]) / rows.east_err
        r_north = ((rows.north - north[:, c]) / rows.north_err
                   - rows.corr * r_east) * rows.corr_factor
        sep = np.hypot(east[:, p], north[:, p])
        pa = np.arctan2(east[:, p], north[:, p])
        r_sep = (rows.sep - sep) / rows.sep_err
        r_pa = _wrap(rows.pa - pa) / rows.pa_err
        return np.concatenate([r_east, r_north, r_sep, r_pa], axis=1)

    def log_likelihood(self, theta):
        """Gaussian log-likelihood, normalisation included, shape (n,)."""
        res = self.residuals(theta)
        chi2 = np.sum(res * res, axis=1)
        return np.where(np.isfinite(chi2), -0.5 * chi2 + self._log_norm, -np.inf)

    def log_prob(self, theta):
        """Log-posterior (up to a constant) for each row of ``theta``; emcee's target."""
        theta = np.atleast_2d(theta)
        lp = self.log_prior(theta)
        good = np.flatnonzero(np.isfinite(lp))
        if good.size:
            n_rows = len(self.observations.astrometry)
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
        ``mean_anomaly_ref`` and optional ``mass``. Angles are wrapped into the current
        windows.
        """
        values = dict(values)
        for name in self.companions:
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
        if name == "central.log10_mass":
            return np.log10(values["central_mass"])
        if name == "parallax":
            return values["parallax"]
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
        for name in self.companions:
            for kind in ("node", "phase"):
                k = self._index[f"{name}.{kind}"]
                self.centres[name][kind] = float(theta[k])
        return theta


def _wrap(angle):
    """Angle folded into [-pi, pi)."""
    return np.mod(angle + np.pi, TWO_PI) - np.pi

"""One perturbed model: the primary's zonal harmonics and the companions' mutual pulls.

The sampled elements of each companion are its **astrocentric osculating elements**
(position and velocity relative to the primary, with GM = G (M1 + m_k) in Kepler's
third law, as in the two-body model) at the model's epoch, the mean time of all the
astrometry. Each companion's phase is sampled at its own mid-data epoch and carried to
the common epoch with its osculating mean motion. From there the astrocentric
equations of motion are integrated numerically (DOP853, :mod:`massfit.orbits.nbody`) forward
and backward to the observation times, with any set of these forces:

* **zonal harmonics J2 and J4** of the primary, at its equatorial radius R, about its
  pole: the gradient of the axisymmetric potential
  V = -GM/r [1 - J2 (R/r)^2 P2(sin phi) - J4 (R/r)^4 P4(sin phi)], written in terms of
  the pole vector so that no frame rotation is needed
  (:func:`massfit.orbits.nbody.zonal_field`);
* **mutual pulls** between the companions, with the indirect term of the primary's own
  acceleration (which also carries the harmonics: the companions pull on the oblate
  primary as it pulls on them).

Relativity is not modelled yet: it would be one more term of the primary's own field,
in :func:`massfit.orbits.nbody.zonal_field` and its compiled twin, with its switch in
:data:`FORCES`.

Which pole
----------
With ``equator_inclination`` and ``equator_node`` (in the model's frame, in the
convention of an orbit's i and Omega: an orbit with these elements lies in the
equator), the pole is fixed. Without them, where the data have a moving line of sight
(ICRS axes) and the viewing settings give the primary's pole (``pole_ra``,
``pole_dec``), that pole is used; where both are given they must agree
(:meth:`massfit.model.orbit_model.OrbitModel.primary_pole`). Otherwise the pole is the mean of the companions'
orbit normals, walker by walker (regular moons lie near their planet's equator).

Versus :class:`massfit.orbits.oblate.Oblate`
-----------------------------------------
The secular J2 model costs about twice a two-body evaluation and needs no integration;
it is first order in J2 and has no short-period terms, no J4 and no pulls. This model
has all of them, at the cost of an integration per walker and call.

The start (:func:`massfit.start.search.find_start`) fits the two-body model first, maps its
solution here (:meth:`Perturbed.from_two_body`), and polishes it in stages of growing
time span about the epoch, each least-squares pass bounded by ``start_evaluations``.
"""

from __future__ import annotations

import copy
import itertools
from dataclasses import replace

import numpy as np

from massfit.constants import AU_KM, GM_SUN
from massfit.orbits.dynamics import Keplerian, orbit_state
from massfit.errors import ConfigError
from massfit.orbits.oblate import primary_figure
from massfit.priors import Fixed, LogUniform

__all__ = ["Perturbed", "FORCES", "DEFAULT_MASS_PRIOR", "SURROGATES"]

TWO_PI = 2.0 * np.pi
#: The forces the model can switch on, as named in ``describe()``.
FORCES = ("zonal harmonics", "mutual pulls")
#: What ``surrogate`` accepts: sample the integrated model itself, or the linearised
#: surrogate checked against it (:mod:`massfit.model.surrogate`).
SURROGATES = ("none", "linearised")
#: Prior for companion masses the user left unstated (nominal solar masses).
DEFAULT_MASS_PRIOR = LogUniform(1e-12, 10.0)


class Perturbed(Keplerian):
    """Companions integrated in the primary's zonal field and each other's pulls.

    Parameters
    ----------
    j2, j4 : float
        The primary's zonal harmonics (0 switches each off).
    equatorial_radius : str or Quantity, optional
        Their reference radius (needed where J2 or J4 is not zero).
    equator_inclination, equator_node : str or Quantity, optional
        The primary's equator (both or neither; see the module notes).
    mutual_pulls : bool
        Whether the companions pull on each other (and their masses become parameters).
    rtol : float
        Relative tolerance of the integrator, from 1e-14 to 1e-6.
    steps_per_orbit : int, optional
        Fixed steps instead of adaptive ones: DOP853's eighth-order solution with this
        many steps per orbit of the fastest companion (counted at its periapsis rate;
        from 8 to 1000; ``rtol`` then unused). The grid does not move with the
        parameters, so the model is a smooth function of them. See
        ``benchmarks/RESULTS.md`` for what a number of steps costs in accuracy.
    start_evaluations : int
        Cap on the residual evaluations of each least-squares pass of the start (at
        least 20); a start that reaches it says so in the summary's warnings.
    mass_prior : Prior, optional
        Prior for the masses of companions whose mass is left unstated (with mutual
        pulls); :data:`DEFAULT_MASS_PRIOR` by default.
    surrogate : {"linearised", "none"}
        How a fit samples the posterior: through the linearised surrogate (the
        compiled two-body kernel plus this model's departure from it, to second order
        in the parameters about the start), checked against the integrator at draws
        of the chain (:mod:`massfit.linearised_fit`; the default, where the model
        takes it: otherwise the fit samples the integrator and says why), or with the
        integrator at every step ("none").
    compiled : bool, optional
        Which integrator (None: the compiled one where numba is installed); for checks
        and benchmarks, not a config setting.
    """

    label = "perturbed"
    #: Companion masses tried at the start, as shares of the system's mass (lightest
    #: first: weak pulls keep the two-body solution near the perturbed one).
    START_SHARES = (1e-4, 1e-3, 1e-2)

    def __init__(self, *, j2=0.0, j4=0.0, equatorial_radius=None, equator_inclination=None,
                 equator_node=None, mutual_pulls=True, rtol=1e-12, steps_per_orbit=None,
                 start_evaluations=300, mass_prior=None, compiled=None,
                 surrogate="linearised"):
        if surrogate not in SURROGATES:
            raise ConfigError(f"surrogate must be one of {', '.join(SURROGATES)}, got "
                              f"{surrogate!r}", key="dynamics.surrogate")
        if isinstance(rtol, bool) or not isinstance(rtol, (int, float)) \
                or not 1e-14 <= rtol <= 1e-6:
            raise ConfigError(f"the integrator's relative tolerance must be a number "
                              f"from 1e-14 to 1e-6, got {rtol!r}", key="dynamics.rtol")
        if steps_per_orbit is not None and (
                isinstance(steps_per_orbit, bool) or not isinstance(steps_per_orbit, int)
                or not 8 <= steps_per_orbit <= 1000):
            raise ConfigError(f"steps_per_orbit must be a whole number from 8 to 1000, got "
                              f"{steps_per_orbit!r}", key="dynamics.steps_per_orbit")
        if not isinstance(mutual_pulls, bool):
            raise ConfigError(f"mutual_pulls must be true or false, got {mutual_pulls!r}",
                              key="dynamics.mutual_pulls")
        if isinstance(start_evaluations, bool) or not isinstance(start_evaluations, int) \
                or start_evaluations < 20:
            raise ConfigError(f"start_evaluations must be a whole number of at least 20, "
                              f"got {start_evaluations!r}", key="dynamics.start_evaluations")
        figure = primary_figure(j2, j4, equatorial_radius, equator_inclination, equator_node)
        if not (figure["j2"] or figure["j4"] or mutual_pulls):
            raise ConfigError("the perturbed model needs at least one force: J2 or J4 with "
                              "the equatorial radius, or mutual_pulls = true",
                              key="dynamics.mutual_pulls")
        self.figure = figure
        self.mutual_pulls = mutual_pulls
        self.rtol = float(rtol)
        self.steps_per_orbit = steps_per_orbit
        self.start_evaluations = start_evaluations
        self.mass_prior = mass_prior if mass_prior is not None else DEFAULT_MASS_PRIOR
        self.compiled = compiled
        self.surrogate = surrogate
        #: Absolute JD of the osculating elements (None: the model's epoch); the staged
        #: start sets it so that models of part of the data share the full one's epoch.
        self.epoch_jd = None
        self.settings = {k: v for k, v in dict(
            j2=j2, j4=j4, equatorial_radius=equatorial_radius,
            equator_inclination=equator_inclination, equator_node=equator_node,
            mutual_pulls=mutual_pulls, rtol=rtol, steps_per_orbit=steps_per_orbit,
            start_evaluations=start_evaluations, surrogate=surrogate).items()
            if v is not None}

    def _steps(self) -> dict:
        """The integrator's setting and the sampling's, for ``describe()``."""
        if self.steps_per_orbit is None:
            out = {"integrator": "DOP853, adaptive steps", "rtol": self.rtol}
        else:
            out = {"integrator": "DOP853's 8th-order solution, fixed steps",
                   "steps_per_orbit": self.steps_per_orbit}
        return dict(out, surrogate=self.surrogate)

    @property
    def has_harmonics(self) -> bool:
        return bool(self.figure["j2"] or self.figure["j4"])

    def stated_pole(self):
        return self.figure["pole"]

    def at_epoch(self, epoch_jd):
        """A copy whose osculating elements refer to the absolute epoch ``epoch_jd``."""
        out = copy.copy(self)
        out.epoch_jd = float(epoch_jd)
        return out

    def describe(self) -> dict:
        out = {"model": self.label, **self._steps(),
               "forces": [f for f, on in zip(FORCES, (self.has_harmonics, self.mutual_pulls))
                          if on],
               "coordinates": "astrocentric osculating elements at the model epoch"}
        if self.has_harmonics:
            out.update(j2=self.figure["j2"], j4=self.figure["j4"],
                       equatorial_radius_km=self.figure["radius_km"])
            if self.figure["pole"] is None:
                out["pole"] = ("the viewing pole (pole_ra, pole_dec) where given with a "
                               "line of sight, else the mean of the orbit normals")
            else:
                out["equator_inclination_deg"], out["equator_node_deg"] = \
                    self.figure["pole_deg"]
        return out

    def prepare(self, model) -> None:
        """With mutual pulls, give companions with an unstated (zero, fixed) mass the
        mass prior."""
        if not self.mutual_pulls:
            return
        for name, comp in model.companions.items():
            if isinstance(comp.mass, Fixed) and comp.mass.value == 0.0:
                model.companions[name] = replace(comp, mass=self.mass_prior)

    def node_widths(self, model, widths) -> dict:
        """The full circle for the nodes the sky's mirror image does not leave alone.

        On the sky alone, (omega, node) and (omega + pi, node + pi) look the same: the
        orbit mirrored through the sky plane. Mirroring *every* orbit leaves the
        mutual pulls as they were (and a pole taken from the orbits turns with them),
        so the first companion keeps its half window; mirroring one orbit and not
        another changes the mutual inclination. A pole that is given is not
        mirrored, so then every node needs the full circle.
        """
        fixed_pole = self.has_harmonics and self._given_pole(model) is not None
        return {name: widths[name] if (k == 0 and not fixed_pole) else TWO_PI
                for k, name in enumerate(widths)}

    # ------------------------------------------------------------------ the start
    def from_two_body(self, model, values) -> list:
        """Starting values from a two-body solution: same states, new mass, candidates.

        A two-body fit follows each companion's mean path: its position and velocity
        at the epoch are close to the perturbed orbit's (for a near-circular orbit in
        a J2 field the speed n r that fits the observed mean motion is the circular
        speed of that field). They are kept, and turned into osculating elements with
        the central mass the perturbed model needs: where there are harmonics, the GM
        a J2 primary needs for each orbit's size and mean motion (first-order secular
        theory, :func:`massfit.orbits.oblate.oblate_gm`), weighted by rows. With mutual
        pulls, companions whose mass is sampled are put at 1e-4, 1e-3 and 1e-2 of the
        system's mass, each after the first as fitted or (on a fixed sky plane)
        mirrored through it (:meth:`node_widths`).
        """
        names = list(model.companions)
        central = self._start_central_mass(model, values)
        shares = self.START_SHARES if self.mutual_pulls else (None,)
        # The mirror image through the sky plane is (omega, node) + pi only where the
        # frame's z is the line of sight; with a moving line of sight (ICRS axes) the
        # two-body start has already chosen each orbit's image on the turning sky.
        mirror = self.mutual_pulls and model.sight is None
        flips_all = (list(itertools.product((False, True), repeat=len(names) - 1))
                     if mirror else [(False,) * (len(names) - 1)])
        out = []
        for share in shares:
            for flips in flips_all:
                candidate = {key: value for key, value in values.items()
                             if key not in names}
                masses = {name: self._start_mass(model, name, share, central)
                          for name in names}
                candidate["central_mass"] = central - float(np.mean(list(masses.values())))
                for name, flip in zip(names, (False,) + tuple(flips)):
                    candidate[name] = self._osculating(model, values, name, flip,
                                                       candidate["central_mass"],
                                                       masses[name])
                out.append(candidate)
        return out

    def _start_central_mass(self, model, values):
        """M1 + m (nominal solar masses) for the start: the two-body value, or the one
        a J2 primary needs for each orbit's size and mean motion, weighted by rows."""
        names = list(model.companions)
        if not self.figure["j2"]:
            return float(np.mean([values["central_mass"] + values[n].get("mass", 0.0)
                                  for n in names]))
        from massfit.orbits.oblate import oblate_gm

        pole = self._pole(model, {n: {k: np.atleast_1d(v) for k, v in values[n].items()}
                                  for n in names})
        logs, weights = [], []
        for name in names:
            orbit = values[name]
            normal = _normal(orbit["inc"], orbit["node"])
            cos_i = float(np.clip(np.dot(normal, pole[0]), -1.0, 1.0))
            gm = oblate_gm(orbit["semi_major_axis"], orbit["period"], orbit["ecc"],
                           np.arccos(cos_i), self.figure["j2"],
                           self.figure["radius_km"] / AU_KM)
            logs.append(np.log(gm / GM_SUN))
            weights.append(len(model.rows[name].t))
        return float(np.exp(np.average(logs, weights=weights)))

    def _start_mass(self, model, name, share, total):
        prior = model.companions[name].mass
        if prior.is_fixed:
            return prior.value
        return float(np.clip(share * total, prior.low * 1.001, prior.high * 0.999))

    def _osculating(self, model, values, name, flip, central, mass):
        """The two-body orbit's state at the epoch, as osculating elements under the
        new masses (mirrored through the sky plane when ``flip``)."""
        from massfit.orbits.dynamics import elements_of_state

        orbit = values[name]
        t0 = self._epoch_shift(model)
        n_motion = TWO_PI / orbit["period"]
        mean = orbit["mean_anomaly_ref"] + n_motion * (t0 - model.reference_epoch(name))
        omega, node = orbit["omega"], orbit["node"]
        if flip:
            omega, node = omega + np.pi, node + np.pi
        position, velocity = orbit_state(orbit["semi_major_axis"], orbit["ecc"],
                                         orbit["inc"], omega, node, mean, n_motion)
        gm = np.array([GM_SUN * (central + mass)])
        (period, ecc, cos_i, node, omega, mean0), _ = elements_of_state(
            np.array([position]), np.array([velocity]), gm)
        period = float(period[0])
        return dict(orbit, period=period, ecc=float(ecc[0]), inc=float(np.arccos(cos_i[0])),
                    node=float(node[0]), omega=float(omega[0]), mass=mass,
                    mean_anomaly_ref=float(mean0[0] + TWO_PI / period * (
                        model.reference_epoch(name) - t0)))

    # --------------------------------------------------------------- the orbits
    def _epoch_shift(self, model):
        """Days from the model's epoch to the epoch of the osculating elements."""
        return 0.0 if self.epoch_jd is None else self.epoch_jd - model.epoch_jd

    def _given_pole(self, model):
        """The pole (3,) as given: the dynamics' own equator, else the viewing pole
        where the model has a moving line of sight (ICRS axes), else None."""
        if self.figure["pole"] is not None:
            return self.figure["pole"]
        viewing = model.primary_pole()
        if viewing is None:
            return None
        from massfit.orbits.viewing import sky_basis

        return sky_basis(*viewing)[0][0]

    def _pole(self, model, orbits):
        """The pole per walker, (n, 3): given, or the mean of the orbit normals."""
        given = self._given_pole(model)
        if given is not None:
            size = len(next(iter(orbits.values()))["inc"])
            return np.broadcast_to(given, (size, 3))
        total = sum(np.column_stack(_normal(o["inc"], o["node"])) for o in orbits.values())
        norm = np.linalg.norm(total, axis=1, keepdims=True)
        with np.errstate(invalid="ignore", divide="ignore"):
            return total / norm

    def _field(self, model, orbits, size):
        radius_au = (self.figure["radius_km"] or 0.0) / AU_KM
        field = np.empty((size, 6))
        field[:, 0] = self.figure["j2"] * radius_au ** 2
        field[:, 1] = self.figure["j4"] * radius_au ** 4
        field[:, 2:5] = self._pole(model, orbits) if self.has_harmonics else (0, 0, 1)
        field[:, 5] = 1.0 if self.mutual_pulls else 0.0
        return field

    def _integrate(self, model, phys, t):
        """Every companion integrated to the times ``t`` (days since the model's
        epoch): (the distinct times, ascending; positions and velocities, each
        (n, K, T, 3) in the order of ``model.rows``)."""
        from massfit.orbits.nbody import integrate_system

        names = list(model.rows)
        orbits = {name: phys["companions"][name] for name in names}
        masses = np.column_stack([orbits[name]["mass"] for name in names])
        t0 = self._epoch_shift(model)
        pos0 = np.empty(masses.shape + (3,))
        vel0 = np.empty_like(pos0)
        for k, name in enumerate(names):
            orbit = orbits[name]
            n_motion = TWO_PI / orbit["period"]
            # Osculating mean anomaly at the epoch of the elements.
            mean0 = orbit["mean_anomaly_ref"] - n_motion * (model.reference_epoch(name) - t0)
            with np.errstate(invalid="ignore"):
                position, velocity = orbit_state(orbit["semi_major_axis"], orbit["ecc"],
                                                 orbit["inc"], orbit["omega"],
                                                 orbit["node"], mean0, n_motion)
            pos0[:, k] = np.column_stack(position)
            vel0[:, k] = np.column_stack(velocity)
        field = self._field(model, orbits, masses.shape[0])
        times = np.unique(np.asarray(t, dtype=float))
        positions = np.full(masses.shape + (times.size, 3), np.nan)
        velocities = np.full_like(positions, np.nan)
        good = np.flatnonzero(np.all(np.isfinite(pos0) & np.isfinite(vel0), axis=(1, 2))
                              & np.all(np.isfinite(field), axis=1))
        if good.size:
            positions[good], velocities[good] = integrate_system(
                times - t0, phys["central_mass"][good], masses[good], pos0[good],
                vel0[good], rtol=self.rtol, compiled=self.compiled, field=field[good],
                steps_per_orbit=self.steps_per_orbit)
        return times, positions, velocities

    def states(self, model, phys, *, want_velocity=False) -> dict:
        names = list(model.rows)
        times, positions, velocities = self._integrate(
            model, phys, np.concatenate([model.rows[name].t for name in names]))
        # Kept for states_at: an offset measured from another companion needs that
        # companion at the same rows' times, which this integration already holds.
        self._last = (phys, times, positions, velocities)
        return {name: _picked(times, positions, velocities, k, model.rows[name].t,
                              want_velocity)
                for k, name in enumerate(names)}

    def states_at(self, model, phys, name, t):
        """Position and velocity of one companion at the times ``t`` (days since the
        model's epoch): read off the integration :meth:`states` made for the same
        ``phys`` where it holds those times (offsets measured from another companion),
        else integrated anew."""
        k = list(model.rows).index(name)
        last = getattr(self, "_last", None)
        t = np.asarray(t, dtype=float)
        if last is not None and last[0] is phys and np.all(np.isin(t, last[1])):
            return _picked(*last[1:], k, t, True)
        return _picked(*self._integrate(model, phys, t), k, t, True)


def _picked(times, positions, velocities, k, t, want_velocity):
    """Companion ``k``'s ((x, y, z), (vx, vy, vz) or None) at the times ``t``, each
    of them one of ``times`` (ascending)."""
    index = np.searchsorted(times, t)
    pos = positions[:, k][:, index]
    vel = velocities[:, k][:, index]
    return ((pos[..., 0], pos[..., 1], pos[..., 2]),
            (vel[..., 0], vel[..., 1], vel[..., 2]) if want_velocity else None)


def _normal(inc, node):
    """The orbit normal as (north, east, z) components (:func:`dynamics.orbit_state`)."""
    return np.array([np.sin(node) * np.sin(inc), -np.cos(node) * np.sin(inc), np.cos(inc)])


#: The invented planet *Corrabel* and three moons (two near a 2:1 period ratio): GM
#: (km^3/s^2), equatorial radius (km), J2, J4, the equator on the sky (deg), and each
#: moon's share of the planet's mass, semi-major axis (planet radii), eccentricity,
#: inclination to the equator, periapsis, node on the equator and mean anomaly at the
#: epoch (deg): astrocentric osculating elements referred to the equator.
MOONS_TRUTH = {"gm_km3_s2": 8.3e7, "radius_km": 58300.0, "j2": 0.0138, "j4": -5.2e-4,
               "equator_inclination_deg": 72.0, "equator_node_deg": 140.0,
               "moons": {"Tarn": dict(share=3.1e-5, a=4.3, ecc=0.004, inc=0.3, omega=20.0,
                                      node=60.0, mean=10.0),
                         "Ossel": dict(share=2.2e-5, a=6.86, ecc=0.009, inc=0.5, omega=200.0,
                                       node=250.0, mean=300.0),
                         "Wend": dict(share=5.5e-5, a=12.1, ecc=0.002, inc=0.2, omega=90.0,
                                      node=10.0, mean=150.0)}}


def moons_initial_state(truth=None):
    """The moons' astrocentric state at the epoch in the sky frame (north, east, z):
    (central mass and masses in nominal solar masses, positions au, velocities au/day,
    the field array of :func:`massfit.orbits.nbody.integrate_system`)."""
    truth = MOONS_TRUTH if truth is None else truth
    central = truth["gm_km3_s2"] * 86400.0 ** 2 / AU_KM ** 3 / GM_SUN
    radius = truth["radius_km"] / AU_KM
    inc_eq, node_eq = np.radians(truth["equator_inclination_deg"]), np.radians(
        truth["equator_node_deg"])
    # Equator frame -> sky frame: the unit vectors along the equator's ascending node,
    # a quarter-turn ahead of it in the equator (as dynamics.orbit_state's P and Q at
    # omega = 0), and the pole.
    x_eq = np.array([np.cos(node_eq), np.sin(node_eq), 0.0])
    y_eq = np.array([-np.sin(node_eq) * np.cos(inc_eq), np.cos(node_eq) * np.cos(inc_eq),
                     np.sin(inc_eq)])
    pole = _normal(inc_eq, node_eq)
    rotation = np.column_stack([x_eq, y_eq, pole])
    masses, pos, vel = [], [], []
    for el in truth["moons"].values():
        mass = el["share"] * central
        a = el["a"] * radius
        n_motion = np.sqrt(GM_SUN * (central + mass) / a ** 3)
        p, v = orbit_state(a, el["ecc"], *np.radians([el["inc"], el["omega"], el["node"],
                                                       el["mean"]]), n_motion)
        masses.append(mass)
        pos.append(rotation @ np.array(p))
        vel.append(rotation @ np.array(v))
    field = np.array([truth["j2"] * radius ** 2, truth["j4"] * radius ** 4, *pole, 1.0])
    return central, np.array(masses), np.array(pos), np.array(vel), field


def simulate_perturbed_moons(path, *, seed=5, n_obs=60, span=360.0, err_km=150.0):
    """Write astrometry of the invented moons of :data:`MOONS_TRUTH` (offsets in km
    from the planet, east and north) as an ECSV table.

    The orbits are integrated with J2, J4 and the mutual pulls by
    :func:`massfit.orbits.nbody.integrate_system` at rtol 1e-13 (its agreement with REBOUND
    and REBOUNDx is in ``tests/test_perturbed.py``).

    Parameters
    ----------
    path : path
        The ECSV file to write.
    seed : int
        Seed of the observing times and the noise.
    n_obs : int
        Epochs per moon, uniform over ``span`` days about the epoch.
    span : float
        Days.
    err_km : float
        1-sigma error of east and north, km.

    Returns
    -------
    path
    """
    from massfit.orbits.nbody import integrate_system, write_offsets

    rng = np.random.default_rng(seed)
    central, masses, pos0, vel0, field = moons_initial_state()
    names = list(MOONS_TRUTH["moons"])
    times = [np.sort(rng.uniform(-span / 2, span / 2, n_obs)) for _ in names]
    # The elements' epoch is the mid-time of all rows, as the model's is.
    shift = np.mean(np.concatenate(times))
    times = [t - shift for t in times]
    all_t, where = np.unique(np.concatenate(times), return_inverse=True)
    positions, _ = integrate_system(all_t, np.array([central]), masses[None], pos0[None],
                                    vel0[None], rtol=1e-13, field=field[None])
    east, north, start = [], [], 0
    for k, t in enumerate(times):
        km = positions[0, k, where[start:start + t.size]] * AU_KM
        start += t.size
        north.append(km[:, 0] + err_km * rng.standard_normal(t.size))
        east.append(km[:, 1] + err_km * rng.standard_normal(t.size))
    return write_offsets(path, 2462400.0, names, times, east, north, err_km, "km",
                         "Invented moons of an invented oblate planet with J2, J4 and "
                         "mutual pulls (massfit validation)")


class NBody(Perturbed):
    """Companions that perturb each other (and the primary), integrated directly: the
    perturbed model with mutual pulls only (``[dynamics] model = "n-body"``).

    Parameters
    ----------
    rtol : float
        Relative tolerance of the integrator (DOP853), from 1e-14 to 1e-6.
    steps_per_orbit : int, optional
        Fixed steps instead (see :class:`Perturbed`).
    mass_prior : Prior, optional
        Prior for the masses of companions whose mass is left unstated;
        :data:`DEFAULT_MASS_PRIOR` by default. A companion with a stated mass or mass
        prior keeps it.
    compiled : bool, optional
        Which integrator :func:`integrate_system` uses (None: the compiled one where
        numba is installed); for checks and benchmarks, not a config setting.
    start_evaluations : int
        Cap on each least-squares pass of the start (see :class:`Perturbed`).

    Notes
    -----
    Each log-posterior call integrates every walker over the whole time span: the cost
    grows with the number of orbits of the fastest companion in the data span (the
    step follows it) and with the number of walkers.
    """

    label = "n-body"

    def __init__(self, rtol=1e-12, mass_prior=None, compiled=None, start_evaluations=300,
                 steps_per_orbit=None, surrogate="linearised"):
        super().__init__(mutual_pulls=True, rtol=rtol, mass_prior=mass_prior,
                         compiled=compiled, start_evaluations=start_evaluations,
                         steps_per_orbit=steps_per_orbit, surrogate=surrogate)
        self.settings = {k: v for k, v in dict(
            rtol=rtol, steps_per_orbit=steps_per_orbit,
            start_evaluations=start_evaluations, surrogate=surrogate).items()
            if v is not None}

    def describe(self) -> dict:
        return {"model": self.label, **self._steps(),
                "coordinates": "astrocentric osculating elements at the model epoch"}


#: The invented interacting pair *Tessaly*: a 1.0 M_sun star with two companions of
#: 0.003 and 0.006 M_sun (about 3 and 6 Jupiter masses) near a 5:2 period ratio
#: (astrocentric osculating elements at the data's mid-time; angles in degrees, mean
#: anomaly in radians).

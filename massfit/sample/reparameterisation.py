"""The coordinates the sampler moves in, where they differ from the model's.

Two changes, chosen per companion from the start (:meth:`SamplerCoordinates.for_start`):
a companion seen over a short arc is sampled as its position and velocity at its
reference epoch, and any other companion keeps its elements with the periapsis and
the phase measured from a fixed direction on the sky rather than from the node. A
third, for the whole system: with the parallax sampled, the mass and the state
vectors are sampled in angular units.

State vectors for short arcs
----------------------------

Where the data cover only part of an orbit, the orbital elements are a poor set of
coordinates to sample: what such an arc measures is where the companion is, how fast it
moves and how its path bends, and in elements that is a long curved ridge through
period, eccentricity, periapsis and phase. The relative position and velocity at the
companion's reference epoch (the middle of its data) are what the arc measures almost
directly; the rest of the posterior then lies along the line of sight.

:class:`SamplerCoordinates` changes the sampled coordinates of chosen companions from
the model's elements (``log10_period``, ``sqrt_e_cos_w``, ``sqrt_e_sin_w``, ``cos_inc``,
``node``, ``phase``) to its relative state at the reference epoch: ``north``, ``east``
(au), ``v_north``, ``v_east`` (au/day) and the line-of-sight pair ``depth_1``,
``depth_2`` (below); every other coordinate is kept. The map is a fixed bijection computed with the
two-body formulas and the companion's GM = G (M1 + m2) (so it is exact whatever the
model's dynamics), and the log-posterior gets the log of its Jacobian determinant:

    |d(r, v) / d(a, e, cos i, M, omega, node)| = mu^(3/2) a^(1/2) e / 2

(Delaunay's variables are canonical, so (r, v) -> (L, G, H, l, g, h) keeps volume;
L = sqrt(mu a), G = L sqrt(1 - e^2), H = G cos i), and the elements' own map to the
model's coordinates contributes 3 / (4 a ln 10). The prior stays what it is on the
elements: only the coordinates the sampler moves in change.

The line-of-sight pair is sampled as ``depth_1 + i depth_2 = (z + i T v_z) exp(-i phi)``
(au), with T = |r| / |v| at the start so that both parts spread alike, and phi the
angle of the start's own z + i T v_z; the Jacobian of that is the constant 1 / T.
Where astrometry alone constrains a companion, (omega + pi, node + pi) is the same orbit
on the sky; in state coordinates that is (z, v_z) -> (-z, -v_z), and only
``depth_1 >= 0`` is sampled. That wall is a line through (0, 0) square to the start's
own line of sight pair, as far from it as such a line can be: a wall at z = 0 instead
cut through the posterior of arcs that leave z near zero but v_z of either sign
(the largest autocorrelation time 555 steps, against 67 with this wall, on one such
calibration system), and a plane with the mirror pair's angle doubled (no wall at
all) bent the straight ridges that short arcs leave along z into curves (286 steps
against 37 on another).

Angular units where the parallax is sampled
-------------------------------------------
Where every offset is an angle and the parallax is sampled, astrometry measures the
angular semi-major axes, so it fixes M plx^3 (a_angle^3 = G M P^2 plx^3 / 4 pi^2), not
M: in (log10 M, plx) the posterior is a narrow ridge along which M and plx trade, and
each state vector in au slides along it too. The sampler then moves in
``central.log10_angular_mass`` = log10 M + 3 log10 plx (M in M_sun, plx in mas) and
in state vectors in mas and mas/day, which the data fix directly, while plx is left
to its prior; the map back is r = r_angle / plx, v = v_angle / plx, log10 M = u -
3 log10 plx, with log-Jacobian -6 ln plx per state vector (the mass's part is 1).
On the four-companion Tarrant set of benchmarks/ the largest autocorrelation time fell
from 287 to 92 steps and that of the mass from 286 to 84. Not with radial velocities
(they measure M itself) or rows whose offsets are lengths. The effective samples of
the mass are then counted with the mass's own autocorrelation time, measured on the
whole chain in log10 M (``mass_key``; ``mass_autocorr_steps`` in the summary).

Sky-fixed angles for the other companions
-----------------------------------------
For an orbit seen nearly face-on, only omega + node (prograde) or omega - node
(retrograde) is measured, and with the model's coordinates that ridge winds round the
sqrt(e) disc as the node changes. Rotating the eccentricity vector by s node
(s = the sign of cos i) and adding s node to the phase makes the ridge straight; where
the node is measured the rotation is nearly a fixed shift. Its Jacobian is 1. The
sampled coordinates are then ``sqrt_e_cos_lon_peri`` and ``sqrt_e_sin_lon_peri``
(sqrt(e) times the cosine and sine of the longitude of periapsis omega + s node) and
``mean_longitude`` (the phase plus s node), in a window of width 2 pi.

Companions' masses where they pull on each other
------------------------------------------------
Where the companions pull on each other (integrated dynamics with mutual pulls), the
data measure each companion's mass through its pulls, which are linear in the mass: the
posterior is close to a Gaussian in the mass and, where the mass is known to tens of
per cent, bent in its logarithm, because the other coordinates that make up for a change
of the mass (a neighbour's period and eccentricity) follow the mass, not its log. The
sampler then moves in ``{body}.mass`` (M_sun) instead of ``{body}.log10_mass``; the
log-Jacobian is -ln(m ln 10) and the prior stays the model's. Measured on four moons
with J2 and mutual pulls (their inner one's mass known to 13 %): in log10 mass the
posterior's mean lay 380 in ln p below the typical draw and its profile along the
sample covariance's axes left the Gaussian's by up to 5000 in ln p (the sampler's
acceptance was 0.04); in the mass itself the mean is the mode (0.25 from the Gaussian's
value) and the profiles are within 0.8 of the Gaussian's at 1 and 2 sd.
"""

from __future__ import annotations

import numpy as np

from massfit.constants import GM_SUN
from massfit.orbits.dynamics import orbit_state
from massfit.orbits.dynamics import elements_of_state

__all__ = ["SamplerCoordinates", "ARC_FRACTION", "ANGULAR_MASS", "elements_of_state"]


#: The sampled coordinate that replaces ``central.log10_mass`` where the parallax is
#: sampled too: log10 of M (M_sun) times the parallax (mas) cubed.
ANGULAR_MASS = "central.log10_angular_mass"
TWO_PI = 2.0 * np.pi
LN10 = np.log(10.0)
#: A companion whose data span less than this fraction of its best-fit period is
#: sampled in state coordinates. Measured (validation/state_coordinates.py): state
#: vectors mix as well or better up to about one orbit (tau 25-230 steps against
#: 200-660 for the elements on arcs of 20-60 %), equally at one to one and a half
#: orbits, and worse at three (92 against 26).
ARC_FRACTION = 1.0
_ELEMENTS = ("log10_period", "sqrt_e_cos_w", "sqrt_e_sin_w", "cos_inc", "node", "phase")
# z and T v_z rotated by -phi (see the module notes).
_STATE_DEPTH = ("north", "east", "depth_1", "v_north", "v_east", "depth_2")
# The longitude coordinates replace these element coordinates (period and cos i stay).
_LONGITUDE = ("sqrt_e_cos_lon_peri", "sqrt_e_sin_lon_peri", "cos_inc", "node",
              "mean_longitude")


class SamplerCoordinates:
    """The change from a model's coordinates to the ones the sampler moves in.

    Parameters
    ----------
    model : OrbitModel
    state : dict, optional
        Companions to sample as a state vector: body -> (T, phi), a time scale in days
        and an angle in rad that place the wall between the mirror images (see the
        module notes and :meth:`for_start`); each must have all six element
        coordinates sampled (free eccentricity and inclination).
    longitude : dict, optional
        Companions (not in ``state``) to sample with the eccentricity vector and the
        phase measured from a fixed direction on the sky instead of from the node
        (see :meth:`for_start`): body -> (sign, phase centre), where sign is +1 for a
        prograde orbit (cos i > 0) and -1 for a retrograde one, and the phase centre
        (rad) is the middle of the sampled phase's window of width 2 pi.
    angular_mass : bool
        Sample the central mass as log10(M plx^3) and state vectors in angular units.
    linear_mass : sequence of str, optional
        Companions whose ``log10_mass`` is sampled as the mass itself (M_sun).
    """

    def __init__(self, model, state=None, longitude=None, angular_mass=False,
                 linear_mass=()):
        self.model = model
        #: Columns of the companions' log10 masses sampled as the mass itself.
        self.linear_mass = [model.names.index(f"{body}.log10_mass") for body in linear_mass]
        # (mass column, parallax column) where the mass is sampled as the angular mass
        self.angular_mass = (model.names.index("central.log10_mass"),
                             model.names.index("parallax")) if angular_mass else None
        self.depth_frame = dict(state or {})
        self.bodies = list(self.depth_frame)
        self.longitude = dict(longitude or {})
        index = {name: k for k, name in enumerate(model.names)}
        self._columns = {}
        for body in self.bodies + list(self.longitude):
            missing = [c for c in _ELEMENTS if f"{body}.{c}" not in index]
            if missing:
                raise ValueError(f"{body}: these coordinates need the element coordinates "
                                 f"{', '.join(missing)}")
            self._columns[body] = [index[f"{body}.{c}"] for c in _ELEMENTS]
        self.names = list(model.names)
        self._tables = None  # (the model's window centres, compiled_tables())
        for body in self.bodies:
            for k, label in zip(self._columns[body], _STATE_DEPTH):
                self.names[k] = f"{body}.{label}"
        for body in self.longitude:
            for k, label in zip(self._columns[body][1:], _LONGITUDE):
                self.names[k] = f"{body}.{label}"
        if self.angular_mass is not None:
            self.names[self.angular_mass[0]] = ANGULAR_MASS
        for body, k in zip(linear_mass, self.linear_mass):
            self.names[k] = f"{body}.mass"

    @classmethod
    def for_start(cls, model, theta, *, arc_fraction=ARC_FRACTION):
        """The coordinates for a fit that starts at ``theta`` (the best fit).

        A companion whose data span less than ``arc_fraction`` of its period is
        sampled as a state vector. Any other companion with a free eccentricity and
        inclination keeps its elements, but with omega and the phase measured from a
        fixed direction on the sky: the longitude of periapsis omega + s node and the
        phase plus s node (s = the sign of cos i). For an orbit seen nearly face-on the
        node and omega are then no longer tied along a ridge that winds round the
        sqrt(e) disc (only their sum, or difference, is measured); elsewhere the node
        is measured and the change is a shift. The Jacobian of both changes is 1.
        Where the companions pull on each other, their log10 masses are sampled as
        the masses (see the module notes).
        """
        if model.velocity_only:
            return cls(model)
        pulls = bool(getattr(model.dynamics, "mutual_pulls", False))
        linear_mass = [name for name in model.companions
                       if pulls and f"{name}.log10_mass" in model.names]
        # Angular units where the parallax is sampled and every offset is an angle (the
        # data then measure M plx^3, not M): see the module notes.
        angular = ("central.log10_mass" in model.names and "parallax" in model.names
                   and not model.has_velocities
                   and all(np.all(rows.uses_parallax) for rows in model.rows.values()))
        theta = np.asarray(theta, dtype=float)
        phys = model.physical(theta)
        state, longitude = {}, {}
        for name in model.companions:
            if not all(f"{name}.{c}" in model.names for c in _ELEMENTS):
                continue
            t = model.rows[name].t
            span = float(np.max(t) - np.min(t)) if t.size else 0.0
            orbit = phys["companions"][name]
            if span < arc_fraction * float(orbit["period"][0]):
                # T = |r| / |v| at the reference epoch: z and T v_z then spread
                # alike; the wall between the mirror images is put square to the
                # best fit's (z, T v_z), as far from it as a line through 0 can be.
                (r, v), = _two_body_states(model, theta[None, :], [name]).values()
                scale = float(np.linalg.norm(r) / np.linalg.norm(v))
                state[name] = (scale, float(np.angle(r[0, 2] + 1j * scale * v[0, 2])))
            else:
                sign = 1.0 if np.cos(orbit["inc"][0]) >= 0 else -1.0
                k = model.names.index(f"{name}.phase")
                node = theta[model.names.index(f"{name}.node")]
                longitude[name] = (sign, float(theta[k] + sign * node))
        return cls(model, state, longitude, angular_mass=angular, linear_mass=linear_mass)

    def __bool__(self):
        return bool(self.bodies or self.longitude or self.angular_mass or self.linear_mass)

    def mass_key(self):
        """(model column, map) of the central mass for ``run_sampler``'s ``key``, where
        the sampler moves in the angular mass; else None."""
        if self.angular_mass is None:
            return None
        mass, col = self.angular_mass

        def log10_mass(chain):
            return chain[..., mass] - 3.0 * np.log10(chain[..., col])

        return mass, log10_mass

    def _physical_units(self, s):
        """``s`` in physical units (a copy where it changes): companions' masses as the
        model's log10 masses, the angular mass as the model's log10 M, state vectors in
        au and au/day; and the log-Jacobian of that, -inf where a mass or the parallax
        is not positive."""
        log_jac = np.zeros(s.shape[0])
        if self.linear_mass:
            s = s.copy()
            mass = s[:, self.linear_mass]
            with np.errstate(divide="ignore", invalid="ignore"):
                good = np.all(mass > 0, axis=1)
                mass = np.where(mass > 0, mass, np.nan)
                log_jac -= np.sum(np.log(mass * LN10), axis=1)
                s[:, self.linear_mass] = np.log10(mass)
            log_jac[~good] = -np.inf
        if self.angular_mass is None:
            return s, log_jac
        mass, col = self.angular_mass
        s = s.copy()
        plx = s[:, col]
        good = plx > 0
        plx = np.where(good, plx, np.nan)
        s[:, mass] = s[:, mass] - 3.0 * np.log10(plx)
        for body in self.bodies:
            s[:, self._columns[body]] /= plx[:, None]
            log_jac -= 6.0 * np.log(plx)
        log_jac[~good] = -np.inf
        return s, log_jac

    # --------------------------------------------------------------- the maps
    def _gm(self, theta):
        """GM of each chosen companion's relative orbit, au^3/day^2, from the kept
        coordinates of ``theta`` (rows)."""
        phys = self.model.physical_masses(theta)
        return {body: GM_SUN * (phys["central_mass"] + phys["companions"][body])
                for body in self.bodies}

    def to_sampled(self, theta):
        """Sampler coordinates of model coordinates ``theta`` (n, n_dim)."""
        theta = np.atleast_2d(np.asarray(theta, dtype=float))
        out = theta.copy()
        for body, (sign, centre) in self.longitude.items():
            cols = self._columns[body]
            h, k, node, phase = (theta[:, cols[j]] for j in (1, 2, 4, 5))
            turn = sign * node
            cos_t, sin_t = np.cos(turn), np.sin(turn)
            out[:, cols[1]] = h * cos_t - k * sin_t
            out[:, cols[2]] = h * sin_t + k * cos_t
            low = centre - np.pi
            out[:, cols[5]] = low + np.mod(phase + turn - low, TWO_PI)
        for body, (r, v) in _two_body_states(self.model, theta, self.bodies).items():
            state = np.column_stack([r, v])
            scale, angle = self.depth_frame[body]
            depth = (state[:, 2] + 1j * scale * state[:, 5]) * np.exp(-1j * angle)
            if self._mirrored(body):
                depth = np.where(depth.real < 0, -depth, depth)  # the image kept
            state[:, 2], state[:, 5] = depth.real, depth.imag
            out[:, self._columns[body]] = state
        if self.angular_mass is not None:
            mass, col = self.angular_mass
            out[:, mass] = theta[:, mass] + 3.0 * np.log10(theta[:, col])
            for body in self.bodies:
                out[:, self._columns[body]] *= theta[:, col][:, None]
        out[:, self.linear_mass] = 10.0 ** theta[:, self.linear_mass]
        return out

    def _mirrored(self, body):
        return self.model.node_width[body] < TWO_PI

    def to_model(self, sampled):
        """Model coordinates and log |d theta / d s| of sampler coordinates (n, n_dim).

        Unbound or degenerate states, and phases outside their window, give a
        log-Jacobian of -inf.
        """
        s, log_jac = self._physical_units(np.atleast_2d(np.asarray(sampled, dtype=float)))
        theta = s.copy()
        for body, (sign, centre) in self.longitude.items():
            cols = self._columns[body]
            h, k, node, phase = (s[:, cols[j]] for j in (1, 2, 4, 5))
            turn = sign * node
            cos_t, sin_t = np.cos(turn), np.sin(turn)
            theta[:, cols[1]] = h * cos_t + k * sin_t
            theta[:, cols[2]] = -h * sin_t + k * cos_t
            low, _ = self.model.window(body, "phase")
            theta[:, cols[5]] = low + np.mod(phase - turn - low, TWO_PI)
            log_jac[(phase < centre - np.pi) | (phase >= centre + np.pi)] = -np.inf
        if not self.bodies:
            return theta, log_jac
        gm = self._gm(s)
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
            for body in self.bodies:
                cols = self._columns[body]
                state = s[:, cols].copy()
                scale, angle = self.depth_frame[body]
                if self._mirrored(body):
                    log_jac[state[:, 2] < 0] = -np.inf
                # (depth_1 + i depth_2) exp(i phi), written out in real numbers (numpy's
                # complex product fuses a multiply-add on some machines, not on others).
                depth_1, depth_2 = state[:, 2].copy(), state[:, 5].copy()
                cos_a, sin_a = np.cos(angle), np.sin(angle)
                state[:, 2] = depth_1 * cos_a - depth_2 * sin_a
                state[:, 5] = (depth_1 * sin_a + depth_2 * cos_a) / scale
                log_jac -= np.log(scale)
                elements, lj = elements_of_state(state[:, :3], state[:, 3:], gm[body])
                theta[:, cols] = self._model_columns(body, elements)
                log_jac += lj
        bad = ~np.isfinite(log_jac) | np.any(~np.isfinite(theta), axis=1)
        log_jac[bad] = -np.inf
        return theta, log_jac

    def _model_columns(self, body, elements):
        period, ecc, cos_inc, node, omega, mean_anomaly = elements
        model = self.model
        low, _ = model.window(body, "node")
        width = model.node_width[body]
        turns = np.floor((node - low) / width)
        node = node - turns * width
        if width < TWO_PI:
            omega = omega + turns * np.pi
        phase_low, _ = model.window(body, "phase")
        phase = phase_low + np.mod(mean_anomaly + omega - phase_low, TWO_PI)
        root = np.sqrt(ecc)
        return np.column_stack([np.log10(period), root * np.cos(omega), root * np.sin(omega),
                                cos_inc, node, phase])

    def compiled_tables(self):
        """This change of coordinates as the compiled log-posterior's tables
        (:mod:`massfit.model.compiled_posterior`): per sky-fixed-angle body its six
        element columns and (sign, phase centre, the model's phase window low), per
        state-vector body its six columns, (T, phi, mirrored, node window low, node
        window width, phase window low) and its companion index; the (mass,
        parallax) columns of the angular mass, or (-1, -1); and the columns of the
        companions' masses sampled as themselves."""
        model = self.model
        companions = list(model.companions)
        lon_f = [(sign, centre, model.window(body, "phase")[0])
                 for body, (sign, centre) in self.longitude.items()]
        st_f = [self.depth_frame[body] + (float(self._mirrored(body)),
                                          model.window(body, "node")[0],
                                          model.node_width[body],
                                          model.window(body, "phase")[0])
                for body in self.bodies]
        return (np.array([self._columns[b] for b in self.longitude],
                         dtype=np.int64).reshape(-1, 6),
                np.array(lon_f, dtype=float).reshape(-1, 3),
                np.array([self._columns[b] for b in self.bodies],
                         dtype=np.int64).reshape(-1, 6),
                np.array(st_f, dtype=float).reshape(-1, 6),
                np.array([companions.index(b) for b in self.bodies], dtype=np.int64),
                np.array(self.angular_mass or (-1, -1), dtype=np.int64),
                np.array(self.linear_mass, dtype=np.int64))

    def log_prob(self, sampled):
        """Log-posterior density in the sampler's coordinates, shape (n,).

        Compiled in one call where the model's log-posterior is
        (:mod:`massfit.model.compiled_posterior`); :meth:`log_prob_python` is the
        reference.
        """
        compiled = self.model.compiled
        if compiled is not None and compiled.available:
            key = compiled.window_key()
            if self._tables is None or self._tables[0] != key:
                self._tables = (key, self.compiled_tables())
            return compiled(sampled, self._tables[1], window_key=key)
        return self.log_prob_python(sampled)

    def compiled_arguments(self):
        """The compiled kernel's tables for these coordinates
        (:class:`massfit.model.compiled_posterior.KernelTables`), or None where the
        model's log-posterior is not compiled: for samplers that step in compiled code
        (:mod:`massfit.sample.steps`)."""
        compiled = self.model.compiled
        if compiled is None or not compiled.available:
            return None
        key = compiled.window_key()
        return compiled.kernel_tables(self.compiled_tables(), window_key=key)

    def log_prob_python(self, sampled):
        """:meth:`log_prob` through :meth:`to_model` and the model's Python path."""
        if not self:
            return self.model.log_prob_python(sampled)
        theta, log_jac = self.to_model(sampled)
        lp = np.full(theta.shape[0], -np.inf)
        good = np.isfinite(log_jac)
        if np.any(good):
            lp[good] = self.model.log_prob_python(theta[good]) + log_jac[good]
        return np.where(np.isfinite(lp), lp, -np.inf)

    def restore(self, chain):
        """Put a chain sampled in these coordinates back into the model's (in place).

        ``samples`` and ``walker_steps`` become model coordinates; ``tau`` stays that
        of the coordinates the sampler moved in, named in ``coordinate_names``.
        """
        chain.coordinate_names = list(self.names)
        chain.state_bodies = list(self.bodies)
        if not self:
            return chain
        chain.samples = self.to_model(chain.samples)[0]
        if chain.walker_steps is not None:
            shape = chain.walker_steps.shape
            chain.walker_steps = self.to_model(
                chain.walker_steps.reshape(-1, shape[-1]))[0].reshape(shape)
        return chain


def _two_body_states(model, theta, bodies):
    """Two-body position and velocity, each (n, 3), of ``bodies`` at model coordinates
    ``theta`` (n, n_dim), with Kepler's law in its plain form."""
    if not bodies:
        return {}
    phys = model.physical(theta)
    out = {}
    for body in bodies:
        orbit = phys["companions"][body]
        period = orbit["period"]
        gm = GM_SUN * (phys["central_mass"] + orbit["mass"])
        a = np.cbrt(gm * period ** 2 / (4.0 * np.pi ** 2))
        position, velocity = orbit_state(a, orbit["ecc"], orbit["inc"], orbit["omega"],
                                         orbit["node"], orbit["mean_anomaly_ref"],
                                         TWO_PI / period)
        out[body] = (np.column_stack(position), np.column_stack(velocity))
    return out

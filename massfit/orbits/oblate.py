"""Satellites of an oblate primary: first-order secular J2 precession.

The primary's gravity field has the zonal harmonic J2 at equatorial radius R. To first
order in J2, averaged over an orbit, the node and the periapsis of a satellite drift at
constant rates and the mean anomaly advances at a corrected mean motion (Kozai 1959 and
Brouwer 1959; written out in e.g. Vallado, *Fundamentals of Astrodynamics and
Applications*, section on J2 secular effects, and Murray & Dermott, *Solar System
Dynamics*, ch. 6 — cited from memory)::

    q = J2 (R / p)^2,        p = a (1 - e^2)
    dOmega/dt = -(3/2) n q cos i_eq
    domega/dt =  (3/4) n q (5 cos^2 i_eq - 1)
    dM/dt     =  n0 [1 + (3/4) q sqrt(1 - e^2) (3 cos^2 i_eq - 1)],  n0 = sqrt(GM / a_mean^3)

where i_eq is the inclination of the orbit to the primary's equator, Omega the node on
the equator and omega the periapsis measured from it.

Which semi-major axis
---------------------
``a_mean`` in the mean-motion formula is the *mean* (orbit-averaged osculating)
semi-major axis of that theory. The sky positions trace the orbit's *geometric* size,
which is smaller: for a circular orbit the orbit-averaged radial pull is
GM/r^2 [1 + (3/4) q (3 cos^2 i_eq - 1)], so the angular rate along the orbit is
n0(r) [1 + (3/8) q (3 cos^2 i_eq - 1)]. Setting this equal to dM/dt + domega/dt +
cos i_eq dOmega/dt from the rates above gives

    r = a_mean [1 - (3/4) q sqrt(1 - e^2) (3 cos^2 i_eq - 1)]

to first order in J2 (derived here for e -> 0; the sqrt(1 - e^2) keeps the same form as
the mean motion, so the offset is exact at e = 0 and off by O(J2 e^2) otherwise). For
an equatorial orbit this reproduces the epicyclic frequencies of a J2 field,
n^2 = GM/r^3 (1 + 3/2 q), kappa^2 = GM/r^3 (1 - 3/2 q) (Murray & Dermott, from
memory). massfit draws the ellipse at r and uses 2 pi / P = dM/dt; so P is the
**anomalistic** period (periapsis to periapsis) and the mean longitude advances at
2 pi / P + dvarpi/dt.

The primary's pole
------------------
With no pole given, each orbit is taken to lie in the primary's equator (i_eq = 0):
the orbit plane seen on the sky stays fixed and the periapsis advances within it at
dvarpi/dt = (3/2) n q. This is the usual case of regular inner moons. With a pole given
(the equator's inclination and node on the sky, in the same convention as an orbit's:
an orbit with those elements lies in the equator and turns with the primary), each orbit
is referred to the equator, its node turns about the pole and its periapsis within its
own plane, and the sky elements change with time accordingly.
"""

from __future__ import annotations

import numpy as np

from massfit.constants import AU_KM
from massfit.quantities import parse_quantity
from massfit.orbits.dynamics import Keplerian, orbit_state
from massfit.errors import ConfigError

__all__ = ["Oblate", "primary_figure", "secular_rates", "mean_and_geometric_axis", "oblate_gm",
           "integrate_oblate_orbit", "j2_acceleration", "simulate_equatorial_moons"]

TWO_PI = 2.0 * np.pi
_ITERATIONS = 6


def _q_factor(j2, radius, a, ecc):
    return j2 * (radius / (a * (1.0 - ecc * ecc))) ** 2


def secular_rates(mean_motion, a, ecc, cos_i, j2, radius):
    """First-order secular J2 rates (rad per unit time of ``mean_motion``).

    Parameters
    ----------
    mean_motion : array_like
        n (rad per unit time).
    a : array_like
        Semi-major axis, same unit as ``radius``.
    ecc, cos_i : array_like
        Eccentricity and cosine of the inclination to the equator.
    j2, radius : float
        The primary's J2 and equatorial radius.

    Returns
    -------
    node_rate, periapsis_rate : ndarray
        dOmega/dt and domega/dt.
    """
    q = _q_factor(j2, radius, a, ecc)
    node_rate = -1.5 * mean_motion * q * cos_i
    periapsis_rate = 0.75 * mean_motion * q * (5.0 * cos_i ** 2 - 1.0)
    return node_rate, periapsis_rate


def _kappa(j2, radius, a, ecc, cos_i):
    q = _q_factor(j2, radius, a, ecc)
    return 0.75 * q * np.sqrt(1.0 - ecc * ecc) * (3.0 * cos_i ** 2 - 1.0)


def mean_and_geometric_axis(gm, mean_motion, ecc, cos_i, j2, radius):
    """Mean and geometric semi-major axes from GM and the anomalistic mean motion.

    Solves n = sqrt(GM / a^3) (1 + kappa(a)) for the mean a by fixed-point iteration
    (kappa is of order J2 (R/a)^2, so each pass gains that factor), then
    r = a (1 - kappa).

    Parameters
    ----------
    gm : array_like
        GM of primary plus satellite (length^3 / time^2).
    mean_motion : array_like
        dM/dt (rad / time).
    ecc, cos_i : array_like
        Eccentricity and cosine of the inclination to the equator.
    j2, radius : float
        J2 and the equatorial radius (same length unit as gm).

    Returns
    -------
    a_mean, a_geometric : ndarray
    """
    with np.errstate(invalid="ignore"):
        a = np.cbrt(gm / mean_motion ** 2)
        for _ in range(_ITERATIONS):
            a = np.cbrt(gm * (1.0 + _kappa(j2, radius, a, ecc, cos_i)) ** 2 / mean_motion ** 2)
    return a, a * (1.0 - _kappa(j2, radius, a, ecc, cos_i))


def oblate_gm(a_geometric, sidereal_period, ecc, inc_eq, j2, radius):
    """GM that a J2 primary needs for a satellite's published mean orbit.

    Inverts the model: finds the GM for which a satellite with anomalistic mean motion
    n has geometric semi-major axis ``a_geometric`` and mean-longitude rate
    n + domega/dt + dOmega/dt = 2 pi / ``sidereal_period`` (the mean longitude
    M + omega + Omega of satellite tables).

    Parameters
    ----------
    a_geometric : float
        Semi-major axis as published (length).
    sidereal_period : float
        Period of the mean longitude (time).
    ecc, inc_eq : float
        Eccentricity and inclination to the equator (rad).
    j2, radius : float
        J2 and equatorial radius (length).

    Returns
    -------
    float
        GM in length^3 / time^2.
    """
    from scipy.optimize import brentq

    cos_i = np.cos(inc_eq)
    rate = TWO_PI / sidereal_period

    def mismatch(log_gm):
        gm = np.exp(log_gm)
        # For trial GM, the anomalistic n that puts the geometric axis at a_geometric.
        n = np.sqrt(gm / a_geometric ** 3)
        for _ in range(_ITERATIONS):
            a_mean, a_geo = mean_and_geometric_axis(gm, n, ecc, cos_i, j2, radius)
            n = n * (a_geo / a_geometric) ** 1.5
        node_rate, peri_rate = secular_rates(n, a_mean, ecc, cos_i, j2, radius)
        return n + peri_rate + node_rate - rate

    gm_kepler = rate ** 2 * a_geometric ** 3
    return float(np.exp(brentq(mismatch, np.log(gm_kepler) - 0.2, np.log(gm_kepler) + 0.2,
                               xtol=1e-14)))


def primary_figure(j2, j4, radius, equator_inclination=None, equator_node=None) -> dict:
    """The primary's zonal harmonics, radius and pole from settings as a user gives them.

    Parameters
    ----------
    j2, j4 : float
        Second and fourth zonal harmonics (J2 from 0 to 0.1; J4 from -0.01 to 0.01,
        negative for the giant planets).
    radius : str or Quantity or None
        The equatorial radius, the harmonics' reference radius (e.g. ``"64000 km"``).
    equator_inclination, equator_node : str or Quantity, optional
        The equator in the model's frame, in the convention of an orbit's inclination
        and node (an orbit with these elements lies in the equator). Both or neither.

    Returns
    -------
    dict
        ``j2``, ``j4``, ``radius_km``, ``pole`` (unit vector as (north, east, z)
        components, or None) and ``pole_deg`` ((inclination, node) or None).

    Raises
    ------
    ConfigError
        Naming the ``dynamics.*`` key at fault.
    """
    import astropy.units as u

    for key, value, top in (("j2", j2, 0.1), ("j4", j4, 0.01)):
        low = 0.0 if key == "j2" else -top
        if not isinstance(value, (int, float)) or isinstance(value, bool) \
                or not np.isfinite(value) or not low <= value <= top:
            raise ConfigError(f"{key.upper()} must be a number from {low:g} to {top:g} "
                              f"(giant planets have J2 about 0.015, J4 about -6e-4), got "
                              f"{value!r}", key=f"dynamics.{key}")
    out = {"j2": float(j2), "j4": float(j4), "radius_km": None, "pole": None,
           "pole_deg": None}
    if radius is None:
        if j2 or j4:
            raise ConfigError("the zonal harmonics need the equatorial radius they refer to",
                              key="dynamics.equatorial_radius")
    else:
        r = parse_quantity(radius, expect=u.km, key="dynamics.equatorial_radius")
        if not r.value > 0:
            raise ConfigError("the equatorial radius must be positive",
                              key="dynamics.equatorial_radius")
        out["radius_km"] = float(r.to_value(u.km))
    if (equator_inclination is None) != (equator_node is None):
        raise ConfigError("give both the equator's inclination and its node, or "
                          "neither (each orbit then lies in the equator)",
                          key="dynamics.equator_inclination")
    if equator_inclination is not None:
        inc = parse_quantity(equator_inclination, expect=u.rad,
                             key="dynamics.equator_inclination").to_value(u.rad)
        node = parse_quantity(equator_node, expect=u.rad,
                              key="dynamics.equator_node").to_value(u.rad)
        # The equator's normal: the third column of the orbit rotation matrix.
        out["pole"] = np.array([np.sin(node) * np.sin(inc), -np.cos(node) * np.sin(inc),
                                np.cos(inc)])
        out["pole_deg"] = (float(np.degrees(inc)), float(np.degrees(node)))
    return out


class Oblate(Keplerian):
    """Companions of an oblate primary (J2), with first-order secular precession.

    Parameters
    ----------
    j2 : float
        The primary's second zonal harmonic (dimensionless, >= 0).
    radius : str or Quantity
        Its equatorial radius, the reference radius of J2 (e.g. ``"71492 km"``).
    equator_inclination, equator_node : str or Quantity, optional
        The primary's equator on the sky, in the convention of an orbit's inclination
        and node (an orbit with these elements lies in the equator and turns with the
        primary). Both or neither; without them each orbit is taken to lie in the
        equator.

    Notes
    -----
    See the module docstring for the rates, the mean and geometric semi-major axes and
    what the sampled period means (the anomalistic period).
    """

    label = "oblate"
    #: Its states_at would be the two-body one (no precession): not offered.
    offsets_between_companions = False

    def __init__(self, j2, radius, equator_inclination=None, equator_node=None):
        #: The settings as given (the command line changes them one by one).
        self.settings = {"j2": j2, "equatorial_radius": radius,
                         "equator_inclination": equator_inclination,
                         "equator_node": equator_node}
        figure = primary_figure(j2, 0.0, radius, equator_inclination, equator_node)
        self.j2 = figure["j2"]
        self.radius_km = figure["radius_km"]
        self.radius_au = self.radius_km / AU_KM
        self.pole = figure["pole"]
        if self.pole is not None:
            self._pole_deg = figure["pole_deg"]

    def stated_pole(self):
        return self.pole

    def describe(self) -> dict:
        out = {"model": self.label, "j2": self.j2, "equatorial_radius_km": self.radius_km}
        if self.pole is None:
            out["pole"] = "each orbit's own normal (orbits in the equator)"
        else:
            out["equator_inclination_deg"], out["equator_node_deg"] = self._pole_deg
        return out

    def _cos_i_eq(self, orbit):
        if self.pole is None:
            return np.ones_like(orbit["inc"])
        normal = _normal(orbit)
        return np.clip(sum(n * p for n, p in zip(normal, self.pole)), -1.0, 1.0)

    def from_two_body(self, model, values) -> list:
        """Map a two-body solution into this model's elements.

        A two-body fit of a precessing orbit follows its mean longitude: its period is
        about the sidereal one, 2 pi / (n + dvarpi/dt), and its semi-major axis the
        geometric size on the sky. For each companion the GM that a J2 primary needs
        for that size and rate is found (:func:`oblate_gm`); the central mass is their
        mean weighted by rows, and each period becomes the anomalistic one that gives
        the same mean-longitude rate under that mass. Angles and the phase at the
        reference epoch are kept.
        """
        from massfit.constants import GM_SUN

        values = dict(values)
        names = list(model.companions)
        orbits = {name: dict(values[name]) for name in names}
        cos_i = {name: float(self._cos_i_eq({key: np.array([orbits[name][key]])
                                              for key in ("inc", "node")})[0])
                 for name in names}
        central = []
        for name in names:
            orbit = orbits[name]
            gm = oblate_gm(orbit["semi_major_axis"], orbit["period"], orbit["ecc"],
                           np.arccos(cos_i[name]), self.j2, self.radius_au)
            central.append(gm / GM_SUN - orbit.get("mass", 0.0))
        weights = np.array([len(model.rows[name].t) for name in names], dtype=float)
        values["central_mass"] = float(np.exp(np.sum(weights * np.log(np.maximum(
            central, 1e-30))) / np.sum(weights)))
        for name in names:
            orbit = orbits[name]
            gm = GM_SUN * (values["central_mass"] + orbit.get("mass", 0.0))
            rate = TWO_PI / orbit["period"]
            n_motion = rate
            for _ in range(_ITERATIONS):
                a_mean, _ = mean_and_geometric_axis(gm, n_motion, orbit["ecc"],
                                                    cos_i[name], self.j2, self.radius_au)
                node_rate, peri_rate = secular_rates(n_motion, a_mean, orbit["ecc"],
                                                     cos_i[name], self.j2, self.radius_au)
                n_motion = rate - node_rate - peri_rate
            orbit["period"] = float(TWO_PI / n_motion)
            values[name] = orbit
        return [values]

    def semi_major_axis(self, gm, period, orbit):
        """Geometric semi-major axis (au) from GM and the anomalistic period."""
        _, a_geo = mean_and_geometric_axis(gm, TWO_PI / period, orbit["ecc"],
                                           self._cos_i_eq(orbit), self.j2, self.radius_au)
        return a_geo

    def states(self, model, phys, *, want_velocity=False) -> dict:
        out = {}
        for name, rows in model.rows.items():
            orbit = {key: value[:, None] for key, value in phys["companions"][name].items()}
            out[name] = self._state(orbit, rows.t[None, :] - model.reference_epoch(name),
                                    want_velocity)
        return out

    def _state(self, orbit, dt, want_velocity):
        n_motion = TWO_PI / orbit["period"]
        a, ecc = orbit["semi_major_axis"], orbit["ecc"]
        cos_i = self._cos_i_eq(orbit)
        node_rate, peri_rate = secular_rates(n_motion, a, ecc, cos_i, self.j2,
                                             self.radius_au)
        mean = orbit["mean_anomaly_ref"] + n_motion * dt
        with np.errstate(invalid="ignore", divide="ignore"):
            # Node on the equator is undefined without a pole: the node and periapsis
            # rates then add up to the advance of periapsis in the fixed orbit plane.
            in_plane = node_rate + peri_rate if self.pole is None else peri_rate
            omega = orbit["omega"] + in_plane * dt
            position, velocity = orbit_state(a, ecc, orbit["inc"], omega, orbit["node"],
                                             mean, n_motion, want_velocity=want_velocity)
            if velocity is not None:
                # The turning ellipse adds a velocity of order q n a: kept, so that the
                # velocity is the derivative of the position.
                velocity = _add_turn(velocity, _normal(orbit), position, in_plane)
            if self.pole is None:
                return position, velocity
            angle = node_rate * dt
            position = _rotate(position, self.pole, angle)
            if velocity is not None:
                velocity = _add_turn(_rotate(velocity, self.pole, angle), self.pole,
                                     position, node_rate)
            return position, velocity


def _normal(orbit):
    inc, node = orbit["inc"], orbit["node"]
    return (np.sin(node) * np.sin(inc), -np.cos(node) * np.sin(inc), np.cos(inc))


def _add_turn(velocity, axis, position, rate):
    """Velocity plus that of a rotation at ``rate`` about ``axis``."""
    cross = _cross(axis, position)
    return tuple(v + rate * c for v, c in zip(velocity, cross))


def _cross(k, r):
    return (k[1] * r[2] - k[2] * r[1], k[2] * r[0] - k[0] * r[2], k[0] * r[1] - k[1] * r[0])


def _rotate(vector, axis, angle):
    """Rodrigues' rotation of a (north, east, z) triple about a fixed unit axis."""
    cos_a, sin_a = np.cos(angle), np.sin(angle)
    cross = _cross(axis, vector)
    dot = sum(k * v for k, v in zip(axis, vector))
    return tuple(v * cos_a + c * sin_a + k * dot * (1.0 - cos_a)
                 for v, c, k in zip(vector, cross, axis))



# ------------------------------------------------------------- a reference integrator
def j2_acceleration(position, gm, j2, radius):
    """Acceleration in the field of an oblate primary, in its equatorial frame.

    ``position`` is (..., 3) with the third axis along the pole. The J2 term is
    -(3/2) J2 GM R^2 / r^5 (x (1 - 5 z^2/r^2), y (1 - 5 z^2/r^2), z (3 - 5 z^2/r^2))
    (the gradient of the J2 potential; e.g. Montenbruck & Gill, *Satellite Orbits*,
    ch. 3, from memory).
    """
    from massfit.orbits.nbody import zonal_field

    return gm * zonal_field(position, np.array([0.0, 0.0, 1.0]), j2 * radius ** 2)


def integrate_oblate_orbit(times, gm, j2, radius, position0, velocity0, *, rtol=1e-11):
    """Integrate a satellite's orbit in the full J2 field (not the secular theory).

    Parameters
    ----------
    times : ndarray
        Output times, counted from the epoch of the initial state (any order).
    gm, j2, radius : float
        The primary (consistent units, e.g. km and days).
    position0, velocity0 : array_like, shape (3,)
        State at time 0, in the equatorial frame.
    rtol : float
        Relative tolerance of scipy's DOP853.

    Returns
    -------
    ndarray, shape (len(times), 3)
        Positions in the equatorial frame.
    """
    from scipy.integrate import solve_ivp

    times = np.asarray(times, dtype=float)
    y0 = np.concatenate([position0, velocity0]).astype(float)
    scale = np.concatenate([np.full(3, np.linalg.norm(position0)),
                            np.full(3, np.linalg.norm(velocity0))])

    def rhs(_, y):
        return np.concatenate([y[3:], j2_acceleration(y[:3], gm, j2, radius)])

    out = np.empty((times.size, 3))
    for side in (times >= 0, times < 0):
        if not np.any(side):
            continue
        t_side = times[side]
        order = np.argsort(np.abs(t_side))
        end = t_side[order[-1]]
        sol = solve_ivp(rhs, (0.0, end), y0, method="DOP853", t_eval=t_side[order],
                        rtol=rtol, atol=rtol * scale)
        positions = np.empty((t_side.size, 3))
        positions[order] = sol.y[:3].T
        out[side] = positions
    return out


def simulate_equatorial_moons(path, *, seed=7, half_span=90.0, n_obs=60, err_km=60.0):
    """Invented planet *Vessaline* and two inner moons in its equator, integrated in the
    full J2 field (not the secular theory), written as an ECSV table of offsets in km.

    Parameters
    ----------
    path : path
        The ECSV file to write.
    seed : int
        Seed of the observing times and the noise.
    half_span : float
        The data run from -half_span to +half_span days about the epoch.
    n_obs : int
        Epochs per moon.
    err_km : float
        1-sigma error of each of east and north, km.

    Returns
    -------
    path, truth : Path, dict
        ``truth`` has ``gm_km3_s2``, ``j2``, ``radius_km``, ``t0_jd`` and, per moon
        under ``moons``, what a first look at the data would give as starting values
        (``rate`` and ``lambda0``: the mean-longitude rate and its value at t0;
        ``omega0``, ``apsis_rate``, ``ecc``, ``inc``, ``node``; radians and days).
    """
    import astropy.units as u
    from astropy.table import Table
    from astropy.time import Time

    from massfit.orbits.dynamics import orbit_axes

    rng = np.random.default_rng(seed)
    day = 86400.0
    gm = 1.05e8 * day ** 2  # km^3/day^2
    j2, radius = 0.018, 64_000.0
    inc, node = np.radians(63.0), np.radians(38.0)
    p_vec, q_vec = (np.array(v) for v in orbit_axes(inc, 0.0, node))
    rows, guesses = [], {}
    t0 = 2462000.0
    for k, (r0, ecc, phase) in enumerate([(2.6 * radius, 0.012, 0.4),
                                          (4.1 * radius, 0.006, 2.1)]):
        q = j2 * (radius / r0) ** 2
        v_circ = np.sqrt(gm / r0 * (1 + 1.5 * q))
        pos0 = r0 * np.array([np.cos(phase), np.sin(phase), 0.0])
        # A radial kick of e v makes the eccentricity e and leaves the size unchanged
        # to first order (so the rates below stay good starting guesses).
        vel0 = v_circ * np.array([-np.sin(phase) + ecc * np.cos(phase),
                                  np.cos(phase) + ecc * np.sin(phase), 0.0])
        t = np.sort(rng.uniform(-half_span, half_span, n_obs))
        dense = np.linspace(-half_span, half_span, int(22 * half_span) + 1)
        # rtol 1e-9: tightening it to 1e-11 moves the fitted GM by 0.005 sigma.
        eq_all = integrate_oblate_orbit(np.concatenate([t, dense]), gm, j2, radius,
                                        pos0, vel0, rtol=1e-9)
        eq = eq_all[:t.size]
        # The mean longitude and its rate, read off the noise-free path (what a
        # periodogram and a first fit would give), as starting guesses.
        lam = np.unwrap(np.arctan2(eq_all[t.size:, 1], eq_all[t.size:, 0]))
        rate, lam0 = np.polyfit(dense, lam, 1)
        sky = eq[:, :1] * p_vec + eq[:, 1:2] * q_vec  # (north, east, z)
        err = err_km
        name = f"moon{k + 1}"
        rows.append({"t": t, "body": name,
                     "north": sky[:, 0] + err * rng.standard_normal(t.size),
                     "east": sky[:, 1] + err * rng.standard_normal(t.size), "err": err})
        n0 = np.sqrt(gm / r0 ** 3)
        # The kick puts periapsis a quarter turn behind the starting point; it then
        # advances at (3/2) n q (first order, equatorial).
        guesses[name] = {"ecc": ecc, "inc": inc, "node": node, "mass": 0.0,
                         "rate": rate, "lambda0": lam0, "omega0": phase - np.pi / 2,
                         "apsis_rate": 1.5 * n0 * q}
    table = Table()
    t_all = np.concatenate([r["t"] for r in rows])
    table["time"] = Time(t0 + t_all, format="jd", scale="tdb")
    table["body"] = np.concatenate([[r["body"]] * r["t"].size for r in rows])
    for col in ("east", "north"):
        table[col] = np.concatenate([r[col] for r in rows]) * u.km
        table[f"{col}_err"] = np.concatenate([np.full(r["t"].size, r["err"])
                                              for r in rows]) * u.km
    table.meta["description"] = ("Invented moons of an invented oblate planet, "
                                 "integrated in the full J2 field (massfit validation)")
    table.write(path, format="ascii.ecsv", overwrite=True)
    truth = {"gm_km3_s2": gm / day ** 2, "j2": j2, "radius_km": radius, "t0_jd": t0,
             "moons": guesses}
    return path, truth

"""How each companion moves: the orbit evaluators the joint model calls.

:class:`~massfit.model.orbit_model.OrbitModel` asks its ``dynamics`` object two things:

* ``semi_major_axis(gm, period, orbit)``: the semi-major axis that Kepler's third law
  (or its corrected form) gives for a companion, from the sampled mass and period;
* ``states(model, phys, want_velocity)``: the companions' positions relative to the
  primary (and optionally their velocities) at every row's time.

:class:`Keplerian` is the default (two-body relative orbits). The perturbed models live
in :mod:`massfit.orbits.oblate` (secular J2, cheap) and :mod:`massfit.orbits.perturbed` (an
integrated orbit with any of J2, J4 and the companions' pulls on each other;
:mod:`massfit.orbits.nbody` holds its integrator and the pulls-only alias). :func:`observed_offsets` adds the light time across the system
(the Romer delay along z) on top of whichever model is in use.

Positions are in au as ``(north, east, z)`` triples of arrays shaped
``(n_walkers, n_rows)``; velocities in au/day. z points away from the observer.
"""

from __future__ import annotations

import numpy as np

from massfit.orbits import kepler
from massfit.orbits.kepler import orbit_axes, orbit_state

from massfit.orbits import viewing
from massfit.orbits.relativity import as_row_times, turning_periapsis
from massfit.constants import C_AU_PER_DAY

__all__ = ["Keplerian", "orbit_state", "orbit_axes", "elements_of_state", "observed_offsets",
           "offsets_from_primary", "romer_factor"]

TWO_PI = 2.0 * np.pi
LN10 = np.log(10.0)




def _cross(a, b):
    """Row-wise cross product, components in the order given (north, east, z)."""
    return np.column_stack([a[:, 1] * b[:, 2] - a[:, 2] * b[:, 1],
                            a[:, 2] * b[:, 0] - a[:, 0] * b[:, 2],
                            a[:, 0] * b[:, 1] - a[:, 1] * b[:, 0]])


def elements_of_state(r, v, gm):
    """Two-body elements of relative states, and log |d(model coords) / d(r, v)|.

    ``r`` (au) and ``v`` (au/day) have rows of (north, east, z); ``gm`` is in
    au^3/day^2. Returns (period, ecc, cos i, node, omega, mean anomaly), each shape (n,),
    and the log-Jacobian (-inf for unbound orbits).

    The frame's unit vectors follow :func:`massfit.orbits.dynamics.orbit_state`: with the cross
    product taken in the order (north, east, z), the orbit normal is
    (sin node sin i, -cos node sin i, cos i), the ascending node lies along
    (cos node, sin node, 0) and a quarter-turn ahead of it in the orbit is
    (-cos i sin node, cos i cos node, sin i).
    """
    radius = np.sqrt(np.sum(r * r, axis=1))
    speed2 = np.sum(v * v, axis=1)
    energy = 0.5 * speed2 - gm / radius
    a = -gm / (2.0 * energy)
    h = _cross(r, v)
    h_norm = np.sqrt(np.sum(h * h, axis=1))
    cos_inc = h[:, 2] / h_norm
    sin_inc = np.sqrt(np.maximum(1.0 - cos_inc * cos_inc, 0.0))
    node = np.arctan2(h[:, 0], -h[:, 1])
    e_vec = _cross(v, h) / gm[:, None] - r / radius[:, None]
    ecc = np.sqrt(np.sum(e_vec * e_vec, axis=1))
    cn, sn = np.cos(node), np.sin(node)
    n_hat = np.column_stack([cn, sn, np.zeros_like(cn)])
    m_hat = np.column_stack([-cos_inc * sn, cos_inc * cn, sin_inc])
    omega = np.arctan2(np.sum(e_vec * m_hat, axis=1), np.sum(e_vec * n_hat, axis=1))
    latitude = np.arctan2(np.sum(r * m_hat, axis=1), np.sum(r * n_hat, axis=1))
    nu = latitude - omega
    big_e = 2.0 * np.arctan2(np.sqrt(1.0 - ecc) * np.sin(0.5 * nu),
                             np.sqrt(1.0 + ecc) * np.cos(0.5 * nu))
    mean_anomaly = big_e - ecc * np.sin(big_e)
    period = TWO_PI * np.sqrt(a ** 3 / gm)
    # log |d theta / d(r, v)| = log[3 / (4 a ln10)] - log[mu^1.5 a^0.5 e / 2]
    log_jac = (np.log(3.0 / (2.0 * LN10)) - 1.5 * np.log(gm) - 1.5 * np.log(a)
               - np.log(ecc))
    bound = (energy < 0) & (ecc < 1.0) & (h_norm > 0)
    log_jac = np.where(bound, log_jac, -np.inf)
    return (period, ecc, cos_inc, node, omega, mean_anomaly), log_jac


class Keplerian:
    """Two-body relative orbits: each companion on a fixed ellipse about the primary.

    Kepler's third law in Newton's form, P^2 = 4 pi^2 a^3 / (G (M1 + m2)), and the
    kernel of :mod:`massfit.orbits.kepler`. This is what every fit uses unless told otherwise.
    """

    #: Name used in the config (``[dynamics] model``), the summary and the report.
    label = "keplerian"
    #: The settings as given, for the run record (``make_dynamics`` takes them back).
    settings: dict = {}
    #: Whether :meth:`states_at` follows this model's orbits, so that rows measured
    #: from another companion (``reference_body``) can be fitted.
    offsets_between_companions = True

    def describe(self) -> dict:
        """The settings of this model, for the summary."""
        return {"model": self.label}

    def prepare(self, model) -> None:
        """Check the model's companions against this dynamics (nothing to check here)."""

    def stated_pole(self):
        """The primary's pole as these dynamics were given it (the normal of their
        ``equator_inclination``/``equator_node``, a unit vector (3,) in the model's
        axes), or None: two-body orbits need none."""
        return None

    def node_widths(self, model, widths) -> dict:
        """Width of each companion's node window (pi where the sky cannot tell the
        ascending node from the descending one, 2 pi where velocities can); a
        perturbed model may need more of the orbits' orientation."""
        return widths

    def from_two_body(self, model, values) -> list:
        """Physical starting values for this dynamics from a two-body fit's.

        The start step searches with Keplerian ellipses (periodograms and linear scans
        need them) and hands the result here before polishing with this model.

        Returns
        -------
        list of dict
            Candidates to polish in turn (the start keeps the best, and stops at the
            first whose fit is acceptable). The two-body model takes the values as
            they are.
        """
        return [values]

    def semi_major_axis(self, gm, period, orbit):
        """a^3 = G (M1 + m2) P^2 / (4 pi^2), au (gm in au^3/day^2, period in days)."""
        with np.errstate(invalid="ignore"):
            return np.cbrt(gm * period ** 2 / (4.0 * np.pi ** 2))

    def states(self, model, phys, *, want_velocity=False) -> dict:
        """Positions (and velocities) of every companion at its rows' times.

        Without velocities the fused kernel gives east and north only (z is None).
        """
        out = {}
        for name, rows in model.rows.items():
            # A turning periapsis (relativity) takes the general evaluator.
            if want_velocity or "omega_per_anomaly" in phys["companions"][name]:
                out[name] = self.states_at(model, phys, name, rows.t)
                continue
            orbit = phys["companions"][name]
            with np.errstate(invalid="ignore", divide="ignore"):
                east, north = kepler.sky_offsets(
                    rows.t, orbit["period"], orbit["ecc"], orbit["mean_anomaly_ref"],
                    orbit["semi_major_axis"], orbit["inc"], orbit["omega"],
                    orbit["node"], t_ref=model.reference_epoch(name))
            out[name] = ((north, east, None), None)
        return out

    def states_at(self, model, phys, name, t):
        """Position and velocity of one companion at the times ``t`` (days since the
        model's epoch; shape (n_times,), or (n, n_times) with each walker's own
        times): what an offset measured from that companion needs."""
        orbit = phys["companions"][name]
        column = {key: value[:, None] for key, value in orbit.items()}
        n_motion = TWO_PI / column["period"]
        mean = column["mean_anomaly_ref"] + n_motion * (
            as_row_times(t) - model.reference_epoch(name))
        omega, omega_dot = turning_periapsis(column, mean)
        with np.errstate(invalid="ignore", divide="ignore"):
            return orbit_state(column["semi_major_axis"], column["ecc"], column["inc"],
                               omega, column["node"], mean, n_motion,
                               omega_dot=omega_dot)


def romer_factor(central_mass, companion_mass):
    """(M1 - m2) / (M1 + m2): the share of z/c by which the relative position is late.

    Light from the companion leaves at t - z_c/c and light from the primary at
    t - z_p/c (barycentric z). With z_c = M1/(M1+m2) z and z_p = -m2/(M1+m2) z, the
    observed offset is, to first order in the delay, the relative orbit at
    t - (M1 - m2)/(M1 + m2) z/c.
    """
    total = central_mass + companion_mass
    return (central_mass - companion_mass) / total


def observed_offsets(model, phys) -> dict:
    """East and north offsets (au) as observed.

    On a fixed sky plane: the dynamics' (north, east) plus, when
    ``model.spec.romer_delay`` is on, the light time across the system along z. With
    a per-row line of sight (``model.sight``): the dynamics' triple read as ICRS
    (x, y, z), each companion seen at its own light time along the line of sight
    (with ``model.spec.light_time``), projected onto the tangent plane at the
    primary (:func:`massfit.orbits.viewing.project`). Rows measured from another companion
    (``reference_body``) get the difference of the two bodies' offsets.

    The delay is applied to first order (position minus velocity times delay). The
    next term, half the acceleration times the delay squared, is smaller than the
    first-order shift by about (delay / period) times 2 pi, i.e. negligible for any
    orbit wider than a few light-days (why a linear step is enough).

    Returns
    -------
    dict
        name -> (east, north), arrays of shape (n_walkers, n_rows), au (angles times
        the primary's distance where a line of sight is given).
    """
    delayed = _light_time_on(model)
    out = offsets_from_primary(model, phys)
    for name, (east, north) in out.items():
        rows = model.rows[name]
        reference = getattr(rows, "reference", None)
        if reference is None:
            continue
        east, north = east.copy(), north.copy()  # never write into the states
        for other in np.unique(reference[reference != ""]):
            index = np.flatnonzero(reference == other)
            position, velocity = model.dynamics.states_at(model, phys, other,
                                                           rows.t[index])
            factor = romer_factor(phys["central_mass"], phys["companions"][other]["mass"])
            part = None if rows.sight is None else rows.sight.select(index)
            east_ref, north_ref = _seen(position, velocity, factor if delayed else None,
                                        part)
            east[:, index] -= east_ref
            north[:, index] -= north_ref
        out[name] = (east, north)
    return out


def offsets_from_primary(model, phys, *, along=None) -> dict:
    """Each companion's offsets from the primary at its rows, rows measured from
    another companion included (as if measured from the primary).

    Parameters
    ----------
    model : OrbitModel
    phys : dict
        Physical parameters (:meth:`OrbitModel.physical`).
    along : array_like, shape (3,), optional
        With a per-row line of sight only: a unit vector (ICRS). Each companion is
        then taken where the model places it for each row (the same light time) and
        seen orthographically along ``along`` instead of along the row's own line of
        sight: its position's components along the east and north of the plane
        normal to ``along`` (the view the orbit figure draws).

    Returns
    -------
    dict
        name -> (east, north), each (n_walkers, n_rows), au: as
        :func:`observed_offsets` without the subtraction of the reference bodies, or
        the orthographic view along ``along``.
    """
    sight = getattr(model, "sight", None)
    if along is not None and sight is None:
        raise ValueError("a view along another direction needs a per-row line of sight")
    delayed = _light_time_on(model)
    states = model.dynamics.states(model, phys,
                                   want_velocity=delayed or sight is not None)
    plane = None if along is None else viewing.plane_of(along)
    out = {}
    for name, (position, velocity) in states.items():
        rows = model.rows[name]
        factor = romer_factor(phys["central_mass"], phys["companions"][name]["mass"])
        factor = factor if delayed else None
        if plane is None:
            out[name] = _seen(position, velocity, factor, getattr(rows, "sight", None))
        else:
            position = _delayed(position, velocity, factor, rows.sight)
            out[name] = tuple(sum(v * p for v, p in zip(axis, position)) for axis in plane)
    return out


def _light_time_on(model) -> bool:
    """Whether the light time across the system is applied (Romer delay on a fixed
    plane where asked for; each companion's own light time with a line of sight)."""
    if getattr(model, "sight", None) is None:
        return bool(getattr(model.spec, "romer_delay", False))
    return bool(getattr(model.spec, "light_time", True))


def _seen(position, velocity, factor, sight):
    """One body's (east, north) at its rows: light time (if ``factor`` is given) and
    the projection (fixed plane where ``sight`` is None)."""
    position = _delayed(position, velocity, factor, sight)
    if sight is None:
        return position[1], position[0]
    return viewing.project(sight, position)


def _delayed(position, velocity, factor, sight):
    """The position when the light seen at the row left the body: earlier by its
    depth behind the primary over c (times ``factor``; unchanged where None)."""
    if factor is None:
        return position
    depth = position[2] if sight is None else viewing.along_sight(sight, position)
    delay = factor[:, None] * depth / C_AU_PER_DAY
    return tuple(p - v * delay for p, v in zip(position, velocity))

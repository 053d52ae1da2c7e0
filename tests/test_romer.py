"""Light time across the system (the Romer delay along z), against the exact
light-time equation solved by iteration for each star."""

import astropy.units as u
import numpy as np
import pytest
from astropy.table import Table
from astropy.time import Time

from massfit import read_observations
from massfit.constants import C_AU_PER_DAY, GM_SUN
from massfit.orbits.dynamics import observed_offsets, orbit_state, romer_factor
from massfit.model.specs import CompanionSpec, SystemSpec
from massfit.model.orbit_model import OrbitModel
from massfit.priors import Fixed

# An invented wide binary: 2.0 + 0.8 M_sun on a 30-year, e = 0.5 orbit.
M1, M2, PERIOD, ECC = 2.0, 0.8, 30 * 365.25, 0.5
INC, OMEGA, NODE, MEAN0 = np.radians(50.0), np.radians(70.0), np.radians(120.0), 0.4


def test_romer_factor_limits():
    assert romer_factor(1.0, 0.0) == 1.0  # a massless companion carries the full delay
    assert romer_factor(1.0, 1.0) == 0.0  # twins: the two delays cancel to first order
    assert romer_factor(2.0, 0.8) == pytest.approx(1.2 / 2.8)


def _orbit(t, mean_ref, t_ref):
    a = np.cbrt(GM_SUN * (M1 + M2) * PERIOD ** 2 / (4 * np.pi ** 2))
    mean = mean_ref + 2 * np.pi * (t - t_ref) / PERIOD
    pos, _ = orbit_state(a, ECC, INC, OMEGA, NODE, mean, 2 * np.pi / PERIOD)
    return np.array(pos)  # (north, east, z) of the companion relative to the primary


def _exact_offsets(t, mean_ref, t_ref):
    """Each star seen where it was when its light left: t_e = t - z_star(t_e)/c."""
    q1, q2 = M1 / (M1 + M2), M2 / (M1 + M2)
    seen = []
    for share in (q1, -q2):  # barycentric position = share x relative position
        t_e = t.copy()
        for _ in range(20):
            t_e = t - share * _orbit(t_e, mean_ref, t_ref)[2] / C_AU_PER_DAY
        seen.append(share * _orbit(t_e, mean_ref, t_ref))
    return seen[0] - seen[1]


@pytest.fixture()
def binary(tmp_path):
    t = np.linspace(0.0, PERIOD, 40)
    table = Table()
    table["time"] = Time(2460000.0 + t, format="jd", scale="tdb")
    table["body"] = ["B"] * t.size
    pos = _orbit(t, MEAN0, 0.0)
    table["east"], table["north"] = pos[1] * u.au, pos[0] * u.au
    table["east_err"] = table["north_err"] = np.full(t.size, 1e-5) * u.au
    path = tmp_path / "binary.ecsv"
    table.write(path, format="ascii.ecsv")
    return read_observations(path)


def test_first_order_delay_matches_the_light_time_equation(binary):
    comps = {"B": CompanionSpec("B", mass=Fixed(M2))}
    on = OrbitModel(binary, SystemSpec(central_mass=Fixed(M1), companions=comps,
                                       romer_delay=True))
    off = OrbitModel(binary, SystemSpec(central_mass=Fixed(M1), companions=comps))
    t_ref = on.reference_epoch("B")
    mean_ref = MEAN0 + 2 * np.pi * (on.epoch_jd - 2460000.0 + t_ref) / PERIOD
    values = {"central_mass": M1, "parallax": None,
              "B": dict(period=PERIOD, ecc=ECC, omega=OMEGA, inc=INC, node=NODE,
                        mean_anomaly_ref=mean_ref, mass=M2)}
    theta = on.from_physical(values)
    east, north = observed_offsets(on, on.physical(theta[None]))["B"]
    east0, north0 = observed_offsets(off, off.physical(theta[None]))["B"]
    exact = _exact_offsets(on.rows["B"].t, mean_ref, t_ref)
    shift = np.hypot(exact[1] - east0[0], exact[0] - north0[0])
    error = np.hypot(exact[1] - east[0], exact[0] - north[0])
    # The delay moves the star by up to 1.8e-4 au here (a tenth of a light-day across
    # the orbit); the first-order step leaves some 3e-5 of that (the second-order term).
    print(f"largest shift {np.max(shift):.3g} au, first-order error {np.max(error):.3g} au")
    assert np.max(shift) > 1e-4
    assert np.max(error) < 1e-3 * np.max(shift)

"""Kepler's third law and the mass conversions against published values.

Each check names its source. astropy.constants documents its own: IAU 2015
Resolution B3 for the nominal GM of the Sun, Jupiter and Earth, IAU 2012 Resolution B2
for the au, CODATA 2018 for G.
"""

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest

from massfit.constants import GM_SUN, GM_SUN_KM3_S2, G_REL_UNCERTAINTY, MASS_UNITS


def semi_major_axis_au(total_mass_msun, period_days):
    """Kepler's third law as the model applies it (internal units)."""
    return np.cbrt(GM_SUN * total_mass_msun * period_days ** 2 / (4 * np.pi ** 2))


def test_gaussian_gravitational_constant():
    # GM_sun in au^3/d^2 is k^2 with k = 0.01720209895 (IAU 1976 Gaussian constant);
    # with the IAU 2015 nominal GM_sun and the IAU 2012 au they agree to ~1e-9.
    assert np.sqrt(GM_SUN) == pytest.approx(0.01720209895, rel=2e-9)


def test_earth_year_from_gm_sun():
    # Sidereal year 365.256363 d (Astronomical Almanac; value from memory). With the
    # Earth-Moon mass added (GM_earth x 1.0123, the Moon being 1/81.3 of the Earth,
    # from memory), Kepler's third law puts the Earth at 1 au to within 2e-5, the
    # size of the planetary perturbations on the mean elements.
    earth_moon = MASS_UNITS["Mearth"] * 1.0123 / MASS_UNITS["Msun"]
    a = semi_major_axis_au(1.0 + earth_moon, 365.256363)
    assert a == pytest.approx(1.0000010, abs=2e-5)


def test_moon_of_a_giant_planet():
    # Innermost large moon of Jupiter: mean distance 421,700 km, sidereal period
    # 1.769137786 d (values from memory, as listed in planetary-satellite tables).
    # Jupiter's oblateness makes the Keplerian distance differ by ~0.1 %.
    gm = const.GM_jup.to_value(u.km ** 3 / u.s ** 2)
    gm_msun = gm / GM_SUN_KM3_S2
    a_km = semi_major_axis_au(gm_msun, 1.769137786) * const.au.to_value(u.km)
    assert a_km == pytest.approx(421_700, rel=2e-3)


def test_moon_of_the_earth():
    # The Moon: mean distance 384,400 km, sidereal month 27.321661 d, mass ratio
    # 1/81.30 of the Earth (values from memory, standard handbook figures).
    gm = (1 + 1 / 81.30) * MASS_UNITS["Mearth"] / GM_SUN_KM3_S2
    a_km = semi_major_axis_au(gm, 27.321661) * const.au.to_value(u.km)
    assert a_km == pytest.approx(384_400, rel=2e-3)


def test_mass_units_follow_iau_nominal_values():
    # IAU 2015 Resolution B3 nominal values, via astropy.constants.
    assert MASS_UNITS["Msun"] == pytest.approx(1.3271244e11, rel=1e-9)
    assert MASS_UNITS["Mjup"] == pytest.approx(1.2668653e8, rel=1e-9)
    assert MASS_UNITS["Mearth"] == pytest.approx(3.986004e5, rel=1e-9)


def test_g_uncertainty_is_codata_2018():
    # CODATA 2018: G = 6.67430(15) e-11 m^3 kg^-1 s^-2, relative 2.2e-5.
    assert G_REL_UNCERTAINTY == pytest.approx(2.2e-5, rel=0.03)

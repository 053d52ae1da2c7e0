"""The moving line of sight: projection, ephemeris, reader columns, fits on real and
simulated moons.

External checks (source beside each): astropy's sky-offset frame for the projection,
an almanac example for the ephemeris, published satellite elements for Kepler's third
law, and an independent theory of a real planet's moons (pymeeus, Meeus ch. 44).
"""

import sys
from dataclasses import replace
from pathlib import Path

import astropy.units as u
import numpy as np
import pytest
from astropy.coordinates import SkyCoord, get_body
from astropy.time import Time
from scipy.stats import chi2 as chi2_dist

from massfit.constants import AU_KM, GM_SUN_KM3_S2
from massfit.orbits.dynamics import Keplerian
from massfit.errors import InputError
from massfit.model.orbit_model import OrbitModel
from massfit.model.specs import SystemSpec
from massfit.scenarios.moving_observer import CircularPath, MoonOrbit, moon_times, observe_moons
from massfit.read.tables import read_observations
from massfit.model.fit_quality import POOR_FIT_P_VALUE
from massfit.start.search import find_start
from massfit.orbits.viewing import (differential_aberration, ephemeris_sight, orientation_in_icrs,
                             project, sight_from_angles, sky_basis)

sys.path.insert(0, str(Path(__file__).parent))
from meeus_moons import PUBLISHED_GM, meeus_table  # noqa: E402


# ------------------------------------------------------------------ projection
def test_basis_is_the_conventions_east_and_north():
    # CONVENTIONS.md: east = (-sin a, cos a, 0), north = (-sin d cos a, -sin d sin a,
    # cos d); (east, north, toward) right-handed like (east, north, z).
    ra, dec = np.radians([10.0, 250.0]), np.radians([-35.0, 62.0])
    toward, east, north = sky_basis(ra, dec)
    assert np.allclose(east[1], [-np.sin(ra[1]), np.cos(ra[1]), 0.0])
    assert np.allclose(np.cross(east, north), toward)
    assert np.allclose(np.sum(east * north, axis=1), 0.0)


def test_projection_is_astropys_tangent_plane():
    # astropy's SkyOffsetFrame gives (dlon, dlat) about the primary; the gnomonic
    # standard coordinates are xi = tan(dlon), eta = tan(dlat)/cos(dlon) (textbook
    # tangent-plane relations, e.g. Green, Spherical Astronomy, ch. 13; from memory).
    rng = np.random.default_rng(3)
    n = 50
    ra, dec = rng.uniform(0, 2 * np.pi, n), np.arcsin(rng.uniform(-1, 1, n))
    distance = rng.uniform(3.0, 9.0, n)
    sight = sight_from_angles(ra, dec, distance)
    offset = rng.normal(0.0, 0.01, (n, 3))  # au, moons a few million km out
    east, north = project(sight, tuple(offset.T[:, None, :]))
    primary = sight.toward * distance[:, None]
    to = SkyCoord(*(primary + offset).T, unit=u.au, representation_type="cartesian")
    centre = SkyCoord(*primary.T, unit=u.au, representation_type="cartesian")
    dlon, dlat = (a.to_value(u.rad) for a in centre.spherical_offsets_to(to))
    assert np.allclose(east[0] / distance, np.tan(dlon), rtol=1e-9, atol=1e-15)
    assert np.allclose(north[0] / distance, np.tan(dlat) / np.cos(dlon), rtol=1e-9,
                       atol=1e-15)
    # Negative control: the fixed-plane reading (offset over D, no perspective) is
    # off by the companion's depth, ~1e-3 of the offset here.
    flat = np.sum(offset * sight.east, axis=1) / distance
    assert np.max(np.abs(flat - np.tan(dlon))) > 1e-7


def test_orientation_turned_into_icrs_keeps_the_orbit():
    # An orbit given on the sky plane at one direction and the same orbit in ICRS
    # elements put every position at the same place in space.
    from massfit.orbits.dynamics import orbit_axes

    ra, dec = np.radians(200.0), np.radians(-12.0)
    toward, east, north = (v[0] for v in sky_basis(ra, dec))
    inc, omega, node = np.radians([35.0, 70.0, 120.0])
    p_sky, q_sky = orbit_axes(inc, omega, node)
    icrs = orientation_in_icrs(inc, omega, node, toward)
    p_icrs, q_icrs = orbit_axes(*icrs)
    for sky, space in ((p_sky, p_icrs), (q_sky, q_icrs)):
        assert np.allclose(sky[0] * north + sky[1] * east + sky[2] * toward, space)


# ------------------------------------------------------------------- ephemeris
def test_planet_direction_against_an_almanac_example():
    # Meeus, Astronomical Algorithms, 2nd ed., Example 33.a: Venus on 1992 Dec 20,
    # 0h TD, apparent alpha = 21h04m41.454s, delta = -18 53'16.84" (values from
    # memory). astropy's get_body (apparent, GCRS) taken to the true equator of date.
    from astropy.coordinates import TETE

    t = Time("1992-12-20 00:00:00", scale="tt")
    apparent = get_body("venus", t).transform_to(TETE(obstime=t))
    published = SkyCoord("21h04m41.454s", "-18d53m16.84s")
    assert apparent.ra.deg == pytest.approx(published.ra.deg, abs=1.0 / 3600)
    assert apparent.dec.deg == pytest.approx(published.dec.deg, abs=1.0 / 3600)
    # massfit's direction is the astrometric one: adding the aberration of the
    # Earth's velocity gives astropy's apparent GCRS place to a few mas (the rest is
    # the Sun's light deflection); without it they differ by ~20".
    ra, dec, distance, velocity = ephemeris_sight("venus", t, with_velocity=True)
    sight = sight_from_angles(ra, dec, distance)
    gcrs = get_body("venus", t)
    assert distance[0] == pytest.approx(gcrs.distance.to_value(u.au), rel=1e-9)
    from massfit.orbits.viewing import _aberrated

    seen = _aberrated(sight.toward, velocity / 299792.458)[0]
    astropy_dir = gcrs.cartesian.xyz.value / np.linalg.norm(gcrs.cartesian.xyz.value)
    assert np.degrees(np.arccos(np.dot(seen, astropy_dir))) * 3600 < 0.02
    assert np.degrees(np.arccos(np.dot(sight.toward[0], astropy_dir))) * 3600 > 10


def test_differential_aberration_scales_separations_by_one_minus_beta_cos():
    # First order in v/c, aberration u -> u + beta - (u.beta) u shrinks small
    # separations by (1 - beta . d) (classical aberration, e.g. the Explanatory
    # Supplement to the Astronomical Almanac; from memory); the rest of the change
    # of the offsets is the turn of north at the displaced tangent point.
    sight = sight_from_angles(np.radians([30.0]), np.radians([10.0]), [5.0])
    beta_km_s = np.array([[12.0, -25.0, 8.0]])
    east, north = np.array([4e-4]), np.array([-2e-4])
    d_east, d_north = differential_aberration(sight, beta_km_s, east, north)
    ratio = np.hypot(east + d_east, north + d_north) / np.hypot(east, north)
    assert ratio[0] - 1 == pytest.approx(-np.dot(sight.toward[0], beta_km_s[0]) / 299792.458,
                                         rel=2e-2)  # terms in (beta . s)


# ---------------------------------------------------------- Kepler's third law
@pytest.mark.parametrize("gm, period, a_km", [
    # GM of the planet (km^3/s^2), sidereal period (d), mean distance (km); values from
    # memory as tabulated by JPL's planetary-satellite mean elements.
    (126_686_534.0, 16.689018, 1_882_700.0),  # Jupiter, its outermost large moon
    (37_931_207.0, 15.945421, 1_221_870.0),  # Saturn, its largest moon
    (6_836_527.0, 5.876854, 354_759.0),  # Neptune, its largest moon (retrograde)
])
def test_kepler_third_law_on_real_satellites(gm, period, a_km):
    a = Keplerian().semi_major_axis(gm / GM_SUN_KM3_S2 * _gm_sun_au(), period, {})
    assert a * AU_KM == pytest.approx(a_km, rel=1e-3)


def _gm_sun_au():
    from massfit.constants import GM_SUN

    return GM_SUN


# ---------------------------------------------------------------- the reader
def _write(tmp_path, text, name="moons.ecsv"):
    path = tmp_path / name
    path.write_text(text)
    return path


_HEADER = """# %ECSV 1.0
# ---
# datatype:
# - {name: time, datatype: float64}
# - {name: body, datatype: string}
# - {name: east, unit: km, datatype: float64}
# - {name: north, unit: km, datatype: float64}
# - {name: east_err, unit: km, datatype: float64}
# - {name: north_err, unit: km, datatype: float64}
# - {name: primary_ra, unit: deg, datatype: float64}
# - {name: primary_dec, unit: deg, datatype: float64}
# - {name: distance, unit: AU, datatype: float64}
# - {name: reference_body, datatype: string}
# meta: {time_format: jd, time_scale: tdb}
time body east north east_err north_err primary_ra primary_dec distance reference_body
"""


def test_reader_takes_the_direction_and_the_reference(tmp_path):
    rows = "".join(f"{2461000.5 + k} {b} {100.0 + k} 50.0 10 10 45.0 20.0 5.0 {ref}\n"
                   for k in range(5) for b, ref in (("a", '""'), ("b", "a")))
    obs = read_observations(_write(tmp_path, _HEADER + rows))
    data = obs.astrometry
    assert data.has_sight
    assert np.allclose(data.primary_ra, np.radians(45.0))
    assert list(data.reference_body[:2]) == ["", "a"]


def test_unknown_reference_body_names_line_and_column(tmp_path):
    rows = "".join(f"{2461000.5 + k} a {100.0 + k} 50.0 10 10 45.0 20.0 5.0 "
                   f"{'ghost' if k == 3 else chr(34) * 2}\n" for k in range(5))
    path = _write(tmp_path, _HEADER + rows)
    with pytest.raises(InputError) as error:
        OrbitModel(read_observations(path), SystemSpec())
    message = str(error.value)
    assert "line 19" in message and "reference_body" in message and "ghost" in message


def test_direction_without_declination_is_refused(tmp_path):
    header = _HEADER.replace("# - {name: primary_dec, unit: deg, datatype: float64}\n", "")
    header = header.replace(" primary_dec", "")
    rows = "2461000.5 a 1 1 1 1 45.0 5.0 \"\"\n"
    with pytest.raises(InputError, match="primary_dec"):
        read_observations(_write(tmp_path, header + rows))


# ------------------------------------------------------- simulated moving observer
def _invented_system():
    # An invented planet (0.6 of Jupiter's mass... no: 7.3e-4 Msun, GM ~ 9.7e7
    # km^3/s^2) seen from an invented observer; orbits in ICRS axes.
    planet = CircularPath(6.1, 5500.0, 18.0, 40.0, 30.0, 2461000.5)
    observer = CircularPath(0.93, 330.0, 25.0, 5.0, 200.0, 2461000.5)
    moons = {"a": MoonOrbit(2.3, 0.01, 21.0, 40.0, 70.0, 2461001.0),
             "b": MoonOrbit(9.7, 0.03, 23.0, 150.0, 65.0, 2461003.0)}
    return 7.3e-4, planet, observer, moons


def _simulated(tmp_path, **options):
    mass, planet, observer, moons = _invented_system()
    times = {name: moon_times(2461000.5, 700.0, 60, seed=k) for k, name in enumerate(moons)}
    table = observe_moons(times, moons, mass, planet, observer, error=2e-3 * u.arcsec,
                          seed=11, **options)
    path = tmp_path / "sim.ecsv"
    table.write(path, overwrite=True)
    return read_observations(path), mass


def _fixed_plane(obs):
    return replace(obs, astrometry=replace(obs.astrometry, primary_ra=None,
                                           primary_dec=None))


def _fit(obs):
    model = OrbitModel(obs, SystemSpec())
    start = find_start(model)
    mass = model.physical(start.theta[None])["central_mass"][0]
    sigma = np.sqrt(start.covariance[0, 0]) * np.log(10.0) * mass
    n = model.residuals(start.theta[None]).shape[1]
    return mass, sigma, start.chi2, n - model.n_dim


def test_moving_observer_recovered_and_fixed_plane_biased_and_flagged(tmp_path):
    obs, truth = _simulated(tmp_path)
    mass, sigma, chi2, dof = _fit(obs)
    assert abs(mass - truth) < 4 * sigma
    assert chi2_dist.sf(chi2, dof) > POOR_FIT_P_VALUE
    # Negative control: the same rows on one fixed sky plane (today's model).
    mass, sigma, chi2, dof = _fit(_fixed_plane(obs))
    assert abs(mass - truth) > 50 * sigma
    assert chi2_dist.sf(chi2, dof) < POOR_FIT_P_VALUE  # the summary's poor-fit verdict


def _at_rest(planet):
    # A planet at rest: the model leaves out the planet's own motion during the
    # moons' differential light time (a few mas here, absorbed by the orientation in
    # a fit; see the conventions), and the checks that use it are of the geometry.
    return replace(planet, period=1e15)


def _pair_table(table):
    """b's rows measured from a (at the same instants), a's from the planet."""
    from astropy.table import vstack

    table["reference_body"] = np.full(len(table), "", dtype="<U8")
    pair = table[table["body"] == "b"]
    pair["east"] = pair["east"] - table[table["body"] == "a"]["east"]
    pair["north"] = pair["north"] - table[table["body"] == "a"]["north"]
    pair["reference_body"] = "a"
    return vstack([table[table["body"] == "a"], pair])


def _truth_theta(model, mass, moons):
    """The simulation's truth as the model's parameter vector, windows centred on it."""
    values = {"central_mass": mass}
    for name, moon in moons.items():
        t_ref = model.epoch_jd + model.reference_epoch(name)
        values[name] = dict(period=moon.period, ecc=moon.ecc, omega=np.radians(moon.omega),
                            inc=np.radians(moon.inc), node=np.radians(moon.node), mass=0.0,
                            mean_anomaly_ref=2 * np.pi * (t_ref - moon.periapsis_time)
                            / moon.period)
    model.recentre(model.from_physical(values))
    return model.from_physical(values)


def test_offsets_from_another_moon_are_the_difference(tmp_path):
    # The simulator's offsets of b minus those of a at the same instants (astropy's
    # tangent-plane offsets, independent of the model's projection).
    mass, planet, observer, moons = _invented_system()
    t = moon_times(2461000.5, 300.0, 12, seed=4)
    table = observe_moons({"a": t, "b": t}, moons, mass, _at_rest(planet), observer,
                          error=1e-3 * u.arcsec)
    _pair_table(table).write(tmp_path / "pair.ecsv", overwrite=True)
    model = OrbitModel(read_observations(tmp_path / "pair.ecsv"), SystemSpec())
    theta = _truth_theta(model, mass, moons)
    residuals = model.residuals(theta[None])[0]
    assert np.max(np.abs(residuals)) < 0.01  # in sigma: 10 micro-arcsec
    # Negative control: the same rows read as offsets from the planet.
    plain = replace(model.observations, astrometry=replace(
        model.observations.astrometry, reference_body=None))
    wrong = OrbitModel(plain, SystemSpec())
    wrong.centres = model.centres
    assert np.max(np.abs(wrong.residuals(theta[None])[0])) > 100


# ----------------------------------------------------------- the orbit figure
def test_tangent_turn_is_north_carried_along_the_great_circle():
    # Projecting one tangent plane onto another keeps the direction normal to the
    # great circle through both points and shortens the one along it, so the nearest
    # rotation is the parallel transport of directions along that great circle: a
    # direction keeps its angle to the circle. With astropy's position angles
    # (SkyCoord.position_angle) the row's north arrives at position angle
    # PA(mean -> row) - PA(row -> mean) - 180 deg, which is -psi.
    from astropy.coordinates import SkyCoord

    from massfit.orbits.viewing import tangent_turn

    ra, dec = np.radians([62.0, 40.0, 80.0, 55.0]), np.radians([21.0, 35.0, 9.0, -30.0])
    toward = sky_basis(np.radians(60.0), np.radians(20.0))[0][0]
    turn = tangent_turn(sight_from_angles(ra, dec, np.ones(4)), toward)
    mean = SkyCoord(60.0 * u.deg, 20.0 * u.deg)
    rows = SkyCoord(np.degrees(ra) * u.deg, np.degrees(dec) * u.deg)
    arrival = mean.position_angle(rows) - rows.position_angle(mean) - 180 * u.deg
    expected = -np.angle(np.exp(1j * arrival.to_value(u.rad)))
    assert np.allclose(turn, expected, atol=1e-9)
    # Meridians converge: a step dRA at Dec d turns north by about dRA sin d (the
    # textbook meridian convergence), here 2 deg * sin 20 deg.
    assert np.degrees(turn[0]) == pytest.approx(2.0 * np.sin(np.radians(20.5)), rel=0.02)


def _exact_moons(tmp_path, kind):
    """Exact offsets of the invented moons (a planet at rest) seen from the moving
    observer, as east/north, as separation/position angle, or b measured from a."""
    mass, planet, observer, moons = _invented_system()
    t = moon_times(2461000.5, 700.0, 40, seed=5)
    table = observe_moons({"a": t, "b": t}, moons, mass, _at_rest(planet), observer,
                          error=2e-3 * u.arcsec)
    if kind == "pair":
        table = _pair_table(table)
    elif kind == "polar":
        sep = np.hypot(table["east"], table["north"])
        table["sep"], table["pa"] = sep, np.arctan2(table["east"], table["north"]).to(u.deg)
        table["sep_err"] = table["east_err"]
        table["pa_err"] = (table["east_err"] / sep).decompose() * u.rad
        table.remove_columns(["east", "north", "east_err", "north_err"])
    path = tmp_path / f"{kind}.ecsv"
    table.write(path, overwrite=True)
    model = OrbitModel(read_observations(path), SystemSpec())
    return model, _truth_theta(model, mass, moons)


def _off_track(east, north, track):
    """Each point's distance from a closed polyline (the drawn track)."""
    start = np.column_stack(track)
    step = np.roll(start, -1, axis=0) - start
    point = np.column_stack([east, north])[:, None, :]
    along = np.clip(np.sum((point - start) * step, axis=2) / np.sum(step * step, axis=1),
                    0.0, 1.0)
    return np.min(np.linalg.norm(start + along[:, :, None] * step - point, axis=2), axis=1)


@pytest.mark.parametrize("kind", ["plain", "polar", "pair"])
def test_orbit_figure_puts_each_row_on_the_track_it_draws(tmp_path, kind):
    # Exact data seen from a moving observer: each row shown (moved to the mean line
    # of sight by the best fit's own difference) lies on the best track drawn along
    # that mean line of sight, within a small fraction of its error; the observed
    # rows themselves (each seen along its own line of sight) are far off it.
    from massfit.plot.sky import SkyFrame, _track_points, observed_offsets, shown_offsets

    model, theta = _exact_moons(tmp_path, kind)
    best = model.physical(theta[None])
    assert np.max(np.abs(model.residuals(theta[None])[0])) < 0.01  # sigma: exact data
    for name in ("a", "b"):
        frame = SkyFrame(model, name, best)
        east, north, cov, turn = shown_offsets(model, theta, name, frame)
        error = np.sqrt(np.min(np.linalg.eigvalsh(cov), axis=1))
        track = _track_points(best["companions"][name], 0, n_points=20001, sight=model.sight)
        assert np.max(_off_track(east, north, track) / error) < 0.02
        raw_e, raw_n, _ = observed_offsets(model.observations.astrometry, frame.index)
        raw = _off_track(raw_e * frame.row_factor, raw_n * frame.row_factor, track)
        assert np.max(raw / error) > 20  # negative control: the rows as observed
        assert 0.01 < np.max(np.abs(turn)) < 0.1  # rad: the axes turn by a degree or two


def test_orbit_figure_on_a_fixed_plane_places_only_rows_from_another_moon(tmp_path):
    # On one fixed sky plane the rows from the planet are shown exactly as observed;
    # the rows of b measured from a are placed from the planet by the best fit, onto
    # b's track (as observed they sit about a). Exact data made by the fixed-plane
    # model itself at the truth.
    from massfit.plot.sky import SkyFrame, _track_points, observed_offsets, shown_offsets

    mass, _, _, moons = _invented_system()
    moving, _ = _exact_moons(tmp_path, "pair")
    plane = OrbitModel(_fixed_plane(moving.observations), SystemSpec())
    theta = _truth_theta(plane, mass, moons)
    data = plane.observations.astrometry
    east, north = data.east.copy(), data.north.copy()
    for name, rows in plane.rows.items():
        east[rows.index], north[rows.index] = (v[0] for v in plane.predicted_offsets(
            theta, name))
    model = OrbitModel(replace(plane.observations, astrometry=replace(
        data, east=east, north=north)), SystemSpec())
    theta = _truth_theta(model, mass, moons)
    best = model.physical(theta[None])
    for name in ("a", "b"):
        frame = SkyFrame(model, name, best)
        shown_e, shown_n, cov, turn = shown_offsets(model, theta, name, frame)
        raw_e, raw_n, raw_cov = observed_offsets(model.observations.astrometry, frame.index)
        raw_e, raw_n = raw_e * frame.row_factor, raw_n * frame.row_factor
        reference = model.rows[name].reference
        moved = np.full(len(frame.index), False) if reference is None else reference == "a"
        assert np.array_equal(shown_e[~moved], raw_e[~moved])
        assert np.array_equal(shown_n[~moved], raw_n[~moved])
        assert np.array_equal(cov, raw_cov * frame.row_factor[:, None, None] ** 2)
        assert not np.any(turn)
        assert moved.any() == (name == "b")
        if name == "b":
            error = np.sqrt(cov[moved, 0, 0])
            track = _track_points(best["companions"][name], 0, n_points=20001)
            assert np.max(_off_track(shown_e[moved], shown_n[moved], track) / error) < 0.02
            assert np.max(_off_track(raw_e[moved], raw_n[moved], track) / error) > 20


def _pole_models(obs, **pole):
    """A J2 model of the invented moons whose pole is given as ``pole`` says."""
    from massfit.orbits.perturbed import Perturbed
    from massfit.orbits.viewing import ViewingSpec

    common = dict(j2=0.05, equatorial_radius="300000 km", mutual_pulls=False)
    equator = {key: pole[key] for key in ("equator_inclination", "equator_node")
               if key in pole}
    viewing = ({} if "pole_ra" not in pole else
               {"viewing": ViewingSpec(pole_ra=pole["pole_ra"], pole_dec=pole["pole_dec"])})
    return OrbitModel(obs, SystemSpec(dynamics=Perturbed(**common, **equator), **viewing))


def test_the_dynamics_equator_gives_the_primarys_pole(tmp_path):
    # The equator (i, node) in the convention of an orbit's elements: its normal is
    # R_z(node) R_x(i) z (the textbook orbit orientation, e.g. Murray & Dermott ch.
    # 2.8; from memory), built here with astropy's rotation matrices and read as an
    # ICRS direction by astropy's coordinates: the pole massfit reports must be it.
    from astropy.coordinates import CartesianRepresentation, SkyCoord
    from astropy.coordinates.matrix_utilities import rotation_matrix

    obs, _ = _simulated(tmp_path)
    inc, node = 26.5, 3.2  # deg
    model = _pole_models(obs, equator_inclination=f"{inc} deg",
                         equator_node=f"{node} deg")
    normal = (rotation_matrix(-node * u.deg, "z") @ rotation_matrix(-inc * u.deg, "x")
              @ np.array([0.0, 0.0, 1.0]))
    pole = SkyCoord(CartesianRepresentation(*normal), frame="icrs")
    ra, dec = model.primary_pole()
    assert np.degrees(ra) == pytest.approx(pole.ra.deg, abs=1e-9)
    assert np.degrees(dec) == pytest.approx(pole.dec.deg, abs=1e-9)
    # ... which is RA = node - 90 deg, Dec = 90 deg - i (docs/guide/moons.md).
    assert pole.ra.deg == pytest.approx((node - 90.0) % 360.0)
    assert pole.dec.deg == pytest.approx(90.0 - inc)
    # Both given and alike (rounding): accepted, the dynamics' pole used.
    both = _pole_models(obs, equator_inclination=f"{inc} deg", equator_node=f"{node} deg",
                        pole_ra=np.radians(pole.ra.deg + 0.003),
                        pole_dec=np.radians(pole.dec.deg - 0.003))
    assert both.primary_pole() == pytest.approx(model.primary_pole(), abs=1e-12)
    # Both given and apart: refused, naming both.
    from massfit.errors import ConfigError

    with pytest.raises(ConfigError, match="pole is given twice.*equator_inclination"):
        _pole_models(obs, equator_inclination=f"{inc} deg", equator_node=f"{node} deg",
                     pole_ra=np.radians(pole.ra.deg + 2.0), pole_dec=np.radians(pole.dec.deg))
    # Without a moving line of sight there is no ICRS pole to speak of.
    assert _pole_models(_fixed_plane(obs), equator_inclination=f"{inc} deg",
                        equator_node=f"{node} deg").primary_pole() is None


def test_equator_figure_takes_the_pole_from_the_dynamics(tmp_path):
    # The same pole given as [viewing] pole_ra/pole_dec and as the dynamics' equator
    # gives the same figure; with no pole at all it falls back to east and north.
    import matplotlib

    matplotlib.use("Agg")
    from types import SimpleNamespace

    from massfit.plot import equator_residual_plot

    obs = _exact_moons(tmp_path, "plain")[0].observations
    mass, _, _, moons = _invented_system()
    ra, dec = 250.0, 40.0
    shown = {}
    for label, pole in (("viewing", dict(pole_ra=np.radians(ra), pole_dec=np.radians(dec))),
                        ("equator", dict(equator_inclination=f"{90.0 - dec} deg",
                                         equator_node=f"{ra + 90.0} deg")),
                        ("none", {})):
        model = _pole_models(obs, **pole)
        theta = _truth_theta(model, mass, moons)
        fig = equator_residual_plot(SimpleNamespace(
            model=model, summary={},
            chain=SimpleNamespace(samples=theta[None], log_prob=np.zeros(1))))
        ax = fig.axes[0]
        shown[label] = {line.get_gid(): line.get_ydata() for line in ax.get_lines()
                        if (line.get_gid() or "").startswith("residuals-")}
    assert sorted(shown["equator"]) == ["residuals-along-the-equator",
                                        "residuals-towards-the-pole"]
    for gid, values in shown["viewing"].items():
        np.testing.assert_allclose(shown["equator"][gid], values, rtol=1e-9, atol=1e-9)
    assert sorted(shown["none"]) == ["residuals-east", "residuals-north"]


# ------------------------------------------------------------- real moons
@pytest.fixture(scope="module")
def outer_moon(tmp_path_factory):
    path = tmp_path_factory.mktemp("meeus") / "outer.ecsv"
    meeus_table(n_epochs=60, moons=("Callisto",)).write(path)
    return read_observations(path)


def test_real_outer_moon_gives_the_published_gm(outer_moon):
    # Independent data: Meeus' theory of the four large moons (pymeeus.JupiterMoons),
    # 60 epochs over two years, 200 km errors, seen from the moving Earth. The outer
    # moon is the least perturbed by the others: its two-body fit should follow it.
    mass, sigma, chi2, dof = _fit(outer_moon)
    gm = mass * GM_SUN_KM3_S2
    assert abs(gm / PUBLISHED_GM - 1) < 1e-3  # JUP230 value, from memory
    assert chi2 / dof < 2.0
    # Negative control: the fixed sky plane (today's model) is far off and says so.
    mass, sigma, chi2, dof = _fit(_fixed_plane(outer_moon))
    assert abs(mass * GM_SUN_KM3_S2 / PUBLISHED_GM - 1) > 3e-3
    assert chi2 / dof > 100


# ------------------------------------------------------------ settings and output
def test_viewing_config_keys_and_their_errors(tmp_path):
    from massfit.config.fit import parse_config
    from massfit.errors import ConfigError

    raw = {"data": {"files": ["moons.ecsv"]},
           "viewing": {"ephemeris_body": "jupiter", "site": ["-68.4 deg", "-24.1 deg",
                                                             "2150 m"],
                       "offsets": "apparent", "pole_ra": "251.3 deg",
                       "pole_dec": "57.8 deg"}}
    viewing = parse_config(raw, base=tmp_path).system.viewing
    assert viewing.ephemeris_body == "jupiter" and viewing.offsets == "apparent"
    assert viewing.pole_dec == pytest.approx(np.radians(57.8))
    assert viewing.site.lat.deg == pytest.approx(-24.1)
    raw["viewing"]["offsets"] = "topocentric"
    with pytest.raises(ConfigError, match="viewing.offsets"):
        parse_config(raw, base=tmp_path)


def test_unknown_ephemeris_body_is_one_line_and_exit_2(tmp_path):
    import subprocess

    path = tmp_path / "plain.csv"
    path.write_text("time,body,east,north,east_err,north_err\n" + "".join(
        f"{2461000.5 + k},a,{k},1,0.1,0.1\n" for k in range(6)))
    proc = subprocess.run(
        [sys.executable, "-m", "massfit", "fit", str(path), "--out", str(tmp_path / "o"),
         "--time-format", "jd", "--time-scale", "tdb", "--units",
         "east=arcsec,north=arcsec,east_err=arcsec,north_err=arcsec",
         "--ephemeris-body", "vulcan"], capture_output=True, text=True)
    assert proc.returncode == 2
    errors = [line for line in proc.stderr.splitlines() if "error" in line]
    assert len(errors) == 1 and "Traceback" not in proc.stderr
    assert "--ephemeris-body" in errors[0] and "vulcan" in errors[0]


def test_ephemeris_body_fills_each_rows_direction(tmp_path):
    from massfit.orbits.viewing import ViewingSpec, with_ephemeris

    path = tmp_path / "plain.ecsv"
    header = _HEADER.replace("# - {name: primary_ra, unit: deg, datatype: float64}\n", "")
    header = header.replace("# - {name: primary_dec, unit: deg, datatype: float64}\n", "")
    header = header.replace("# - {name: distance, unit: AU, datatype: float64}\n", "")
    header = header.replace(" primary_ra primary_dec distance", "")
    path.write_text(header + "".join(f"{2461000.5 + 20 * k} a {k} 1 10 10 \"\"\n"
                                     for k in range(5)))
    obs = with_ephemeris(read_observations(path), ViewingSpec(ephemeris_body="saturn"))
    time = obs.astrometry.time
    body = get_body("saturn", time)  # astropy's own (apparent) place
    assert np.allclose(obs.astrometry.distance * 206264.806, body.distance.to_value(u.au),
                       rtol=1e-6)
    # Astrometric against apparent: within the ~20" of annual aberration.
    assert np.allclose(np.degrees(obs.astrometry.primary_dec), body.dec.deg, atol=30 / 3600)


def test_elements_against_the_primarys_equator():
    from massfit.orbits.viewing import against_equator

    pole_ra, pole_dec = np.radians(251.3), np.radians(57.8)
    # An orbit whose pole is the planet's: i = 90 - dec, node = ra + 90 (ICRS).
    inc, node = np.radians(90 - 57.8), np.radians(251.3 + 90)
    i_eq, _ = against_equator(inc, node, pole_ra, pole_dec)
    assert i_eq == pytest.approx(0.0, abs=1e-6)
    i_eq, _ = against_equator(inc + np.radians(7.0), node, pole_ra, pole_dec)
    assert i_eq == pytest.approx(7.0, abs=1e-6)


def test_short_fit_is_saved_and_reloaded_with_its_line_of_sight(tmp_path):
    import matplotlib

    matplotlib.use("Agg")
    from massfit.plot import equator_residual_plot
    from massfit.run import fit
    from massfit.result.loading import load_result
    from massfit.orbits.viewing import ViewingSpec

    obs, truth = _simulated(tmp_path)
    spec = SystemSpec(viewing=ViewingSpec(pole_ra=np.radians(250.0),
                                          pole_dec=np.radians(60.0)))
    result = fit(obs, spec, max_steps=200, walkers=32, seed=3)
    assert result.summary["viewing"]["frame"] == "ICRS"
    assert "inclination_to_equator" in result.summary["companions"]["a"]
    assert "ICRS" in result.report()
    result.save(tmp_path / "out", plots=False)
    back = load_result(tmp_path / "out")
    assert back.model.sight is not None
    assert back.model.spec.viewing.pole_dec == pytest.approx(np.radians(60.0))
    fig = equator_residual_plot(back)
    labels = [t.get_text() for t in fig.axes[0].get_legend().get_texts()]
    assert labels == ["along the equator", "towards the pole"]
    assert "O$-$C" in fig.axes[0].get_ylabel()
    # The orbit figure draws the rows carried to the mean line of sight and says so.
    from massfit.plot import orbit_plot
    from massfit.plot.sky import SkyFrame, shown_offsets
    from massfit.summarise.residuals import best_sample

    fig = orbit_plot(back, companions=["a"], n_tracks=0)
    sky = fig.axes[0]
    note = [t.get_text() for t in sky.texts if t.get_gid() == "sight-note"][0]
    assert "mean line of sight" in note and "moved there by the best orbit" in note
    theta = best_sample(back)
    frame = SkyFrame(back.model, "a", back.model.physical(theta[None]))
    east, north, _, _ = shown_offsets(back.model, theta, "a", frame)
    dots = np.asarray([c for c in sky.collections if c.get_gid() == "data"][0].get_offsets())
    scale = dots[0, 0] / east[0]  # the display unit's factor
    assert np.allclose(dots, np.column_stack([east, north]) * scale, rtol=1e-9)

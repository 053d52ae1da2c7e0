"""State coordinates for short arcs (massfit.sample.reparameterisation).

The change of coordinates must be a bijection onto the model's coordinates, its
log-Jacobian must be the one the sampler needs, and it must be chosen where (and only
where) a companion is seen over a short arc.
"""


import astropy.units as u
import numpy as np
import pytest
from astropy.time import Time

import massfit
from massfit.constants import GM_SUN
from massfit.sample.reparameterisation import ARC_FRACTION, SamplerCoordinates, _two_body_states
from massfit.orbits.dynamics import orbit_state
from massfit.model.specs import CompanionSpec, SystemSpec
from massfit.model.orbit_model import OrbitModel
from massfit.priors import LogUniform, Uniform
from massfit.scenarios.simulate import Elements, read_back, simulate_astrometry
from massfit.start.search import find_start


def _model(period, *, seed=3, epochs=14, span=900.0, inc=58.0):
    """An invented one-companion system ('Tollan' about a 1.3 M_sun star)."""
    elements = {"Tollan": Elements(period=period, ecc=0.35, inc=inc, omega=141.0,
                                   node=67.0, periapsis_time=2460300.0)}
    rng = np.random.default_rng(seed)
    times = {"Tollan": Time(np.sort(2460000.0 + rng.uniform(0.0, span, epochs)),
                            format="jd", scale="tdb")}
    table = simulate_astrometry(times, elements, 1.3, error=0.01 * u.au, seed=seed)
    spec = SystemSpec(central_mass=LogUniform(0.5, 3.0), strict_companions=True,
                      companions={"Tollan": CompanionSpec(
                          "Tollan", period=LogUniform(period / 4, period * 4),
                          eccentricity=Uniform(0.0, 0.9))})
    obs = read_back(table, name="tollan.ecsv")
    return OrbitModel(obs, spec), spec, obs, 1.3


@pytest.fixture(scope="module")
def short_arc():
    model = _model(4000.0)[0]  # 900 days of a 4000-day orbit: 23 %
    start = find_start(model)
    walkers = start.walkers(model, 40, np.random.default_rng(5))
    return model, start, walkers


def test_short_arc_is_sampled_as_a_state_and_a_long_one_is_not(short_arc):
    model, start, _ = short_arc
    coords = SamplerCoordinates.for_start(model, start.theta)
    assert coords.bodies == ["Tollan"]
    assert [n for n in coords.names if n.startswith("Tollan.")] == [
        "Tollan.north", "Tollan.east", "Tollan.depth_1", "Tollan.v_north", "Tollan.v_east",
        "Tollan.depth_2"]
    long_model = _model(150.0)[0]  # six orbits
    chosen = SamplerCoordinates.for_start(long_model, find_start(long_model).theta)
    assert chosen.bodies == [] and list(chosen.longitude) == ["Tollan"]
    # Up to one orbit the state vector is chosen (validation/state_coordinates.py).
    assert ARC_FRACTION == 1.0
    most = _model(1100.0)[0]  # 900 days of an 1100-day orbit
    assert SamplerCoordinates.for_start(most, find_start(most).theta).bodies == ["Tollan"]


@pytest.mark.parametrize("inclination", [20.0, 160.0])
def test_longitude_coordinates_round_trip_with_unit_jacobian(inclination):
    """Prograde and retrograde: the sky-fixed longitude of periapsis and phase."""
    model = _model(150.0, inc=inclination)[0]
    start = find_start(model)
    coords = SamplerCoordinates.for_start(model, start.theta)
    sign, _ = coords.longitude["Tollan"]
    assert sign == (1.0 if inclination < 90 else -1.0)
    walkers = start.walkers(model, 30, np.random.default_rng(2))
    s = coords.to_sampled(walkers)
    theta, log_jac = coords.to_model(s)
    np.testing.assert_allclose(theta, walkers, rtol=0, atol=1e-12)
    assert np.all(log_jac == 0.0)
    np.testing.assert_allclose(coords.log_prob(s), model.log_prob(walkers))
    # sqrt(e) is kept, and omega + s node is what the new angle measures.
    names = coords.names
    h = s[:, names.index("Tollan.sqrt_e_cos_lon_peri")]
    k = s[:, names.index("Tollan.sqrt_e_sin_lon_peri")]
    phys = model.physical(walkers)["companions"]["Tollan"]
    np.testing.assert_allclose(h * h + k * k, phys["ecc"])
    turn = np.angle(np.exp(1j * (np.arctan2(k, h) - phys["omega"] - sign * phys["node"])))
    np.testing.assert_allclose(turn, 0.0, atol=1e-12)
    # Outside the sampled phase's window there is no density.
    outside = s.copy()
    outside[:, names.index("Tollan.mean_longitude")] += 2 * np.pi
    assert np.all(np.isneginf(coords.log_prob(outside)))


def test_round_trip_and_mirror_fold(short_arc):
    model, _, walkers = short_arc
    coords = SamplerCoordinates.for_start(model, walkers[0], arc_fraction=np.inf)
    assert "Tollan.depth_1" in coords.names and "Tollan.z" not in coords.names
    s = coords.to_sampled(walkers)
    theta, log_jac = coords.to_model(s)
    assert np.all(np.isfinite(log_jac))
    np.testing.assert_allclose(theta, walkers, rtol=0, atol=1e-10)
    # The mirror image (omega + pi, node + pi), the same orbit on the sky, is the
    # same point of the sampled space: (z, v_z) -> (-z, -v_z) leaves depth_1/2 alone.
    mirror = model.physical(walkers)["companions"]["Tollan"]
    values = {"central_mass": 10 ** walkers[0, 0], "parallax": None}
    for row in range(3):
        orbit = {key: float(mirror[key][row]) for key in
                 ("period", "ecc", "inc", "mean_anomaly_ref", "mass")}
        orbit.update(omega=float(mirror["omega"][row]) + np.pi,
                     node=float(mirror["node"][row]) + np.pi)
        values["central_mass"] = 10 ** walkers[row, 0]
        flipped = coords.to_sampled(model.from_physical(dict(values, Tollan=orbit)))
        np.testing.assert_allclose(flipped[0], s[row], rtol=1e-9, atol=1e-12)
    # Only one image is sampled: the wall is square to the start's own (z, T v_z).
    k = coords.names.index("Tollan.depth_1")
    assert np.all(s[:, k] >= 0)
    other = s.copy()
    other[:, [k, k + 3]] *= -1.0
    assert np.all(np.isneginf(coords.log_prob(other)))
    (r, v), = _two_body_states(model, walkers[:1], ["Tollan"]).values()
    scale, angle = coords.depth_frame["Tollan"]
    assert scale == pytest.approx(np.linalg.norm(r) / np.linalg.norm(v))
    assert angle == pytest.approx(np.angle(r[0, 2] + 1j * scale * v[0, 2]))
    assert coords.to_sampled(walkers[:1])[0, k + 3] == pytest.approx(0.0, abs=1e-12)


def test_log_jacobian_equals_finite_differences(short_arc):
    model, _, walkers = short_arc
    coords = SamplerCoordinates.for_start(model, walkers[0], arc_fraction=np.inf)
    s = coords.to_sampled(walkers[:3])
    for row in s:
        assert _difference_log_jacobian(coords, row) == pytest.approx(
            coords.to_model(row[None])[1][0], abs=1e-5)


def _difference_log_jacobian(coords, row):
    """log |det d theta / d s| at the sampled point ``row``, by central differences."""
    jac = np.empty((row.size, row.size))
    for k in range(row.size):
        step = 1e-6 * max(abs(row[k]), 1e-3)
        up, down = row.copy(), row.copy()
        up[k] += step
        down[k] -= step
        jac[:, k] = (coords.to_model(up[None])[0][0]
                     - coords.to_model(down[None])[0][0]) / (2 * step)
    return np.linalg.slogdet(jac)[1]


def test_angular_units_round_trip_with_the_right_jacobian():
    # Where the parallax is sampled, the mass is sampled as log10(M plx^3) and state
    # vectors in mas: a bijection whose log-Jacobian is -6 ln(plx) per state vector on
    # top of the state's own (checked here by finite differences of the whole map).
    from test_speed_paths import _model as speed_paths_model

    model = speed_paths_model("mirren")
    start = find_start(model)
    walkers = start.walkers(model, 12, np.random.default_rng(2))
    coords = SamplerCoordinates.for_start(model, start.theta)
    assert coords.angular_mass == (model.names.index("central.log10_mass"),
                                   model.names.index("parallax"))
    body = next(iter(model.companions))
    state = SamplerCoordinates(model, state={body: (40.0, 0.7)}, angular_mass=True)
    for coordinates in (coords, state):
        s = coordinates.to_sampled(walkers)
        theta, log_jac = coordinates.to_model(s)
        np.testing.assert_allclose(theta, walkers, rtol=0, atol=1e-9)
        for row in s[:3]:
            assert _difference_log_jacobian(coordinates, row) == pytest.approx(
                coordinates.to_model(row[None])[1][0], abs=1e-5)
    # Not where the offsets are lengths (no parallax) or velocities fix the mass.
    short = _model(4000.0)[0]
    assert SamplerCoordinates.for_start(short, find_start(short).theta).angular_mass is None
    sorrel = speed_paths_model("sorrel")
    assert SamplerCoordinates.for_start(sorrel, find_start(sorrel).theta).angular_mass is None


def test_effective_samples_of_the_mass_are_the_masss_own(tmp_path):
    # Sampled as the angular mass, the mass's autocorrelation time is measured on the
    # whole chain in the model's log10 M, reported, used for its effective samples and
    # read back with a saved result.
    from massfit.sample.chain import SamplerSettings
    from test_speed_paths import _model as speed_paths_model

    model = speed_paths_model("mirren")
    result = massfit.fit(model.observations, model.spec, progress=False,
                         sampler=SamplerSettings(walkers=24, max_steps=400,
                                                 check_every=200, seed=4))
    diag = result.summary["diagnostics"]
    assert diag["autocorr_steps"].get("central.log10_angular_mass") is not None
    tau = diag["mass_autocorr_steps"]
    assert tau is not None and tau != diag["autocorr_steps"]["central.log10_angular_mass"]
    assert diag["effective_samples"] == pytest.approx(
        diag["walkers"] * (diag["steps"] - diag["burn_in_steps"]) / max(tau, 1.0))
    result.save(tmp_path / "out", plots=False)
    again = massfit.load_result(tmp_path / "out")
    assert again.summary["diagnostics"]["effective_samples"] == pytest.approx(
        diag["effective_samples"])


def test_volume_element_of_the_two_body_state():
    """Delaunay's variables (L, G, H, l, g, h) with L = sqrt(mu a), G = L sqrt(1 - e^2),
    H = G cos i are canonical, so d^3r d^3v = dL dG dH dl dg dh, which gives
    |d(r, v) / d(a, e, cos i, M, omega, node)| = mu^(3/2) a^(1/2) e / 2. Source: the
    canonical Delaunay elements of any celestial-mechanics text (e.g. Murray & Dermott,
    Solar System Dynamics, 1999, sec. 2.10; recalled from memory). massfit's own
    elements-to-state map (dynamics.orbit_state) must have that Jacobian."""
    mu = GM_SUN * 1.7
    for a, e, cos_i, m, w, node in [(3.0, 0.3, 0.4, 1.0, 2.0, 0.5),
                                    (0.7, 0.75, -0.8, 4.0, 5.5, 3.0),
                                    (40.0, 0.05, 0.1, 6.0, 0.3, 1.2)]:
        x0 = np.array([a, e, cos_i, m, w, node])

        def state(x):
            n = np.sqrt(mu / x[0] ** 3)
            r, v = orbit_state(x[0], x[1], np.arccos(x[2]), x[4], x[5], x[3], n)
            return np.array(r + v)

        jac = np.empty((6, 6))
        for k in range(6):
            step = 1e-6 * max(abs(x0[k]), 1e-2)
            up, down = x0.copy(), x0.copy()
            up[k] += step
            down[k] -= step
            jac[:, k] = (state(up) - state(down)) / (2 * step)
        expected = 0.5 * mu ** 1.5 * np.sqrt(a) * e
        assert abs(np.linalg.det(jac)) == pytest.approx(expected, rel=1e-6)


def test_unbound_states_have_no_density(short_arc):
    model, _, walkers = short_arc
    coords = SamplerCoordinates.for_start(model, walkers[0], arc_fraction=np.inf)
    s = coords.to_sampled(walkers[:4])
    fast = s.copy()
    fast[:, [coords.names.index(f"Tollan.{c}") for c in ("v_north", "v_east")]] *= 10.0
    assert np.all(np.isneginf(coords.log_prob(fast)))
    lp = coords.log_prob(s)
    theta, log_jac = coords.to_model(s)
    np.testing.assert_allclose(lp, model.log_prob(theta) + log_jac)


def test_fit_of_a_short_arc_reports_its_state_coordinates():
    _, spec, obs, truth = _model(4000.0)
    result = massfit.fit(obs, spec, seed=4, walkers=24, max_steps=3000, check_every=250,
                         progress=False)
    diag = result.summary["diagnostics"]
    assert diag["sampled_as_state"] == ["Tollan"]
    assert "Tollan.depth_2" in diag["autocorr_steps"]
    assert "Tollan.log10_period" not in diag["autocorr_steps"]
    # The samples come back in the model's coordinates, inside its windows.
    assert np.all(np.isfinite(result.model.log_prob(result.chain.samples)))
    masses = result.samples["central_mass_solar"]
    assert np.quantile(masses, 0.0013) < truth < np.quantile(masses, 0.9987)


def test_companion_masses_round_trip_with_the_right_jacobian():
    # log10 m sampled as m: log |d log10 m / dm| = -ln(m ln 10), checked by finite
    # differences of the whole map, alone and with a state vector in angular units.
    from test_speed_paths import _model as speed_paths_model

    model = speed_paths_model("mirren", mass=LogUniform(1e-4, 0.5))
    start = find_start(model)
    walkers = start.walkers(model, 12, np.random.default_rng(4))
    body = next(iter(model.companions))
    for options in ({}, {"state": {body: (40.0, 0.7)}, "angular_mass": True}):
        coordinates = SamplerCoordinates(model, linear_mass=[body], **options)
        s = coordinates.to_sampled(walkers)
        k = coordinates.names.index(f"{body}.mass")
        np.testing.assert_allclose(s[:, k], 10.0 ** walkers[:, model.names.index(
            f"{body}.log10_mass")], rtol=1e-14)
        theta, _ = coordinates.to_model(s)
        np.testing.assert_allclose(theta, walkers, rtol=0, atol=1e-9)
        for row in s[:3]:
            assert _difference_log_jacobian(coordinates, row) == pytest.approx(
                coordinates.to_model(row[None])[1][0], abs=1e-5)
        s[0, k] = 0.0
        assert coordinates.to_model(s[:1])[1][0] == -np.inf


def test_masses_are_sampled_as_masses_where_the_companions_pull():
    # Mutual pulls make the masses measured (linearly) through the pulls: the sampler
    # moves in the masses; with two-body orbits it keeps their logarithms.
    from dataclasses import replace

    from test_speed_paths import _model as speed_paths_model

    from massfit.orbits.perturbed import Perturbed

    two_body = speed_paths_model("orvane")
    pulls = OrbitModel(two_body.observations,
                       replace(two_body.spec, dynamics=Perturbed(mutual_pulls=True)))
    for model, expected in ((pulls, True), (two_body, False)):
        low, high = (np.nan_to_num(b, posinf=1.0, neginf=-1.0)
                     for b in (model.prior_plan.low, model.prior_plan.high))
        coordinates = SamplerCoordinates.for_start(model, 0.5 * (low + high),
                                                   arc_fraction=0.0)
        masses = [f"{name}.mass" in coordinates.names for name in model.companions]
        assert masses == [expected] * len(masses)
        assert all(f"{name}.log10_mass" in model.names for name in model.companions
                   ) or not expected

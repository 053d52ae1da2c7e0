"""Radial velocities: textbook amplitudes, the sign, and known truth recovered.

Physics checks name their source. The fits use invented systems from the simulator;
the simulator computes velocities from the kernel's dz/dt while the model uses
K (cos(nu + omega) + e cos omega), so their agreement is a check of two paths, and
the recoveries check the machinery (start, sampling, summary). Each recovery has a
negative control that a wrong value must fail.
"""

import json

import astropy.units as u
import numpy as np
import pytest
from astropy.time import Time

import massfit
from massfit.orbits import kepler
from massfit.constants import GM_SUN, KM_S_PER_AU_DAY, MASS_UNITS
from massfit.errors import ConfigError, InputError
from massfit.model.orbit_model import OrbitModel
from massfit.model.specs import SystemSpec
from massfit.scenarios.simulate import Elements, simulate_astrometry, simulate_velocities, write_scenario

M_JUP = MASS_UNITS["Mjup"] / MASS_UNITS["Msun"]
QUICK = dict(seed=7, max_steps=12_000, progress=False)


def _inside_95(block, value):
    return block["lower_95"] <= value <= block["upper_95"]


def _times(rng, n, start=2459000.5, span=400.0):
    return Time(start + np.sort(rng.uniform(0.0, span, n)), format="jd", scale="tdb")


def _semi_major_axis(total_msun, period_d):
    return np.cbrt(GM_SUN * total_msun * period_d ** 2 / (4 * np.pi ** 2))


# ---------------------------------------------------------------- textbook values
def test_reflex_of_a_jupiter_at_5_2_au_is_12_5_m_s():
    # A 1 M_jup companion at 5.2 au around a 1 M_sun star moves the star by about
    # 12.5 m/s (the textbook figure for the Sun's reflex from Jupiter; from memory).
    total = 1.0 + M_JUP
    period = 2 * np.pi * np.sqrt(5.2 ** 3 / (GM_SUN * total))
    table = simulate_velocities(
        {"primary": Time(2459000.5 + np.linspace(0, period, 400), format="jd", scale="tdb")},
        {"b": Elements(period=period, ecc=0.0, inc=90.0, omega=0.0, node=0.0,
                       periapsis_time=2459000.5, mass=M_JUP)}, 1.0, error=1e-9 * u.m / u.s)
    rv = table["rv"].to_value(u.m / u.s)
    assert 0.5 * (rv.max() - rv.min()) == pytest.approx(12.5, abs=0.1)


def test_earth_mean_orbital_speed():
    # Earth's mean orbital speed 29.78 km/s (standard handbook value, from memory):
    # the relative-orbit speed of a test particle at 1 au in one sidereal year
    # (365.256363 d, from memory), edge-on, is 2 pi a / P.
    k = kepler.radial_velocity_amplitude(1.0, 365.256363, 0.0, np.pi / 2) * KM_S_PER_AU_DAY
    assert k == pytest.approx(29.78, abs=0.01)
    # Kepler's third law with the IAU 2015 GM_sun puts that year at 1 au.
    assert _semi_major_axis(1.0, 365.256363) == pytest.approx(1.0, abs=2e-5)


def test_mass_function_of_a_textbook_binary():
    # Definition (any spectroscopy text): f = P K^3 (1 - e^2)^(3/2) / (2 pi G). Seen
    # from a massless companion (the Earth, edge-on, circular), the "primary" is the
    # Sun: K = 2 pi a / P with a = 1 au and P = 365.256363 d (from memory), and
    # f = (M sin i)^3 / (M + m)^2 = M_sun, to the 1e-5 by which the real year
    # departs from Kepler's law with the nominal GM_sun.
    from massfit.summarise.derived import mass_function

    k = 2 * np.pi * 1.0 / 365.256363 * KM_S_PER_AU_DAY
    assert mass_function(365.256363, k, 0.0) == pytest.approx(1.0, rel=1e-5)


# ------------------------------------------------------------------------ the sign
@pytest.fixture
def node_passage(tmp_path):
    """Noise-free velocities of a circular binary, the first row at the ascending node."""
    el = {"Tove": Elements(period=40.0, ecc=0.0, inc=70.0, omega=0.0, node=30.0,
                           periapsis_time=2459000.5, mass=0.4)}
    t = Time(2459000.5 + np.linspace(0.0, 39.0, 12), format="jd", scale="tdb")
    table = simulate_velocities({"primary": t, "Tove": t}, el, 1.2, gamma=5.0 * u.km / u.s,
                                error=1e-6 * u.km / u.s)
    ast = simulate_astrometry({"Tove": t}, el, 1.2, error=1e-6 * u.au)
    write_scenario(tmp_path, table, None, name="rv.ecsv")
    write_scenario(tmp_path, ast, None, name="ast.ecsv")
    obs = massfit.read_observations([tmp_path / "ast.ecsv", tmp_path / "rv.ecsv"])
    return obs, el


def test_companion_at_its_ascending_node_is_receding(node_passage):
    # Conventions: the ascending node is where the companion recedes; there the
    # primary approaches. e = 0, omega = 0 puts the companion at the node at t_p.
    obs, el = node_passage
    model = OrbitModel(obs)
    values = {"central_mass": 1.2, "parallax": None,
              "Tove": {"period": 40.0, "ecc": 0.0, "omega": 0.0, "inc": np.radians(70.0),
                       "node": np.radians(30.0), "mass": 0.4,
                       "mean_anomaly_ref": 2 * np.pi * (
                           obs.astrometry.time.tdb.jd.mean() - 2459000.5
                           + model.reference_epoch("Tove")) / 40.0},
              "rv": {"offset": {"rv": 5.0}, "jitter": {"rv": 1e-4}, "slope": 0.0,
                     "curvature": 0.0}}
    theta = model.from_physical(values)
    parts = model.velocity_parts(model.physical(theta))
    share = parts["companions"]["Tove"][0]
    first = obs.velocities.time.tdb.jd == obs.velocities.time.tdb.jd.min()
    companion = first & (obs.velocities.body == "Tove")
    primary = first & (obs.velocities.body == "primary")
    assert share[companion][0] > 0  # receding
    assert share[primary][0] < 0  # approaching
    # Companion/primary speeds in the ratio M1 : m2 (momentum about the barycentre).
    assert -share[companion][0] / share[primary][0] == pytest.approx(1.2 / 0.4, rel=1e-9)
    # The model reproduces the simulator's noise-free velocities (two code paths).
    assert np.allclose(parts["total"][0], obs.velocities.rv, atol=1e-5)


# --------------------------------------------------------------- single-lined (SB1)
SB1_TRUTH = dict(period=37.4, ecc=0.28, inc=55.0, omega=120.0, node=0.0,
                 periapsis_time=2459021.3, mass=0.08)
SB1_SLOPE = 2.5e-3  # km/s per day: an unseen outer body


@pytest.fixture(scope="module")
def sb1_fit(tmp_path_factory):
    folder = tmp_path_factory.mktemp("sb1")
    rng = np.random.default_rng(21)
    table = simulate_velocities({"Aubel": _times(rng, 45)}, {"b": Elements(**SB1_TRUTH)},
                                0.95, primary="Aubel", gamma=-31.2 * u.km / u.s,
                                error=0.15 * u.km / u.s, jitter=0.1 * u.km / u.s,
                                slope=SB1_SLOPE * u.km / u.s / u.day, seed=22)
    write_scenario(folder, table, None, name="aubel.ecsv")
    obs = massfit.read_observations(folder / "aubel.ecsv", primary="Aubel")
    system = SystemSpec(primary="Aubel", central_mass=massfit.Normal(0.95, 0.05, low=0.0),
                        companions={"b": massfit.CompanionSpec("b")}, strict_companions=True,
                        trend="linear")
    result = massfit.fit(obs, system, **QUICK)
    return result, folder


def test_sb1_recovers_the_mass_function(sb1_fit):
    result, _ = sb1_fit
    s = result.summary
    b = s["companions"]["b"]
    m, big_m, sin_i = SB1_TRUTH["mass"], 0.95, np.sin(np.radians(SB1_TRUTH["inc"]))
    true_f = (m * sin_i) ** 3 / (big_m + m) ** 2  # the conventions' definition
    assert s["converged"] is True
    assert _inside_95(b["mass_function"], true_f)
    assert _inside_95(b["period"], SB1_TRUTH["period"])
    assert _inside_95(b["eccentricity"], SB1_TRUTH["ecc"])
    # The primary's omega is the companion's + 180 deg; the summary gives the companion's.
    assert _inside_95(b["periapsis_argument"], SB1_TRUTH["omega"])
    # Minimum mass (i = 90 deg) for the stated primary mass: below the true mass,
    # and consistent with m sin i for a small companion.
    assert b["minimum_mass"]["median"] < m
    assert _inside_95(b["minimum_mass"], m * sin_i * 1.02) or \
        _inside_95(b["minimum_mass"], m * sin_i)
    # Negative control: a mass function 15 % off is excluded.
    assert not _inside_95(b["mass_function"], 1.15 * true_f)
    assert not _inside_95(b["mass_function"], true_f / 1.15)


def test_sb1_states_that_the_central_mass_is_not_fixed(sb1_fit):
    result, folder = sb1_fit
    out = result.save(folder / "out", force=True)
    summary = json.loads((out / "summary.json").read_text())
    assert summary["central_mass"] is None
    assert summary["central_gm"] is None
    assert "do not fix the central mass" in summary["central_mass_note"]
    assert "not determined" in result.report()
    # No central mass is sampled: the effective sample count says what it is of.
    assert summary["diagnostics"]["effective_samples_of"] == "b.log10_period"
    assert (out / "rv.png").exists() and (out / "rv.pdf").exists()
    assert not (out / "orbits.png").exists()  # no sky orbit without astrometry
    # The nuisance terms: offset (gamma), jitter (0.1 km/s) and the linear trend.
    velocities = summary["velocities"]
    assert _inside_95(velocities["offset"]["aubel"], -31.2)
    assert _inside_95(velocities["jitter"]["aubel"], 0.1)
    assert _inside_95(velocities["trend_slope"], SB1_SLOPE)
    assert not _inside_95(velocities["trend_slope"], 0.0)  # the trend is detected


# --------------------------------------------------------------- double-lined (SB2)
SB2_TRUTH = dict(period=11.83, ecc=0.12, inc=81.0, omega=63.0, node=0.0,
                 periapsis_time=2459004.1, mass=0.74)


@pytest.fixture(scope="module")
def sb2_fit(tmp_path_factory):
    folder = tmp_path_factory.mktemp("sb2")
    rng = np.random.default_rng(31)
    t = _times(rng, 24, span=200.0)
    table = simulate_velocities({"primary": t, "Cass": t}, {"Cass": Elements(**SB2_TRUTH)},
                                1.05, gamma=14.0 * u.km / u.s, error=0.5 * u.km / u.s,
                                seed=33, instrument="Osk")
    write_scenario(folder, table, None, name="sb2.ecsv")
    obs = massfit.read_observations(folder / "sb2.ecsv")
    # An eclipse-like inclination prior: 81 +- 1 deg.
    comp = massfit.CompanionSpec("Cass", inclination=massfit.Normal(np.radians(81.0),
                                                                     np.radians(1.0)))
    system = SystemSpec(companions={"Cass": comp}, strict_companions=True)
    return massfit.fit(obs, system, **QUICK)


@pytest.mark.slow  # a statistical or end-to-end check: .ci/run runs it second
def test_sb2_recovers_both_masses_given_the_inclination(sb2_fit):
    s = sb2_fit.summary
    cass = s["companions"]["Cass"]
    sin3 = np.sin(np.radians(SB2_TRUTH["inc"])) ** 3
    assert s["converged"] is True
    assert _inside_95(cass["primary_mass_sin3i"], 1.05 * sin3)
    assert _inside_95(cass["mass_sin3i"], 0.74 * sin3)
    assert _inside_95(s["central_mass_solar"], 1.05)
    assert _inside_95(cass["mass"], 0.74)
    assert _inside_95(cass["mass_ratio"], 0.74 / 1.05)
    # Negative control: a primary 10 % heavier is outside.
    assert not _inside_95(cass["primary_mass_sin3i"], 1.10 * 1.05 * sin3)


# ----------------------------------------------------- joint astrometry + velocities
JOINT = {"Brisk": Elements(period=2900.0, ecc=0.35, inc=62.0, omega=210.0, node=35.0,
                           periapsis_time=2459800.0, mass=0.6)}


@pytest.fixture(scope="module")
def joint_cli_fit(tmp_path_factory):
    """A double-lined binary with a visual orbit and no parallax, fitted by the CLI."""
    from massfit.cli.commands import main

    folder = tmp_path_factory.mktemp("joint")
    rng = np.random.default_rng(5)
    ta = Time(2458500.0 + np.sort(rng.uniform(0, 3300, 18)), format="jd", scale="tdb")
    tv = Time(2458500.0 + np.sort(rng.uniform(0, 3300, 16)), format="jd", scale="tdb")
    ast = simulate_astrometry({"Brisk": ta}, JOINT, 1.1, parallax=40 * u.mas,
                              error=0.4 * u.mas, seed=1)
    vel = simulate_velocities({"primary": tv, "Brisk": tv}, JOINT, 1.1,
                              gamma=-8 * u.km / u.s, error=0.3 * u.km / u.s, seed=2,
                              instrument="Kell")
    write_scenario(folder, ast, None, name="ast.ecsv")
    write_scenario(folder, vel, None, name="rv.ecsv")
    status = main(["fit", str(folder / "ast.ecsv"), str(folder / "rv.ecsv"), "--out",
                   str(folder / "out"), "--seed", "3", "--max-steps", "12000", "--quiet",
                   "--no-plots"])  # the figures are checked on the SB1 fit and elsewhere
    return status, folder / "out"


@pytest.mark.slow  # a statistical or end-to-end check: .ci/run runs it second
def test_joint_fit_recovers_distance_and_both_masses(joint_cli_fit):
    status, out = joint_cli_fit
    assert status == 0
    s = json.loads((out / "summary.json").read_text())
    assert s["converged"] is True
    assert _inside_95(s["parallax"], 40.0)
    assert "no parallax was given" in s["parallax_note"]
    assert _inside_95(s["central_mass_solar"], 1.1)
    brisk = s["companions"]["Brisk"]
    assert _inside_95(brisk["mass"], 0.6)
    # The velocities break the node ambiguity: the true (omega, node), not +180.
    assert brisk["node_ambiguity_deg"] == 0.0
    assert _inside_95(brisk["ascending_node"], 35.0)
    assert _inside_95(brisk["periapsis_argument"], 210.0)
    # Negative control: a parallax 5 % off is outside.
    assert not _inside_95(s["parallax"], 42.0)


# ----------------------------------------------------------------------- bad input
def _write_rv_csv(path, rows, header="time,body,rv,rv_err,instrument"):
    path.write_text(header + "\n" + "\n".join(rows) + "\n")
    return path


RV_UNITS = {"rv": "km/s", "rv_err": "km/s"}


@pytest.mark.parametrize("bad", ["0", "-0.1", "nan", "inf"])
def test_bad_rv_error_names_file_and_line(tmp_path, bad):
    path = _write_rv_csv(tmp_path / "v.csv", ["2459000.5,primary,1.0,0.1,A",
                                              f"2459001.5,primary,1.2,{bad},A"])
    with pytest.raises(InputError) as info:
        massfit.read_observations(path, time_format="jd", time_scale="tdb", units=RV_UNITS)
    assert info.value.line == 3 and info.value.column == "rv_err"
    assert "v.csv" in str(info.value)


def test_velocities_of_an_unknown_body_name_file_and_line(tmp_path, node_passage):
    obs, _ = node_passage
    rows = [f"{2459000.5 + k},Tove,{k * 0.1},0.1,A" for k in range(6)]
    rows.append("2459010.5,Tovey,1.0,0.1,A")
    extra = _write_rv_csv(tmp_path / "extra.csv", rows)
    both = massfit.read_observations([tmp_path / "ast.ecsv", extra], time_format="jd",
                                     time_scale="tdb", units=RV_UNITS)
    with pytest.raises(InputError) as info:
        OrbitModel(both)
    assert info.value.line == 8 and "extra.csv" in str(info.value)
    assert "Tovey" in str(info.value)
    strict = SystemSpec(companions={"Tove": massfit.CompanionSpec("Tove")},
                        strict_companions=True)
    only_rv = massfit.read_observations(extra, time_format="jd", time_scale="tdb",
                                        units=RV_UNITS)
    with pytest.raises(InputError) as info:
        OrbitModel(only_rv, strict)
    assert info.value.line == 8


def test_instrument_with_no_rows_left_is_an_error(tmp_path):
    rows = [f"{2459000.5 + k},primary,{np.sin(k):.3f},0.1,A" for k in range(12)]
    rows += ["2459020.5,primary,1.0,-0.1,B", "2459021.5,primary,1.0,nan,B"]
    path = _write_rv_csv(tmp_path / "v.csv", rows)
    obs = massfit.read_observations(path, time_format="jd", time_scale="tdb",
                                    units=RV_UNITS, skip_bad_rows=True)
    assert len(obs.rejected) == 2
    spec = SystemSpec(instruments={"B": massfit.model.specs.InstrumentSpec(
        jitter=massfit.Fixed(0.0))})
    with pytest.raises(ConfigError) as info:
        OrbitModel(obs, spec)
    message = str(info.value)
    assert "velocities.instruments.B" in message
    assert "line 14" in message and "line 15" in message and "v.csv" in message


# ------------------------------------------------------------------------- config
def test_config_velocity_keys(tmp_path):
    from massfit.config.fit import parse_config

    raw = {"data": {"files": ["v.csv"]},
           "velocities": {"trend": "quadratic",
                          "slope_prior": {"kind": "normal", "mean": "0 m / (s d)",
                                          "sd": "1 m / (s d)"},
                          "jitter_prior": {"kind": "log-uniform", "low": "0.1 m/s",
                                           "high": "100 m/s"},
                          "instruments": {"Halden": {"offset_prior": {
                              "kind": "normal", "mean": "-12 km/s", "sd": "1 km/s"}}}},
           "companions": {"b": {"semi_amplitude_prior": {"kind": "uniform", "low": "0 m/s",
                                                         "high": "50 m/s"}}}}
    setup = parse_config(raw, base=tmp_path)
    system = setup.system
    assert system.trend == "quadratic"
    assert system.slope.sd == pytest.approx(1e-3)  # km/s/d
    assert system.jitter.low == pytest.approx(1e-4)
    assert system.instruments["Halden"].offset.mean == pytest.approx(-12.0)
    assert system.companions["b"].semi_amplitude.high == pytest.approx(0.05)
    raw["velocities"]["instruments"]["Halden"]["zero_point"] = "1 km/s"
    with pytest.raises(ConfigError, match="velocities.instruments.Halden.zero_point"):
        parse_config(raw, base=tmp_path)
    with pytest.raises(ConfigError, match="velocities.trend"):
        parse_config({"data": {"files": ["v.csv"]}, "velocities": {"trend": "cubic"}},
                     base=tmp_path)
    with pytest.raises(ConfigError, match="jitter cannot be negative"):
        parse_config({"data": {"files": ["v.csv"]}, "velocities": {"jitter_prior": {
            "kind": "uniform", "low": "-1 m/s", "high": "1 m/s"}}}, base=tmp_path)


@pytest.mark.slow  # a statistical or end-to-end check: .ci/run runs it second
def test_primary_reflex_with_astrometry_separates_the_two_masses(tmp_path):
    # A single-lined binary with a visual orbit and a known parallax: astrometry fixes
    # M1 + m2, the primary's reflex fixes m2 / (M1 + m2).
    el = {"Quill": Elements(period=1500.0, ecc=0.2, inc=48.0, omega=300.0, node=110.0,
                            periapsis_time=2459300.0, mass=0.25)}
    rng = np.random.default_rng(41)
    ta = Time(2458800.0 + np.sort(rng.uniform(0, 1800, 14)), format="jd", scale="tdb")
    tv = Time(2458800.0 + np.sort(rng.uniform(0, 1800, 16)), format="jd", scale="tdb")
    ast = simulate_astrometry({"Quill": ta}, el, 0.9, parallax=55 * u.mas,
                              error=0.3 * u.mas, seed=42)
    vel = simulate_velocities({"primary": tv}, el, 0.9, gamma=3 * u.km / u.s,
                              error=0.05 * u.km / u.s, seed=43)
    write_scenario(tmp_path, ast, None, name="ast.ecsv")
    write_scenario(tmp_path, vel, None, name="rv.ecsv")
    obs = massfit.read_observations([tmp_path / "ast.ecsv", tmp_path / "rv.ecsv"])
    result = massfit.fit(obs, parallax="55 mas", parallax_err="0.3 mas", **QUICK)
    s = result.summary
    assert s["converged"] is True
    assert _inside_95(s["central_mass_solar"], 0.9)
    quill = s["companions"]["Quill"]
    assert _inside_95(quill["mass"], 0.25)
    assert quill["node_ambiguity_deg"] == 0.0
    assert _inside_95(quill["ascending_node"], 110.0)
    # Negative control: a companion of half the mass is excluded.
    assert not _inside_95(quill["mass"], 0.125)


def test_two_signals_in_the_primary_velocities_are_both_found(tmp_path):
    # Two invented planets, 1 and 3 Jupiter masses at 9.31 d and 143 d: the start
    # (periodogram, linear scan, least squares, one signal after the other) finds both.
    from massfit.start.search import find_start

    el = {"b": Elements(period=9.31, ecc=0.1, inc=80.0, omega=40.0, node=0.0,
                        periapsis_time=2459003.0, mass=0.0009),
          "c": Elements(period=143.0, ecc=0.3, inc=80.0, omega=200.0, node=0.0,
                        periapsis_time=2459050.0, mass=0.003)}
    rng = np.random.default_rng(8)
    table = simulate_velocities({"primary": _times(rng, 70, span=600.0)}, el, 1.0,
                                gamma=2 * u.km / u.s, error=3 * u.m / u.s, seed=9)
    write_scenario(tmp_path, table, None, name="rv.ecsv")
    spec = SystemSpec(companions={n: massfit.CompanionSpec(n) for n in el},
                      strict_companions=True)
    model = OrbitModel(massfit.read_observations(tmp_path / "rv.ecsv"), spec)
    start = find_start(model)
    periods = sorted(float(o["period"][0])
                     for o in model.physical(start.theta)["companions"].values())
    assert periods[0] == pytest.approx(9.31, rel=2e-3)
    assert periods[1] == pytest.approx(143.0, rel=2e-2)
    assert start.chi2 < 70 + 4 * np.sqrt(2 * 70)  # chi^2 of 70 velocities, not more

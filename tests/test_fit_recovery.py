"""Known truth recovered from simulated data, for one and for four companions.

The simulator shares the kernel with the fit, so these tests check the machinery (start,
sampling, summary), not the formulas; those are pinned in test_kepler.py and
test_published_values.py. Each has a negative control that must fail to recover the
truth when the model is given wrong information.
"""

import astropy.units as u
import numpy as np
import pytest
from astropy.time import Time

import massfit
from massfit.scenarios.examples import DEMO_DIR

from conftest import invented_binary


def _inside_95(block, value):
    return block["lower_95"] <= value <= block["upper_95"]


@pytest.fixture(scope="module")
def wren_observations(tmp_path_factory):
    from massfit.scenarios.simulate import write_scenario

    folder = tmp_path_factory.mktemp("wren")
    table, truth = invented_binary()
    write_scenario(folder, table, truth, name="wren.ecsv")
    return massfit.read_observations(folder / "wren.ecsv"), truth


@pytest.fixture(scope="module")
def binary_fit(wren_observations):
    obs, truth = wren_observations
    result = massfit.fit(obs, parallax="25.0 mas", parallax_err="0.25 mas", seed=3,
                         max_steps=30_000, progress=False)
    return result, truth


@pytest.mark.slow  # a statistical or end-to-end check: .ci/run runs it second
def test_one_companion_recovers_mass_and_elements(binary_fit):
    result, truth = binary_fit
    s = result.summary
    assert s["converged"] is True
    solar = s["central_mass_solar"]
    assert _inside_95(solar, truth["central_mass_Msun"])
    wren = s["companions"]["Wren"]
    el = truth["companions"]["Wren"]
    assert _inside_95(wren["period"], el["period"])
    assert _inside_95(wren["eccentricity"], el["ecc"])
    assert _inside_95(wren["inclination"], el["inc"])
    # 1 % parallax -> about 3 % on the mass: the interval must reflect it, not less.
    width = (solar["upper_68"] - solar["lower_68"]) / 2 / solar["median"]
    assert 0.02 < width < 0.06


def test_mass_units_are_consistent(binary_fit):
    result, _ = binary_fit
    s = result.summary
    gm = s["central_gm"]["median"]
    assert s["central_mass_solar"]["median"] == pytest.approx(gm / 1.3271244e11, rel=1e-9)
    # kg = GM / G with CODATA 2018 G (astropy.constants).
    assert s["central_mass"]["median"] == pytest.approx(gm * 1e9 / 6.67430e-11, rel=1e-4)


def test_wrong_parallax_misses_the_truth():
    # Negative control: a parallax 10 % too large (with a tight error) shrinks the
    # semi-major axis in au by 10 % and the mass by 27 %; the truth must fall outside.
    table, truth = invented_binary()
    from massfit.scenarios.simulate import read_back

    obs = read_back(table, name="wren.ecsv")
    result = massfit.fit(obs, parallax="27.5 mas", parallax_err="0.1 mas", seed=3,
                         max_steps=8000, progress=False)
    assert not _inside_95(result.summary["central_mass_solar"], truth["central_mass_Msun"])


@pytest.mark.slow  # a full chain on the moving-observer path; .ci/run runs it second
def test_four_moons_of_the_demo_recovered():
    import json

    truth = json.loads((DEMO_DIR / "truth.json").read_text())
    obs = massfit.read_observations(DEMO_DIR / "moons.ecsv")
    result = massfit.fit(obs, seed=5, walkers=56, max_steps=6000, progress=False)
    s = result.summary
    assert _inside_95(s["central_gm"], truth["central_gm_km3_s2"])
    assert set(s["companions"]) == set(truth["companions"])
    # Eight elements checked at once: a 95 % interval would miss one in three data
    # sets by chance, so each pull is held to 4 sigma (68 % half-width) instead.
    for name, el in truth["companions"].items():
        for key, true in (("period", el["period"]), ("inclination", el["inc"])):
            block = s["companions"][name][key]
            sigma = 0.5 * (block["upper_68"] - block["lower_68"])
            assert abs(block["median"] - true) < 4 * sigma, (name, key)


def test_light_time_matters_for_the_moons():
    # Negative control for the per-row light time: the moons' positions carry the
    # changing observer distance (4.3-6.3 au, up to 17 minutes of light time); fitted
    # without the correction, the best fit must be clearly worse.
    from massfit.model.orbit_model import OrbitModel
    from massfit.model.specs import SystemSpec
    from massfit.start.search import find_start

    obs = massfit.read_observations(DEMO_DIR / "moons.ecsv")
    with_lt = find_start(OrbitModel(obs, SystemSpec(light_time=True)))
    without = find_start(OrbitModel(obs, SystemSpec(light_time=False)))
    assert without.chi2 > with_lt.chi2 + 100
    assert with_lt.chi2 < 2 * 2 * len(obs.astrometry)


@pytest.mark.slow  # a statistical or end-to-end check: .ci/run runs it second
def test_same_seed_repeats_the_run(binary_file):
    path, _ = binary_file
    obs = massfit.read_observations(path)
    runs = [massfit.fit(obs, parallax="25 mas", parallax_err="0.25 mas", seed=9,
                        max_steps=1000, progress=False) for _ in range(2)]
    assert np.array_equal(runs[0].chain.samples, runs[1].chain.samples)
    other = massfit.fit(obs, parallax="25 mas", parallax_err="0.25 mas", seed=10,
                        max_steps=1000, progress=False)
    assert not np.array_equal(runs[0].chain.samples, other.chain.samples)


def _aliased_moons():
    """Two invented moons seen once every 4 days: the inner one (3.71 d) is aliased."""
    import os
    import tempfile

    from massfit.scenarios.simulate import Elements, simulate_astrometry, write_scenario

    rng = np.random.default_rng(2)
    elements = {"Kiv": Elements(period=3.71, ecc=0.02, inc=70.0, omega=10.0, node=40.0,
                                periapsis_time=2460001.3),
                "Lume": Elements(period=11.3, ecc=0.05, inc=71.0, omega=100.0, node=41.0,
                                 periapsis_time=2460003.1)}
    t0 = 2460000.5 + np.arange(0, 100, 4.0) + 0.1 * rng.random(25)
    times = {k: Time(t0 + 0.01 * i, format="jd", scale="tdb")
             for i, k in enumerate(elements)}
    table = simulate_astrometry(times, elements, 5e-4, error=200 * u.km, seed=3)
    folder = tempfile.mkdtemp()
    write_scenario(folder, table, {}, name="a.ecsv")
    return massfit.read_observations(os.path.join(folder, "a.ecsv"))


def test_shared_mass_picks_the_right_alias():
    # Seen every 4 d, the 3.71 d moon fits equally well at its alias near 51 d; only
    # the mass shared with the outer moon tells them apart.
    from massfit.model.orbit_model import OrbitModel
    from massfit.model.specs import SystemSpec
    from massfit.start.search import find_start

    model = OrbitModel(_aliased_moons(), SystemSpec())
    start = find_start(model)
    phys = model.physical(start.theta)
    assert phys["companions"]["Kiv"]["period"][0] == pytest.approx(3.71, rel=1e-3)
    assert phys["central_mass"][0] == pytest.approx(5e-4, rel=1e-2)
    assert start.chi2 < 150  # 100 measured values


def test_poor_fit_is_flagged():
    # Negative control for the goodness-of-fit verdict: errors stated 5x too small.
    from massfit.summarise.adequacy import assess, fit_quality, quality_warnings
    from massfit.model.orbit_model import OrbitModel
    from massfit.model.specs import SystemSpec
    from massfit.start.search import find_start

    obs = _aliased_moons()
    model = OrbitModel(obs, SystemSpec())
    good = fit_quality(assess(model, find_start(model).theta))
    assert good["verdict"] == "good" and quality_warnings(good) == []
    obs.astrometry.east_err /= 5
    obs.astrometry.north_err /= 5
    tight = OrbitModel(obs, SystemSpec())
    poor = fit_quality(assess(tight, find_start(tight).theta))
    assert poor["verdict"] == "poor" and poor["p_value"] < 1e-4
    # chi^2 grows by 25 when every error shrinks 5-fold (same residuals, to the fit).
    assert poor["chi2"] == pytest.approx(25 * good["chi2"], rel=0.2)
    assert "poor" in quality_warnings(poor)[0]


@pytest.fixture(scope="module")
def wren_start(wren_observations):
    """The Wren set's model maker and its start on every row, the ordinary way."""
    from massfit.model.orbit_model import OrbitModel
    from massfit.model.specs import SystemSpec
    from massfit.run import distance_prior
    from massfit.start.search import find_start

    obs, _ = wren_observations
    spec = SystemSpec(parallax=distance_prior(parallax="25.0 mas", key_prefix=""))
    return (lambda: OrbitModel(obs, spec)), find_start(OrbitModel(obs, spec))


def test_big_data_sets_are_searched_on_a_subset_and_polished_on_all_rows(
        wren_start, monkeypatch):
    # The single-companion search looks at a seeded random subset of a big companion's
    # rows (4000 in use; 12 here, on 30 rows, to test it quickly); the joint polish
    # uses every row, and its chi^2 is over all of them.
    from massfit.start import scan
    from massfit.start.search import find_start

    new_model, full = wren_start
    monkeypatch.setattr(scan, "SEARCH_ROWS", 12)
    model = new_model()
    start = find_start(model)
    assert start.per_companion["Wren"]["rows"] == 12
    assert full.per_companion["Wren"]["rows"] == 30
    phys = model.physical(start.theta)
    assert phys["companions"]["Wren"]["period"][0] == pytest.approx(3650.0, rel=0.05)
    # The same solution as the search on every row, and a chi^2 over all 60 values.
    assert start.chi2 == pytest.approx(full.chi2, rel=1e-4, abs=1e-3)
    assert 20 < start.chi2 < 110


def test_big_data_steps_by_lsmr_reach_the_same_start(wren_start, monkeypatch):
    # Beyond 5e6 Jacobian elements the start's least squares steps with LSMR instead of
    # an SVD (memory); forced here on 30 rows, it must end at the same solution.
    from massfit.start import least_squares
    from massfit.start.search import find_start

    new_model, exact = wren_start
    monkeypatch.setattr(least_squares, "_EXACT_ELEMENTS", 0)
    model = new_model()
    assert least_squares._trust_region_solver(model) == "lsmr"
    lsmr = find_start(model)
    assert lsmr.chi2 == pytest.approx(exact.chi2, rel=1e-3)
    mass = model.physical(lsmr.theta)["central_mass"][0]
    assert mass == pytest.approx(model.physical(exact.theta)["central_mass"][0], rel=1e-3)

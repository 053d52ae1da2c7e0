"""Posterior checks: separated modes (period aliases) and prior sensitivity."""

import astropy.units as u
import numpy as np
import pytest
from astropy.time import Time

import massfit
from massfit.summarise.posterior_checks import posterior_modes, prior_sensitivity, split_modes
from massfit.model.specs import CompanionSpec, SystemSpec
from massfit.model.orbit_model import OrbitModel
from massfit.priors import LogUniform
from massfit.run import assemble_result
from massfit.sample.chain import SamplerSettings, run_sampler
from massfit.scenarios.simulate import Elements, simulate_astrometry, write_scenario
from massfit.start.result import Start
from massfit.start.search import find_start

from conftest import write_one_companion


# ------------------------------------------------------------------- split_modes
def test_split_modes_finds_separated_groups_and_only_those():
    rng = np.random.default_rng(5)
    three = np.concatenate([rng.normal(0.0, 0.01, 5000), rng.normal(0.1, 0.01, 3000),
                            rng.normal(0.2, 0.01, 2000)])
    ranges = split_modes(three)
    assert len(ranges) == 3
    assert [lo < c < hi for (lo, hi), c in zip(ranges, (0.0, 0.1, 0.2))] == [True] * 3
    # Negative controls: one mode, heavy tails, flat, skewed, and two modes that
    # overlap (3 sigma apart) are all one group.
    for sample in (rng.normal(0, 1, 20000), rng.standard_t(2, 20000),
                   rng.uniform(0, 1, 20000), rng.exponential(1, 20000),
                   np.concatenate([rng.normal(0, 1, 5000), rng.normal(3, 1, 5000)])):
        assert len(split_modes(sample)) == 1


# ------------------------------------------------------------ an aliased system
@pytest.fixture(scope="module")
def aliased(tmp_path_factory):
    """Nightly epochs at nearly the same hour: P = 4 d and P = 0.8 d fit alike.

    At whole-day spacing a frequency f and f + 1/d give the same positions; here the
    epochs wander by 0.003 d, so the alias is nearly, not exactly, as good. The
    central masses of the two differ by (4 / 0.8)^2 = 25.
    """
    rng = np.random.default_rng(3)
    t = 2460200.5 + np.arange(12) + rng.normal(0.0, 0.003, 12)
    elements = {"Vesk": Elements(period=4.0, ecc=0.05, inc=40.0, omega=10.0, node=60.0,
                                 periapsis_time=2460201.0)}
    table = simulate_astrometry({"Vesk": Time(t, format="jd", scale="tdb")}, elements,
                                0.5, error=0.0005 * u.au, seed=9)
    folder = tmp_path_factory.mktemp("aliased")
    write_scenario(folder, table, {}, name="vesk.ecsv")
    obs = massfit.read_observations(folder / "vesk.ecsv")
    spec = SystemSpec(central_mass=LogUniform(1e-3, 100.0), companions={
        "Vesk": CompanionSpec("Vesk", period=LogUniform(0.5, 10.0))})
    model = OrbitModel(obs, spec)
    start = find_start(model)
    # The best solution of each alias alone, carried into the joint model's coordinates.
    points = []
    for low, high in ((3.0, 5.0), (0.7, 0.9)):
        narrow = SystemSpec(central_mass=spec.central_mass, companions={
            "Vesk": CompanionSpec("Vesk", period=LogUniform(low, high))})
        sub = OrbitModel(obs, narrow)
        best = find_start(sub).theta
        phys = sub.physical(best)
        values = {"central_mass": float(phys["central_mass"][0]),
                  "Vesk": {k: float(v[0]) for k, v in phys["companions"]["Vesk"].items()}}
        points.append(model.from_physical(values))
    return model, start, points


def _ball(model, centres, n, rng):
    out = []
    for k in range(n):
        centre = centres[k % len(centres)]
        while True:
            trial = centre + 1e-5 * rng.standard_normal(model.n_dim)
            if np.isfinite(model.log_prob(trial[None, :])[0]):
                out.append(trial)
                break
    return np.array(out)


def test_walkers_stuck_in_two_aliases_are_reported_and_not_converged(aliased):
    model, start, (four_days, alias) = aliased
    assert np.isfinite(model.log_prob(np.array([four_days, alias]))).all()
    settings = SamplerSettings(walkers=20, max_steps=1500, check_every=500, seed=2,
                               progress=False)
    initial = _ball(model, [four_days, alias], 20, np.random.default_rng(1))
    chain = run_sampler(model.log_prob, initial, settings)
    modes = {m["parameter"]: m for m in posterior_modes(model, chain)}
    assert set(modes) == {"Vesk.period", "central_mass"}
    periods = sorted(m["median"] for m in modes["Vesk.period"]["modes"])
    assert periods == pytest.approx([0.8, 4.0], rel=0.01)
    masses = sorted(m["median"] for m in modes["central_mass"]["modes"])
    assert masses[1] / masses[0] == pytest.approx(25.0, rel=0.05)
    chain.converged = True  # even a chain that passed the autocorrelation test...
    result = assemble_result(model, chain, start, settings)
    assert not modes["Vesk.period"]["walkers_cross"]
    assert result.converged is False  # ...is not converged with unmixed modes
    assert result.summary["posterior_modes"]
    assert any("separated modes" in w for w in result.summary["warnings"])
    assert "separated modes" in result.report()


def test_one_mode_raises_no_flag(aliased):
    model, start, (four_days, _) = aliased
    settings = SamplerSettings(walkers=20, max_steps=1500, check_every=500, seed=2,
                               progress=False)
    chain = run_sampler(model.log_prob, _ball(model, [four_days], 20,
                                              np.random.default_rng(1)), settings)
    assert posterior_modes(model, chain) == []
    result = assemble_result(model, chain, start, settings)
    assert result.summary["posterior_modes"] == []
    assert result.converged == chain.converged


# ------------------------------------------------------------- prior sensitivity
def test_reweighting_matches_the_gaussian_tilt(small_data_file):
    """For ln M ~ N(mu, s^2), reweighting by M (uniform instead of log-uniform) moves
    the median of ln M by s^2: the standard result for an exponentially tilted
    Gaussian. In units of the 68 % half-width (s) the shift is s."""
    obs = massfit.read_observations(small_data_file)
    model = OrbitModel(obs, SystemSpec())
    theta = find_start(model).theta
    rng = np.random.default_rng(0)
    for s, sensitive in ((0.2, False), (1.0, True)):
        samples = np.tile(theta, (200_000, 1))
        samples[:, 0] = theta[0] + s / np.log(10) * rng.standard_normal(200_000)
        check = prior_sensitivity(model, samples)
        assert check["median_shift"] == pytest.approx(s, abs=0.02)
        assert check["width_ratio"] == pytest.approx(1.0, abs=0.02)
        assert check["sensitive"] is sensitive


def _true_theta(model, name, elements, central_mass):
    """The true parameters in the model's coordinates, with its windows centred there."""
    t_ref = model.epoch_jd + model.reference_epoch(name)
    orbit = {"period": elements["period"], "ecc": elements["ecc"],
             "omega": np.radians(elements["omega"]), "inc": np.radians(elements["inc"]),
             "node": np.radians(elements["node"]), "mass": 0.0,
             "mean_anomaly_ref": 2 * np.pi * (t_ref - elements["periapsis_time"])
             / elements["period"]}
    theta = model.from_physical({"central_mass": central_mass, name: orbit})
    model.recentre(theta)
    return model.from_physical({"central_mass": central_mass, name: orbit})


@pytest.mark.parametrize("span, error, flagged", [(30.0, 0.2, True), (260.0, 0.01, False)])
def test_prior_sensitivity_flags_a_short_arc_and_not_a_good_orbit(tmp_path, span, error,
                                                                 flagged):
    """A quarter of an orbit with large errors leaves the mass to the prior; two orbits
    with small errors do not. Sampled from the truth (the start search is not what
    is tested here), 1500 steps of 16 walkers."""
    path = write_one_companion(tmp_path, span=span, epochs=10, error=error)
    spec = SystemSpec(central_mass=LogUniform(0.01, 100.0), companions={
        "Quill": CompanionSpec("Quill", period=LogUniform(10.0, 1e4))})
    model = OrbitModel(massfit.read_observations(path), spec)
    truth = _true_theta(model, "Quill", dict(period=118.0, ecc=0.15, inc=55.0, omega=70.0,
                                             node=20.0, periapsis_time=2460130.0), 0.9)
    settings = SamplerSettings(walkers=16, max_steps=1500, check_every=500, seed=3,
                               progress=False)
    chain = run_sampler(model.log_prob, _ball(model, [truth], 16, np.random.default_rng(2)),
                        settings)
    start = Start(theta=truth, chi2=0.0, covariance=np.eye(model.n_dim))
    result = assemble_result(model, chain, start, settings)
    assert result.summary["prior_sensitivity"]["sensitive"] is flagged
    assert any("depends on the prior" in w for w in result.summary["warnings"]) is flagged


def test_a_mass_against_the_prior_edge_is_flagged(small_data_file):
    """Samples piled against a bound of the prior: the bound, not the data, sets the
    interval. A Gaussian in log M centred on the upper bound and cut there, narrow
    enough that reweighting alone would not notice (negative control: the same
    Gaussian well inside the prior)."""
    obs = massfit.read_observations(small_data_file)
    spec = SystemSpec(central_mass=LogUniform(0.5, 2.5))
    model = OrbitModel(obs, spec)
    theta = find_start(model).theta
    rng = np.random.default_rng(1)
    top = np.log10(2.5)
    for centre, flagged in ((top, True), (top - 0.3, False)):
        values = centre + 0.05 * rng.standard_normal(200_000)
        values = values[values < top]
        samples = np.tile(theta, (values.size, 1))
        samples[:, 0] = values
        check = prior_sensitivity(model, samples)
        assert abs(check["median_shift"]) < 0.5
        assert (check["at_prior_edge"] > 0.05) is flagged
        assert check["sensitive"] is flagged


def test_a_mass_that_fills_its_prior_is_flagged(small_data_file):
    """Samples spread over the whole log-uniform prior (the data left it as it was):
    their standard deviation is that of the prior, 0.699 / sqrt(12) in log10 M. Not
    at an edge, and reweighting to a uniform prior moves such a hump little; only the
    comparison with the prior's own spread sees it. Negative control: the same
    hump five times narrower."""
    obs = massfit.read_observations(small_data_file)
    model = OrbitModel(obs, SystemSpec(central_mass=LogUniform(0.5, 2.5)))
    theta = find_start(model).theta
    rng = np.random.default_rng(4)
    low, high = np.log10(0.5), np.log10(2.5)
    centre = 0.5 * (low + high)
    for half_width, flagged in ((0.3, True), (0.06, False)):
        values = centre + half_width * (rng.beta(2, 2, 100_000) - 0.5) * 2
        samples = np.tile(theta, (values.size, 1))
        samples[:, 0] = values
        check = prior_sensitivity(model, samples)
        # A Beta(2, 2) hump of half-width h has sd h / sqrt(5); the prior's is 0.202.
        expected = half_width / np.sqrt(5) / ((high - low) / np.sqrt(12))
        assert check["width_of_prior"] == pytest.approx(expected, rel=0.02)
        # Neither the edge nor the reweighting sees it: only the spread flags it.
        assert check["at_prior_edge"] < 0.05 and abs(check["median_shift"]) < 0.5
        assert 1 / 1.5 < check["width_ratio"] < 1.5
        assert check["sensitive"] is flagged

"""Period aliases of sparse sampling: found, weighed by posterior mass, never hidden.

A companion observed once a year shows its period P and the aliases of the yearly
cadence, 1/P +- 1/yr. The start must find them all (one of them lies below half the
sampling interval, where a plain periodogram grid stops), weigh them by their
posterior mass rather than their chi^2, and a fit whose walkers visit only one of
several weighty modes must not be called converged.
"""

import json
import subprocess
import sys

import numpy as np
import pytest
from scipy.stats import multivariate_normal

import massfit
from massfit.start.aliases import candidate_periods, sampling_cadences, window_power
from massfit.model.orbit_model import OrbitModel
from massfit.start.modes import (MIN_WEIGHT, chain_census, laplace_log_mass, laplace_weights,
                           merge_same_modes, unexplored)
from massfit.priors import LogUniform
from massfit.scenarios.examples import TAMSIN_CADENCE, TAMSIN_PERIOD, tamsin
from massfit.scenarios.simulate import write_scenario
from massfit.start.search import find_start

from conftest import invented_binary

YEAR = TAMSIN_CADENCE
#: The invented system (massfit.scenarios.examples.tamsin): 'Tamsin' about a 1.15 M_sun star at
#: 25 mas, P = 305 d, seen on 12 nights one year apart (dates wander by 8 d); errors of
#: 3.5 mas on an orbit of about 23 mas. The cadence's aliases of 1/305 d are 1/1849 d
#: and 1/166 d.
TRUE_PERIOD = TAMSIN_PERIOD
ALIASES = (TRUE_PERIOD, 1.0 / (1.0 / TRUE_PERIOD - 1.0 / YEAR),
           1.0 / (1.0 / TRUE_PERIOD + 1.0 / YEAR))


def write_yearly(folder):
    table, truth = tamsin()
    write_scenario(folder, table, truth, name="tamsin.ecsv")
    return folder / "tamsin.ecsv"


@pytest.fixture(scope="module")
def yearly_file(tmp_path_factory):
    return write_yearly(tmp_path_factory.mktemp("yearly"))


@pytest.fixture(scope="module")
def yearly_start(yearly_file):
    model = OrbitModel(massfit.read_observations(yearly_file),
                       massfit.SystemSpec(parallax=massfit.Fixed(25.0)))
    return model, find_start(model)


def _weight_near(modes, period):
    near = [m for m in modes if abs(m["periods"]["Tamsin"] / period - 1) < 0.02]
    return near[0]["weight"] if near else 0.0


# ------------------------------------------------------------ the period search
def test_yearly_cadence_and_its_aliases_below_half_the_spacing():
    rng = np.random.default_rng(1)
    t = YEAR * np.arange(12) + rng.normal(0.0, 5.0, 12)
    freq = np.linspace(1.0 / 3000.0, 1.0 / 150.0, 4000)
    cadences = sampling_cadences(t, freq, top_frequency=1.0)
    assert cadences[0] == pytest.approx(1.0 / YEAR, rel=0.01)
    # The window is 1 at zero frequency (its definition) and strong at the cadence.
    assert window_power(t, np.array([0.0]))[0] == pytest.approx(1.0)
    y = np.sin(2 * np.pi * t / TRUE_PERIOD)
    series = [(y, np.full(12, 0.1))]
    periods = candidate_periods(t, series, LogUniform(1.0, 1e5))
    spacing = np.min(np.diff(t))
    below = [p for p in periods if p < 0.5 * spacing]
    assert any(abs(p / ALIASES[2] - 1) < 0.01 for p in below)  # 1/P + 1/yr
    assert any(abs(p / ALIASES[1] - 1) < 0.01 for p in periods)  # 1/P - 1/yr
    # Negative control: times with no cadence make no aliases to search.
    random_t = np.sort(rng.uniform(0.0, 12 * YEAR, 12))
    assert sampling_cadences(random_t, freq, top_frequency=1.0).size == 0


def test_compiled_grid_periodograms_equal_astropys_exact_sums():
    # Reference: astropy's LombScargle with its exact ('cython') sums, floating mean and
    # 'standard' normalisation (Zechmeister & Kuerster 2009, A&A 496, 577, the
    # generalised periodogram); the spectral window against its defining sum.
    from astropy.timeseries import LombScargle

    from massfit.start.aliases import grid_power, grid_window

    rng = np.random.default_rng(4)
    t = np.sort(rng.uniform(0.0, 3000.0, 70))
    t[::9] += 0.04  # close pairs, as in nights with two exposures
    sig = rng.uniform(0.2, 0.6, t.size)
    east = np.sin(2 * np.pi * t / 455.0) + rng.normal(0.0, sig)
    north = 0.5 * np.cos(2 * np.pi * t / 455.0) + rng.normal(0.0, sig)
    freq = np.linspace(1.0 / 9000.0, 4.0, 30_001)  # past several reseeds of the recurrence
    compiled = grid_power(t, [(east, sig), (north, sig)], freq)
    exact = sum(LombScargle(t, values, sig).power(freq, method="cython")
                for values in (east, north))
    assert np.max(np.abs(compiled - exact)) < 1e-9
    assert np.argmax(compiled) == np.argmax(exact)
    assert np.max(np.abs(grid_window(t, freq) - window_power(t, freq))) < 1e-10


def test_the_search_stays_inside_a_narrow_prior():
    t = YEAR * np.arange(12) + np.random.default_rng(2).normal(0.0, 5.0, 12)
    y = np.sin(2 * np.pi * t / TRUE_PERIOD)
    box = LogUniform(150.0, 200.0)  # narrower than the plain grid's own range
    periods = candidate_periods(t, [(y, np.full(12, 0.1))], box)
    assert periods and all(150.0 <= p <= 200.0 for p in periods)


# ------------------------------------------------------- weighing the modes
def test_start_finds_the_three_aliases_and_ranks_them_by_posterior_mass(yearly_start):
    model, start = yearly_start
    modes = start.candidate_modes
    weights = [_weight_near(modes, p) for p in ALIASES]
    assert all(w > MIN_WEIGHT for w in weights), weights
    assert [m["weight"] for m in modes] == sorted((m["weight"] for m in modes),
                                                  reverse=True)
    assert sum(m["weight"] for m in modes) == pytest.approx(1.0)
    assert modes[0]["started"] and not any(m["started"] for m in modes[1:])
    # The central masses follow Kepler's third law at nearly one semi-major axis.
    masses = {round(m["periods"]["Tamsin"]): m["central_mass"] for m in modes}
    long_p = min(masses, key=lambda p: abs(p - ALIASES[1]))
    short_p = min(masses, key=lambda p: abs(p - ALIASES[2]))
    assert masses[short_p] > 2 * masses[round(modes[0]["periods"]["Tamsin"])]
    assert masses[long_p] < 0.1
    # The weights are not the chi^2 ranking: the 1825-d alias fits worse than the
    # 166-d one but holds more of the posterior (its log-uniform prior volume is
    # larger), so ranking by delta chi^2 alone would order them the other way.
    by_p = {round(m["periods"]["Tamsin"]): m for m in modes}
    long_mode, short_mode = by_p[long_p], by_p[short_p]
    assert long_mode["chi2"] > short_mode["chi2"]
    assert long_mode["weight"] > short_mode["weight"]


def test_walkers_in_one_alias_make_the_fit_unconverged(yearly_start):
    model, start = yearly_start
    rng = np.random.default_rng(0)
    initial = start.walkers(model, 32, rng)
    census = chain_census(model, start.candidate_modes, initial)
    missing = unexplored(census)
    for alias in ALIASES[1:]:
        assert any(abs(m["periods"]["Tamsin"] / alias - 1) < 0.02 for m in missing)
    # Negative control: samples drawn in every mode leave nothing unexplored.
    everywhere = []
    for mode in start.candidate_modes:
        theta = model.from_physical({"central_mass": mode["central_mass"], "Tamsin": {
            "period": mode["periods"]["Tamsin"], "ecc": 0.2, "omega": 1.0, "inc": 1.0,
            "node": 0.5, "mean_anomaly_ref": 0.0}})
        everywhere.append(theta)
    assert unexplored(chain_census(model, start.candidate_modes, np.array(everywhere))) == []


@pytest.mark.slow  # 22 s: a whole CLI fit; the API-level tests above stay in the default run
def test_cli_yearly_set_is_not_converged_and_names_the_modes(yearly_file, tmp_path):
    """Before: converged: true, exit 0, one mode. After: three modes weighed, exit 3."""
    out = tmp_path / "out"
    proc = subprocess.run([sys.executable, "-m", "massfit", "fit", str(yearly_file),
                           "--parallax", "25 mas", "--out", str(out), "--seed", "1",
                           "--max-steps", "3000", "--check-every", "250", "--no-plots",
                           "--quiet"], capture_output=True, text=True, timeout=600)
    assert proc.returncode == 3, proc.stderr
    summary = json.loads((out / "summary.json").read_text())
    assert summary["converged"] is False
    modes = summary["candidate_modes"]
    assert all(_weight_near(modes, p) > MIN_WEIGHT for p in ALIASES)
    assert [m["visited"] for m in modes if m["weight"] > MIN_WEIGHT] == [True, False, False]
    assert "Laplace" in summary["candidate_modes_basis"]["weight"]
    text = " ".join(summary["warnings"])
    assert "never visited 2 mode(s)" in text and "period_prior" in text
    assert "--sampler nested" in text  # the report proposes the engine that weighs them
    # The autocorrelation test itself passed: the missed modes are why it failed.
    assert not any(w.startswith("not converged after") for w in summary["warnings"])
    assert "NOT visited" in proc.stdout


def test_well_sampled_orbit_has_one_mode(tmp_path):
    """Negative control: 30 epochs over most of an orbit leave no weighty alias."""
    table, _ = invented_binary()
    write_scenario(tmp_path, table, None, name="wren.ecsv")
    model = OrbitModel(massfit.read_observations(tmp_path / "wren.ecsv"),
                       massfit.SystemSpec(parallax=massfit.Fixed(25.0)))
    start = find_start(model)
    heavy = [m for m in start.candidate_modes if m["weight"] > MIN_WEIGHT]
    assert len(heavy) == 1 and heavy[0]["started"]
    assert heavy[0]["periods"]["Wren"] == pytest.approx(3650.0, rel=0.05)


# ------------------------------------------------ the Laplace mass itself
def test_laplace_mass_is_the_linear_gaussian_evidence():
    """Bayesian linear regression: y = X w + noise (sd s), prior w ~ N(0, t^2 I).

    The evidence is N(y; 0, s^2 I + t^2 X X^T) (the textbook marginal likelihood,
    e.g. Bishop 2006, *Pattern Recognition and Machine Learning*, eq. 3.86), and the
    Laplace approximation is exact for this Gaussian posterior.
    """
    rng = np.random.default_rng(7)
    n, d, s, t = 25, 3, 0.4, 2.0
    x = rng.normal(size=(n, d))
    y = x @ np.array([1.0, -0.5, 0.3]) + s * rng.normal(size=n)
    evidence = multivariate_normal(np.zeros(n), s ** 2 * np.eye(n)
                                   + t ** 2 * x @ x.T).logpdf(y)

    def log_prob(w):
        resid = y[None, :] - w @ x.T
        like = -0.5 * np.sum(resid ** 2, axis=1) / s ** 2 - n * np.log(s * np.sqrt(2 * np.pi))
        prior = -0.5 * np.sum(w ** 2, axis=1) / t ** 2 - d * np.log(t * np.sqrt(2 * np.pi))
        return like + prior

    precision = x.T @ x / s ** 2 + np.eye(d) / t ** 2
    peak = np.linalg.solve(precision, x.T @ y / s ** 2)
    got = laplace_log_mass(log_prob, peak, np.linalg.inv(precision))
    assert got == pytest.approx(evidence, abs=1e-8)
    # Negative control: the peak height alone misses the volume term by a lot.
    assert abs(log_prob(peak[None, :])[0] - evidence) > 1.0


def test_laplace_weights_of_a_gaussian_mixture():
    """Separated 2-D Gaussians with weights 0.7 / 0.3 and unequal widths: the mixture's
    weights are known exactly; the peak heights alone give the wrong ones."""
    comps = [(0.7, np.array([0.0, 0.0]), np.diag([0.04, 0.01])),
             (0.3, np.array([5.0, 3.0]), np.array([[0.25, 0.1], [0.1, 0.16]]))]

    def log_prob(points):
        dens = sum(w * multivariate_normal(m, c).pdf(points) for w, m, c in comps)
        return np.log(np.atleast_1d(dens))

    masses = [laplace_log_mass(log_prob, m, c) for _, m, c in comps]
    assert laplace_weights(masses) == pytest.approx([0.7, 0.3], abs=1e-6)
    heights = [log_prob(m[None, :])[0] for _, m, _ in comps]
    assert laplace_weights(heights)[0] > 0.9  # negative control: not 0.7


def test_a_degenerate_direction_is_bounded_by_the_prior_box():
    """Flat in one coordinate over a box of width L: the box's variance L^2 / 12 stands
    in for the missing curvature (exact integral: ln L + the Gaussian part; the
    stand-in errs by 0.5 ln(pi / 6) = -0.32)."""
    width = 4.0

    def log_prob(points):
        inside = np.abs(points[:, 1]) <= width / 2
        return np.where(inside, -0.5 * points[:, 0] ** 2, -np.inf)

    singular = np.array([[1.0, 0.0], [0.0, 0.0]])
    exact = 0.5 * np.log(2 * np.pi) + np.log(width)
    got = laplace_log_mass(log_prob, np.zeros(2), singular, widths=[np.inf, width])
    assert got == pytest.approx(exact + 0.5 * np.log(np.pi / 6), abs=1e-9)
    assert laplace_log_mass(log_prob, np.zeros(2), singular) == -np.inf


def test_one_ridge_polished_twice_is_one_mode():
    def mode(period, sd, mass):
        return {"periods": {"b": period}, "log10_period_sd": {"b": sd},
                "log_laplace_mass": mass}
    same = merge_same_modes([mode(100.0, 0.01, 1.0), mode(101.0, 0.01, 2.0)])
    assert len(same) == 1 and same[0]["periods"]["b"] == 101.0
    apart = merge_same_modes([mode(100.0, 0.001, 1.0), mode(110.0, 0.001, 1.0)])
    assert [m["weight"] for m in apart] == pytest.approx([0.5, 0.5])


# ------------------------------------------------- each mode sampled on its own
def _points_in_modes(model, start, per_mode, rng):
    """Samples near each mode's least-squares solution (model coordinates)."""
    points = []
    for mode in start.candidate_modes:
        theta = model.from_physical({"central_mass": mode["central_mass"], "Tamsin": {
            "period": mode["periods"]["Tamsin"], "ecc": 0.2, "omega": 1.0, "inc": 1.0,
            "node": 0.5, "mean_anomaly_ref": 0.0}})
        points.append(theta + 1e-9 * rng.standard_normal((per_mode, theta.size)))
    return np.concatenate(points)


def test_mass_over_modes_is_the_weighted_mixture(yearly_start):
    """Every mode visited, each a near point mass M_k of weight w_k: the mixture's
    quantiles are where the cumulative weights, ordered by mass, cross them."""
    from massfit.modechains import weigh_modes
    from massfit.sample.chain import SamplerSettings

    model, start = yearly_start
    samples = _points_in_modes(model, start, 500, np.random.default_rng(3))
    census = chain_census(model, start.candidate_modes, samples)
    heavy = [m for m in census if m["weight"] >= MIN_WEIGHT]
    over = weigh_modes(model, samples, census, start.candidate_modes, None,
                       SamplerSettings(seed=1), fit=massfit.fit)
    weights = np.array([m["weight"] for m in heavy]) / sum(m["weight"] for m in heavy)
    assert over["weights"] == pytest.approx(list(weights))
    masses = np.array([m["central_mass"] for m in heavy])
    order = np.argsort(masses)
    cdf = np.cumsum(weights[order])
    block = over["central_mass_solar"]
    for key, q in (("lower_95", 0.02275), ("lower_68", 0.15865), ("median", 0.5),
                   ("upper_68", 0.84135), ("upper_95", 0.97725)):
        expected = masses[order][np.searchsorted(cdf, q)]
        assert block[key] == pytest.approx(expected, rel=1e-6), key
    assert "approximation" in over["approximation"]
    # Negative control: with equal weights the 16th percentile would be the lightest
    # mode's mass, not the heaviest-weight mode's.
    equal_cdf = np.cumsum(np.full(len(heavy), 1.0 / len(heavy)))
    assert masses[order][np.searchsorted(equal_cdf, 0.15865)] != pytest.approx(
        block["lower_68"], rel=1e-3)


@pytest.mark.slow  # a chain in each box: 20 s
def test_an_unvisited_mode_gets_its_own_chain_in_its_box(yearly_start, yearly_file):
    from massfit.modechains import boxed_spec, weigh_modes
    from massfit.sample.chain import SamplerSettings

    model, start = yearly_start
    rng = np.random.default_rng(4)
    started = start.candidate_modes[0]
    samples = _points_in_modes(model, start, 300, rng)[:300]  # the started mode only
    census = chain_census(model, start.candidate_modes, samples)
    observations = massfit.read_observations(yearly_file)
    over = weigh_modes(model, samples, census, start.candidate_modes, observations,
                       SamplerSettings(seed=2, max_steps=400, check_every=200,
                                       progress=False), fit=massfit.fit)
    for mode, full in zip(census, start.candidate_modes):
        if mode["weight"] < MIN_WEIGHT:
            continue
        chain = mode["chain"]
        assert chain["sampled"] == ("main chain" if full is started
                                    else "own chain in its period box")
        period = chain["period"]["Tamsin"]
        assert period["lower_95"] <= full["periods"]["Tamsin"] <= period["upper_95"]
        if full is not started:
            low, high = chain["boxes_days"]["Tamsin"]
            others = [c["periods"]["Tamsin"] for c in start.candidate_modes if c is not full]
            assert low < full["periods"]["Tamsin"] < high
            assert not any(low < p < high for p in others)
            spec = boxed_spec(model, full, [c for c in start.candidate_modes
                                            if c is not full])
            assert spec.companions["Tamsin"].period.low == pytest.approx(low)
    assert over["modes"] == 3
    assert over["central_mass_solar"]["lower_95"] < 0.1 < 3.0 < \
        over["central_mass_solar"]["upper_95"]


def test_laplace_weights_agree_with_importance_sampling(yearly_start, yearly_file):
    """Each mode's mass integrated by importance sampling from a heavy-tailed
    (Student t, 4 degrees of freedom) proposal about it, in its own period box: the
    Laplace weights agree within 0.03. The weights by chi^2 alone (no volume term),
    the negative control, miss the 1825-d mode's weight by more than 0.08."""
    from scipy.stats import multivariate_t

    from massfit.modechains import boxed_spec

    model, start = yearly_start
    observations = massfit.read_observations(yearly_file)
    heavy = [m for m in start.candidate_modes if m["weight"] > MIN_WEIGHT]
    rng = np.random.default_rng(5)
    sampled = []
    for mode in heavy:
        spec = boxed_spec(model, mode, [c for c in start.candidate_modes if c is not mode])
        box_model = OrbitModel(observations, spec)
        box_start = find_start(box_model)
        proposal = multivariate_t(box_start.theta, 1.5 * box_start.covariance, df=4,
                                  allow_singular=True)
        draws = proposal.rvs(size=20_000, random_state=rng)
        model.recentre(box_start.theta)  # the full prior's density, windows about it
        log_w = model.log_prob(draws) - proposal.logpdf(draws)
        top = np.max(log_w)
        sampled.append(top + np.log(np.mean(np.exp(log_w - top))))
    model.recentre(start.theta)
    truth = laplace_weights(sampled)
    got = laplace_weights([m["log_laplace_mass"] for m in heavy])
    assert got == pytest.approx(truth, abs=0.03)
    by_chi2 = laplace_weights([-0.5 * m["chi2"] for m in heavy])
    assert np.max(np.abs(by_chi2 - truth)) > 0.08

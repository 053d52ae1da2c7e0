"""The nested sampler (massfit.sample.nested): its prior, its evidence, its mode weights.

- The prior transform draws the model's prior: each coordinate's draws against the
  prior's own random draws (``Prior.sample``, numpy's generators), KS test.
- The evidence of a linear-Gaussian model against its closed form: with y = A x + noise
  (covariance N) and a normal prior x ~ N(m, S), y is normal with mean A m and
  covariance N + A S A^T, so Z = N(y; A m, N + A S A^T) (Bishop 2006, *Pattern
  Recognition and Machine Learning*, eq. 2.115; the textbook result, from memory).
- Two modes of known weight: a likelihood that is the sum of two separated bumps of
  set masses; the per-box weights must recover them within their errors, and a wrong
  pair of weights must be rejected (the negative control).
"""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pytest
from scipy import stats

from massfit.model.orbit_model import OrbitModel
from massfit.model.specs import SystemSpec, CompanionSpec
from massfit.priors import Fixed, LogUniform, Normal, Uniform
from massfit.sample.nested import NestedSettings, PriorTransform, nested_box, run_nested


def _toy_model(parameters, log_likelihood):
    """The few things the nested engine reads off a model, for a model of its own."""
    params = [SimpleNamespace(name=n, transform=t, prior=p, low=-np.inf, high=np.inf,
                              target=None) for n, t, p in parameters]
    column_of = {p.name: k for k, p in enumerate(params)}
    companions = {n.split(".")[0]: SimpleNamespace(period=p) for n, t, p in parameters
                  if n.endswith(".log10_period")}

    def log_like(theta):
        return np.array([log_likelihood(row) for row in np.atleast_2d(theta)])

    return SimpleNamespace(parameters=params, column_of=column_of, n_dim=len(params),
                           log_likelihood=log_like, log_prob=log_like,
                           companions=companions)


def test_prior_transform_draws_the_model_prior(tmp_path):
    from massfit.scenarios.examples import tamsin
    from massfit.scenarios.simulate import read_back

    table, _ = tamsin(4)
    spec = SystemSpec(parallax=Normal(25.0, 0.5, low=0.0),
                      central_mass=LogUniform(0.1, 10.0),
                      companions={"Tamsin": CompanionSpec(name="Tamsin",
                          period=LogUniform(100.0, 3000.0),
                          eccentricity=Uniform(0.0, 0.8),
                          inclination=Normal(1.0, 0.2, low=0.0, high=np.pi))})
    model = OrbitModel(read_back(table), spec)
    transform = PriorTransform(model)
    rng = np.random.default_rng(3)
    theta = np.array([transform(u) for u in rng.uniform(size=(4000, model.n_dim))])
    assert np.all(np.isfinite(model.log_prior(theta)))  # inside the model's support
    phys = model.physical(theta)
    orbit = phys["companions"]["Tamsin"]
    n = 4000
    # Each against the prior's own draws (an independent generator).
    pairs = [(phys["central_mass"], spec.central_mass), (phys["parallax"], spec.parallax),
             (orbit["period"], spec.companions["Tamsin"].period),
             (orbit["ecc"], spec.companions["Tamsin"].eccentricity),
             (orbit["inc"], spec.companions["Tamsin"].inclination)]
    for values, prior in pairs:
        assert stats.ks_2samp(values, prior.sample(rng, n)).pvalue > 1e-3
    # Omega uniform on the circle; the node and phase uniform over their windows.
    assert stats.kstest(np.mod(orbit["omega"], 2 * np.pi) / (2 * np.pi), "uniform").pvalue > 1e-3
    # The summary's per-mode blocks take each mode's own samples.
    from massfit.summarise.derived import derived_samples
    from massfit.summarise.posterior_checks import weighed_mode_blocks

    short = orbit["period"][:500] < 600.0
    blocks = weighed_mode_blocks([{"probability": 0.5}, {"probability": 0.5}],
                                 [short, ~short], derived_samples(model, theta[:500], seed=1))
    assert blocks[0]["central_mass_solar"]["median"] == pytest.approx(
        np.median(phys["central_mass"][:500][short]), rel=1e-9)
    assert blocks[1]["period"]["Tamsin"]["lower_95"] >= 600.0
    # Negative control: the period against a uniform (not log-uniform) prior fails.
    assert stats.ks_2samp(orbit["period"], Uniform(100.0, 3000.0).sample(rng, n)).pvalue < 1e-6
    # The inverse map and the prior's density in the model's coordinates (used for the
    # Laplace check of ln Z), against the change of variables written out by hand:
    # log10 M and log10 P flat over their decades; the parallax normal; (sqrt e cos w,
    # sqrt e sin w) = r (cos w, sin w) with e = r^2 uniform on [0, 0.8] and w uniform,
    # dx dy = de dw / 2, so the density is 2 / (0.8 * 2 pi); cos i with i normal:
    # p(i) / sin i; the node and phase flat over their windows (pi, 2 pi).
    for u in rng.uniform(0.05, 0.95, size=(3, model.n_dim)):
        point = transform(u)
        assert np.allclose(transform.inverse(point), u, atol=1e-9)
        inc = np.arccos(point[5])
        by_hand = (-np.log(2.0) - np.log(np.log10(30.0))
                   + spec.parallax.log_pdf(np.array([point[1]]))[0]
                   + np.log(2.0 / (0.8 * 2 * np.pi))
                   + spec.companions["Tamsin"].inclination.log_pdf(np.array([inc]))[0]
                   - np.log(np.sin(inc)) - np.log(np.pi) - np.log(2 * np.pi))
        assert transform.log_density(point) == pytest.approx(by_hand, abs=1e-5)


def test_evidence_of_a_linear_gaussian_model():
    rng = np.random.default_rng(11)
    t = np.linspace(-1.0, 1.0, 12)
    design = np.column_stack([np.ones_like(t), t])
    sigma = 0.3
    truth = np.array([0.4, -0.8])
    y = design @ truth + rng.normal(0.0, sigma, t.size)
    mean, sd = np.array([0.0, 0.0]), np.array([1.0, 2.0])

    def log_like(x):
        r = (y - design @ x) / sigma
        return -0.5 * r @ r - t.size * np.log(sigma * np.sqrt(2 * np.pi))

    model = _toy_model([("a", "identity", Normal(0.0, 1.0)),
                        ("b", "identity", Normal(0.0, 2.0))], log_like)
    cov = sigma ** 2 * np.eye(t.size) + design @ np.diag(sd ** 2) @ design.T
    exact = stats.multivariate_normal(design @ mean, cov).logpdf(y)
    run = nested_box(model, NestedSettings(live_points=80), seed=5)
    assert abs(run["log_z"] - exact) < 3 * run["log_z_err"]
    # Negative control: the evidence under a prior twice as wide differs by far more.
    wide = stats.multivariate_normal(design @ mean, sigma ** 2 * np.eye(t.size)
                                     + design @ np.diag((2 * sd) ** 2) @ design.T).logpdf(y)
    assert abs(run["log_z"] - wide) > 3 * run["log_z_err"]


def _two_mode_model(weights, centres, width=0.01):
    """log10 P uniform on [0, 3] (log-uniform P), a nuisance y uniform on [-1, 1]; the
    likelihood two narrow bumps in log10 P of masses ``weights``."""
    # Plain arithmetic (scipy.stats' per-call overhead would dominate the test's time).
    log_w = [np.log(w) - np.log(width * np.sqrt(2 * np.pi)) for w in weights]
    log_y = -np.log(0.2 * np.sqrt(2 * np.pi))

    def log_like(x):
        a = log_w[0] - 0.5 * ((x[0] - centres[0]) / width) ** 2
        b = log_w[1] - 0.5 * ((x[0] - centres[1]) / width) ** 2
        top = max(a, b)
        return (top + np.log(np.exp(a - top) + np.exp(b - top))
                - 0.5 * ((x[1] - 0.1) / 0.2) ** 2 + log_y)

    return _toy_model([("b.log10_period", "log10", LogUniform(1.0, 1000.0)),
                       ("y", "identity", Uniform(-1.0, 1.0))], log_like)


def test_two_modes_of_known_weight(tmp_path, monkeypatch):
    weights, centres = (0.7, 0.3), (0.8, 2.1)
    model = _two_mode_model(weights, centres)
    start = SimpleNamespace(candidate_modes=[
        {"periods": {"b": 10 ** c}, "log10_period_sd": {"b": 0.01}, "weight": 0.5}
        for c in centres])
    settings = NestedSettings(live_points=60, runs=2, seed=2)
    checkpoint = tmp_path / "checkpoint.json"
    chain = run_nested(model, start, settings, checkpoint=checkpoint)
    found = np.array([m["probability"] for m in chain.modes])
    err = np.array([m["probability_err"] for m in chain.modes])
    assert chain.converged and all(m["runs_agree"] for m in chain.modes)
    assert np.all(np.abs(found - weights) < 3 * err)
    # Negative control: the weights swapped are far outside the errors.
    assert np.any(np.abs(found - weights[::-1]) > 3 * err)
    # The draws split between the modes by their weights.
    share = np.mean(chain.samples[:, 0] < 1.5)
    assert abs(share - found[0]) < 0.02
    # The total evidence: sum of the bumps' masses over the prior's width (3 in
    # log10 P), times the nuisance's (its bump's mass over the width 2).
    exact = np.log(sum(weights) / 3.0) + np.log(0.5)
    assert abs(chain.evidence["log_evidence"] - exact) < 3 * chain.evidence["log_evidence_err"]
    # Resuming: the saved runs are taken, only the lost one is repeated, and the result
    # is the uninterrupted one.
    import massfit.sample.nested as nested

    saved = sorted(tmp_path.glob("checkpoint.json.nested-*.npz"))
    assert len(saved) == 4
    saved[-1].unlink()
    repeated = []
    real = nested.nested_box
    monkeypatch.setattr(nested, "nested_box",
                        lambda *a, **k: repeated.append(a[3]) or real(*a, **k))
    again = run_nested(model, start, settings, checkpoint=checkpoint)
    assert len(repeated) == 1
    assert [m["probability"] for m in again.modes] == [m["probability"] for m in chain.modes]
    assert np.array_equal(again.samples, chain.samples)


def test_fixed_priors_and_bad_settings_named():
    from massfit.errors import ConfigError

    assert Fixed(2.0).quantile(np.array([0.1, 0.9])).tolist() == [2.0, 2.0]
    # LogUniform and Normal quantiles invert their cdfs.
    u = np.linspace(0.01, 0.99, 7)
    for prior in (LogUniform(1e-3, 1e4), Normal(3.0, 2.0, low=0.0), Uniform(-2.0, 5.0)):
        assert np.allclose(prior.cdf(prior.quantile(u)), u)
    with pytest.raises(ConfigError, match="live_points"):
        NestedSettings(live_points=3).check()


def _config(tmp_path, name, data_file, sampler=""):
    path = tmp_path / f"{name}.toml"
    path.write_text(f'[data]\nfiles = ["{data_file}"]\n[system]\nparallax = "25 mas"\n'
                    f'{sampler}')
    return path


def test_engine_settings_and_compare_inputs_refused_in_one_line(tmp_path, capsys):
    from massfit.cli.commands import main
    from massfit.config.fit import load_config
    from massfit.scenarios.examples import tamsin

    table, _ = tamsin(4)
    table.write(tmp_path / "a.ecsv", format="ascii.ecsv")
    table[:-1].write(tmp_path / "b.ecsv", format="ascii.ecsv")
    setup = load_config(_config(tmp_path, "n", "a.ecsv",
                                '[sampler]\nengine = "nested"\nlive_points = 60\n'))
    assert setup.engine == "nested" and setup.nested.live_points == 60
    # A circular model for a comparison: a fixed eccentricity of 0 is accepted.
    circular = load_config(_config(tmp_path, "c", "a.ecsv", '[companions.Tamsin]\n'
                                   'eccentricity_prior = {kind = "fixed", value = 0}\n'))
    assert circular.system.companions["Tamsin"].eccentricity.value == 0
    cases = [
        (["fit", str(_config(tmp_path, "e", "a.ecsv", '[sampler]\nengine = "tempered"\n')),
          "--out", str(tmp_path / "o1")], "sampler.engine"),
        (["fit", str(_config(tmp_path, "r", "a.ecsv", '[sampler]\nruns_per_box = 0\n')),
          "--out", str(tmp_path / "o2")], "sampler.runs_per_box"),
        (["fit", str(tmp_path / "a.ecsv"), "--parallax", "25 mas", "--live-points", "50",
          "--out", str(tmp_path / "o4")], "--live-points"),
        (["compare", str(_config(tmp_path, "one", "a.ecsv")),
          str(_config(tmp_path, "two", "b.ecsv")), "--out", str(tmp_path / "o3")],
         "two.toml: data.files"),
    ]
    capsys.readouterr()
    for argv, key in cases:
        assert main(argv) == 2
        err = capsys.readouterr().err
        assert key in err and len(err.strip().splitlines()) == 1, err
    assert not (tmp_path / "o3").exists()


def test_improper_flat_priors_become_named_boxes():
    from dataclasses import replace

    from massfit.config.fit import load_config
    from massfit.read.tables import read_observations
    from massfit.scenarios.examples import PACKAGE_DATA

    setup = load_config(PACKAGE_DATA / "sorrel" / "config.toml")
    obs = read_observations(setup.files, **setup.read_options)
    model = OrbitModel(obs, replace(setup.system, trend="linear"))
    transform = PriorTransform(model)
    flat = [n for n in model.names if n.endswith(".offset") or n.endswith(".slope")]
    assert flat and all(any(n in note for note in transform.notes) for n in flat)
    theta = np.array([transform(u) for u in np.random.default_rng(0).uniform(
        size=(300, model.n_dim))])
    assert np.all(np.isfinite(model.log_prior(theta)))
    # Every instrument's velocities lie well inside its offset's box.
    rv = model.velocity_rows.rv
    for name in flat:
        if name.endswith(".offset"):
            column = theta[:, model.column_of[name]]
            assert column.min() < rv.min() and column.max() > rv.max()


def test_nested_engine_without_dynesty_is_one_config_error(tmp_path, monkeypatch):
    # dynesty is an extra: without it, asking for the nested engine is refused before
    # any fitting, with the command that installs it (no traceback on the CLI).
    import sys

    from massfit import fit
    from massfit.errors import ConfigError

    from conftest import write_one_companion

    path = write_one_companion(tmp_path)
    monkeypatch.setitem(sys.modules, "dynesty", None)  # import dynesty -> ImportError
    with pytest.raises(ConfigError, match=r'massfit\[nested\]'):
        fit(path, engine="nested", progress=False)


def test_fast_likelihood_and_folding_keep_the_same_orbits():
    """The compiled likelihood (the prior's densities left out) equals the model's
    Python log-likelihood; samples folded into windows centred elsewhere keep their
    likelihood (the same orbit on the sky: node + pi with omega + pi, phases by whole
    turns; the astrometric node ambiguity, e.g. Heintz 1978, *Double Stars*, ch. 2,
    from memory), and the windows' edges are no longer straddled."""
    from massfit.scenarios.examples import tamsin
    from massfit.scenarios.simulate import read_back
    from massfit.sample.nested import _log_likelihood, periodic_columns

    table, _ = tamsin(4)
    model = OrbitModel(read_back(table), SystemSpec(parallax=Fixed(25.0)))
    model.recentre(np.array([0.0, 2.5, 0.1, 0.5, 0.4, 0.8, 3.3]))
    rng = np.random.default_rng(2)
    theta = PriorTransform(model)(rng.uniform(size=model.n_dim))
    draws = np.array([PriorTransform(model)(u) for u in rng.uniform(size=(200, 7))])
    fast = _log_likelihood(model)
    slow = model.log_likelihood(draws)
    assert np.allclose([fast(row) for row in draws], slow, rtol=1e-10, atol=1e-9)
    assert fast(theta) == pytest.approx(float(model.log_likelihood(theta[None])[0]))
    # Moved windows: half a turn of node and 0.7 of a turn of phase off.
    model.centres["Tamsin"]["node"] += 1.9
    model.centres["Tamsin"]["phase"] -= 4.4
    folded = model.fold_into_windows(draws)
    assert np.all(np.isfinite(model.log_prior(folded)))
    assert np.allclose(model.log_likelihood(folded), slow, rtol=1e-9, atol=1e-8)
    names = model.names
    assert [names[k] for k in periodic_columns(model)] == ["Tamsin.phase"]
    # The model's log-prior is the proper density for the mass, period and sqrt(e)
    # disc, but leaves the isotropic cos i and the node and phase windows at density
    # 1: a Laplace ln Z exceeds the nested one by ln(2 * pi * 2 pi) per astrometric
    # companion (DEVELOPERS.md). Default priors: log-uniform 1e-12..1e11 M_sun and
    # 0.01..1e9 d, e uniform below 0.99 (uniform density on the disc, 1 / (0.99 pi)).
    proper = -(np.log(23.0) + np.log(11.0) + np.log(0.99 * np.pi) + np.log(2.0)
               + np.log(np.pi) + np.log(2 * np.pi))
    assert np.allclose(model.log_prior(folded), proper + np.log(2 * np.pi * 2 * np.pi),
                       rtol=0, atol=1e-9)


def test_mirror_images_split_the_node_circle_in_halves(tmp_path):
    """With radial velocities the node runs over a whole turn and the two mirror images
    (node, omega) and (node + pi, omega + pi) are two modes: each box is split into the
    two halves of the node circle about the solution's node, each of prior probability
    1/2, that together cover the circle (nothing assumed outside them). Without
    velocities (a half-turn node window) there is nothing to split (the control)."""
    import astropy.units as u
    from astropy.time import Time

    from massfit.read.tables import read_observations
    from massfit.sample.nested_boxes import boxes_of, in_node_half, mirror_bodies
    from massfit.scenarios.examples import tamsin
    from massfit.scenarios.simulate import Elements, read_back, simulate_velocities

    table, _ = tamsin(4)
    elements = {"Tamsin": Elements(period=305.0, ecc=0.18, inc=62.0, omega=120.0,
                                   node=35.0, periapsis_time=2458610.0)}
    rv = simulate_velocities({"Tamsin": Time(2458600.0 + 40.0 * np.arange(6), format="jd",
                                             scale="tdb")}, elements, 1.15,
                             error=5.0 * u.km / u.s, seed=1)
    spec = SystemSpec(parallax=Fixed(25.0))
    alone = OrbitModel(read_back(table), spec)
    assert mirror_bodies(alone) == []
    table.write(tmp_path / "sky.ecsv", format="ascii.ecsv")
    rv.write(tmp_path / "rv.ecsv", format="ascii.ecsv")
    model = OrbitModel(read_observations([tmp_path / "sky.ecsv", tmp_path / "rv.ecsv"]),
                       spec)
    assert mirror_bodies(model) == ["Tamsin"]
    k = model.column_of["Tamsin.node"]
    start = SimpleNamespace(candidate_modes=[], theta=np.zeros(model.n_dim),
                            covariance=np.full((model.n_dim, model.n_dim), np.nan))
    plan = boxes_of(start, model)
    assert len(plan) == 2 and all(mode is None for mode, _ in plan)
    halves = [boxes["Tamsin.node"] for _, boxes in plan]
    nodes = np.linspace(-10.0, 10.0, 2001)
    inside = [in_node_half(nodes, half) for half in halves]
    assert np.all(inside[0] ^ inside[1])  # every node in exactly one half
    rng = np.random.default_rng(4)
    for (_, boxes), half in zip(plan, halves):
        transform = PriorTransform(model, boxes)
        assert transform.log_box_mass == pytest.approx(np.log(0.5))
        assert k in transform.bounded
        drawn = np.array([transform(u)[k] for u in rng.uniform(size=(200, model.n_dim))])
        assert np.all(in_node_half(drawn, half))


def test_a_box_too_narrow_is_widened(monkeypatch):
    """A single solution whose least-squares deviation is 30 times too small: its box
    (10 of those deviations, a third of the bump's) cuts the posterior, whose weight then reaches the box's
    edges; the box is widened until it holds it, and ln Z is the closed form (the bump's
    mass over the prior's 3 decades, times the nuisance's 1/2). Negative control: the
    first, narrow box's own ln Z is far below it."""
    import massfit.sample.nested as nested
    from massfit.sample.nested_boxes import own_box

    model = _two_mode_model((1.0, 1e-12), (0.8, 2.5))
    start = SimpleNamespace(candidate_modes=[], theta=np.array([0.8, 0.1]),
                            covariance=np.diag([0.0003 ** 2, 0.2 ** 2]))
    monkeypatch.setattr(nested, "laplace_log_evidence", lambda *args: None)
    chain = run_nested(model, start, NestedSettings(live_points=30, runs=1, seed=3))
    assert any("widened by a factor 4" in note for note in chain.notes)
    exact = np.log(1.0 / 3.0) + np.log(0.5)
    err = chain.evidence["log_evidence_err"]
    assert chain.converged and abs(chain.evidence["log_evidence"] - exact) < 3 * err
    low, high = chain.modes[0]["period_boxes_days"]["b"]
    assert np.log10(high) - 0.8 > 4 * 0.01  # widened twice: it holds the bump (sd 0.01)
    narrow = nested_box(model, NestedSettings(live_points=30), 5, own_box(start, model))
    assert narrow["log_z"] + narrow["log_box_mass"] < exact - 1.0

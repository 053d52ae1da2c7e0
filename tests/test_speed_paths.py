"""The shortcuts taken for speed give the numbers of the plain computation.

Two shortcuts: the prior is a box test plus a constant for every coordinate whose
prior is flat where it is sampled, and plain two-body astrometry goes straight to
chi^2 in one compiled pass per companion. Each is compared with the general path on
the bundled examples, which between them have east/north and sep/pa rows, per-row
distances, a sampled parallax, a normal companion-mass prior and radial velocities.
"""

from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

import massfit
from massfit.orbits import kepler
from massfit.model.specs import CompanionSpec
from massfit.model.orbit_model import OrbitModel
from massfit.priors import Normal, Uniform
from massfit.read.tables import read_observations
from massfit.scenarios.examples import demo_setup
from massfit.start.least_squares import parameter_bounds

EXAMPLES = Path(__file__).resolve().parents[1] / "example_obs"


def _model(example, *, fixed_plane=False, **companion_priors):
    setup = (demo_setup() if example == "orvane"
             else massfit.load_config(EXAMPLES / example / "config.toml"))
    obs = read_observations(setup.files, **setup.read_options)
    system = setup.system
    if fixed_plane:  # the same rows without their lines of sight: per-row distances
        obs = replace(obs, astrometry=replace(obs.astrometry, primary_ra=None,
                                              primary_dec=None))
        system = replace(system, viewing=None)
    if companion_priors:
        companions = {name: replace(spec, **companion_priors)
                      for name, spec in system.companions.items()}
        missing = {name: CompanionSpec(name, **companion_priors)
                   for name in obs.companions if name not in companions}
        system = replace(system, companions={**companions, **missing})
    return OrbitModel(obs, system)


def _straddling_points(model, n=4000, seed=0):
    low, high = parameter_bounds(model)
    low = np.where(np.isfinite(low), low, -3.0)
    high = np.where(np.isfinite(high), high, 3.0)
    rng = np.random.default_rng(seed)
    # Points straddling every bound, so inside and outside both occur (checked below).
    return low + (high - low) * rng.uniform(-0.02, 1.02, (n, model.n_dim))


@pytest.mark.parametrize("example, priors", [
    ("orvane", {}),
    ("mirren", {}),
    ("sorrel", {}),
    # Priors that are not flat in the sampled coordinate take the per-coordinate path.
    ("orvane", {"eccentricity": Normal(0.2, 0.1, low=0.0, high=0.95),
                "inclination": Uniform(0.2, 1.4)}),
])
def test_prior_shortcut_equals_the_per_coordinate_sum(example, priors):
    model = _model(example, **priors)
    theta = _straddling_points(model)
    fast = model.log_prior(theta)
    with np.errstate(all="ignore"):
        plain = sum(model._log_prior_one(p, theta[:, k], theta)
                    for k, p in enumerate(model.parameters) if p.transform != "window")
        plain = plain + model._log_prior_windows(theta)
    plain = np.where(np.isnan(plain), -np.inf, plain)
    assert np.array_equal(np.isfinite(fast), np.isfinite(plain))
    finite = np.isfinite(fast)
    assert 0 < np.sum(finite) < len(fast)
    # The constants are summed in another order: equal to rounding.
    assert np.allclose(fast[finite], plain[finite], rtol=0.0, atol=1e-12)
    if priors:
        assert model._prior_plan.varying, "non-flat priors must be evaluated one by one"


@pytest.mark.skipif(kepler.numba_kernel is None, reason="the fused kernel needs numba")
@pytest.mark.parametrize("example", ["orvane", "mirren"])
def test_fused_chi2_equals_the_residual_sum(example):
    # Orvane's rows carry a moving line of sight, which takes the general path (see
    # below); read on a fixed plane they are angular rows with per-row distances.
    model = _model(example, fixed_plane=example == "orvane")
    assert model._kernel_rows is not None
    if example == "mirren":  # sep/pa and east/north rows, angular with a parallax
        pack = next(iter(model._kernel_rows.values()))
        assert 0 < pack.n_cart < pack.dt.size and np.any(pack.uses_parallax)
    theta = _straddling_points(model, n=300, seed=1)
    fused = model._chi2_fused(theta)
    res = model.residuals(theta)
    plain = np.sum(res * res, axis=1)
    both = np.isfinite(fused) & np.isfinite(plain)
    assert np.array_equal(np.isfinite(fused), np.isfinite(plain))
    assert np.sum(both) > 50
    assert np.allclose(fused[both], plain[both], rtol=1e-12, atol=0.0)
    # And the likelihood the sampler sees is the same through either path.
    saved, model._kernel_rows = model._kernel_rows, None
    try:
        general = model.log_likelihood(theta)
    finally:
        model._kernel_rows = saved
    assert np.allclose(model.log_likelihood(theta)[both], general[both], rtol=1e-12)


def test_velocities_and_other_dynamics_keep_the_general_path():
    assert _model("sorrel")._kernel_rows is None
    assert _model("orvane")._kernel_rows is None  # a moving line of sight


def test_jacobian_column_by_column_equals_the_stacked_one(monkeypatch):
    # Big data sets fill the start's Jacobian one column at a time (memory); the
    # numbers must be those of the stacked evaluation.
    from massfit.start import least_squares as start_module

    model = _model("mirren")
    low, high = parameter_bounds(model)
    theta = np.where(np.isfinite(low + high), 0.5 * (low + high), 0.3)
    theta = theta[np.newaxis, :]
    assert np.isfinite(model.log_prior(theta)[0])
    stacked = start_module._jacobian_function(model, low, high)(theta[0])
    monkeypatch.setattr(start_module, "CHUNK_ELEMENTS", 10)
    columns = start_module._jacobian_function(model, low, high)(theta[0])
    # Rows: the whitened residuals, then the Gaussian priors (parallax, companion mass).
    assert columns.shape == stacked.shape == (len(model.residuals(theta)[0]) + 2,
                                              model.n_dim)
    assert np.array_equal(columns, stacked)


@pytest.mark.parametrize("shape", [(5, 3, 2), (37, 200, 3), (1200, 52, 4)])
def test_batched_autocorrelation_time_equals_emcee(shape):
    # The convergence test's tau: the FFTs of many walkers in one call and a shorter
    # padding; emcee's own estimator is the reference.
    import emcee

    from massfit.sample.chain import _autocorr

    rng = np.random.default_rng(sum(shape))
    # A random walk plus noise: autocorrelation times of a few to tens of steps.
    chain = 0.05 * np.cumsum(rng.standard_normal(shape), axis=0) + rng.standard_normal(shape)
    expected = emcee.autocorr.integrated_time(chain, tol=0, quiet=True)
    assert np.allclose(_autocorr(chain), expected, rtol=1e-12, atol=0.0)


def test_observations_written_in_blocks_are_the_file_astropy_writes(tmp_path, monkeypatch):
    from astropy.table import Table

    from massfit.write import saved_state as saved

    rng = np.random.default_rng(0)
    table = Table({"east": rng.standard_normal(1234), "body": ["Ebbin", "Tor"] * 617,
                   "line": np.arange(1234), "polar": rng.uniform(size=1234) > 0.5})
    table.meta["description"] = "rows"
    table.write(tmp_path / "whole.ecsv", format="ascii.ecsv")
    monkeypatch.setattr(saved, "_WRITE_BLOCK_ROWS", 100)
    saved.write_ecsv(table, tmp_path / "blocks.ecsv")
    assert (tmp_path / "blocks.ecsv").read_bytes() == (tmp_path / "whole.ecsv").read_bytes()


def test_fast_ecsv_writer_gives_astropys_bytes(tmp_path):
    # Reference: astropy's own ECSV writer (Table.write, format ascii.ecsv). A table of
    # plain floats takes massfit's faster path; awkward values (nan, +-inf, -0.0,
    # extremes, shortest-repr cases) and more rows than one block must come out the
    # same, byte for byte. A column with a unit or an integer column changes the
    # header or the cells: the unit case still takes the fast path (the header is
    # astropy's), the integer table falls back to astropy.
    import astropy.units as u
    from astropy.table import Table

    from massfit.write import saved_state

    rng = np.random.default_rng(3)
    special = np.array([np.nan, np.inf, -np.inf, -0.0, 1e-300, 1.5e300, 0.1, 2.0,
                        1.2345678901234568e17, 5e-324])
    n = saved_state._WRITE_BLOCK_ROWS + 7
    column = np.concatenate([special, rng.standard_normal(n - len(special)) * 1e3])
    tables = {
        "floats": Table({"a": column, "b.c": rng.uniform(size=n)}),
        "with a unit": Table({"a": column * u.km, "b": column[::-1]}),
        "integers": Table({"a": np.arange(n), "b": column}),
    }
    assert saved_state._plain_floats(tables["floats"])
    assert not saved_state._plain_floats(tables["integers"])
    for name, table in tables.items():
        ours, reference = tmp_path / f"{name}.ecsv", tmp_path / f"{name}-astropy.ecsv"
        saved_state.write_ecsv(table, ours)
        table.write(reference, format="ascii.ecsv")
        assert ours.read_bytes() == reference.read_bytes(), name


def test_periodogram_subset_is_fixed_and_only_for_big_sets():
    from massfit.summarise.residuals import periodogram_subset

    assert np.array_equal(periodogram_subset(500, 1000), np.arange(500))
    first, again = periodogram_subset(10_000, 1000), periodogram_subset(10_000, 1000)
    assert np.array_equal(first, again) and len(np.unique(first)) == 1000
    assert np.all(np.diff(first) > 0) and first[-1] < 10_000

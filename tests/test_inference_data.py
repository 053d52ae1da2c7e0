"""The posterior exported to ArviZ: walkers as chains, physical units, NetCDF on request.

The reference library is ArviZ itself (arviz.summary, arviz.ess, arviz.from_netcdf):
what it computes on the export must be what it computes on massfit's own chain.
"""

import json
import sys

import numpy as np
import pytest

from figure_helpers import small_result, sorrel_result

arviz = pytest.importorskip("arviz")


def _walker_coordinate(result, name):
    """One sampled coordinate, walker by walker: (walkers, kept steps)."""
    k = result.model.names.index(name)
    return result.chain.walker_steps[:, :, k].T


def test_chains_are_walkers_with_the_chains_values():
    result = small_result()
    data = result.to_inference_data()
    post = data.posterior
    kept, walkers, _ = result.chain.walker_steps.shape
    assert post.sizes["chain"] == walkers and post.sizes["draw"] == kept
    # Walker w at kept step d is the same sample in the export and in the chain.
    np.testing.assert_array_equal(post["parallax"].values,
                                  _walker_coordinate(result, "parallax"))
    mass = 10.0 ** _walker_coordinate(result, "central.log10_mass")
    np.testing.assert_allclose(post["central_mass_solar"].values, mass, rtol=1e-12)
    # Companion quantities share one dimension, in the fit's order.
    assert list(post["period"].coords["companion"].values) == ["Aster", "Brel"]
    np.testing.assert_array_equal(
        post["period"].sel(companion="Brel").values.T.reshape(-1),
        result.samples["companions"]["Brel"]["period"])
    # The log-posterior the sampler kept, walker by walker, is the model's at that point
    # (both companions span more than one period: sampled as elements, no Jacobian).
    lp = data.sample_stats["lp"].values
    w, d = 3, kept - 1
    assert lp[w, d] == pytest.approx(
        float(result.model.log_prob(result.chain.walker_steps[d, w][None, :])[0]), abs=1e-8)
    assert post["central_mass"].attrs["units"] == "kg"
    assert post["period"].attrs["units"] == "d"
    assert post["inclination"].attrs["units"] == "deg"
    assert data.posterior.attrs["converged"] == int(result.converged)


def test_arviz_diagnostics_run_on_the_export():
    result = small_result()
    data = result.to_inference_data()
    table = arviz.summary(data, var_names=["central_mass_solar", "period"])
    flat = result.samples["central_mass_solar"]
    assert table.loc["central_mass_solar", "mean"] == pytest.approx(
        np.mean(flat), rel=1e-3)  # ArviZ rounds its table to a few digits
    assert set(table.index) >= {"period[Aster]", "period[Brel]"}
    ess = arviz.ess(data, var_names=["central_mass_solar"])["central_mass_solar"].item()
    assert 1.0 < ess <= flat.size * 1.5  # an effective sample count, not a flag value
    assert np.isfinite(arviz.rhat(data, var_names=["parallax"])["parallax"].item())


def test_velocity_terms_by_instrument():
    result = sorrel_result()
    post = result.to_inference_data().posterior
    assert sorted(post["rv_offset"].coords["instrument"].values) == ["Halden", "Quillon"]
    np.testing.assert_array_equal(
        post["rv_jitter"].sel(instrument="Quillon").values,
        _walker_coordinate(result, "rv.Quillon.jitter"))
    assert post["rv_offset"].attrs["units"] == "km / s"
    assert post["mass"].sel(companion="Sorrel-B").attrs["units"] == "M_sun"


def test_netcdf_on_request_and_read_back(tmp_path):
    import massfit

    result = small_result()
    result.save(tmp_path / "with", plots=False, arviz=True)
    result.save(tmp_path / "without", plots=False)
    assert not (tmp_path / "without" / "posterior.nc").exists()
    record = json.loads((tmp_path / "with" / "run.json").read_text())
    assert "posterior.nc" in record["files_written"]
    back = arviz.from_netcdf(tmp_path / "with" / "posterior.nc")
    np.testing.assert_array_equal(back.posterior["central_gm"].values,
                                  result.to_inference_data().posterior["central_gm"].values)
    assert back.posterior["central_gm"].attrs["units"] == "km3 / s2"
    # A saved folder read back exports the same posterior.
    again = massfit.load_result(tmp_path / "with").to_inference_data()
    np.testing.assert_allclose(again.posterior["period"].values,
                               back.posterior["period"].values, rtol=1e-15)


def test_without_arviz_one_plain_error(monkeypatch, tmp_path):
    from massfit.errors import ConfigError

    monkeypatch.setitem(sys.modules, "arviz", None)  # import arviz now fails
    with pytest.raises(ConfigError, match=r'pip install "massfit\[arviz\]"'):
        small_result().save(tmp_path / "out", plots=False, arviz=True)
    assert not (tmp_path / "out").exists()

"""The shortcuts taken for speed give exactly the numbers of the plain computation."""

import numpy as np

from massfit.model import OrbitModel
from massfit.read import read_observations
from massfit.scenarios import demo_setup
from massfit.start import _bounds


def test_window_shortcut_in_log_prior_equals_the_per_parameter_sum():
    setup = demo_setup()
    model = OrbitModel(read_observations(setup.files, **setup.read_options), setup.system)
    low, high = _bounds(model)
    low = np.where(np.isfinite(low), low, -3.0)
    high = np.where(np.isfinite(high), high, 3.0)
    rng = np.random.default_rng(0)
    # Points straddling every bound, so inside and outside both occur (checked below).
    theta = low + (high - low) * rng.uniform(-0.02, 1.02, (4000, model.n_dim))
    theta[:, 0] = -3.0
    fast = model.log_prior(theta)
    with np.errstate(all="ignore"):
        plain = sum(model._log_prior_one(p, theta[:, k], theta)
                    for k, p in enumerate(model.parameters))
    plain = np.where(np.isnan(plain), -np.inf, plain)
    assert np.array_equal(fast, plain)
    assert 0 < np.sum(np.isfinite(fast)) < len(fast)

"""The sampler's moves leave the target density unchanged.

A chain can pass every convergence test and still sample the wrong density when a
proposal breaks detailed balance; only a target whose answer is known shows it. The
target here is a 7-dimensional standard normal (as many coordinates as one companion's
orbit and the central mass): r^2 = |x|^2 is then chi-square with 7 degrees of
freedom, mean 7 and variance 14 (textbook result, e.g. Abramowitz & Stegun 26.4).
The negative control is emcee's snooker move mixed in as emcee documents it (0.8 DE,
0.2 snooker), which massfit once used and which shrinks this normal's variance by
about a tenth (measured; see massfit/sample/chain.py).
"""

import emcee
import numpy as np
from scipy import stats

import massfit.sample.chain as sample
from massfit.sample.chain import SamplerSettings, run_sampler

N_DIM = 7


def _normal(theta):
    return -0.5 * np.sum(theta * theta, axis=1)


def _chain(seed=11):
    rng = np.random.default_rng(seed)
    settings = SamplerSettings(walkers=48, max_steps=2000, check_every=500, seed=seed,
                               progress=False)
    return run_sampler(_normal, rng.standard_normal((48, N_DIM)), settings)


def _r2_pull(chain):
    """(mean r^2 - 7) in units of its standard error from the effective samples."""
    r2 = np.sum(chain.samples ** 2, axis=1)
    n_eff = chain.walkers * (chain.steps - chain.burn_in) / np.max(chain.tau)
    return (np.mean(r2) - N_DIM) / np.sqrt(2 * N_DIM / n_eff), r2


def test_massfit_moves_sample_a_known_normal():
    chain = _chain()
    pull, r2 = _r2_pull(chain)
    assert abs(pull) < 4
    assert np.allclose(np.var(chain.samples, axis=0), 1.0, atol=0.08)
    # The whole distribution, not just its mean: thinned to roughly independent draws.
    assert stats.kstest(r2, stats.chi2(N_DIM).cdf).statistic < 0.04


def test_negative_control_snooker_mixture_is_caught(monkeypatch):
    monkeypatch.setattr(sample, "_moves", lambda: [(emcee.moves.DEMove(), 0.8),
                                                   (emcee.moves.DESnookerMove(), 0.2)])
    chain = _chain()
    pull, r2 = _r2_pull(chain)
    # Each check the massfit moves pass fails here.
    assert pull < -4
    assert np.mean(np.var(chain.samples, axis=0)) < 0.95
    assert stats.kstest(r2, stats.chi2(N_DIM).cdf).statistic > 0.04

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


def test_the_burn_in_lasts_until_the_last_walker_has_come_in():
    # A strongly correlated 7-d normal (one direction 10^4 times stiffer than the
    # rest), all walkers but one started in its bulk, the last one 300 sigma out along
    # the stiff direction: emcee's DE brings it in only slowly. The burn-in covers
    # that walk (no kept draw below the bulk's floor), and r^2 of the kept draws is
    # still the textbook chi-square with 7 degrees of freedom.
    rng = np.random.default_rng(4)
    basis = np.linalg.qr(rng.standard_normal((N_DIM, N_DIM)))[0]
    to_x = basis * np.array([1e-4, 1, 1, 1, 1, 1, 1.0])  # x = to_x @ z, z ~ N(0, 1)

    def log_prob(x):
        z = np.linalg.solve(to_x, x.T).T
        return -0.5 * np.sum(z * z, axis=1)

    walkers = rng.standard_normal((48, N_DIM))
    walkers[0, 0] = 300.0
    settings = SamplerSettings(walkers=48, max_steps=4000, check_every=500, seed=2,
                               progress=False)
    chain = run_sampler(log_prob, walkers @ to_x.T, settings)
    floor = -0.5 * stats.chi2(N_DIM).ppf(sample.ARRIVAL_PROBABILITY)
    assert chain.arrival_steps > 2 * np.max(chain.tau)  # the straggler set the burn-in
    assert chain.burn_in >= chain.arrival_steps
    assert np.min(chain.log_prob) > floor - 10
    z = np.linalg.solve(to_x, chain.samples.T).T
    assert stats.kstest(np.sum(z * z, axis=1), stats.chi2(N_DIM).cdf).statistic < 0.05


def test_arrival_step_on_known_histories():
    # Every walker in the bulk from the start: 0. One that climbs in at step 300: 300.
    # One that never comes in: the whole length.
    rng = np.random.default_rng(1)
    bulk = -0.5 * rng.chisquare(N_DIM, size=(1000, 20))
    assert sample.arrival_step(bulk, N_DIM) == 0
    late = bulk.copy()
    late[:300, 3] = np.linspace(-5000.0, -100.0, 300)
    assert sample.arrival_step(late, N_DIM) == 300
    late[:, 5] = -1e4
    assert sample.arrival_step(late, N_DIM) == 1000

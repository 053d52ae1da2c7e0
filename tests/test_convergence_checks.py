"""The cheaper convergence checks stop where computing every coordinate at every check
stops (massfit.sample.chain.ConvergenceTest).

Stored chains: autoregressive series whose integrated autocorrelation times are known
(tau = (1 + phi) / (1 - phi) for an AR(1) process; a textbook result), with a drift
at the start like a burn-in, and a chain of emcee's differential-evolution move on a
correlated normal. Each is checked at the steps the sampler would check, once the
plain way and once the cheap way: the same decision at every check, the same stop
step, the same tau there, and far fewer coordinates computed.
"""

import numpy as np
import pytest

from massfit.sample import chain as chain_module
from massfit.sample.chain import ConvergenceTest


def _ar1(n_steps, n_walkers, phis, seed):
    rng = np.random.default_rng(seed)
    out = np.empty((n_steps, n_walkers, len(phis)))
    x = rng.standard_normal((n_walkers, len(phis))) * 5.0  # a start far out: burn-in
    for t in range(n_steps):
        x = np.asarray(phis) * x + np.sqrt(1.0 - np.asarray(phis) ** 2) * \
            rng.standard_normal(x.shape)
        out[t] = x
    return out


def _emcee_chain(n_steps, seed):
    import emcee

    rng = np.random.default_rng(seed)
    n_dim = 7
    a = rng.standard_normal((n_dim, n_dim))
    precision = np.linalg.inv(a @ a.T + n_dim * np.eye(n_dim))
    sampler = emcee.EnsembleSampler(
        16, n_dim, lambda x: -0.5 * np.einsum("ij,jk,ik->i", x, precision, x),
        vectorize=True, moves=[(emcee.moves.DEMove(), 1.0)])
    sampler.random_state = np.random.RandomState(seed).get_state()
    sampler.run_mcmc(rng.standard_normal((16, n_dim)), n_steps, progress=False)
    return sampler.get_chain()


def _run(chain, check_every, test, counter):
    decisions = []
    for checked in range(check_every, chain.shape[0] + 1, check_every):
        tau = test.update(chain[:checked])
        decisions.append((checked, test.converged))
        if test.converged:
            return checked, decisions, tau, counter[0]
    return None, decisions, None, counter[0]


STORED = {
    "AR(1), tau 3 to 39, burn-in": lambda: _ar1(4000, 24, [0.5, 0.8, 0.9, 0.95], 1),
    "AR(1), one slow coordinate": lambda: _ar1(5000, 20, [0.3, 0.3, 0.3, 0.3, 0.3,
                                                          0.96], 2),
    "emcee DE move, 7-d normal": lambda: _emcee_chain(1500, 3),
}


@pytest.mark.parametrize("name", list(STORED))
def test_cheap_checks_stop_where_the_plain_ones_do(name, monkeypatch):
    chain = STORED[name]()
    counter = [0]
    plain_autocorr = chain_module._autocorr

    def counting(part, **kwargs):
        counter[0] += part.shape[2]
        return plain_autocorr(part, **kwargs)

    monkeypatch.setattr(chain_module, "_autocorr", counting)
    results = {}
    for every in (True, False):
        counter[0] = 0
        results[every] = _run(chain, 100, ConvergenceTest(every_coordinate=every), counter)
    plain, cheap = results[True], results[False]
    assert plain[0] is not None, "the stored chain must converge for the test to mean much"
    assert cheap[0] == plain[0]  # the same stop step
    assert cheap[1] == plain[1]  # the same decision at every check
    assert np.array_equal(cheap[2], plain[2])
    # and cheaper: most checks computed one coordinate (n_dim for the plain way)
    assert cheap[3] < plain[3]


def test_a_chain_that_never_settles_is_never_converged():
    # Negative control: a random walk has no finite autocorrelation time.
    rng = np.random.default_rng(4)
    walk = np.cumsum(rng.standard_normal((3000, 16, 3)), axis=0)
    for every in (True, False):
        stop, decisions, _, _ = _run(walk, 100, ConvergenceTest(every_coordinate=every),
                                     [0])
        assert stop is None and not any(flag for _, flag in decisions)


def test_the_sampler_gives_emcees_chain_to_the_bit():
    # massfit's DE move decides a half-ensemble's acceptance in one array operation and
    # its sampler takes the log-probability's array as it is; emcee's own classes are
    # the reference, on a target with a wall (-inf) that some proposals cross.
    import emcee

    from massfit.sample.chain import _moves, _Sampler

    def log_prob(x):
        return np.where(x[:, 0] > -1.5, -0.5 * np.sum(x * x, axis=1), -np.inf)

    start = np.random.default_rng(5).standard_normal((16, 5)) * 0.3
    chains = []
    for sampler_class, move in ((emcee.EnsembleSampler, emcee.moves.DEMove()),
                                (_Sampler, _moves()[0][0])):
        sampler = sampler_class(16, 5, log_prob, vectorize=True, moves=[(move, 1.0)])
        sampler.random_state = np.random.RandomState(11).get_state()
        sampler.run_mcmc(start, 300, progress=False)
        chains.append((sampler.get_chain(), sampler.get_log_prob(),
                       sampler.backend.accepted.copy()))
    for stock, ours in zip(*chains):
        assert np.array_equal(stock, ours)
    assert 0 < np.mean(chains[0][2]) / 300 < 1  # some proposals rejected, some taken

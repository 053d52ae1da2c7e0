"""The sampler's compiled steps give emcee's chain to the bit.

massfit.sample.steps takes the DE move's steps in compiled code with random numbers
drawn beforehand; the reference is emcee's own ``EnsembleSampler.sample`` with the same
move and the compiled log-posterior evaluated from Python (which
tests/test_convergence_checks.py pins to stock emcee, and
tests/test_compiled_posterior.py to the Python path). Checked: the stored chain, the
log-posteriors, the acceptances and the random state after the run; the sampler's own
change of coordinates (a state-vector companion, angular units); velocities alone; a
run stopped at a checkpoint and resumed; two threads.
"""

import numpy as np
import pytest
from test_compiled_posterior import CONFIGURATIONS, _model

from massfit.orbits import kepler
from massfit.sample.chain import SamplerSettings, run_sampler
from massfit.sample.reparameterisation import SamplerCoordinates
from massfit.start.search import find_start

pytestmark = pytest.mark.skipif(kepler.numba_kernel is None,
                                reason="the compiled path needs numba")


def _setup(name):
    model = _model(**CONFIGURATIONS[name])
    start = find_start(model, progress=False)
    coordinates = SamplerCoordinates.for_start(model, start.theta)
    settings = SamplerSettings(seed=3, max_steps=240, check_every=80, progress=False,
                               threads=1)
    initial = start.walkers(model, settings.n_walkers(model.n_dim),
                            np.random.default_rng(4))
    return coordinates, coordinates.to_sampled(initial), settings


def _same(a, b):
    assert a.steps == b.steps
    assert np.array_equal(a.walker_steps, b.walker_steps)
    assert np.array_equal(a.log_prob, b.log_prob)
    assert a.acceptance_fraction == b.acceptance_fraction
    assert 0.02 < a.acceptance_fraction < 0.95  # proposals both taken and refused


@pytest.mark.parametrize("name", ["mirren", "sorrel, velocities alone"])
def test_compiled_steps_give_emcees_chain(name):
    coordinates, sampled, settings = _setup(name)
    stock = run_sampler(coordinates.log_prob, sampled, settings)
    fast = run_sampler(coordinates.log_prob, sampled, settings,
                       compiled=coordinates.compiled_arguments())
    _same(stock, fast)
    if name == "mirren":  # the mirren start samples a changed set of coordinates
        assert coordinates, "expected the sampler's own coordinates here"
        two = run_sampler(coordinates.log_prob, sampled,
                          SamplerSettings(**{**settings.__dict__, "threads": 2}),
                          compiled=coordinates.compiled_arguments())
        _same(stock, two)


def test_compiled_steps_resume_where_they_stopped(tmp_path):
    coordinates, sampled, settings = _setup("mirren")
    compiled = coordinates.compiled_arguments()
    whole = run_sampler(coordinates.log_prob, sampled, settings, compiled=compiled)
    path = tmp_path / "chain.ckpt"
    short = SamplerSettings(**{**settings.__dict__, "max_steps": 160})
    run_sampler(coordinates.log_prob, sampled, short, checkpoint=path, compiled=compiled)
    resumed = run_sampler(coordinates.log_prob, sampled, settings, checkpoint=path,
                          resume=True, compiled=compiled)
    assert resumed.resumed_from == 160
    _same(whole, resumed)

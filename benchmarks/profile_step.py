"""Where a sampling step goes: cProfile (CPU time) of the Tarrant fit's sampler.

Not a benchmark with a target: a look inside one run, to say what to make faster.
``python benchmarks/profile_step.py [steps]`` prints the start's CPU time, the CPU
time per step and the functions that take it (own time and cumulative time).
"""

from __future__ import annotations

import cProfile
import pstats
import sys
import time

import numpy as np

from massfit.model.orbit_model import OrbitModel
from massfit.model.specs import SystemSpec
from massfit.run import distance_prior
from massfit.sample.chain import SamplerSettings, run_sampler
from massfit.sample.reparameterisation import SamplerCoordinates
from massfit.start.search import find_start

from common import TARRANT_PARALLAX, observations_from, tarrant_table


def main(steps=3000):
    obs = observations_from(tarrant_table())
    model = OrbitModel(obs, SystemSpec(parallax=distance_prior(*TARRANT_PARALLAX,
                                                               key_prefix="")))
    cpu = time.process_time()
    start = find_start(model)
    print(f"start: {time.process_time() - cpu:.2f} s CPU")
    settings = SamplerSettings(seed=1, max_steps=steps, check_every=500, progress=False)
    initial = start.walkers(model, settings.n_walkers(model.n_dim), np.random.default_rng(1))
    coordinates = SamplerCoordinates.for_start(model, start.theta)
    print(f"state-vector bodies {coordinates.bodies}, longitude bodies "
          f"{list(coordinates.longitude)}, {initial.shape[0]} walkers, {model.n_dim} dims")
    profile = cProfile.Profile(time.process_time)
    cpu = time.process_time()
    profile.enable()
    chain = run_sampler(coordinates.log_prob, coordinates.to_sampled(initial), settings,
                        compiled=coordinates.compiled_arguments())
    profile.disable()
    cpu = time.process_time() - cpu
    print(f"sampling: {cpu:.2f} s CPU for {chain.steps} steps, "
          f"{1e3 * cpu / chain.steps:.3f} ms a step (with the profiler's own cost)")
    pstats.Stats(profile).sort_stats("tottime").print_stats(20)
    pstats.Stats(profile).sort_stats("cumtime").print_stats(25)


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 3000)

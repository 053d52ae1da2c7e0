"""The compiled log-posterior on one thread and on every core, side by side.

A call of 27 walkers (half of the Tarrant fit's 54: emcee evaluates half the ensemble
at a time) on the Tarrant set at 1x and 10x the rows, timed in wall-clock time with
1 and with all threads, the two interleaved call by call so that both see the same
load. The minimum over the calls is what the machine can do when it is free; the
median is what the load left. Then the sampling of a fit (``SamplerSettings.threads``)
on the 10x set, 1 thread against every core, over a fixed number of steps.
"""

from __future__ import annotations

import os
import time

import numba
import numpy as np

from massfit.model.compiled_posterior import on_threads
from massfit.model.orbit_model import OrbitModel
from massfit.model.specs import SystemSpec
from massfit.run import distance_prior
from massfit.sample.chain import SamplerSettings, run_sampler
from massfit.sample.reparameterisation import SamplerCoordinates
from massfit.start.search import find_start

from common import TARRANT_PARALLAX, observations_from, tarrant_table

CALLS = 300
STEPS = 300


def run(report):
    most = min(os.cpu_count() or 1, numba.config.NUMBA_NUM_THREADS)
    rows = []
    fits = []
    for scale in (1, 10):
        model = OrbitModel(observations_from(tarrant_table(scale)), SystemSpec(
            parallax=distance_prior(*TARRANT_PARALLAX, key_prefix="")))
        start = find_start(model)
        walkers = SamplerSettings().n_walkers(model.n_dim)
        initial = start.walkers(model, walkers, np.random.default_rng(1))
        coordinates = SamplerCoordinates.for_start(model, start.theta)
        sampled = coordinates.to_sampled(initial)[: walkers // 2]
        calls = {n: on_threads(coordinates.log_prob, n) for n in (1, most)}
        times = {n: [] for n in calls}
        for n in calls:
            calls[n](sampled)
        for _ in range(CALLS):
            for n, call in calls.items():
                t0 = time.perf_counter()
                call(sampled)
                times[n].append(time.perf_counter() - t0)
        for n in calls:
            rows.append({"rows": len(model.observations.astrometry), "walkers": len(sampled),
                         "threads": n, "min_ms": 1e3 * min(times[n]),
                         "median_ms": 1e3 * float(np.median(times[n])),
                         "speedup_min": min(times[1]) / min(times[n]),
                         "speedup_median": float(np.median(times[1]) / np.median(times[n]))})
        if scale == 10:
            for n in (1, most, 1, most):
                settings = SamplerSettings(seed=1, max_steps=STEPS, check_every=STEPS,
                                           progress=False, threads=n)
                wall = time.perf_counter()
                run_sampler(coordinates.log_prob, coordinates.to_sampled(initial), settings,
                            compiled=coordinates.compiled_arguments())
                fits.append({"rows": len(model.observations.astrometry), "threads": n,
                             "steps": STEPS, "wall_s": time.perf_counter() - wall})
    report.table("one call of the compiled log-posterior, 1 thread against all "
                 "(wall time, interleaved)", rows, list(rows[0]))
    report.table("sampling 300 steps of the 10x Tarrant set, 1 thread against all "
                 "(wall time, alternating runs)", fits, list(fits[0]))
    best = max(r["speedup_min"] for r in rows if r["threads"] == most)
    sampled_ratio = (min(f["wall_s"] for f in fits if f["threads"] == 1)
                     / min(f["wall_s"] for f in fits if f["threads"] == most))
    report.target(f"sampling on {most} cores >= 1.7x one core (10x Tarrant set)",
                  sampled_ratio >= 1.7,
                  f"{sampled_ratio:.2f}x (fastest runs); one call at best {best:.2f}x")

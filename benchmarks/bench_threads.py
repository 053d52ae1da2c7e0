"""The compiled log-posterior on one thread and on every core, side by side.

A call of 27 walkers (half of the Tarrant fit's 54: emcee evaluates half the ensemble
at a time) on the Tarrant set at 1x and 10x the rows, timed in wall-clock time with
1 and with all threads, the two interleaved call by call so that both see the same
load. The minimum over the calls is what the machine can do when it is free; the
median is what the load left. Then the sampling of a fit (``SamplerSettings.threads``,
the steps compiled) on both sets, 1 thread against every core, over a fixed number of
steps.
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
        steps = STEPS * 10 // scale  # about the same work at either size
        for n in (1, most, None, 1, most, None):  # None: the fit's default
            settings = SamplerSettings(seed=1, max_steps=steps, check_every=steps,
                                       progress=False, threads=n)
            wall = time.perf_counter()
            run_sampler(coordinates.log_prob, coordinates.to_sampled(initial), settings,
                        compiled=coordinates.compiled_arguments())
            fits.append({"rows": len(model.observations.astrometry),
                         "threads": "default" if n is None else n,
                         "steps": steps, "wall_s": time.perf_counter() - wall})
    report.table("one call of the compiled log-posterior, 1 thread against all "
                 "(wall time, interleaved)", rows, list(rows[0]))
    report.table("sampling the Tarrant set (compiled steps) at 1x and 10x the rows, 1 "
                 "thread against all (wall time, alternating runs)", fits, list(fits[0]))
    best = max(r["speedup_min"] for r in rows if r["threads"] == most)
    for size in sorted({f["rows"] for f in fits}):
        runs = [f for f in fits if f["rows"] == size]
        ratio = (min(f["wall_s"] for f in runs if f["threads"] == 1)
                 / min(f["wall_s"] for f in runs if f["threads"] == most))
        default = (min(f["wall_s"] for f in runs if f["threads"] == 1)
                   / min(f["wall_s"] for f in runs if f["threads"] == "default"))
        report.target(f"sampling on {most} cores >= 1.7x one core (Tarrant set, {size} "
                      f"rows)", ratio >= 1.7,
                      f"{ratio:.2f}x (fastest runs; the default threads {default:.2f}x); "
                      f"one call at best {best:.2f}x")

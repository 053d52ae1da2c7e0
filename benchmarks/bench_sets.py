"""Effective samples per CPU-second on several data sets, side by side in one run.

For each set (the project's own Calder set, one companion, the four-companion Tarrant
set with its parallax sampled, velocities alone, and each at 10x the rows) and in
this one process:

* **massfit** (now): the sampler to convergence from the start's walkers, with the
  compiled log-posterior where the model qualifies, its steps taken in compiled code
  (massfit.sample.steps: emcee's chain to the bit) and the cheap convergence checks;
  CPU time of the sampling, effective samples of the key coordinate from its chain.
* **before**: the same chain on the Python path (the same numbers: tested), its cost a
  step measured on ``BEFORE_STEPS`` steps from the same walkers, plus the plain
  convergence checks (every coordinate at every check) replayed on the finished
  chain; they stop at the same step (tests/test_convergence_checks.py).
* **straightforward**: emcee's stretch move calling a pure-numpy log-posterior walker
  by walker (numba switched off), its cost a step measured on ``NAIVE_STEPS`` steps;
  its autocorrelation time from a stretch chain run with the fast log-posterior (same
  move, same numbers) for at most ``STRETCH_CPU`` CPU-seconds. Where that chain is
  shorter than 50 of its own tau, tau is underestimated and the ratio printed is a
  lower bound (marked).

The key coordinate is log10 of the central mass; a velocity-only model samples no
central mass, and there it is the first companion's semi-amplitude.
All costs are CPU time of this process: what the work costs on a core, whatever else
shares the machine. Threads: one (the per-core figure; the 2-core comparison is its
own table).
"""

from __future__ import annotations

import time

import astropy.units as u
import emcee
import numpy as np
from astropy.time import Time

from massfit.model.orbit_model import OrbitModel
from massfit.model.specs import SystemSpec
from massfit.orbits import kepler
from massfit.run import distance_prior
from massfit.sample.chain import ConvergenceTest, SamplerSettings, run_sampler
from massfit.sample.reparameterisation import SamplerCoordinates
from massfit.scenarios.simulate import Elements, simulate_velocities
from massfit.start.search import find_start

from common import (CALDER_DISTANCE, TARRANT_PARALLAX, calder_table, observations_from,
                    one_companion_table, tarrant_table)

NAIVE_STEPS = 20
BEFORE_STEPS = 300
STRETCH_CPU = 120.0
MAX_STEPS = 40_000


def rv_only_table(n_rows=120, seed=11):
    """Velocities of an invented primary ('Quillon') with one companion, 120 nights."""
    rng = np.random.default_rng(seed)
    elements = {"Quillon-b": Elements(period=612.0, ecc=0.33, inc=70.0, omega=120.0,
                                      node=0.0, periapsis_time=2460210.0, mass=0.004)}
    times = {"primary": Time(2460000.0 + np.sort(rng.uniform(0, 2400, n_rows)),
                             format="jd", scale="tdb")}
    return simulate_velocities(times, elements, 0.95, error=4.0 * u.m / u.s,
                               seed=seed + 1)


def sets(scale):
    """name -> (observations, SystemSpec) for the sets at ``scale`` times the rows."""
    calder = calder_table(epochs_per_companion=58 * scale)
    return {
        f"Calder, 4 companions, distance fixed, {232 * scale} rows": (
            observations_from(calder),
            SystemSpec(parallax=distance_prior(distance=CALDER_DISTANCE, key_prefix=""))),
        f"Ebbin, 1 companion, parallax sampled, {230 * scale} rows": (
            observations_from(one_companion_table(230 * scale)),
            SystemSpec(parallax=distance_prior("30 mas", "0.5 mas", key_prefix=""))),
        f"Tarrant, 4 companions, parallax sampled, {230 * scale} rows": (
            observations_from(tarrant_table(scale)),
            SystemSpec(parallax=distance_prior(*TARRANT_PARALLAX, key_prefix=""))),
        f"Quillon, velocities alone, {120 * scale} rows": (
            observations_from(rv_only_table(120 * scale)), SystemSpec()),
    }


def _cpu(fn):
    start = time.process_time()
    out = fn()
    return out, time.process_time() - start


def measure(name, obs, spec, seed=1):
    model = OrbitModel(obs, spec)
    key = "central.log10_mass" if "central.log10_mass" in model.names else next(
        n for n in model.names if "k_" in n)
    k = model.names.index(key)
    start, start_cpu = _cpu(lambda: find_start(model))
    settings = SamplerSettings(seed=seed, max_steps=MAX_STEPS, progress=False, threads=1)
    walkers = settings.n_walkers(model.n_dim)
    initial = start.walkers(model, walkers, np.random.default_rng(seed))
    coordinates = SamplerCoordinates.for_start(model, start.theta)
    sampled = coordinates.to_sampled(initial)
    # Compile before timing (numba's first call per process, or a cold cache).
    coordinates.log_prob(sampled)
    coordinates.log_prob_python(sampled)
    compiled = coordinates.compiled_arguments()
    chain, ours_cpu = _cpu(lambda: run_sampler(coordinates.log_prob, sampled, settings,
                                               key=coordinates.mass_key(),
                                               compiled=compiled))
    ess = chain.effective_samples(k)  # of the key quantity itself (key_tau where sampled
    tau_key = float(chain.key_tau if chain.key_tau is not None else chain.tau[k])  # apart)

    # 'before' and the straightforward loop move in the coordinates of before the angular
    # units (sky-fixed angles and short-arc states only): those are the references.
    coordinates = SamplerCoordinates(model, coordinates.depth_frame, coordinates.longitude)
    sampled = coordinates.to_sampled(initial)
    # How those coordinates mix under the same DE moves (tau of the key, compiled run).
    tau_before = float(run_sampler(coordinates.log_prob, sampled, settings).tau[k])
    # before: the Python path a step, and the plain checks on the finished chain
    before = emcee.EnsembleSampler(walkers, model.n_dim, coordinates.log_prob_python,
                                   vectorize=True, moves=[(emcee.moves.DEMove(), 1.0)])
    _, before_cpu = _cpu(lambda: before.run_mcmc(sampled, BEFORE_STEPS, progress=False))
    checks_cpu = _plain_checks_cpu(chain.steps, walkers, model.n_dim, settings)
    before_total = before_cpu / BEFORE_STEPS * chain.steps + checks_cpu
    # per step as before, and as many steps per effective sample as those coordinates take
    before_rate = walkers / tau_before / (before_total / chain.steps)

    # straightforward: stretch move, pure numpy, one walker per call
    def naive_log_prob(x):
        return coordinates.log_prob_python(x[None, :])[0]

    saved = kepler.numba_kernel
    kepler.numba_kernel = None
    try:
        naive = emcee.EnsembleSampler(walkers, model.n_dim, naive_log_prob)
        naive.random_state = np.random.RandomState(17).get_state()
        _, naive_cpu = _cpu(lambda: naive.run_mcmc(sampled, NAIVE_STEPS, progress=False))
    finally:
        kepler.numba_kernel = saved
    naive_step = naive_cpu / NAIVE_STEPS
    tau_stretch, stretch_steps, bound = _stretch_tau(coordinates, sampled, k)
    naive_rate = walkers / (tau_stretch * naive_step)
    ours_rate = ess / ours_cpu
    return {
        "set": name, "key": key, "walkers": walkers, "n_dim": model.n_dim,
        "compiled": model.compiled is not None, "start_cpu_s": start_cpu,
        "steps": chain.steps, "converged": chain.converged, "tau_key": tau_key,
        "ess_key": ess, "cpu_s_now": ours_cpu, "cpu_s_before": before_total,
        "ess_per_cpu_s_now": ours_rate, "ess_per_cpu_s_before": before_rate,
        "ess_per_cpu_s_straightforward": naive_rate,
        "now_vs_before": ours_rate / before_rate,
        "now_vs_straightforward": ours_rate / naive_rate,
        "tau_key_before": tau_before,
        "stretch_tau_key": tau_stretch, "stretch_steps": stretch_steps,
        "ratio_is_lower_bound": bound,
    }


def _plain_checks_cpu(steps, walkers, n_dim, settings):
    """CPU time of checking every coordinate at every check of a run of ``steps``.

    The cost of the estimator depends on the chain's shape, not its values, so it is
    timed on a chain of noise of this run's shape.
    """
    stored = np.random.default_rng(0).standard_normal((steps, walkers, n_dim))
    test = ConvergenceTest(every_coordinate=True)
    start = time.process_time()
    for checked in range(settings.check_every, steps + 1, settings.check_every):
        test.update(stored[:checked])
    test.tau_at(stored)
    return time.process_time() - start


def _stretch_tau(coordinates, sampled, k):
    walkers, n_dim = sampled.shape
    stretch = emcee.EnsembleSampler(walkers, n_dim, coordinates.log_prob, vectorize=True)
    stretch.random_state = np.random.RandomState(17).get_state()
    state, spent = sampled, 0.0
    while spent < STRETCH_CPU:
        state, cpu = _cpu(lambda s=state: stretch.run_mcmc(s, 1000, progress=False))
        spent += cpu
        tau = stretch.get_autocorr_time(tol=0, quiet=True)
        if np.all(np.isfinite(tau)) and stretch.iteration >= 50 * float(np.max(tau)):
            return float(tau[k]), stretch.iteration, False
    tau = stretch.get_autocorr_time(tol=0, quiet=True)
    return float(tau[k]), stretch.iteration, True


def run(report, scales=(1, 10)):
    rows = []
    for scale in scales:
        for name, (obs, spec) in sets(scale).items():
            print(f"-- {name}", flush=True)
            rows.append(measure(name, obs, spec))
            report.note(f"{name}: " + ", ".join(f"{key}={value}" for key, value in
                                                 rows[-1].items() if key != "set"))
    report.table("effective samples of the key coordinate per CPU-second", rows,
                 list(rows[0]))
    worst = min(r["now_vs_straightforward"] for r in rows)
    report.target("effective samples per CPU-second >= 250x the straightforward loop on "
                  "every set", worst >= 250,
                  f"lowest {worst:.0f}x; " + ", ".join(
                      f"{r['now_vs_straightforward']:.0f}x" for r in rows))
    gain = min(r["now_vs_before"] for r in rows)
    report.target("effective samples per CPU-second >= 2x before on every set", gain >= 2,
                  f"lowest {gain:.2f}x; " + ", ".join(f"{r['now_vs_before']:.2f}x"
                                                      for r in rows))

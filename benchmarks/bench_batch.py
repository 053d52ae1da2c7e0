"""Batch throughput: the same batch on 1 and on 2 local worker processes.

Twenty-four invented one-companion systems, each a full fit of a few seconds; the wall
time of ``run_batch`` includes starting the worker processes (a few seconds each: the
imports and the compiled kernel's cache), which a survey of thousands of systems pays
once per worker but a batch of a handful pays in full. Both runs must give the same
numbers for every system.
"""

from __future__ import annotations

import tempfile
import time
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.time import Time

from massfit import batch
from massfit.scenarios.simulate import Elements, simulate_astrometry, write_scenario

N_SYSTEMS = 24


def _make_systems(root):
    rng = np.random.default_rng(44)
    configs = root / "configs"
    configs.mkdir()
    for k in range(N_SYSTEMS):
        name = f"Fenwold-{k + 1}"
        period = float(rng.uniform(200, 900))
        elements = {"Gyle": Elements(period=period, ecc=float(rng.uniform(0.05, 0.5)),
                                     inc=float(rng.uniform(30, 75)), omega=80.0, node=40.0,
                                     periapsis_time=2460100.0)}
        times = {"Gyle": Time(2460000.0 + np.sort(rng.uniform(0, 1.5 * period, 30)),
                              format="jd", scale="tdb")}
        table = simulate_astrometry(times, elements, float(rng.uniform(0.5, 2.0)),
                                    parallax=20.0 * u.mas, error=0.3 * u.mas, seed=k)
        write_scenario(root / name, table, {}, name="obs.ecsv")
        (configs / f"{name}.toml").write_text(
            f'[data]\nfiles = ["{root / name / "obs.ecsv"}"]\n'
            f'[system]\ndistance = "50 pc"\n[sampler]\nseed = {k}\nmax_steps = 6000\n')
    return configs


def run(report):
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        configs = _make_systems(Path(tmp))
        for workers in (1, 2):
            out = Path(tmp) / f"out-{workers}"
            jobs = batch.collect_jobs(configs, out)
            t0 = time.perf_counter()
            table = batch.run_batch(jobs, out, workers=workers, progress=False)
            rows.append({"workers": workers, "systems": len(table),
                         "converged": int(np.sum(table["converged"])),
                         "wall_s": time.perf_counter() - t0,
                         "sum_of_fit_s": float(np.sum(table["seconds"])),
                         "mass_median_first": float(table["mass_msun_median"][0]),
                         "masses": dict(zip(table["system"], table["mass_msun_median"]))})
    speedup = rows[0]["wall_s"] / rows[1]["wall_s"]
    for row in rows:
        row["speedup"] = rows[0]["wall_s"] / row["wall_s"]
    same = rows[0].pop("masses") == rows[1].pop("masses")
    report.table(f"batch of {N_SYSTEMS} systems, 1 against 2 local workers", rows,
                 list(rows[0]))
    report.target("batch speed-up 2 workers / 1 worker >= 1.8 on 2 cores", speedup >= 1.8,
                  f"{speedup:.2f}x (same numbers on both: {same})")

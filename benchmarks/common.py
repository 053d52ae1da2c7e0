"""Shared pieces of the benchmarks: the invented data sets and a timer.

Nothing here describes a real object; the names and numbers are invented.
"""

from __future__ import annotations

import platform
import time
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.time import Time

from massfit.scenarios.simulate import Elements, simulate_astrometry

HERE = Path(__file__).resolve().parent

#: The four-companion benchmark system "Calder": a 0.9 M_sun star at 40 pc (fixed
#: distance) with four companions seen on 58 nights each (232 epochs in all).
CALDER_MASS = 0.9
CALDER_DISTANCE = "40 pc"
CALDER = {
    "Ashby": Elements(period=310.0, ecc=0.12, inc=62.0, omega=40.0, node=25.0,
                      periapsis_time=2460100.0),
    "Brenna": Elements(period=870.0, ecc=0.31, inc=64.0, omega=150.0, node=30.0,
                       periapsis_time=2460400.0),
    "Corwen": Elements(period=1650.0, ecc=0.22, inc=58.0, omega=260.0, node=21.0,
                       periapsis_time=2460900.0),
    "Dallow": Elements(period=2900.0, ecc=0.08, inc=66.0, omega=320.0, node=35.0,
                       periapsis_time=2461500.0),
}


def calder_table(epochs_per_companion=58, seed=2026):
    """The Calder data set: relative astrometry of four companions over ~8 years."""
    rng = np.random.default_rng(seed)
    times = {name: Time(2460000.0 + np.sort(rng.uniform(0, 2900, epochs_per_companion)),
                        format="jd", scale="tdb") for name in CALDER}
    return simulate_astrometry(times, CALDER, CALDER_MASS, parallax=25.0 * u.mas,
                               error=0.3 * u.mas, seed=seed + 1)


def one_companion_table(n_rows, seed=7):
    """``n_rows`` epochs of one invented companion ('Ebbin'), for the growth runs."""
    rng = np.random.default_rng(seed)
    elements = {"Ebbin": Elements(period=420.0, ecc=0.35, inc=48.0, omega=70.0, node=110.0,
                                  periapsis_time=2460050.0)}
    times = {"Ebbin": Time(2460000.0 + np.sort(rng.uniform(0, 2000, n_rows)), format="jd",
                           scale="tdb")}
    return simulate_astrometry(times, elements, 1.1, parallax=30.0 * u.mas,
                               error=0.5 * u.mas, seed=seed + 1)


def observations_from(table):
    """Observations straight from a simulated table (no file round trip)."""
    import tempfile

    import massfit
    from massfit.scenarios.simulate import write_scenario

    with tempfile.TemporaryDirectory() as tmp:
        write_scenario(tmp, table, {}, name="data.ecsv")
        return massfit.read_observations(Path(tmp) / "data.ecsv")


def machine():
    """One line about the machine the numbers come from."""
    import os

    cpu = platform.processor() or platform.machine()
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    return (f"{cpu}, {os.cpu_count()} logical CPUs, Python {platform.python_version()}, "
            f"{platform.system()} {platform.release()}")


def best_time(fn, repeat=5, number=1, clock=time.perf_counter):
    """Best time of ``number`` calls of ``fn`` over ``repeat`` tries, seconds per call.

    ``clock=time.process_time`` counts the CPU time of this process only: on a machine
    shared with other jobs that is the honest "per core" cost, where wall time also
    counts the waits for a core.
    """
    best = np.inf
    for _ in range(repeat):
        start = clock()
        for _ in range(number):
            fn()
        best = min(best, (clock() - start) / number)
    return best


#: A second four-companion system, "Tarrant", with the parallax sampled (a normal prior
#: from an invented trigonometric parallax): a 1.35 M_sun star at about 55 pc whose
#: companions were seen on 52-64 nights each (230 epochs in all), none of it tuned for
#: the benchmark. Invented numbers.
TARRANT_MASS = 1.35
TARRANT_PARALLAX = ("18.2 mas", "0.35 mas")  # the prior: value and error
TARRANT = {
    "Fenwick": Elements(period=455.0, ecc=0.27, inc=118.0, omega=95.0, node=140.0,
                        periapsis_time=2459800.0),
    "Gorsey": Elements(period=1210.0, ecc=0.05, inc=34.0, omega=210.0, node=75.0,
                       periapsis_time=2460310.0),
    "Halloran": Elements(period=2480.0, ecc=0.41, inc=81.0, omega=300.0, node=160.0,
                         periapsis_time=2461020.0),
    "Ibbotson": Elements(period=4100.0, ecc=0.18, inc=52.0, omega=15.0, node=5.0,
                         periapsis_time=2458900.0),
}
TARRANT_EPOCHS = {"Fenwick": 64, "Gorsey": 58, "Halloran": 56, "Ibbotson": 52}


def tarrant_table(scale=1, seed=31):
    """The Tarrant data set: four companions over ~9 years, parallax 18.3 mas (true).

    ``scale`` multiplies the epochs of every companion (10 gives the 10x-rows set).
    """
    rng = np.random.default_rng(seed)
    times = {name: Time(2459500.0 + np.sort(rng.uniform(0, 3300, n * scale)), format="jd",
                        scale="tdb") for name, n in TARRANT_EPOCHS.items()}
    return simulate_astrometry(times, TARRANT, TARRANT_MASS, parallax=18.3 * u.mas,
                               error=np.array([0.4]) * u.mas, seed=seed + 1)

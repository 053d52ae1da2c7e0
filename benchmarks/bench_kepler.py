"""Kepler solver speed and accuracy, every path measured side by side in one run.

Rates are million solves per second on ONE core (the compiled kernel is serial), for
2e6 random (M, e) with M in [-50, 50] rad and e uniform in [0, 0.999]. Each path is
timed by CPU time of this process (the per-core cost, whatever else runs on the
machine) and by wall time.
"""

from __future__ import annotations

import math
import time

import numpy as np

from massfit.orbits import kepler

from common import best_time

N = 2_000_000


def plain_numpy_newton(m, e, tol=1e-12, max_iter=100):
    """The straightforward way: Newton until every point is converged.

    Started at E = M for e < 0.8 and at E = pi (on M's turn) above, the usual textbook
    choice (common practice): from E = M alone Newton's method can diverge near e = 1.
    """
    turn = 2 * np.pi * np.floor((m + np.pi) / (2 * np.pi))
    big_e = np.where(e < 0.8, m, turn + np.pi * np.sign(m - turn))
    for _ in range(max_iter):
        f = big_e - e * np.sin(big_e) - m
        if np.all(np.abs(f) <= tol):
            break
        big_e = big_e - f / (1.0 - e * np.cos(big_e))
    return big_e


def _numba_sincos_floor():
    if not kepler.HAVE_NUMBA:
        return None
    import numba

    @numba.njit(cache=True)
    def floor(m, out):  # one sin + cos pair per point: the cost a solver cannot beat
        for i in range(m.size):
            out[i] = math.sin(m[i]) + math.cos(m[i])
    return floor


def run(report):
    rng = np.random.default_rng(12)
    m = rng.uniform(-50.0, 50.0, N)
    e = rng.uniform(0.0, 0.999, N)
    rows = []

    def add(name, fn, repeat, big_e=None, note=""):
        worst = (float(np.max(np.abs(big_e - e * np.sin(big_e) - m)))
                 if big_e is not None else float("nan"))
        cpu = best_time(fn, repeat, clock=time.process_time)
        wall = best_time(fn, repeat)
        rows.append({"path": name, "Msolves_per_s": N / cpu / 1e6,
                     "wall_Msolves_per_s": N / wall / 1e6, "max_residual": worst,
                     "note": note})

    newton = plain_numpy_newton(m, e)
    add("plain numpy Newton loop (reference)", lambda: plain_numpy_newton(m, e), 3, newton)
    add("massfit numpy path (Halley, fused cos/sin)", lambda: kepler._kepler_cs_numpy(m, e),
        3, kepler.solve_kepler_numpy(m, e))
    if kepler.HAVE_NUMBA:
        big_e, _, _ = kepler.kepler_cs(m, e)
        add("massfit compiled kernel (E, cos E, sin E)", lambda: kepler.kepler_cs(m, e), 7,
            big_e)
        floor = _numba_sincos_floor()
        out = np.empty_like(m)
        floor(m[:4], out[:4])
        add("floor: one sin+cos pair, compiled", lambda: floor(m, out), 7,
            note="not a solver")
    add("floor: np.sin + np.cos", lambda: (np.sin(m), np.cos(m)), 3, note="not a solver")
    reference = rows[0]["Msolves_per_s"]
    for row in rows:
        row["ratio_to_plain_newton"] = row["Msolves_per_s"] / reference
    report.table("Kepler solvers (rates from CPU time; wall-clock beside)", rows,
                 ["path", "Msolves_per_s", "ratio_to_plain_newton", "wall_Msolves_per_s",
                  "max_residual", "note"])
    if kepler.HAVE_NUMBA:
        fast = rows[2]
        report.target("Kepler solver >= 15 M solves/s per core",
                      fast["Msolves_per_s"] >= 15,
                      f"{fast['Msolves_per_s']:.1f} M/s, {fast['ratio_to_plain_newton']:.1f}x "
                      f"the plain numpy Newton loop; sin+cos floor "
                      f"{rows[3]['Msolves_per_s']:.1f} M/s")
    worst = max(r["max_residual"] for r in rows if np.isfinite(r["max_residual"])
                and r["path"].startswith("massfit"))
    report.target("Kepler accuracy abs(E - e sin E - M) <= 1e-12", worst <= 1e-12,
                  f"worst {worst:.2e} over {N} random points")

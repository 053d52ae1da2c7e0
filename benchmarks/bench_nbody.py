"""N-body log-posterior: the compiled integrator against the stacked numpy one.

The invented interacting pair of ``massfit.orbits.nbody.simulate_interacting_pair`` (two
companions over 1000 days, 120 epochs, errors of 2e-5 au), the N-body model at its
default tolerance.
One ensemble of walkers scattered about the truth is evaluated with each integrator
in turn, in the same run, for several ensemble sizes; the time is the best of a few
repeats (CPU time of this process, so that other jobs on the machine move it less).
"""

from __future__ import annotations

import tempfile
import time
from pathlib import Path

import numpy as np

from massfit import CompanionSpec, NBody, SystemSpec, read_observations
from massfit.orbits import nbody
from massfit.model.orbit_model import OrbitModel
from massfit.priors import LogUniform

WALKERS = (8, 16, 32, 64)
REPEATS = 3
#: The target: at 32 walkers (a typical ensemble) the compiled integrator is at
#: least this many times faster per log-posterior call.
TARGET_SPEEDUP = 10.0
#: Tolerance of the reference against which both integrators' errors are measured.
REFERENCE_RTOL = 1e-14


def _model(folder):
    # Errors of 2e-5 au: precise data, where the integration error matters most.
    path = nbody.simulate_interacting_pair(Path(folder) / "pair.ecsv", err_au=2e-5)
    comps = {n: CompanionSpec(n, mass=LogUniform(1e-4, 0.5))
             for n in nbody.PAIR_TRUTH["companions"]}
    return OrbitModel(read_observations(path),
                      SystemSpec(companions=comps, dynamics=NBody()))


def _truth_theta(model):
    truth = nbody.PAIR_TRUTH
    values = {"central_mass": truth["central_mass"], "parallax": None}
    for name, el in truth["companions"].items():
        n_motion = 2 * np.pi / el["period"]
        values[name] = dict(period=el["period"], ecc=el["ecc"], inc=np.radians(el["inc"]),
                            omega=np.radians(el["omega"]), node=np.radians(el["node"]),
                            mass=el["mass"],
                            mean_anomaly_ref=el["mean0"] + n_motion * model.reference_epoch(
                                name))
    return model.recentre(model.from_physical(values))


def _seconds(model, theta, compiled):
    model.dynamics.compiled = compiled
    model.log_prob(theta[:2])  # compile (cached after the first run) and warm up
    best = np.inf
    for _ in range(REPEATS):
        t0 = time.process_time()
        lp = model.log_prob(theta)
        best = min(best, time.process_time() - t0)
    return best, lp


def run(report, figure_path=None):
    if not nbody.HAVE_NUMBA:
        report.note("numba is not installed: only the numpy integrator exists here.")
        return
    rng = np.random.default_rng(5)
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        model = _model(tmp)
        centre = _truth_theta(model)
        rtol = model.dynamics.rtol
        for n in WALKERS:
            theta = centre + 1e-4 * rng.standard_normal((n, model.n_dim))
            model.dynamics.rtol = REFERENCE_RTOL
            model.dynamics.compiled = True
            reference = model.log_prob(theta)
            model.dynamics.rtol = rtol
            fast, lp_fast = _seconds(model, theta, True)
            slow, lp_slow = _seconds(model, theta, False)
            rows.append({"walkers": n, "compiled_ms": 1e3 * fast, "numpy_ms": 1e3 * slow,
                         "speedup": slow / fast,
                         "compiled_dlogp": float(np.max(np.abs(lp_fast - reference))),
                         "numpy_dlogp": float(np.max(np.abs(lp_slow - reference)))})
    report.table(f"N-body log-posterior per call at rtol {rtol:g} (CPU time, best of "
                 f"{REPEATS})", rows, ["walkers", "compiled_ms", "numpy_ms", "speedup",
                                       "compiled_dlogp", "numpy_dlogp"])
    at32 = next(r for r in rows if r["walkers"] == 32)
    report.target(f"compiled N-body >= {TARGET_SPEEDUP:g} x numpy at 32 walkers",
                  at32["speedup"] >= TARGET_SPEEDUP, f"{at32['speedup']:.1f} x")
    report.note(f"Both integrators are DOP853 at the same (default) tolerance; "
                f"*_dlogp is the largest difference of each one's log-posterior from the "
                f"compiled integrator's at rtol {REFERENCE_RTOL:g} (integration error "
                f"only), over walkers scattered by 1e-4 about the truth.")
    if figure_path is not None:
        _figure(rows, figure_path)


def _figure(rows, path):
    import matplotlib.pyplot as plt
    from matplotlib.ticker import NullLocator

    from massfit.plot import COLUMN_WIDTH, STYLE

    walkers = [r["walkers"] for r in rows]
    with plt.rc_context(STYLE):
        fig, ax = plt.subplots(figsize=(COLUMN_WIDTH, 2.6))
        ax.loglog(walkers, [r["numpy_ms"] for r in rows], "o-", label="numpy (stacked solve_ivp)")
        ax.loglog(walkers, [r["compiled_ms"] for r in rows], "s-", label="compiled (numba)")
        for r in rows:
            ax.annotate(f"{r['speedup']:.0f}x", (r["walkers"], r["compiled_ms"]),
                        textcoords="offset points", xytext=(0, 6), ha="center",
                        fontsize="x-small")
        ax.set_xlabel("walkers per call")
        ax.set_ylabel("CPU time per call [ms]")
        ax.set_title("N-body log-posterior, invented pair (ratio annotated)",
                     fontsize="x-small")
        ax.xaxis.set_minor_locator(NullLocator())
        ax.set_xticks(walkers)
        ax.set_xticklabels([str(w) for w in walkers])
        ax.legend(fontsize="x-small")
        fig.tight_layout()
        fig.savefig(path, dpi=150)
    plt.close(fig)

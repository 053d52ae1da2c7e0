"""How the log-posterior's cost grows with the number of rows, and the memory of a big fit.

Time per evaluation (CPU time of this process): one call of ``OrbitModel.log_prob``
for 32 walkers (as emcee makes it), for 1e2 to 1e6 rows of one companion.
Memory: a fit of 1e6 rows (short chain: memory, not convergence, is measured) in a
fresh subprocess, whose peak resident set size the operating system reports.
"""

from __future__ import annotations

import json
import subprocess
import sys
import textwrap
import time

import numpy as np

from massfit.model.orbit_model import OrbitModel
from massfit.model.specs import SystemSpec
from massfit.priors import Fixed

from common import HERE, best_time, one_companion_table, observations_from

ROWS = [100, 300, 1_000, 3_000, 10_000, 30_000, 100_000, 300_000, 1_000_000]
WALKERS = 32
BIG_FIT_ROWS = 1_000_000


def _ensemble(model, rng):
    # Walkers about the truth of one_companion_table; log_prob only needs valid points.
    theta = np.empty((WALKERS, model.n_dim))
    values = {"central_mass": 1.1, "parallax": 30.0,
              "Ebbin": {"period": 420.0, "ecc": 0.35, "omega": np.radians(70.0),
                        "inc": np.radians(48.0), "node": np.radians(110.0),
                        "mean_anomaly_ref": 1.0}}
    base = model.from_physical(values)
    for k in range(WALKERS):
        theta[k] = base + 1e-6 * rng.standard_normal(model.n_dim)
    return theta


def run(report, plot_path):
    rng = np.random.default_rng(3)
    rows = []
    for n in ROWS:
        obs = observations_from(one_companion_table(n))
        model = OrbitModel(obs, SystemSpec(parallax=Fixed(30.0)))
        theta = _ensemble(model, rng)
        assert np.all(np.isfinite(model.log_prob(theta)))
        number = max(1, int(2e6 // (n * WALKERS)))
        seconds = best_time(lambda: model.log_prob(theta), repeat=3, number=number,
                            clock=time.process_time)
        rows.append({"rows": n, "seconds_per_call": seconds,
                     "us_per_walker_eval": seconds / WALKERS * 1e6,
                     "ns_per_row_eval": seconds / (WALKERS * n) * 1e9})
    log_n = np.log10([r["rows"] for r in rows])
    log_t = np.log10([r["seconds_per_call"] for r in rows])
    slope = float(np.polyfit(log_n, log_t, 1)[0])
    upper = float(np.polyfit(log_n[-5:], log_t[-5:], 1)[0])
    report.table("time per log-posterior evaluation against rows", rows, list(rows[0]))
    report.target("growth linear in rows, log-log slope 0.9-1.1 (1e2 to 1e6 rows)",
                  0.9 <= slope <= 1.1,
                  f"slope {slope:.3f} over 1e2-1e6 ({upper:.3f} over 1e4-1e6)")
    _plot(rows, slope, plot_path)

    peak_mb, info = _big_fit_rss()
    report.table("fit of 1e6 rows in a subprocess", [dict(info, peak_rss_MB=peak_mb)],
                 list(info) + ["peak_rss_MB"])
    report.target("a fit of 1e6 rows within 2 GB RSS", peak_mb <= 2048,
                  f"peak RSS {peak_mb:.0f} MB")


def _plot(rows, slope, path):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    n = np.array([r["rows"] for r in rows])
    t = np.array([r["seconds_per_call"] for r in rows])
    fig, ax = plt.subplots(figsize=(5.5, 4.0))
    ax.loglog(n, t * 1e3, "o-", label=f"log_prob, {WALKERS} walkers (slope {slope:.2f})")
    ax.loglog(n, t[-1] * 1e3 * n / n[-1], "k:", label="linear in rows")
    ax.set_xlabel("rows of astrometry")
    ax.set_ylabel("time per evaluation [ms]")
    ax.legend(loc="upper left")
    ax.grid(True, which="both", alpha=0.3)
    fig.tight_layout()
    fig.savefig(path, dpi=150)
    plt.close(fig)


def _big_fit_rss():
    """Peak RSS of ``massfit fit`` on a file of 1e6 rows, in a fresh process.

    The file is written here; the child does only what a user's run does (read the
    file, start, sample, summarise and write the results) and reports its own peak
    (Linux: VmHWM in kB, which exec resets), so nothing this process ran can inflate
    it.
    """
    import tempfile
    from pathlib import Path

    from massfit.scenarios.simulate import write_scenario

    with tempfile.TemporaryDirectory() as tmp:
        write_scenario(tmp, one_companion_table(BIG_FIT_ROWS), {}, name="data.ecsv")
        data, out = Path(tmp) / "data.ecsv", Path(tmp) / "fit"
        code = textwrap.dedent(f"""
            import json, sys, time
            from massfit.cli.commands import main

            def peak_kb():
                # VmHWM: this program's own peak. ru_maxrss would not do: Linux keeps
                # it across exec, so it starts at the forking parent's size.
                for line in open("/proc/self/status"):
                    if line.startswith("VmHWM:"):
                        return int(line.split()[1])
            t0 = time.perf_counter()
            status = main(["fit", {str(data)!r}, "--parallax", "30 mas", "--walkers", "16",
                           "--max-steps", "100", "--no-plots", "--quiet", "--out",
                           {str(out)!r}])
            summary = json.load(open({str(out / "summary.json")!r}))
            print(json.dumps({{"rows": summary["inputs"]["rows_used"], "walkers": 16,
                              "steps": 100, "exit_status": status,
                              "fit_seconds": time.perf_counter() - t0,
                              "central_mass_kg": summary["central_mass"]["median"],
                              "peak_kb": peak_kb()}}))
        """)
        proc = subprocess.run([sys.executable, "-c", code],
                              capture_output=True, text=True, check=False)
    if proc.returncode != 0:
        raise RuntimeError(f"the 1e6-row fit failed:\n{proc.stderr[-2000:]}")
    info = json.loads(proc.stdout.strip().splitlines()[-1])
    return info.pop("peak_kb") / 1024.0, info

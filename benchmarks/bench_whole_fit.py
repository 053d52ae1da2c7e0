"""Where a whole fit's time goes on the four-companion Tarrant set (parallax sampled).

The steps of ``massfit fit`` through the API, each timed in CPU and wall time in this
one process: the start, the sampling (to convergence, default settings), the result
(summary, checks), the output folder as ``massfit fit`` writes it (numbers alone, then
with the figures in one process and in two; matplotlib not yet imported, as in a fit),
and each default figure written as PNG and PDF, massfit's way and, side by side, the
straightforward way (``savefig(bbox_inches="tight")`` per file; the corner with a dot
for every sample, as ``corner.corner`` draws it), and the tables.
"""

from __future__ import annotations

import tempfile
import time
from pathlib import Path

import numpy as np

from massfit.model.orbit_model import OrbitModel
from massfit.model.specs import SystemSpec
from massfit.plot.figures import FIGURES, applicable_figures
from massfit.plot.style import save_figure
from massfit.run import assemble_result, distance_prior
from massfit.sample.chain import SamplerSettings, run_sampler
from massfit.sample.reparameterisation import SamplerCoordinates
from massfit.start.search import find_start

from common import TARRANT_PARALLAX, observations_from, tarrant_table


def _children_cpu():
    """CPU seconds of this process's finished child processes (the forked figures)."""
    import os

    times = os.times()
    return times.children_user + times.children_system


class _Clock:
    def __init__(self):
        self.rows = []

    def __call__(self, step, fn, keep=False):
        wall, cpu, forked = time.perf_counter(), time.process_time(), _children_cpu()
        out = fn()
        self.rows.append({"step": step, "cpu_s": time.process_time() - cpu,
                          "second_process_cpu_s": _children_cpu() - forked,
                          "wall_s": time.perf_counter() - wall})
        return self.rows[-1] if keep else out


def _straightforward(result, stem, folder):
    """The figure written without massfit's savings: every sample a dot in the corner
    (corner's own dots, rasterised per panel) and each file laid out by
    ``bbox_inches="tight"``."""
    import matplotlib.pyplot as plt

    options = ({"corner_kwargs": {"plot_datapoints": True,
                                  "data_kwargs": {"ms": 1.0, "alpha": 0.1}}}
               if stem.startswith("corner") else {})
    fig = FIGURES[stem](result, **options)
    for ext in ("png", "pdf"):
        fig.savefig(Path(folder) / f"{stem}_plain.{ext}", bbox_inches="tight",
                    dpi=300 if ext == "png" else None)
    plt.close(fig)


def run(report, threads=None):
    import os

    os.environ["MPLBACKEND"] = "Agg"  # as massfit fit finds it on a machine without a screen
    clock = _Clock()
    obs = observations_from(tarrant_table())
    model = clock("model", lambda: OrbitModel(obs, SystemSpec(
        parallax=distance_prior(*TARRANT_PARALLAX, key_prefix=""))))
    start = clock("start", lambda: find_start(model))
    settings = SamplerSettings(seed=1, progress=False, threads=threads)
    initial = start.walkers(model, settings.n_walkers(model.n_dim), np.random.default_rng(1))
    coordinates = SamplerCoordinates.for_start(model, start.theta)
    chain = clock("sampling", lambda: coordinates.restore(run_sampler(
        coordinates.log_prob, coordinates.to_sampled(initial), settings,
        key=coordinates.mass_key(), compiled=coordinates.compiled_arguments())))
    result = clock("result (summary, mode and prior checks)",
                   lambda: assemble_result(model, chain, start, settings))
    clock("summary text", lambda: result.report())
    with tempfile.TemporaryDirectory() as tmp:
        # The output folder as massfit fit writes it: numbers alone, then with the
        # figures in two processes (the corner in a forked one from the start, while
        # this one writes the numbers and draws the rest) and in one. Two first: the
        # fit's process has not imported matplotlib yet, and neither has this one.
        saving = _Clock()
        saving("save, numbers only", lambda: result.save(Path(tmp) / "a", plots=False))
        for n in (2, 1):
            saving(f"save with figures, {n} process(es)",
                   lambda n=n: result.save(Path(tmp) / f"p{n}", processes=n))
        import matplotlib.pyplot as plt

        side = []
        for stem in applicable_figures(result):
            def draw(stem=stem):
                fig = FIGURES[stem](result)
                save_figure(fig, str(Path(tmp) / stem))
                plt.close(fig)
            row = clock(f"figure {stem} (png, pdf)", draw, keep=True)
            plain = _Clock()
            plain("plain", lambda stem=stem: _straightforward(result, stem, tmp))
            side.append({"figure": stem, "massfit_cpu_s": row["cpu_s"],
                         "straightforward_cpu_s": plain.rows[0]["cpu_s"],
                         "ratio": plain.rows[0]["cpu_s"] / row["cpu_s"]})
        clock("tables", lambda: result.write_tables(tmp))
    total = {"step": "total", "cpu_s": sum(r["cpu_s"] for r in clock.rows),
             "wall_s": sum(r["wall_s"] for r in clock.rows)}
    rows = clock.rows + [total]
    report.table("the output folder as massfit fit writes it (cpu_s: this process; "
                 "second_process_cpu_s: the forked corner's)", saving.rows,
                 ["step", "cpu_s", "second_process_cpu_s", "wall_s"])
    report.table(f"a fit of the Tarrant set, step by step ({chain.steps} steps, "
                 f"{chain.walkers} walkers, converged={chain.converged})", rows,
                 ["step", "cpu_s", "wall_s"])
    report.table("each default figure (png and pdf) in this process, massfit's way and "
                 "the straightforward way, one after the other (massfit's first: the "
                 "first figure's imports are counted in massfit's column)", side,
                 ["figure", "massfit_cpu_s", "straightforward_cpu_s", "ratio"])
    figures = sum(r["cpu_s"] for r in clock.rows if r["step"].startswith("figure"))
    start_cpu = clock.rows[1]["cpu_s"]
    numbers, two, _ = (r["wall_s"] for r in saving.rows)
    report.target("default figures of a 4-companion fit in <= 5 s", two - numbers <= 5.0,
                  f"{two - numbers:.1f} s wall in two processes (as massfit fit draws "
                  f"them); {figures:.1f} s CPU one after another")
    report.target("the start of a 4-companion fit in <= 3 s", start_cpu <= 3.0,
                  f"{start_cpu:.1f} s CPU")
    # The steps as massfit fit runs them, summed from this process's clocks (start,
    # sampling and result here, then the output folder with the corner drawn in a
    # second process beside the rest), and the command itself timed as a whole
    # process, reading, imports and all: the target is the command's.
    steps = {r["step"]: r["wall_s"] for r in clock.rows}
    as_run = (steps["model"] + steps["start"] + steps["sampling"]
              + steps["result (summary, mode and prior checks)"] + steps["summary text"] + two)
    command = _command_walls(obs)
    report.table("massfit fit as a command on the Tarrant set (a whole process: imports, "
                 "reading, start, sampling, the output folder with figures), beside the "
                 "sum of this process's steps", [
                     {"what": f"the command, run {k + 1}", "wall_s": w}
                     for k, w in enumerate(command)] + [
                     {"what": "this process's steps summed (no imports, no reading)",
                      "wall_s": as_run}], ["what", "wall_s"])
    wall = float(np.median(command))
    report.target("a 4-companion fit, figures included, in <= 20 s", wall <= 20,
                  f"{wall:.1f} s wall, median of {len(command)} runs of massfit fit as a "
                  f"command ({min(command):.1f}-{max(command):.1f} s; the steps summed in "
                  f"one process {as_run:.1f} s); {total['cpu_s']:.1f} s CPU with every "
                  f"step one after another")


def _command_walls(obs, runs=3):
    """Wall seconds of ``massfit fit`` on the Tarrant set as a command, ``runs`` times
    (the same arguments a user would type; a fresh process each time)."""
    import subprocess
    import sys

    from common import tarrant_table

    walls = []
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "tarrant.ecsv"
        tarrant_table().write(path)
        value, error = TARRANT_PARALLAX
        for k in range(runs):
            clock = time.perf_counter()
            subprocess.run([sys.executable, "-m", "massfit", "fit", str(path), "--parallax",
                            value, "--parallax-err", error, "--seed", "1", "--out",
                            str(Path(tmp) / f"out{k}"), "--quiet"], check=True,
                           capture_output=True)
            walls.append(time.perf_counter() - clock)
    return walls

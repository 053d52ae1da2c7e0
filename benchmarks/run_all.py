"""Run the benchmarks and write benchmarks/RESULTS.md, results.ecsv/json and growth.png.

    python benchmarks/run_all.py            # everything (about 10 minutes on 2 cores)
    python benchmarks/run_all.py kepler growth

Timings are never pass/fail tests; each target here is a ratio or a figure measured in
this one run, beside its reference. The machine is named in the output.
"""

from __future__ import annotations

import datetime as _dt
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parent))

import numpy as np  # noqa: E402

from common import machine  # noqa: E402


class Report:
    """Collects each benchmark's tables, targets and notes.

    Results are kept per benchmark in ``results.json``; a run replaces the entries of
    the benchmarks it ran and RESULTS.md is rebuilt from all entries, each with the
    date and machine it was measured on.
    """

    def __init__(self):
        self.entries = {}
        self.current = None

    def start(self, name):
        stamp = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
        self.current = {"name": name, "started": stamp, "machine": machine(),
                        "parts": [], "targets": []}
        self.entries[name] = self.current

    def finish(self):
        self.current["load_average"] = _load()

    def table(self, title, rows, columns):
        lines = [f"### {title}", "", "| " + " | ".join(columns) + " |",
                 "|" + "---|" * len(columns)]
        for row in rows:
            lines.append("| " + " | ".join(_fmt(row.get(c, "")) for c in columns) + " |")
        self.current["parts"].append("\n".join(lines) + "\n")
        print("\n".join(lines), flush=True)

    def target(self, name, met, detail):
        self.current["targets"].append({"target": name, "met": bool(met),
                                        "measured": detail})
        print(f"TARGET {'met ' if met else 'MISSED'} {name}: {detail}", flush=True)

    def note(self, text):
        self.current["parts"].append(text + "\n")
        print(text, flush=True)

    def write(self, folder, order):
        import json

        store = folder / "results.json"
        entries = json.loads(store.read_text()) if store.exists() else {}
        entries.update(self.entries)
        store.write_text(json.dumps(entries, indent=1) + "\n")
        listed = [entries[name] for name in order if name in entries]
        head = ["# massfit benchmarks", "",
                "Written by `python benchmarks/run_all.py`; each section names when and on "
                "what it ran, and the load average at its end (other jobs may share the "
                "machine: wall-clock figures move with the load, CPU-time figures and "
                "side-by-side ratios much less).", "",
                "| benchmark | target | met | measured |", "|---|---|---|---|"]
        for entry in listed:
            head += [f"| {entry['name']} | {t['target']} | {'yes' if t['met'] else 'NO'} | "
                     f"{t['measured']} |" for t in entry["targets"]]
        body = []
        for entry in listed:
            body.append(f"## {entry['name']}\n\nRun {entry['started']} on {entry['machine']}; "
                        f"load average at the end {entry.get('load_average', '?')}.\n")
            body.extend(entry["parts"])
        text = "\n".join(head) + "\n\n" + "\n".join(body)
        path = folder / "RESULTS.md"
        # A hand-written "## Analysis" section at the end survives a rerun.
        old = path.read_text() if path.exists() else ""
        if "\n## Analysis" in old:
            text += "\n" + old[old.index("\n## Analysis") + 1:]
        path.write_text(text)
        from astropy.table import Table

        rows = [(e["name"], t["target"], t["met"], t["measured"], e["started"])
                for e in listed for t in e["targets"]]
        table = Table(rows=rows, names=("benchmark", "target", "met", "measured", "run_utc"))
        table.meta["machine"] = machine()
        table.write(folder / "results.ecsv", format="ascii.ecsv", overwrite=True)


def _load():
    import os

    try:
        return " / ".join(f"{x:.1f}" for x in os.getloadavg())
    except OSError:
        return "unknown"


def _fmt(value):
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "no"
    if isinstance(value, (float, np.floating)):
        if value == 0 or not np.isfinite(value):
            return f"{value}"
        return f"{value:.3g}" if abs(value) < 1e4 else f"{value:.4g}"
    return str(value)


def main(argv=None):
    import bench_batch
    import bench_growth
    import bench_kepler
    import bench_nbody
    import bench_perturbed
    import bench_sampling
    import bench_sets
    import bench_threads
    import bench_whole_fit

    order = {"kepler": lambda r: bench_kepler.run(r),
             "sampling": lambda r: bench_sampling.run(r),
             "growth": lambda r: bench_growth.run(r, HERE / "growth.png"),
             "batch": lambda r: bench_batch.run(r),
             "nbody": lambda r: bench_nbody.run(r, HERE / "nbody_speed.png"),
             "perturbed": lambda r: bench_perturbed.run(r),
             "sets": lambda r: bench_sets.run(r, scales=(1,)),
             # the same four sets at ten times the rows (about an hour on two cores)
             "sets10": lambda r: bench_sets.run(r, scales=(10,)),
             "whole_fit": lambda r: bench_whole_fit.run(r),
             "threads": lambda r: bench_threads.run(r)}
    selected = list(argv if argv else sys.argv[1:]) or list(order)
    unknown = set(selected) - set(order)
    if unknown:
        print(f"unknown benchmark(s) {sorted(unknown)}; choose from {list(order)}",
              file=sys.stderr)
        return 2
    report = Report()
    for name in selected:
        print(f"== {name}", flush=True)
        report.start(name)
        order[name](report)
        report.finish()
        report.write(HERE, list(order))
    print(f"written {HERE / 'RESULTS.md'} and {HERE / 'results.ecsv'}")
    return 0


if __name__ == "__main__":
    sys.exit(main())

"""What the seed-by-seed studies share: the output options and run-or-redraw."""

from __future__ import annotations

import argparse
import json
from pathlib import Path


def parser(doc, results, figure) -> argparse.ArgumentParser:
    """An argument parser with ``--results``, ``--figure`` and ``--report-only``."""
    out = argparse.ArgumentParser(description=doc.splitlines()[0])
    out.add_argument("--results", type=Path, default=results)
    out.add_argument("--figure", type=Path, default=figure)
    out.add_argument("--report-only", action="store_true",
                     help="redraw the figure from the results file")
    return out


def run_or_redraw(args, compute, summarise, figure):
    """Run the study (``compute() -> report``) or reload it, then summarise and draw.

    The report is written as JSON with its ``summary`` (``summarise(report)``).
    """
    if args.report_only:
        report = json.loads(args.results.read_text())
    else:
        report = compute()
        report["summary"] = summarise(report)
        args.results.parent.mkdir(parents=True, exist_ok=True)
        args.results.write_text(json.dumps(report, indent=1, default=str) + "\n")
        print(f"written to {args.results}")
    print(json.dumps(report["summary"], indent=1))
    figure(report, args.figure)
    print(f"figure: {args.figure}")
    return report


def read_records(path) -> dict:
    """A study's results file of one JSON record a line, as index -> record ({} where
    there is no file yet): what a resumed study has done. A line cut short by an
    interrupted write (the last one) is left out, to be redone."""
    path = Path(path)
    done = {}
    if not path.exists():
        return done
    lines = path.read_text().splitlines()
    for k, line in enumerate(lines):
        try:
            record = json.loads(line)
        except json.JSONDecodeError:
            if k == len(lines) - 1:
                continue  # the interrupted last write
            raise
        done[record["index"]] = record
    return done

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

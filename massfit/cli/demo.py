"""``massfit demo``: fit the bundled invented example and compare with its truth."""

from __future__ import annotations

import argparse
import json
import tempfile
from pathlib import Path

from massfit.cli.fit import finish, fit_into
from massfit.cli.options import sampler_options

__all__ = ["add_parser", "run", "compare_with_truth"]


def add_parser(sub):
    demo = sub.add_parser(
        "demo", help="fit the bundled invented example and compare with its truth",
        description="Fit the bundled example (four moons of an invented gas giant) and "
                    "print the result beside the truth it was simulated from.")
    demo.add_argument("--out", metavar="DIR", help="output folder (default: a new "
                      "temporary folder, named at the end)")
    sampler_options(demo)
    demo.add_argument("--no-plots", action="store_true", help="skip the figures")
    demo.add_argument("--force", action="store_true", default=True, help=argparse.SUPPRESS)
    demo.add_argument("--quiet", action="store_true", help="print only the result")


def run(args):
    from massfit.config.fit import FitSetup
    from massfit.scenarios.examples import demo_setup

    setup: FitSetup = demo_setup()
    # Never into the working folder unasked: a new temporary folder unless one is named.
    setup.output = (Path(args.out) if args.out
                    else Path(tempfile.mkdtemp(prefix="massfit-demo-")))
    # The demo replaces its own earlier result, never a folder massfit did not write.
    args = argparse.Namespace(**vars(args), parallax=None, parallax_err=None, distance=None)
    result = fit_into(setup, args, force=True, inputs=setup.files)
    status = finish(result, setup.output)
    truth = json.loads((Path(setup.files[0]).parent / "truth.json").read_text())
    print("\n" + compare_with_truth(result, truth))
    print(f"\nThe result (numbers, samples, tables and figures) is in {setup.output}/")
    return status


def compare_with_truth(result, truth):
    from massfit.result.fit_result import format_value
    from massfit.summarise.rounding import WIDE_LABEL

    s = result.summary
    rows = [("GM [km^3/s^2]", s["central_gm"], truth["central_gm_km3_s2"]),
            ("mass [M_jup]", s["central_mass_jupiter"], truth["central_mass_Mjup"])]
    for name, elements in truth["companions"].items():
        comp = s["companions"][name]
        rows.append((f"{name} P [d]", comp["period"], elements["period"]))
        rows.append((f"{name} e", comp["eccentricity"], elements["ecc"]))
        rows.append((f"{name} i [deg]", comp["inclination"], elements["inc"]))
    lines = ["Fit beside the truth the example was simulated from:"]
    for label, block, true in rows:
        inside = block["lower_95"] <= true <= block["upper_95"]
        lines.append(f"  {label:<16} fitted {format_value(block):<34} true {true:<12.8g}"
                     f" {'inside' if inside else 'OUTSIDE'} the {WIDE_LABEL} interval")
    lines.append(f"  (of {len(rows)} quantities, about {0.0455 * len(rows):.1f} are expected "
                 f"outside their {WIDE_LABEL} intervals by chance alone)")
    return "\n".join(lines)


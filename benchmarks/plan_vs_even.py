"""Do the epochs the planner chooses beat the same number of evenly spaced epochs?

For invented systems, epochs in hand and a window of candidate nights, the planner
chooses N next epochs; the same N are also spread evenly over the window. Both
schedules are then simulated at the assumed elements many times and fitted by least
squares: the scatter of the fitted GM is the precision each schedule actually
delivers (not just the Fisher forecast that made the choice).

Run: ``PYTHONPATH=. python benchmarks/plan_vs_even.py [--quick]``; the table is
printed and written to ``benchmarks/plan_vs_even_results.txt``.
"""

from __future__ import annotations

import argparse
import sys
import time
import warnings
from pathlib import Path

from massfit.plan.checks import fit_scatter
from massfit.plan.choice import evenly_spaced
from massfit.plan.forecast import forecast_precision
from massfit.plan.planner import plan_observations
from massfit.plan.schedule import Schedule
from massfit.scenarios.examples import planning_system

warnings.filterwarnings("ignore", message=".*dubious year")
TDB = dict(time_scale="tdb")


def scenarios():
    """(label, system, epochs in hand, candidates, N) of invented systems."""
    wren = planning_system("Wren")
    pipit = planning_system("Pipit", ecc=0.55, mass=None)
    past_w = Schedule.every("2024-01-10T00:00:00", "2026-06-01T00:00:00", "110 d",
                            "0.5 mas", **TDB)
    cand_w = Schedule.every("2027-01-01T00:00:00", "2031-01-01T00:00:00", "20 d",
                            "0.5 mas", **TDB)
    past_p = Schedule.every("2025-01-01T00:00:00", "2025-12-01T00:00:00", "60 d",
                            "1 mas", **TDB)
    cand_p = Schedule.every("2026-01-01T00:00:00", "2027-09-01T00:00:00", "10 d",
                            "1 mas", **TDB)
    return [("Wren (e=0.42, 8 in hand)", wren, past_w, cand_w, 4),
            ("Wren (e=0.42, 8 in hand)", wren, past_w, cand_w, 8),
            ("Pipit (e=0.55, 6 in hand)", pipit, past_p, cand_p, 3),
            ("Pipit (e=0.55, 6 in hand)", pipit, past_p, cand_p, 6)]


def pct(block):
    return f"{100 * block['gm_relative_sigma']:.3g}%±{100 * block['its_error']:.2g}"


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer simulated draws")
    args = parser.parse_args(argv)
    draws = 30 if args.quick else 300
    lines = [f"Planner-chosen epochs against as many evenly spaced ones "
             f"(sigma(GM)/GM; fits: scatter of {draws} least-squares fits)", "",
             f"{'scenario':<27} {'N':>2} {'Fisher: planner':>15} {'even':>8} "
             f"{'fits: planner':>14} {'even':>16} {'even/planner':>12}"]
    started = time.perf_counter()
    wins = better = 0
    for k, (label, system, past, cand, n) in enumerate(scenarios()):
        plan = plan_observations(system, cand, observed=past, n_next=n)
        picked = sorted(int(c) for c in plan.ranking["candidate"][
            plan.ranking["planned_order"] > 0])
        planned = past.join(cand.select(picked))
        even = past.join(cand.select(evenly_spaced(cand.tdb_jd, n)))
        f_plan = forecast_precision(system, planned)["gm_relative_sigma"]
        f_even = forecast_precision(system, even)["gm_relative_sigma"]
        s_plan = fit_scatter(system, planned, realisations=draws, seed=100 * k)
        s_even = fit_scatter(system, even, realisations=draws, seed=100 * k + 50)
        ratio = s_even["gm_relative_sigma"] / s_plan["gm_relative_sigma"]
        spread = ratio * ((s_plan["its_error"] / s_plan["gm_relative_sigma"]) ** 2
                          + (s_even["its_error"] / s_even["gm_relative_sigma"]) ** 2) ** 0.5
        wins += ratio > 1 + 2 * spread
        better += ratio > 1
        lines.append(f"{label:<27} {n:>2} {100 * f_plan:>14.3g}% {100 * f_even:>7.3g}% "
                     f"{pct(s_plan):>14} {pct(s_even):>16}"
                     f" {ratio:>6.2f}±{spread:.2f}")
        print(lines[-1], flush=True)
    lines += ["", f"fits: planner better in {better} of {len(scenarios())} cases, by more "
                  f"than twice the ratio's error in {wins}; Fisher: never worse; "
                  f"{time.perf_counter() - started:.0f} s on this machine"]
    print(lines[-1])
    if not args.quick:
        out = Path(__file__).with_name("plan_vs_even_results.txt")
        out.write_text("\n".join(lines) + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())

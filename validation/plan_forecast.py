"""Does the planner's Fisher forecast of sigma(GM) match the sigma of actual fits?

For several invented systems and schedules this compares the Fisher forecast with

* the scatter of least-squares GM over many simulated noise draws (the frequentist
  sigma), and
* the posterior width (half the 68.27 % interval of ln GM) of full massfit fits of a
  few draws: start search from scratch and emcee, as an observer would run them, and
* the profile likelihood of one draw: the shift of ln GM, every other parameter
  re-fitted, at which chi^2 rises by 1 (the mean of the two sides).

The issue's criterion: the forecast agrees with the sigma of actual fits within 30 %.
Run: ``PYTHONPATH=. python validation/plan_forecast.py [--quick]``; the table is
printed and written to ``validation/plan_forecast_results.txt``.
"""

from __future__ import annotations

import argparse
import sys
import time
import warnings
from pathlib import Path

import numpy as np

import massfit
from massfit.plan.checks import fit_scatter
from massfit.plan.forecast import forecast_precision
from massfit.plan.schedule import Schedule
from massfit.plan.system import simulated_observations
from massfit.scenarios.examples import planning_system

warnings.filterwarnings("ignore", message=".*dubious year")


def systems():
    """Invented systems: (label, AssumedSystem, schedules)."""
    tdb = dict(time_scale="tdb")
    binary = planning_system("Wren")
    dwarf = planning_system("Pipit")
    planet = planning_system("Eld+Fenn")  # a giant planet with two moons, offsets in km
    return [
        ("Wren, 8 past + 12 planned, 0.5 mas", binary,
         Schedule.every("2024-01-10T00:00:00", "2026-06-01T00:00:00", "110 d", "0.5 mas",
                        **tdb)
         .join(Schedule.every("2027-01-01T00:00:00", "2031-01-01T00:00:00", "120 d",
                              "0.5 mas", **tdb))),
        ("Wren, 10 epochs over half an orbit", binary,
         Schedule.every("2026-01-01T00:00:00", "2032-01-01T00:00:00", "240 d", "0.5 mas",
                        **tdb)),
        ("Pipit, 9 epochs, 1 mas, fixed parallax", dwarf,
         Schedule.every("2025-01-01T00:00:00", "2026-10-01T00:00:00", "75 d", "1 mas", **tdb)),
        ("Pipit, 20 epochs, 1 mas, fixed parallax", dwarf,
         Schedule.every("2025-01-01T00:00:00", "2027-08-01T00:00:00", "50 d", "1 mas", **tdb)),
        # Every 1.7 d: a 4 d cadence would alias Eld's 3.71 d period (to ~50 d), and
        # the fit's start search then finds the alias, not the orbit.
        ("Eld+Fenn, 12 nights, 300 km", planet,
         Schedule.every("2027-01-01T00:00:00", "2027-01-20T00:00:00", "1.7 d", "300 km",
                        **tdb)),
    ]


def pct(block):
    return f"{100 * block['gm_relative_sigma']:.3g}%±{100 * block['its_error']:.2g}"


def profile_width(system, schedule, seed):
    """Half-distance between the ln GM values where the profile chi^2 rises by 1."""
    from dataclasses import replace

    from scipy.optimize import brentq

    from massfit.model.orbit_model import OrbitModel
    from massfit.priors import Fixed
    from massfit.start.least_squares import chi2_at, solve_least_squares

    obs = simulated_observations(system, schedule, seed=seed)
    spec = system.simulated_spec(seed)
    full = OrbitModel(obs, spec)
    best = solve_least_squares(full, system.physical(full))
    phys = full.physical(best)
    m_best = float(phys["central_mass"][0])
    chi_best = chi2_at(full, best) + float(np.sum(_prior_terms(full, best) ** 2))

    def rise(step):
        mass = m_best * np.exp(step)
        fixed = OrbitModel(obs, replace(spec, central_mass=Fixed(mass)))
        values = {"central_mass": mass, "parallax": None if phys["parallax"] is None
                  else float(phys["parallax"][0])}
        for name in fixed.companions:
            values[name] = {q: float(v[0]) for q, v in phys["companions"][name].items()}
        theta = solve_least_squares(fixed, values)
        chi = chi2_at(fixed, theta) + float(np.sum(_prior_terms(fixed, theta) ** 2))
        return chi - chi_best - 1.0

    guess = forecast_precision(system, schedule)["gm_relative_sigma"]
    up = brentq(rise, 0.2 * guess, 5 * guess, xtol=1e-3 * guess)
    down = brentq(lambda x: rise(-x), 0.2 * guess, 5 * guess, xtol=1e-3 * guess)
    return 0.5 * (up + down)


def _prior_terms(model, theta):
    from massfit.start.least_squares import prior_residuals

    return prior_residuals(model, theta)


def posterior_width(system, schedule, seed, steps):
    obs = simulated_observations(system, schedule, seed=seed)
    spec = system.simulated_spec(seed)
    result = massfit.fit(obs, spec, seed=seed, max_steps=steps, progress=False)
    lo, hi = np.percentile(np.log(result.samples["central_gm"]), [15.865, 84.135])
    return 0.5 * (hi - lo), result.converged


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer draws and fits")
    args = parser.parse_args(argv)
    draws, fits, steps = (40, 2, 2000) if args.quick else (150, 4, 6000)
    lines = [f"Fisher forecast of sigma(GM)/GM against actual fits "
             f"({draws} least-squares draws, {fits} full fits of {steps} steps each)", "",
             f"{'schedule':<42} {'forecast':>9} {'LS scatter':>15} {'ratio':>6} "
             f"{'profile':>9} {'ratio':>6} {'posterior':>10} {'ratio':>6} {'conv':>5}"]
    worst = 0.0
    started = time.perf_counter()
    for k, (label, system, schedule) in enumerate(systems()):
        forecast = forecast_precision(system, schedule)["gm_relative_sigma"]
        scatter = fit_scatter(system, schedule, realisations=draws, seed=1000 * k)
        widths, conv = zip(*(posterior_width(system, schedule, 7000 * k + j, steps)
                             for j in range(fits)))
        width = float(np.median(widths))
        profile = profile_width(system, schedule, 9000 * k)
        r1 = scatter["gm_relative_sigma"] / forecast
        r2 = width / forecast
        r3 = profile / forecast
        worst = max(worst, abs(r1 - 1), abs(r2 - 1), abs(r3 - 1))
        lines.append(f"{label:<42} {100 * forecast:>8.3g}% "
                     f"{pct(scatter):>15}"
                     f"{r1:>7.2f} {100 * profile:>8.3g}% {r3:>6.2f}"
                     f" {100 * width:>9.3g}% {r2:>6.2f} {sum(conv):>3}/{fits}")
        print(lines[-1], flush=True)
    verdict = "PASS" if worst < 0.30 else "FAIL"
    lines += ["", f"largest |ratio - 1| = {worst:.2f}: {verdict} (criterion: < 0.30); "
                  f"{time.perf_counter() - started:.0f} s"]
    text = "\n".join(lines)
    print(lines[-1])
    if not args.quick:
        Path(__file__).with_name("plan_forecast_results.txt").write_text(text + "\n")
    return 0 if verdict == "PASS" else 1


if __name__ == "__main__":
    sys.exit(main())

"""Bayes factors of two companions against one, on data made with two and with one.

An invented star (0.95 M_sun) with an inner companion ("b": P = 13.7 d, e = 0.10,
1.2e-4 M_sun, a semi-amplitude of about 11 m/s) and, in the two-companion truth, an
outer one ("c": P = 410 d, e = 0.20, 3.5e-4 M_sun, about 10 m/s). Observed: the
star's own radial velocities on ``--epochs`` random nights over ``--span`` days, 4 m/s
errors, no jitter (:func:`massfit.scenarios.simulate.simulate_velocities`). The same
star with b alone is the negative control. Each table is fitted with
:func:`massfit.compare.compare_models` under the one-companion model (b) and the
two-companion model (b and c).

Why velocities and not astrometry: a companion with astrometry is always in the model
(every body of the data is fitted, and a listed companion without rows is refused), so
N and N + 1 companions differ only where the extra body is seen through the primary's
reflex. With the primary's velocities alone the companions are those the model lists.

Priors, the same in both models: P_b log-uniform 2-100 d, P_c log-uniform 100-3000 d
(disjoint ranges, so the two companions cannot swap labels: the two-companion
posterior has one labelling, not two copies of each mode), each semi-amplitude
uniform 0-0.1 km/s, the zero point uniform -0.1..0.1 km/s, no jitter (fixed 0: the
errors are the true ones). The extra companion's Occam factor is then set by these
stated ranges.

Expected: ln B(two : one) strongly positive on the two-companion data; on the
one-companion data not positive beyond its error.

    PYTHONPATH=. python validation/evidence_companions.py [--live 150] [--seeds 1 2 3]

Writes ``validation/results/evidence_companions.json`` (after every fit).
"""

from __future__ import annotations

import argparse
import json
import time
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.time import Time

from massfit import CompanionSpec, Fixed, LogUniform, SystemSpec, Uniform, read_observations
from massfit.compare import compare_models
from massfit.model.specs import InstrumentSpec
from massfit.sample.nested import NestedSettings
from massfit.scenarios.simulate import Elements, simulate_velocities

OUT = Path(__file__).parent / "results" / "evidence_companions.json"
STAR_MASS = 0.95  # M_sun
INNER = Elements(period=13.7, ecc=0.10, inc=90.0, omega=40.0, node=0.0,
                 periapsis_time=2460003.0, mass=1.2e-4)
OUTER = Elements(period=410.0, ecc=0.20, inc=90.0, omega=120.0, node=0.0,
                 periapsis_time=2460100.0, mass=3.5e-4)
INSTRUMENT = "spectrograph"


def star_table(path, companions, seed, epochs=40, span=900.0):
    """The star's velocities with the companions ``companions`` (1: b, 2: b and c),
    written to ``path`` and read back."""
    rng = np.random.default_rng(seed)
    t = 2460000.0 + np.sort(rng.uniform(0.0, span, epochs))
    elements = {"b": INNER, "c": OUTER} if companions == 2 else {"b": INNER}
    table = simulate_velocities({"primary": Time(t, format="jd", scale="tdb")}, elements,
                                STAR_MASS, error=4.0 * u.m / u.s, instrument=INSTRUMENT,
                                seed=seed)
    table.write(path, format="ascii.ecsv", overwrite=True)
    return read_observations(path)


def models():
    """{"one": b alone, "two": b and c}, with the priors of the module notes."""
    amplitude = Uniform(0.0, 0.1)
    inner = CompanionSpec("b", period=LogUniform(2.0, 100.0), semi_amplitude=amplitude)
    outer = CompanionSpec("c", period=LogUniform(100.0, 3000.0), semi_amplitude=amplitude)
    instruments = {INSTRUMENT: InstrumentSpec(offset=Uniform(-0.1, 0.1), jitter=Fixed(0.0))}
    return {"one": SystemSpec(companions={"b": inner}, instruments=instruments),
            "two": SystemSpec(companions={"b": inner, "c": outer}, instruments=instruments)}


def bayes_factor(comparison):
    """ln B(two : one) and its error from a comparison's summary."""
    m = comparison.summary["models"]
    log_b = m["two"]["log_evidence"] - m["one"]["log_evidence"]
    return log_b, float(np.hypot(m["two"]["log_evidence_err"], m["one"]["log_evidence_err"]))


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--live", type=int, default=150)
    parser.add_argument("--runs", type=int, default=2)
    parser.add_argument("--seeds", type=int, nargs="+", default=[1, 2, 3])
    parser.add_argument("--epochs", type=int, default=40)
    parser.add_argument("--span", type=float, default=900.0)
    parser.add_argument("--folder", default=None, help="where the tables are written")
    parser.add_argument("--truth", choices=("both", "two", "one"), default="both",
                        help="which data sets to fit (default: both)")
    args = parser.parse_args(argv)
    folder = Path(args.folder or OUT.parent / "evidence_companions_data")
    folder.mkdir(parents=True, exist_ok=True)
    rows = json.loads(OUT.read_text()) if OUT.exists() else []
    done = {(r["seed"], r["data"], r["live_points"]) for r in rows}
    for seed in args.seeds:
        for truth, n in (("two companions", 2), ("one companion", 1)):
            if (seed, truth, args.live) in done or args.truth not in ("both", truth[:3]):
                continue
            obs = star_table(folder / f"star_{n}_{seed}.ecsv", n, seed, args.epochs,
                             args.span)
            clock = time.perf_counter()
            cmp = compare_models(obs, models(), nested=NestedSettings(
                live_points=args.live, runs=args.runs), seed=seed)
            log_b, err = bayes_factor(cmp)
            m = cmp.summary["models"]
            for label, result in cmp.results.items():
                evidence = result.summary["evidence"]
                m[label]["laplace_log_evidence"] = evidence.get("laplace_log_evidence")
                m[label]["log_z_runs"] = [r for mode in result.summary["weighed_modes"]
                                          for r in mode["log_z_runs"]]
                m[label]["notes"] = evidence.get("notes", [])
            rows.append({"seed": seed, "data": truth, "live_points": args.live,
                         "runs_per_box": args.runs, "log_b_two_vs_one": log_b,
                         "error": err, "all_converged": cmp.summary["all_converged"],
                         "seconds": time.perf_counter() - clock, "models": m})
            print(f"seed {seed}, {truth}: ln B(two : one) = {log_b:.2f} +- {err:.2f} "
                  f"({rows[-1]['seconds']:.0f} s, converged: "
                  f"{cmp.summary['all_converged']})", flush=True)
            print(cmp.report(), flush=True)
            OUT.write_text(json.dumps(rows, indent=1))


if __name__ == "__main__":
    main()

"""Calibration of the mass over all modes, on sparse yearly sets that have aliases.

Simulation-based calibration (as ``validation/calibration.py``) on the kind of set where
the period has aliases: one companion imaged on twelve nights a year apart that wander
by 8 days (as :func:`massfit.scenarios.examples.tamsin`), 3.5 mas errors, parallax known
(25 mas). Every system's truth is drawn from the very prior it is fitted with:

    central mass log-uniform on [0.1, 10] M_sun, period log-uniform on [150, 2500] d,
    eccentricity uniform on [0, 0.6), isotropic orientation, uniform node, omega and
    time of periapsis,

so that the truth's posterior quantile is uniform when the posterior is right. Each
set is fitted with the nested engine (``engine="nested"``: every mode the start finds
in its own period box, weighed by its evidence), and the truth's quantile is read from
the mass marginalised over all the modes (the result's samples). The 68.27 % and
95.45 % central intervals must hold the truth in a binomial share of the systems.

Usage::

    PYTHONPATH=. python validation/sparse_calibration.py --systems 40 --live 150

Appends to ``validation/results/sparse_calibration.jsonl`` (``--results``) one system at
a time (an interrupted study continues) and writes ``<results stem>_summary.json``
beside it (``sparse_calibration_summary.json``): the 68.27 % and 95.45 % coverage with
99 % binomial bounds, for all systems and for those with several weighed modes.
The records made before the box about a single solution are kept in
``sparse_calibration_before_single_box.jsonl`` (and ``_summary.json``).
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
from pathlib import Path

os.environ.setdefault("MPLBACKEND", "Agg")

import numpy as np  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _study import read_records  # noqa: E402
from calibration import assess  # noqa: E402

RESULTS = Path(__file__).parent / "results" / "sparse_calibration.jsonl"
MASS_RANGE = (0.1, 10.0)
PERIOD_RANGE = (150.0, 2500.0)
ECC_HIGH = 0.6
CADENCE, WANDER, EPOCHS, ERROR_MAS, PARALLAX = 365.25, 8.0, 12, 3.5, 25.0


def design(index, base_seed=2031):
    rng = np.random.default_rng([base_seed, index])
    period = float(np.exp(rng.uniform(*np.log(PERIOD_RANGE))))
    return {"index": index,
            "central_mass": float(np.exp(rng.uniform(*np.log(MASS_RANGE)))),
            "period": period, "ecc": float(rng.uniform(0.0, ECC_HIGH)),
            "inc": float(np.degrees(np.arccos(rng.uniform(-1.0, 1.0)))),
            "omega": float(rng.uniform(0.0, 360.0)), "node": float(rng.uniform(0.0, 360.0)),
            "periapsis_time": float(2458500.0 + rng.uniform(0.0, period)),
            "epochs": (2458500.0 + CADENCE * np.arange(EPOCHS)
                       + rng.normal(0.0, WANDER, EPOCHS)).tolist(),
            "noise_seed": 7919 * index + 3}


def fit_system(d, live, runs):
    import astropy.units as u
    from astropy.time import Time

    import massfit
    from massfit.model.specs import CompanionSpec, SystemSpec
    from massfit.priors import Fixed, LogUniform, Uniform
    from massfit.sample.nested import NestedSettings
    from massfit.scenarios.simulate import Elements, read_back, simulate_astrometry

    elements = {"Sparse": Elements(period=d["period"], ecc=d["ecc"], inc=d["inc"],
                                   omega=d["omega"], node=d["node"],
                                   periapsis_time=d["periapsis_time"])}
    table = simulate_astrometry({"Sparse": Time(d["epochs"], format="jd", scale="tdb")},
                                elements, d["central_mass"], parallax=PARALLAX * u.mas,
                                error=ERROR_MAS * u.mas, seed=d["noise_seed"])
    spec = SystemSpec(central_mass=LogUniform(*MASS_RANGE), parallax=Fixed(PARALLAX),
                      strict_companions=True,
                      companions={"Sparse": CompanionSpec(
                          "Sparse", period=LogUniform(*PERIOD_RANGE),
                          eccentricity=Uniform(0.0, ECC_HIGH))})
    started = time.perf_counter()
    result = massfit.fit(read_back(table, name="sparse.ecsv"), spec, seed=d["index"] + 1,
                         progress=False, engine="nested",
                         nested=NestedSettings(live_points=live, runs=runs))
    masses = np.asarray(result.samples["central_mass_solar"])
    modes = result.summary.get("weighed_modes", [])
    return {"index": d["index"], "truth": d["central_mass"], "period": d["period"],
            "quantile": float(np.mean(masses < d["central_mass"])),
            "median": float(np.median(masses)), "converged": bool(result.converged),
            "modes": len(modes),
            "mode_weights": [m.get("probability") for m in modes],
            "mode_periods": [m.get("start_periods") for m in modes],
            "log_evidence": result.summary.get("evidence", {}).get("log_evidence"),
            "live_points": live, "runs": runs,
            "seconds": time.perf_counter() - started}


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--systems", type=int, default=40)
    parser.add_argument("--live", type=int, default=150)
    parser.add_argument("--runs", type=int, default=2)
    parser.add_argument("--results", default=str(RESULTS))
    parser.add_argument("--report-only", action="store_true")
    args = parser.parse_args(argv)
    path = Path(args.results)
    path.parent.mkdir(parents=True, exist_ok=True)
    done = read_records(path)
    for k in range(args.systems):
        if k in done or args.report_only:
            continue
        try:
            record = fit_system(design(k), args.live, args.runs)
        except Exception as exc:  # a failed fit is a result of the study: record it
            record = {"index": k, "failed": f"{type(exc).__name__}: {exc}"}
        with open(path, "a") as handle:
            handle.write(json.dumps(record) + "\n")
        done[k] = record
        print(json.dumps(record), flush=True)
    records = [done[k] for k in sorted(done) if "failed" not in done[k]]
    verdict = assess(records)
    verdict["failed_fits"] = [{"index": r["index"], "reason": r["failed"]}
                              for r in done.values() if "failed" in r]
    verdict["aliased_systems"] = int(sum(r["modes"] > 1 for r in records))
    verdict["aliased_only"] = assess([r for r in records if r["modes"] > 1]) \
        if verdict["aliased_systems"] else None
    path.with_name(f"{path.stem}_summary.json").write_text(
        json.dumps(verdict, indent=2) + "\n")
    print(json.dumps(verdict, indent=2))


if __name__ == "__main__":
    main()

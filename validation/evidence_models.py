"""Bayes factors of J2 against two-body orbits, on data made with and without J2.

One invented moon of an invented oblate planet (GM 1.05e8 km^3/s^2, J2 = 0.018 at
64 000 km; the moon at 2.6 radii, e = 0.012, in the planet's equator, its plane seen at
i = 63 deg), integrated in the full J2 field (``massfit.orbits.oblate.
integrate_oblate_orbit``, not the secular model that is fitted), observed on
``--epochs`` random nights over ``--span`` days with 60 km errors. The same is made
with J2 = 0 (a two-body orbit) as the negative control. Each table is fitted with
:func:`massfit.compare.compare_models` under the J2 model (the true J2 and radius)
and the two-body model.

Each model's nested runs are made in a period box about its own least-squares
solution (the engine's box for a single solution, :mod:`massfit.sample.nested_boxes`)
and each ln Z is recorded with the Laplace estimate about that solution.

Expected: ln B(J2 : two-body) strongly positive on the J2 data; on the two-body data
not positive beyond its error (a J2 model with J2 fixed has no extra parameter, so
there is no Occam factor: the data must speak against it).

    PYTHONPATH=. python validation/evidence_models.py [--live 100] [--seeds 1]

Writes ``validation/results/evidence_models.json``.
"""

from __future__ import annotations

import argparse
import json
import tempfile
import time
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.table import Table
from astropy.time import Time

from massfit import CompanionSpec, LogUniform, Oblate, SystemSpec, read_observations
from massfit.compare import compare_models
from massfit.orbits.dynamics import orbit_axes
from massfit.orbits.oblate import integrate_oblate_orbit
from massfit.sample.nested import NestedSettings

OUT = Path(__file__).parent / "results" / "evidence_models.json"
GM, J2, RADIUS = 1.05e8 * 86400.0 ** 2, 0.018, 64_000.0  # km^3/day^2, -, km


def moon_table(path, j2, seed, epochs, span, err=60.0):
    """One moon's offsets (km) in a J2 field of ``j2`` (0: two-body)."""
    rng = np.random.default_rng(seed)
    r0, ecc, phase = 2.6 * RADIUS, 0.012, 0.4
    q = j2 * (RADIUS / r0) ** 2
    v_circ = np.sqrt(GM / r0 * (1 + 1.5 * q))
    pos0 = r0 * np.array([np.cos(phase), np.sin(phase), 0.0])
    vel0 = v_circ * np.array([-np.sin(phase) + ecc * np.cos(phase),
                              np.cos(phase) + ecc * np.sin(phase), 0.0])
    t = np.sort(rng.uniform(-span / 2, span / 2, epochs))
    eq = integrate_oblate_orbit(t, GM, j2, RADIUS, pos0, vel0, rtol=1e-10)
    p_vec, q_vec = (np.array(v) for v in orbit_axes(np.radians(63.0), 0.0, np.radians(38.0)))
    sky = eq[:, :1] * p_vec + eq[:, 1:2] * q_vec
    table = Table()
    table["time"] = Time(2462000.0 + t, format="jd", scale="tdb")
    table["body"] = ["moon"] * t.size
    table["north"] = (sky[:, 0] + err * rng.standard_normal(t.size)) * u.km
    table["east"] = (sky[:, 1] + err * rng.standard_normal(t.size)) * u.km
    table["north_err"] = np.full(t.size, err) * u.km
    table["east_err"] = np.full(t.size, err) * u.km
    table.write(path, format="ascii.ecsv", overwrite=True)
    return read_observations(path)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--live", type=int, default=100)
    parser.add_argument("--seeds", type=int, nargs="+", default=[1])
    parser.add_argument("--epochs", type=int, default=40)
    parser.add_argument("--span", type=float, default=60.0)
    parser.add_argument("--wide-priors", action="store_true",
                        help="massfit's default priors (slow: ln Z over 23 decades of mass "
                             "and 11 of period) instead of log-uniform boxes of one decade "
                             "about the moon (0.15-1.5 d, 1e-4-1e-3 M_sun; the same for "
                             "both models, so the Bayes factor keeps its meaning)")
    args = parser.parse_args(argv)
    rows = []
    tmp = Path(tempfile.mkdtemp(prefix="evidence_models_"))
    for seed in args.seeds:
        for truth, j2 in (("j2", J2), ("two-body", 0.0)):
            obs = moon_table(tmp / f"moon_{truth}_{seed}.ecsv", j2, seed, args.epochs,
                             args.span)
            clock = time.perf_counter()
            priors = {} if args.wide_priors else dict(
                central_mass=LogUniform(1e-4, 1e-3),
                companions={"moon": CompanionSpec(name="moon",
                                                  period=LogUniform(0.15, 1.5))})
            cmp = compare_models(obs, {"j2": SystemSpec(dynamics=Oblate(J2, f"{RADIUS} km"),
                                                        **priors),
                                       "two-body": SystemSpec(**priors)},
                                 nested=NestedSettings(live_points=args.live), seed=seed)
            m = cmp.summary["models"]
            for label, result in cmp.results.items():  # the Laplace check of each ln Z
                m[label]["laplace_log_evidence"] = result.summary["evidence"].get(
                    "laplace_log_evidence")
            log_b = m["j2"]["log_evidence"] - m["two-body"]["log_evidence"]
            err = float(np.hypot(m["j2"]["log_evidence_err"],
                                 m["two-body"]["log_evidence_err"]))
            rows.append({"seed": seed, "data": truth, "log_b_j2_vs_two_body": log_b,
                         "error": err, "seconds": time.perf_counter() - clock,
                         "models": m})
            print(f"seed {seed}, {truth} data: ln B(J2 : two-body) = {log_b:.2f} +- "
                  f"{err:.2f}  ({rows[-1]['seconds']:.0f} s)", flush=True)
            print(cmp.report(), flush=True)
            OUT.write_text(json.dumps(rows, indent=1))


if __name__ == "__main__":
    main()

"""Moons of an invented oblate planet with mutual pulls, seen from a moving observer.

The truth is made without massfit's dynamics or projection:

* the invented planet *Corrabel* (``massfit.orbits.perturbed.MOONS_TRUTH``: GM, J2, J4,
  three moons, two near a 2:1 period ratio) is integrated with **REBOUND** (IAS15) and
  **REBOUNDx**'s ``gravitational_harmonics`` force (J2 and J4 about the z axis of the
  planet's equator frame, then turned into ICRS axes);
* the planet and the observer move on invented circular paths about a star, and
  every offset is the exact light-time-iterated direction of the moon about the
  planet's, through astropy's sky-offset frame
  (:func:`massfit.scenarios.moving_observer.observe_moons`, which takes any object
  with a ``position(t_jd, gm)`` method as a moon).

For each noise seed the table (40 epochs per moon over 360 days, 150 km errors,
``primary_ra``, ``primary_dec`` and ``distance`` per row) is fitted with the combined
perturbed model (J2, J4 and the pole as simulated, mutual pulls, the moving line of
sight) and with the two-body model. By default only massfit's start is run (two-body
search, then the perturbed least squares in stages), and the interval is the start's
Laplace (least-squares) one: a full sampling run of the integrated model costs hours
per seed on the shared two-core machine. ``--sample`` runs :func:`massfit.fit` end to
end instead (``--max-steps`` bounds it).

    PYTHONPATH=. nice python validation/moving_moons.py [--seeds 1 2 ...] [--sample]
    PYTHONPATH=. python validation/moving_moons.py --report-only

Writes ``validation/results/moving_moons.json`` (one record per seed, appended as each
seed ends so that seeds can run in separate processes) and
``docs/figures/moving_moons.png``.
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

import astropy.units as u  # noqa: E402
from astropy.time import Time  # noqa: E402

from massfit import Perturbed, SystemSpec, fit, read_observations  # noqa: E402
from massfit.constants import AU_KM, GM_SUN, GM_SUN_KM3_S2  # noqa: E402
from massfit.model.orbit_model import OrbitModel  # noqa: E402
from massfit.orbits.perturbed import MOONS_TRUTH, moons_initial_state  # noqa: E402
from massfit.scenarios.moving_observer import CircularPath, observe_moons  # noqa: E402
from massfit.start.search import find_start  # noqa: E402
from massfit.summarise.adequacy import assess  # noqa: E402

RESULTS = HERE / "results" / "moving_moons.json"
FIGURE = HERE.parent / "docs" / "figures" / "moving_moons.png"
#: The data's epoch (TDB JD) and span; invented paths about the star (au, days, deg).
EPOCH_JD = 2463100.5
SPAN_DAYS = 360.0
PLANET_PATH = CircularPath(7.35, 7280.0, 1.9, 61.0, 140.0, EPOCH_JD)
OBSERVER_PATH = CircularPath(1.07, 401.0, 0.0, 0.0, 15.0, EPOCH_JD)
ERROR_KM = 150.0
EPOCHS_PER_MOON = 40


class ReboundMoons:
    """The moons integrated by REBOUND + REBOUNDx from the truth's state at ``EPOCH_JD``.

    ``moon(k)`` is an object with ``position(t_jd, gm)`` (au, ICRS axes, relative to the
    planet) as :func:`observe_moons` asks for; ``gm`` is ignored (the truth's is used).
    """

    def __init__(self, truth=None):
        central, masses, pos, vel, field = moons_initial_state(truth)
        pole = field[2:5] / np.linalg.norm(field[2:5])
        x_axis = np.cross([0.0, 0.0, 1.0], pole)
        x_axis /= np.linalg.norm(x_axis)
        #: Columns: the equator frame's axes in ICRS (z along the pole).
        self.rotation = np.column_stack([x_axis, np.cross(pole, x_axis), pole])
        self.central, self.masses = central, masses
        self.pos = pos @ self.rotation  # ICRS -> equator frame (R^T p, row-wise)
        self.vel = vel @ self.rotation
        truth = MOONS_TRUTH if truth is None else truth
        self.j2, self.j4 = truth["j2"], truth["j4"]
        self.radius_au = truth["radius_km"] / AU_KM

    def _simulation(self, direction):
        import rebound
        import reboundx

        sim = rebound.Simulation()
        sim.G = GM_SUN
        sim.add(m=self.central)
        for m, p, v in zip(self.masses, self.pos, self.vel):
            sim.add(m=m, x=p[0], y=p[1], z=p[2], vx=direction * v[0], vy=direction * v[1],
                    vz=direction * v[2])
        sim.move_to_com()
        sim.integrator = "ias15"
        extras = reboundx.Extras(sim)
        force = extras.load_force("gravitational_harmonics")
        extras.add_force(force)
        sim.particles[0].params["J2"] = self.j2
        sim.particles[0].params["J4"] = self.j4
        sim.particles[0].params["R_eq"] = self.radius_au
        return sim, extras

    def positions(self, k, t_jd):
        """Moon ``k``'s planetocentric ICRS position (n, 3), au, at TDB JD ``t_jd``."""
        dt = np.asarray(t_jd, dtype=float) - EPOCH_JD
        out = np.empty((dt.size, 3))
        for direction in (1.0, -1.0):  # forward and (time-reversed) backward
            index = np.flatnonzero(direction * dt >= 0)
            order = index[np.argsort(direction * dt[index])]
            sim, _extras = self._simulation(direction)
            for j in order:
                sim.integrate(direction * dt[j], exact_finish_time=1)
                out[j] = (np.array(sim.particles[k + 1].xyz)
                          - np.array(sim.particles[0].xyz))
        return out @ self.rotation.T

    def moon(self, k):
        outer = self

        class _Moon:
            def position(self, t_jd, gm):
                return outer.positions(k, t_jd)

        return _Moon()


def simulate(path, seed):
    """Write one noisy table; returns the path."""
    rng = np.random.default_rng(seed)
    moons = ReboundMoons()
    names = list(MOONS_TRUTH["moons"])
    times = {name: Time(np.sort(EPOCH_JD + SPAN_DAYS * (rng.random(EPOCHS_PER_MOON) - 0.5)),
                        format="jd", scale="tdb") for name in names}
    planet_mass = MOONS_TRUTH["gm_km3_s2"] / GM_SUN_KM3_S2
    table = observe_moons(times, {name: moons.moon(k) for k, name in enumerate(names)},
                          planet_mass, PLANET_PATH, OBSERVER_PATH, error=ERROR_KM * u.km,
                          seed=seed)
    table.meta["description"] = ("Invented moons of an invented oblate planet (J2, J4, "
                                 "mutual pulls; REBOUND + REBOUNDx) from a moving observer")
    table.write(path, overwrite=True)
    return path


def perturbed_dynamics(surrogate="none"):
    truth = MOONS_TRUTH
    # The truth's equator (i, node) was given in the frame moons_initial_state returns,
    # read here as ICRS (x, y, z): the same numbers are the pole in ICRS elements.
    return Perturbed(j2=truth["j2"], j4=truth["j4"],
                     equatorial_radius=f"{truth['radius_km']} km",
                     equator_inclination=f"{truth['equator_inclination_deg']} deg",
                     equator_node=f"{truth['equator_node_deg']} deg", surrogate=surrogate)


def _start_record(obs, dynamics):
    model = OrbitModel(obs, SystemSpec(dynamics=dynamics))
    start = find_start(model, progress=True)
    k = model.names.index("central.log10_mass")
    gm = 10 ** start.theta[k] * GM_SUN_KM3_S2
    sd = gm * np.log(10) * np.sqrt(start.covariance[k, k])
    block = assess(model, start.theta, compare=False)
    return {"gm": gm, "gm_sigma": sd, "interval": "Laplace (start's least squares)",
            "reduced_chi2": {n: c["reduced_chi2"] for n, c in block["companions"].items()},
            "notes": start.notes}


def _fit_record(obs, dynamics, seed, max_steps):
    result = fit(obs, SystemSpec(dynamics=dynamics), seed=seed, max_steps=max_steps,
                 progress=False)
    gm = result.summary["central_gm"]
    per = result.summary["fit_quality"]["per_companion"]
    return {"gm": gm["median"], "gm_sigma": 0.5 * (gm["upper_68"] - gm["lower_68"]),
            "lower_95": gm["lower_95"], "upper_95": gm["upper_95"],
            "interval": "posterior (fit)", "converged": bool(result.converged),
            "reduced_chi2": {n: c["reduced_chi2"] for n, c in per.items()},
            "notes": result.summary.get("warnings", []),
            "steps": result.summary["diagnostics"]["steps"],
            "max_autocorr_steps": result.summary["diagnostics"]["max_autocorr_steps"],
            "surrogate": result.summary.get("surrogate")}


def run_seed(seed, folder, *, sample=False, max_steps=None, surrogate="none"):
    obs = read_observations(simulate(folder / f"moons_{seed}.ecsv", seed))
    truth = MOONS_TRUTH["gm_km3_s2"]
    out = {"seed": seed, "true_gm_km3_s2": truth}
    for label, dynamics in (("perturbed", perturbed_dynamics(surrogate)),
                            ("two_body", None)):
        clock, wall = time.process_time(), time.perf_counter()
        record = (_fit_record(obs, dynamics, seed, max_steps) if sample
                  else _start_record(obs, dynamics))
        lower = record.get("lower_95", record["gm"] - 1.96 * record["gm_sigma"])
        upper = record.get("upper_95", record["gm"] + 1.96 * record["gm_sigma"])
        record.update(pull=(record["gm"] - truth) / record["gm_sigma"],
                      relative_offset=record["gm"] / truth - 1.0,
                      inside_95=bool(lower <= truth <= upper),
                      cpu_seconds=time.process_time() - clock,
                      wall_seconds=time.perf_counter() - wall)
        out[label] = record
        print(seed, label, json.dumps(record, default=str), flush=True)
    return out


def summarise(runs):
    """Per mode (start; fit; fit-linearised) and model: GM inside 95 %, pulls, the
    worst moon's reduced chi^2, the median CPU time."""
    return {mode: _summary([r for r in runs if r["mode"] == mode])
            for mode in sorted({r["mode"] for r in runs})}


def _summary(runs):
    out = {}
    for label in ("perturbed", "two_body"):
        done = [r[label] for r in runs if label in r]
        worst = [max(r["reduced_chi2"].values()) for r in done]
        out[label] = {"seeds": len(done),
                      "inside_95": int(sum(r["inside_95"] for r in done)),
                      "pulls": [round(r["pull"], 2) for r in done],
                      "worst_reduced_chi2": [round(w, 3) for w in worst],
                      "median_cpu_seconds": float(np.median([r["cpu_seconds"]
                                                             for r in done]))}
    return out


def figure(runs, path):
    import matplotlib.pyplot as plt

    fig, axes = plt.subplots(1, 2, figsize=(10, 4), constrained_layout=True)
    for label, marker in (("perturbed", "o"), ("two_body", "s")):
        seeds = [r["seed"] for r in runs]
        pulls = [r[label]["pull"] for r in runs]
        axes[0].plot(seeds, pulls, marker, label=label.replace("_", "-"))
        for r in runs:
            chi = list(r[label]["reduced_chi2"].values())
            axes[1].plot([r["seed"]] * len(chi), chi, marker, color="C0" if
                         label == "perturbed" else "C1", alpha=0.7)
    axes[0].axhspan(-1.96, 1.96, color="0.85", label="95 % interval")
    reach = max([3.0] + [abs(r[k]["pull"]) for r in runs for k in ("perturbed", "two_body")])
    axes[0].set_ylim(-1.15 * reach, 1.15 * reach)
    axes[0].axhline(0.0, color="0.5", lw=0.8)
    axes[0].set_xlabel("noise seed")
    axes[0].set_ylabel("(GM $-$ true GM) / $\\sigma$ (Laplace)")
    axes[0].legend()
    axes[1].set_yscale("log")
    axes[1].axhline(1.0, color="0.5", lw=0.8)
    axes[1].set_xlabel("noise seed")
    axes[1].set_ylabel("reduced $\\chi^2$ of each moon")
    axes[1].set_title("circles: perturbed, squares: two-body", fontsize=9)
    fig.suptitle("Invented oblate planet, three moons with mutual pulls, moving observer")
    path.parent.mkdir(parents=True, exist_ok=True)
    fig.savefig(path, dpi=110)


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seeds", type=int, nargs="+", default=list(range(1, 11)))
    parser.add_argument("--sample", action="store_true",
                        help="full fit() runs instead of the start's Laplace intervals")
    parser.add_argument("--max-steps", type=int, default=None)
    parser.add_argument("--surrogate", choices=("none", "linearised"), default="none",
                        help="with --sample: how the perturbed fit samples (mode "
                             "'fit-linearised' in the results)")
    parser.add_argument("--results", type=Path, default=RESULTS)
    parser.add_argument("--report-only", action="store_true")
    args = parser.parse_args()
    if not args.report_only:
        with tempfile.TemporaryDirectory() as tmp:
            for seed in args.seeds:
                record = run_seed(seed, Path(tmp), sample=args.sample,
                                  max_steps=args.max_steps, surrogate=args.surrogate)
                record["mode"] = ("start" if not args.sample else "fit"
                                  if args.surrogate == "none" else "fit-linearised")
                with open(args.results.with_suffix(".jsonl"), "a") as handle:
                    handle.write(json.dumps(record, default=str) + "\n")
    lines = args.results.with_suffix(".jsonl").read_text().splitlines()
    # One record per seed and mode (the last written), whatever process wrote it.
    latest = {(r["seed"], r["mode"]): r for r in (json.loads(x) for x in lines if x.strip())}
    runs = sorted(latest.values(), key=lambda r: (r["mode"], r["seed"]))
    report = {"setup": {"epochs_per_moon": EPOCHS_PER_MOON, "span_days": SPAN_DAYS,
                        "error_km": ERROR_KM, "truth": "REBOUND IAS15 + REBOUNDx J2/J4, "
                        "light-time-iterated offsets from a moving observer"},
              "summary": summarise(runs), "runs": runs}
    args.results.write_text(json.dumps(report, indent=1, default=str) + "\n")
    print(json.dumps(report["summary"], indent=1))
    figure([r for r in runs if r["mode"] == "start"], FIGURE)


if __name__ == "__main__":
    main()

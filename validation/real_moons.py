"""A real planet's four large moons seen from the moving Earth: GM and per-moon fit.

Data: ``pymeeus.JupiterMoons`` (Meeus, Astronomical Algorithms, 2nd ed., ch. 44, after
Lieske's E5 theory), 150 epochs over two years from 2026 Jan, 200 km errors, the
planet's direction and distance from astropy's built-in ephemeris (see
``tests/meeus_moons.py``). Each data set is fitted by least squares from massfit's own
start (``find_start``) with

* the per-row line of sight (``primary_ra``, ``primary_dec``, ``distance``), and
* one fixed sky plane (today's model before the line of sight; the negative control),
* the combined perturbed model with the line of sight (``--perturbed``): the planet's
  J2 and J4 (Juno's values, Iess et al. 2018, Nature 555, 220, at 71 492 km; from
  memory) about its IAU pole, and the moons' mutual pulls with their masses free.

The GM is compared with the published value (JUP230, from memory). The theory has
the moons' mutual perturbations (the Laplace resonance) and the planet's J2, which a
two-body fit cannot follow, so the per-moon reduced chi^2 stays far above 1 for the
resonant moons; the outer moon is nearly Keplerian. The theory also has the Sun's
pull and a truncation of its series, which no model here has.

Writes ``validation/results/real_moons.json`` (a run with ``--perturbed`` adds its
block to the file); about 3 minutes on two cores for the two-body fits. ``--figure``
draws ``docs/figures/real_moons_equator_oc.png`` instead: each moon's O-C along and
across the planet's equator (massfit's ``equator_residuals`` figure) of a two-body
fit with the line of sight and the pole (a 300-step chain: the figure shows its best
sample, which is the least-squares solution; the chain is not converged).
"""

from __future__ import annotations

import json
import os
import sys
import time
from dataclasses import replace
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent / "tests"))
sys.path.insert(0, str(HERE.parent))

from meeus_moons import PUBLISHED_GM, meeus_table  # noqa: E402

from massfit import Perturbed  # noqa: E402
from massfit.constants import GM_SUN_KM3_S2  # noqa: E402
from massfit.model.orbit_model import OrbitModel  # noqa: E402
from massfit.model.specs import SystemSpec  # noqa: E402
from massfit.read.tables import read_observations  # noqa: E402
from massfit.start.search import find_start  # noqa: E402
from massfit.summarise.adequacy import assess  # noqa: E402

RESULTS = HERE / "results" / "real_moons.json"
#: The planet's zonal harmonics and their reference radius (Juno: Iess et al. 2018,
#: from memory) and its pole at J2000 (IAU WGCCRE 2015, as in meeus_moons; from memory).
J2, J4, RADIUS = 0.014696, -5.87e-4, "71492 km"
POLE_RA, POLE_DEC = 268.056595, 64.495303


def perturbed_dynamics(start_evaluations=300, steps_per_orbit=None):
    """J2, J4 about the pole and mutual pulls; the pole as an ICRS (i, node):
    i = 90 deg - Dec, node = RA + 90 deg (the orbit normal W = (sin i sin node,
    -sin i cos node, cos i) then points at (RA, Dec)). ``steps_per_orbit``: fixed
    integrator steps (None: adaptive at rtol 1e-12)."""
    return Perturbed(j2=J2, j4=J4, equatorial_radius=RADIUS,
                     equator_inclination=f"{90.0 - POLE_DEC} deg",
                     equator_node=f"{POLE_RA + 90.0} deg",
                     start_evaluations=start_evaluations, steps_per_orbit=steps_per_orbit)


def step_cost(model, start, tau_steps=100):
    """CPU seconds of one sampler step (every walker once, as ``fit`` would use them)
    near the start, and the least a converged run costs: 50 autocorrelation times of
    ``tau_steps`` steps (an assumption: about 100 steps for ~25 parameters in
    massfit's sampler, ``massfit/sample/chain.py``)."""
    from massfit.sample.chain import SamplerSettings

    walkers = SamplerSettings().n_walkers(model.n_dim)
    rng = np.random.default_rng(1)
    scale = np.sqrt(np.clip(np.diag(start.covariance), 0.0, None))
    points = start.theta + 1e-3 * scale * rng.standard_normal((walkers, model.n_dim))
    cpu = time.process_time()
    model.log_prob(points)
    seconds = time.process_time() - cpu
    return {"walkers": walkers, "cpu_seconds_per_step": seconds,
            "assumed_tau_steps": tau_steps,
            "cpu_hours_for_50_tau": seconds * 50 * tau_steps / 3600.0}


def fitted(observations, dynamics=None):
    model = OrbitModel(observations, SystemSpec(dynamics=dynamics))
    clock = time.perf_counter()
    cpu = time.process_time()
    start = find_start(model, progress=dynamics is not None)
    seconds, cpu = time.perf_counter() - clock, time.process_time() - cpu
    phys = model.physical(start.theta[None])
    mass = float(phys["central_mass"][0])
    block = assess(model, start.theta, compare=False)
    per_moon = {name: {"reduced_chi2": moon["reduced_chi2"],
                       "period_d": float(phys["companions"][name]["period"][0])}
                for name, moon in block["companions"].items()}
    if dynamics is not None:
        for name in per_moon:
            per_moon[name]["mass_over_planet"] = float(
                phys["companions"][name]["mass"][0] / mass)
    k = model.names.index("central.log10_mass")
    sigma = float(np.sqrt(start.covariance[k, k]) * np.log(10.0))
    cost = None if dynamics is None else step_cost(model, start)
    return {"sampler_step_cost": cost,
            "gm_km3_s2": mass * GM_SUN_KM3_S2,
            "relative_to_published": mass * GM_SUN_KM3_S2 / PUBLISHED_GM - 1.0,
            "relative_sigma": sigma, "reduced_chi2": block["total"]["reduced_chi2"],
            "moons": per_moon, "seconds": seconds, "cpu_seconds": cpu,
            "notes": list(start.notes),
            "dynamics": None if dynamics is None else dynamics.describe(),
            "start_theta": [float(x) for x in start.theta]}


def draw_figure(observations, path):
    from massfit import fit
    from massfit.orbits.viewing import ViewingSpec
    from massfit.plot import equator_residual_plot

    spec = SystemSpec(viewing=ViewingSpec(pole_ra=np.radians(POLE_RA),
                                          pole_dec=np.radians(POLE_DEC)))
    result = fit(observations, spec, seed=1, max_steps=300, progress=False)
    equator_residual_plot(result).savefig(path, dpi=130)
    print(f"figure: {path}")


def main():
    import argparse

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--perturbed", action="store_true",
                        help="fit the combined perturbed model only and add its block")
    parser.add_argument("--start-evaluations", type=int, default=300)
    parser.add_argument("--steps-per-orbit", type=int, default=None,
                        help="fixed integrator steps per orbit of the inner moon "
                             "(default: adaptive steps at rtol 1e-12)")
    parser.add_argument("--figure", action="store_true",
                        help="only draw the two-body fit's O-C in the equator's frame")
    args = parser.parse_args()
    path = HERE / "results" / "real_moons_data.ecsv"
    path.parent.mkdir(exist_ok=True)
    meeus_table(n_epochs=150).write(path, overwrite=True)
    observations = read_observations(path)
    path.unlink()
    if args.figure:
        draw_figure(observations, HERE.parent / "docs" / "figures"
                    / "real_moons_equator_oc.png")
        return
    out = {"published_gm_km3_s2": PUBLISHED_GM, "epochs": 150, "error_km": 200.0}
    if RESULTS.exists():
        out = dict(json.loads(RESULTS.read_text()), **out)
    if args.perturbed:
        out["perturbed"] = fitted(observations, perturbed_dynamics(args.start_evaluations,
                                                                   args.steps_per_orbit))
        out["perturbed"]["machine"] = (f"shared 2-core machine, load average "
                                       f"{os.getloadavg()[0]:.1f} at the end")
    else:
        plane = replace(observations, astrometry=replace(
            observations.astrometry, primary_ra=None, primary_dec=None))
        out.update(line_of_sight=fitted(observations), fixed_plane=fitted(plane))
    RESULTS.write_text(json.dumps(out, indent=2) + "\n")
    for key in ("line_of_sight", "fixed_plane", "perturbed"):
        if key not in out:
            continue
        res = out[key]
        print(f"{key:14s} GM/published - 1 = {res['relative_to_published']:+.2e} "
              f"(sigma {res['relative_sigma']:.1e}), reduced chi2 {res['reduced_chi2']:.3g}")
        for name, moon in res["moons"].items():
            print(f"    {name:9s} reduced chi2 {moon['reduced_chi2']:.3g}")


if __name__ == "__main__":
    main()

"""Checking a forecast: simulate the schedule at the assumed elements, fit it, compare widths."""
from __future__ import annotations

import math

import numpy as np

from massfit.constants import GM_SUN_KM3_S2
from massfit.errors import ModelError
from massfit.model.orbit_model import OrbitModel
from massfit.plan.schedule import Schedule
from massfit.plan.system import AssumedSystem, simulated_observations


# ======================================================================= checks
def check_schedule(system, schedule, label, n_added, forecast, steps, seed):
    """Simulate ``schedule`` at the assumed elements, fit it, compare with the forecast."""
    from massfit.run import fit
    from massfit.sample.chain import SamplerSettings

    obs = simulated_observations(system, schedule, seed=seed)
    spec = system.simulated_spec(seed)
    settings = SamplerSettings(max_steps=max(int(steps), 100),
                               check_every=max(50, min(500, int(steps) // 4)),
                               seed=seed, progress=False)
    try:
        result = fit(obs, spec, sampler=settings)
    except (ModelError, RuntimeError) as exc:
        return {"schedule": label, "n_added": n_added, "forecast_gm_rel_sigma": forecast,
                "fit_gm_rel_sigma": math.nan, "ratio": math.nan, "truth_inside_95": False,
                "converged": False, "failed": str(exc)}
    gm = np.asarray(result.samples["central_gm"])
    lo, hi = np.percentile(np.log(gm), [15.865, 84.135])
    fit_sigma = 0.5 * (hi - lo)
    truth = system.mass_msun() * GM_SUN_KM3_S2
    block = result.summary["central_gm"]
    return {"schedule": label, "n_added": n_added, "epochs": len(schedule),
            "forecast_gm_rel_sigma": forecast, "fit_gm_rel_sigma": float(fit_sigma),
            "ratio": float(fit_sigma / forecast) if forecast > 0 else math.nan,
            "fit_gm_median": block["median"], "true_gm": float(truth),
            "truth_inside_95": bool(block["lower_95"] <= truth <= block["upper_95"]),
            "converged": result.converged, "steps": int(result.chain.steps),
            # A chi^2 far above the number of values means the fit found another
            # solution (a period alias, most often), not the assumed orbit.
            "fit_chi2": float(result.start.chi2),
            "values": int(2 * len(obs.astrometry)),
            "seed": seed}


def fit_scatter(system: AssumedSystem, schedule: Schedule, *, realisations: int = 50,
                seed: int = 0) -> dict:
    """The frequentist sigma of ln GM: least-squares fits of many simulated noise draws.

    Each draw simulates the schedule at the assumed elements, fits it by least squares
    (from the assumed elements, so that no period alias is picked up: this measures
    the precision, not the start search) and keeps the fitted GM.

    Returns
    -------
    dict
        ``gm_relative_sigma`` (sample standard deviation of ln GM), ``its_error``
        (its own standard error, sigma / sqrt(2 (n - 1))), ``fits`` and ``failed``.
    """
    from massfit.start.least_squares import solve_least_squares

    masses = []
    failed = 0
    for k in range(realisations):
        spec = system.simulated_spec(seed + k)
        model = OrbitModel(simulated_observations(system, schedule, seed=seed + k), spec)
        theta = solve_least_squares(model, system.physical(model))
        if theta is None:
            failed += 1
            continue
        masses.append(float(model.physical(theta)["central_mass"][0]))
    values = np.log(masses)
    sigma = float(np.std(values, ddof=1)) if values.size > 2 else math.nan
    return {"gm_relative_sigma": sigma,
            "its_error": sigma / math.sqrt(2 * max(values.size - 1, 1)),
            "fits": int(values.size), "failed": failed}

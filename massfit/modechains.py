"""Each weighty mode sampled in its own period box, and the mass over all of them.

emcee's walkers do not cross between separated modes, so starting them spread over
the modes would not weigh them: each walker would stay where it began. Instead, where
the main chain missed modes of non-negligible Laplace weight (:mod:`massfit.start.modes`),
each such mode gets a short fit of its own: the same data, model and priors, with
every companion's period prior cut to a box that holds that mode alone
(:func:`massfit.start.modes.period_box`). A mode the main chain did visit keeps the main
chain's samples that lie in it.

The central mass over all modes is then the mixture of the modes' samples, each mode
weighted by its Laplace weight renormalised over the modes of weight >= 1 %. This is
an approximation and is labelled so: the weights come from the Laplace estimate at
each least-squares solution, not from a sampler that crosses between the modes.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from massfit.start.modes import MIN_WEIGHT, in_mode, period_box
from massfit.priors import LogUniform, Uniform
from massfit.summarise.derived import interval

__all__ = ["weigh_modes", "boxed_spec", "MODE_MAX_STEPS", "MIXTURE_DRAWS"]

#: Step cap of each mode's own chain (the main fit's cap if that is lower).
MODE_MAX_STEPS = 20_000
#: Draws of the mixture the interval of the mass over the modes is taken from.
MIXTURE_DRAWS = 40_000
#: The summary's label of the mixture.
APPROXIMATION = ("approximation: each mode's samples weighted by its Laplace weight "
                 "(renormalised over the modes of weight >= 1 %); the weights are not "
                 "measured by a chain that crosses between the modes")


def boxed_spec(model, mode, others):
    """The model's spec with each companion's period prior cut to the mode's box.

    Returns None where a period prior is neither uniform nor log-uniform (a box of
    another shape would change the prior's form, not only its support).
    """
    companions = {}
    for name, comp in model.companions.items():
        prior = comp.period
        if name in mode["periods"] and not prior.is_fixed:
            if type(prior) not in (Uniform, LogUniform):
                return None
            low, high = period_box(mode, others, name)
            prior = type(prior)(max(prior.low, low), min(prior.high, high))
        companions[name] = replace(comp, period=prior)
    return replace(model.spec, companions=companions, strict_companions=True)


def _main_chain_part(model, samples, mode):
    """Central masses (M_sun) and periods of the main chain's samples in ``mode``."""
    phys = model.physical(samples, lenient=True)
    periods = {n: np.asarray(phys["companions"][n]["period"]) for n in model.companions}
    mask = in_mode(mode, periods)
    return (np.asarray(phys["central_mass"])[mask],
            {n: p[mask] for n, p in periods.items()})


def _own_chain(observations, model, mode, candidates, settings, fit):
    """A fit of the mode alone (through ``fit``): (masses, periods, chain facts) or None."""
    full = next(c for c in candidates if c["periods"] == mode["periods"])
    spec = boxed_spec(model, full, [c for c in candidates if c is not full])
    if spec is None:
        return None
    cap = min(settings.max_steps, MODE_MAX_STEPS)
    result = fit(observations, spec, sampler=replace(settings, max_steps=cap,
                                                     progress=False))
    samples = result.samples
    periods = {n: np.asarray(c["period"]) for n, c in samples["companions"].items()}
    facts = {"sampled": "own chain in its period box", "converged": result.converged,
             "steps": int(result.chain.steps),
             "boxes_days": {n: [spec.companions[n].period.low,
                                spec.companions[n].period.high] for n in mode["periods"]}}
    return np.asarray(samples["central_mass_solar"]), periods, facts


def weigh_modes(model, samples, census, candidates, observations, settings, *, fit,
                main_converged=True) -> dict | None:
    """Per-mode intervals and the central mass over the modes (an approximation).

    Parameters
    ----------
    model : OrbitModel
    samples : ndarray
        The main chain's samples (model coordinates).
    census : list of dict
        :func:`massfit.start.modes.chain_census` of that chain; each weighty mode gets a
        ``chain`` entry (its central mass and period intervals, how it was sampled).
    candidates : list of dict
        The start's ``candidate_modes``.
    observations : Observations
    settings : SamplerSettings
        The main fit's settings (seed, walkers); the step cap is at most
        :data:`MODE_MAX_STEPS`.
    fit : callable
        :func:`massfit.run.fit`, passed in by its caller (so that this module, which
        that function calls, does not import it back).
    main_converged : bool
        Whether the main chain passed the autocorrelation test (for its modes).

    Returns
    -------
    dict or None
        ``central_mass_solar`` (interval block, M_sun), ``modes`` (how many were
        mixed), ``approximation`` (what the numbers rest on), ``all_modes_converged``;
        None where fewer than two weighty modes exist, a mode could not be sampled,
        or the modes come from the two-body search of a perturbed model.
    """
    heavy = [m for m in census if m["weight"] >= MIN_WEIGHT]
    if len(heavy) < 2 or model.velocity_only or any(c.get("searched_with")
                                                    for c in candidates):
        return None  # a perturbed model's modes have two-body periods: no boxes for it
    parts = []
    for mode in heavy:
        if mode["visited"]:
            masses, periods = _main_chain_part(model, samples, mode)
            facts = {"sampled": "main chain", "converged": bool(main_converged)}
        else:
            own = _own_chain(observations, model, mode, candidates, settings, fit)
            if own is None:
                return None
            masses, periods, facts = own
        if masses.size == 0:
            return None
        mode["chain"] = dict(facts, central_mass_solar=interval(masses, "M_sun"),
                             period={n: interval(p, "d") for n, p in periods.items()})
        parts.append((mode["weight"], masses))
    weights = np.array([w for w, _ in parts])
    weights = weights / weights.sum()
    rng = np.random.default_rng(settings.seed)
    counts = rng.multinomial(MIXTURE_DRAWS, weights)
    mixture = np.concatenate([rng.choice(m, size=k, replace=True)
                              for (_, m), k in zip(parts, counts) if k])
    converged = all(m["chain"].get("converged", True) for m in heavy)
    return {"central_mass_solar": interval(mixture, "M_sun"), "modes": len(heavy),
            "weights": [float(w) for w in weights], "approximation": APPROXIMATION,
            "all_modes_converged": bool(converged)}

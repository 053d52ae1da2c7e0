"""massfit: the mass of a central body from the orbits of its companions.

Three lines from a notebook::

    import massfit
    result = massfit.fit(massfit.read_observations("moons.ecsv"), parallax="48 mas",
                         parallax_err="0.3 mas")
    result.save("fit-out")          # summary.json, samples, figures

``result.summary`` holds the numbers, ``result.corner_plot()`` and
``result.orbit_plot()`` return matplotlib Figures, and ``print(result)`` reads well.
"""

from massfit.lazy import lazy_names

# Each public name and the module it lives in, imported on first use: ``import massfit``
# (and the ``massfit`` command, whose --help needs none of them) stays light, and
# ``massfit.fit`` or ``from massfit import fit`` loads what that name needs.
_WHERE = {
    "read_observations": "massfit.read.tables",
    "fit": "massfit.run",
    "load_result": "massfit.result.loading",
    "load_config": "massfit.config.fit",
    "FitResult": "massfit.result.fit_result",
    "SystemSpec": "massfit.model.specs",
    "CompanionSpec": "massfit.model.specs",
    "FrameSpec": "massfit.model.frame",
    "RelativitySpec": "massfit.orbits.relativity",
    "Keplerian": "massfit.orbits.dynamics",
    "Oblate": "massfit.orbits.oblate",
    "NBody": "massfit.orbits.perturbed",
    "Perturbed": "massfit.orbits.perturbed",
    "ViewingSpec": "massfit.orbits.viewing",
    "SamplerSettings": "massfit.sample.chain",
    "Uniform": "massfit.priors",
    "LogUniform": "massfit.priors",
    "Normal": "massfit.priors",
    "Fixed": "massfit.priors",
    "MassfitError": "massfit.errors",
    "InputError": "massfit.errors",
    "ConfigError": "massfit.errors",
    "ModelError": "massfit.errors",
    "__version__": "massfit.version",
    "AssumedSystem": "massfit.plan.system",
    "Schedule": "massfit.plan.schedule",
    "forecast_precision": "massfit.plan.forecast",
    "plan_observations": "massfit.plan.planner",
}


__getattr__, __dir__ = lazy_names(globals(), _WHERE)


__all__ = [
    "read_observations", "fit", "load_result", "load_config", "FitResult", "SystemSpec",
    "CompanionSpec", "FrameSpec", "RelativitySpec", "Keplerian", "Oblate", "NBody", "Perturbed", "SamplerSettings",
    "Uniform",
    "LogUniform", "Normal", "Fixed",
    "MassfitError", "InputError", "ConfigError", "ModelError", "__version__",
    "AssumedSystem", "Schedule", "forecast_precision", "plan_observations", "ViewingSpec",
]

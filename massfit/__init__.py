"""massfit: the mass of a central body from the orbits of its companions.

Three lines from a notebook::

    import massfit
    result = massfit.fit(massfit.read_observations("moons.ecsv"), parallax="48 mas",
                         parallax_err="0.3 mas")
    result.save("fit-out")          # summary.json, samples, figures

``result.summary`` holds the numbers, ``result.corner_plot()`` and
``result.orbit_plot()`` return matplotlib Figures, and ``print(result)`` reads well.
"""

from massfit.config.fit import load_config
from massfit.orbits.dynamics import Keplerian
from massfit.errors import ConfigError, InputError, MassfitError, ModelError
from massfit.model.specs import CompanionSpec, SystemSpec
from massfit.model.frame import FrameSpec
from massfit.orbits.relativity import RelativitySpec
from massfit.orbits.perturbed import NBody
from massfit.orbits.oblate import Oblate
from massfit.plan.forecast import forecast_precision
from massfit.plan.planner import plan_observations
from massfit.plan.schedule import Schedule
from massfit.plan.system import AssumedSystem
from massfit.priors import Fixed, LogUniform, Normal, Uniform
from massfit.read.tables import read_observations
from massfit.result.fit_result import FitResult
from massfit.run import fit
from massfit.result.loading import load_result
from massfit.sample.chain import SamplerSettings
from massfit.version import __version__
from massfit.orbits.viewing import ViewingSpec
from massfit.orbits.perturbed import Perturbed


__all__ = [
    "read_observations", "fit", "load_result", "load_config", "FitResult", "SystemSpec",
    "CompanionSpec", "FrameSpec", "RelativitySpec", "Keplerian", "Oblate", "NBody", "Perturbed", "SamplerSettings",
    "Uniform",
    "LogUniform", "Normal", "Fixed",
    "MassfitError", "InputError", "ConfigError", "ModelError", "__version__",
    "AssumedSystem", "Schedule", "forecast_precision", "plan_observations", "ViewingSpec",
]

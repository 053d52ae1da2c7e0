"""massfit: the mass of a central body from the orbits of its companions.

Three lines from a notebook::

    import massfit
    result = massfit.fit(massfit.read_observations("moons.ecsv"), parallax="48 mas",
                         parallax_err="0.3 mas")
    result.save("fit-out")          # summary.json, samples, figures

``result.summary`` holds the numbers, ``result.corner_plot()`` and
``result.orbit_plot()`` return matplotlib Figures, and ``print(result)`` reads well.
"""

from importlib import metadata as _metadata

from .config import load_config
from .dynamics import Keplerian
from .errors import ConfigError, InputError, MassfitError, ModelError
from .model import CompanionSpec, SystemSpec
from .nbody import NBody
from .perturbed import Perturbed
from .oblateness import Oblate
from .plan import AssumedSystem, Schedule, forecast_precision, plan_observations
from .priors import Fixed, LogUniform, Normal, Uniform
from .read import read_observations
from .results import FitResult
from .run import fit
from .saved import load_result
from .sample import SamplerSettings

try:
    __version__ = _metadata.version("massfit")
except _metadata.PackageNotFoundError:  # pragma: no cover - running from a checkout
    __version__ = "0.1.0"

__all__ = [
    "read_observations", "fit", "load_result", "load_config", "FitResult", "SystemSpec",
    "CompanionSpec", "Keplerian", "Oblate", "NBody", "Perturbed", "SamplerSettings",
    "Uniform",
    "LogUniform", "Normal", "Fixed",
    "MassfitError", "InputError", "ConfigError", "ModelError", "__version__",
    "AssumedSystem", "Schedule", "forecast_precision", "plan_observations",
]

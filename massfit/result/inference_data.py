"""The posterior as ArviZ ``InferenceData``, so that ArviZ's diagnostics and plots work on it.

Each emcee walker becomes one ArviZ chain and each kept step (after burn-in and
thinning) one draw. The variables are the physical quantities of
:func:`massfit.summarise.derived.derived_samples`, in the units of ``summary.json``
(each variable's ``units`` attribute says which, as :mod:`massfit.summarise.quantities`
and the summary's blocks write it); the companions' quantities share a ``companion``
dimension and the velocity terms an ``instrument`` dimension.
``sample_stats`` holds ``lp``, the log-posterior of each draw as the sampler saw it
(``log_prob`` of ``samples.ecsv``: in the sampler's coordinates, so with the Jacobian
of the change for companions sampled as a position and velocity).

The walkers of an ensemble sampler are not independent chains: a walker's moves use
the positions of the others. ArviZ's effective sample size and R-hat computed over
walkers are still the usual diagnostics for such chains, but read R-hat as a check
of mixing between walkers, not of independent runs.
"""

from __future__ import annotations

import warnings

import numpy as np

from massfit.errors import ConfigError
from massfit.summarise.quantities import CENTRAL, COMPANION

__all__ = ["INFERENCE_DATA_FILE", "to_inference_data", "require_arviz"]

#: The file ``FitResult.save(..., arviz=True)`` (``massfit fit --arviz``) writes.
INFERENCE_DATA_FILE = "posterior.nc"

def require_arviz():
    """The arviz module, or a ConfigError that says how to install it."""
    try:
        import arviz
    except ImportError:
        raise ConfigError('the ArviZ export needs arviz: pip install "massfit[arviz]"',
                          key="arviz") from None
    return arviz


def _by_walker(values, walkers):
    """Flattened samples (step-major, as emcee's flat chain) -> (walkers, draws, ...).

    ``Chain.samples`` is ``walker_steps.reshape(-1, n_dim)`` of an array shaped
    (kept steps, walkers, n_dim): sample ``k`` is walker ``k % walkers`` at kept step
    ``k // walkers``.
    """
    values = np.asarray(values, dtype=float)
    return values.reshape(-1, walkers, *values.shape[1:]).swapaxes(0, 1)


def _unit(table, key):
    return table[key].unit_text if key in table else ""


def _posterior(samples, velocity_blocks, walkers):
    """Variables, their dims and their units from FitResult.samples."""
    variables, dims, units = {}, {}, {}
    for key, values in samples.items():
        if isinstance(values, np.ndarray):
            variables[key] = _by_walker(values, walkers)
            units[key] = _unit(CENTRAL, key)
    companions = list(samples.get("companions", {}))
    keys = []
    for comp in samples.get("companions", {}).values():
        keys += [k for k in comp if k not in keys]
    for key in keys:
        # A quantity some companions lack (a velocity amplitude of one seen only on
        # the sky) is NaN for those: not applicable, never a number.
        columns = [samples["companions"][name].get(key) for name in companions]
        size = next(c.size for c in columns if c is not None)
        stacked = np.stack([np.full(size, np.nan) if c is None else np.asarray(c, float)
                            for c in columns], axis=-1)
        variables[key] = _by_walker(stacked, walkers)
        dims[key] = ["companion"]
        units[key] = _unit(COMPANION, key)
    rv = samples.get("rv", {})
    for term in ("offset", "jitter"):
        if term in rv:
            labels = list(rv[term])
            variables[f"rv_{term}"] = _by_walker(
                np.stack([rv[term][lab] for lab in labels], axis=-1), walkers)
            dims[f"rv_{term}"] = ["instrument"]
            units[f"rv_{term}"] = velocity_blocks[term][labels[0]]["unit"]
    for term in ("slope", "curvature"):
        if term in rv:
            variables[f"rv_trend_{term}"] = _by_walker(rv[term], walkers)
            units[f"rv_trend_{term}"] = velocity_blocks[f"trend_{term}"]["unit"]
    return variables, dims, units, companions


def to_inference_data(result):
    """The posterior of a :class:`~massfit.result.fit_result.FitResult` as ArviZ InferenceData.

    Parameters
    ----------
    result : FitResult
        A fitted result, or one read back with :func:`massfit.load_result`.

    Returns
    -------
    arviz.InferenceData
        ``posterior``: the physical quantities, dims ``(chain, draw)`` with one chain per
        walker, plus ``companion`` or ``instrument`` where they apply; each variable's
        ``units`` attribute names its unit. ``sample_stats``: ``lp``, the
        log-posterior. The attributes record whether the run converged, its steps,
        burn-in and thinning.

    Raises
    ------
    ConfigError
        If arviz is not installed (``pip install "massfit[arviz]"``).
    """
    arviz = require_arviz()
    chain = result.chain
    walkers = int(chain.walkers)
    n = len(chain.log_prob)
    if walkers < 1 or n % walkers:
        raise ConfigError(f"{n} samples do not divide into {walkers} walkers; the chain "
                          "cannot be split walker by walker", key="walkers")
    variables, dims, units, companions = _posterior(
        result.samples, result.summary.get("velocities", {}), walkers)
    coords = {"companion": companions}
    rv = result.samples.get("rv", {})
    if "offset" in rv:
        coords["instrument"] = list(rv["offset"])
    from massfit.version import __version__

    attrs = {"inference_library": "emcee", "created_by": f"massfit {__version__}",
             "converged": int(bool(chain.converged)), "steps": int(chain.steps),
             "walkers": walkers, "burn_in": int(chain.burn_in), "thin": int(chain.thin),
             "chains_are": "emcee walkers of one ensemble (not independent runs)"}
    with warnings.catch_warnings():
        # An ensemble has more walkers than kept steps often; ArviZ warns of that as a
        # likely transposed array, which it is not here.
        warnings.filterwarnings("ignore", message="More chains", category=UserWarning)
        data = arviz.from_dict(
            posterior=variables,
            sample_stats={"lp": _by_walker(chain.log_prob, walkers)},
            coords={k: v for k, v in coords.items() if any(k in d for d in dims.values())},
            dims=dims)
    data.posterior.attrs.update(attrs)
    data.sample_stats.attrs.update(attrs)
    for key, unit in units.items():
        data.posterior[key].attrs["units"] = unit
    return data

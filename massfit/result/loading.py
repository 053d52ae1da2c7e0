"""A saved output folder read back into a result, without refitting and without pickle.

What :meth:`FitResult.save` writes is enough to rebuild the model and redraw every
figure:

- ``observations.ecsv``: the validated rows (astrometry and radial velocities, told
  apart by its ``kind`` column) in massfit's internal units, so the input files need
  not be at hand any more (folders written before kept the velocities in
  ``velocities.ecsv``, still read);
- ``run.json`` key ``model``: the assumptions (the :class:`SystemSpec` with every
  prior), the angle windows the sampler used and the names of the sampled
  coordinates, plus what the observations were read from;
- ``samples.ecsv``: the sampled coordinates and every derived quantity;
- ``summary.json``: the numbers and the sampler's diagnostics.
"""

from __future__ import annotations

import dataclasses
import json
from pathlib import Path
from types import SimpleNamespace

import numpy as np
from astropy.table import Table
from astropy.time import Time

from massfit import priors as _priors
from massfit.errors import InputError
from massfit.model.orbit_model import OrbitModel
from massfit.model.frame import FrameSpec
from massfit.model.specs import CompanionSpec, InstrumentSpec, SystemSpec
from massfit.orbits.relativity import RelativitySpec
from massfit.read.observations import Observations, Rejection
from massfit.result.fit_result import FitResult
from massfit.summarise.dark_mass import extra_samples
from massfit.write.saved_state import (DATA_KINDS, OBSERVATIONS_FILE, OLD_VELOCITY_FILE, RUN_FILE, SAMPLES_FILE, STATE_VERSION,
                                      SUMMARY_FILE, model_state, write_observations)

__all__ = ["load_result", "model_state", "write_observations", "STATE_VERSION"]

_PRIORS = {cls.__name__: cls for cls in (_priors.Uniform, _priors.LogUniform,
                                         _priors.Normal, _priors.Fixed)}
#: The parts of a model's spec that a saved folder may hold, by class name.
_SAVED_PARTS = {cls.__name__: cls for cls in (SystemSpec, CompanionSpec, InstrumentSpec,
                                              FrameSpec, RelativitySpec)}


# ------------------------------------------------------------------ reading
def _decode(value):
    if isinstance(value, dict):
        if "prior" in value:
            cls = _PRIORS.get(value["prior"])
            if cls is None:
                raise InputError(f"unknown prior {value['prior']!r} in the saved model")
            return cls(**{k: v for k, v in value.items() if k != "prior"})
        if "viewing_spec" in value:
            from massfit.orbits.viewing import viewing_from_settings

            return viewing_from_settings(value["viewing_spec"])
        if "dynamics_model" in value:
            from massfit.orbits.registry import make_dynamics

            return make_dynamics(value["dynamics_model"],
                                 **{k: v for k, v in value.items() if k != "dynamics_model"})
        if "dataclass" in value:
            cls = _SAVED_PARTS.get(str(value["dataclass"]))
            if cls is None:
                raise InputError(f"unknown part {value['dataclass']!r} in the saved model")
            return _build(cls, value)
        return {k: _decode(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_decode(v) for v in value]
    return value


def _build(cls, value):
    known = {f.name for f in dataclasses.fields(cls)}
    return cls(**{k: _decode(v) for k, v in value.items() if k in known})


def _read_data(folder, attr):
    """One kind of row from ``observations.ecsv`` (or, from older folders, its own file)."""
    kind, cls = DATA_KINDS[attr]
    path = folder / OBSERVATIONS_FILE
    table = Table.read(path, format="ascii.ecsv") if path.exists() else None
    if table is not None and "kind" in table.colnames:
        table = table[np.asarray(table["kind"]) == kind]
    elif attr == "velocities":  # before the one table: the velocities in their own file
        path = folder / OLD_VELOCITY_FILE
        table = Table.read(path, format="ascii.ecsv") if path.exists() else None
    if table is None or len(table) == 0:
        return None
    values = {}
    for f in dataclasses.fields(cls):
        if f.name not in table.colnames and f.default is None:
            continue  # an optional part the data did not have
        if f.name not in table.colnames:
            raise InputError(f"column '{f.name}' is missing; the folder was written by "
                             f"another massfit version", file=str(path))
        column = table[f.name]
        if hasattr(column, "filled") and column.dtype.kind in "US":
            column = column.filled("")  # empty strings (reference_body) read as masked
        elif hasattr(column, "filled"):  # blank in the other kind's rows only
            column = column.filled(np.nan if column.dtype.kind == "f" else 0)
        column = np.asarray(column)
        if f.name == "time":
            values[f.name] = Time(column, format="jd", scale="tdb")
        elif column.dtype.kind in "US":
            values[f.name] = column.astype(str)
        else:
            values[f.name] = column
    return cls(**values)


def _read_json(path):
    try:
        return json.loads(path.read_text())
    except OSError as exc:
        raise InputError(f"cannot read it ({exc.strerror}); is this a massfit output "
                         f"folder?", file=str(path)) from None
    except json.JSONDecodeError as exc:
        raise InputError(f"not valid JSON ({exc.msg})", file=str(path),
                         line=exc.lineno) from None


def load_result(folder):
    """Read a saved output folder back into a :class:`~massfit.result.fit_result.FitResult`.

    The model is rebuilt from the saved observations and assumptions; the posterior
    samples, the summary and the diagnostics are those saved (nothing is refitted or
    recomputed), so figures and tables drawn from it match the original run.

    Parameters
    ----------
    folder : str or Path
        A folder written by :meth:`FitResult.save` (or ``massfit fit``).

    Returns
    -------
    FitResult
    """
    folder = Path(folder)
    summary = _read_json(folder / SUMMARY_FILE)
    record = _read_json(folder / RUN_FILE)
    state = record.get("model")
    if not isinstance(state, dict):
        raise InputError("run.json has no 'model' block: this folder was written by an "
                         "earlier massfit and cannot be redrawn; fit again",
                         file=str(folder / RUN_FILE))
    if state.get("version", 0) > STATE_VERSION:
        raise InputError(f"the saved model is version {state['version']}; this massfit "
                         f"reads up to {STATE_VERSION}", file=str(folder / RUN_FILE))
    observations = _saved_observations(folder, state["observations"])
    spec = _build(SystemSpec, state["system"])
    model = OrbitModel(observations, spec)
    model.node_width.update(state["node_width"])
    for name, centre in state["centres"].items():
        model.centres[name].update(centre)
    if list(model.names) != list(state["parameter_names"]):
        raise InputError("the model rebuilt from the saved assumptions has other "
                         "parameters than the saved samples; the folder is inconsistent",
                         file=str(folder / RUN_FILE))
    samples_path = folder / SAMPLES_FILE
    try:
        table = Table.read(samples_path, format="ascii.ecsv")
    except (OSError, ValueError) as exc:
        raise InputError(f"cannot read the samples ({exc})", file=str(samples_path)) from None
    missing = [n for n in model.names + ["log_prob"] if n not in table.colnames]
    if missing:
        raise InputError(f"columns {', '.join(missing)} are missing",
                         file=str(samples_path))
    theta = np.column_stack([np.asarray(table[n], dtype=float) for n in model.names])
    chain = _saved_chain(summary, model, table, theta)
    result = FitResult.__new__(FitResult)
    result.model = model
    result.chain = chain
    result.start = SimpleNamespace(modes=list(summary.get("modes", [])))
    result.settings = None
    result.samples = _derived_from_table(table, model)
    # The frame terms, the precession scale and the periapsis advances come from the
    # sampled coordinates (frame.*, relativity.*), which the table keeps as such.
    result.samples.update(extra_samples(model, model.physical(theta)))
    result.warnings = list(summary.get("warnings", []))
    result.record = record
    result.summary = summary
    return result


def _saved_observations(folder, info):
    """The observations saved in ``folder`` (``info``: run.json's observations block)."""
    return Observations(
        astrometry=_read_data(folder, "astrometry"),
        velocities=_read_data(folder, "velocities"), files=list(info["files"]),
        rows_read=int(info["rows_read"]),
        rejected=[Rejection(**r) for r in info["rejected"]],
        unused_columns=dict(info["unused_columns"]), primary=info["primary"],
        stated=dict(info.get("stated", {})))


def _saved_chain(summary, model, table, theta):
    """The saved samples and the summary's diagnostics as a Chain (with its modes)."""
    from massfit.sample.chain import Chain

    diag = summary["diagnostics"]
    tau = diag.get("autocorr_steps", {})
    # Keyed by the coordinates the sampler moved in, which may not be the model's.
    moved_in = list(tau) if len(tau) == model.n_dim else list(model.names)
    chain = Chain(samples=theta, log_prob=np.asarray(table["log_prob"], dtype=float),
                  steps=int(diag["steps"]), walkers=int(diag["walkers"]),
                  tau=np.array([tau.get(n, diag["max_autocorr_steps"]) for n in moved_in]),
                  converged=bool(summary["converged"]),
                  burn_in=int(diag.get("burn_in_steps", 0)), thin=int(diag.get("thin", 1)),
                  acceptance_fraction=float(diag["acceptance_fraction"]),
                  seconds=float(diag["sampling_seconds"]), tau_history=[],
                  coordinate_names=moved_in,
                  state_bodies=list(diag.get("sampled_as_state", [])),
                  key_tau=diag.get("mass_autocorr_steps"),
                  key_column=(model.names.index("central.log10_mass")
                              if diag.get("mass_autocorr_steps") is not None else None))
    chain.modes, chain.mode_members = _saved_modes(summary, model, theta)
    return chain


def _saved_modes(summary, model, theta):
    """A nested fit's weighed modes (summary.json ``weighed_modes``) and, per mode, which
    of the saved samples lie in its period boxes: what the figures colour by mode."""
    modes = [m for m in summary.get("weighed_modes", []) or []
             if m.get("period_boxes_days") or m.get("node_half_centre_deg")]
    if len(modes) < 2:
        return [], []
    members = []
    for mode in modes:
        inside = np.ones(theta.shape[0], dtype=bool)
        for name, centre in (mode.get("node_half_centre_deg") or {}).items():
            node = theta[:, model.column_of[f"{name}.node"]]
            inside &= np.abs(np.angle(np.exp(1j * (node - np.radians(centre))))) < np.pi / 2
        for name, (low, high) in mode["period_boxes_days"].items():
            period = 10.0 ** theta[:, model.column_of[f"{name}.log10_period"]]
            inside &= (period >= low) & (period <= high)
        members.append(inside)
    return modes, members


#: Sample columns of results written before the samples took the summary's keys.
_EARLIER_NAMES = {"central_mass_Msun": "central_mass_solar",
                  "central_mass_Mjup": "central_mass_jupiter",
                  "central_mass_Mearth": "central_mass_earth",
                  "semi_major_axis_mas": "semi_major_axis_angle"}


def _derived_from_table(table, model):
    out = {"companions": {name: {} for name in model.companions}}
    for col in table.colnames:
        # Sampled coordinates are not derived quantities, except the parallax, which
        # is both (and was written once).
        if (col in model.names and col != "parallax") or col == "log_prob":
            continue
        body, _, key = col.partition(".")
        values = np.asarray(table[col], dtype=float)
        if key and body in out["companions"]:
            out["companions"][body][_EARLIER_NAMES.get(key, key)] = values
        elif not key:
            out[_EARLIER_NAMES.get(col, col)] = values
    return out

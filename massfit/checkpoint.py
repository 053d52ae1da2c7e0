"""Checkpoints of a running fit, so that an interrupted run can be resumed.

A checkpoint is one HDF5 file in the output folder's *partial area* (a hidden folder
beside the output folder, ``.NAME.partial``), which never looks like a result. It holds

- the chain, written step by step by emcee's HDF5 backend, together with emcee's
  random state after each step (group ``chain``);
- what is needed to continue exactly where the run stopped (group ``massfit``): the
  sampler settings, the starting solution and the angle windows it chose, the walkers'
  starting points, the time the run started, and a fingerprint of the data and the
  model, so that a checkpoint is never continued with other data.

Resuming therefore repeats no random draw and no search: it continues the same Markov
chain with the same random stream, and the convergence checks (a function of the
stored chain alone) fall at the same steps. The result is the one an uninterrupted run
with the same seed gives.
"""

from __future__ import annotations

import hashlib
import json
import shutil
from dataclasses import asdict
from pathlib import Path

import numpy as np

from .errors import ConfigError

__all__ = ["partial_dir", "checkpoint_path", "fingerprint", "write_meta", "read_meta",
           "discard"]

CHECKPOINT_FILE = "checkpoint.h5"
CHAIN_GROUP = "chain"
META_GROUP = "massfit"
#: 2: the chain is stored in the sampler's coordinates (massfit.coordinates), which
#: version 1 did not have; a version-1 chain cannot be continued.
FORMAT_VERSION = 2
# Settings that change the chain; a resumed run must use the same ones.
_FIXED_SETTINGS = ("walkers", "check_every", "seed")


def partial_dir(out_dir) -> Path:
    """The partial area of an output folder: a hidden sibling, ``.NAME.partial``."""
    out = Path(out_dir)
    return out.parent / f".{out.name}.partial"


def checkpoint_path(out_dir) -> Path:
    """Where the checkpoint of a fit written to ``out_dir`` lives."""
    return partial_dir(out_dir) / CHECKPOINT_FILE


def discard(out_dir) -> None:
    """Remove the partial area of ``out_dir`` (after the result is safely written)."""
    shutil.rmtree(partial_dir(out_dir), ignore_errors=True)


def fingerprint(model) -> str:
    """SHA-256 of what determines the posterior: the data arrays and the model spec."""
    digest = hashlib.sha256()
    digest.update(repr(model.spec).encode())
    digest.update(repr(model.names).encode())
    for data in (model.observations.astrometry, model.observations.velocities):
        if data is None:
            continue
        for name in data.__dataclass_fields__:
            if name in ("file", "line"):
                continue  # moving a file does not change the fit
            value = getattr(data, name)
            if name == "time":
                value = value.tdb.jd
            digest.update(np.ascontiguousarray(value).tobytes())
    return digest.hexdigest()


def write_meta(path, *, model, start, initial, settings, started_utc) -> None:
    """Create the checkpoint file with everything needed to resume (not the chain)."""
    import h5py

    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    meta = {
        "format_version": FORMAT_VERSION,
        "fingerprint": fingerprint(model),
        "settings": {k: v for k, v in asdict(settings).items() if k != "progress"},
        "started_utc": started_utc,
        "centres": model.centres,
        "start": {"theta": start.theta.tolist(), "chi2": start.chi2,
                  "covariance": np.asarray(start.covariance).tolist(),
                  "modes": start.modes, "per_companion": start.per_companion,
                  "notes": list(start.notes)},
    }
    with h5py.File(path, "w") as handle:
        group = handle.create_group(META_GROUP)
        group.attrs["meta"] = json.dumps(meta)
        group.create_dataset("initial", data=np.asarray(initial, dtype=float))


def read_meta(path, *, model, settings) -> dict:
    """Read a checkpoint's metadata and check that it belongs to this fit.

    Returns
    -------
    dict
        ``start`` (a :class:`massfit.start.Start`), ``initial`` (walkers' starting
        points), ``started_utc`` and ``settings``. The model's angle windows are set
        to the ones the interrupted run used.
    """
    import h5py

    from .start import Start

    path = Path(path)
    if not path.exists():
        raise ConfigError(f"there is nothing to resume: no checkpoint at '{path}'; run "
                          f"without --resume to start the fit", key="--resume")
    try:
        with h5py.File(path, "r") as handle:
            meta = json.loads(handle[META_GROUP].attrs["meta"])
            initial = np.array(handle[META_GROUP]["initial"])
    except (OSError, KeyError, ValueError) as exc:
        raise ConfigError(f"the checkpoint '{path}' cannot be read ({exc}); start the fit "
                          f"again with --force", key="--resume") from None
    if meta.get("format_version") != FORMAT_VERSION:
        raise ConfigError(f"the checkpoint '{path}' was written by another version of "
                          f"massfit; start the fit again with --force", key="--resume")
    if meta["fingerprint"] != fingerprint(model):
        raise ConfigError(f"the checkpoint '{path}' belongs to other data or another "
                          f"model; resume with the same inputs and options, or start "
                          f"again with --force", key="--resume")
    saved = meta["settings"]
    current = asdict(settings)
    for key in _FIXED_SETTINGS:
        if key == "seed" and current[key] is None:
            continue  # no seed given: continue with the interrupted run's own
        if saved[key] != current[key]:
            option = "--" + key.replace("_", "-")
            raise ConfigError(f"the interrupted run used {key} = {saved[key]!r}, not "
                              f"{current[key]!r}; resume with the same value",
                              key=option)
    if initial.shape != (settings.n_walkers(model.n_dim), model.n_dim):
        raise ConfigError(f"the checkpoint '{path}' has walkers of another shape; start "
                          f"again with --force", key="--resume")
    for name, centre in meta["centres"].items():
        model.centres[name] = dict(centre)
    s = meta["start"]
    start = Start(theta=np.array(s["theta"]), chi2=float(s["chi2"]),
                  covariance=np.array(s["covariance"]), modes=list(s["modes"]),
                  per_companion=dict(s["per_companion"]), notes=list(s.get("notes", [])))
    return {"start": start, "initial": initial, "started_utc": meta["started_utc"],
            "settings": saved}


def chain_backend(path, *, flush_seconds=2.0):
    """emcee's HDF5 backend for ``path``, writing in blocks instead of every step.

    emcee's own :class:`~emcee.backends.HDFBackend` opens the file for every step,
    which costs more than a step of a small model. This one keeps the newest steps in
    memory and writes them (chain, log-probabilities, acceptances, then the random
    state and the step count, in that order) when ``flush_seconds`` have passed and
    whenever the chain is read, which :func:`massfit.sample.run_sampler` does at every
    convergence check. A run killed between two writes loses only the steps since the
    last one; the file always holds a consistent chain and the random state after its
    last step.
    """
    import time

    import emcee

    class _BlockHDFBackend(emcee.backends.HDFBackend):
        def __init__(self, filename, name):
            super().__init__(filename, name=name)
            self._buffer = []
            self._last_flush = time.monotonic()

        def save_step(self, state, accepted):
            self._buffer.append((np.array(state.coords), np.array(state.log_prob),
                                 np.array(accepted), state.random_state))
            if time.monotonic() - self._last_flush >= flush_seconds:
                self.flush()

        def flush(self):
            self._last_flush = time.monotonic()
            if not self._buffer:
                return
            with self.open("a") as handle:
                group = handle[self.name]
                first = int(group.attrs["iteration"])
                last = first + len(self._buffer)
                group["chain"][first:last] = np.stack([b[0] for b in self._buffer])
                group["log_prob"][first:last] = np.stack([b[1] for b in self._buffer])
                group["accepted"][:] += np.sum([b[2] for b in self._buffer], axis=0)
                for k, value in enumerate(self._buffer[-1][3]):
                    group.attrs[f"random_state_{k}"] = value
                group.attrs["iteration"] = last
            self._buffer = []

        @property
        def iteration(self):
            return super().iteration + len(self._buffer)

        @property
        def accepted(self):
            self.flush()
            return super().accepted

        @property
        def random_state(self):
            self.flush()
            return super().random_state

        def get_value(self, name, flat=False, thin=1, discard=0):
            self.flush()
            return super().get_value(name, flat=flat, thin=thin, discard=discard)

    return _BlockHDFBackend(str(path), CHAIN_GROUP)

"""Checkpoints of a running fit, so that an interrupted run can be resumed.

A checkpoint lives in the output folder's *partial area* (a hidden folder beside the
output folder, ``.NAME.partial``), which never looks like a result. It holds

- ``checkpoint.json``: what is needed to continue exactly where the run stopped: the
  sampler settings, the starting solution and the angle windows it chose, the walkers'
  starting points, the time the run started, and a fingerprint of the data and the
  model, so that a checkpoint is never continued with other data;
- the chain in blocks (``checkpoint.json.block-<first step>.npz``), each with the
  random state after its last step; or, for the nested engine, each finished run of
  each mode's box (``checkpoint.json.nested-<box>-<run>.npz``): a resumed nested fit
  keeps them and repeats only the run that was cut short (its seed is fixed, so the
  result is the one an uninterrupted run gives).

Every file is written under a temporary name and renamed into place, so a write cut
short (a full disc) never leaves a file that looks whole, and the blocks before it
stay usable. (An HDF5 file written in place is damaged by such a write, and the HDF5
library can crash the process while closing it.)

Resuming therefore repeats no random draw and no search: it continues the same Markov
chain with the same random stream, and the convergence checks (a function of the
stored chain alone) fall at the same steps. The result is the one an uninterrupted run
with the same seed gives.

One run at a time: :func:`exclusive_run` holds a lock file in the partial area
(an advisory ``flock``, which the system releases when the process ends however it
ends; the file names the holder's process id, host and start time), so a second run
into the same output folder is refused while the first is alive, and a lock left by a
killed run is taken over. The partial area and the checkpoint are never a symbolic
link: massfit refuses one rather than write through it. A write that fails (a full
disc) is reported by :class:`WriteError`, which says up to which step the
checkpoint holds the chain.
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import hashlib
import json
import os
import socket
from dataclasses import asdict
from pathlib import Path

import numpy as np

from massfit.errors import ConfigError, WriteError, os_error_text

__all__ = ["partial_dir", "checkpoint_path", "fingerprint", "write_meta", "read_meta",
           "discard", "exclusive_run", "read_blocks", "saved_steps", "write_nested_run",
           "read_nested_runs"]

CHECKPOINT_FILE = "checkpoint.json"
LOCK_FILE = "lock"
#: 2: the chain is stored in the sampler's coordinates (massfit.sample.reparameterisation), which
#: version 1 did not have; a version-1 chain cannot be continued. 3: JSON and blocks
#: written whole, instead of one HDF5 file written in place.
FORMAT_VERSION = 3
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
    """Remove the checkpoint of ``out_dir`` (after the result is safely written).

    The lock of a run in progress stays; the partial area goes when it is empty.
    """
    part = partial_dir(out_dir)
    if part.is_symlink() or not part.is_dir():
        return
    for entry in part.iterdir():
        if entry.name != LOCK_FILE:
            entry.unlink()
    with contextlib.suppress(OSError):
        part.rmdir()  # fails while a lock is held: that run removes it


def _refuse_link(path: Path, what: str):
    if path.is_symlink():
        raise ConfigError(f"'{path}' ({what}) is a symbolic link; massfit never writes "
                          f"through one: remove it and run again", key="--out")
    if path.exists() and not path.is_dir() and what == "the checkpoint's folder":
        raise ConfigError(f"'{path}' ({what}) is a file, not a folder; remove it and run "
                          f"again", key="--out")


def make_partial_dir(out_dir) -> Path:
    """The partial area of ``out_dir``, made if need be; never a symbolic link."""
    part = partial_dir(out_dir)
    _refuse_link(part, "the checkpoint's folder")
    _refuse_link(part / CHECKPOINT_FILE, "the checkpoint")
    part.parent.mkdir(parents=True, exist_ok=True)
    with contextlib.suppress(FileExistsError):
        os.mkdir(part)
    _refuse_link(part, "the checkpoint's folder")  # planted in between
    return part


def _holder_text(lock: Path) -> str:
    try:
        who = json.loads(lock.read_text())
        return (f"process {who['pid']} on host {who['host']}, started "
                f"{who['started_utc']}")
    except (OSError, ValueError, KeyError, TypeError):
        return "a process that left no details"


def _open_lock(lock: Path):
    """Open and lock ``lock``: (fd, the previous holder or None); refuse a live holder."""
    import fcntl

    while True:
        try:
            fd = os.open(lock, os.O_RDWR | os.O_CREAT | os.O_NOFOLLOW, 0o644)
        except OSError as exc:
            raise ConfigError(f"cannot open the lock '{lock}' ({exc.strerror}); it must "
                              f"be a plain file massfit can write", key="--out") from None
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            os.close(fd)
            raise ConfigError(f"'{lock}' is held by another massfit run writing to this "
                              f"output folder ({_holder_text(lock)}); wait until it ends "
                              f"or give another output folder", key="--out") from None
        # The file may have been removed by its holder between open and flock.
        try:
            same = os.stat(lock, follow_symlinks=False).st_ino == os.fstat(fd).st_ino
        except FileNotFoundError:
            same = False
        if same:
            previous = os.read(fd, 4096)
            return fd, (_holder_text(lock) if previous.strip() else None)
        os.close(fd)


@contextlib.contextmanager
def exclusive_run(out_dir, *, notice=None):
    """Hold the lock of ``out_dir``'s partial area while the block runs.

    Parameters
    ----------
    out_dir : path
        The output folder.
    notice : callable, optional
        Called with one line when a lock left by a run that no longer runs is taken
        over.

    Raises
    ------
    ConfigError
        Another run holds the lock, or the partial area is a symbolic link.
    """
    made = []  # folders made for the partial area, deepest first: removed if left empty
    missing = Path(out_dir).parent
    while not missing.exists() and missing != missing.parent:
        made.append(missing)
        missing = missing.parent
    lock = make_partial_dir(out_dir) / LOCK_FILE
    fd, previous = _open_lock(lock)
    try:
        if previous is not None and notice is not None:
            notice(f"took over the lock '{lock}' left by {previous}, which no longer "
                   f"runs")
        me = {"pid": os.getpid(), "host": socket.gethostname(),
              "started_utc": _dt.datetime.now(_dt.timezone.utc).isoformat()}
        os.ftruncate(fd, 0)
        os.pwrite(fd, json.dumps(me).encode(), 0)
        yield lock
    finally:
        with contextlib.suppress(OSError):
            os.unlink(lock)
        os.close(fd)
        with contextlib.suppress(OSError):
            lock.parent.rmdir()  # only when no checkpoint is left in it
            for folder in made:
                folder.rmdir()  # only when neither a result nor anything else is in it


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
            if value is None:  # an optional part the data do not have (e.g. no sight)
                continue
            if name == "time":
                value = value.tdb.jd
            digest.update(np.ascontiguousarray(value).tobytes())
    return digest.hexdigest()


def _write_atomically(path: Path, write) -> None:
    """Write a file under a temporary name and rename it into place.

    A write cut short (a full disc) leaves only the temporary file, which is removed:
    ``path`` is either the old file or the whole new one. Neither name is followed if
    it is a symbolic link.
    """
    tmp = path.with_name(f".{path.name}.tmp")
    try:
        fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_TRUNC | os.O_NOFOLLOW, 0o644)
        with os.fdopen(fd, "wb") as handle:
            write(handle)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise


def _block_files(path: Path) -> list:
    return sorted(path.parent.glob(f"{path.name}.block-*.npz"))


def _nested_files(path: Path) -> list:
    return sorted(path.parent.glob(f"{path.name}.nested-*.npz"))


def write_nested_run(path, box: int, run: int, record: dict) -> None:
    """Save one finished nested run (:func:`massfit.sample.nested.nested_box`'s dict)
    beside checkpoint ``path``."""
    path = Path(path)
    arrays = {k: np.asarray(v) for k, v in record.items() if isinstance(v, np.ndarray)}
    facts = {k: v for k, v in record.items() if k not in arrays}
    target = path.parent / f"{path.name}.nested-{box}-{run}.npz"
    try:
        _write_atomically(target, lambda h: np.savez(
            h, facts=np.array(json.dumps(facts)), **arrays))
    except OSError as exc:
        raise write_failure(path, exc) from None


def read_nested_runs(path) -> dict:
    """(box, run) -> the nested runs saved beside checkpoint ``path`` (none: {})."""
    path = Path(path)
    out = {}
    for file in _nested_files(path):
        box, run = (int(x) for x in file.name.rsplit(".", 1)[0].split("nested-")[1]
                    .split("-"))
        with np.load(file, allow_pickle=False) as data:
            record = json.loads(str(data["facts"]))
            record.update({k: np.array(data[k]) for k in data.files if k != "facts"})
        out[(box, run)] = record
    return out


def write_meta(path, *, model, start, initial, settings, started_utc) -> None:
    """Start a checkpoint with everything needed to resume (not yet the chain).

    Blocks of an earlier run with the same checkpoint path are removed.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    _refuse_link(path, "the checkpoint")
    meta = {
        "format_version": FORMAT_VERSION,
        "fingerprint": fingerprint(model),
        "settings": {k: v for k, v in asdict(settings).items() if k != "progress"},
        "started_utc": started_utc,
        "centres": model.centres,
        "start": {"theta": start.theta.tolist(), "chi2": start.chi2,
                  "covariance": np.asarray(start.covariance).tolist(),
                  "modes": start.modes, "per_companion": start.per_companion,
                  "candidate_modes": start.candidate_modes, "notes": list(start.notes)},
        # Floats survive JSON exactly (shortest round-trip repr).
        "initial": np.asarray(initial, dtype=float).tolist(),
    }
    for block in _block_files(path) + _nested_files(path):
        block.unlink()
    try:
        _write_atomically(path, lambda h: h.write(json.dumps(meta).encode()))
    except OSError as exc:
        raise write_failure(path, exc) from None


def read_meta(path, *, model, settings) -> dict:
    """Read a checkpoint's metadata and check that it belongs to this fit.

    Returns
    -------
    dict
        ``start`` (a :class:`massfit.start.search.Start`), ``initial`` (walkers' starting
        points), ``started_utc`` and ``settings``. The model's angle windows are set
        to the ones the interrupted run used.
    """
    from massfit.start.result import Start

    path = Path(path)
    if not path.exists():
        raise ConfigError(f"there is nothing to resume: no checkpoint at '{path}'; run "
                          f"without --resume to start the fit", key="--resume")
    _refuse_link(path, "the checkpoint")
    try:
        meta = json.loads(path.read_text())
        initial = np.array(meta["initial"], dtype=float)
    except (OSError, KeyError, ValueError, TypeError) as exc:
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
                  per_companion=dict(s["per_companion"]),
                  candidate_modes=list(s.get("candidate_modes", [])),
                  notes=list(s.get("notes", [])))
    return {"start": start, "initial": initial, "started_utc": meta["started_utc"],
            "settings": saved}


def read_blocks(path) -> dict | None:
    """The chain saved beside checkpoint ``path``: its complete blocks, in order.

    Returns
    -------
    dict or None
        ``chain`` (steps, walkers, dim), ``log_prob`` (steps, walkers), ``accepted``
        (per walker) and ``random_state`` (numpy's, after the last step); None when
        no block is saved. Reading stops at the first block that does not follow on.
    """
    import zipfile

    parts, steps = [], 0
    for block in _block_files(Path(path)):
        try:
            with np.load(block, allow_pickle=False) as data:
                part = {key: data[key] for key in data.files}
        except (OSError, ValueError, KeyError, zipfile.BadZipFile):
            break
        if int(part["first"]) != steps:
            break
        parts.append(part)
        steps += len(part["chain"])
    if not parts:
        return None
    last = parts[-1]
    return {"chain": np.concatenate([p["chain"] for p in parts]),
            "log_prob": np.concatenate([p["log_prob"] for p in parts]),
            "accepted": np.sum([p["accepted"] for p in parts], axis=0),
            "random_state": ("MT19937", last["state_key"], int(last["state_pos"]),
                             int(last["state_has_gauss"]), float(last["state_gauss"]))}


def saved_steps(path) -> int:
    """How many steps of the chain checkpoint ``path`` holds."""
    blocks = read_blocks(path)
    return 0 if blocks is None else len(blocks["chain"])


def chain_backend(path, *, flush_seconds=2.0):
    """emcee's in-memory backend, which also saves its steps in blocks beside ``path``.

    Each block (the steps since the last one, and the random state after them) is a
    file of its own, written under a temporary name and renamed, when
    ``flush_seconds`` have passed and whenever the chain is read, which
    :func:`massfit.sample.chain.run_sampler` does at every convergence check. A run killed
    or stopped by a full disc loses only the steps since the last block; the blocks
    on disc are always whole. Blocks saved by an interrupted run are loaded, so that
    the sampler continues after them.
    """
    import time

    import emcee

    class _BlockBackend(emcee.backends.Backend):
        def __init__(self, path):
            super().__init__()
            self._path = Path(path)
            self._buffer = []
            self._last_flush = time.monotonic()
            self._failed = None
            self._saved = 0
            saved = read_blocks(self._path)
            if saved is not None:
                emcee.backends.Backend.reset(self, *saved["chain"].shape[1:])
                emcee.backends.Backend.grow(self, len(saved["chain"]), None)
                self.chain[:] = saved["chain"]
                self.log_prob[:] = saved["log_prob"]
                self.accepted = saved["accepted"].astype(self.dtype)
                self.random_state = saved["random_state"]
                self.iteration = self._saved = len(saved["chain"])

        def reset(self, nwalkers, ndim):
            super().reset(nwalkers, ndim)
            for block in _block_files(self._path):
                block.unlink()
            self._buffer, self._saved = [], 0

        def save_step(self, state, accepted):
            super().save_step(state, accepted)
            self._buffer.append(np.array(accepted, dtype=int))
            if time.monotonic() - self._last_flush >= flush_seconds:
                self.flush()

        def stored_block(self, accepted):
            # massfit.sample.steps.save_block stored a block of steps at once
            self._buffer.append(np.array(accepted, dtype=int))
            if time.monotonic() - self._last_flush >= flush_seconds:
                self.flush()

        def flush(self):
            self._last_flush = time.monotonic()
            if self._failed is not None:
                raise self._failed  # stop at once: the run cannot be kept
            if not self._buffer:
                return
            first, last = self._saved, self.iteration  # the steps since the last block
            key, pos, has_gauss, gauss = self.random_state[1:]
            block = {"first": first, "chain": self.chain[first:last],
                     "log_prob": self.log_prob[first:last],
                     "accepted": np.sum(self._buffer, axis=0), "state_key": key,
                     "state_pos": pos, "state_has_gauss": has_gauss, "state_gauss": gauss}
            name = self._path.with_name(f"{self._path.name}.block-{first:010d}.npz")
            try:
                _write_atomically(name, lambda handle: np.savez(handle, **block))
            except OSError as exc:
                self._failed = write_failure(self._path, exc)
                raise self._failed from None
            self._buffer, self._saved = [], last

        def get_value(self, name, flat=False, thin=1, discard=0):
            self.flush()
            return super().get_value(name, flat=flat, thin=thin, discard=discard)

    return _BlockBackend(path)


def write_failure(path: Path, exc: OSError) -> WriteError:
    """The one-line error of a failed checkpoint write, saying what ``--resume`` can do."""
    reason = os_error_text(exc)
    if not path.exists():
        return WriteError(
            f"cannot write the checkpoint '{path}': {reason}; nothing of this run could "
            f"be kept: make room, then run the same command again")
    return WriteError(
        f"cannot write the checkpoint '{path}': {reason}; it holds the chain up to step "
        f"{saved_steps(path)}: make room, then run the same command with --resume to "
        f"continue from there")

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

One run at a time: :func:`exclusive_run` holds a lock file in the partial area
(an advisory ``flock``, which the system releases when the process ends however it
ends; the file names the holder's process id, host and start time), so a second run
into the same output folder is refused while the first is alive, and a lock left by a
killed run is taken over. The partial area and the checkpoint are never a symbolic
link: massfit refuses one rather than write through it. A write that fails (a full
disc) is reported by :class:`WriteError`; the checkpoint then still holds
the chain up to its last complete block.
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import errno
import hashlib
import json
import os
import socket
from dataclasses import asdict
from pathlib import Path

import numpy as np

from .errors import ConfigError, WriteError, os_error_text

__all__ = ["partial_dir", "checkpoint_path", "fingerprint", "write_meta", "read_meta",
           "discard", "exclusive_run", "ensure_room"]

CHECKPOINT_FILE = "checkpoint.h5"
LOCK_FILE = "lock"
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
    """Open and lock ``lock``; returns (fd, previous holder or None); refuses a live holder."""
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
    _refuse_link(path, "the checkpoint")
    meta = {
        "format_version": FORMAT_VERSION,
        "fingerprint": fingerprint(model),
        "settings": {k: v for k, v in asdict(settings).items() if k != "progress"},
        "started_utc": started_utc,
        "centres": model.centres,
        "start": {"theta": start.theta.tolist(), "chi2": start.chi2,
                  "covariance": np.asarray(start.covariance).tolist(),
                  "modes": start.modes, "per_companion": start.per_companion},
    }
    initial = np.asarray(initial, dtype=float)
    try:
        ensure_room(path, initial.nbytes)
        with h5py.File(path, "w") as handle:
            group = handle.create_group(META_GROUP)
            group.attrs["meta"] = json.dumps(meta)
            group.create_dataset("initial", data=initial)
    except OSError as exc:
        raise write_failure(path, exc) from None


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
                  per_companion=dict(s["per_companion"]))
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
            self._failed = None

        def save_step(self, state, accepted):
            self._buffer.append((np.array(state.coords), np.array(state.log_prob),
                                 np.array(accepted), state.random_state))
            if time.monotonic() - self._last_flush >= flush_seconds:
                self.flush()

        def _write(self, action, n_bytes):
            """Run a write of the file, or stop the run with one line if it cannot be made."""
            if self._failed is not None:
                raise self._failed  # the file is not touched again after a failed write
            try:
                ensure_room(self.filename, n_bytes)
                action()
            except OSError as exc:
                self._failed = write_failure(Path(self.filename), exc)
                raise self._failed from None
            except WriteError as exc:
                self._failed = exc
                raise

        def reset(self, nwalkers, ndim):
            self._write(lambda: emcee.backends.HDFBackend.reset(self, nwalkers, ndim), 0)

        def grow(self, ngrow, blobs):
            self._write(lambda: emcee.backends.HDFBackend.grow(self, ngrow, blobs), 0)

        def flush(self):
            self._last_flush = time.monotonic()
            if not self._buffer:
                return
            n_bytes = sum(b[0].nbytes + b[1].nbytes for b in self._buffer)
            self._write(self._write_buffer, n_bytes)
            self._buffer = []

        def _write_buffer(self):
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


#: Free space kept in hand beyond twice the bytes of a write (HDF5's own metadata).
SPARE_BYTES = 1 << 20


def ensure_room(path, n_bytes) -> None:
    """Refuse a checkpoint write that the disc has no room for, before it starts.

    A write that runs out of space part-way leaves an HDF5 file that cannot be read
    back, so the room for twice the data and :data:`SPARE_BYTES` is checked first.
    """
    folder = os.path.dirname(os.path.abspath(path))
    stats = os.statvfs(folder)
    free = stats.f_bavail * stats.f_frsize
    if free < 2 * n_bytes + SPARE_BYTES:
        raise write_failure(Path(path), OSError(errno.ENOSPC, "no room"))


def _last_complete_step(path: Path):
    """The steps a checkpoint holds, or None if it cannot be read back."""
    import h5py

    try:
        with h5py.File(path, "r") as handle:
            json.loads(handle[META_GROUP].attrs["meta"])
            return int(handle[CHAIN_GROUP].attrs["iteration"]) if CHAIN_GROUP in handle else 0
    except (OSError, KeyError, ValueError):
        return None


def write_failure(path: Path, exc: OSError) -> WriteError:
    """The one-line error of a checkpoint write that failed, saying what ``--resume`` can do.

    A checkpoint the failed write left unreadable is renamed ``*.damaged``, so that it
    is never mistaken for a complete one.
    """
    reason = os_error_text(exc)
    steps = _last_complete_step(path) if path.exists() else None
    if steps is not None:
        return WriteError(
            f"cannot write the checkpoint '{path}': {reason}; it holds the chain up to "
            f"step {steps}: make room, then run the same command with --resume to "
            f"continue from there")
    if path.exists():
        with contextlib.suppress(OSError):
            os.replace(path, path.with_name(path.name + ".damaged"))
    return WriteError(
        f"cannot write the checkpoint '{path}': {reason}; nothing of this run could be "
        f"kept: make room, then run the same command again with --force")

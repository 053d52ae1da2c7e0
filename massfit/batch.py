"""Many systems, one command: fit each on its own and gather one results table.

A batch is a list of systems, from either

* a folder of TOML configs (one system per file, named by the file's stem), or
* one table (CSV or ECSV) with a row per system: ``system`` (a name), ``files``
  (observation files separated by ``;``, relative to the table) and, optionally,
  ``config`` (a TOML whose priors and reading options apply), ``parallax``,
  ``parallax_err``, ``distance`` (``"48.2 mas"``, ``"20.7 pc"``) and ``seed``.

Each system is fitted by :func:`massfit.fit` in a worker, and its output folder written
to ``OUT/systems/<system>/``. The worker catches every error of its own system, so one
bad system never stops the batch: its row says why it failed. ``OUT/results.ecsv`` is
rewritten after every finished system; a rerun reads the systems that already have a
``summary.json`` instead of fitting them again.

Workers are local processes by default. Given the address of a running
``dask.distributed`` scheduler, the same tasks go to that cluster instead; the
workers there need massfit installed and the input files on a path they can read.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import os
import signal
import sys
import threading
import time
import zlib
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from massfit.config.fit import real_path
from massfit.errors import ConfigError, MassfitError
from massfit.write.batch_table import (NOT_RUN, RESULTS_FILE, failed_row, not_run_row,
                                       result_row, write_results_table)

__all__ = ["BatchJob", "collect_jobs", "fit_job", "run_batch", "folder_name",
           "job_fingerprint", "result_row", "failed_row", "not_run_row", "RESULTS_FILE",
           "NOT_RUN"]

SYSTEMS_DIR = "systems"
_TABLE_OPTIONAL = ("config", "parallax", "parallax_err", "distance", "seed")


@dataclass
class BatchJob:
    """One system of a batch: everything a worker needs, as plain picklable values.

    Attributes
    ----------
    system : str
        Name of the system (its row in the results and its output folder).
    output : str
        Output folder of this system.
    config : str or None
        A TOML config to fit.
    files : list of str
        Observation files (used where there is no config, or to replace its files).
    distance : dict
        ``parallax``, ``parallax_err`` or ``distance`` strings, where given.
    sampler : dict
        Overrides of the sampler settings (``seed``, ``max_steps``, ``walkers``, ...).
    plots : bool
        Write the figures too.
    """

    system: str
    output: str
    config: str | None = None
    files: list = field(default_factory=list)
    distance: dict = field(default_factory=dict)
    sampler: dict = field(default_factory=dict)
    plots: bool = False


# ------------------------------------------------------------------ the batch list
def collect_jobs(source, out_dir, *, seed=None, sampler=None, plots=False) -> list:
    """The systems of a batch, from a folder of configs or a table of systems.

    Parameters
    ----------
    source : path
        A folder holding ``*.toml`` configs, or a CSV/ECSV table of systems.
    out_dir : path
        The batch's output folder.
    seed : int, optional
        Base seed: a system whose config states no seed gets one derived from this
        and its name (so each system's numbers do not depend on the others).
    sampler : dict, optional
        Sampler overrides for every system (``max_steps``, ``walkers``, ...).
    plots : bool
        Write each system's figures.

    Returns
    -------
    list of BatchJob
    """
    from massfit.sample.chain import check_seed

    check_seed(seed, key="--seed")
    source = Path(source)
    systems_dir = real_path(out_dir) / SYSTEMS_DIR
    if source.is_dir():
        entries = _from_folder(source)
    elif source.is_file():
        entries = _from_table(source)
    else:
        raise ConfigError("no such folder or table of systems", key=str(source))
    jobs, seen = [], set()
    for entry in entries:
        name = entry["system"]
        if name in seen:
            raise ConfigError(f"the system name '{name}' appears twice; names must be "
                              f"unique (they name the output folders)", key=str(source))
        seen.add(name)
        overrides = dict(sampler or {})
        if entry.get("seed") is not None:
            overrides["seed"] = int(entry["seed"])
        elif seed is not None and not _config_has_seed(entry.get("config"),
                                                       entry.get("files")):
            overrides["seed"] = system_seed(seed, name)
        jobs.append(BatchJob(system=name, output=str(systems_dir / folder_name(name)),
                             config=entry.get("config"), files=entry.get("files", []),
                             distance=entry.get("distance", {}), sampler=overrides,
                             plots=plots))
    if not jobs:
        raise ConfigError("the batch lists no systems (a folder needs *.toml configs, a "
                          "table needs rows)", key=str(source))
    _refuse_shared_folders(jobs, source)
    return jobs


def system_seed(seed: int, name: str) -> int:
    """A seed for one system, from the batch seed and the system's name."""
    state = np.random.SeedSequence([int(seed), zlib.crc32(name.encode("utf-8"))])
    return int(state.generate_state(1)[0])


def _config_has_seed(config, files=None):
    if config is None:
        return False
    from massfit.config.fit import load_config

    try:
        return load_config(config, files=files or None).sampler.seed is not None
    except MassfitError:
        return False  # the system fails on its own, with this reason, when it is fitted


def folder_name(name: str) -> str:
    """The system's folder name: the name itself where it is safe, else a safe slug
    with a short hash of the full name (so ``a/b`` and ``a_b`` never share a folder)."""
    safe = "".join(c if c.isalnum() or c in "-_.+" else "_" for c in name).strip(".")
    if safe == name:
        return name
    digest = hashlib.sha256(name.encode("utf-8")).hexdigest()[:10]
    return f"{safe or 'system'}-{digest}"


def _refuse_shared_folders(jobs, source):
    # Case-insensitive file systems would still put "Wren" and "wren" in one folder.
    seen = {}
    for job in jobs:
        folder = Path(job.output).name.casefold()
        if folder in seen:
            raise ConfigError(f"systems '{seen[folder]}' and '{job.system}' would share "
                              f"the output folder '{Path(job.output).name}' (names that "
                              f"differ only in case); rename one", key=str(source))
        seen[folder] = job.system


def _from_folder(folder):
    configs = sorted(folder.glob("*.toml"))
    return [{"system": path.stem, "config": str(real_path(path))} for path in configs]


def _from_table(path):
    from astropy.table import Table

    from massfit.sample.chain import check_seed

    fmt = "ascii.ecsv" if path.suffix.lower() == ".ecsv" else "ascii.csv"
    try:
        table = Table.read(path, format=fmt)
    except Exception as exc:  # astropy raises many kinds for a malformed table
        raise ConfigError(f"cannot read the table of systems ({exc})", key=str(path)) from None
    for column in ("system", "files"):
        if column not in table.colnames:
            raise ConfigError(f"the table of systems needs a '{column}' column (columns: "
                              f"system, files, and optionally "
                              f"{', '.join(_TABLE_OPTIONAL)})", key=str(path))
    unknown = set(table.colnames) - {"system", "files", *_TABLE_OPTIONAL}
    if unknown:
        raise ConfigError(f"unknown column(s) {sorted(unknown)} in the table of systems; "
                          f"accepted: system, files, {', '.join(_TABLE_OPTIONAL)}",
                          key=str(path))
    base = real_path(path.parent)
    entries = []
    for k, row in enumerate(table):
        where = f"{path}, row {k + 1}"
        name = _cell(row, "system")
        files = [str(real_path(base / part.strip()))
                 for part in (_cell(row, "files") or "").split(";") if part.strip()]
        if not name:
            raise ConfigError("a system needs a name", key=where)
        config = _cell(row, "config")
        if not files and not config:
            raise ConfigError(f"system '{name}' lists no files and no config", key=where)
        entry = {"system": name, "files": files,
                 "config": str(real_path(base / config)) if config else None,
                 "distance": {key: _cell(row, key) for key in
                              ("parallax", "parallax_err", "distance") if _cell(row, key)}}
        seed = _cell(row, "seed")
        if seed:
            try:
                entry["seed"] = int(seed)
            except ValueError:
                entry["seed"] = seed
            check_seed(entry["seed"], key=f"{where}, column 'seed'")
        entries.append(entry)
    return entries


def _cell(row, column):
    if column not in row.colnames:
        return None
    value = row[column]
    if np.ma.is_masked(value):
        return None
    text = str(value).strip()
    return text or None


# ------------------------------------------------------------------- one system
def fit_job(job: BatchJob) -> dict:
    """Fit one system and write its output folder; never raises for the system's own errors.

    Returns
    -------
    dict
        The system's row of the results table (see :func:`result_row`).
    """
    started = time.perf_counter()
    try:
        summary, seed = _fit_and_save(job)
    except MassfitError as exc:
        return failed_row(job, str(exc), time.perf_counter() - started,
                          seed=_stated_seed(job))
    except Exception as exc:  # any other failure belongs to this system alone
        return failed_row(job, f"{type(exc).__name__}: {exc}", time.perf_counter() - started,
                          seed=_stated_seed(job))
    return result_row(job, summary, time.perf_counter() - started, seed=seed)


def _stated_seed(job):
    """The seed a failed system's config states (None where it states none or is unreadable)."""
    if job.config is None:
        return None
    from massfit.config.fit import load_config

    try:
        return load_config(job.config, files=job.files or None).sampler.seed
    except MassfitError:
        return None


def _fit_and_save(job):
    from dataclasses import replace

    from massfit.config.fit import FitSetup, load_config
    from massfit.read.tables import read_observations
    from massfit.run import distance_prior, fit
    from massfit.write.run_record import run_record

    if job.config is not None:
        # The table's files replace the config's, which it then need not list.
        setup = load_config(job.config, files=job.files or None)
    else:
        setup = FitSetup(files=[Path(f) for f in job.files])
    observations = read_observations(setup.files, **setup.read_options)
    system = setup.system
    plx = distance_prior(job.distance.get("parallax"), job.distance.get("parallax_err"),
                         job.distance.get("distance"), key_prefix=f"{job.system}: ")
    if plx is not None:
        system = replace(system, parallax=plx)
    sampler = replace(setup.sampler, progress=False, **job.sampler)
    record = run_record(argv=["massfit batch", job.system], config=setup.source,
                        files=setup.files)
    record["batch_job"] = job_fingerprint(job)
    result = fit(observations, system, sampler=sampler, record=record)
    result.save(job.output, plots=job.plots and setup.plots, force=True)
    return result.summary, result.record["seed"]


def job_fingerprint(job: BatchJob) -> dict:
    """What decides a system's result: its settings and the bytes of every input.

    Stored in the system's run.json (``batch_job``); a rerun reuses a result only where
    the stored fingerprint equals the job's (a changed seed, option, config or data
    file is fitted again).
    """
    from massfit.config.fit import load_config
    from massfit.write.run_record import sha256

    files = list(job.files)
    if job.config is not None and not files:
        try:
            files = [str(path) for path in load_config(job.config).files]
        except MassfitError:
            files = []  # the fit fails on its own and says why
    hashes = {}
    for path in ([job.config] if job.config else []) + files:
        try:
            hashes[str(path)] = sha256(path)
        except OSError:
            hashes[str(path)] = None
    fingerprint = {"system": job.system, "config": job.config, "files": files,
                   "sha256": hashes, "distance": job.distance, "sampler": job.sampler,
                   "plots": job.plots}
    return json.loads(json.dumps(fingerprint))  # as it reads back from run.json


def _finished_row(job):
    folder = Path(job.output)
    if not (folder / "summary.json").is_file():
        return None
    try:
        summary = json.loads((folder / "summary.json").read_text())
        record = json.loads((folder / "run.json").read_text())
        if record.get("batch_job") != job_fingerprint(job):
            return None  # another seed, option or input: fit it again
        row = result_row(job, summary, 0.0, seed=record["seed"])
    except (OSError, ValueError, KeyError, TypeError, AttributeError):
        return None  # unreadable: fit it again
    row["seconds"] = float(summary["diagnostics"].get("sampling_seconds", 0.0))
    return row


# ------------------------------------------------------------------ the batch run
def run_batch(jobs, out_dir, *, workers=None, scheduler=None, progress=None,
              rerun=False):
    """Fit every job and write ``out_dir/results.ecsv``.

    Parameters
    ----------
    jobs : list of BatchJob
        From :func:`collect_jobs`.
    out_dir : path
        Output folder of the batch.
    workers : int, optional
        Local worker processes (default: the number of CPUs). Ignored with
        ``scheduler``.
    scheduler : str or distributed.Client, optional
        Address of a running dask.distributed scheduler (``tcp://host:8786``), or a
        connected Client, to run the fits on that cluster.
    progress : bool or None
        Progress bar; None shows it only on a terminal.
    rerun : bool
        Fit again the systems that already have a result (otherwise they are read back).

    Returns
    -------
    astropy.table.Table
        The results table, one row per job in the batch's order.
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    rows = {}
    todo = []
    for job in jobs:
        row = None if rerun else _finished_row(job)
        if row is None:
            todo.append(job)
        else:
            rows[job.system] = row
    show = progress if progress is not None else sys.stderr.isatty()
    bar = _bar(show, len(jobs), len(rows))
    try:
        for job, row in _execute(todo, workers, scheduler):
            rows[job.system] = row
            write_results_table(out, jobs, rows)
            if bar is not None:
                bar.update(1)
                failed = sum(r["status"] == "failed" for r in rows.values())
                bar.set_postfix_str(f"{failed} failed" if failed else "")
    except KeyboardInterrupt:
        # The systems done so far keep their rows; the others are listed as not run
        # (a rerun fits them), and the caller hears of the interruption.
        for job in jobs:
            rows.setdefault(job.system, not_run_row(job))
        write_results_table(out, jobs, rows)
        raise
    finally:
        if bar is not None:
            bar.close()
    return write_results_table(out, jobs, rows)


def _execute(jobs, workers, scheduler):
    """(job, row) pairs as the fits finish, on a local pool or a Dask cluster."""
    if not jobs:
        return
    if scheduler is not None:
        yield from _execute_dask(jobs, scheduler)
        return
    n = workers if workers is not None else (os.cpu_count() or 1)
    if not isinstance(n, int) or n < 1:
        raise ConfigError("the number of workers must be a whole number of at least 1",
                          key="--workers")
    import multiprocessing

    context = multiprocessing.get_context("spawn")
    stop = context.Event()
    # One thread per worker process: the workers are the parallelism, and threaded
    # BLAS inside each would only fight over the same cores. The compiled kernel gets
    # the threads a job asks for (``--threads``), else one.
    asked = max((job.sampler.get("threads") or 1 for job in jobs), default=1)
    with _single_threaded_children(numba_threads=asked):
        pool = ProcessPoolExecutor(max_workers=min(n, len(jobs)), mp_context=context,
                                   initializer=_worker_setup, initargs=(os.getpid(), stop))
    finished, workers = False, set()
    others = set(multiprocessing.active_children())
    try:
        with _sigint_held():  # the workers start here, and inherit the holding
            futures = {pool.submit(fit_job, job): job for job in jobs}
            workers = set(multiprocessing.active_children()) - others
        for future in as_completed(futures):
            job = futures[future]
            yield job, _outcome(job, future)
        finished = True
    finally:
        if not finished:  # interrupted (or the caller stopped): end the running fits now
            stop.set()
            for process in workers:
                process.terminate()
        pool.shutdown(wait=True, cancel_futures=not finished)


@contextlib.contextmanager
def _sigint_held():
    """Hold Ctrl-C back while worker processes start.

    A process started now inherits the held (blocked) signal from its first line, so a
    Ctrl-C never lands in a worker's imports; its setup ignores the signal and lets it
    through (:func:`_worker_setup`); the batch is told through ``stop``. The batch
    itself gets a Ctrl-C that came meanwhile as soon as the workers have started (a
    blocked signal waits; an ignored one, as this once was, is lost: a Ctrl-C pressed
    just then left the batch running). Where signals cannot be blocked (Windows), they
    are ignored meanwhile instead."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    if hasattr(signal, "pthread_sigmask"):
        signal.pthread_sigmask(signal.SIG_BLOCK, {signal.SIGINT})
        try:
            yield
        finally:
            signal.pthread_sigmask(signal.SIG_UNBLOCK, {signal.SIGINT})
        return
    previous = signal.signal(signal.SIGINT, signal.SIG_IGN)
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous)


def _worker_setup(parent: int, stop) -> None:
    """In each worker: leave Ctrl-C to the batch, and die with it.

    The batch sets ``stop`` when interrupted; a batch killed outright cannot, so the
    worker also leaves as soon as its parent process is gone.
    """
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    if hasattr(signal, "pthread_sigmask"):  # held while the batch started it
        signal.pthread_sigmask(signal.SIG_UNBLOCK, {signal.SIGINT})

    def watch():
        while not stop.wait(0.2):
            if os.getppid() != parent:
                break
        os._exit(1)

    threading.Thread(target=watch, name="massfit-batch-watch", daemon=True).start()


def _execute_dask(jobs, scheduler):
    try:
        from distributed import Client, as_completed as dask_completed
    except ImportError:
        raise ConfigError("--scheduler needs dask.distributed: pip install "
                          "'massfit[batch]'", key="--scheduler") from None
    own = not isinstance(scheduler, Client)
    try:
        client = Client(scheduler, set_as_default=False) if own else scheduler
    except (OSError, ValueError, TimeoutError) as exc:
        raise ConfigError(f"cannot reach the scheduler at '{scheduler}' ({exc})",
                          key="--scheduler") from None
    try:
        futures = {}
        for job in jobs:
            future = client.submit(fit_job, job, pure=False,
                                   key=f"massfit-{job.system}-{os.urandom(4).hex()}")
            futures[future] = job
        for future in dask_completed(list(futures), loop=client.loop):
            job = futures[future]
            yield job, _outcome(job, future)
    finally:
        client.cancel([future for future in futures if not future.done()])
        if own:
            client.close()


def _outcome(job, future):
    # fit_job catches the system's own errors; what is left is the worker itself
    # dying (killed, out of memory) and is still that system's failure alone.
    try:
        return future.result()
    except Exception as exc:
        return failed_row(job, f"worker lost: {type(exc).__name__}: {exc}", 0.0)


class _single_threaded_children:
    _KEYS = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS",
             "NUMBA_NUM_THREADS")

    def __init__(self, numba_threads=1):
        self._numba_threads = int(numba_threads)

    def __enter__(self):
        self._saved = {k: os.environ.get(k) for k in self._KEYS}
        for key in self._KEYS:
            os.environ.setdefault(key, str(self._numba_threads) if key.startswith("NUMBA")
                                  else "1")
        return self

    def __exit__(self, *exc):
        for key, value in self._saved.items():
            if value is None:
                os.environ.pop(key, None)
            else:
                os.environ[key] = value
        return False


def _bar(show, total, done):
    if not show:
        return None
    from tqdm.auto import tqdm

    # Plain words: systems done of all, and the time left at the average pace so far
    # (systems read back from an earlier run do not count towards the pace).
    return tqdm(total=total, initial=done, desc="systems", unit="system", file=sys.stderr,
                smoothing=0, bar_format="{desc}: {n} of {total} done |{bar}| {elapsed} "
                                        "so far, about {remaining} left{postfix}")

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

import json
import os
import sys
import time
import zlib
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .config import real_path
from .errors import ConfigError, MassfitError

__all__ = ["BatchJob", "collect_jobs", "fit_job", "run_batch", "RESULTS_FILE"]

RESULTS_FILE = "results.ecsv"
SYSTEMS_DIR = "systems"
_TABLE_OPTIONAL = ("config", "parallax", "parallax_err", "distance", "seed")
_INTERVAL_KEYS = ("median", "lower_68", "upper_68", "lower_95", "upper_95")


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
    from .sample import check_seed

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
        elif seed is not None and not _config_has_seed(entry.get("config")):
            overrides["seed"] = system_seed(seed, name)
        jobs.append(BatchJob(system=name, output=str(systems_dir / _folder_name(name)),
                             config=entry.get("config"), files=entry.get("files", []),
                             distance=entry.get("distance", {}), sampler=overrides,
                             plots=plots))
    if not jobs:
        raise ConfigError("the batch lists no systems (a folder needs *.toml configs, a "
                          "table needs rows)", key=str(source))
    return jobs


def system_seed(seed: int, name: str) -> int:
    """A seed for one system, from the batch seed and the system's name."""
    state = np.random.SeedSequence([int(seed), zlib.crc32(name.encode("utf-8"))])
    return int(state.generate_state(1)[0])


def _config_has_seed(config):
    if config is None:
        return False
    from .config import load_config

    try:
        return load_config(config).sampler.seed is not None
    except MassfitError:
        return False  # the system fails on its own, with this reason, when it is fitted


def _folder_name(name):
    safe = "".join(c if c.isalnum() or c in "-_.+" else "_" for c in name).strip(".")
    return safe or "system"


def _from_folder(folder):
    configs = sorted(folder.glob("*.toml"))
    return [{"system": path.stem, "config": str(real_path(path))} for path in configs]


def _from_table(path):
    from astropy.table import Table

    from .sample import check_seed

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
        summary = _fit_and_save(job)
    except MassfitError as exc:
        return failed_row(job, str(exc), time.perf_counter() - started)
    except Exception as exc:  # any other failure belongs to this system alone
        return failed_row(job, f"{type(exc).__name__}: {exc}", time.perf_counter() - started)
    return result_row(job, summary, time.perf_counter() - started)


def _fit_and_save(job):
    from dataclasses import replace

    from .config import FitSetup, load_config
    from .read import read_observations
    from .run import distance_prior, fit
    from .runrecord import run_record

    if job.config is not None:
        setup = load_config(job.config)
        if job.files:
            setup.files = [Path(f) for f in job.files]
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
    result = fit(observations, system, sampler=sampler, record=record)
    result.save(job.output, plots=job.plots and setup.plots, force=True)
    return result.summary


def _row_base(job, seconds):
    return {"system": job.system, "status": "failed", "converged": False,
            "failure": "", "seed": job.sampler.get("seed", -1), "seconds": float(seconds),
            "output": job.output}


def result_row(job: BatchJob, summary: dict, seconds: float) -> dict:
    """The results-table row of a finished system, from its summary."""
    row = _row_base(job, seconds)
    row["status"] = "converged" if summary["converged"] else "not converged"
    row["converged"] = bool(summary["converged"])
    for prefix, key in (("mass", "central_mass"), ("mass_msun", "central_mass_solar"),
                        ("gm", "central_gm")):
        block = summary[key]  # None where velocities alone leave the mass open
        for part in _INTERVAL_KEYS:
            value = None if block is None else block[part]
            row[f"{prefix}_{part}"] = np.nan if value is None else float(value)
    diag = summary["diagnostics"]
    row["steps"] = int(diag["steps"])
    row["max_autocorr_steps"] = float(diag["max_autocorr_steps"])
    row["effective_samples"] = float(diag["effective_samples"])
    return row


def failed_row(job: BatchJob, reason: str, seconds: float) -> dict:
    """The results-table row of a system that could not be fitted."""
    row = _row_base(job, seconds)
    row["failure"] = " ".join(reason.split()) or "unknown failure"
    return row


def _finished_row(job):
    path = Path(job.output) / "summary.json"
    if not path.is_file():
        return None
    try:
        summary = json.loads(path.read_text())
        row = result_row(job, summary, 0.0)
    except (OSError, ValueError, KeyError, TypeError):
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
            _write_table(out, jobs, rows)
            if bar is not None:
                bar.update(1)
                failed = sum(r["status"] == "failed" for r in rows.values())
                bar.set_postfix_str(f"{failed} failed" if failed else "")
    finally:
        if bar is not None:
            bar.close()
    return _write_table(out, jobs, rows)


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

    # One thread per worker process: the workers are the parallelism, and threaded
    # BLAS inside each would only fight over the same cores.
    with _single_threaded_children():
        pool = ProcessPoolExecutor(max_workers=min(n, len(jobs)),
                                   mp_context=multiprocessing.get_context("spawn"))
    with pool:
        futures = {pool.submit(fit_job, job): job for job in jobs}
        for future in as_completed(futures):
            job = futures[future]
            yield job, _outcome(job, future)


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

    def __enter__(self):
        self._saved = {k: os.environ.get(k) for k in self._KEYS}
        for key in self._KEYS:
            os.environ.setdefault(key, "1")
        return self

    def __exit__(self, *exc):
        for key, value in self._saved.items():
            if value is None:
                os.environ.pop(key, None)
            else:
                os.environ[key] = value
        return False


_COLUMNS = [
    ("system", str, None), ("status", str, None), ("converged", bool, None),
    *[(f"mass_{p}", float, "kg") for p in _INTERVAL_KEYS],
    *[(f"mass_msun_{p}", float, "solMass") for p in _INTERVAL_KEYS],
    *[(f"gm_{p}", float, "km3 / s2") for p in _INTERVAL_KEYS],
    ("steps", int, None), ("max_autocorr_steps", float, None),
    ("effective_samples", float, None), ("seconds", float, "s"), ("seed", int, None),
    ("failure", str, None), ("output", str, None),
]
_MISSING = {str: "", bool: False, int: -1, float: np.nan}


def _write_table(out, jobs, rows):
    from astropy.table import Table

    listed = [rows[job.system] for job in jobs if job.system in rows]
    table = Table()
    for name, kind, unit in _COLUMNS:
        values = [row.get(name, _MISSING[kind]) for row in listed]
        table[name] = np.array(values, dtype=object if kind is str else kind)
        if kind is str:
            table[name] = table[name].astype(str)
        if unit is not None:
            table[name].unit = unit
    table.meta["description"] = ("massfit batch: one row per system; mass_* is the "
                                 "central mass (median and 68.27 %/95.45 % interval "
                                 "bounds), failure says why a system has no result")
    table.meta["systems_listed"] = len(jobs)
    table.meta["systems_done"] = len(listed)
    tmp = out / f".{RESULTS_FILE}.partial"
    table.write(tmp, format="ascii.ecsv", overwrite=True)
    os.replace(tmp, out / RESULTS_FILE)
    return table


def _bar(show, total, done):
    if not show:
        return None
    from tqdm.auto import tqdm

    return tqdm(total=total, initial=done, desc="systems", unit="system", file=sys.stderr)

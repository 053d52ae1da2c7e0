"""The results table of a batch: one row per system, from its summary or its failure.

``results.ecsv`` is rewritten whole (beside its place, then renamed) after every
finished system. A row takes from its job only ``system``, ``sampler`` (the seed) and
``output``.
"""

from __future__ import annotations

import os

import astropy.units as u
import numpy as np

from massfit.summarise.dark_mass import system_blocks
from massfit.summarise.quantities import SYSTEM, SYSTEM_SAMPLED

__all__ = ["result_row", "failed_row", "not_run_row", "write_results_table",
           "RESULTS_FILE", "NOT_RUN"]

RESULTS_FILE = "results.ecsv"
#: Status of a system an interrupted batch did not finish.
NOT_RUN = "not run"
_INTERVAL_KEYS = ("median", "lower_68", "upper_68", "lower_95", "upper_95")


def _row_base(job, seconds):
    return {"system": job.system, "status": "failed", "converged": False,
            "failure": "", "seed": job.sampler.get("seed", -1), "seconds": float(seconds),
            "output": job.output}


def result_row(job, summary: dict, seconds: float, *, seed=None) -> dict:
    """The results-table row of a finished system, from its summary.

    ``seed`` is the one the fit used (its config's, the table's or a drawn one).
    Where velocities alone leave the central mass open, ``measured`` says so and the
    row carries the mass function and minimum mass of ``companion`` instead.
    """
    row = _row_base(job, seconds)
    if seed is not None:
        row["seed"] = int(seed)
    row["status"] = "converged" if summary["converged"] else "not converged"
    row["converged"] = bool(summary["converged"])
    _put_blocks(row, {"mass": summary["central_mass"],
                      "mass_msun": summary["central_mass_solar"],
                      "gm": summary["central_gm"]})
    if summary["central_mass"] is not None:
        row["measured"] = "central mass"
    else:
        row["measured"] = "mass function only"
        row["note"] = summary.get("central_mass_note", "")
        name, comp = _strongest_signal(summary["companions"])
        if name is not None:
            row["companion"] = name
            _put_blocks(row, {"mass_function_msun": comp.get("mass_function"),
                              "minimum_mass_msun": comp.get("minimum_mass")})
    _put_blocks(row, {_column(key): block for key, block in system_blocks(summary).items()})
    correlation = (summary.get("mass_distance_correlation") or {}).get("log_mass_log_distance")
    row["mass_distance_correlation"] = np.nan if correlation is None else float(correlation)
    diag = summary["diagnostics"]
    row["steps"] = int(diag["steps"])
    row["max_autocorr_steps"] = float(diag["max_autocorr_steps"])
    row["effective_samples"] = float(diag["effective_samples"])
    return row


def _column(key):
    """A summary key as a column prefix (``frame.east`` -> ``frame_east``)."""
    return key.replace(".", "_")


def _unit(key):
    """The astropy unit string of a :data:`SYSTEM` quantity (None for a pure number)."""
    unit = SYSTEM[key].unit
    return None if unit == u.one else unit.to_string()


def _put_blocks(row, blocks):
    for prefix, block in blocks.items():  # None: not measured, NaN in the table
        for part in _INTERVAL_KEYS:
            value = None if block is None else block[part]
            row[f"{prefix}_{part}"] = np.nan if value is None else float(value)


def _strongest_signal(companions):
    """The companion with the largest mass function (the one the velocities show best)."""
    with_f = {name: comp for name, comp in companions.items()
              if (comp.get("mass_function") or {}).get("median") is not None}
    if not with_f:
        return None, None
    name = max(with_f, key=lambda n: with_f[n]["mass_function"]["median"])
    return name, with_f[name]


def failed_row(job, reason: str, seconds: float, *, seed=None) -> dict:
    """The results-table row of a system that could not be fitted (``seed``: the one its
    config states, where the job does not set one)."""
    row = _row_base(job, seconds)
    if seed is not None and "seed" not in job.sampler:
        row["seed"] = int(seed)
    row["failure"] = " ".join(reason.split()) or "unknown failure"
    return row


def not_run_row(job) -> dict:
    """The results-table row of a system the batch stopped before fitting."""
    row = _row_base(job, 0.0)
    row.update(status=NOT_RUN, failure="the batch was interrupted before this system "
                                        "finished")
    return row



_COLUMNS = [
    ("system", str, None), ("status", str, None), ("converged", bool, None),
    *[(f"mass_{p}", float, "kg") for p in _INTERVAL_KEYS],
    *[(f"mass_msun_{p}", float, "solMass") for p in _INTERVAL_KEYS],
    *[(f"gm_{p}", float, "km3 / s2") for p in _INTERVAL_KEYS],
    ("measured", str, None), ("companion", str, None),
    *[(f"mass_function_msun_{p}", float, "solMass") for p in _INTERVAL_KEYS],
    *[(f"minimum_mass_msun_{p}", float, "solMass") for p in _INTERVAL_KEYS],
    # The system's quantities where a fit has them (frame and relativistic terms, a
    # sampled parallax), named and measured as summarise/quantities.py's SYSTEM says.
    *[(f"{_column(key)}_{p}", float, _unit(key)) for key in SYSTEM_SAMPLED
      for p in _INTERVAL_KEYS],
    ("mass_distance_correlation", float, None),
    ("steps", int, None), ("max_autocorr_steps", float, None),
    ("effective_samples", float, None), ("seconds", float, "s"), ("seed", int, None),
    ("failure", str, None), ("note", str, None), ("output", str, None),
]
_MISSING = {str: "", bool: False, int: -1, float: np.nan}


def write_results_table(out, jobs, rows):
    """Write ``out/results.ecsv``: the rows of the jobs finished, in the jobs' order."""
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
                                 "bounds); measured says whether the data fixed it or, "
                                 "for velocities alone, only the mass function and "
                                 "minimum mass of companion; distance_*, "
                                 "precession_scale_* and frame_*_* (the mass's place "
                                 "and motion in the data's frame) where the fit has "
                                 "them, and mass_distance_correlation (of log mass and "
                                 "log distance); failure says why a system has no "
                                 "result")
    table.meta["systems_listed"] = len(jobs)
    table.meta["systems_done"] = len(listed)
    tmp = out / f".{RESULTS_FILE}.partial"
    table.write(tmp, format="ascii.ecsv", overwrite=True)
    os.replace(tmp, out / RESULTS_FILE)
    return table

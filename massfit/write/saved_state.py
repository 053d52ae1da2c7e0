"""What a saved output folder holds, written: file names, the model's state for run.json,
and the validated observations as ECSV.

:func:`massfit.result.loading.load_result` reads the same files back.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
from astropy.table import Table
from astropy.time import Time

from massfit import priors as _priors
from massfit.read.observations import AstrometryData, VelocityData

__all__ = ["model_state", "write_observations", "STATE_VERSION", "RUN_FILE", "SUMMARY_FILE",
           "SAMPLES_FILE", "OBSERVATIONS_FILE", "DATA_KINDS", "OLD_VELOCITY_FILE", "write_ecsv"]

SUMMARY_FILE = "summary.json"
SAMPLES_FILE = "samples.ecsv"
#: Version of the ``model`` block of run.json; a reader refuses newer ones.
STATE_VERSION = 1
RUN_FILE = "run.json"
#: The validated rows of every kind, in one table whose ``kind`` column says which.
OBSERVATIONS_FILE = "observations.ecsv"
#: Each kind of row: its ``kind`` value in the table and its container.
DATA_KINDS = {"astrometry": ("astrometry", AstrometryData),
              "velocities": ("velocity", VelocityData)}
#: Folders written before the one table kept the velocities in a file of their own.
OLD_VELOCITY_FILE = "velocities.ecsv"


# ------------------------------------------------------------------ writing
def _encode(value):
    """JSON form of a spec value: priors, dataclasses, dicts and lists recursively."""
    if isinstance(value, _priors.Prior):
        body = {f.name: float(getattr(value, f.name)) for f in dataclasses.fields(value)}
        return {"prior": type(value).__name__, **body}
    if hasattr(value, "label") and hasattr(value, "settings"):  # a dynamics model
        return {"dynamics_model": value.label, **_encode(dict(value.settings))}
    from massfit.orbits.viewing import ViewingSpec

    if isinstance(value, ViewingSpec):
        return {"viewing_spec": value.settings()}
    if dataclasses.is_dataclass(value):
        return {"dataclass": type(value).__name__,
                **{f.name: _encode(getattr(value, f.name))
                   for f in dataclasses.fields(value)}}
    if isinstance(value, dict):
        return {str(k): _encode(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_encode(v) for v in value]
    if isinstance(value, (np.floating, np.integer, np.bool_)):
        return value.item()
    return value


def model_state(model) -> dict:
    """What run.json keeps to rebuild ``model`` (the ``model`` key)."""
    obs = model.observations
    return {
        "version": STATE_VERSION,
        "system": _encode(model.spec),
        "parameter_names": list(model.names),
        "node_width": {k: float(v) for k, v in model.node_width.items()},
        "centres": {k: {kk: float(vv) for kk, vv in v.items()}
                    for k, v in model.centres.items()},
        "observations": {"files": list(obs.files), "rows_read": int(obs.rows_read),
                         "rejected": [r.as_dict() for r in obs.rejected],
                         "unused_columns": {k: list(v) for k, v in
                                            dict(obs.unused_columns).items()},
                         "primary": obs.primary,
                         "stated": dict(getattr(obs, "stated", {}))},
    }


def write_observations(observations, folder) -> list:
    """Write the validated observations (internal units) as one ECSV table into ``folder``.

    Astrometry and radial velocities share ``observations.ecsv``: its ``kind`` column
    says which a row is, and a column of the other kind is blank on it.
    """
    from astropy.table import vstack

    parts = []
    for attr, (kind, cls) in DATA_KINDS.items():
        data = getattr(observations, attr, None)
        if data is None or len(data) == 0:
            continue
        table = Table()
        table["kind"] = np.full(len(data), kind)
        for f in dataclasses.fields(cls):
            value = getattr(data, f.name)
            if value is None:  # an optional part the data do not have
                continue
            if isinstance(value, Time):
                table[f.name] = value.tdb.jd
                table.meta[f"{f.name}_scale"] = "tdb"
            else:
                table[f.name] = np.asarray(value)
        parts.append(table)
    if not parts:
        return []
    table = parts[0] if len(parts) == 1 else vstack(parts, join_type="outer",
                                                     metadata_conflicts="silent")
    table.meta["description"] = ("massfit validated observation rows in internal units "
                                 "(arcsec or au, radians, km/s, pc; times JD TDB); "
                                 "'kind' is astrometry or velocity")
    path = Path(folder) / OBSERVATIONS_FILE
    write_ecsv(table, path)
    return [path]


def _plain_floats(table) -> bool:
    """Every column a plain (unmasked, one value a row) float64 column."""
    return len(table.colnames) > 0 and all(
        table[name].dtype == np.float64 and table[name].ndim == 1
        and getattr(table[name], "mask", None) is None
        and type(table[name]).__name__ == "Column" and not table[name].info.format
        for name in table.colnames)


#: Rows per block when writing a big table (astropy formats every cell of what it is
#: given as a Python string at once: ~1 GB for a million rows of observations).
_WRITE_BLOCK_ROWS = 10_000


def write_ecsv(table, path) -> None:
    """``table.write(path, format="ascii.ecsv")``: the same file, in bounded memory,
    and fast for tables of plain floats (a fit's samples)."""
    import io

    if _plain_floats(table):
        # astropy formats each cell in Python (~4 us a cell: 2.5 s for a fit's
        # samples); a float64 cell is written as Python's repr, so the body can be
        # written by repr directly: the same bytes (tests/test_saved.py), ~4x faster.
        with open(path, "w", encoding="utf-8", newline="") as out:
            header = io.StringIO()
            table[:0].write(header, format="ascii.ecsv")
            out.write(header.getvalue())
            values = np.column_stack([np.asarray(table[name]) for name in table.colnames])
            for start in range(0, len(table), _WRITE_BLOCK_ROWS):
                out.write("".join(" ".join(map(repr, row)) + "\n" for row in
                                  values[start:start + _WRITE_BLOCK_ROWS].tolist()))
        return
    with open(path, "w", encoding="utf-8", newline="") as out:
        for start in range(0, max(len(table), 1), _WRITE_BLOCK_ROWS):
            buffer = io.StringIO()
            table[start:start + _WRITE_BLOCK_ROWS].write(buffer, format="ascii.ecsv")
            text = buffer.getvalue()
            if start > 0:
                # Later blocks: only their data lines (after the comments and the
                # column names, which the first block wrote).
                lines = text.splitlines(keepends=True)
                body = next(k for k, line in enumerate(lines) if not line.startswith("#"))
                text = "".join(lines[body + 1:])
            out.write(text)

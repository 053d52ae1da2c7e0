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
           "SAMPLES_FILE", "DATA_FILES"]

SUMMARY_FILE = "summary.json"
SAMPLES_FILE = "samples.ecsv"
#: Version of the ``model`` block of run.json; a reader refuses newer ones.
STATE_VERSION = 1
RUN_FILE = "run.json"
DATA_FILES = {"astrometry": ("observations.ecsv", AstrometryData),
              "velocities": ("velocities.ecsv", VelocityData)}


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
    """Write the validated observations (internal units) as ECSV into ``folder``."""
    paths = []
    for attr, (name, cls) in DATA_FILES.items():
        data = getattr(observations, attr, None)
        if data is None or len(data) == 0:
            continue
        table = Table()
        for f in dataclasses.fields(cls):
            value = getattr(data, f.name)
            if value is None:  # an optional part the data do not have
                continue
            if isinstance(value, Time):
                table[f.name] = value.tdb.jd
                table.meta[f"{f.name}_scale"] = "tdb"
            else:
                table[f.name] = np.asarray(value)
        table.meta["description"] = (f"massfit validated {attr} rows in internal units "
                                     f"(arcsec or au, radians, km/s, pc; times JD TDB)")
        path = Path(folder) / name
        _write_ecsv_in_blocks(table, path)
        paths.append(path)
    return paths


#: Rows per block when writing a big table (astropy formats every cell of what it is
#: given as a Python string at once: ~1 GB for a million rows of observations).
_WRITE_BLOCK_ROWS = 10_000


def _write_ecsv_in_blocks(table, path) -> None:
    """``table.write(path, format="ascii.ecsv")``, the same file, in bounded memory."""
    import io

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

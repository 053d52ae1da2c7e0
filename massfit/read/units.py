"""Which kind a table is, and each measured column's unit: stated in the file, given as an option, or refused."""
from __future__ import annotations

import astropy.units as u

from massfit.errors import InputError
from massfit.read.cells import Cells, Options, quoted
from massfit.read.columns import ALWAYS, KIND_NAMES, LENGTH, OFFSET, OPTIONAL, SETS, Dimension


def table_kind(cells: Cells) -> str:
    """Which kind of file this is, from its columns; refuse incomplete or mixed sets."""
    names = set(cells.names)
    started = [kind for kind, columns in SETS.items() if names & set(columns)]
    if not started:
        raise InputError(
            "has none of the columns massfit reads: astrometry needs time, body, east, "
            "north, east_err, north_err (or sep, pa, sep_err, pa_err) and radial "
            f"velocities need time, body, rv, rv_err; found {', '.join(cells.names)}",
            file=cells.file)
    if len(started) > 1:
        raise InputError(f"mixes the columns of {' and '.join(KIND_NAMES[k] for k in started)}"
                         "; put each kind of measurement in its own file", file=cells.file)
    kind = started[0]
    missing = [name for name in (*ALWAYS, *SETS[kind]) if name not in names]
    if missing:
        raise InputError(f"lacks the column(s) {', '.join(missing)} needed for "
                         f"{KIND_NAMES[kind]}", file=cells.file,
                         column=missing[0] if len(missing) == 1 else None)
    return kind


def measured_columns(cells: Cells, kind: str) -> dict[str, tuple[Dimension, ...]]:
    optional = {name: dims for name, dims in OPTIONAL[kind].items() if name in cells.names}
    return {**SETS[kind], **optional}


def used_columns(cells: Cells, kind: str) -> set[str]:
    used = set(ALWAYS) | set(measured_columns(cells, kind))
    return used | ({"instrument"} if kind == "rv" else {"reference_body"})


def _given_unit(cells: Cells, name: str, options: Options) -> u.UnitBase | None:
    if name not in options.units:
        return None
    value = options.units[name]
    try:
        if not isinstance(value, (str, u.UnitBase)):
            raise TypeError(value)
        return u.Unit(value)
    except (ValueError, TypeError):
        raise InputError(f"the unit {quoted(value)} given for it in `units` is not a unit "
                         "astropy can parse", file=cells.file, column=name) from None


def _unit(cells: Cells, name: str, options: Options) -> u.UnitBase | None:
    given = _given_unit(cells, name, options)
    stated = cells.units.get(name)
    if stated is None:
        return given
    if isinstance(stated, u.UnrecognizedUnit):
        raise InputError(f"has unit '{stated}' in the ECSV header, which astropy does not "
                         "recognise", file=cells.file, column=name)
    if given is not None and given != stated:
        raise InputError(f"has unit '{stated}' in the ECSV header but '{given}' in `units`; "
                         "remove one or make them agree", file=cells.file, column=name)
    return stated


def _factor(cells: Cells, name: str, choices: tuple[Dimension, ...], options: Options,
            note: str = "") -> tuple[float, Dimension]:
    """The factor from the column's unit to the internal unit, and the kind that matched."""
    unit = _unit(cells, name, options)
    accepted = " or ".join(dim.description for dim in choices) + note
    if unit is None:
        if not choices[0].unit_required:
            return 1.0, choices[0]
        raise InputError(f"has no unit; it needs {accepted}: state it in the ECSV header, "
                         "or with `units` in the config or the --units option",
                         file=cells.file, column=name)
    for dim in choices:
        if unit.is_equivalent(dim.target):
            return float(unit.to(dim.target)), dim
    raise InputError(f"has unit '{unit}', but it needs {accepted}", file=cells.file,
                     column=name)


def unit_factors(cells: Cells, columns: dict, options: Options) -> tuple[dict[str, float], bool]:
    """Conversion factors of all measured columns, and whether offsets are lengths."""
    factors: dict[str, float] = {}
    offset, first = None, None
    for name, choices in columns.items():
        note = ""
        if choices is OFFSET and offset is not None:
            choices, note = (offset,), f", like '{first}' (one kind of offset unit per file)"
        factors[name], dim = _factor(cells, name, choices, options, note)
        if dim in OFFSET and offset is None:
            offset, first = dim, name
    return factors, offset is LENGTH


def stated_units(cells: Cells, columns: dict, options: Options) -> dict[str, str]:
    """Each measured column's unit as the file or the options give it (text; "" for none)."""
    out = {}
    for name in columns:
        unit = _unit(cells, name, options)
        out[name] = "" if unit is None else unit.to_string()
    return out

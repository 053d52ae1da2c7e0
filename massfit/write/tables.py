"""The parameter summary as a table: LaTeX, Markdown, HTML and ECSV forms.

Values are rounded by :func:`massfit.summarise.rounding.round_interval`.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np
from astropy.table import Table

from massfit.summarise.derived import (MASS_UNIT_LABELS, SCALED_MASSES, best_mass_unit,
                                       in_best_mass_unit)
from massfit.summarise.dark_mass import table_entries
from massfit.summarise.mode_text import mode_table_entries, weighed_modes
from massfit.summarise.quantities import CENTRAL, COMPANION, MASS_UNIT_KEYS
from massfit.summarise.rounding import (NARROW_LABEL, WIDE_LABEL, Rounded, format_interval,
                                        format_range, print_exponent, round_interval)

__all__ = ["Rounded", "round_interval", "format_interval", "parameter_rows", "latex_table",
           "LATEX_PACKAGES",
           "markdown_table", "html_table", "ecsv_table", "TABLE_FORMATS"]

#: Table formats and the file each is written to in an output folder.
TABLE_FORMATS = {"latex": "parameters.tex", "markdown": "parameters.md",
                 "ecsv": "parameters.ecsv"}



# ---------------------------------------------------------------------------- rows
@dataclass(frozen=True)
class _Row:
    group: str  # "" for the central body, else the companion's name
    key: str  # the summary key (dotted for companions)
    name: str  # words
    symbol: str  # LaTeX math
    unit_latex: str
    unit_text: str
    block: dict


def _pick_mass_unit(summary, mass_unit):
    if mass_unit is not None:
        if mass_unit not in MASS_UNIT_KEYS:
            from massfit.errors import ConfigError

            raise ConfigError(f"unknown mass unit {mass_unit!r}; accepted: "
                              f"{', '.join(MASS_UNIT_KEYS)}", key="mass_unit")
        return mass_unit
    if summary["central_mass_solar"] is None:  # velocities alone: not determined
        return "Msun"
    return best_mass_unit(summary["central_mass_solar"]["median"] or 1.0)


def parameter_rows(summary: dict, *, mass_unit: str | None = None,
                   time_form: tuple | None = None) -> list:
    """The rows of the parameter table, in print order.

    Parameters
    ----------
    summary : dict
        A result's summary (the content of ``summary.json``).
    mass_unit : {"Msun", "Mjup", "Mearth", "kg"}, optional
        The unit of the central mass beside the one in kg (by default the one that
        reads best).
    time_form : (str, str), optional
        The input's time format and scale (``Observations.time_form()``): times of
        periapsis are given in it (JD or MJD in that scale; Julian years for
        ``jyear``; JD in that scale for calendar dates, which cannot carry an error).
        By default JD (TDB), as in the summary.

    Returns
    -------
    list of _Row
    """
    unit = _pick_mass_unit(summary, mass_unit)
    central = ["central_gm", "central_mass"]
    if summary["central_gm"] is None:  # not fixed by the data (velocities alone)
        central = []
    elif unit != "kg":
        central.append(MASS_UNIT_KEYS[unit])
    if "parallax" in summary:
        central.append("parallax")
    # Separated modes weighed by the nested engine: the mass and the periods over all
    # modes, then each mode's (massfit.summarise.mode_text).
    modes = bool(weighed_modes(summary))
    rows = [_over_modes(_row("", key, summary[key]), modes and key != "parallax")
            for key in central]
    at = len([key for key in central if key != "parallax"])
    rows[at:at] = [_Row("", *entry) for entry in mode_table_entries(summary, "", unit)
                   if summary["central_gm"] is not None]
    rows += [_Row("", *entry) for entry in table_entries(summary)]
    for name, comp in summary["companions"].items():
        for key in COMPANION:
            if key in comp:
                rows.append(_over_modes(_row(name, key, comp[key]), modes and key == "period"))
            if key == "period":
                rows += [_Row(name, *entry) for entry in mode_table_entries(summary, name)]
    if time_form is not None:
        rows = [_in_time_form(row, time_form) if row.key.endswith(".periapsis_time") else row
                for row in rows]
    return rows


def _over_modes(row, mark):
    """The row named as the value over all modes where ``mark``."""
    from dataclasses import replace

    return replace(row, name=f"{row.name}, over all modes") if mark else row


def _in_time_form(row, time_form):
    """A time row in the input's format and scale (the summary has JD, TDB)."""
    from dataclasses import replace

    from astropy.time import Time

    time_format, scale = time_form
    name = {"mjd": "MJD", "jyear": "Julian year"}.get(time_format, "JD")
    block = dict(row.block)
    for key in ("median", "lower_68", "upper_68", "lower_95", "upper_95"):
        if block.get(key) is None:
            continue
        time = getattr(Time(block[key], format="jd", scale="tdb"), scale)
        block[key] = float(time.mjd if name == "MJD" else time.jyear if name != "JD"
                           else time.jd)
    unit = f"{name} ({scale.upper()})"
    block["unit"] = unit
    return replace(row, block=block, unit_latex=unit, unit_text=unit)


def _row(group, key, block):
    """A table row of a summary quantity, named as in summarise/quantities.py."""
    d = CENTRAL[key] if not group else COMPANION[key]
    plain = re.fullmatch(r"\\mathrm\{([^{}^_]*)\}", d.unit_latex)
    if plain:  # an upright word (d, au, kg, JD (TDB)) is written as text
        unit_latex = plain.group(1).replace(r"\ ", " ")
    else:
        unit_latex = f"${d.unit_latex}$" if d.unit_latex else ""
    unit_text = d.unit_text
    if group and key in SCALED_MASSES:  # M_sun, M_jup or M_earth, by size
        block, best = in_best_mass_unit(block)
        unit_latex = f"${MASS_UNIT_LABELS[best]}$"
        unit_text = CENTRAL[MASS_UNIT_KEYS[best]].unit_text
    return _Row(group, f"{group}.{key}" if group else key, d.words, d.symbol, unit_latex,
                unit_text, block)


def _groups(rows):
    current = None
    for row in rows:
        if row.group != current:
            current = row.group
            yield row.group, True, row
        else:
            yield row.group, False, row


#: Every character TeX treats specially in text, as text (one pass: no escape is
#: escaped again). ``^^5c`` would otherwise be read by TeX as a backslash.
_TEX_SPECIAL = str.maketrans({
    "\\": r"\textbackslash{}", "{": r"\{", "}": r"\}", "$": r"\$", "&": r"\&",
    "#": r"\#", "%": r"\%", "_": r"\_", "^": r"\textasciicircum{}",
    "~": r"\textasciitilde{}"})


def tex_escape(text: str) -> str:
    """``text`` as LaTeX that prints it character for character."""
    return str(text).translate(_TEX_SPECIAL)


#: The LaTeX packages the table needs, said in its first line.
LATEX_PACKAGES = ("booktabs",)


def latex_table(summary: dict, *, mass_unit: str | None = None,
                caption: str | None = None, label: str = "tab:massfit",
                time_form: tuple | None = None) -> str:
    """The parameter summary as a LaTeX ``table`` with a caption (booktabs rules).

    Medians with their 68.27 % intervals, rounded by :func:`round_interval`; times of
    periapsis in ``time_form`` (see :func:`parameter_rows`). The first line is a
    comment naming the packages the table needs (:data:`LATEX_PACKAGES`); ``caption``
    replaces the default caption, which says what the numbers are.
    """
    rows = parameter_rows(summary, mass_unit=mass_unit, time_form=time_form)
    if caption is None:
        caption = (r"Parameters of the fit: posterior medians with 68.27\,\% central "
                   "credible intervals (from the 15.865th to the 84.135th percentile).")
        times = sorted({row.unit_text for row in rows if row.key.endswith(".periapsis_time")})
        if times:
            caption += f" Times of periapsis are given as {tex_escape(times[0])}."
    lines = ["% Needs \\usepackage{" + ",".join(LATEX_PACKAGES) + "} in the preamble "
             "(\\toprule, \\midrule, \\bottomrule).",
             r"\begin{table}", r"\centering", rf"\caption{{{caption}}}",
             rf"\label{{{label}}}", r"\begin{tabular}{llll}", r"\toprule",
             r"Parameter & Symbol & Value & Unit \\", r"\midrule"]
    for group, first, row in _groups(rows):
        if first:
            title = "Central body" if not group else f"Companion {tex_escape(group)}"
            if group:
                lines.append(r"\midrule")
            lines.append(rf"\multicolumn{{4}}{{l}}{{\textit{{{title}}}}} \\")
        rounded = round_interval(row.block, exponent=print_exponent(row.block))
        value = "undetermined" if rounded is None else f"${rounded.latex()}$"
        lines.append(f"{tex_escape(row.name)} & ${row.symbol}$ & {value} & "
                     f"{row.unit_latex} \\\\")
    lines += [r"\bottomrule", r"\end{tabular}", r"\end{table}"]
    return "\n".join(lines) + "\n"


def markdown_table(summary: dict, *, mass_unit: str | None = None,
                   time_form: tuple | None = None) -> str:
    """The parameter summary as a Markdown (pipe) table."""
    lines = ["| body | parameter | value | unit |", "| --- | --- | --- | --- |"]
    for row in parameter_rows(summary, mass_unit=mass_unit, time_form=time_form):
        rounded = round_interval(row.block, exponent=print_exponent(row.block))
        value = "undetermined" if rounded is None else rounded.text()
        lines.append(f"| {row.group or 'central'} | {row.name} | {value} | "
                     f"{row.unit_text} |")
    lines.append("")
    lines.append("Medians with 68.27 % credible intervals.")
    return "\n".join(lines) + "\n"


_HTML_UNITS = {"km3 / s2": "km<sup>3</sup>&thinsp;s<sup>&minus;2</sup>",
               "km / s": "km&thinsp;s<sup>&minus;1</sup>", "deg": "&deg;",
               "M_sun": "M<sub>&#9737;</sub>", "M_jup": "M<sub>J</sub>",
               "M_earth": "M<sub>&#8853;</sub>"}


def html_table(summary: dict, *, mass_unit: str | None = None,
               time_form: tuple | None = None) -> str:
    """The parameter summary as an HTML table (for notebooks)."""
    from html import escape

    out = ["<table>", "<thead><tr><th style='text-align:left'>parameter</th>"
           "<th style='text-align:right'>median and 68 % interval</th>"
           "<th style='text-align:left'>unit</th>"
           f"<th style='text-align:right'>{WIDE_LABEL} interval</th></tr></thead>", "<tbody>"]
    for group, first, row in _groups(parameter_rows(summary, mass_unit=mass_unit,
                                                    time_form=time_form)):
        if first:
            title = "Central body" if not group else f"Companion {escape(group)}"
            out.append(f"<tr><th colspan='4' style='text-align:left'>{title}</th></tr>")
        rounded = round_interval(row.block, exponent=print_exponent(row.block))
        value = "undetermined" if rounded is None else rounded.html()
        wide = ("" if row.block.get("lower_95") is None else
                format_range(row.block, separator=" &ndash; "))
        unit = _HTML_UNITS.get(row.unit_text, escape(row.unit_text))
        out.append(f"<tr><td style='text-align:left'>{escape(row.name)}</td>"
                   f"<td style='text-align:right'>{value}</td>"
                   f"<td style='text-align:left'>{unit}</td>"
                   f"<td style='text-align:right'>{wide}</td></tr>")
    out += ["</tbody>", "</table>"]
    return "\n".join(out)


def ecsv_table(summary: dict, *, mass_unit: str | None = None,
               time_form: tuple | None = None) -> Table:
    """The parameter summary as an astropy Table (write it as ECSV).

    Full-precision medians and interval bounds, plus the rounded text of each.
    """
    rows = parameter_rows(summary, mass_unit=mass_unit, time_form=time_form)
    table = Table()
    table["body"] = [row.group or "central" for row in rows]
    table["parameter"] = [row.key.split(".", 1)[-1] if row.group else row.key
                          for row in rows]
    table["unit"] = [row.unit_text for row in rows]
    for key in ("median", "lower_68", "upper_68", "lower_95", "upper_95"):
        table[key] = np.array([np.nan if row.block.get(key) is None else row.block[key]
                               for row in rows], dtype=float)
    table["rounded"] = [format_interval(row.block) for row in rows]
    if any("probability" in row.block for row in rows):  # the rows of weighed modes
        for key in ("probability", "probability_err"):
            table[f"mode_{key}"] = np.array([row.block.get(key, np.nan) for row in rows],
                                            dtype=float)
    table.meta["description"] = (f"massfit parameter summary: medians with {NARROW_LABEL} and "
                                 f"{WIDE_LABEL} central credible intervals")
    table.meta["converged"] = bool(summary.get("converged", False))
    return table

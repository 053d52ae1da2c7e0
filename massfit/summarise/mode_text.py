"""What a user reads where the modes of a fit were weighed (the nested engine).

A posterior with separated modes (period aliases) has no single interval that says
what it is: the 68 % interval of the mixture sits in the heaviest mode and the 95 %
one spans the gaps between them. Where the summary holds ``weighed_modes`` (more
than one), the terminal and the parameter tables give, for the central mass and each
companion's period, every mode's probability (with its error), median and intervals,
and the central mass over all modes (the mode-marginalised mass, the summary's own
``central_mass_*`` blocks) named as such.
"""

from __future__ import annotations

from massfit.constants import MASS_UNITS
from massfit.summarise.quantities import CENTRAL, MASS_UNIT_KEYS
from massfit.summarise.rounding import WIDE_LABEL, format_interval, format_range

__all__ = ["weighed_modes", "mode_label", "in_mass_unit", "central_mode_lines",
           "period_mode_lines", "mode_table_entries", "nested_lines"]

_UNIT_TEXT = {"Msun": "M_sun", "Mjup": "M_jup", "Mearth": "M_earth", "kg": "kg"}


def weighed_modes(summary) -> list:
    """The weighed modes, most probable first; [] unless there are two or more."""
    modes = list(summary.get("weighed_modes") or [])
    if len(modes) < 2:
        return []
    return sorted(modes, key=lambda m: -m["probability"])


def mode_label(mode, k, n) -> str:
    """``mode 1 of 3, p = 0.79 +/- 0.06``."""
    return (f"mode {k} of {n}, p = {mode['probability']:.2f} +/- "
            f"{mode['probability_err']:.2f}")


def in_mass_unit(block, unit) -> dict:
    """An interval block in M_sun expressed in ``unit`` ("Msun", "Mjup", "Mearth", "kg")."""
    scale = MASS_UNITS["Msun"] / MASS_UNITS[unit]
    out = {k: (v * scale if isinstance(v, float) else v) for k, v in block.items()}
    out["unit"] = _UNIT_TEXT[unit]
    return out


def _mode_periods(mode) -> str:
    """Where the mode is: each period's median, and a mirror image's node."""
    parts = [f"P({name}) = {format_interval(block).split(' ')[0]} d"
             for name, block in mode["period"].items()]
    parts += [f"Omega({name}) = {block['median']:.0f} deg"
              for name, block in (mode.get("ascending_node") or {}).items()]
    return ", ".join(parts)


def _aligned(rows, pad) -> list:
    """Rows of cells as lines, each column as wide as its widest cell."""
    widths = [max(len(row[j]) for row in rows) for j in range(len(rows[0]))]
    return [(pad + "   ".join(cell.ljust(w) for cell, w in zip(row, widths))).rstrip()
            for row in rows]


def _probability(mode) -> str:
    return f"{mode['probability']:.2f} +/- {mode['probability_err']:.2f}"


def central_mode_lines(summary, unit, indent=4) -> list:
    """Terminal lines under the central mass: that it is the mass over all modes, and
    each mode's probability and mass (in ``unit``, as the line above)."""
    modes = [m for m in weighed_modes(summary) if m.get("central_mass_solar")]
    if not modes or summary.get("central_mass_solar") is None:
        return []
    rows = [("probability", "mass (median, 68 %)", WIDE_LABEL, "the mode")]
    for mode in modes:
        block = in_mass_unit(mode["central_mass_solar"], unit)
        rows.append((_probability(mode), f"{format_interval(block)} {block['unit']}",
                     format_range(block), _mode_periods(mode)))
    return ([f"  (the mass above is over all {len(modes)} separated modes, each weighed "
             "by its evidence; mode by mode:)"] + _aligned(rows, " " * indent))


def period_mode_lines(summary, name, label_width=8) -> list | None:
    """The terminal lines of a companion's period mode by mode (None: one mode)."""
    modes = weighed_modes(summary)
    if not modes or not all(name in m.get("period", {}) for m in modes):
        return None
    mirrors = all(name in (m.get("ascending_node") or {}) for m in modes)
    rows = [("probability", "P (median, 68 %)", WIDE_LABEL) + (("Omega",) if mirrors else ())]
    for mode in modes:
        block = mode["period"][name]
        row = (_probability(mode), f"{format_interval(block)} d", format_range(block))
        if mirrors:  # mirror images: the same period, the node half a turn apart
            row += (f"{format_interval(mode['ascending_node'][name])} deg",)
        rows.append(row)
    return ([f"  {'P':<{label_width}}= {len(modes)} separated modes, each weighed by its "
             "evidence (the elements after them: over all modes):"]
            + _aligned(rows, " " * (label_width + 4)))


def mode_table_entries(summary, group, unit=None) -> list:
    """Rows of the parameter tables for each weighed mode: (key, words, symbol, LaTeX
    unit, unit text, block) of the central mass (``group`` "", in ``unit``) or of the
    companion ``group``'s period."""
    modes = weighed_modes(summary)
    out = []
    for k, mode in enumerate(modes, 1):
        words = f"{{}}, {mode_label(mode, k, len(modes))}"
        if not group:
            if mode.get("central_mass_solar") is None or unit is None:
                continue
            key = MASS_UNIT_KEYS[unit]
            d = CENTRAL[key]
            block = in_mass_unit(mode["central_mass_solar"], unit)
            out.append((f"{key}.mode_{k}", words.format(d.words), d.symbol,
                        f"${d.unit_latex}$", d.unit_text, _with_probability(block, mode)))
        elif group in mode.get("period", {}):
            out.append((f"{group}.period.mode_{k}", words.format("period"), "P", "d", "d",
                        _with_probability(mode["period"][group], mode)))
    return out


def _with_probability(block, mode) -> dict:
    return dict(block, probability=mode["probability"],
                probability_err=mode["probability_err"])


def nested_lines(summary, converged) -> list:
    """The nested sampler's lines: the engine, the evidence (and its Laplace check),
    each mode's weight as each set of runs gave it."""
    eng, ev = summary["sampler"], summary["evidence"]
    lines = ["Sampler (nested, " + eng["library"] + ")",
             f"  {eng['sampler']} {eng['sample']}, {eng['live_points']} live points, "
             f"{eng['runs_per_box']} run(s) in each of {eng['boxes']} box(es), "
             f"{eng['likelihood_calls']} likelihood calls; converged: "
             f"{'yes' if converged else 'NO'}",
             f"  ln evidence = {ev['log_evidence']:.3f} +/- {ev['log_evidence_err']:.3f}"]
    if ev.get("laplace_log_evidence") is not None:
        lines[-1] += (f" (Laplace estimate about the start's solution: "
                      f"{ev['laplace_log_evidence']:.3f})")
    modes = weighed_modes(summary)
    for k, mode in enumerate(modes, 1):
        runs = " / ".join(f"{p:.3f}" for p in mode["probability_runs"])
        lines.append(f"  mode {k} ({_mode_periods(mode)}): probability "
                     f"{mode['probability']:.3f} +/- {mode['probability_err']:.3f} "
                     f"(each set of runs: {runs})")
    return lines

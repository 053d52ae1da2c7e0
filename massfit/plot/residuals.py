"""Residual figures: normalised residuals against time, their periodograms with the
false-alarm levels, and (with a moving line of sight) the O-C along and across the
planet's equator."""

from __future__ import annotations

import numpy as np

from massfit.errors import ConfigError
from massfit.plot.sky import SkyFrame, observed_offsets
from massfit.model.fit_quality import chi2_block
from massfit.plot.style import (COLUMN_WIDTH, INSTRUMENT_MARKERS, chosen, jyear,
                                plain_log_ticks, style, time_axis)
from massfit.summarise.adequacy import chi2_text, panels
from massfit.summarise.residuals import (FAP_THRESHOLD, VELOCITY_PANEL, astrometric_residuals,
                                         best_sample, peak_text, residual_periodogram,
                                         velocity_residuals)

__all__ = ["residual_plot", "periodogram_plot", "equator_residual_plot", "all_residuals",
           "VELOCITY_PANEL"]


_COMPONENT_STYLE = {"east": ("o", "C0", "east"), "north": ("s", "C1", "north"),
                    "sep": ("D", "C2", "separation"), "pa": ("^", "C3", "position angle")}


def residual_plot(result, *, companions=None, width=None):
    """Normalised residuals (observed - model) / error against time, per companion.

    Bands mark one and three sigma; each panel gives the companion's chi^2 as the
    summary's ``adequacy`` block has it (the same numbers and words as the report).
    Times in the input's format and scale.

    Returns
    -------
    matplotlib.figure.Figure
    """
    import matplotlib.pyplot as plt

    residuals = all_residuals(result, companions)
    entries = _adequacy_entries(result)
    jd = np.concatenate([res.time.tdb.jd for res in residuals.values()])
    axis = time_axis(result.model.observations, jd)
    width = width or COLUMN_WIDTH
    with style():
        fig, axes = plt.subplots(len(residuals), 1, sharex=True, squeeze=False,
                                 figsize=(width, 0.3 + 1.15 * len(residuals)),
                                 layout="constrained")
        for ax, (name, res) in zip(axes[:, 0], residuals.items()):
            times = axis(res.time.tdb.jd)
            kinds = np.unique(res.component)
            for j, comp in enumerate(kinds):
                # Velocities: one marker per instrument, named only where there are
                # several (one file without an instrument column is "velocities").
                marker, colour, word = _COMPONENT_STYLE.get(
                    comp, (INSTRUMENT_MARKERS[j % 10], "C4",
                           comp if len(kinds) > 1 else "velocities"))
                pick = res.component == comp
                ax.scatter(times[pick], res.normalised[pick], s=6, marker=marker,
                           color=colour, linewidths=0, label=word, gid=f"residuals-{comp}")
            for level, shade in ((3, "0.93"), (1, "0.85")):
                ax.axhspan(-level, level, color=shade, zorder=0, lw=0)
            ax.axhline(0, color="k", lw=0.5)
            ax.set_ylabel(r"(O$-$C)/$\sigma$")
            entry = entries.get(name)
            text = chi2_text(entry) if entry else chi2_text(chi2_block(
                res.chi2, res.normalised.size, 0))
            ax.text(0.01, 0.97, f"{name}\n{text}", transform=ax.transAxes, ha="left",
                    va="top", fontsize=6.5, gid="chi2")
            lim = max(4.0, 1.1 * float(np.max(np.abs(res.normalised))))
            # Headroom above the points for the label and the legend.
            ax.set_ylim(-lim, 2.0 * lim)
            ax.legend(loc="upper right", ncol=1, frameon=False, fontsize=6,
                      handletextpad=0.2, labelspacing=0.2, borderaxespad=0.3)
        axes[-1, 0].set_xlabel(axis.label)
    return fig


def _adequacy_entries(result) -> dict:
    """Each panel's entry of the summary's adequacy block (chi^2 and residual peak), the
    numbers the report prints; empty where the summary has none (an older result)."""
    block = result.summary.get("adequacy")
    return panels(block) if block else {}


def equator_residual_plot(result, *, companions=None, width=None):
    """Each moon's O-C against time, along and across its planet's equator.

    For fits with a moving line of sight. Where the primary's pole is given
    (:meth:`OrbitModel.primary_pole`: the viewing settings' ``pole_ra``/``pole_dec``,
    or the dynamics' ``equator_inclination``/``equator_node``) the residuals of every
    row are turned by that row's position angle P of the pole: "along the equator"
    points to the planet's east limb, (cos P, -sin P) in (east, north), "towards the
    pole" is (sin P, cos P); without a pole, east and north. Residuals of the best posterior
    sample, in km at the planet (or the fit's own unit), with 1-sigma bars.

    Returns
    -------
    matplotlib.figure.Figure
    """
    import matplotlib.pyplot as plt

    model = result.model
    if model.sight is None:
        raise ConfigError("the O-C in the planet's frame needs a moving line of sight "
                          "(primary_ra/primary_dec columns or an ephemeris body)",
                          key="figures")
    names = list(chosen(dict.fromkeys(model.companions), companions))
    theta = best_sample(result)
    best = model.physical(theta[None, :])
    pole = model.primary_pole()
    words = (("along the equator", "towards the pole") if pole is not None
             else ("east", "north"))
    width = width or COLUMN_WIDTH
    with style():
        fig, axes = plt.subplots(len(names), 1, sharex=True, squeeze=False,
                                 figsize=(width, 0.4 + 1.3 * len(names)),
                                 layout="constrained")
        for ax, name in zip(axes[:, 0], names):
            frame = SkyFrame(model, name, best)
            east, north, cov = observed_offsets(model.observations.astrometry, frame.index)
            pe, pn = (v[0] for v in model.predicted_offsets(theta, name))
            d_e, d_n = (east - pe) * frame.row_factor, (north - pn) * frame.row_factor
            err = np.sqrt(0.5 * (cov[:, 0, 0] + cov[:, 1, 1])) * frame.row_factor
            if pole is not None:
                angle = _pole_angle(model, frame.index, pole)
                d_e, d_n = (d_e * np.cos(angle) - d_n * np.sin(angle),
                            d_e * np.sin(angle) + d_n * np.cos(angle))
            factor, unit = SkyFrame.display(3 * float(np.median(err)), frame.angle)
            years = jyear(model.epoch_jd + model.rows[name].t)
            for values, word, colour, marker in ((d_e, words[0], "C0", "o"),
                                                 (d_n, words[1], "C1", "s")):
                ax.errorbar(years, values * factor, yerr=err * factor, fmt=marker, ms=2.5,
                            color=colour, ecolor="0.75", elinewidth=0.5, label=word,
                            gid=f"residuals-{word.replace(' ', '-')}")
            ax.axhline(0.0, color="k", lw=0.5)
            lim = 1.1 * factor * float(np.max(np.abs(np.concatenate([d_e, d_n]))
                                              + np.concatenate([err, err])))
            ax.set_ylim(-lim, 1.5 * lim)  # room for the name and the legend
            ax.set_ylabel(f"O$-$C [{unit}]")
            ax.text(0.01, 0.95, name, transform=ax.transAxes, ha="left", va="top",
                    fontsize=7, fontweight="bold")
            ax.legend(loc="upper right", ncol=2, frameon=False, fontsize=6)
        axes[-1, 0].set_xlabel("epoch [Julian year, TDB]")
    return fig


def _pole_angle(model, index, pole):
    """Position angle (rad) of the primary's pole at each of the rows ``index``."""
    data = model.observations.astrometry
    ra, dec = data.primary_ra[index], data.primary_dec[index]
    pole_ra, pole_dec = pole
    return np.arctan2(np.cos(pole_dec) * np.sin(pole_ra - ra),
                      np.sin(pole_dec) * np.cos(dec)
                      - np.cos(pole_dec) * np.sin(dec) * np.cos(pole_ra - ra))


def all_residuals(result, companions):
    """Astrometric residuals per companion, then the velocities' (where any)."""
    out = chosen(astrometric_residuals(result), companions)
    if result.model.has_velocities:
        out[VELOCITY_PANEL] = velocity_residuals(result)
    return out


def periodogram_plot(result, *, companions=None, width=None):
    """Lomb-Scargle periodogram of each companion's normalised residuals.

    Horizontal lines mark the power of a 1 % and a 0.1 % false-alarm probability; a
    peak above the 1 % line is flagged in red with its period, and the orbital period
    is marked by a dotted line (every companion's, in the panel of the velocities).
    The peak and its false-alarm probability are written as the report writes them,
    from the summary's adequacy block (the same function, on the same residuals).

    Returns
    -------
    matplotlib.figure.Figure
    """
    import matplotlib.pyplot as plt

    residuals = all_residuals(result, companions)
    periods = {name: comp["period"]["median"]
               for name, comp in result.summary["companions"].items()}
    entries = _adequacy_entries(result)
    width = width or COLUMN_WIDTH
    with style():
        fig, axes = plt.subplots(len(residuals), 1, squeeze=False,
                                 figsize=(width, 0.3 + 1.15 * len(residuals)),
                                 layout="constrained")
        fig.massfit_flags = {}
        for ax, (name, res) in zip(axes[:, 0], residuals.items()):
            # The velocities' periodogram is searched as the summary searches it (no
            # orbital period of its own); every companion's period is marked on it.
            marks = list(periods.values()) if name == VELOCITY_PANEL else [periods.get(name)]
            pgram = residual_periodogram(res, orbital_period=periods.get(name))
            ax.set_ylabel("power")
            if pgram is None:
                ax.text(0.5, 0.5, f"{name}: too few epochs", transform=ax.transAxes,
                        ha="center")
                continue
            peak = (entries.get(name) or {}).get("periodogram") or pgram
            fig.massfit_flags[name] = (peak["false_alarm_probability"]
                                       if "peak_period" in peak else pgram["fap"])
            _draw_periodogram(ax, name, pgram, peak, marks)
        # One legend for all panels, above them, clear of each panel's label.
        handles = {}
        for ax in axes[:, 0]:
            for handle, label in zip(*ax.get_legend_handles_labels()):
                handles.setdefault(label, handle)
        if handles:
            fig.legend(list(handles.values()), list(handles), loc="outside upper center",
                       ncol=len(handles), frameon=False, fontsize=6, handlelength=1.5)
        axes[-1, 0].set_xlabel("period of the residual signal [d]")
    return fig


def _draw_periodogram(ax, name, pgram, peak, marks):
    period_axis = 1.0 / pgram["frequency"]
    ax.plot(period_axis, pgram["power"], color="k", lw=0.5, gid="periodogram")
    for fap, style_ in ((FAP_THRESHOLD, "--"), (0.1 * FAP_THRESHOLD, ":")):
        ax.axhline(pgram["levels"][fap], color="0.4", lw=0.6, ls=style_,
                   label=f"FAP {100 * fap:g} %")
    for period in marks:
        if period and period_axis.min() <= period <= period_axis.max():
            ax.axvline(period, color="C0", lw=0.6, ls=":", label="orbital period",
                       gid="orbital-period")
    flagged = pgram["fap"] < FAP_THRESHOLD
    ax.text(0.01, 0.95, f"{name}: {peak_text(peak)}" + (" — leftover signal" if flagged
                                                         else ""),
            transform=ax.transAxes, ha="left", va="top", fontsize=7,
            color="C3" if flagged else "k", zorder=5,
            bbox={"facecolor": "white", "edgecolor": "none", "pad": 1.0})
    if flagged:
        ax.plot([pgram["best_period"]], [pgram["best_power"]], marker="v",
                color="C3", ms=5, ls="none", gid="flagged-peak")
    ax.set_xscale("log")
    plain_log_ticks(ax.xaxis, np.log10(period_axis.max() / period_axis.min()))
    # Headroom above the false-alarm lines for the label and the legend.
    ax.set_ylim(0, 1.6 * max(pgram["best_power"], pgram["levels"][0.1 * FAP_THRESHOLD]))
    ax.set_xlim(period_axis.min(), period_axis.max())

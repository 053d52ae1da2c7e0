"""Radial-velocity figures: against time with the best model, and folded on each
companion's period, with residuals below."""

from __future__ import annotations

import numpy as np

from massfit.errors import ConfigError
from massfit.plot.style import (COLUMN_WIDTH, INSTRUMENT_MARKERS, PAGE_WIDTH, by_period, style,
                                time_axis)
from massfit.summarise.residuals import best_sample
from massfit.summarise.rounding import print_exponent, round_interval

__all__ = ["velocity_plot", "velocity_time_plot"]



class _VelocityView:
    """The best posterior sample's velocities, split for drawing.

    Each instrument's fitted systemic velocity (its offset) is taken off its data, so
    that every spectrograph shares one scale about zero; velocities are drawn in the
    unit of the input files (km/s where they differ); error bars include each
    instrument's fitted jitter.
    """

    def __init__(self, result):
        import astropy.units as u

        model = result.model
        if not model.has_velocities:
            raise ConfigError("this fit has no radial velocities to plot", key="figures")
        self.model = model
        self.summary = result.summary
        self.vel = vel = model.velocity_rows
        self.names = list(model.companions)
        self.phys = model.physical(best_sample(result)[None, :])
        self.parts = model.velocity_parts(self.phys)
        unit = model.observations.velocity_unit() if hasattr(
            model.observations, "velocity_unit") else None
        unit = u.Unit(unit) if unit else u.km / u.s
        self.scale = float((u.km / u.s).to(unit))
        self.unit = unit.to_string("latex_inline")
        rv = self.phys["rv"]
        self.sigma = np.sqrt(vel.err2 + rv["jitter"][0, vel.instrument] ** 2) * self.scale
        self.residual = (vel.rv - self.parts["total"][0]) * self.scale
        self.on_scale = (vel.rv - rv["offset"][0][vel.instrument]) * self.scale
        self.time = time_axis(model.observations, model.epoch_jd + vel.t)
        self.times = self.time(model.epoch_jd + vel.t)

    def groups(self):
        """(rows, body name, colour, marker, instrument label) for each data group."""
        vel = self.vel
        for owner in np.unique(vel.owner):
            body = self.model.spec.primary if owner < 0 else self.names[owner]
            colour = "C0" if owner < 0 else f"C{1 + int(owner)}"
            for j, label in enumerate(vel.labels):
                rows = (vel.owner == owner) & (vel.instrument == j)
                if np.any(rows):
                    yield rows, body, colour, INSTRUMENT_MARKERS[j % 10], label

    def curves(self, t):
        """Model velocity of the primary and of each companion with velocities at ``t``."""
        model, vel, rv = self.model, self.vel, self.phys["rv"]
        dt = t - vel.t_trend
        base = rv["slope"][0] * dt + rv["curvature"][0] * dt * dt
        reflex, own = np.zeros_like(t), {}
        for name, orbit in self.phys["companions"].items():
            shape = model.velocity_shape(name, orbit, t)[0]
            k1 = float(orbit.get("k_primary", np.zeros(1))[0])
            k2 = float(orbit.get("k_companion", np.zeros(1))[0])
            reflex -= k1 * shape
            own[name] = (k1 + k2) * shape
        out = {self.model.spec.primary: (base + reflex) * self.scale}
        for k, name in enumerate(self.names):
            if np.any(vel.owner == k):
                out[name] = (base + reflex + own[name]) * self.scale
        return out

    def period_title(self, name):
        """``NAME: P = 1059.9 +1.2 -1.1 d``, rounded as every table and report round it."""
        block = self.summary["companions"][name]["period"]
        rounded = round_interval(block, exponent=print_exponent(block))
        value = rounded.latex() if rounded is not None else r"\mathrm{undetermined}"
        return f"{name}: $P = {value}$ d"


def _velocity_legend(ax, view):
    from matplotlib.lines import Line2D

    handles = [Line2D([], [], color=colour, lw=1.0, label=body)
               for body, colour in dict((b, c) for _, b, c, _, _ in view.groups()).items()]
    # Instruments are told apart only where there are several (named by the table's
    # instrument column, or by file where a file has none).
    if len(view.vel.labels) > 1:
        handles += [Line2D([], [], color="0.3", marker=m, ls="none", ms=3, label=label)
                    for label, m in dict((lab, m) for _, _, _, m, lab in view.groups()).items()]
    ax.legend(handles=handles, loc="best", frameon=False, fontsize=6, ncol=2,
              handlelength=1.5, columnspacing=0.8)


def _errorbars(ax, x, y, err, colour, marker, gid):
    ax.errorbar(x, y, err, fmt=marker, ms=2.5, mew=0.5, lw=0.5, color=colour,
                mfc=colour, mec="k" if marker != "o" else colour, capsize=0, gid=gid)


def velocity_time_plot(result, *, width=None):
    """Radial velocities against time with the best model, and the residuals below.

    Each instrument's fitted systemic velocity is taken off its data (a trend stays);
    markers tell the instruments apart and colours the bodies (the primary, and each
    companion whose own velocities were measured). Velocities in the input's unit,
    times in the input's format and scale; error bars include the fitted jitter.

    Returns
    -------
    matplotlib.figure.Figure
    """
    import matplotlib.pyplot as plt

    view = _VelocityView(result)
    vel = view.vel
    span = float(np.ptp(vel.t)) or 1.0
    shortest = min(float(o["period"][0]) for o in view.phys["companions"].values())
    n = int(min(20000, max(2000, 60 * span / shortest)))
    t = np.linspace(vel.t.min() - 0.03 * span, vel.t.max() + 0.03 * span, n)
    years = view.time(view.model.epoch_jd + t)
    width = width or PAGE_WIDTH
    with style():
        fig, (top, bottom) = plt.subplots(2, 1, sharex=True, figsize=(width, 3.6),
                                          layout="constrained",
                                          gridspec_kw={"height_ratios": [3, 1]})
        for body, curve in view.curves(t).items():
            colour = next(c for _, b, c, _, _ in view.groups() if b == body) \
                if any(b == body for _, b, _, _, _ in view.groups()) else "C0"
            top.plot(years, curve, color=colour, lw=0.7, zorder=1, gid="rv-model")
        for rows, body, colour, marker, label in view.groups():
            _errorbars(top, view.times[rows], view.on_scale[rows], view.sigma[rows],
                       colour, marker, "rv-data")
            _errorbars(bottom, view.times[rows], view.residual[rows], view.sigma[rows],
                       colour, marker, "rv-residuals")
        bottom.axhline(0.0, color="k", lw=0.5)
        top.set_ylabel(rf"$v_r - \gamma$ [{view.unit}]")
        bottom.set_ylabel(f"O$-$C [{view.unit}]")
        bottom.set_xlabel(view.time.label)
        _velocity_legend(top, view)
    return fig


def velocity_plot(result, *, width=None):
    """Radial velocities folded on each companion's period, with residuals below.

    Each column shows the velocities with everything but that companion's signal
    (each instrument's systemic velocity, a trend, the other companions) taken off,
    in the input's unit; the best model's curves for the primary and the companion,
    and below the residuals of the full model. Phase 0 is periapsis. Companions in
    order of period; each title gives the period as the summary rounds it.

    Parameters
    ----------
    result : FitResult
    width : float, optional
        Figure width in inches; one journal column per companion up to the page width.

    Returns
    -------
    matplotlib.figure.Figure
    """
    import matplotlib.pyplot as plt

    view = _VelocityView(result)
    names = by_period(result, view.names)
    if width is None:
        width = min(COLUMN_WIDTH * len(names), PAGE_WIDTH)
    with style():
        fig, axes = plt.subplots(2, len(names), figsize=(width, 0.95 * COLUMN_WIDTH + 0.4),
                                 squeeze=False, sharex="col", layout="constrained",
                                 gridspec_kw={"height_ratios": [3, 1]})
        for k, name in enumerate(names):
            _draw_phase_column(axes[0, k], axes[1, k], view, name, first=k == 0)
    return fig


def _draw_phase_column(top, bottom, view, name, first):
    model, vel = view.model, view.vel
    k = view.names.index(name)
    orbit = {key: v[0] for key, v in view.phys["companions"][name].items()}
    total = view.parts["total"][0]
    own_signal = (vel.rv - (total - view.parts["companions"][name][0])) * view.scale
    phase = _orbital_phase(model, name, orbit, vel.t)
    for rows, body, colour, marker, label in view.groups():
        _errorbars(top, phase[rows], own_signal[rows], view.sigma[rows], colour, marker,
                   "rv-data")
        _errorbars(bottom, phase[rows], view.residual[rows], view.sigma[rows], colour,
                   marker, "rv-residuals")
    grid = np.linspace(0.0, 1.0, 400)
    curve = _phase_curve(model, name, orbit, grid) * view.scale
    if np.any(vel.owner < 0):
        top.plot(grid, -orbit["k_primary"] * curve, color="C0", lw=0.8,
                 gid="rv-model")
    if np.any(vel.owner == k):
        top.plot(grid, orbit["k_companion"] * curve, color=f"C{1 + k}",
                 lw=0.8, gid="rv-model")
    top.axhline(0.0, color="0.5", lw=0.5, ls=":")
    bottom.axhline(0.0, color="k", lw=0.5)
    top.set_title(view.period_title(name), fontsize=8)
    if first:
        top.set_ylabel(rf"$v_r - \gamma$ [{view.unit}]")
        bottom.set_ylabel(f"O$-$C [{view.unit}]")
    bottom.set_xlabel("orbital phase (0 = periapsis)")
    bottom.set_xlim(0.0, 1.0)
    _velocity_legend(top, view)


def _orbital_phase(model, name, orbit, t):
    """Fraction of the period since periapsis, in [0, 1)."""
    mean = orbit["mean_anomaly_ref"] + 2 * np.pi * (t - model.reference_epoch(name)) \
        / orbit["period"]
    return np.mod(mean / (2 * np.pi), 1.0)


def _phase_curve(model, name, orbit, phase):
    """v / K over one orbit at the given phases (periapsis at 0)."""
    fake = {key: np.atleast_1d(v) for key, v in orbit.items()}
    period = orbit["period"]
    # Times whose mean anomaly runs from 0 to 2 pi.
    t = model.reference_epoch(name) + (2 * np.pi * phase - orbit["mean_anomaly_ref"]) \
        * period / (2 * np.pi)
    return model.velocity_shape(name, fake, t)[0]

"""Radial-velocity figures: against time with the best model, and folded on each
companion's period, with residuals below."""

from __future__ import annotations

import numpy as np

from massfit.errors import ConfigError
from massfit.plot.style import COLUMN_WIDTH, INSTRUMENT_MARKERS, PAGE_WIDTH, jyear, style
from massfit.summarise.residuals import best_sample

__all__ = ["velocity_plot", "velocity_time_plot"]



class _VelocityView:
    """The best posterior sample's velocities, split for drawing.

    Data are put on the zero point of the first instrument (each instrument's fitted
    offset minus the first one's is taken off), so that every spectrograph shares one
    velocity scale; error bars include each instrument's fitted jitter.
    """

    def __init__(self, result):
        model = result.model
        if not model.has_velocities:
            raise ConfigError("this fit has no radial velocities to plot", key="figures")
        self.model = model
        self.vel = vel = model.velocity_rows
        self.names = list(model.companions)
        self.phys = model.physical(best_sample(result)[None, :])
        self.parts = model.velocity_parts(self.phys)
        rv = self.phys["rv"]
        self.offsets = rv["offset"][0]
        self.reference = float(self.offsets[0])
        self.sigma = np.sqrt(vel.err2 + rv["jitter"][0, vel.instrument] ** 2)
        self.residual = vel.rv - self.parts["total"][0]
        self.on_scale = vel.rv - (self.offsets[vel.instrument] - self.reference)
        self.years = jyear(model.epoch_jd + vel.t)

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
        base = self.reference + rv["slope"][0] * dt + rv["curvature"][0] * dt * dt
        reflex, own = np.zeros_like(t), {}
        for name, orbit in self.phys["companions"].items():
            shape = model.velocity_shape(name, orbit, t)[0]
            k1 = float(orbit.get("k_primary", np.zeros(1))[0])
            k2 = float(orbit.get("k_companion", np.zeros(1))[0])
            reflex -= k1 * shape
            own[name] = (k1 + k2) * shape
        out = {self.model.spec.primary: base + reflex}
        for k, name in enumerate(self.names):
            if np.any(vel.owner == k):
                out[name] = base + reflex + own[name]
        return out


def _velocity_legend(ax, view):
    from matplotlib.lines import Line2D

    handles = [Line2D([], [], color=colour, lw=1.0, label=body)
               for body, colour in dict((b, c) for _, b, c, _, _ in view.groups()).items()]
    if len(view.vel.labels) > 1 or view.vel.labels[0]:
        handles += [Line2D([], [], color="0.3", marker=m, ls="none", ms=3, label=label)
                    for label, m in dict((lab, m) for _, _, _, m, lab in view.groups()).items()]
    ax.legend(handles=handles, loc="best", frameon=False, fontsize=6, ncol=2,
              handlelength=1.5, columnspacing=0.8)


def _errorbars(ax, x, y, err, colour, marker, gid):
    ax.errorbar(x, y, err, fmt=marker, ms=2.5, mew=0.5, lw=0.5, color=colour,
                mfc=colour, mec="k" if marker != "o" else colour, capsize=0, gid=gid)


def velocity_time_plot(result, *, width=None):
    """Radial velocities against time with the best model, and the residuals below.

    Every instrument is put on the first one's zero point; markers tell the
    instruments apart and colours the bodies (the primary, and each companion whose
    own velocities were measured). Error bars include the fitted jitter.

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
    years = jyear(view.model.epoch_jd + t)
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
            _errorbars(top, view.years[rows], view.on_scale[rows], view.sigma[rows],
                       colour, marker, "rv-data")
            _errorbars(bottom, view.years[rows], view.residual[rows], view.sigma[rows],
                       colour, marker, "rv-residuals")
        bottom.axhline(0.0, color="k", lw=0.5)
        label = vel.labels[0]
        top.set_ylabel("radial velocity [km s$^{-1}$]"
                       + (f"\n(zero point of {label})" if len(vel.labels) > 1 else ""))
        bottom.set_ylabel("O$-$C [km s$^{-1}$]")
        bottom.set_xlabel("epoch [Julian year, TDB]")
        _velocity_legend(top, view)
    return fig


def velocity_plot(result, *, width=None):
    """Radial velocities folded on each companion's period, with residuals below.

    Each column shows the velocities with everything but that companion's signal
    (instrument offsets, trend, the other companions) taken off and the systemic
    velocity of the first instrument put back; the best model's curves for the
    primary and the companion, a dotted line at the systemic velocity, and below the
    residuals of the full model. Phase 0 is periapsis.

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
    names = view.names
    if width is None:
        width = min(COLUMN_WIDTH * len(names), PAGE_WIDTH)
    with style():
        fig, axes = plt.subplots(2, len(names), figsize=(width, 0.95 * COLUMN_WIDTH + 0.4),
                                 squeeze=False, sharex="col", layout="constrained",
                                 gridspec_kw={"height_ratios": [3, 1]})
        for k, name in enumerate(names):
            _draw_phase_column(axes[0, k], axes[1, k], view, k, name)
    return fig


def _draw_phase_column(top, bottom, view, k, name):
    model, vel = view.model, view.vel
    orbit = {key: v[0] for key, v in view.phys["companions"][name].items()}
    total = view.parts["total"][0]
    own_signal = vel.rv - (total - view.parts["companions"][name][0]) + view.reference
    phase = _orbital_phase(model, name, orbit, vel.t)
    for rows, body, colour, marker, label in view.groups():
        _errorbars(top, phase[rows], own_signal[rows], view.sigma[rows], colour, marker,
                   "rv-data")
        _errorbars(bottom, phase[rows], view.residual[rows], view.sigma[rows], colour,
                   marker, "rv-residuals")
    grid = np.linspace(0.0, 1.0, 400)
    curve = _phase_curve(model, name, orbit, grid)
    if np.any(vel.owner < 0):
        top.plot(grid, view.reference - orbit["k_primary"] * curve, color="C0", lw=0.8,
                 gid="rv-model")
    if np.any(vel.owner == k):
        top.plot(grid, view.reference + orbit["k_companion"] * curve, color=f"C{1 + k}",
                 lw=0.8, gid="rv-model")
    top.axhline(view.reference, color="0.5", lw=0.5, ls=":")
    bottom.axhline(0.0, color="k", lw=0.5)
    top.set_title(f"{name}: P = {orbit['period']:.6g} d", fontsize=8)
    if k == 0:
        top.set_ylabel("radial velocity [km s$^{-1}$]")
        bottom.set_ylabel("O$-$C [km s$^{-1}$]")
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

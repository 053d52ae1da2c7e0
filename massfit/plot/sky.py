"""Orbits on the sky: the data with their error ellipses, posterior orbits, the best
orbit, and the observed minus computed offsets under each sky panel.

Sky panels show north up and east to the left, as the sky is seen, in the data's own
kind of unit (an angle, or a length where each row carries its distance).
"""

from __future__ import annotations

import math

import numpy as np

from massfit.constants import AU_KM
from massfit.errors import ConfigError
from massfit.orbits import kepler
from massfit.plot.style import (COLUMN_WIDTH, MODE_COLOURS, PAGE_WIDTH, TIME_CMAP, by_period,
                                mode_groups, style, time_axis, time_cmap)
from massfit.summarise.residuals import best_sample

__all__ = ["orbit_plot", "error_ellipses", "SkyFrame", "observed_offsets"]


class SkyFrame:
    """How one companion's offsets are drawn: the base unit and the display unit.

    Offsets are shown in angle (arcsec based) where some rows are scaled by the
    parallax, and otherwise in length (au based): rows that carry their own distance
    (moons seen from a moving observer) are turned into lengths with it, so that
    every night is on the same scale.
    """

    def __init__(self, model, name, best_phys):
        data = model.observations.astrometry
        rows = model.rows[name]
        idx = rows.index
        self.name = name
        self.index = idx
        self.angle = bool(np.any(rows.uses_parallax))
        plx = best_phys["parallax"]
        plx_arcsec = float(plx[0]) * 1e-3 if plx is not None else np.nan
        distance = data.distance[idx]
        with np.errstate(divide="ignore"):
            to_au = np.where(data.length[idx], 1.0,
                             np.where(np.isfinite(distance), distance, 1.0 / plx_arcsec))
        # Factor from each row's own units to the base unit (arcsec or au).
        self.row_factor = to_au * plx_arcsec if self.angle else to_au

    def track_factor(self, phys, k):
        """From au to the base unit for posterior draw ``k``."""
        if self.angle:
            return float(phys["parallax"][k]) * 1e-3
        return 1.0

    @staticmethod
    def display(size, angle):
        """(factor from the base unit, unit label) that reads well at ``size``."""
        if angle:
            if size >= 1.0:
                return 1.0, "arcsec"
            if size >= 1e-3:
                return 1e3, "mas"
            return 1e6, r"$\mu$as"
        if size >= 0.02:
            return 1.0, "au"
        km = size * AU_KM
        power = 3 * max(0, math.floor(math.log10(km) / 3)) if km > 0 else 0
        return AU_KM / 10.0 ** power, (rf"$10^{{{power}}}$ km" if power else "km")


def observed_offsets(data, idx):
    """East, north and their covariance (rows' own units) for rows ``idx``."""
    polar = data.polar[idx]
    sep, pa = data.sep[idx], data.pa[idx]
    east = np.where(polar, sep * np.sin(pa), data.east[idx])
    north = np.where(polar, sep * np.cos(pa), data.north[idx])
    cov = np.zeros((len(idx), 2, 2))
    se, sn, rho = data.east_err[idx], data.north_err[idx], data.corr[idx]
    cov[:, 0, 0] = se ** 2
    cov[:, 1, 1] = sn ** 2
    cov[:, 0, 1] = cov[:, 1, 0] = rho * se * sn
    # Separation and position angle: propagate through east = s sin p, north = s cos p.
    jac = np.zeros((len(idx), 2, 2))
    jac[:, 0, 0], jac[:, 0, 1] = np.sin(pa), sep * np.cos(pa)
    jac[:, 1, 0], jac[:, 1, 1] = np.cos(pa), -sep * np.sin(pa)
    polar_cov = jac @ (np.eye(2)[None] * np.stack(
        [data.sep_err[idx] ** 2, data.pa_err[idx] ** 2], axis=1)[:, :, None]) \
        @ np.transpose(jac, (0, 2, 1))
    cov = np.where(polar[:, None, None], polar_cov, cov)
    return east, north, cov


def error_ellipses(east, north, cov, *, n_sigma=1.0, **kwargs):
    """Matplotlib Ellipse patches for offsets with 2x2 covariances (x = east)."""
    from matplotlib.patches import Ellipse

    values, vectors = np.linalg.eigh(cov)
    patches = []
    for x, y, val, vec in zip(east, north, values, vectors):
        big = vec[:, 1]
        angle = np.degrees(np.arctan2(big[1], big[0]))
        patches.append(Ellipse((x, y), 2 * n_sigma * np.sqrt(max(val[1], 0)),
                               2 * n_sigma * np.sqrt(max(val[0], 0)), angle=angle,
                               **kwargs))
    return patches


def _track_points(orbit, k, n_points=361, sight=None):
    """One orbit's track (au) on the sky; with a moving line of sight (``sight``, the
    model's), the ICRS orbit seen orthographically along the rows' mean line of sight."""
    period = orbit["period"][k]
    t = np.linspace(0.0, period, n_points)
    if sight is not None:
        from massfit.orbits.dynamics import orbit_state
        from massfit.orbits.viewing import mean_direction, plane_of

        position, _ = orbit_state(
            orbit["semi_major_axis"][k], orbit["ecc"][k], orbit["inc"][k],
            orbit["omega"][k], orbit["node"][k], 2.0 * np.pi * t / period, 0.0,
            want_velocity=False)
        return tuple(sum(v * p for v, p in zip(axis, position))
                     for axis in plane_of(mean_direction(sight)))
    east, north, _ = kepler.relative_orbit(
        t, period, orbit["ecc"][k], 0.0, orbit["semi_major_axis"][k], orbit["inc"][k],
        orbit["omega"][k], orbit["node"][k])
    return east, north


def shown_offsets(model, theta, name, frame):
    """One companion's rows as the sky panel shows them.

    On a fixed sky plane these are the observed offsets as they are. With a moving
    line of sight the panel draws the orbits seen along the rows' mean line of sight,
    while each row was seen along its own; so each row is carried over to the mean
    line of sight by the best fit's own difference:

        shown = C_mean + R(psi) (O - C_row)

    with O the observed offset, C_row the model's offset at the row (along the row's
    own line of sight, as the O-C panels use it), C_mean where the same model places
    the companion at that row seen along the mean line of sight (orthographically,
    as the tracks are drawn) and R(psi) the turn between the row's tangent-plane axes
    and the mean plane's (:func:`massfit.orbits.viewing.tangent_turn`), which turns
    the error ellipse too. A row measured from another companion (``reference_body``)
    is placed from the primary the same way: C_row is then the model's difference of
    the two bodies and C_mean the companion's own place (on a fixed plane too, where
    C_mean is its offset from the primary at the row). A row that fits the best orbit
    exactly therefore lies on the best track, its distance from the track being its
    O-C (for two-body orbits: a perturbed model's track is the osculating orbit at its
    epoch, and C_mean moves off it as the orbit turns).

    Parameters
    ----------
    model : OrbitModel
    theta : ndarray, shape (n_dim,)
        The best fit (the black track's parameters).
    name : str
    frame : SkyFrame
        The companion's units.

    Returns
    -------
    east, north : ndarray, shape (n_rows,)
        In the figure's base unit (``frame``), rows in the order of ``frame.index``.
    cov : ndarray, shape (n_rows, 2, 2)
        Their covariance.
    turn : ndarray, shape (n_rows,)
        psi per row, rad (zero on a fixed sky plane).
    """
    east, north, cov = observed_offsets(model.observations.astrometry, frame.index)
    factor = frame.row_factor
    east, north, cov = east * factor, north * factor, cov * factor[:, None, None] ** 2
    turn = np.zeros(len(frame.index))
    reference = model.rows[name].reference
    moved = (np.ones(len(turn), dtype=bool) if model.sight is not None else
             np.zeros(len(turn), dtype=bool) if reference is None else reference != "")
    if not np.any(moved):
        return east, north, cov, turn
    from massfit.orbits.viewing import mean_direction, tangent_turn

    along = None if model.sight is None else mean_direction(model.sight)
    row_e, row_n = (v[0] * factor for v in model.predicted_offsets(theta, name))
    place_e, place_n = (v[0] * factor
                        for v in model.offsets_from_primary(theta, name, along=along))
    d_e, d_n = east - row_e, north - row_n
    if along is not None:
        turn = tangent_turn(model.rows[name].sight, along)
        cos, sin = np.cos(turn), np.sin(turn)
        d_e, d_n = cos * d_e - sin * d_n, sin * d_e + cos * d_n
        rotation = np.stack([np.stack([cos, -sin], axis=-1),
                             np.stack([sin, cos], axis=-1)], axis=1)
        cov = rotation @ cov @ np.transpose(rotation, (0, 2, 1))
    return (np.where(moved, place_e + d_e, east), np.where(moved, place_n + d_n, north),
            cov, turn)


def _layout(n, residuals):
    cols = 1 if n == 1 else 2
    blocks = int(np.ceil(n / cols))
    per_block = [3.0, 0.75, 0.75] if residuals else [3.0]
    return cols, blocks, per_block


def orbit_plot(result, *, companions=None, n_tracks=40, seed=0, residuals=True,
               width=None):
    """Sky-plane orbit of each companion: data, posterior tracks and the best orbit.

    One panel per companion, north up and east to the left, the primary marked at
    the origin. The data carry their 1-sigma error ellipses (the east-north
    correlation included; separation/position-angle rows propagated into east and
    north) and are coloured by time; grey lines are orbits drawn from the posterior,
    the black line the best posterior sample, with an arrow for the sense of motion.
    Where a nested fit weighed several modes, each posterior orbit takes its mode's
    colour (those of the corner plot), named in the legend. Under each sky panel,
    the observed minus the best model offsets against time.

    Parameters
    ----------
    result : FitResult
    companions : list of str, optional
        Companions to draw (all by default).
    n_tracks : int
        Posterior orbits drawn per companion.
    seed : int
        Seed of the choice of posterior samples.
    residuals : bool
        Add the residual panels.
    width : float, optional
        Figure width, inches (a column for one companion, the page for more).

    Returns
    -------
    matplotlib.figure.Figure
    """
    import matplotlib.pyplot as plt
    from matplotlib.colors import Normalize

    model = result.model
    names = by_period(result, model.companions) if companions is None else list(companions)
    for name in names:
        if name not in model.companions:
            raise ConfigError(f"no companion {name!r} in this fit; it has "
                              f"{', '.join(model.companions)}", key="companions")
    chain = result.chain
    rng = np.random.default_rng(seed)
    picks = rng.choice(len(chain.samples), size=min(n_tracks, len(chain.samples)),
                       replace=False)
    theta_best = best_sample(result)
    draws = model.physical(chain.samples[picks])
    groups = mode_groups(result)
    track_colours = np.full(len(picks), "0.55", dtype=object)
    for j, mask in enumerate(groups.values()):
        track_colours[np.asarray(mask)[picks]] = MODE_COLOURS[j % len(MODE_COLOURS)]
    best = model.physical(theta_best[None, :])
    jd = model.observations.astrometry.time.tdb.jd
    axis = time_axis(model.observations, jd)
    times = axis(jd)
    norm = Normalize(times.min(), times.max())
    cols, blocks, per_block = _layout(len(names), residuals)
    width = width or (COLUMN_WIDTH if cols == 1 else PAGE_WIDTH)
    height = blocks * width / cols * sum(per_block) / 3.0 * 0.95 + 0.3
    with style():
        fig = plt.figure(figsize=(width, height), layout="constrained")
        grid = fig.add_gridspec(blocks * len(per_block), cols,
                                height_ratios=per_block * blocks)
        for k, name in enumerate(names):
            block, col = divmod(k, cols)
            row0 = block * len(per_block)
            sky = fig.add_subplot(grid[row0, col])
            res_axes = ([fig.add_subplot(grid[row0 + 1, col]),
                         fig.add_subplot(grid[row0 + 2, col])] if residuals else [])
            if res_axes:
                res_axes[0].sharex(res_axes[1])
                res_axes[1].set_xlabel(axis.label)
            _draw_companion(sky, res_axes, model, name, draws, best, theta_best,
                            times, norm, track_colours)
        _orbit_keys(fig, norm, axis.label, len(picks), groups)
    return fig


def _orbit_keys(fig, norm, time_label, n_tracks, groups=None):
    """The colour bar of time above the panels and the legend of what is drawn below."""
    import matplotlib.pyplot as plt
    from matplotlib.lines import Line2D

    mappable = plt.cm.ScalarMappable(norm=norm, cmap=TIME_CMAP)
    bar = fig.colorbar(mappable, ax=fig.axes, location="top", shrink=0.6,
                       aspect=40, pad=0.01)
    bar.set_label(f"epoch of the data: {time_label}")
    bar.ax.tick_params(labelsize=7)
    bar.formatter.set_useOffset(False)
    handles = [Line2D([], [], color=time_cmap()(0.5), marker="o", ms=3, ls="none",
                      label=r"data (1$\sigma$ ellipse)"),
               Line2D([], [], color="k", lw=0.9, label="best orbit")]
    if n_tracks and groups:
        handles.extend(Line2D([], [], color=MODE_COLOURS[j % len(MODE_COLOURS)], lw=0.8,
                              label=f"posterior orbits, {label}")
                       for j, label in enumerate(groups))
    elif n_tracks:
        handles.append(Line2D([], [], color="0.55", lw=0.6,
                              label=f"{n_tracks} orbits from the posterior"))
    handles.append(Line2D([], [], color="k", marker="+", ms=6, ls="none", label="primary"))
    wide = fig.get_size_inches()[0] > COLUMN_WIDTH  # one row on a page, two in a column
    fig.legend(handles=handles, loc="outside lower center",
               ncol=len(handles) if wide and not groups else 2,
               frameon=False, fontsize=7, handlelength=1.6, columnspacing=1.2)


def _draw_companion(sky, res_axes, model, name, draws, best, theta_best, times, norm,
                    track_colours):
    data = model.observations.astrometry
    frame = SkyFrame(model, name, best)
    idx = frame.index
    east, north, cov = observed_offsets(data, idx)
    east, north = east * frame.row_factor, north * frame.row_factor
    cov = cov * frame.row_factor[:, None, None] ** 2
    shown_e, shown_n, shown_cov, turn = shown_offsets(model, theta_best, name, frame)
    orbit_b = best["companions"][name]
    tb_e, tb_n = (v * frame.track_factor(best, 0)
                  for v in _track_points(orbit_b, 0, sight=model.sight))
    size = float(np.max(np.abs(np.concatenate([shown_e, shown_n, tb_e, tb_n]))))
    factor, unit = SkyFrame.display(size, frame.angle)
    orbit_d = draws["companions"][name]
    for k in range(len(orbit_d["period"])):
        te, tn = _track_points(orbit_d, k, sight=model.sight)
        scale = frame.track_factor(draws, k) * factor
        grey = track_colours[k] == "0.55"
        sky.plot(te * scale, tn * scale, color=track_colours[k], lw=0.4 if grey else 0.5,
                 alpha=0.35 if grey else 0.6, zorder=1, gid="posterior-track")
    sky.plot(tb_e * factor, tb_n * factor, color="k", lw=0.9, zorder=3, gid="best-orbit",
             label="best orbit")
    _motion_arrow(sky, tb_e * factor, tb_n * factor)
    colours = time_cmap()(norm(times[idx]))
    from matplotlib.collections import PatchCollection

    patches = error_ellipses(shown_e * factor, shown_n * factor, shown_cov * factor ** 2)
    sky.add_collection(PatchCollection(patches, facecolor="none", edgecolor=colours,
                                       linewidth=0.5, zorder=4, gid="error-ellipses"))
    sky.scatter(shown_e * factor, shown_n * factor, s=5, c=times[idx], cmap=TIME_CMAP,
                norm=norm, zorder=5, linewidths=0, gid="data")
    sky.plot([0], [0], marker="+", color="k", ms=7, mew=1.0, ls="none", zorder=6,
             gid="primary")
    sky.set_aspect("equal", adjustable="datalim")
    sky.invert_xaxis()  # east to the left, as the sky is seen
    if frame.angle:
        sky.set_xlabel(rf"$\Delta\alpha\cos\delta$ (east) [{unit}]")
        sky.set_ylabel(rf"$\Delta\delta$ (north) [{unit}]")
    else:  # lengths in the sky plane, from each row's own distance
        sky.set_xlabel(f"projected offset east [{unit}]")
        sky.set_ylabel(f"projected offset north [{unit}]")
    sky.text(0.03, 0.97, name, transform=sky.transAxes, ha="left", va="top",
             fontsize=8, fontweight="bold", gid="companion-name")
    note = _moved_note(model, name, turn)
    if note:
        sky.text(0.97, 0.03, note, transform=sky.transAxes, ha="right", va="bottom",
                 fontsize=6, color="0.3", gid="sight-note", linespacing=1.1)
    sky.massfit_unit = unit
    if res_axes:
        panels = (_polar_residuals(model, name, theta_best, frame)
                  if np.all(data.polar[idx]) else
                  _offset_residuals(model, name, theta_best, frame, east, north, cov))
        for ax, panel in zip(res_axes, panels):
            _draw_residual_panel(ax, times[idx], norm, *panel)
        res_axes[0].tick_params(labelbottom=False)


def _moved_note(model, name, turn):
    """What :func:`shown_offsets` did to the points of one companion, in words."""
    lines = []
    if model.sight is not None:
        largest = float(np.degrees(np.max(np.abs(turn))))
        lines = ["orbits as seen along the mean line of sight;",
                 "each point moved there by the best orbit",
                 f"(O$-$C kept, turned by up to {largest:.2g}$^\\circ$)"]
    reference = model.rows[name].reference
    if reference is not None and np.any(reference != ""):
        others = ", ".join(np.unique(reference[reference != ""]))
        lines.append(f"offsets from {others}: placed from the primary by the best orbit")
    return "\n".join(lines)


def _motion_arrow(ax, east, north):
    k = len(east) // 8
    ax.annotate("", xy=(east[k + 3], north[k + 3]), xytext=(east[k], north[k]),
                arrowprops={"arrowstyle": "-|>", "color": "k", "lw": 0.8,
                            "mutation_scale": 8}, zorder=3)


def _offset_residuals(model, name, theta_best, frame, east, north, cov):
    """(word, O-C, error, unit) in east and in north, in a unit that reads well."""
    pe, pn = (v[0] * frame.row_factor for v in model.predicted_offsets(theta_best, name))
    errors = np.sqrt(np.stack([cov[:, 0, 0], cov[:, 1, 1]]))
    factor, unit = SkyFrame.display(float(np.median(errors)) * 3, frame.angle)
    return (("east", (east - pe) * factor, errors[0] * factor, unit),
            ("north", (north - pn) * factor, errors[1] * factor, unit))


def _polar_residuals(model, name, theta_best, frame):
    """(word, O-C, error, unit) in separation and in position angle (degrees), for a
    companion given as separation and position angle."""
    data = model.observations.astrometry
    idx = frame.index
    pe, pn = (v[0] for v in model.predicted_offsets(theta_best, name))
    d_sep = (data.sep[idx] - np.hypot(pe, pn)) * frame.row_factor
    sep_err = data.sep_err[idx] * frame.row_factor
    factor, unit = SkyFrame.display(float(np.median(sep_err)) * 3, frame.angle)
    d_pa = np.mod(data.pa[idx] - np.arctan2(pe, pn) + np.pi, 2 * np.pi) - np.pi
    return (("sep", d_sep * factor, sep_err * factor, unit),
            ("PA", np.degrees(d_pa), np.degrees(data.pa_err[idx]), "deg"))


def _draw_residual_panel(ax, times, norm, word, resid, err, unit):
    ax.errorbar(times, resid, yerr=err, fmt="none", ecolor="0.7", elinewidth=0.5, zorder=1)
    ax.scatter(times, resid, s=5, c=times, cmap=TIME_CMAP, norm=norm, linewidths=0,
               zorder=2, gid=f"residuals-{word}")
    ax.axhline(0.0, color="k", lw=0.5, zorder=0)
    ax.set_ylabel(f"O$-$C {word}\n[{unit}]", fontsize=7)

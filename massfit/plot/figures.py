"""Figures of a fit, ready for a paper.

Each function takes a :class:`~massfit.result.fit_result.FitResult` and returns a matplotlib
Figure sized for a journal: one column (3.5 in) or the full page width (7.1 in), fonts
of 7-8 pt, vector output when saved as PDF. Sky plots show north up and east to the
left, as the sky is seen, with the data's own kind of unit (an angle, or a length where
each row carries its distance).

Figures: :func:`corner_plot`, :func:`orbit_plot`, :func:`residual_plot`,
:func:`periodogram_plot`, :func:`velocity_plot` (radial velocities against phase) and
:func:`velocity_time_plot` (against time); :data:`FIGURES` maps the file stems used in
an output folder to them, and :func:`save_figure` writes one figure in several formats.
"""

from __future__ import annotations

import math
from contextlib import contextmanager

import astropy.units as u
import numpy as np

from massfit.orbits import kepler
from massfit.constants import AU_KM
from massfit.summarise.residuals import FAP_THRESHOLD, astrometric_residuals, best_sample, residual_periodogram
from massfit.errors import ConfigError
from massfit.summarise.derived import MASS_UNIT_LABELS, best_mass_unit, interval
from massfit.summarise.quantities import COMPANION, MASS_UNIT_ASTROPY, MASS_UNIT_KEYS
from massfit.summarise.rounding import round_interval

__all__ = ["corner_plot", "orbit_plot", "residual_plot", "periodogram_plot", "velocity_plot",
           "velocity_time_plot",
           "save_figure", "FIGURES", "COLUMN_WIDTH", "PAGE_WIDTH", "STYLE"]

#: Width of one column of a two-column journal page, inches (ApJ, A&A and MNRAS all
#: lie within 3.3-3.5 in; common practice), and of the full page.
COLUMN_WIDTH = 3.5
PAGE_WIDTH = 7.1

#: Matplotlib settings for every massfit figure: small but readable fonts, no offset
#: tick labels (a reader must not have to add "+4.1153" in their head), TrueType fonts
#: embedded in PDF so journals' checks pass.
STYLE = {
    "font.size": 8, "axes.labelsize": 8, "axes.titlesize": 8, "xtick.labelsize": 7,
    "ytick.labelsize": 7, "legend.fontsize": 7, "axes.formatter.useoffset": False,
    "axes.linewidth": 0.6, "xtick.major.width": 0.6, "ytick.major.width": 0.6,
    "xtick.direction": "in", "ytick.direction": "in", "xtick.top": True,
    "ytick.right": True, "pdf.fonttype": 42, "ps.fonttype": 42,
    "mathtext.fontset": "dejavusans", "savefig.dpi": 300,
}

_TIME_CMAP = "viridis"
_MASS_SAMPLES = MASS_UNIT_KEYS
_MASS_ASTROPY = MASS_UNIT_ASTROPY
# Companion quantities a corner plot can show: symbol, unit (LaTeX), astropy unit; from the
# one table of quantities (summarise/quantities.py).
_COMPANION_QUANTITIES = {key: (d.symbol, d.unit_latex, d.unit) for key, d in COMPANION.items()
                         if key != "periapsis_time"}
DEFAULT_COMPANION_QUANTITIES = ("period", "semi_major_axis", "eccentricity", "inclination")


@contextmanager
def style():
    """Matplotlib settings of massfit's figures, for a ``with`` block."""
    import matplotlib as mpl

    # Only massfit's own keys are set and restored: plt.rc_context would also restore
    # 'interactive', which a notebook's inline backend sets on first use, and every
    # later figure would then stay hidden.
    saved = {key: mpl.rcParams[key] for key in STYLE}
    mpl.rcParams.update(STYLE)
    try:
        yield
    finally:
        mpl.rcParams.update(saved)


def save_figure(fig, stem, formats=("png", "pdf")) -> list:
    """Write ``fig`` as ``stem.png``, ``stem.pdf`` ...; returns the paths written.

    The bounding box is tightened so that nothing (labels, colour bars) is clipped.
    """
    from pathlib import Path

    paths = []
    for ext in formats:
        path = Path(f"{stem}.{ext}")
        fig.savefig(path, bbox_inches="tight", pad_inches=0.03,
                    dpi=STYLE["savefig.dpi"] if ext == "png" else None)
        paths.append(path)
    return paths


# ------------------------------------------------------------------ corner plot
class _Column:
    """One corner column: values, a symbol and unit, and how its axis reads.

    A narrow posterior far from zero is drawn as the offset from its rounded median
    (the number the value list prints), in units of a power of ten, so that tick
    labels stay short; the axis label then reads ``Delta P [10^-7 d]``.
    """

    def __init__(self, key, values, symbol, unit, astropy_unit):
        self.key = key
        self.values = np.asarray(values, dtype=float)
        self.symbol = symbol
        self.unit = unit
        self.astropy_unit = astropy_unit
        self.rounded = round_interval(interval(self.values, ""))
        self.reference, self.power = _axis_form(self.values, self.rounded)

    def plotted(self, x):
        return (np.asarray(x, dtype=float) - self.reference) / 10.0 ** self.power

    def label(self, two_lines=False):
        name = rf"\Delta {self.symbol}" if self.reference != 0 else self.symbol
        scale = rf"10^{{{self.power}}}" if self.power else ""
        unit = rf"{scale}\,{self.unit}" if scale and self.unit else (scale or self.unit)
        return rf"${name}$" + (("\n" if two_lines else " ") + rf"[${unit}$]" if unit else "")

    def value_text(self):
        if self.rounded is None:
            return rf"${self.symbol}$ undetermined"
        unit = rf"\,{self.unit}" if self.unit else ""
        return rf"${self.symbol} = {self.rounded.latex()}{unit}$"

    def truth(self, value):
        if value is None:
            return None
        if isinstance(value, u.Quantity):
            value = value.to_value(self.astropy_unit)
        return float(self.plotted(value))


def _axis_form(values, rounded):
    """(reference, power of ten) so that the axis reads in a few short digits."""
    finite = values[np.isfinite(values)]
    if finite.size == 0 or rounded is None:
        return 0.0, 0
    lo, med, hi = np.percentile(finite, [2.275, 50.0, 97.725])
    width = hi - lo
    if width <= 0:
        return 0.0, 0
    if med != 0 and width / abs(med) < 1e-3:
        # Offset from the printed median, in units of the posterior's own width.
        reference = float(rounded.median) * 10.0 ** rounded.exponent
        return reference, math.floor(math.log10(width))
    size = max(abs(lo), abs(hi))
    magnitude = math.floor(math.log10(size)) if size > 0 else 0
    if magnitude >= 4 or magnitude <= -3:
        return 0.0, magnitude
    return 0.0, 0


def _corner_columns(result, parameters, mass_unit):
    samples = result.samples
    columns = []
    for key in parameters:
        if key == "mass":
            label = "kg" if mass_unit == "kg" else MASS_UNIT_LABELS[mass_unit]
            columns.append(_Column(key, samples[_MASS_SAMPLES[mass_unit]], "M",
                                   r"\mathrm{kg}" if mass_unit == "kg" else label,
                                   _MASS_ASTROPY[mass_unit]))
        elif key == "gm":
            columns.append(_Column(key, samples["central_gm"], "GM",
                                   r"\mathrm{km^3\,s^{-2}}", u.km ** 3 / u.s ** 2))
        elif key == "parallax":
            if "parallax" not in samples:
                raise ConfigError("this fit has no sampled parallax to plot",
                                  key="parameters")
            columns.append(_Column(key, samples["parallax"], r"\varpi", r"\mathrm{mas}",
                                   u.mas))
        else:
            body, _, quantity = key.rpartition(".")
            comps = samples["companions"]
            if body not in comps or quantity not in _COMPANION_QUANTITIES \
                    or quantity not in comps[body]:
                raise ConfigError(
                    f"unknown corner parameter {key!r}; accepted: mass, gm, parallax, "
                    f"or BODY.QUANTITY with BODY one of {', '.join(comps)} and QUANTITY "
                    f"one of {', '.join(_COMPANION_QUANTITIES)}", key="parameters")
            symbol, unit, unit_astropy = _COMPANION_QUANTITIES[quantity]
            columns.append(_Column(key, comps[body][quantity],
                                   rf"{symbol}_{{{math_name(body)}}}", unit, unit_astropy))
    return columns


def math_name(name: str) -> str:
    """A body name as upright text inside math text (``Mirren-b`` keeps its hyphen)."""
    special = {c: "\\" + c for c in "_$^{}#%&"}
    return r"\text{" + "".join(special.get(c, c) for c in name) + "}"


def default_corner_parameters(result, companions=None, quantities=None) -> list:
    """The corner plot's default parameters: mass, GM, parallax, then per companion."""
    names = list(result.samples["companions"]) if companions is None else list(companions)
    if quantities is None and result.model.velocity_only:
        quantities = ("period", "eccentricity", "rv_semi_amplitude",
                      "rv_semi_amplitude_companion")
    elif quantities is None:
        # Beyond two companions P, a, e and i of each no longer fit on a page.
        # A companion mass that was sampled (a double-lined binary) is shown too.
        quantities = DEFAULT_COMPANION_QUANTITIES + ("mass",) if len(names) <= 2 else (
            "period", "semi_major_axis")
    # Velocities alone may leave the central mass undetermined: no column for it.
    out = ["mass", "gm"] if "central_mass_solar" in result.samples else []
    out += ["parallax"] if "parallax" in result.samples else []
    comps = result.samples["companions"]
    return out + [f"{name}.{q}" for name in names for q in quantities if q in comps[name]]


def corner_plot(result, *, parameters=None, mass_unit=None, companions=None,
                quantities=None, truths=None, quantiles=(0.15865, 0.5, 0.84135),
                titles=None, width=None, corner_kwargs=None):
    """Corner plot of the central mass, GM, the parallax and the companions' elements.

    Parameters
    ----------
    result : FitResult
    parameters : list of str, optional
        What to show, in order: ``mass``, ``gm``, ``parallax`` and
        ``BODY.QUANTITY`` with QUANTITY one of ``period``, ``semi_major_axis``,
        ``semi_major_axis_km``, ``semi_major_axis_angle``, ``eccentricity``,
        ``inclination``, ``periapsis_argument``, ``ascending_node``, ``mass``. By
        default the mass, GM, the parallax (where sampled) and each companion's
        ``quantities``, leaving out any that did not vary (a fixed parallax or
        mass); a parameter named here that did not vary is an error.
    mass_unit : {"Msun", "Mjup", "Mearth", "kg"}, optional
        Unit of the central mass; by default the one that reads best.
    companions, quantities : list of str, optional
        Companions and quantities of the default parameter list (all companions;
        period, semi-major axis, eccentricity and inclination for up to two
        companions, period and semi-major axis for more).
    truths : dict, optional
        Parameter name -> true value, marked in the plot. A Quantity is converted to
        the axis's unit; a plain number is taken in it (the mass in ``mass_unit``,
        GM in km^3/s^2, the parallax in mas, periods in d, a in au, angles in deg).
    quantiles : sequence of float, optional
        Quantiles marked on the 1-D histograms (default: the median and the 68.27 %
        interval); ``()`` for none.
    titles : bool, optional
        Values above the diagonal; by default for up to five parameters, and a
        block of values in the empty upper triangle beyond that.
    width : float, optional
        Figure width in inches; by default one journal column for up to three
        parameters, the page width up to ten, and 0.6 in per parameter beyond.
    corner_kwargs : dict, optional
        Passed to :func:`corner.corner` last (overrides the choices above).

    Returns
    -------
    matplotlib.figure.Figure
    """
    import corner
    import matplotlib.pyplot as plt


    if mass_unit is None:
        mass_unit = (best_mass_unit(float(np.median(result.samples["central_mass_solar"])))
                     if "central_mass_solar" in result.samples else "Msun")
    if mass_unit not in _MASS_SAMPLES:
        raise ConfigError(f"unknown mass unit {mass_unit!r}; accepted: "
                          f"{', '.join(_MASS_SAMPLES)}", key="mass_unit")
    chosen = parameters
    if parameters is None:
        parameters = default_corner_parameters(result, companions, quantities)
    columns = _corner_columns(result, parameters, mass_unit)
    # A fixed quantity (a fixed parallax or companion mass) has no panel to fill.
    fixed = [c.key for c in columns if not np.ptp(c.plotted(c.values)) > 0]
    if fixed and chosen is not None:
        raise ConfigError(f"{', '.join(fixed)} did not vary in this fit (fixed or without "
                          f"spread): a corner panel needs samples that vary",
                          key="parameters")
    columns = [c for c in columns if c.key not in fixed]
    parameters = [c.key for c in columns]
    if not columns:
        raise ConfigError("nothing in this fit varies: no corner plot to draw",
                          key="parameters")
    k = len(columns)
    if width is None:
        width = COLUMN_WIDTH if k <= 3 else (PAGE_WIDTH if k <= 10 else 0.6 * k)
    if truths:
        unknown = set(truths) - set(parameters)
        if unknown:
            raise ConfigError(f"truths given for parameters not shown: "
                              f"{', '.join(sorted(unknown))}", key="truths")
    show_titles = k <= 5 if titles is None else bool(titles)
    data = np.column_stack([c.plotted(c.values) for c in columns])
    with style():
        fig, _ = plt.subplots(k, k, figsize=(width, width))
        options = dict(
            labels=[c.label(two_lines=k > 5) for c in columns], quantiles=list(quantiles),
            show_titles=False, max_n_ticks=3, bins=30, smooth=1.0,
            levels=(1 - np.exp(-0.5), 1 - np.exp(-2.0)), plot_datapoints=True,
            data_kwargs={"ms": 1.0, "alpha": 0.1}, fill_contours=True,
            label_kwargs={"fontsize": 8 if k <= 10 else 7},
            hist_kwargs={"lw": 0.8}, contour_kwargs={"linewidths": 0.6},
            truth_color="C3", fig=fig)
        if truths:
            options["truths"] = [c.truth(truths.get(c.key)) for c in columns]
        options.update(corner_kwargs or {})
        corner.corner(data, **options)
        _tidy_corner(fig, columns, width, show_titles)
    fig.massfit_parameters = list(parameters)
    return fig


def _tidy_corner(fig, columns, width, show_titles):
    k = len(columns)
    axes = np.array(fig.axes).reshape(k, k)
    margin_left, margin_bottom = 0.78, 0.7  # inches for tick labels and axis labels
    top = 0.28 if show_titles else 0.08
    fig.subplots_adjust(left=margin_left / width, bottom=margin_bottom / width,
                        right=1 - 0.08 / width, top=1 - top / width,
                        wspace=0.06, hspace=0.06)
    panel = (width - margin_left - 0.08) / k
    tick_size = 7 if panel > 0.5 else 6
    for ax in axes.flat:
        ax.tick_params(labelsize=tick_size, length=2.5, width=0.5, direction="in",
                       top=False, right=False)
        for spine in ax.spines.values():
            spine.set_linewidth(0.5)
    for ax in axes[-1, :]:
        ax.xaxis.set_label_coords(0.5, -0.4 / panel)
    for ax in axes[1:, 0]:
        ax.yaxis.set_label_coords(-0.45 / panel, 0.5)
    if show_titles:
        for c, column in enumerate(columns):
            axes[c, c].set_title(column.value_text(), fontsize=7, pad=3)
    elif k >= 3:
        # The upper triangle is empty: list the values there.
        text = "\n".join(column.value_text() for column in columns)
        if any(column.reference != 0 for column in columns):
            text += "\n" + r"$\Delta$: offset from the median above"
        fig.text(1 - 0.15 / width, 1 - 0.15 / width, text, ha="right", va="top",
                 fontsize=8 if k <= 10 else 9, linespacing=1.5)


# --------------------------------------------------------------------- sky frame
class _SkyFrame:
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


def _observed(data, idx):
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
    model's), the ICRS orbit seen along the rows' mean line of sight."""
    period = orbit["period"][k]
    t = np.linspace(0.0, period, n_points)
    if sight is not None:
        from massfit.orbits.dynamics import orbit_state
        from massfit.orbits.viewing import mean_direction, sky_basis

        toward = mean_direction(sight)
        _, east_vec, north_vec = (v[0] for v in sky_basis(
            np.arctan2(toward[1], toward[0]), np.arcsin(toward[2])))
        position, _ = orbit_state(
            orbit["semi_major_axis"][k], orbit["ecc"][k], orbit["inc"][k],
            orbit["omega"][k], orbit["node"][k], 2.0 * np.pi * t / period, 0.0,
            want_velocity=False)
        return (sum(v * p for v, p in zip(east_vec, position)),
                sum(v * p for v, p in zip(north_vec, position)))
    east, north, _ = kepler.relative_orbit(
        t, period, orbit["ecc"][k], 0.0, orbit["semi_major_axis"][k], orbit["inc"][k],
        orbit["omega"][k], orbit["node"][k])
    return east, north


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
    Under each sky panel, the observed minus the best model offsets against time.

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
    names = list(model.companions) if companions is None else list(companions)
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
    best = model.physical(theta_best[None, :])
    data = model.observations.astrometry
    years = data.time.tdb.jyear
    norm = Normalize(years.min(), years.max())
    cols, blocks, per_block = _layout(len(names), residuals)
    width = width or (COLUMN_WIDTH if cols == 1 else PAGE_WIDTH)
    panel = width / cols
    height = blocks * panel * sum(per_block) / 3.0 * 0.95
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
            _draw_companion(sky, res_axes, model, name, draws, best, theta_best,
                            years, norm)
        mappable = plt.cm.ScalarMappable(norm=norm, cmap=_TIME_CMAP)
        bar = fig.colorbar(mappable, ax=fig.axes, location="top", shrink=0.6,
                           aspect=40, pad=0.01)
        bar.set_label("epoch [Julian year, TDB]")
        bar.ax.tick_params(labelsize=7)
        bar.formatter.set_useOffset(False)
    return fig


def _draw_companion(sky, res_axes, model, name, draws, best, theta_best, years, norm):
    data = model.observations.astrometry
    frame = _SkyFrame(model, name, best)
    idx = frame.index
    east, north, cov = _observed(data, idx)
    east, north = east * frame.row_factor, north * frame.row_factor
    cov = cov * frame.row_factor[:, None, None] ** 2
    orbit_b = best["companions"][name]
    tb_e, tb_n = (v * frame.track_factor(best, 0)
                  for v in _track_points(orbit_b, 0, sight=model.sight))
    size = float(np.max(np.abs(np.concatenate([east, north, tb_e, tb_n]))))
    factor, unit = _SkyFrame.display(size, frame.angle)
    orbit_d = draws["companions"][name]
    for k in range(len(orbit_d["period"])):
        te, tn = _track_points(orbit_d, k, sight=model.sight)
        scale = frame.track_factor(draws, k) * factor
        sky.plot(te * scale, tn * scale, color="0.55", lw=0.4, alpha=0.35, zorder=1,
                 gid="posterior-track")
    sky.plot(tb_e * factor, tb_n * factor, color="k", lw=0.9, zorder=3, gid="best-orbit",
             label="best orbit")
    _motion_arrow(sky, tb_e * factor, tb_n * factor)
    colours = _cmap()(norm(years[idx]))
    from matplotlib.collections import PatchCollection

    patches = error_ellipses(east * factor, north * factor, cov * factor ** 2)
    sky.add_collection(PatchCollection(patches, facecolor="none", edgecolor=colours,
                                       linewidth=0.5, zorder=4, gid="error-ellipses"))
    sky.scatter(east * factor, north * factor, s=5, c=years[idx], cmap=_TIME_CMAP,
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
    if model.sight is not None:
        # Each row is seen from its own direction; the track from the mean one.
        sky.text(0.97, 0.03, "orbit as seen along the mean line of sight",
                 transform=sky.transAxes, ha="right", va="bottom", fontsize=6,
                 color="0.3", gid="sight-note")
    sky.massfit_unit = unit
    if res_axes:
        _draw_offsets_residuals(res_axes, model, name, theta_best, frame, east, north,
                                cov, years[idx], norm)


def _motion_arrow(ax, east, north):
    k = len(east) // 8
    ax.annotate("", xy=(east[k + 3], north[k + 3]), xytext=(east[k], north[k]),
                arrowprops={"arrowstyle": "-|>", "color": "k", "lw": 0.8,
                            "mutation_scale": 8}, zorder=3)


def _draw_offsets_residuals(axes, model, name, theta_best, frame, east, north, cov,
                            years, norm):
    pe, pn = (v[0] * frame.row_factor for v in model.predicted_offsets(theta_best, name))
    errors = np.sqrt(np.stack([cov[:, 0, 0], cov[:, 1, 1]]))
    typical = float(np.median(errors)) * 3
    factor, unit = _SkyFrame.display(typical, frame.angle)
    for ax, resid, err, word in ((axes[0], east - pe, errors[0], "east"),
                                 (axes[1], north - pn, errors[1], "north")):
        ax.errorbar(years, resid * factor, yerr=err * factor, fmt="none", ecolor="0.7",
                    elinewidth=0.5, zorder=1)
        ax.scatter(years, resid * factor, s=5, c=years, cmap=_TIME_CMAP, norm=norm,
                   linewidths=0, zorder=2, gid="residuals")
        ax.axhline(0.0, color="k", lw=0.5, zorder=0)
        ax.set_ylabel(f"O$-$C {word}\n[{unit}]", fontsize=7)
    axes[0].tick_params(labelbottom=False)
    axes[1].set_xlabel("epoch [Julian year]")


def _cmap():
    import matplotlib

    return matplotlib.colormaps[_TIME_CMAP]


# --------------------------------------------------------------- residual plots
_COMPONENT_STYLE = {"east": ("o", "C0", "east"), "north": ("s", "C1", "north"),
                    "sep": ("D", "C2", "separation"), "pa": ("^", "C3", "position angle")}


def residual_plot(result, *, companions=None, width=None):
    """Normalised residuals (observed - model) / error against time, per companion.

    Bands mark one and three sigma; each panel gives the companion's chi^2 per
    measurement.

    Returns
    -------
    matplotlib.figure.Figure
    """
    import matplotlib.pyplot as plt

    residuals = _all_residuals(result, companions)
    width = width or COLUMN_WIDTH
    with style():
        fig, axes = plt.subplots(len(residuals), 1, sharex=True, squeeze=False,
                                 figsize=(width, 0.3 + 1.15 * len(residuals)),
                                 layout="constrained")
        for ax, (name, res) in zip(axes[:, 0], residuals.items()):
            years = res.time.jyear
            for j, comp in enumerate(np.unique(res.component)):
                marker, colour, word = _COMPONENT_STYLE.get(
                    comp, (_INSTRUMENT_MARKERS[j % 10], "C4", comp or "velocity"))
                pick = res.component == comp
                ax.scatter(years[pick], res.normalised[pick], s=6, marker=marker,
                           color=colour, linewidths=0, label=word, gid=f"residuals-{comp}")
            for level, shade in ((3, "0.93"), (1, "0.85")):
                ax.axhspan(-level, level, color=shade, zorder=0, lw=0)
            ax.axhline(0, color="k", lw=0.5)
            ax.set_ylabel(r"(O$-$C)/$\sigma$")
            chi2 = res.chi2 / max(len(res.normalised), 1)
            ax.text(0.01, 0.95, rf"{name}: $\chi^2/N = {chi2:.2f}$", transform=ax.transAxes,
                    ha="left", va="top", fontsize=7)
            lim = max(4.0, 1.1 * float(np.max(np.abs(res.normalised))))
            # Headroom above the points for the label and the legend.
            ax.set_ylim(-lim, 1.8 * lim)
        for ax in axes[:, 0]:
            ax.legend(loc="upper right", ncol=2, frameon=False, fontsize=6,
                      handletextpad=0.2, columnspacing=0.8)
        axes[-1, 0].set_xlabel("epoch [Julian year, TDB]")
    return fig


def equator_residual_plot(result, *, companions=None, width=None):
    """Each moon's O-C against time, along and across its planet's equator.

    For fits with a moving line of sight. Where the primary's pole is given
    (``ViewingSpec.pole_ra``/``pole_dec``) the residuals of every row are turned by
    that row's position angle P of the pole: "along the equator" points to the
    planet's east limb, (cos P, -sin P) in (east, north), "towards the pole" is
    (sin P, cos P); without a pole, east and north. Residuals of the best posterior
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
    names = _chosen(list(model.companions), companions)
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
            frame = _SkyFrame(model, name, best)
            east, north, cov = _observed(model.observations.astrometry, frame.index)
            pe, pn = (v[0] for v in model.predicted_offsets(theta, name))
            d_e, d_n = (east - pe) * frame.row_factor, (north - pn) * frame.row_factor
            err = np.sqrt(0.5 * (cov[:, 0, 0] + cov[:, 1, 1])) * frame.row_factor
            if pole is not None:
                angle = _pole_angle(model, frame.index, pole)
                d_e, d_n = (d_e * np.cos(angle) - d_n * np.sin(angle),
                            d_e * np.sin(angle) + d_n * np.cos(angle))
            factor, unit = _SkyFrame.display(3 * float(np.median(err)), frame.angle)
            years = _jyear(model.epoch_jd + model.rows[name].t)
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


#: Panel name of the radial velocities in the residual figures.
VELOCITY_PANEL = "radial velocities"


def _all_residuals(result, companions):
    """Astrometric residuals per companion, then the velocities' (where any)."""
    from massfit.summarise.residuals import velocity_residuals

    out = _chosen(astrometric_residuals(result), companions)
    if result.model.has_velocities:
        out[VELOCITY_PANEL] = velocity_residuals(result)
    return out


def _chosen(per_companion, companions):
    if companions is None:
        return per_companion
    missing = [n for n in companions if n not in per_companion]
    if missing:
        raise ConfigError(f"no companion {', '.join(missing)} in this fit; it has "
                          f"{', '.join(per_companion)}", key="companions")
    return {n: per_companion[n] for n in companions}


def periodogram_plot(result, *, companions=None, width=None):
    """Lomb-Scargle periodogram of each companion's normalised residuals.

    Horizontal lines mark the power of a 1 % and a 0.1 % false-alarm probability; a
    peak above the 1 % line is flagged in red with its period, and the companion's
    own period is marked by a dotted line.

    Returns
    -------
    matplotlib.figure.Figure
    """
    import matplotlib.pyplot as plt

    residuals = _all_residuals(result, companions)
    periods = {name: comp["period"]["median"]
               for name, comp in result.summary["companions"].items()}
    width = width or COLUMN_WIDTH
    with style():
        fig, axes = plt.subplots(len(residuals), 1, squeeze=False,
                                 figsize=(width, 0.3 + 1.15 * len(residuals)),
                                 layout="constrained")
        fig.massfit_flags = {}
        for ax, (name, res) in zip(axes[:, 0], residuals.items()):
            pgram = residual_periodogram(res, orbital_period=periods.get(name))
            ax.set_ylabel("power")
            if pgram is None:
                ax.text(0.5, 0.5, f"{name}: too few epochs", transform=ax.transAxes,
                        ha="center")
                continue
            period_axis = 1.0 / pgram["frequency"]
            ax.plot(period_axis, pgram["power"], color="k", lw=0.5, gid="periodogram")
            for fap, style_ in ((FAP_THRESHOLD, "--"), (0.1 * FAP_THRESHOLD, ":")):
                ax.axhline(pgram["levels"][fap], color="0.4", lw=0.6, ls=style_,
                           label=f"FAP {100 * fap:g} %")
            if periods.get(name) and period_axis.min() <= periods[name] <= period_axis.max():
                ax.axvline(periods[name], color="C0", lw=0.6, ls=":",
                           label="orbital period")
            flagged = pgram["fap"] < FAP_THRESHOLD
            fig.massfit_flags[name] = pgram["fap"]
            text = (f"{name}: peak at {pgram['best_period']:.4g} d, "
                    f"FAP = {pgram['fap']:.2g}")
            ax.text(0.01, 0.95, text + (" — leftover signal" if flagged else ""),
                    transform=ax.transAxes, ha="left", va="top", fontsize=7,
                    color="C3" if flagged else "k", zorder=5,
                    bbox={"facecolor": "white", "edgecolor": "none", "pad": 1.0})
            if flagged:
                ax.plot([pgram["best_period"]], [pgram["best_power"]], marker="v",
                        color="C3", ms=5, ls="none", gid="flagged-peak")
            ax.set_xscale("log")
            _plain_log_ticks(ax.xaxis)
            # Headroom above the false-alarm lines for the label and the legend.
            ax.set_ylim(0, 1.6 * max(pgram["best_power"],
                                     pgram["levels"][0.1 * FAP_THRESHOLD]))
            ax.set_xlim(period_axis.min(), period_axis.max())
        # One legend for all panels, above them, clear of each panel's label.
        entries = {}
        for ax in axes[:, 0]:
            for handle, label in zip(*ax.get_legend_handles_labels()):
                entries.setdefault(label, handle)
        if entries:
            fig.legend(list(entries.values()), list(entries), loc="outside upper center",
                       ncol=len(entries), frameon=False, fontsize=6, handlelength=1.5)
        axes[-1, 0].set_xlabel("period of the residual signal [d]")
    return fig


def _plain_log_ticks(axis):
    """Ticks at 1, 2, 5 x 10^k written as plain numbers (``200``, not ``2 x 10^2``)."""
    from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

    axis.set_major_locator(LogLocator(subs=(1.0, 2.0, 5.0)))
    axis.set_major_formatter(FuncFormatter(lambda value, _: f"{value:g}"))
    axis.set_minor_formatter(NullFormatter())


#: File stem in an output folder -> figure function.
FIGURES = {"corner": corner_plot, "orbits": orbit_plot, "residuals": residual_plot,
           "periodogram": periodogram_plot, "rv": None, "rv_time": None,
           "equator_residuals": equator_residual_plot}

#: Figures that need relative astrometry.
_SKY_FIGURES = ("orbits",)
#: Figures that need radial velocities.
_VELOCITY_FIGURES = ("rv", "rv_time")


def applicable_figures(result) -> list:
    """Stems of :data:`FIGURES` that this fit's data can fill, in order."""
    model = result.model
    return [stem for stem in FIGURES
            if not (stem in _SKY_FIGURES and model.velocity_only)
            and not (stem in _VELOCITY_FIGURES and not model.has_velocities)
            and not (stem == "equator_residuals" and getattr(model, "sight", None) is None)]


_INSTRUMENT_MARKERS = ("o", "s", "D", "^", "v", "P", "X", "<", ">", "h")


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
        self.years = _jyear(model.epoch_jd + vel.t)

    def groups(self):
        """(rows, body name, colour, marker, instrument label) for each data group."""
        vel = self.vel
        for owner in np.unique(vel.owner):
            body = self.model.spec.primary if owner < 0 else self.names[owner]
            colour = "C0" if owner < 0 else f"C{1 + int(owner)}"
            for j, label in enumerate(vel.labels):
                rows = (vel.owner == owner) & (vel.instrument == j)
                if np.any(rows):
                    yield rows, body, colour, _INSTRUMENT_MARKERS[j % 10], label

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


def _jyear(jd):
    """Julian years (TDB) of TDB Julian dates."""
    return 2000.0 + (np.asarray(jd) - 2451545.0) / 365.25


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
    years = _jyear(view.model.epoch_jd + t)
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


FIGURES["rv"] = velocity_plot
FIGURES["rv_time"] = velocity_time_plot

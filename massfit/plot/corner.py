"""The corner plot: the central mass with the companions' elements, each axis in a few
short digits (a narrow posterior far from zero drawn as its offset from the printed
median)."""

from __future__ import annotations

import functools
import math

import astropy.units as u
import numpy as np

from massfit.errors import ConfigError
from massfit.plot.style import (COLUMN_WIDTH, MODE_COLOURS, PAGE_WIDTH, by_period, math_name,
                                mode_groups, style)
from massfit.summarise.dark_mass import corner_defaults, corner_quantity
from massfit.summarise.derived import MASS_UNIT_LABELS, best_mass_unit, interval
from massfit.summarise.quantities import COMPANION, MASS_UNIT_ASTROPY, MASS_UNIT_KEYS
from massfit.summarise.rounding import round_interval

__all__ = ["corner_plot", "full_corner_plot", "default_corner_parameters", "Column",
           "DEFAULT_COMPANION_QUANTITIES", "FULL_COMPANION_QUANTITIES",
           "MAX_KEY_COLUMNS", "POINT_DRAWS"]

_MASS_SAMPLES = MASS_UNIT_KEYS
_MASS_ASTROPY = MASS_UNIT_ASTROPY
# Companion quantities a corner plot can show: symbol, unit (LaTeX), astropy unit; from the
# one table of quantities (summarise/quantities.py).
_COMPANION_QUANTITIES = {key: (d.symbol, d.unit_latex, d.unit) for key, d in COMPANION.items()
                         if key != "periapsis_time"}
DEFAULT_COMPANION_QUANTITIES = ("period", "semi_major_axis", "eccentricity", "inclination")
#: The default corner's columns at most, where fewer quantities per companion allow it
#: (four companions: the mass, the parallax, and each one's P and a).
MAX_KEY_COLUMNS = 10
#: Random draws shown as dots in the 2-D panels (where the chain has more samples). The
#: dots show where the outlying samples lie; the contours, the 1-D histograms and their
#: quantiles are made from every sample. A few thousand dots already mark the outskirts,
#: and each one costs drawing time in every panel.
POINT_DRAWS = 3000


class Column:
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
            columns.append(Column(key, samples[_MASS_SAMPLES[mass_unit]], "M",
                                   r"\mathrm{kg}" if mass_unit == "kg" else label,
                                   _MASS_ASTROPY[mass_unit]))
        elif key == "gm":
            columns.append(Column(key, samples["central_gm"], "GM",
                                   r"\mathrm{km^3\,s^{-2}}", u.km ** 3 / u.s ** 2))
        elif corner_quantity(samples, key) is not None:
            values, symbol, unit, unit_text = corner_quantity(samples, key)
            columns.append(Column(key, values, symbol, unit,
                                  u.Unit(unit_text) if unit_text else u.one))
        elif key == "parallax":
            if "parallax" not in samples:
                raise ConfigError("this fit has no sampled parallax to plot",
                                  key="parameters")
            columns.append(Column(key, samples["parallax"], r"\varpi", r"\mathrm{mas}",
                                   u.mas))
        else:
            body, _, quantity = key.rpartition(".")
            comps = samples["companions"]
            if body not in comps or quantity not in _COMPANION_QUANTITIES \
                    or quantity not in comps[body]:
                raise ConfigError(
                    f"unknown corner parameter {key!r}; accepted: mass, gm, parallax, "
                    f"distance, precession_scale, frame.TERM (where fitted), "
                    f"or BODY.QUANTITY with BODY one of {', '.join(comps)} and QUANTITY "
                    f"one of {', '.join(_COMPANION_QUANTITIES)}", key="parameters")
            symbol, unit, unit_astropy = _COMPANION_QUANTITIES[quantity]
            values = comps[body][quantity]
            if unit_astropy == u.km / u.s:  # velocities in the input's unit
                values, unit, unit_astropy = _in_velocity_unit(result, values)
            columns.append(Column(key, values, _with_body(symbol, body), unit,
                                  unit_astropy))
    return columns


#: Quantities of each companion in the full corner plot (on request): every sampled
#: element. Derived copies (a in km or mas, the mass function) are left out: each is a
#: fixed function of a column already there and would draw a line.
FULL_COMPANION_QUANTITIES = ("period", "semi_major_axis", "eccentricity", "inclination",
                             "periapsis_argument", "ascending_node", "mass",
                             "rv_semi_amplitude", "rv_semi_amplitude_companion")


def default_corner_parameters(result, companions=None, quantities=None, *,
                              full=False) -> list:
    """The corner plot's parameters: the central mass, the parallax, then per companion.

    By default each companion's P, a, e and i (and its mass, where sampled); where that
    makes more than :data:`MAX_KEY_COLUMNS` columns, each companion's P and a, then a
    alone; with velocities alone P, e and the semi-amplitudes. ``full`` gives every sampled element
    of each companion. GM is not listed: it is the mass times a constant, and its panel
    against the mass would be a line.
    """
    names = list(result.samples["companions"]) if companions is None else list(companions)
    asked = quantities
    if quantities is None and full:
        quantities = FULL_COMPANION_QUANTITIES
    elif quantities is None and result.model.velocity_only:
        quantities = ("period", "eccentricity", "rv_semi_amplitude",
                      "rv_semi_amplitude_companion")
    elif quantities is None:
        # A companion mass that was sampled (a double-lined binary) is shown too.
        quantities = DEFAULT_COMPANION_QUANTITIES + ("mass",)
    # Velocities alone may leave the central mass undetermined: no column for it.
    out = ["mass"] if "central_mass_solar" in result.samples else []
    out += ["parallax"] if "parallax" in result.samples else []
    extra = corner_defaults(result.samples)
    # Every fit with a sampled parallax has a distance; only frame or relativistic
    # terms make it a fit of stars about a dark mass.
    if any(key != "distance" for key in extra) and companions is None:
        # Stars about a dark mass: the mass, the distance and the terms shared by all
        # stars; the stars' own elements on request (``companions``).
        return [key for key in out if key != "parallax"] + extra
    comps = result.samples["companions"]
    ordered = by_period(result, names)

    def listed(kept):
        return out + [f"{name}.{q}" for name in ordered for q in kept if q in comps[name]]

    shown = listed(quantities)
    if asked is None and not full:
        # Many companions: the key corner keeps to the quantities that carry the mass
        # (a^3 / P^2), then to a alone, so that it stays readable and quick to draw;
        # every element is in the full corner (``full``).
        for fewer in (("period", "semi_major_axis", "mass"), ("semi_major_axis", "mass")):
            if len(shown) <= MAX_KEY_COLUMNS:
                break
            shown = listed([q for q in quantities if q in fewer])
    return shown



def _with_body(symbol, body):
    """The symbol with the body's name as subscript: ``K_{1,Pell-b}`` where the symbol
    has a plain subscript of its own, ``{f(m)}_{Pell-b}`` otherwise (never a double
    subscript, which math text refuses)."""
    name = math_name(body)
    base, _, sub = symbol.partition("_")
    if sub and " " not in symbol and "(" not in symbol and base and "_" not in sub:
        inner = sub[1:-1] if sub.startswith("{") and sub.endswith("}") else sub
        return rf"{base}_{{{inner},{name}}}"
    if not sub and " " not in symbol and "(" not in symbol:
        return rf"{symbol}_{{{name}}}"
    return rf"{{{symbol}}}_{{{name}}}"

def _in_velocity_unit(result, values_kms):
    """(values, LaTeX unit, astropy unit) of velocities in the unit the input gave."""
    observations = result.model.observations
    stated = observations.velocity_unit() if hasattr(observations, "velocity_unit") else None
    unit = u.Unit(stated) if stated else u.km / u.s
    latex = unit.to_string("latex_inline").strip("$")
    return np.asarray(values_kms) * float((u.km / u.s).to(unit)), latex, unit


def _copies(columns) -> list:
    """Keys of columns that are a fixed monotonic function of an earlier column (their
    ranks agree exactly: GM and M, a in au and in km), which would draw a line."""
    ranks = [np.argsort(np.argsort(c.values, kind="stable"), kind="stable")
             for c in columns]
    out = []
    for j in range(1, len(columns)):
        for i in range(j):
            if columns[i].key in out:
                continue
            rho = np.corrcoef(ranks[i], ranks[j])[0, 1]
            if abs(rho) > 1 - 1e-9:
                out.append(columns[j].key)
                break
    return out


def corner_plot(result, *, parameters=None, mass_unit=None, companions=None,
                quantities=None, truths=None, quantiles=(0.15865, 0.5, 0.84135),
                titles=None, width=None, full=False, groups=None, point_draws=None,
                corner_kwargs=None):
    """Corner plot of the central mass, the parallax and the companions' elements.

    Parameters
    ----------
    result : FitResult
    parameters : list of str, optional
        What to show, in order: ``mass``, ``gm``, ``parallax`` and
        ``BODY.QUANTITY`` with QUANTITY one of ``period``, ``semi_major_axis``,
        ``semi_major_axis_km``, ``semi_major_axis_angle``, ``eccentricity``,
        ``inclination``, ``periapsis_argument``, ``ascending_node``, ``mass``,
        ``rv_semi_amplitude``, ``rv_semi_amplitude_companion``, ``mass_function``,
        ``minimum_mass``. By default the mass, the parallax (where sampled) and each
        companion's ``quantities`` in order of period, leaving out any that did not
        vary (a fixed parallax or mass) or that is a fixed function of one already
        shown; a parameter named here that did not vary is an error.
    mass_unit : {"Msun", "Mjup", "Mearth", "kg"}, optional
        Unit of the central mass; by default the one that reads best.
    companions, quantities : list of str, optional
        Companions and quantities of the default parameter list (all companions;
        period, semi-major axis, eccentricity and inclination, and the companion's
        mass where it was sampled).
    truths : dict, optional
        Parameter name -> true value, marked in the plot. A Quantity is converted to
        the axis's unit; a plain number is taken in it (the mass in ``mass_unit``,
        GM in km^3/s^2, the parallax in mas, periods in d, a in au, angles in deg).
    quantiles : sequence of float, optional
        Quantiles marked on the 1-D histograms (default: the median and the 68.27 %
        interval); ``()`` for none.
    titles : bool, optional
        Values above the diagonal; by default for up to two parameters, and a
        block of values in the empty upper triangle beyond that.
    width : float, optional
        Figure width in inches; by default one journal column for up to three
        parameters, the page width up to ten, and 0.6 in per parameter beyond.
    full : bool, optional
        Every sampled element of each companion (:data:`FULL_COMPANION_QUANTITIES`)
        instead of P, a, e and i; written as ``corner_full`` on request.
    groups : dict, optional
        Label -> boolean array over the samples: each group's samples are drawn over
        the plot in a colour of their own, with a legend. Groups need not cover every
        sample. By default the weighed modes of a nested fit
        (:func:`massfit.plot.style.mode_groups`); ``{}`` for none.
    point_draws : int, optional
        How many samples, drawn at random (a fixed seed), are shown as dots in the 2-D
        panels; :data:`POINT_DRAWS` by default, all samples where there are fewer, 0 for
        none. The contours, the 1-D histograms and their quantiles are made from every
        sample. The dots of all panels are one layer, rasterised in a PDF (the axes,
        contours and text stay vector). The figure's ``massfit_point_draws`` and the
        saved files' metadata say how many were drawn.
    corner_kwargs : dict, optional
        Passed to :func:`corner.corner` last (overrides the choices above; with
        ``plot_datapoints`` there, corner draws its own dots of every sample instead).

    Returns
    -------
    matplotlib.figure.Figure
    """
    import matplotlib.pyplot as plt

    draw_corner = _corner_drawing()
    columns = _shown_columns(result, parameters, mass_unit, companions, quantities, truths,
                             full)
    parameters = [c.key for c in columns]
    k = len(columns)
    if width is None:
        width = COLUMN_WIDTH if k <= 3 else max(PAGE_WIDTH, 0.6 * k)
    # Titles fit above one or two panels; beyond, the values are listed in the empty
    # upper triangle, where no title can run into a neighbouring panel.
    show_titles = k <= 2 if titles is None else bool(titles)
    data = np.column_stack([c.plotted(c.values) for c in columns])
    with style():
        fig, _ = plt.subplots(k, k, figsize=(width, width))
        options = dict(
            labels=[c.label(two_lines=k > 5) for c in columns], quantiles=list(quantiles),
            show_titles=False, max_n_ticks=3, bins=30, smooth=1.0,
            levels=(1 - np.exp(-0.5), 1 - np.exp(-2.0)), plot_datapoints=False,
            fill_contours=True,
            label_kwargs={"fontsize": 8 if k <= 10 else 7},
            hist_kwargs={"lw": 0.8}, contour_kwargs={"linewidths": 0.6},
            truth_color="C3", fig=fig)
        if truths:
            options["truths"] = [c.truth(truths.get(c.key)) for c in columns]
        options.update(corner_kwargs or {})
        draw_corner(data, **options)
        shown = 0
        if "plot_datapoints" not in (corner_kwargs or {}):
            shown = _sample_dots(fig, data, POINT_DRAWS if point_draws is None
                                 else point_draws)
        _overlay_groups(fig, data, groups, result)
        _tidy_corner(fig, columns, width, show_titles,
                     modes=len(mode_groups(result)) if groups is None else 0)
    fig.massfit_parameters = list(parameters)
    fig.massfit_point_draws = shown
    if shown:
        fig.massfit_description = (
            f"Dots: {shown} of the {len(data)} posterior samples, drawn at random; "
            f"contours, histograms and quantiles: all {len(data)} samples.")
    return fig


def _sample_dots(fig, data, draws, seed=0) -> int:
    """Dots of ``draws`` random samples in every 2-D panel; returns how many.

    They lie under the panels (whose backgrounds are made clear; corner's white fill
    inside the outer contour still hides the dots there), as one layer of the figure:
    a PDF rasterises it once, not once per panel (each time the whole page).
    """
    from matplotlib.lines import Line2D

    n, k = data.shape
    if draws <= 0 or k < 2:
        return 0
    picked = np.sort(np.random.default_rng(seed).choice(n, size=min(draws, n),
                                                          replace=False))
    axes = np.array(fig.axes).reshape(k, k)
    for row in range(1, k):
        for col in range(row):
            ax = axes[row, col]
            ax.set_facecolor("none")
            dots = Line2D(data[picked, col], data[picked, row], ls="none", marker="o",
                          ms=1.0, mec="none", color="k", alpha=0.2, zorder=-1,
                          transform=ax.transData, rasterized=True, gid="sample-dots")
            dots.set_clip_box(ax.bbox)
            fig.add_artist(dots)
    return len(picked)


@functools.cache
def _corner_drawing():
    """corner's drawing of a sample array (what :func:`corner.corner` calls for one).

    Importing the corner package imports arviz where that is installed, for data given
    as InferenceData, which massfit never passes: 1.4 s, a third of a fresh process's
    corner plot. Where neither is imported yet, corner is imported with arviz held
    back, and its modules are dropped again afterwards, so that a later ``import
    corner`` elsewhere in the process gets the whole package.
    """
    import importlib
    import sys

    if "corner" in sys.modules or "arviz" in sys.modules:
        return importlib.import_module("corner.core").corner_impl
    sys.modules["arviz"] = None  # an import of arviz fails while this is here
    try:
        drawing = importlib.import_module("corner.core").corner_impl
    finally:
        del sys.modules["arviz"]
        for name in [name for name in sys.modules
                     if name == "corner" or name.startswith("corner.")]:
            del sys.modules[name]
    return drawing


def full_corner_plot(result, **options):
    """:func:`corner_plot` of every sampled element of each companion (``full=True``)."""
    return corner_plot(result, full=True, **options)


def _shown_columns(result, parameters, mass_unit, companions, quantities, truths, full):
    """The corner's columns: the parameters asked for (or the default ones that vary)."""
    if mass_unit is None:
        mass_unit = (best_mass_unit(float(np.median(result.samples["central_mass_solar"])))
                     if "central_mass_solar" in result.samples else "Msun")
    if mass_unit not in _MASS_SAMPLES:
        raise ConfigError(f"unknown mass unit {mass_unit!r}; accepted: "
                          f"{', '.join(_MASS_SAMPLES)}", key="mass_unit")
    asked = parameters
    if parameters is None:
        parameters = default_corner_parameters(result, companions, quantities, full=full)
    columns = _corner_columns(result, parameters, mass_unit)
    # A fixed quantity (a fixed parallax or companion mass) has no panel to fill, and a
    # copy of another column (GM of M) would fill its panels with a line.
    fixed = [c.key for c in columns if not np.ptp(c.plotted(c.values)) > 0]
    columns = [c for c in columns if c.key not in fixed]
    fixed += _copies(columns) if asked is None else []
    if fixed and asked is not None:
        raise ConfigError(f"{', '.join(fixed)} did not vary in this fit (fixed or without "
                          f"spread): a corner panel needs samples that vary",
                          key="parameters")
    columns = [c for c in columns if c.key not in fixed]
    if not columns:
        raise ConfigError("nothing in this fit varies: no corner plot to draw",
                          key="parameters")
    unknown = set(truths or ()) - {c.key for c in columns}
    if unknown:
        raise ConfigError(f"truths given for parameters not shown: "
                          f"{', '.join(sorted(unknown))}", key="truths")
    return columns


def _overlay_groups(fig, data, groups, result):
    """Each group's samples in its own colour over the corner plot (a colouring hook
    for modes or any other split of the samples), and a legend of the groups; the
    result's weighed modes where ``groups`` is None."""
    from matplotlib.lines import Line2D

    title = "groups"
    if groups is None:
        groups, title = mode_groups(result), "modes (nested sampling)"
    if not groups:
        return
    k = data.shape[1]
    axes = np.array(fig.axes).reshape(k, k)
    handles = []
    for j, (label, mask) in enumerate(groups.items()):
        mask = np.asarray(mask, dtype=bool)
        if mask.shape != (len(data),):
            raise ConfigError(f"group {label!r} has {mask.size} flags for {len(data)} "
                              "samples", key="groups")
        colour = MODE_COLOURS[j % len(MODE_COLOURS)]
        for row in range(k):
            for col in range(row + 1):
                ax = axes[row, col]
                limits = ax.get_xlim(), ax.get_ylim()
                if row == col:
                    ax.hist(data[mask, col], bins=30, range=limits[0], histtype="step",
                            color=colour, lw=0.6, gid=f"group-{j}")
                else:
                    ax.plot(data[mask, col], data[mask, row], ls="none", marker=".",
                            ms=1.0, alpha=0.3, color=colour, rasterized=True,
                            gid=f"group-{j}")
                ax.set_xlim(limits[0])
                if row != col:
                    ax.set_ylim(limits[1])
        shown = label if title != "groups" else f"{label} ({mask.mean():.0%})"
        handles.append(Line2D([], [], color=colour, marker="o", ms=3, ls="none",
                              label=shown))
    # In the empty upper triangle, the second row's last panel (below the list of
    # values that starts at the top right of the figure).
    home = axes[1, -1] if k >= 3 else axes[0, -1]
    home.legend(handles=handles, loc="upper right" if k > 1 else "upper left",
                frameon=False, fontsize=7, title=title, title_fontsize=7,
                borderaxespad=0.0)


def _tidy_corner(fig, columns, width, show_titles, modes=0):
    """Margins, ticks and the list of values; with ``modes`` (weighed modes) > 1 the
    list says its values are over all modes and gives no single interval of a period
    (one interval of the mixture would sit in the heaviest mode; the key gives each)."""
    k = len(columns)
    axes = np.array(fig.axes).reshape(k, k)
    margin_left, margin_bottom = 0.9, 0.7  # inches for tick labels and axis labels
    top = 0.28 if show_titles else 0.08
    fig.subplots_adjust(left=margin_left / width, bottom=margin_bottom / width,
                        right=1 - 0.08 / width, top=1 - top / width,
                        wspace=0.06, hspace=0.06)
    panel = (width - margin_left - 0.08) / k
    tick_size = 7 if panel > 0.5 else 6
    # Room for the labels: four on a wide panel, two on a narrow one.
    nbins = 3 if panel > 0.8 else (2 if panel > 0.6 else 1)  # intervals: ticks - 1
    for (row, col), ax in np.ndenumerate(axes):
        ax.tick_params(labelsize=tick_size, length=2.5, width=0.5, direction="in",
                       top=False, right=False)
        if col <= row:
            ax.xaxis.set_major_locator(_inner_ticks(nbins))
            if col < row:
                ax.yaxis.set_major_locator(_inner_ticks(nbins))
        for spine in ax.spines.values():
            spine.set_linewidth(0.5)
    for ax in axes[-1, :]:
        ax.xaxis.set_label_coords(0.5, -0.4 / panel)
    for ax in axes[1:, 0]:
        ax.yaxis.set_label_coords(-0.6 / panel, 0.5)
        # Level tick labels: turned ones reach into the panels above and below.
        for label in ax.get_yticklabels():
            label.set_rotation(0)
    if show_titles:
        for c, column in enumerate(columns):
            axes[c, c].set_title(column.value_text(), fontsize=7, pad=3)
    elif k >= 3:
        # The upper triangle is empty: list the values there.
        text = "\n".join(
            rf"${column.symbol}$: {modes} modes (see the key)"
            if modes > 1 and column.key.endswith(".period") else column.value_text()
            for column in columns)
        if modes > 1:
            text = f"over all {modes} modes:\n" + text
        if any(column.reference != 0 for column in columns):
            text += "\n" + r"$\Delta$: offset from the median above"
        fig.text(1 - 0.15 / width, 1 - 0.15 / width, text, ha="right", va="top",
                 fontsize=8 if k <= 10 else 9, linespacing=1.5)



def _inner_ticks(nbins):
    """At most ``nbins`` + 1 ticks, none in the outer tenth of the axis, whose labels would
    meet those of the neighbouring panel."""
    from matplotlib.ticker import MaxNLocator

    class InnerTicks(MaxNLocator):
        def tick_values(self, vmin, vmax):
            low, high = sorted((vmin, vmax))
            margin = 0.1 * (high - low)
            # Nice ticks of the inner range itself, so that two or three remain.
            ticks = super().tick_values(low + margin, high - margin)
            ticks = ticks[(ticks >= low + margin) & (ticks <= high - margin)]
            while len(ticks) > nbins + 1:  # matplotlib keeps two inside at least
                ticks = ticks[len(ticks) % 2 == 0::2] if len(ticks) > 2 else ticks[:1]
            return ticks

    return InnerTicks(nbins=nbins, steps=[1, 2, 2.5, 5, 10])

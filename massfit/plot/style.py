"""What every massfit figure shares: journal sizes, matplotlib settings, colours and markers,
time axes, saving, and small helpers for labels and ticks.

A new figure family imports from here and nowhere else in ``plot/`` for its look, so that
every figure reads the same.
"""

from __future__ import annotations

from contextlib import contextmanager

import numpy as np

from massfit.errors import ConfigError

__all__ = ["COLUMN_WIDTH", "PAGE_WIDTH", "STYLE", "TIME_CMAP", "INSTRUMENT_MARKERS", "style", "load_drawing",
           "save_figure", "math_name", "plain_log_ticks", "jyear", "time_cmap", "chosen",
           "TimeAxis", "time_axis", "by_period", "MODE_COLOURS", "mode_groups"]

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
    # Notebooks draw a figure at its own dpi: at 150 a column-wide figure is about
    # 500 pixels across and its 7 pt labels about 15 pixels high, readable on a screen.
    "figure.dpi": 150,
}

TIME_CMAP = "viridis"
#: Markers that tell instruments (or residual kinds) apart, in order.
INSTRUMENT_MARKERS = ("o", "s", "D", "^", "v", "P", "X", "<", ">", "h")


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


def load_drawing():
    """Import what drawing and writing the figures needs (pyplot, the Agg and PDF back
    ends). Called before the figures' second process is forked, so that it starts
    with them instead of importing them again (about 0.6 s in each process)."""
    import matplotlib.backends.backend_agg  # noqa: F401
    import matplotlib.backends.backend_pdf  # noqa: F401
    import matplotlib.pyplot  # noqa: F401


def save_figure(fig, stem, formats=("png", "pdf")) -> list:
    """Write ``fig`` as ``stem.png``, ``stem.pdf`` ...; returns the paths written.

    The bounding box is tightened so that nothing (labels, colour bars) is clipped. It
    is found once for every format (``bbox_inches="tight"`` would lay the figure out
    twice per file: a third of a big corner plot's writing time). A figure's
    ``massfit_description`` (what it shows, e.g. how many samples are dots) goes into
    each file's metadata.
    """
    from pathlib import Path

    # Laid out at the PNG's dpi: matplotlib parses each math label once per dpi, and a
    # layout at the screen's dpi parsed every label a third time (a quarter second for
    # a big corner plot).
    screen_dpi = fig.dpi
    if "png" in formats:
        fig.set_dpi(STYLE["savefig.dpi"])
    engine = fig.get_layout_engine()
    description = getattr(fig, "massfit_description", None)
    try:
        # One drawing lays the figure out (its layout engine, where it has one) and,
        # on an Agg canvas, is the PNG itself: cut to the tight box, not drawn again.
        image = _draw_once(fig) if "png" in formats else None
        if image is None:
            fig.draw_without_rendering()
        box = fig.get_tightbbox(fig.canvas.get_renderer()).padded(0.03)
        # The layout found once serves every format: a constrained layout is otherwise
        # solved again for each file (half the tick work of a many-panel figure).
        if engine is not None:
            fig.set_layout_engine("none")
        paths = []
        for ext in formats:
            path = Path(f"{stem}.{ext}")
            metadata = ({"png": "Description", "pdf": "Subject"}.get(ext)
                        if description else None)
            metadata = {metadata: description} if metadata else None
            if ext != "png" or not _write_cut(image, box, path, metadata):
                fig.savefig(path, bbox_inches=box, metadata=metadata,
                            dpi=STYLE["savefig.dpi"] if ext == "png" else None,
                            **({"pil_kwargs": _PNG_OPTIONS} if ext == "png" else {}))
            paths.append(path)
    finally:
        if engine is not None:
            fig.set_layout_engine(engine)
        fig.set_dpi(screen_dpi)
    return paths


#: zlib level of the PNG files: 3 takes 60 % of the default 6's time, and the files of
#: massfit's figures come out within 15 % of the default's size (smaller for the corner).
_PNG_OPTIONS = {"compress_level": 3}


def _draw_once(fig):
    """The figure drawn at its dpi on its Agg canvas (an RGBA array), or None where its
    canvas draws otherwise (a window's canvas also paints the window)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    if type(fig.canvas).draw is not FigureCanvasAgg.draw:
        return None
    fig.canvas.draw()
    return np.asarray(fig.canvas.buffer_rgba())


def _write_cut(image, box, path, metadata) -> bool:
    """Write the part of the drawn ``image`` inside ``box`` (inches) as a PNG at the
    savefig dpi; False where there is no image or the box reaches past it (then
    savefig draws what lies outside)."""
    import matplotlib.image

    if image is None:
        return False
    dpi = STYLE["savefig.dpi"]
    height, width = image.shape[:2]
    x0, x1 = int(np.floor(box.x0 * dpi)), int(np.ceil(box.x1 * dpi))
    y0, y1 = height - int(np.ceil(box.y1 * dpi)), height - int(np.floor(box.y0 * dpi))
    if x0 < 0 or y0 < 0 or x1 > width or y1 > height:
        return False
    matplotlib.image.imsave(path, image[y0:y1, x0:x1], format="png", dpi=dpi,
                            metadata=metadata, pil_kwargs=dict(_PNG_OPTIONS))
    return True


def math_name(name: str) -> str:
    """A body name as upright text inside math text (``Mirren-b`` keeps its hyphen)."""
    special = {c: "\\" + c for c in "_$^{}#%&"}
    return r"\text{" + "".join(special.get(c, c) for c in name) + "}"


def plain_log_ticks(axis, decades=None):
    """Ticks at 1, 2, 5 x 10^k written as plain numbers (``200``, not ``2 x 10^2``); at
    1, 2, 3, 5 x 10^k where the axis spans under one and a half ``decades``."""
    from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

    subs = (1.0, 2.0, 3.0, 5.0) if decades is not None and decades < 1.5 else (1.0, 2.0, 5.0)
    axis.set_major_locator(LogLocator(subs=subs))
    axis.set_major_formatter(FuncFormatter(lambda value, _: f"{value:g}"))
    axis.set_minor_formatter(NullFormatter())


def jyear(jd):
    """Julian years (TDB) of TDB Julian dates."""
    return 2000.0 + (np.asarray(jd) - 2451545.0) / 365.25


def time_cmap():
    """The colour map that codes time in every figure."""
    import matplotlib

    return matplotlib.colormaps[TIME_CMAP]


def chosen(per_companion, companions):
    """The entries of ``per_companion`` named in ``companions`` (all where None)."""
    if companions is None:
        return per_companion
    missing = [n for n in companions if n not in per_companion]
    if missing:
        raise ConfigError(f"no companion {', '.join(missing)} in this fit; it has "
                          f"{', '.join(per_companion)}", key="companions")
    return {n: per_companion[n] for n in companions}


#: Time formats drawn as calendar years (decimal years of the Gregorian calendar).
_YEAR_FORMATS = ("isot", "iso", "fits", "datetime", "decimalyear", "byear", "yday")


class TimeAxis:
    """How a figure's time axis reads: the input's format and scale where every file
    gave the same, else TDB Julian dates.

    Julian dates are drawn less a round number of days, named in the label
    (``JD - 2460000 (TDB)``), so that ticks stay short without a hidden offset; MJD as
    they are; ISO dates and decimal or Besselian years as calendar years; Julian years
    as Julian years. The scale of the input (UTC, TT, TDB) is named on the axis.
    """

    def __init__(self, form, jd_tdb):
        time_format, scale = form if form is not None else ("jd", "tdb")
        self.format, self.scale = time_format, scale
        jd_tdb = np.asarray(jd_tdb, dtype=float)
        self.offset = 0.0
        scale_text = scale.upper()
        if time_format == "mjd":
            self.label = f"MJD ({scale_text})"
        elif time_format == "jyear":
            self.label = f"Julian year ({scale_text})"
        elif time_format in _YEAR_FORMATS:
            self.label = f"year ({scale_text})"
        else:
            self.format = "jd"
            first = float(np.min(self._in_scale(jd_tdb))) if jd_tdb.size else 0.0
            self.offset = 1000.0 * np.floor(first / 1000.0) if first > 1e5 else 0.0
            self.label = (f"JD $-$ {self.offset:.0f} ({scale_text})" if self.offset
                          else f"JD ({scale_text})")

    def _in_scale(self, jd_tdb):
        from astropy.time import Time

        times = Time(np.asarray(jd_tdb, dtype=float), format="jd", scale="tdb")
        return getattr(times, self.scale).jd if self.scale != "tdb" else times.jd

    def __call__(self, jd_tdb):
        """Axis values of TDB Julian dates."""
        from astropy.time import Time

        jd = np.asarray(jd_tdb, dtype=float)
        if self.format in ("jd", "mjd"):
            values = self._in_scale(jd) - self.offset
            return values - 2400000.5 if self.format == "mjd" else values
        times = getattr(Time(jd, format="jd", scale="tdb"), self.scale)
        return times.jyear if self.format == "jyear" else times.decimalyear


def time_axis(observations, jd_tdb) -> TimeAxis:
    """The time axis of a fit's figures, for data at the TDB Julian dates ``jd_tdb``."""
    form = observations.time_form() if hasattr(observations, "time_form") else None
    return TimeAxis(form, jd_tdb)


def by_period(result, names) -> list:
    """Companion names in order of their median period (shortest first)."""
    companions = result.summary.get("companions", {})

    def period(name):
        value = companions.get(name, {}).get("period", {}).get("median")
        return float("inf") if value is None else float(value)

    return sorted(names, key=period)


#: Colours of the posterior's weighed modes (and of any other groups of samples), in
#: order; the same in every figure, none of them the time colour map's.
MODE_COLOURS = ("C0", "C3", "C1", "C4", "C6", "C5", "C8", "C9")


def mode_groups(result) -> dict:
    """Label -> boolean mask over the samples, one per weighed mode of a nested fit
    (``chain.modes``, ``chain.mode_members``), labelled by its periods and
    probability; empty where the fit has fewer than two modes."""
    chain = getattr(result, "chain", None)
    modes = list(getattr(chain, "modes", []) or [])
    members = list(getattr(chain, "mode_members", []) or [])
    if len(modes) < 2 or len(members) != len(modes):
        return {}
    groups = {}
    for k, (mode, mask) in enumerate(zip(modes, members)):
        periods = mode.get("start_periods") or {}
        where = ", ".join(f"P {p:.4g} d" for p in periods.values()) or f"mode {k + 1}"
        where = where if len(periods) < 2 else ", ".join(
            f"P({n}) {p:.4g} d" for n, p in periods.items())
        # A mirror image: the middle of its half of the node circle tells it apart.
        where += "".join(f", \u03a9 {c:.0f}\u00b0 \u00b1 90\u00b0"
                         for c in (mode.get("node_half_centre_deg") or {}).values())
        chance = mode.get("probability")
        label = where if chance is None else (
            f"{where}: p = {chance:.2f} \u00b1 {mode.get('probability_err', 0.0):.2f}")
        groups[label] = np.asarray(mask, dtype=bool)
    return groups

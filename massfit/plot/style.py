"""What every massfit figure shares: journal sizes, matplotlib settings, colours and markers,
time axes, saving, and small helpers for labels and ticks.

A new figure family imports from here and nowhere else in ``plot/`` for its look, so that
every figure reads the same.
"""

from __future__ import annotations

from contextlib import contextmanager

import numpy as np

from massfit.errors import ConfigError

__all__ = ["COLUMN_WIDTH", "PAGE_WIDTH", "STYLE", "TIME_CMAP", "INSTRUMENT_MARKERS", "style",
           "save_figure", "math_name", "plain_log_ticks", "jyear", "time_cmap", "chosen"]

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


def math_name(name: str) -> str:
    """A body name as upright text inside math text (``Mirren-b`` keeps its hyphen)."""
    special = {c: "\\" + c for c in "_$^{}#%&"}
    return r"\text{" + "".join(special.get(c, c) for c in name) + "}"


def plain_log_ticks(axis):
    """Ticks at 1, 2, 5 x 10^k written as plain numbers (``200``, not ``2 x 10^2``)."""
    from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

    axis.set_major_locator(LogLocator(subs=(1.0, 2.0, 5.0)))
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

"""Figures of a fit: the posterior (corner) and the orbits on the sky.

Each function takes a :class:`~massfit.results.FitResult` and returns a matplotlib
Figure. Sky plots show north up and east to the left, as the sky is seen.
"""

from __future__ import annotations

import numpy as np

from . import kepler
from .summarise import MASS_UNIT_LABELS

__all__ = ["corner_plot", "orbit_plot"]

_MASS_KEYS = {"Msun": "central_mass_Msun", "Mjup": "central_mass_Mjup",
              "Mearth": "central_mass_Mearth", "kg": "central_mass"}


def corner_plot(result, *, mass_unit=None, companions=None, quantities=None,
                truths=None, corner_kwargs=None):
    """Corner plot of the central mass and each companion's key elements.

    Parameters
    ----------
    result : FitResult
    mass_unit : {"Msun", "Mjup", "Mearth", "kg"}, optional
        Unit of the central mass; by default the one that reads best.
    companions : list of str, optional
        Companions to show (all by default).
    quantities : list of str, optional
        Companion quantities: any of ``period``, ``semi_major_axis``,
        ``eccentricity``, ``inclination`` (default: period and semi-major axis).
    truths : dict, optional
        Column label -> true value, marked on the plot.
    corner_kwargs : dict, optional
        Passed to :func:`corner.corner`.

    Returns
    -------
    matplotlib.figure.Figure
    """
    import corner

    from .results import best_mass_unit

    samples = result.samples
    if mass_unit is None:
        mass_unit = best_mass_unit(float(np.median(samples["central_mass_Msun"])))
    label = (r"$M$ [kg]" if mass_unit == "kg"
             else rf"$M\ [{MASS_UNIT_LABELS[mass_unit]}]$")
    columns = [samples[_MASS_KEYS[mass_unit]]]
    labels = [label]
    if "parallax" in samples:
        columns.append(samples["parallax"])
        labels.append(r"$\varpi$ [mas]")
    names = companions or list(samples["companions"])
    quantities = quantities or ["period", "semi_major_axis"]
    symbols = {"period": (r"P", "d"), "semi_major_axis": (r"a", "au"),
               "eccentricity": (r"e", None), "inclination": (r"i", r"^\circ")}
    for name in names:
        for q in quantities:
            symbol, unit = symbols[q]
            columns.append(samples["companions"][name][q])
            sub = rf"{symbol}_\mathrm{{{name}}}"
            labels.append(rf"${sub}$" if unit is None else rf"${sub}\ [\mathrm{{{unit}}}]$"
                          if unit.isalpha() else rf"${sub}\ [{unit}]$")
    data = np.column_stack(columns)
    options = dict(labels=labels, quantiles=[0.15865, 0.5, 0.84135], show_titles=True,
                   title_kwargs={"fontsize": 9}, label_kwargs={"fontsize": 10},
                   max_n_ticks=3)
    if truths:
        options["truths"] = [truths.get(lab) for lab in labels]
    options.update(corner_kwargs or {})
    fig = corner.corner(data, **options)
    fig.set_size_inches(max(3.4, 1.6 * len(columns)), max(3.4, 1.6 * len(columns)))
    return fig


def orbit_plot(result, *, n_tracks=30, seed=0, figsize=None):
    """Sky-plane orbit of each companion: data, posterior tracks and the best orbit.

    One panel per companion. Offsets are in mas (or au for length-unit data), north up
    and east to the left; the primary is the star at the origin.

    Returns
    -------
    matplotlib.figure.Figure
    """
    import matplotlib.pyplot as plt

    model = result.model
    names = list(model.companions)
    n = len(names)
    cols = min(n, 2)
    rows = int(np.ceil(n / cols))
    fig, axes = plt.subplots(rows, cols, figsize=figsize or (3.6 * cols, 3.6 * rows),
                             squeeze=False, constrained_layout=True)
    rng = np.random.default_rng(seed)
    chain = result.chain
    picks = rng.choice(len(chain.samples), size=min(n_tracks, len(chain.samples)),
                       replace=False)
    best = chain.samples[np.argmax(chain.log_prob)]
    for ax, name in zip(axes.flat, names):
        _draw_companion(ax, model, name, chain.samples[picks], best)
    for ax in list(axes.flat)[n:]:
        ax.set_visible(False)
    return fig


def _sky_scale(model, name, phys, k):
    rows = model._rows[name]
    if np.all(model.observations.astrometry.length[rows.index]):
        return 1.0, "au"
    if phys["parallax"] is not None and np.any(rows.uses_parallax):
        return phys["parallax"][k], "mas"
    distance = model.observations.astrometry.distance[rows.index]
    return 1e3 / np.nanmedian(distance), "mas"


def _track(model, name, phys, k, n_points=400):
    orbit = {key: v[k] for key, v in phys["companions"][name].items()}
    mean = np.linspace(0, 2 * np.pi, n_points)
    east, north, _ = kepler.relative_orbit(
        mean * orbit["period"] / (2 * np.pi), orbit["period"], orbit["ecc"], 0.0,
        orbit["semi_major_axis"], orbit["inc"], orbit["omega"], orbit["node"])
    scale, unit = _sky_scale(model, name, phys, k)
    return east * scale, north * scale, unit


def _draw_companion(ax, model, name, draws, best):
    phys = model.physical(draws)
    for k in range(len(draws)):
        east, north, unit = _track(model, name, phys, k)
        ax.plot(east, north, color="0.6", lw=0.5, alpha=0.5, zorder=1)
    phys_best = model.physical(best[None, :])
    east, north, unit = _track(model, name, phys_best, 0)
    ax.plot(east, north, color="C0", lw=1.2, zorder=2, label="best orbit")
    data = model.observations.astrometry
    rows = model._rows[name]
    factor = 1e3 if unit == "mas" else 1.0
    idx = rows.index
    d_east = np.where(data.polar[idx], data.sep[idx] * np.sin(data.pa[idx]), data.east[idx])
    d_north = np.where(data.polar[idx], data.sep[idx] * np.cos(data.pa[idx]), data.north[idx])
    ax.scatter(d_east * factor, d_north * factor, s=6, c=data.time.jd[idx], cmap="viridis",
               zorder=3, label="data")
    ax.plot([0], [0], marker="*", color="k", ms=9, ls="none", zorder=4, label="primary")
    ax.set_aspect("equal", adjustable="datalim")
    ax.invert_xaxis()  # east to the left
    ax.set_xlabel(rf"$\Delta\alpha\cos\delta$ (east) [{unit}]")
    ax.set_ylabel(rf"$\Delta\delta$ (north) [{unit}]")
    ax.set_title(name, fontsize=10)

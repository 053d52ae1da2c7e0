"""Figures of stars about a mass that is not seen: the orbits on the sky about the
fitted mass position, and each star's velocities against time with the relativistic
shift drawn on its own.

Made for fits with the frame terms (:mod:`massfit.model.frame`) or the relativistic
terms (:mod:`massfit.orbits.relativity`), where the plain orbit and velocity figures
would leave them out; without frame terms the mass sits at the origin. The velocity
figure needs the stars' own velocities. Every function returns a matplotlib Figure.
"""

from __future__ import annotations

import numpy as np

from massfit.errors import ConfigError
from massfit.model.extra_terms import star_velocity_terms
from massfit.model.frame import frame_shift
from massfit.plot.style import PAGE_WIDTH, style
from massfit.summarise.residuals import best_sample

__all__ = ["frame_orbit_plot", "redshift_plot", "frame_curves"]

#: Days per Julian year (the time axes and the proper motion).
_YEAR = 365.25


def _require_sky(model):
    if model.velocity_only:
        raise ConfigError("this figure needs positions on the sky", key="figures")


def _frame(phys):
    """The frame terms of ``phys``, zeros where the fit has none."""
    if phys.get("frame") is not None:
        return phys["frame"]
    zeros = np.zeros(np.shape(phys["central_mass"]))
    return {"east": zeros, "north": zeros, "motion_east": zeros, "motion_north": zeros,
            "velocity": zeros}


def _orbit_track(model, phys, name, k, n_points=721):
    """One star's orbit over one period from its reference epoch: (east, north) in
    arcsec in the frame at the model's epoch (the mass's position added)."""
    orbit = phys["companions"][name]
    t = model.reference_epoch(name) + np.linspace(0.0, orbit["period"][k], n_points)
    one = {key: (value[k:k + 1] if np.ndim(value) else value) for key, value in phys.items()
           if key != "companions"}
    one["companions"] = {name: {key: value[k:k + 1] for key, value in orbit.items()}}
    (north, east, _), _ = model.dynamics.states_at(model, one, name, t)
    scale = 1e-3 * phys["parallax"][k] if phys["parallax"] is not None else 1.0
    frame = _frame(phys)
    return (east[0] * scale + 1e-3 * frame["east"][k],
            north[0] * scale + 1e-3 * frame["north"][k])


def frame_orbit_plot(result, *, n_tracks=20, seed=0, zoom=None, width=None):
    """The stars' orbits on the sky about the fitted position of the mass.

    Left: every star's positions (moved to the model's epoch with the fitted proper
    motion of the mass, so that the mass stands still) with 1-sigma error bars, the
    best posterior orbit of each and ``n_tracks`` posterior orbits; the mass's fitted
    position as a cross. Right: the centre enlarged, with the mass's 68 % and 95 %
    posterior regions (Gaussian ellipses of the samples) and any position or orbit
    that passes there. North up, east to the left, offsets in mas from the frame's
    origin.

    Parameters
    ----------
    result : FitResult
    n_tracks : int
        Posterior orbits per star.
    seed : int
        Seed of the choice of posterior samples.
    zoom : float, optional
        Half-width of the enlarged panel, mas (default: 8 times the larger 1-sigma of
        the mass's position, at least 0.5 mas).
    width : float, optional
        Figure width, inches (default: the page).
    """
    import matplotlib.pyplot as plt

    model = result.model
    _require_sky(model)
    chain = result.chain
    rng = np.random.default_rng(seed)
    picks = rng.choice(len(chain.samples), size=min(n_tracks, len(chain.samples)),
                       replace=False)
    best = model.physical(best_sample(result)[None, :])
    draws = model.physical(chain.samples[picks])
    every = _frame(model.physical(chain.samples))
    data = model.observations.astrometry
    width = width or PAGE_WIDTH
    with style():
        fig, (ax, inset) = plt.subplots(1, 2, figsize=(width, 0.52 * width),
                                        layout="constrained",
                                        gridspec_kw={"width_ratios": [1.35, 1]})
        for c, name in enumerate(model.companions):
            colour = f"C{c % 10}"
            rows = model.rows[name]
            for k in range(len(picks)):
                east, north = _orbit_track(model, draws, name, k)
                ax.plot(1e3 * east, 1e3 * north, color=colour, lw=0.3, alpha=0.25,
                        gid="posterior_track")
            east, north = _orbit_track(model, best, name, 0)
            for axis in (ax, inset):
                axis.plot(1e3 * east, 1e3 * north, color=colour, lw=0.9, gid="best_orbit",
                          label=name if axis is ax else None)
            still = dict(_frame(best), east=np.zeros(1), north=np.zeros(1))
            drift_e, drift_n = frame_shift(still, rows.t)  # the mass's drift only
            index = rows.index[rows.cart]
            x = 1e3 * (data.east[index] - drift_e[0, rows.cart])
            y = 1e3 * (data.north[index] - drift_n[0, rows.cart])
            for axis in (ax, inset):
                axis.errorbar(x, y, xerr=1e3 * data.east_err[index],
                              yerr=1e3 * data.north_err[index], fmt="o", ms=1.8,
                              color=colour, elinewidth=0.5, gid="data")
        x0, y0 = _frame(best)["east"][0], _frame(best)["north"][0]
        for axis in (ax, inset):
            axis.plot(x0, y0, "k+", ms=9, mew=1.2, gid="mass_position",
                      label="mass (best fit)" if axis is ax else None)
        _position_regions(inset, every["east"], every["north"])
        half = zoom or max(0.5, 8.0 * max(np.std(every["east"]), np.std(every["north"])))
        if np.all(every["east"] == 0) and np.all(every["north"] == 0):
            inset.set_visible(False)  # no frame terms: the mass is the origin
        inset.set_xlim(x0 + half, x0 - half)
        inset.set_ylim(y0 - half, y0 + half)
        ax.invert_xaxis()
        for axis in (ax, inset):
            axis.set_aspect("equal", adjustable="datalim" if axis is ax else "box")
            axis.set_xlabel(r"$\Delta\alpha\cos\delta$ (east) [mas]")
            axis.set_ylabel(r"$\Delta\delta$ (north) [mas]")
        ax.set_title("orbits about the fitted mass (positions at the model's epoch)")
        inset.set_title("mass position: 68 % and 95 % regions")
        ax.legend(loc="best", fontsize=6, frameon=False)
    return fig


def _position_regions(ax, east, north):
    """The mass's 68 % and 95 % posterior regions (Gaussian ellipses of the samples)."""
    from matplotlib.patches import Ellipse

    if np.std(east) == 0 and np.std(north) == 0:
        return
    cov = np.cov(np.vstack([east, north]))
    values, vectors = np.linalg.eigh(cov)
    angle = np.degrees(np.arctan2(vectors[1, 1], vectors[0, 1]))
    for level, style_ in ((2.30, "-"), (6.18, "--")):  # chi^2 of 2 dof at 68.27, 95.45 %
        ax.add_patch(Ellipse((np.mean(east), np.mean(north)),
                             2 * np.sqrt(level * values[1]), 2 * np.sqrt(level * values[0]),
                             angle=angle, fill=False, color="k", lw=0.7, ls=style_,
                             gid="mass_region"))


def frame_curves(model, phys, name, t):
    """A star's modelled velocity at days ``t`` from the model's epoch, split:
    ``newtonian`` (its orbit, the light time and the mass's own velocity) and each
    relativistic term (km/s; ``exact_doppler`` where the fit takes the Doppler factor
    whole), for one parameter set (``phys`` of one sample)."""
    state = {}
    terms = star_velocity_terms(model, phys, name, t, newtonian=state)
    newtonian = (state["velocity_z"] + terms.pop("romer")
                 + _frame(phys)["velocity"][:, None])
    return {"newtonian": newtonian[0], **{k: v[0] for k, v in terms.items()}}


def redshift_plot(result, *, width=None):
    """Each star's radial velocities against time, and the relativistic shift.

    Top panel per star: the velocities (1-sigma errors), the best model (solid) and its
    Newtonian part (dashed: the orbit, the light time and the mass's own velocity).
    Bottom panel: the data minus the Newtonian part against the modelled gravitational
    redshift plus transverse Doppler shift (solid; with the part of the whole factor
    beyond first order where the fit has it) and the redshift alone (dotted).
    """
    import matplotlib.pyplot as plt

    model = result.model
    _require_sky(model)
    vel = model.velocity_rows
    if vel is None or not np.any(vel.owner >= 0):
        raise ConfigError("this figure needs the stars' own radial velocities",
                          key="figures")
    names = [n for k, n in enumerate(model.companions) if np.any(vel.owner == k)]
    best = model.physical(best_sample(result)[None, :])
    width = width or PAGE_WIDTH
    cols = min(2, len(names))
    blocks = -(-len(names) // cols)
    with style():
        fig = plt.figure(figsize=(width, 0.36 * width * blocks + 0.3),
                         layout="constrained")
        grid = fig.add_gridspec(2 * blocks, cols, height_ratios=[2, 1] * blocks)
        for c, name in enumerate(names):
            block, col = divmod(c, cols)
            top = fig.add_subplot(grid[2 * block, col])
            bottom = fig.add_subplot(grid[2 * block + 1, col], sharex=top)
            _draw_star_velocities(top, bottom, model, best, name)
            top.tick_params(labelbottom=False)
            if col == 0:
                top.set_ylabel(r"$v_r$ [km/s]")
                bottom.set_ylabel("$v_r - v_\\mathrm{Newton}$\n[km/s]")
            if block == blocks - 1:
                bottom.set_xlabel("Julian year (TDB)")
        handles, labels = [], []
        for ax in fig.axes[:2]:
            h, lab = ax.get_legend_handles_labels()
            handles += h
            labels += lab
        fig.legend(handles, labels, loc="outside upper center", ncol=min(len(labels), 3),
                   frameon=False)
    return fig


def _draw_star_velocities(top, bottom, model, best, name):
    """One star's velocities (top) and their relativistic shift (bottom)."""
    vel = model.velocity_rows
    own = vel.owner == list(model.companions).index(name)
    t = np.linspace(vel.t[own].min(), vel.t[own].max(), 4000)
    dense = frame_curves(model, best, name, t)
    at_rows = frame_curves(model, best, name, vel.t[own])
    years = 2000.0 + (model.epoch_jd + t - 2451545.0) / _YEAR
    data_years = 2000.0 + (model.epoch_jd + vel.t[own] - 2451545.0) / _YEAR
    shift = (dense["gravitational_redshift"] + dense["transverse_doppler"]
             + dense.get("exact_doppler", 0.0))
    err = np.sqrt(vel.err2[own])
    top.errorbar(data_years, vel.rv[own], yerr=err, fmt="o", ms=1.5, color="k",
                 elinewidth=0.4, gid="data", label="data")
    top.plot(years, dense["newtonian"] + shift, color="C0", lw=0.8, gid="model_total",
             label="model")
    top.plot(years, dense["newtonian"], color="C1", lw=0.7, ls="--",
             gid="model_newtonian", label="its Newtonian part")
    bottom.errorbar(data_years, vel.rv[own] - at_rows["newtonian"], yerr=err, fmt="o",
                    ms=1.5, color="k", elinewidth=0.4, gid="data_shift")
    bottom.plot(years, shift, color="C3", lw=0.8, gid="relativistic_shift",
                label="relativistic shift (redshift + transverse Doppler)")
    bottom.plot(years, dense["gravitational_redshift"], color="C2", lw=0.7, ls=":",
                gid="gravitational_redshift", label="gravitational redshift")
    bottom.axhline(0.0, color="0.5", lw=0.5)
    top.set_title(name)

"""A small fitted system shared by the figure, table and reload tests (cached per run).

Two invented companions of a 1.2 M_sun star at 25 mas: *Aster* given as east/north
with correlated errors, *Brel* given as separation and position angle. The sampler is
stopped early (the figures need samples, not convergence).
"""

from __future__ import annotations

import functools

import astropy.units as u
import numpy as np
from astropy.table import Table
from astropy.time import Time

from massfit.scenarios.simulate import Elements, simulate_astrometry

TRUTH_MASS_MSUN = 1.2
PARALLAX_MAS = 25.0
ELEMENTS = {
    "Aster": Elements(period=420.0, ecc=0.3, inc=55.0, omega=70.0, node=130.0,
                      periapsis_time=2460300.0),
    "Brel": Elements(period=1500.0, ecc=0.1, inc=120.0, omega=200.0, node=40.0,
                     periapsis_time=2460900.0),
}


def write_system(folder):
    """Write the two tables (ECSV) into ``folder``; returns their paths."""
    rng = np.random.default_rng(11)
    times = {name: Time(2460000.5 + np.sort(rng.uniform(0, 1800, 24)), format="jd",
                        scale="tdb") for name in ELEMENTS}
    table = simulate_astrometry(times, ELEMENTS, TRUTH_MASS_MSUN,
                                parallax=PARALLAX_MAS * u.mas, error=0.3 * u.mas,
                                corr=0.4, seed=5)
    paths = []
    aster = table[table["body"] == "Aster"]
    out = Table()
    out["time"] = aster["time"].jd
    out["body"] = aster["body"]
    for col in ("east", "north", "east_err", "north_err"):
        out[col] = aster[col].to(u.mas)
    out["corr"] = aster["corr"]
    out.meta.update(time_format="jd", time_scale="tdb")
    paths.append(folder / "aster.ecsv")
    out.write(paths[-1], format="ascii.ecsv", overwrite=True)
    brel = table[table["body"] == "Brel"]
    east, north = brel["east"].to_value(u.mas), brel["north"].to_value(u.mas)
    polar = Table()
    polar["time"] = brel["time"].jd
    polar["body"] = brel["body"]
    polar["sep"] = np.hypot(east, north) * u.mas
    polar["pa"] = np.degrees(np.arctan2(east, north)) % 360 * u.deg
    polar["sep_err"] = np.full(len(brel), 0.3) * u.mas
    polar["pa_err"] = np.degrees(0.3 / np.hypot(east, north)) * u.deg
    polar.meta.update(time_format="jd", time_scale="tdb")
    paths.append(folder / "brel.ecsv")
    polar.write(paths[-1], format="ascii.ecsv", overwrite=True)
    return paths


@functools.lru_cache(maxsize=None)
def small_result():
    """A FitResult of the two-companion system, fitted once per test run."""
    import tempfile
    from pathlib import Path

    import massfit

    paths = write_system(Path(tempfile.mkdtemp(prefix="massfit-figures-")))
    return massfit.fit([str(p) for p in paths], parallax=f"{PARALLAX_MAS} mas",
                       parallax_err="0.2 mas", seed=2, max_steps=400, walkers=40,
                       progress=False)


@functools.lru_cache(maxsize=None)
def sorrel_result():
    """A short fit of the Sorrel double-lined binary (example_obs), once per run."""
    import warnings
    from pathlib import Path

    import massfit

    folder = Path(__file__).resolve().parents[1] / "example_obs" / "sorrel"
    setup = massfit.load_config(folder / "config.toml")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        obs = massfit.read_observations(setup.files, **setup.read_options)
    return massfit.fit(obs, setup.system, seed=3, max_steps=150, progress=False)


#: An invented planet seen only in the star's velocities, written in m/s with MJD (UTC)
#: times and no instrument column: the form a planet search's table often has.
PLANET = Elements(period=61.3, ecc=0.15, inc=90.0, omega=40.0, node=0.0,
                  periapsis_time=2460110.0, mass=1.9e-3)
PLANET_GAMMA_KMS = -12.3


def write_planet_velocities(folder):
    """Write the planet's velocity table (m/s, MJD UTC); returns its path."""
    from massfit.scenarios.simulate import simulate_velocities

    rng = np.random.default_rng(41)
    times = Time(2460000.5 + np.sort(rng.uniform(0, 420, 36)), format="jd", scale="tdb")
    table = simulate_velocities({"Pell": times}, {"Pell-b": PLANET}, 1.05, primary="Pell",
                                gamma=PLANET_GAMMA_KMS * u.km / u.s, error=4.0 * u.m / u.s,
                                seed=42)
    out = Table()
    out["time"] = times.utc.mjd
    out["body"] = table["body"]
    out["rv"] = table["rv"].to(u.m / u.s)
    out["rv_err"] = table["rv_err"].to(u.m / u.s)
    out.meta.update(time_format="mjd", time_scale="utc")
    path = folder / "pell_velocities.ecsv"
    out.write(path, format="ascii.ecsv", overwrite=True)
    return path


@functools.lru_cache(maxsize=None)
def planet_result():
    """A short velocity-only fit of the invented planet, once per run."""
    import tempfile
    from pathlib import Path

    import massfit
    from massfit.model.specs import SystemSpec

    path = write_planet_velocities(Path(tempfile.mkdtemp(prefix="massfit-planet-")))
    obs = massfit.read_observations(path, primary="Pell")
    system = SystemSpec(primary="Pell", central_mass=massfit.Normal(1.05, 0.05, low=0.0),
                        companions={"Pell-b": massfit.CompanionSpec("Pell-b")},
                        strict_companions=True)
    return massfit.fit(obs, system, seed=4, max_steps=300, walkers=32, progress=False)


# ------------------------------------------------------------ overlapping text (issue 16)
def _text_corners(text, renderer):
    """Corners (pixels) of the rectangle a drawn Text covers, rotation included.

    matplotlib aligns the bounding box of the rotated rectangle; the rectangle itself
    touches each side of that box once, which fixes its corners from the unrotated
    width and height (measured by the renderer).
    """
    box = text.get_window_extent(renderer)
    angle = np.radians(text.get_rotation() % 180.0)
    if min(abs(np.sin(angle)), abs(np.cos(angle))) < 1e-6:  # 0 or 90 degrees
        return np.array([[box.x0, box.y0], [box.x1, box.y0], [box.x1, box.y1],
                         [box.x0, box.y1]])
    lines = text.get_text().split("\n")
    sizes = [renderer.get_text_width_height_descent(line, text.get_fontproperties(),
                                                    ismath="$" in line) for line in lines]
    w = max(s[0] for s in sizes)
    h = box.height if len(lines) > 1 else sizes[0][1]
    s, c = abs(np.sin(angle)), abs(np.cos(angle))
    if angle < np.pi / 2:  # turned anticlockwise
        points = [(h * s, 0), (box.width, w * s), (w * c, box.height), (0, h * c)]
    else:
        points = [(w * s, 0), (box.width, h * s), (h * c, box.height), (0, w * c)]
    return np.array(points) + [box.x0, box.y0]


def _polygons_overlap(a, b, margin=0.5):
    """True where two convex polygons share more than ``margin`` pixels along every
    separating direction (the separating-axis test)."""
    if (a[:, 0].max() - margin <= b[:, 0].min() or b[:, 0].max() - margin <= a[:, 0].min()
            or a[:, 1].max() - margin <= b[:, 1].min()
            or b[:, 1].max() - margin <= a[:, 1].min()):
        return False  # their boxes are apart: no need to look closer
    for poly in (a, b):
        edges = np.roll(poly, -1, axis=0) - poly
        for nx, ny in np.column_stack([-edges[:, 1], edges[:, 0]]):
            norm = np.hypot(nx, ny)
            if norm == 0:
                continue
            pa, pb = a @ [nx / norm, ny / norm], b @ [nx / norm, ny / norm]
            if pa.max() - margin <= pb.min() or pb.max() - margin <= pa.min():
                return False
    return True


def _undrawn_tick_labels(fig) -> set:
    """Ids of tick labels matplotlib keeps but does not draw (ticks beyond the limits)."""
    out = set()
    for ax in fig.axes:
        for axis in (ax.xaxis, ax.yaxis):
            low, high = sorted(axis.get_view_interval())
            tol = 1e-9 * max(abs(low), abs(high), 1e-300)
            for ticks, locs in ((axis.get_major_ticks(), axis.get_majorticklocs()),
                                (axis.get_minor_ticks(), axis.get_minorticklocs())):
                for tick, loc in zip(ticks, locs):
                    if not low - tol <= loc <= high + tol:
                        out.update({id(tick.label1), id(tick.label2)})
    return out


def _drawn_texts(fig):
    from matplotlib.text import Text

    out = []
    hidden = _undrawn_tick_labels(fig)
    for text in fig.findobj(Text):
        if not text.get_visible() or not text.get_text().strip() or text.figure is None \
                or id(text) in hidden:
            continue
        owner = text.axes
        if owner is not None and not owner.get_visible():
            continue
        if owner is not None and text in owner.texts:  # placed inside its own panel
            owner = ("inside", owner)
        out.append((text, owner))
    return out


def overlapping_text(fig) -> list:
    """Every pair of drawn texts that overlap, and every text over another panel.

    Draws ``fig`` with the Agg renderer. A text belongs to its axes (tick labels, axis
    labels, titles, legends inside it) and may sit on them; it must not cover another
    framed panel (an axes whose frame is drawn) or another text. Returns descriptions.
    """
    from matplotlib.legend import Legend

    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    texts = _drawn_texts(fig)
    corners = [_text_corners(t, renderer) for t, _ in texts]
    problems = []
    for i, (a, _) in enumerate(texts):
        for j in range(i + 1, len(texts)):
            b = texts[j][0]
            if _polygons_overlap(corners[i], corners[j]):
                problems.append(f"text {a.get_text()!r} overlaps text {b.get_text()!r}")
    panels = [ax for ax in fig.axes if ax.get_visible() and ax.get_frame_on() and ax.axison]
    for (text, owner), poly in zip(texts, corners):
        home = owner[1] if isinstance(owner, tuple) else owner
        legend = next((p for p in _parents(text) if isinstance(p, Legend)), None)
        if legend is not None and legend.axes is not None:
            home = legend.axes
        for ax in panels:
            if ax is home:
                continue
            box = ax.get_window_extent(renderer)
            frame = np.array([[box.x0, box.y0], [box.x1, box.y0], [box.x1, box.y1],
                              [box.x0, box.y1]])
            if _polygons_overlap(poly, frame, margin=1.0):
                problems.append(f"text {text.get_text()!r} lies over the panel "
                                f"{ax.get_label() or ax.get_title() or id(ax)}")
    return problems


def _parents(artist):
    """The legends that hold ``artist`` (legend texts know only their figure)."""
    fig = artist.figure
    legends = list(getattr(fig, "legends", []))
    for ax in fig.axes:
        if ax.get_legend() is not None:
            legends.append(ax.get_legend())
    return [leg for leg in legends if artist in leg.get_texts()
            or artist is leg.get_title()]

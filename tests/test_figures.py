"""The figures: content, not only files (labels and units, orientation, tracks, panels)."""

import astropy.units as u
import matplotlib
import numpy as np
import pytest
from astropy.time import Time

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402

import massfit.plot as plots  # noqa: E402
from massfit.summarise.residuals import Residuals, residual_periodogram  # noqa: E402
from massfit.errors import ConfigError  # noqa: E402


@pytest.fixture(scope="module")
def result():
    from figure_helpers import small_result

    return small_result()


@pytest.fixture(autouse=True)
def close_figures():
    yield
    plt.close("all")


def sky_axes(fig):
    return [ax for ax in fig.axes if ax.get_xlabel().startswith(r"$\Delta\alpha")]


def test_orbit_plot_orientation_units_and_tracks(result):
    fig = plots.orbit_plot(result, n_tracks=12, seed=3)
    skies = sky_axes(fig)
    assert len(skies) == 2  # one panel per companion
    for ax in skies:
        assert ax.xaxis_inverted()  # east to the left
        assert not ax.yaxis_inverted()  # north up
        assert ax.get_xlabel().endswith("[mas]") and ax.get_ylabel().endswith("[mas]")
        assert "(east)" in ax.get_xlabel() and "(north)" in ax.get_ylabel()
        tracks = [line for line in ax.lines if line.get_gid() == "posterior-track"]
        assert len(tracks) == 12
        assert len([line for line in ax.lines if line.get_gid() == "best-orbit"]) == 1
        primary = [line for line in ax.lines if line.get_gid() == "primary"][0]
        assert tuple(primary.get_xydata()[0]) == (0.0, 0.0)
    names = {t.get_text() for ax in skies for t in ax.texts if t.get_gid() == "companion-name"}
    assert names == {"Aster", "Brel"}
    # Two residual panels under each sky panel, in a finer unit: east and north for
    # Aster (given as offsets), separation and position angle for Brel (given so).
    residual_labels = [ax.get_ylabel() for ax in fig.axes if ax.get_ylabel().startswith("O$-$C")]
    assert residual_labels == ["O$-$C east\n[$\\mu$as]", "O$-$C north\n[$\\mu$as]",
                               "O$-$C sep\n[$\\mu$as]", "O$-$C PA\n[deg]"]
    assert any(ax.get_label() == "<colorbar>" for ax in fig.axes)


def test_orbit_plot_legend_and_time_axes(result):
    fig = plots.orbit_plot(result, n_tracks=12, seed=3)
    legend = [t.get_text() for t in fig.legends[0].get_texts()]
    assert legend == ["data (1$\\sigma$ ellipse)", "best orbit", "12 orbits from the posterior",
                      "primary"]
    # The tables give JD in TDB: the time axes and the colour bar say so.
    bar = [ax for ax in fig.axes if ax.get_label() == "<colorbar>"][0]
    assert bar.get_xlabel() == "epoch of the data: JD $-$ 2460000 (TDB)"
    bottoms = [ax for ax in fig.axes if ax.get_xlabel() == "JD $-$ 2460000 (TDB)"]
    assert len(bottoms) == 2
    data = result.model.observations.astrometry
    x = np.concatenate([c.get_offsets()[:, 0] for ax in bottoms for c in ax.collections
                        if c.get_gid() in ("residuals-north", "residuals-PA")])
    assert np.allclose(np.sort(x), np.sort(data.time.tdb.jd - 2460000.0))


def test_orbit_plot_orders_companions_by_period(result, monkeypatch):
    def order(fig):
        return [t.get_text() for ax in sky_axes(fig) for t in ax.texts
                if t.get_gid() == "companion-name"]

    assert order(plots.orbit_plot(result, n_tracks=0)) == ["Aster", "Brel"]
    # Were Aster's period the longer, it would come second.
    period = dict(result.summary["companions"]["Aster"]["period"], median=5000.0)
    monkeypatch.setitem(result.summary["companions"]["Aster"], "period", period)
    assert order(plots.orbit_plot(result, n_tracks=0)) == ["Brel", "Aster"]


def test_polar_residuals_are_separation_and_position_angle(result):
    # Brel's O-C in PA is the wrapped difference of the table's PA and the model's,
    # in degrees: check it against a direct computation at the best sample.
    from massfit.summarise.residuals import best_sample

    fig = plots.orbit_plot(result, companions=["Brel"], n_tracks=0)
    pa_axis = [ax for ax in fig.axes if ax.get_ylabel() == "O$-$C PA\n[deg]"][0]
    shown = [c for c in pa_axis.collections if c.get_gid() == "residuals-PA"][0]
    model = result.model
    data = model.observations.astrometry
    rows = model.rows["Brel"].index
    east, north = (v[0] for v in model.predicted_offsets(best_sample(result), "Brel"))
    expected = np.degrees(np.angle(np.exp(1j * (data.pa[rows] - np.arctan2(east, north)))))
    assert np.allclose(shown.get_offsets()[:, 1], expected, atol=1e-9)


def test_orbit_plot_data_points_follow_the_table(result):
    # Brel was given as separation and position angle: the dots must sit at
    # east = sep sin(pa), north = sep cos(pa) (the conventions), in mas.
    fig = plots.orbit_plot(result, companions=["Brel"], n_tracks=0)
    ax = sky_axes(fig)[0]
    dots = [c for c in ax.collections if c.get_gid() == "data"][0].get_offsets()
    data = result.model.observations.astrometry
    rows = data.body == "Brel"
    expected = np.column_stack([data.sep[rows] * np.sin(data.pa[rows]),
                                data.sep[rows] * np.cos(data.pa[rows])]) * 1e3
    assert np.allclose(np.asarray(dots), expected, rtol=1e-9)
    ellipses = [c for c in ax.collections if c.get_gid() == "error-ellipses"][0]
    assert len(ellipses.get_paths()) == rows.sum()


def test_orbit_plot_shows_fixed_plane_rows_exactly_as_observed(result):
    # One fixed sky plane: the dots and ellipses are the observed offsets, unmoved
    # (with a moving line of sight they are carried to the mean one: test_viewing.py).
    from massfit.plot.sky import SkyFrame, observed_offsets, shown_offsets
    from massfit.summarise.residuals import best_sample

    model = result.model
    theta = best_sample(result)
    best = model.physical(theta[None])
    for name in model.companions:
        frame = SkyFrame(model, name, best)
        east, north, cov, turn = shown_offsets(model, theta, name, frame)
        raw_e, raw_n, raw_cov = observed_offsets(model.observations.astrometry, frame.index)
        assert np.array_equal(east, raw_e * frame.row_factor)
        assert np.array_equal(north, raw_n * frame.row_factor)
        assert np.array_equal(cov, raw_cov * frame.row_factor[:, None, None] ** 2)
        assert not np.any(turn)
    fig = plots.orbit_plot(result, n_tracks=0)
    assert not [t for ax in fig.axes for t in ax.texts if t.get_gid() == "sight-note"]


def test_error_ellipse_carries_the_correlation():
    # A 1-sigma ellipse is the set of points at Mahalanobis distance 1.
    cov = np.array([[[4.0, 1.2], [1.2, 1.0]]])  # rho = 0.6 between east and north
    patch = plots.error_ellipses(np.array([10.0]), np.array([-5.0]), cov)[0]
    angle = np.linspace(0, 2 * np.pi, 50)
    # The patch maps the unit circle onto the ellipse: take points on that circle.
    points = patch.get_patch_transform().transform(np.column_stack([np.cos(angle),
                                                                    np.sin(angle)]))
    d = points - np.array([10.0, -5.0])
    mahalanobis = np.einsum("ni,ij,nj->n", d, np.linalg.inv(cov[0]), d)
    assert np.allclose(mahalanobis, 1.0, atol=1e-6)
    # Negative control: the same ellipse without the correlation is not it.
    d0 = np.einsum("ni,ij,nj->n", d, np.diag(1 / np.diag(cov[0])), d)
    assert not np.allclose(d0, 1.0, atol=0.1)


@pytest.mark.parametrize("size, angle, unit", [
    (12.0, True, "arcsec"), (0.05, True, "mas"), (2e-5, True, r"$\mu$as"),
    (3.0, False, "au"), (0.004, False, r"$10^{3}$ km"), (0.01, False, r"$10^{6}$ km"),
])
def test_display_units_read_well(size, angle, unit):
    factor, label = plots.sky.SkyFrame.display(size, angle)
    assert label == unit
    assert 0.5 <= size * factor < 1000.0 * 1.5


def test_corner_plot_labels_units_and_truths(result):
    params = ["mass", "parallax", "Aster.period", "Aster.eccentricity"]
    fig = plots.corner_plot(result, parameters=params, mass_unit="Msun", titles=True,
                            truths={"mass": 1.2 * u.M_sun, "Aster.period": 420.0})
    axes = np.array(fig.axes).reshape(4, 4)
    assert axes[-1, 0].get_xlabel() == r"$M$ [$M_\odot$]"
    assert axes[-1, 1].get_xlabel() == r"$\varpi$ [$\mathrm{mas}$]"
    assert axes[-1, 2].get_xlabel() == r"$P_{\text{Aster}}$ [$\mathrm{d}$]"
    assert axes[-1, 3].get_xlabel() == r"$e_{\text{Aster}}$"
    # Titles carry the rounded value with its unit, never "0.00 +0.00 -0.00".
    title = axes[2, 2].get_title()
    assert title.startswith(r"$P_{\text{Aster}} = ") and r"\mathrm{d}" in title
    assert "0.00^{+0.00}" not in "".join(ax.get_title() for ax in axes.flat)
    # Truth lines at the given values: 1.2 M_sun and 420 d.
    vlines = [line.get_xdata()[0] for line in axes[0, 0].lines if line.get_color() == "C3"]
    assert vlines and vlines[0] == pytest.approx(1.2)
    vlines = [line.get_xdata()[0] for line in axes[2, 2].lines if line.get_color() == "C3"]
    assert vlines[0] == pytest.approx(420.0)
    assert fig.get_size_inches()[0] == pytest.approx(plots.PAGE_WIDTH)


def test_corner_plot_default_parameters_and_offsets(result):
    # The central mass, the parallax and each companion's P, a, e, i; no GM (GM/M is
    # a constant: its panel against M would be a line).
    assert plots.default_corner_parameters(result) == [
        "mass", "parallax", "Aster.period", "Aster.semi_major_axis",
        "Aster.eccentricity", "Aster.inclination", "Brel.period",
        "Brel.semi_major_axis", "Brel.eccentricity", "Brel.inclination"]
    fig = plots.corner_plot(result, parameters=["mass", "gm", "Aster.period"],
                            mass_unit="Mjup", titles=False)
    axes = np.array(fig.axes).reshape(3, 3)
    labels = [ax.get_xlabel() for ax in axes[-1]]
    assert labels[0] == r"$M$ [$M_\mathrm{J}$]"
    # GM ~ 1.6e11 km^3/s^2 reads in units of 10^11.
    assert labels[1] == r"$GM$ [$10^{11}\,\mathrm{km^3\,s^{-2}}$]"
    assert labels[2] == r"$P_{\text{Aster}}$ [$\mathrm{d}$]"
    # No tick label of any panel uses an offset of its own.
    fig.canvas.draw()
    assert all(ax.xaxis.get_major_formatter().get_offset() == "" for ax in axes[-1])
    # The values are listed in the empty upper triangle, with what Delta means.
    listing = "".join(t.get_text() for t in fig.texts)
    assert r"P_{\text{Aster}} =" in listing


def test_corner_plot_has_no_degenerate_or_fixed_panels(result):
    # Asked for with a copy of a column (GM of M, a in mas of a in au at a sampled
    # parallax is not a copy) the default drops the copy; a fixed quantity has no panel.
    from types import SimpleNamespace

    samples = result.samples
    shown = plots.corner._shown_columns(result, None, None, None, ("period",), None, False)
    assert [c.key for c in shown] == ["mass", "parallax", "Aster.period", "Brel.period"]
    # The same fit with the parallax held fixed: no parallax panel.
    fixed = SimpleNamespace(model=result.model, summary=result.summary,
                            samples={**samples, "parallax": np.full_like(samples["parallax"],
                                                                         25.0)})
    shown = plots.corner._shown_columns(fixed, None, None, None, ("period",), None, False)
    assert [c.key for c in shown] == ["mass", "Aster.period", "Brel.period"]
    # The rank test that drops copies: GM against M is exactly monotonic.
    from massfit.plot.corner import _copies

    mass = plots.corner.Column("mass", samples["central_mass_solar"], "M", "", u.M_sun)
    gm = plots.corner.Column("gm", samples["central_gm"], "GM", "", u.km ** 3 / u.s ** 2)
    a = plots.corner.Column("Aster.semi_major_axis",
                            samples["companions"]["Aster"]["semi_major_axis"], "a", "", u.au)
    assert _copies([mass, gm, a]) == ["gm"]
    # Negative control: a, which depends on M and P, is not a copy of M.
    assert _copies([mass, a]) == []


def test_key_corner_of_many_companions_keeps_to_what_carries_the_mass(result):
    # Four companions would make 18 columns with P, a, e, i each: the key corner keeps
    # each one's P and a (the mass is a^3/P^2), at most MAX_KEY_COLUMNS; then a alone.
    from types import SimpleNamespace

    comps = result.samples["companions"]
    summary = result.summary["companions"]
    names = {"Aster": "Aster", "Brel": "Brel", "Cade": "Aster", "Dorn": "Brel"}
    many = SimpleNamespace(
        model=result.model, samples={**result.samples, "companions": {
            new: comps[old] for new, old in names.items()}},
        summary={**result.summary, "companions": {new: summary[old]
                                                  for new, old in names.items()}})
    shown = plots.default_corner_parameters(many)
    assert len(shown) <= plots.corner.MAX_KEY_COLUMNS
    assert shown[:2] == ["mass", "parallax"]
    assert sorted(shown[2:]) == sorted(f"{n}.{q}" for n in names
                                       for q in ("period", "semi_major_axis"))
    five = {**names, "Eske": "Aster"}
    many.samples["companions"] = {new: comps[old] for new, old in five.items()}
    many.summary["companions"] = {new: summary[old] for new, old in five.items()}
    assert sorted(plots.default_corner_parameters(many)[2:]) == sorted(
        f"{n}.semi_major_axis" for n in five)
    # Asked for, the quantities are shown as asked; the full corner has everything.
    assert len(plots.default_corner_parameters(many, quantities=("period", "eccentricity"))) == 12
    assert len(plots.default_corner_parameters(many, full=True)) == 2 + 6 * 5


def test_full_corner_plot_on_request(result):
    full = plots.default_corner_parameters(result, full=True)
    assert full == [
        "mass", "parallax", *(f"{name}.{q}" for name in ("Aster", "Brel")
                              for q in ("period", "semi_major_axis", "eccentricity",
                                        "inclination", "periapsis_argument",
                                        "ascending_node"))]
    assert plots.FIGURES["corner_full"] is plots.full_corner_plot
    assert "corner_full" not in plots.applicable_figures(result)  # only when asked


def test_velocity_amplitudes_in_the_corner_use_the_input_unit():
    from figure_helpers import planet_result

    planet = planet_result()
    fig = plots.corner_plot(planet)
    assert fig.massfit_parameters == ["Pell-b.period", "Pell-b.eccentricity",
                                      "Pell-b.rv_semi_amplitude"]
    axes = np.array(fig.axes).reshape(3, 3)
    assert axes[-1, 2].get_xlabel() == r"$K_{1,\text{Pell-b}}$ [$\mathrm{m\,s^{-1}}$]"
    k_kms = planet.summary["companions"]["Pell-b"]["rv_semi_amplitude"]["median"]
    assert np.mean(axes[2, 2].get_xlim()) == pytest.approx(1e3 * k_kms, rel=0.05)


def test_narrow_posteriors_are_drawn_as_offsets():
    # P = 4.1152998 +/- 0.0000005 d: the axis shows P minus the printed median in
    # units of 10^-6 d, and the truth moves with it.
    rng = np.random.default_rng(1)
    column = plots.corner.Column("Ymra.period", 4.1152998 + 5e-7 * rng.standard_normal(4000),
                           r"P_\mathrm{Ymra}", r"\mathrm{d}", u.day)
    assert column.label() == r"$\Delta P_\mathrm{Ymra}$ [$10^{-6}\,\mathrm{d}$]"
    assert column.reference == float(column.rounded.median)
    assert column.truth(4.1153003 * u.day) == pytest.approx(
        (4.1153003 - column.reference) * 1e6)
    assert np.all(np.abs(column.plotted(column.values)) < 5)


def test_corner_dots_are_draws_and_its_quantiles_are_the_summarys(result, tmp_path):
    # The 2-D panels' dots are a fixed number of random samples (one rasterised layer
    # under the panels); the dashed lines of the 1-D histograms are the summary's
    # median and 68.27 % bounds, which come from every sample.
    from PIL import Image

    params = ["mass", "Aster.period", "Aster.eccentricity"]
    n = len(result.samples["central_mass_solar"])
    fig = plots.corner_plot(result, parameters=params, point_draws=50)
    dots = [a for a in fig.artists if a.get_gid() == "sample-dots"]
    assert len(dots) == 3  # one per 2-D panel of three columns
    assert all(len(d.get_xdata()) == 50 and d.get_rasterized() for d in dots)
    assert fig.massfit_point_draws == 50
    assert f"50 of the {n} posterior samples" in fig.massfit_description
    columns = plots.corner._shown_columns(result, params, None, None, None, None, False)
    data = np.column_stack([c.plotted(c.values) for c in columns])
    rows = {tuple(r) for r in data[:, [0, 1]]}
    first = dots[0]  # the (M, P) panel: each dot is one sample's pair
    assert all(pair in rows for pair in zip(first.get_xdata(), first.get_ydata()))
    axes = np.array(fig.axes).reshape(3, 3)
    for i, quantity in ((1, "period"), (2, "eccentricity")):
        block = result.summary["companions"]["Aster"][quantity]
        expected = columns[i].plotted([block["lower_68"], block["median"], block["upper_68"]])
        dashed = sorted(line.get_xdata()[0] for line in axes[i, i].lines
                        if line.get_linestyle() == "--")
        assert dashed == pytest.approx(expected, rel=1e-9, abs=1e-12)
        # Negative control: the same quantiles of the 50 dots alone are elsewhere.
        own = np.percentile(dots[i - 1].get_ydata(), [15.865, 50, 84.135])
        assert own != pytest.approx(expected, rel=1e-9, abs=1e-12)
    # The saved files say what the dots are; by default POINT_DRAWS of them.
    png, pdf = plots.save_figure(fig, tmp_path / "corner")
    assert Image.open(png).info["Description"] == fig.massfit_description
    assert f"/Subject ({fig.massfit_description})".encode() in pdf.read_bytes()
    fig = plots.corner_plot(result, parameters=params)
    assert fig.massfit_point_draws == min(plots.corner.POINT_DRAWS, n)


def test_corner_plot_refuses_unknown_parameters(result):
    with pytest.raises(ConfigError, match="Zed.period"):
        plots.corner_plot(result, parameters=["mass", "Zed.period"])
    with pytest.raises(ConfigError, match="mass unit"):
        plots.corner_plot(result, mass_unit="stone")


def test_residual_and_periodogram_panels(result):
    fig = plots.residual_plot(result)
    assert len(fig.axes) == 2
    kinds = {c.get_gid() for ax in fig.axes for c in ax.collections}
    assert {"residuals-east", "residuals-north", "residuals-sep", "residuals-pa"} <= kinds
    assert all(ax.get_ylabel() == r"(O$-$C)/$\sigma$" for ax in fig.axes)
    fig = plots.periodogram_plot(result)
    assert len(fig.axes) == 2 and set(fig.massfit_flags) == {"Aster", "Brel"}
    assert fig.axes[-1].get_xlabel() == "period of the residual signal [d]"


def test_residual_figures_write_the_summarys_numbers(result):
    # chi^2 and the residual peak are read from the summary's adequacy block and written
    # by the report's own functions: one number, one wording, everywhere.
    from massfit.summarise.adequacy import chi2_text, panels
    from massfit.summarise.residuals import peak_text

    entries = panels(result.summary["adequacy"])
    texts = [t.get_text() for ax in plots.residual_plot(result).axes for t in ax.texts
             if t.get_gid() == "chi2"]
    assert texts == [f"{name}\n{chi2_text(entry)}" for name, entry in entries.items()]
    report = result.report()
    assert all(chi2_text(entry) in report for entry in entries.values())
    fig = plots.periodogram_plot(result)
    shown = " ".join(t.get_text() for ax in fig.axes for t in ax.texts)
    for name, entry in entries.items():
        assert f"{name}: {peak_text(entry['periodogram'])}" in shown
        assert fig.massfit_flags[name] == entry["periodogram"]["false_alarm_probability"]


def test_periodogram_flags_a_leftover_signal():
    rng = np.random.default_rng(4)
    t = Time(2460000.0 + np.sort(rng.uniform(0, 600, 80)), format="jd", scale="tdb")
    comp = np.array(["east", "north"] * 40)
    row = np.arange(80)
    noise = rng.standard_normal(80)
    quiet = Residuals(time=t, component=comp, row=row, normalised=noise)
    signal = noise + 1.5 * np.sin(2 * np.pi * t.jd / 37.0)
    loud = Residuals(time=t, component=comp, row=row, normalised=signal)
    found = residual_periodogram(loud, orbital_period=100.0)
    assert found["fap"] < 1e-4
    assert found["best_period"] == pytest.approx(37.0, rel=0.02)
    # Negative control: the same epochs with noise alone raise no flag.
    assert residual_periodogram(quiet, orbital_period=100.0)["fap"] > 0.01


def test_saved_figures_are_vector_pdf_and_png(result, tmp_path):
    fig = plots.residual_plot(result)
    paths = plots.save_figure(fig, tmp_path / "res", ("png", "pdf"))
    assert [p.suffix for p in paths] == [".png", ".pdf"]
    assert paths[1].read_bytes()[:5] == b"%PDF-"
    assert paths[0].read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def _overlaps(cases):
    from figure_helpers import overlapping_text

    problems = []
    for tag, result, stems in cases:
        for stem in stems:
            fig = plots.FIGURES[stem](result)
            problems += [f"{tag}, {stem}: {p}" for p in overlapping_text(fig)]
            plt.close(fig)
    return problems


@pytest.mark.slow  # 7 s: every figure drawn and measured
def test_no_figure_has_overlapping_text(result):
    # Every text's drawn rectangle (rotation included) against every other text and
    # every other framed panel, after drawing with the Agg renderer: each figure of
    # the two-companion fit, and the velocity figures of a velocity-only fit.
    from figure_helpers import planet_result

    cases = [("two companions", result, plots.applicable_figures(result)),
             ("velocities in m/s", planet_result(), ["corner", "rv", "rv_time"])]
    assert _overlaps(cases) == []


@pytest.mark.slow
def test_no_overlapping_text_in_the_larger_figures(result):
    # The full corner plots (11 and 14 parameters) and the double-lined binary's figures.
    from figure_helpers import sorrel_result

    sorrel = sorrel_result()
    cases = [("two companions", result, ["corner_full"]),
             ("double-lined", sorrel, plots.applicable_figures(sorrel) + ["corner_full"])]
    assert _overlaps(cases) == []


def test_overlap_check_finds_overlaps():
    # Negative controls: two texts on one spot, a title running over the next panel,
    # and tick labels turned into each other.
    from figure_helpers import overlapping_text

    fig, (left, right) = plt.subplots(1, 2, figsize=(3.5, 2.0))
    left.text(0.5, 0.5, "one label", transform=left.transAxes)
    left.text(0.52, 0.5, "another", transform=left.transAxes)
    left.set_title("a title far too long for its own narrow panel at all", fontsize=8)
    found = overlapping_text(fig)
    assert any("overlaps text" in p for p in found)
    assert any("lies over the panel" in p for p in found)
    fig, ax = plt.subplots(figsize=(1.0, 1.0))
    ax.set_xlim(0, 1)
    ax.set_xticks([0.2, 0.3])
    ax.set_xticklabels(["1059.2", "1060.8"], rotation=45)
    assert any("1059.2" in p for p in overlapping_text(fig))
    # ... and a clean figure passes.
    fig, ax = plt.subplots(figsize=(3.5, 2.5), layout="constrained")
    ax.set_title("short")
    ax.set_xlabel("x")
    assert overlapping_text(fig) == []


def test_every_quantity_label_is_valid_math_text():
    # A symbol with a subscript of its own (K_1, t_p, m_min) takes the body's name into
    # that subscript: "K_1_{b}" is a double subscript, which math text refuses.
    from matplotlib.mathtext import MathTextParser

    from massfit.plot.corner import _with_body
    from massfit.summarise.quantities import COMPANION

    parser = MathTextParser("path")
    for quantity in COMPANION.values():
        label = _with_body(quantity.symbol, "Pell-b")
        parser.parse(f"${label}$")  # raises ValueError on bad math text
        assert "}_{" not in label.replace("}}_{", "") or label.startswith("{")
    assert _with_body("K_1", "b") == r"K_{1,\text{b}}"
    assert _with_body(r"t_\mathrm{p}", "b") == r"t_{\mathrm{p},\text{b}}"


def test_corner_plot_colours_groups_of_samples(result):
    # The hook for posterior modes: each group's samples in a colour of their own.
    from figure_helpers import overlapping_text

    period = result.samples["companions"]["Aster"]["period"]
    short = period < np.median(period)
    fig = plots.corner_plot(result, parameters=["mass", "Aster.period", "Aster.eccentricity"],
                            groups={"short": short, "long": ~short})
    axes = np.array(fig.axes).reshape(3, 3)
    points = [ln for ln in axes[1, 0].lines if ln.get_gid() == "group-0"]
    assert len(points) == 1 and len(points[0].get_xdata()) == short.sum()
    assert points[0].get_color() == "C0"
    legend = [t.get_text() for ax in fig.axes if ax.get_legend() for t in
              ax.get_legend().get_texts()]
    assert legend == ["short (50%)", "long (50%)"]
    assert overlapping_text(fig) == []
    with pytest.raises(ConfigError, match="flags"):
        plots.corner_plot(result, parameters=["mass"], groups={"bad": short[:5]})


def test_orbit_plot_is_legible_at_notebook_size(result):
    # A notebook shows a figure at its own dpi: at 150 the page-wide orbit figure is
    # over 1000 pixels across, and no text is below 6 pt (about 12 pixels high).
    fig = plots.orbit_plot(result, n_tracks=4)
    assert fig.dpi == 150
    assert fig.get_size_inches()[0] * fig.dpi >= 1000
    from matplotlib.text import Text

    sizes = [t.get_fontsize() for t in fig.findobj(Text) if t.get_text().strip()]
    assert min(sizes) >= 6


def test_weighed_modes_coloured_in_corner_and_orbits(result):
    # A nested fit's weighed modes (chain.modes, chain.mode_members) colour the corner
    # and the orbit plot by themselves, in the same colours, named with their
    # probability; without them (an emcee fit) nothing changes.
    from massfit.plot.style import MODE_COLOURS, mode_groups

    assert mode_groups(result) == {}
    period = result.samples["companions"]["Aster"]["period"]
    short = period < np.median(period)
    chain = result.chain
    try:
        chain.modes = [{"start_periods": {"Aster": float(np.median(period[short]))},
                        "probability": 0.5, "probability_err": 0.04},
                       {"start_periods": {"Aster": float(np.median(period[~short]))},
                        "probability": 0.5, "probability_err": 0.04}]
        chain.mode_members = [short, ~short]
        fig = plots.corner_plot(result, parameters=["mass", "Aster.period"])
        legend = [t.get_text() for ax in fig.axes if ax.get_legend()
                  for t in ax.get_legend().get_texts()]
        assert len(legend) == 2 and all("p = 0.50 \u00b1 0.04" in t for t in legend)
        fig = plots.orbit_plot(result, n_tracks=30, residuals=False)
        colours = {ln.get_color() for ax in fig.axes for ln in ax.lines
                   if ln.get_gid() == "posterior-track"}
        assert colours == set(MODE_COLOURS[:2])
    finally:
        del chain.modes, chain.mode_members

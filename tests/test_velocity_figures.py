"""Radial-velocity figures of a double-lined binary: against time, folded, residuals."""

import matplotlib
import numpy as np
import pytest

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402

import massfit.plot as plots  # noqa: E402


@pytest.fixture(scope="module")
def result():
    from figure_helpers import sorrel_result

    return sorrel_result()


@pytest.fixture(scope="module")
def sorrel(result):
    return result


@pytest.fixture(autouse=True)
def close_figures():
    yield
    plt.close("all")


def test_time_plot_has_both_stars_both_instruments_and_residuals(result):
    fig = plots.velocity_time_plot(result)
    top, bottom = fig.axes
    # The input is in km/s and JD (TDB): the axes say so, with gamma taken off.
    assert top.get_ylabel() == r"$v_r - \gamma$ [$\mathrm{km\,s^{-1}}$]"
    assert bottom.get_ylabel().startswith("O$-$C")
    assert bottom.get_xlabel() == "JD $-$ 2459000 (TDB)"
    assert len([ln for ln in top.lines if ln.get_gid() == "rv-model"]) == 2
    # Four groups of data (two stars x two spectrographs), each with its own marker per
    # spectrograph; the legend names the stars and the instruments.
    legend = [t.get_text() for t in top.get_legend().get_texts()]
    assert legend == ["Sorrel-A", "Sorrel-B", "Halden", "Quillon"]
    markers = {h.get_marker() for h in top.get_legend().legend_handles[2:]}
    assert len(markers) == 2
    n_rows = len(result.model.observations.velocities)
    points = sum(len(ln.get_xdata()) for ln in top.lines if ln.get_gid() == "rv-data")
    assert points == n_rows


def test_phase_plot_curves_have_the_summary_amplitudes(result):
    fig = plots.velocity_plot(result)
    top = fig.axes[0]
    assert fig.axes[1].get_xlim() == (0.0, 1.0)
    assert top.get_title().startswith("Sorrel-B: $P = ")
    curves = [ln.get_ydata() for ln in top.lines if ln.get_gid() == "rv-model"]
    assert len(curves) == 2
    # Over a whole orbit v = K (cos(nu + omega) + e cos omega) spans 2 K.
    comp = result.summary["companions"]["Sorrel-B"]
    for curve, key in zip(curves, ("rv_semi_amplitude", "rv_semi_amplitude_companion")):
        half_range = 0.5 * (np.max(curve) - np.min(curve))
        block = comp[key]
        assert block["lower_95"] * 0.99 <= half_range <= block["upper_95"] * 1.01


def test_residual_figures_add_a_velocity_panel(result):
    fig = plots.residual_plot(result)
    assert len(fig.axes) == 2
    texts = [t.get_text() for ax in fig.axes for t in ax.texts]
    assert any(t.startswith("radial velocities") for t in texts)
    fig = plots.periodogram_plot(result)
    assert set(fig.massfit_flags) == {"Sorrel-B", "radial velocities"}


def test_velocity_figures_are_written_for_velocity_fits(result):
    assert plots.applicable_figures(result) == ["corner", "orbits", "residuals",
                                                "periodogram", "rv", "rv_time"]


# ------------------------------------------- a planet's velocities given in m/s (issue 16)
@pytest.fixture(scope="module")
def planet():
    from figure_helpers import planet_result

    return planet_result()


def test_velocities_are_drawn_in_the_input_unit_without_gamma(planet):
    # The table gives m/s about gamma = -12.3 km/s (a signal of K = 100 m/s): the
    # figure must read in m/s about zero, not -12.2 ... -12.4 km/s.
    from figure_helpers import PLANET_GAMMA_KMS

    for fig in (plots.velocity_plot(planet), plots.velocity_time_plot(planet)):
        top = fig.axes[0]
        assert top.get_ylabel() == r"$v_r - \gamma$ [$\mathrm{m\,s^{-1}}$]"
        assert fig.axes[1].get_ylabel() == r"O$-$C [$\mathrm{m\,s^{-1}}$]"
        data = np.concatenate([ln.get_ydata() for ln in top.lines if ln.get_gid() == "rv-data"])
        k_ms = 1e3 * planet.summary["companions"]["Pell-b"]["rv_semi_amplitude"]["median"]
        assert np.max(np.abs(data)) < 1.3 * k_ms
        assert abs(np.mean(data)) < 0.3 * k_ms < 1e3 * abs(PLANET_GAMMA_KMS)
        # The model curve spans 2 K in m/s (the summary's K is in km/s).
        curve = [ln.get_ydata() for ln in top.lines if ln.get_gid() == "rv-model"][0]
        assert 0.5 * np.ptp(curve) == pytest.approx(k_ms, rel=0.05)


def test_velocity_legend_names_instruments_not_files(planet, sorrel):
    # One file without an instrument column: no entry named after the file.
    top = plots.velocity_time_plot(planet).axes[0]
    legend = [t.get_text() for t in top.get_legend().get_texts()]
    assert legend == ["Pell"]
    assert not any("pell_velocities" in text for text in legend)
    # Two spectrographs named in the table's instrument column are told apart.
    top = plots.velocity_time_plot(sorrel).axes[0]
    assert [t.get_text() for t in top.get_legend().get_texts()][2:] == ["Halden", "Quillon"]


def test_phase_plot_title_is_the_reported_period(planet):
    from massfit.summarise.rounding import format_interval, print_exponent, round_interval

    block = planet.summary["companions"]["Pell-b"]["period"]
    rounded = round_interval(block, exponent=print_exponent(block))
    title = plots.velocity_plot(planet).axes[0].get_title()
    assert title == f"Pell-b: $P = {rounded.latex()}$ d"
    # The same digits as the report's value list.
    assert format_interval(block).split()[0] == rounded.median
    assert f"{rounded.median}^" in title or f"{rounded.median} \\pm" in title


def test_velocity_time_axis_in_the_input_format_and_scale(planet):
    from astropy.time import Time

    fig = plots.velocity_time_plot(planet)
    assert fig.axes[1].get_xlabel() == "MJD (UTC)"
    x = np.sort(np.concatenate([ln.get_xdata() for ln in fig.axes[0].lines
                                if ln.get_gid() == "rv-data"]))
    vel = planet.model.observations.velocities
    expected = np.sort(Time(vel.time, scale="tdb").utc.mjd)
    assert np.allclose(x, expected, atol=1e-6)

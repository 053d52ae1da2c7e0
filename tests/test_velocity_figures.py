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


@pytest.fixture(autouse=True)
def close_figures():
    yield
    plt.close("all")


def test_time_plot_has_both_stars_both_instruments_and_residuals(result):
    fig = plots.velocity_time_plot(result)
    top, bottom = fig.axes
    assert "km s$^{-1}$" in top.get_ylabel() and "zero point of Halden" in top.get_ylabel()
    assert bottom.get_ylabel().startswith("O$-$C")
    assert bottom.get_xlabel() == "epoch [Julian year, TDB]"
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
    assert top.get_title().startswith("Sorrel-B: P = ")
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

"""One number per quantity: the terminal, summary.json and the figures say the same thing.

The fits are the small shared ones of ``figure_helpers`` (astrometry of two companions;
the Sorrel double-lined binary) and one short fit of an invented single-lined orbit
given in m/s. Intervals are the conventions' (median, 68.27 % and 95.45 % central
intervals: the 15.865th/84.135th and 2.275th/97.725th percentiles).
"""

import json

import matplotlib
import numpy as np
import pytest

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402

from massfit.cli.commands import main  # noqa: E402
from massfit.summarise.adequacy import chi2_text, panels  # noqa: E402
from massfit.summarise.residuals import peak_text  # noqa: E402
from massfit.summarise.rounding import format_range  # noqa: E402


@pytest.fixture(autouse=True)
def close_figures():
    yield
    plt.close("all")


def _panel_texts(fig):
    return [t.get_text() for ax in fig.axes for t in ax.texts]


# ------------------------------------------------------------------ intervals
def test_wide_interval_is_rounded_like_the_value():
    # The block of the issue: printed as "1.56932e+11 .. 1.6269e+11" before.
    block = {"median": 1.611e11, "lower_68": 1.6096e11, "upper_68": 1.6124e11,
             "lower_95": 1.56932e11, "upper_95": 1.6269e11, "unit": "km3 / s2"}
    assert format_range(block) == "(1.5693 .. 1.6269) e+11"  # the value: (1.6110 +/- 0.0014) e+11
    assert format_range(block, "68") == "(1.6096 .. 1.6124) e+11"
    days = {"median": 12.345, "lower_68": 12.30, "upper_68": 12.40, "lower_95": 12.2512,
            "upper_95": 12.4488, "unit": "d"}
    assert format_range(days) == "12.25 .. 12.45"  # value 12.35 +0.05 -0.04


def test_report_labels_the_wide_interval_as_what_it_is():
    from figure_helpers import small_result

    text = small_result().report()
    # The summary's wide interval runs from the 2.275th to the 97.725th percentile
    # (the conventions): 95.45 %, never called 95 %.
    assert "(95.45 %: " in text
    assert "95%" not in text and "(95 %" not in text
    gm = small_result().summary["central_gm"]
    assert format_range(gm) in text
    # One spelling of a unit: the summary's (M_sun), not "Msun" on the next line.
    assert " Msun" not in text and f" {small_result().summary['central_mass_solar']['unit']} " in text


# ------------------------------------------------------- terminal, json, figures
def test_chi2_and_periodogram_agree_in_terminal_summary_and_figures(tmp_path):
    from figure_helpers import small_result

    from massfit.plot import periodogram_plot
    from massfit.result.loading import load_result

    result = small_result()
    result.save(tmp_path / "out", plots=False)
    saved = json.loads((tmp_path / "out" / "summary.json").read_text())
    text = result.report()
    quality = saved["fit_quality"]
    assert f"chi2 = {quality['chi2']:.4g} for {quality['n_values']} values" in text
    entries = panels(saved["adequacy"])
    assert set(entries) == {"Aster", "Brel"}
    fig = periodogram_plot(result)
    figure_text = " ".join(_panel_texts(fig))
    for name, entry in entries.items():
        assert chi2_text(entry) in text
        peak = entry["periodogram"]
        assert peak_text(peak) in text
        # The figure draws the same periodogram: the same FAP to the last bit, and
        # the same period in its label.
        assert fig.massfit_flags[name] == peak["false_alarm_probability"]
        assert f"peak at {peak['peak_period']:.4g} d" in figure_text
    # A reloaded result reports the same numbers.
    assert load_result(tmp_path / "out").report() == text


def test_residual_figure_shows_the_summarys_reduced_chi2():
    from figure_helpers import small_result

    from massfit.plot import residual_plot

    result = small_result()
    texts = " ".join(_panel_texts(residual_plot(result)))
    for entry in panels(result.summary["adequacy"]).values():
        assert f"{entry['reduced_chi2']:.2f}" in texts


def test_velocity_fit_reports_gamma_jitter_and_the_figures_periodogram():
    from figure_helpers import sorrel_result

    from massfit.plot import periodogram_plot
    from massfit.summarise.residuals import VELOCITY_PANEL

    result = sorrel_result()
    text = result.report()
    rv = result.summary["velocities"]
    for label in ("Halden", "Quillon"):
        assert f"gamma   = {_fmt(rv['offset'][label])} km/s   {label}" in text
        assert f"jitter  = {_fmt(rv['jitter'][label])} km/s   {label}" in text
    velocity = result.summary["adequacy"]["velocities"]
    assert velocity["p_value"] is None  # the jitter absorbs misfit: no test
    assert chi2_text(velocity) in text
    fig = periodogram_plot(result)
    assert fig.massfit_flags[VELOCITY_PANEL] == velocity["periodogram"]["false_alarm_probability"]


def _fmt(block):
    from massfit.result.fit_result import format_value

    return format_value(block)


# ---------------------------------------------------------- velocities alone
def _single_lined_planet(path):
    """The Sorrel primary's velocities scaled to a planet's, in m/s (invented)."""
    from pathlib import Path

    from astropy.table import Table

    rows = Table.read(Path(__file__).resolve().parents[1] / "example_obs" / "sorrel"
                      / "velocities.ecsv", format="ascii.ecsv")
    rows = rows[rows["body"] == "Sorrel-A"]
    table = Table()
    table["time"] = rows["time"]
    table["body"] = rows["body"]
    mean = {lab: np.mean(rows["rv"][rows["instrument"] == lab])
            for lab in set(rows["instrument"])}
    offset = np.array([mean[lab] for lab in rows["instrument"]])
    table["rv"] = (np.asarray(rows["rv"]) - offset) * 10.0  # km/s -> 10 x m/s: K ~ 112 m/s
    table["rv"].unit = "m / s"
    table["rv_err"] = np.asarray(rows["rv_err"]) * 10.0
    table["rv_err"].unit = "m / s"
    table["instrument"] = rows["instrument"]
    table.meta.update(time_format="jd", time_scale="tdb")
    table.write(path, format="ascii.ecsv")
    return path


@pytest.fixture(scope="module")
def single_lined(tmp_path_factory):
    folder = tmp_path_factory.mktemp("sb1")
    path = _single_lined_planet(folder / "planet.ecsv")
    out = folder / "out"
    return path, out


def test_velocities_alone_read_report_and_save_what_the_readme_says(single_lined, capsys):
    from massfit.result.loading import load_result

    path, out = single_lined
    status = main(["fit", str(path), "--primary", "Sorrel-A", "--out", str(out),
                   "--central-mass", "1.0 Msun", "--central-mass-err", "0.05 Msun",
                   "--seed", "5", "--max-steps", "300", "--no-plots"])
    assert status in (0, 3)
    captured = capsys.readouterr()
    # Read: no "of 0 companion(s)" before fitting one.
    assert "0 companion(s)" not in captured.err
    assert "of the primary 'Sorrel-A' alone (its companion is unseen)" in captured.err
    text = captured.out
    assert "omega   = " in text and "(the companion's; the primary's is omega + 180)" in text
    summary = json.loads((out / "summary.json").read_text())
    # The README promises adequacy for every fit.
    assert summary["adequacy"] is not None
    assert summary["adequacy"]["velocities"]["n_values"] == 30
    # A planet's minimum mass: K ~ 112 m/s, P ~ 1056 d, e ~ 0.38 about 1 M_sun gives
    # f(m) ~ 1.2e-7 M_sun and m sin i ~ (f M^2)^(1/3) ~ 5 M_jup: said in M_jup.
    block = summary["companions"]["companion"]["minimum_mass"]
    assert 3e-3 < block["median"] < 7e-3  # M_sun in summary.json
    assert "m_min   = " in text and " M_jup (m sin i: i = 90 deg)" in text
    assert "gamma   = " in text and "jitter  = " in text
    # No claim that chi^2 was consistent with noise: with a fitted jitter it tests nothing.
    assert "chi2 and residual periodograms consistent" not in text
    # observations.ecsv as the README says, and no velocities.ecsv beside it.
    assert (out / "observations.ecsv").exists() and not (out / "velocities.ecsv").exists()
    again = load_result(out)
    assert np.array_equal(again.model.observations.velocities.rv,
                          json_rows(out)["rv"])
    assert again.model.observations.astrometry is None


def json_rows(out):
    from astropy.table import Table

    table = Table.read(out / "observations.ecsv", format="ascii.ecsv")
    assert set(table["kind"]) == {"velocity"}
    return table


def test_joint_rows_are_saved_in_one_table_and_read_back(tmp_path):
    from figure_helpers import sorrel_result

    from massfit.result.loading import load_result

    result = sorrel_result()
    result.save(tmp_path / "out", plots=False)
    obs = result.model.observations
    again = load_result(tmp_path / "out").model.observations
    for part in ("astrometry", "velocities"):
        first, second = getattr(obs, part), getattr(again, part)
        for name in first.__dataclass_fields__:
            a, b = getattr(first, name), getattr(second, name)
            if a is None:
                assert b is None
            elif name == "time":
                assert np.array_equal(a.tdb.jd, b.tdb.jd)
            else:
                a, b = np.asarray(a), np.asarray(b)
                assert a.dtype.kind == b.dtype.kind, name
                assert np.array_equal(a, b, equal_nan=a.dtype.kind == "f"), name


def test_folders_with_the_old_velocities_file_still_load(tmp_path):
    from astropy.table import Table
    from figure_helpers import sorrel_result

    from massfit.result.loading import load_result

    result = sorrel_result()
    out = tmp_path / "out"
    result.save(out, plots=False)
    # The layout written before the one table: astrometry alone in observations.ecsv,
    # the velocities in velocities.ecsv, no kind column.
    rows = Table.read(out / "observations.ecsv", format="ascii.ecsv")
    kind = np.asarray(rows["kind"])
    for name, pick in (("observations.ecsv", "astrometry"), ("velocities.ecsv", "velocity")):
        part = rows[kind == pick]
        part.remove_columns([c for c in part.colnames
                             if c == "kind" or np.all(np.ma.getmaskarray(part[c]))])
        part.write(out / name, format="ascii.ecsv", overwrite=True)
    again = load_result(out).model.observations
    assert np.array_equal(again.velocities.rv, result.model.observations.velocities.rv)
    assert np.array_equal(again.astrometry.east, result.model.observations.astrometry.east,
                          equal_nan=True)


@pytest.mark.parametrize("extra, needle", [
    (["--central-mass-err", "0.1 Msun"], "--central-mass-err"),
    (["--central-mass", "-1 Msun"], "--central-mass"),
    (["--central-mass", "1 km"], "--central-mass"),
])
def test_bad_central_mass_options_are_one_line(single_lined, tmp_path, capsys, extra, needle):
    path, _ = single_lined
    status = main(["fit", str(path), "--primary", "Sorrel-A", "--out",
                   str(tmp_path / "x"), *extra])
    err = capsys.readouterr().err
    assert status == 2
    assert needle in err and "Traceback" not in err and len(err.strip().splitlines()) == 1

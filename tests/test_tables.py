"""Rounding by the interval and the parameter tables (LaTeX, Markdown, HTML, ECSV)."""

import numpy as np
import pytest
from astropy.table import Table

from massfit.write.tables import (ecsv_table, latex_table, markdown_table, parameter_rows,
                            round_interval)


def block(median, minus, plus):
    return {"unit": "", "median": median, "lower_68": median - minus,
            "upper_68": median + plus, "lower_95": median - 2 * minus,
            "upper_95": median + 2 * plus}


@pytest.mark.parametrize("median, minus, plus, expected", [
    # The Particle Data Group's rule (Review of Particle Physics, introduction; from
    # memory): errors whose leading digits are 100-354 keep two figures, 355-949 one,
    # 950-999 round up to two figures of the next decade.
    (4.1152998, 0.00000050, 0.00000052, ("4.1152998", "0.0000005", "0.0000005")),
    (4.1152998, 0.00000030, 0.00000052, ("4.11529980", "0.00000052", "0.00000030")),
    (0.830011, 0.000029, 0.000029, ("0.830011", "0.000029", "0.000029")),
    (12.3456, 0.0123, 0.0130, ("12.346", "0.013", "0.012")),
    (12.3456, 0.0456, 0.0456, ("12.35", "0.05", "0.05")),
    (12.3456, 0.0970, 0.0970, ("12.35", "0.10", "0.10")),
    (1234.5, 100.0, 100.0, ("1230", "100", "100")),
])
def test_rounding_follows_the_interval(median, minus, plus, expected):
    r = round_interval(block(median, minus, plus))
    assert (r.median, r.plus, r.minus) == expected
    assert r.exponent == 0


def test_small_numbers_keep_their_digits():
    # The case the first corner plot got wrong: 0.0046505 au printed as "0.00 +0.00".
    r = round_interval(block(0.004650536, 0.000000034, 0.000000034))
    assert (r.median, r.plus) == ("0.004650536", "0.000000034")
    r = round_interval(block(4.650536e-5, 3.4e-10, 3.4e-10))
    assert r.exponent == -5
    assert (r.median, r.plus) == ("4.650536", "0.000034")
    assert r.text() == "(4.650536 +/- 0.000034) e-05"


def test_large_numbers_share_a_power_of_ten():
    r = round_interval(block(1.051513e8, 3.7e3, 3.6e3))
    assert r.exponent == 8
    assert r.median == "1.05151" and r.plus == "0.00004"
    assert r.latex() == r"(1.05151 \pm 0.00004) \times 10^{8}"


def test_asymmetric_interval_in_latex():
    r = round_interval(block(2.0, 0.11, 0.25))
    assert r.latex() == "2.00^{+0.25}_{-0.11}"


def test_undetermined_block():
    empty = {"unit": "", "median": None, "lower_68": None, "upper_68": None,
             "lower_95": None, "upper_95": None}
    assert round_interval(empty) is None


@pytest.fixture(scope="module")
def summary():
    from figure_helpers import small_result

    return small_result().summary


def test_rows_cover_the_central_body_and_each_companion(summary):
    rows = parameter_rows(summary)
    keys = [row.key for row in rows]
    assert keys[:4] == ["central_gm", "central_mass", "central_mass_solar", "parallax"]
    for name in ("Aster", "Brel"):
        for q in ("period", "semi_major_axis", "eccentricity", "inclination"):
            assert f"{name}.{q}" in keys


def test_latex_table(summary):
    text = latex_table(summary, caption="Invented system.")
    # A comment line naming the package it needs, then the table.
    assert text.splitlines()[1] == r"\begin{table}" and text.rstrip().endswith(r"\end{table}")
    assert r"\toprule" in text and r"\bottomrule" in text
    assert r"\textit{Companion Aster}" in text
    # Every data line has four cells.
    body = [line for line in text.splitlines() if line.endswith(r"\\") and "&" in line]
    assert all(line.count("&") == 3 for line in body)
    period = round_interval(summary["companions"]["Aster"]["period"]).latex()
    assert f"${period}$ & d" in text


def test_markdown_and_ecsv_tables(summary, tmp_path):
    md = markdown_table(summary, mass_unit="Mjup")
    assert "| central | central mass |" in md and "M_jup" in md
    table = ecsv_table(summary)
    path = tmp_path / "p.ecsv"
    table.write(path, format="ascii.ecsv")
    back = Table.read(path, format="ascii.ecsv")
    row = back[(back["body"] == "Brel") & (back["parameter"] == "period")][0]
    assert row["median"] == pytest.approx(summary["companions"]["Brel"]["period"]["median"])
    assert row["unit"] == "d"
    assert np.all(back["lower_95"] <= back["median"])


def test_reported_angles_match_the_simulated_orbit(summary):
    # Brel's node window sits below 0 deg in the fit: folding the node into [0, 180)
    # must carry omega by 180 deg too, or the table reports another orbit.
    from figure_helpers import ELEMENTS

    for name, truth in ELEMENTS.items():
        comp = summary["companions"][name]
        assert comp["ascending_node"]["median"] == pytest.approx(truth["node"], abs=2.0)
        assert comp["periapsis_argument"]["median"] == pytest.approx(truth["omega"], abs=4.0)


def test_dates_are_printed_in_full():
    from massfit.write.tables import format_interval

    jd = dict(block(2461320.8581234, 0.0000025, 0.0000025), unit="JD (TDB)")
    assert format_interval(jd) == "2461320.8581234 +/- 0.0000025"


# A body name made of every character TeX treats specially in text, and "^^5c", which
# TeX reads as a backslash (so ^^5cinput{...} would read a file while typesetting).
TEX_HOSTILE = "\\%_&#^$~{}^^5cinput{x}"
# The escapes of the LaTeX manual's list of special characters (Lamport, "LaTeX: A
# Document Preparation System", sec. 2.2.1; \textbackslash, \textasciicircum and
# \textasciitilde from the LaTeX2e text commands of the same book, from memory).
TEX_ESCAPED = (r"\textbackslash{}\%\_\&\#\textasciicircum{}\$\textasciitilde{}\{\}"
               r"\textasciicircum{}\textasciicircum{}5cinput\{x\}")


def _hostile_summary():
    interval = dict(block(1.234, 0.012, 0.013), unit="d")
    return {"central_gm": dict(block(1.3e11, 1e9, 1e9), unit="km3 / s2"),
            "central_mass": dict(block(2e30, 1e28, 1e28), unit="kg"),
            "central_mass_solar": dict(block(1.0, 0.01, 0.01), unit="M_sun"),
            "companions": {TEX_HOSTILE: {"period": interval,
                                         "mass_sin3i": dict(interval, unit="M_sun")}}}


def test_every_tex_special_character_is_escaped():
    from massfit.write.tables import tex_escape

    assert tex_escape(TEX_HOSTILE) == TEX_ESCAPED
    text = latex_table(_hostile_summary(), mass_unit="Msun")
    assert rf"\textit{{Companion {TEX_ESCAPED}}}" in text
    assert "^^" not in text and "5cinput{" not in text
    # The row's words are text too ("sin^3" must not reach TeX raw).
    assert r"sin\textasciicircum{}3 i" in text


def test_the_escaped_table_compiles(tmp_path):
    import shutil
    import subprocess

    latex, kpsewhich = shutil.which("pdflatex"), shutil.which("kpsewhich")
    if latex is None or kpsewhich is None or not subprocess.run(
            [kpsewhich, "booktabs.sty"], capture_output=True, text=True).stdout.strip():
        pytest.skip("no pdflatex with booktabs here; the escaped string is checked "
                    "exactly above")
    document = (r"\documentclass{article}\usepackage{booktabs}\begin{document}"
                + latex_table(_hostile_summary(), mass_unit="Msun") + r"\end{document}")
    (tmp_path / "t.tex").write_text(document)
    proc = subprocess.run([latex, "-interaction=nonstopmode", "-no-shell-escape", "t.tex"],
                          cwd=tmp_path, capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stdout[-2000:]
    assert "Undefined control sequence" not in proc.stdout


def test_latex_table_has_a_caption_and_names_its_package(summary):
    text = latex_table(summary)
    first = text.splitlines()[0]
    assert first.startswith("%") and r"\usepackage{booktabs}" in first
    assert r"\toprule" in text  # the package is needed: booktabs rules are used
    caption = [line for line in text.splitlines() if line.startswith(r"\caption{")]
    assert len(caption) == 1 and "68.27" in caption[0] and "JD (TDB)" in caption[0]
    assert r"\caption{Invented system.}" in latex_table(summary, caption="Invented system.")


def test_times_of_periapsis_in_the_input_format_and_scale():
    # The planet's table gave MJD in UTC: its time of periapsis is printed so, and the
    # number is the summary's TDB Julian date converted by astropy.
    from astropy.time import Time
    from figure_helpers import planet_result

    planet = planet_result()
    block = planet.summary["companions"]["Pell-b"]["periapsis_time"]
    expected = Time(block["median"], format="jd", scale="tdb").utc.mjd
    for fmt in ("latex", "markdown"):
        assert "MJD (UTC)" in planet.table(fmt)
    row = [r for r in planet.table("ecsv") if r["parameter"] == "periapsis_time"][0]
    assert row["unit"] == "MJD (UTC)"
    assert row["median"] == pytest.approx(expected, abs=1e-8)
    # UTC runs about 69 s behind TDB in these years: the conversion is not a relabelling.
    assert abs(row["median"] - (block["median"] - 2400000.5)) > 5e-4
    # Without the input's form (a summary alone) times stay JD (TDB).
    plain = [r for r in ecsv_table(planet.summary) if r["parameter"] == "periapsis_time"][0]
    assert plain["unit"] == "JD (TDB)" and plain["median"] == pytest.approx(block["median"])

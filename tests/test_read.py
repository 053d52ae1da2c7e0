"""Tests of the observation readers (massfit.read.tables).

All data are invented; files are written into pytest's tmp_path.
"""

from __future__ import annotations

import io

import astropy.units as u
import numpy as np
import pytest
from astropy.table import QTable, Table
from astropy.time import Time
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from massfit.errors import ConfigError, InputError, MassfitError
from massfit.read.tables import read_observations, read_table

UNITS = {"east": "mas", "north": "mas", "east_err": "mas", "north_err": "mas",
         "sep": "mas", "sep_err": "mas", "pa": "deg", "pa_err": "deg",
         "rv": "km/s", "rv_err": "km/s", "distance": "pc"}
READ = {"time_format": "mjd", "time_scale": "tdb", "units": UNITS}

CARTESIAN = {"time": "58000.5", "body": "Tarn", "east": "12.5", "north": "-3.0",
             "east_err": "0.4", "north_err": "0.5", "corr": "0.1", "distance": "20"}
POLAR = {"time": "58000.5", "body": "Tarn", "sep": "140.0", "pa": "35.0",
         "sep_err": "0.6", "pa_err": "0.3", "distance": "20"}
VELOCITY = {"time": "58000.5", "body": "primary", "rv": "1.25", "rv_err": "0.05",
            "instrument": "Spectro-A"}


# ----------------------------------------------------------------------------- helpers

def write(tmp_path, name, text, newline="\n"):
    path = tmp_path / name
    path.write_bytes(text.replace("\n", newline).encode("utf-8"))
    return path


def csv_text(base, changes):
    """A CSV with the columns of ``base``; one row per dict of changed values."""
    lines = [",".join(base)]
    lines += [",".join({**base, **change}.values()) for change in changes]
    return "\n".join(lines) + "\n"


def ecsv_text(table):
    buffer = io.StringIO()
    table.write(buffer, format="ascii.ecsv")
    return buffer.getvalue()


def data_line(text, row):
    """Physical line (1-based) of data row ``row`` in an ECSV text with no blank lines."""
    lines = text.splitlines()
    names = next(i for i, line in enumerate(lines) if not line.startswith("#"))
    return names + 2 + row


def offsets_table(**meta):
    table = Table()
    table["time"] = [58000.5, 58020.25, 58041.0]
    table["body"] = ["Tarn", "Tarn", "Veyl"]
    table["east"] = [120.0, -45.5, 8.0] * u.mas
    table["north"] = [30.0, 60.0, -2.5] * u.mas
    table["east_err"] = [0.5, 0.6, 0.7] * u.mas
    table["north_err"] = [0.8, 0.9, 1.0] * u.mas
    table.meta.update({"time_format": "mjd", "time_scale": "tdb", **meta})
    return table


def native_table(stamps, scale="utc"):
    """The offsets table with a native astropy Time column and no time meta keys."""
    table = offsets_table()
    del table.meta["time_format"], table.meta["time_scale"]
    table["time"] = Time(stamps, scale=scale)
    return table


def refused(path, words, **options):
    """Reading ``path`` raises an InputError that matches ``words`` and names the file."""
    with pytest.raises(InputError, match=words) as info:
        read_observations(path, **options)
    assert str(path) in str(info.value)
    return info


def assert_names(info, path, line, column):
    """The error names the file, line and column in its message and attributes."""
    message = str(info.value)
    assert str(path) in message
    assert info.value.line == line and f"line {line}" in message
    assert info.value.column == column and f"column '{column}'" in message


# ----------------------------------------------------------------------------- good ECSV

def test_ecsv_east_north_in_mas_become_arcsec(tmp_path):
    text = ecsv_text(offsets_table())
    path = write(tmp_path, "offsets.ecsv", text)
    obs = read_observations(path)
    astro = obs.astrometry
    np.testing.assert_allclose(astro.east, [0.12, -0.0455, 0.008])
    np.testing.assert_allclose(astro.north_err, [0.0008, 0.0009, 0.001])
    assert not astro.polar.any() and not astro.length.any()
    np.testing.assert_array_equal(astro.corr, 0.0)
    assert np.isnan(astro.sep).all() and np.isnan(astro.distance).all()
    assert astro.time.scale == "tdb"
    np.testing.assert_allclose(astro.time.mjd, [58000.5, 58020.25, 58041.0], atol=1e-9)
    assert astro.line.tolist() == [data_line(text, k) for k in range(3)]
    assert obs.files == [str(path)] and obs.rows_read == 3 and obs.rows_used == 3
    assert obs.velocities is None and obs.rejected == []
    assert obs.unused_columns == {str(path): []}


def test_ecsv_sep_pa_become_arcsec_and_radians(tmp_path):
    table = Table()
    table["time"] = [2021.25, 2021.75]
    table["body"] = ["Orm", "Orm"]
    table["sep"] = [1.25, 1.5] * u.arcsec
    table["pa"] = [90.0, 180.0] * u.deg
    table["sep_err"] = [0.01, 0.02] * u.arcsec
    table["pa_err"] = [0.5, 1.0] * u.deg
    table.meta.update(time_format="jyear", time_scale="tt")
    obs = read_observations(write(tmp_path, "polar.ecsv", ecsv_text(table)))
    astro = obs.astrometry
    np.testing.assert_allclose(astro.sep, [1.25, 1.5])
    np.testing.assert_allclose(astro.pa, [np.pi / 2, np.pi])
    np.testing.assert_allclose(astro.pa_err, np.deg2rad([0.5, 1.0]))
    assert astro.polar.all() and np.isnan(astro.east).all() and np.isnan(astro.corr).all()
    expected = Time([2021.25, 2021.75], format="jyear", scale="tt").tdb
    assert np.all(np.abs((astro.time - expected).to_value(u.s)) < 1e-6)


def test_length_offsets_in_km_become_au(tmp_path):
    table = offsets_table()
    for name in ("east", "north", "east_err", "north_err"):
        table[name] = table[name].value * 1.0e5
        table[name].unit = u.km
    obs = read_observations(write(tmp_path, "moons.ecsv", ecsv_text(table)))
    km = np.array([120.0, -45.5, 8.0]) * 1e5
    np.testing.assert_allclose(obs.astrometry.east, km / u.au.to(u.km))
    assert obs.astrometry.length.all()


def qtable_text(table):
    """The ECSV text that ``QTable.write`` gives: Quantity columns, serialized."""
    buffer = io.StringIO()
    QTable(table).write(buffer, format="ascii.ecsv")
    return buffer.getvalue()


def test_ecsv_from_a_qtable_reads_like_one_from_a_table(tmp_path):
    table = native_table(Time([58000.5, 58020.25, 58041.0], format="mjd", scale="tdb"))
    table["corr"] = [0.1, -0.2, 0.0]
    table["distance"] = [20.0, 21.0, 22.0] * u.pc
    text = qtable_text(table)
    assert "__serialized_columns__" in text and "astropy.units.quantity.Quantity" in text
    quantities = read_observations(write(tmp_path, "q.ecsv", text)).astrometry
    columns = read_observations(write(tmp_path, "t.ecsv", ecsv_text(table))).astrometry
    for name in ("east", "north", "east_err", "north_err", "corr", "distance"):
        np.testing.assert_array_equal(getattr(quantities, name), getattr(columns, name))
    np.testing.assert_allclose(quantities.east, [0.12, -0.0455, 0.008])
    np.testing.assert_allclose(quantities.time.mjd, [58000.5, 58020.25, 58041.0], atol=1e-9)
    assert quantities.line.tolist() == [data_line(text, k) for k in range(3)]


def test_ecsv_from_a_qtable_velocities_in_m_per_s(tmp_path):
    table = QTable()
    table["time"] = Time([58000.5, 58001.5], format="mjd", scale="tdb")
    table["body"] = ["primary", "primary"]
    table["rv"] = [1250.0, -300.0] * u.m / u.s
    table["rv_err"] = [50.0, 40.0] * u.m / u.s
    obs = read_observations(write(tmp_path, "v.ecsv", qtable_text(table)))
    np.testing.assert_allclose(obs.velocities.rv, [1.25, -0.3])
    np.testing.assert_allclose(obs.velocities.rv_err, [0.05, 0.04])


def test_ecsv_from_a_qtable_with_a_wrong_or_missing_value(tmp_path):
    table = offsets_table()
    table["east"] = table["east"].value * u.kg
    with pytest.raises(InputError, match="angle unit") as info:
        read_observations(write(tmp_path, "kg.ecsv", qtable_text(table)))
    assert info.value.column == "east" and "kg" in str(info.value)
    # A masked Quantity value is written as an empty cell: named like one.
    table = QTable(offsets_table(), masked=True)
    table["north"].mask[1] = True
    text = qtable_text(table)
    path = write(tmp_path, "masked.ecsv", text)
    with pytest.raises(InputError) as info:
        read_observations(path)
    assert_names(info, path, data_line(text, 1), "north")
    assert read_observations(path, skip_bad_rows=True).rows_used == 2


def test_per_row_distance_with_an_empty_cell(tmp_path):
    text = csv_text(CARTESIAN, [{}, {"time": "58001.5", "distance": ""}])
    units = {**UNITS, "distance": "au"}
    obs = read_observations(write(tmp_path, "d.csv", text), **{**READ, "units": units})
    np.testing.assert_allclose(obs.astrometry.distance[0], (20 * u.au).to_value(u.pc))
    assert np.isnan(obs.astrometry.distance[1])


def test_correlation_is_kept(tmp_path):
    text = csv_text(CARTESIAN, [{"corr": "-0.35"}, {"time": "58001.5", "corr": "0.8"}])
    obs = read_observations(write(tmp_path, "c.csv", text), **READ)
    np.testing.assert_allclose(obs.astrometry.corr, [-0.35, 0.8])


def test_several_bodies_unsorted_rows_keep_file_order(tmp_path):
    changes = [{"time": "58100.0", "body": "Veyl"}, {"time": "58000.0"},
               {"time": "58050.0", "body": "Orm"}]
    obs = read_observations(write(tmp_path, "u.csv", csv_text(CARTESIAN, changes)), **READ)
    assert obs.astrometry.body.tolist() == ["Veyl", "Tarn", "Orm"]
    np.testing.assert_allclose(obs.astrometry.time.mjd, [58100.0, 58000.0, 58050.0], atol=1e-9)
    assert obs.astrometry.line.tolist() == [2, 3, 4]
    assert obs.companions == ["Veyl", "Tarn", "Orm"]


def test_several_files_merge(tmp_path):
    first = write(tmp_path, "a.csv", csv_text(CARTESIAN, [{}, {"time": "58001.5"}]))
    second = write(tmp_path, "b.csv", csv_text(POLAR, [{"time": "58300.0"}]))
    third = write(tmp_path, "v.csv", csv_text(VELOCITY, [{}, {"body": "Tarn", "rv": "-3"}]))
    obs = read_observations([first, str(second), third], **READ)
    assert obs.files == [str(first), str(second), str(third)]
    assert obs.rows_read == 5 and obs.rows_used == 5
    assert obs.astrometry.file.tolist() == [str(first)] * 2 + [str(second)]
    assert obs.astrometry.polar.tolist() == [False, False, True]
    assert obs.companions == ["Tarn"]
    assert obs.velocities.body.tolist() == ["primary", "Tarn"]


# ----------------------------------------------------------------------------- plain CSV

def test_csv_with_units_dict(tmp_path):
    text = csv_text(CARTESIAN, [{}])
    units = {**UNITS, "east": "arcsec", "north": "deg", "east_err": "uas"}
    obs = read_observations(write(tmp_path, "x.csv", text), **{**READ, "units": units})
    np.testing.assert_allclose(obs.astrometry.east, [12.5])
    np.testing.assert_allclose(obs.astrometry.north, [-3.0 * 3600])
    np.testing.assert_allclose(obs.astrometry.east_err, [0.4e-6])


def test_crlf_gives_the_same_result_and_lines(tmp_path):
    text = "# invented offsets\n" + csv_text(CARTESIAN, [{}, {"time": "58001.5"}])
    unix = read_observations(write(tmp_path, "lf.csv", text), **READ)
    for newline in ("\r\n", "\r"):
        other = read_observations(write(tmp_path, "other.csv", text, newline=newline), **READ)
        np.testing.assert_array_equal(unix.astrometry.east, other.astrometry.east)
        assert other.astrometry.line.tolist() == [3, 4]
        assert other.astrometry.body.tolist() == ["Tarn", "Tarn"]


def test_comments_and_blank_lines_keep_line_numbers(tmp_path):
    lines = csv_text(CARTESIAN, [{}, {"time": "58001.5", "east_err": "-1"}]).splitlines()
    text = "\n".join(["# observer notes", "", lines[0], "# first night", lines[1], "",
                      "   # indented comment", lines[2]]) + "\n"
    path = write(tmp_path, "notes.csv", text)
    with pytest.raises(InputError) as info:
        read_observations(path, **READ)
    assert_names(info, path, 8, "east_err")
    obs = read_observations(path, **READ, skip_bad_rows=True)
    assert obs.astrometry.line.tolist() == [5]


def test_extra_columns_are_reported_unused(tmp_path):
    base = {**CARTESIAN, "seeing": "0.8", "observer": "night crew"}
    path = write(tmp_path, "extra.csv", csv_text(base, [{}]))
    obs = read_observations(path, **READ)
    assert obs.unused_columns[str(path)] == ["seeing", "observer"]
    polar = write(tmp_path, "polar.csv", csv_text({**POLAR, "corr": "0.2"}, [{}]))
    assert read_observations(polar, **READ).unused_columns[str(polar)] == ["corr"]


def test_quoted_csv_values(tmp_path):
    base = {**CARTESIAN, "body": '"Tarn, inner"'}
    obs = read_observations(write(tmp_path, "q.csv", csv_text(base, [{}])), **READ)
    assert obs.astrometry.body.tolist() == ["Tarn, inner"]


# ----------------------------------------------------------------------------- times

def test_native_time_column(tmp_path):
    stamps = ["2019-03-01T00:00:00", "2019-04-15T06:30:00", "2019-05-02T12:00:00"]
    obs = read_observations(write(tmp_path, "native.ecsv", ecsv_text(native_table(stamps))))
    expected = Time(stamps, format="isot", scale="utc").tdb
    assert np.all(np.abs((obs.astrometry.time - expected).to_value(u.s)) < 1e-6)
    # The TDB - UTC offset (about 69 s in 2019) was applied, not dropped.
    assert abs((obs.astrometry.time[0] - Time(stamps[0], scale="tdb")).to_value(u.s)) > 60


def test_native_time_column_contradicted_by_meta(tmp_path):
    table = offsets_table(time_scale="tt")
    table["time"] = Time(table["time"], format="mjd", scale="utc")
    path = write(tmp_path, "both.ecsv", ecsv_text(table))
    with pytest.raises(InputError, match="time_scale"):
        read_observations(path)


def test_time_meta_keys_win_and_arguments_are_a_fallback(tmp_path):
    with_meta = write(tmp_path, "m.ecsv", ecsv_text(offsets_table(time_format="jd")))
    obs = read_observations(with_meta, time_format="mjd", time_scale="utc")
    assert obs.astrometry.time.jd[0] == pytest.approx(58000.5, abs=1e-9)
    bare = offsets_table()
    del bare.meta["time_format"], bare.meta["time_scale"]
    path = write(tmp_path, "bare.ecsv", ecsv_text(bare))
    obs = read_observations(path, time_format="mjd", time_scale="utc")
    expected = Time(58000.5, format="mjd", scale="utc").tdb
    assert abs((obs.astrometry.time[0] - expected).to_value(u.s)) < 1e-6


@pytest.mark.parametrize("given, missing", [({"time_scale": "utc"}, "time_format"),
                                            ({"time_format": "mjd"}, "time_scale")])
def test_refuses_when_times_are_not_stated(tmp_path, given, missing):
    path = write(tmp_path, "t.csv", csv_text(CARTESIAN, [{}]))
    with pytest.raises(InputError) as info:
        read_observations(path, units=UNITS, **given)
    message = str(info.value)
    assert str(path) in message and "does not guess" in message
    assert f"`{missing}`" in message and f"--{missing.replace('_', '-')}" in message


def test_unknown_time_names_list_the_accepted_ones(tmp_path):
    with pytest.raises(ConfigError, match="mjd.*isot"):
        read_observations(tmp_path / "never-read.csv", time_format="modified-julian")
    with pytest.raises(ConfigError, match="tdb"):
        read_observations(tmp_path / "never-read.csv", time_scale="gmt")
    path = write(tmp_path, "m.ecsv", ecsv_text(offsets_table(time_scale="solar")))
    with pytest.raises(InputError, match="time_scale.*utc"):
        read_observations(path)


def test_unparseable_time_value_names_the_line(tmp_path):
    path = write(tmp_path, "t.csv", csv_text(CARTESIAN, [{}, {"time": "yesterday"}]))
    with pytest.raises(InputError) as info:
        read_observations(path, **READ)
    assert_names(info, path, 3, "time")
    iso = write(tmp_path, "iso.csv", csv_text(CARTESIAN, [{"time": "2020-02-30T00:00:00"}]))
    with pytest.raises(InputError) as info:
        read_observations(iso, **{**READ, "time_format": "isot"})
    assert_names(info, iso, 2, "time")


# ----------------------------------------------------------------------------- bad rows

BAD_VALUES = [
    (CARTESIAN, "east", "nan", "finite"),
    (CARTESIAN, "north", "inf", "finite"),
    (CARTESIAN, "east", "abc", "not a number"),
    (CARTESIAN, "east", "", "empty"),
    (CARTESIAN, "east_err", "0", "greater than zero"),
    (CARTESIAN, "north_err", "-0.2", "greater than zero"),
    (CARTESIAN, "north_err", "nan", "finite"),
    (CARTESIAN, "body", "", "empty"),
    (CARTESIAN, "body", "primary", "primary"),
    (CARTESIAN, "corr", "1", "between -1 and 1"),
    (CARTESIAN, "corr", "-1.5", "between -1 and 1"),
    (CARTESIAN, "distance", "0", "greater than zero"),
    (CARTESIAN, "distance", "-4", "greater than zero"),
    (CARTESIAN, "time", "", "empty"),
    (POLAR, "sep", "0", "greater than zero"),
    (POLAR, "sep", "-2", "greater than zero"),
    (POLAR, "pa_err", "0", "greater than zero"),
    (POLAR, "pa", "north", "not a number"),
    (VELOCITY, "rv_err", "0", "greater than zero"),
    (VELOCITY, "rv", "fast", "not a number"),
]


@pytest.mark.parametrize("base, column, value, words", BAD_VALUES)
def test_bad_value_names_file_line_column(tmp_path, base, column, value, words):
    path = write(tmp_path, "bad.csv", csv_text(base, [{}, {"time": "58001.5", column: value}]))
    assert_names(refused(path, words, **READ), path, 3, column)


def test_wrong_number_of_values(tmp_path):
    text = csv_text(CARTESIAN, [{}]) + "58001.5,Tarn,1,2,3\n"
    path = write(tmp_path, "short.csv", text)
    with pytest.raises(InputError, match="5 values where the header names 8") as info:
        read_observations(path, **READ)
    assert str(path) in str(info.value) and info.value.line == 3


def test_ecsv_bad_rows_name_line_and_column(tmp_path):
    text = ecsv_text(native_table(Time([58000.5, 58020.25, 58041.0], format="mjd")))
    lines = text.splitlines()
    second, third = data_line(text, 1) - 1, data_line(text, 2) - 1
    lines[second] = lines[second].replace("-45.5", "far")
    lines[third] = lines[third].replace("Veyl", '""')
    path = write(tmp_path, "bad.ecsv", "\n".join(lines) + "\n")
    with pytest.raises(InputError) as info:
        read_observations(path)
    assert_names(info, path, second + 1, "east")
    obs = read_observations(path, skip_bad_rows=True)
    assert [(r.line, r.reason.split(":")[0]) for r in obs.rejected] == [
        (second + 1, "column 'east'"), (third + 1, "column 'body'")]
    assert obs.rows_used == 1


def test_ecsv_bad_native_time_and_comment_in_data(tmp_path):
    stamps = ["2019-03-01T00:00:00", "2019-03-02T00:00:00", "2019-03-03T00:00:00"]
    text = ecsv_text(native_table(stamps))
    lines = text.splitlines()
    first = data_line(text, 0) - 1
    lines.insert(first + 1, "# a comment between data rows")
    lines[first + 2] = lines[first + 2].replace("2019-03-02T00:00:00.000", "2019-13-02")
    path = write(tmp_path, "t.ecsv", "\n".join(lines) + "\n")
    with pytest.raises(InputError) as info:
        read_observations(path)
    assert_names(info, path, first + 3, "time")


def test_ecsv_unclosed_quote_stays_on_its_line(tmp_path):
    text = ecsv_text(offsets_table())
    path = write(tmp_path, "quote.ecsv", text.replace("Tarn", '"Tarn', 1))
    obs = read_observations(path, skip_bad_rows=True)
    assert [r.line for r in obs.rejected] == [data_line(text, 0)]
    assert obs.astrometry.line.tolist() == [data_line(text, 1), data_line(text, 2)]


def test_duplicate_rows_within_a_file(tmp_path):
    text = csv_text(CARTESIAN, [{}, {"time": "58001.5"}, {}])
    path = write(tmp_path, "dup.csv", text)
    with pytest.raises(InputError) as info:
        read_observations(path, **READ)
    assert info.value.line == 4 and "line 2" in str(info.value) and str(path) in str(info.value)
    obs = read_observations(path, **READ, skip_bad_rows=True)
    assert [(r.line, "repeats line 2" in r.reason) for r in obs.rejected] == [(4, True)]


def test_duplicate_rows_across_files(tmp_path):
    first = write(tmp_path, "one.csv", csv_text(VELOCITY, [{}]))
    second = write(tmp_path, "two.csv", csv_text(VELOCITY, [{"time": "58002.0"}, {}]))
    with pytest.raises(InputError) as info:
        read_observations([first, second], **READ)
    message = str(info.value)
    assert str(second) in message and "line 3" in message and f"{first} line 2" in message


def test_skip_bad_rows_reports_every_rejection(tmp_path):
    changes = [{}, {"time": "58001.5", "east": "x"}, {"time": "58002.5", "corr": "2"},
               {"time": "58003.5"}, {"time": "58001.5", "east": "x"}]
    text = csv_text(CARTESIAN, changes) + "58004.5,Tarn\n"
    path = write(tmp_path, "skip.csv", text)
    obs = read_observations(path, **READ, skip_bad_rows=True)
    assert obs.rows_read == 6 and obs.rows_used == 2
    assert obs.rows_read == obs.rows_used + len(obs.rejected)
    assert [r.line for r in obs.rejected] == [3, 4, 6, 7]
    assert "column 'east'" in obs.rejected[0].reason
    assert "column 'corr'" in obs.rejected[1].reason
    assert all(r.file == str(path) for r in obs.rejected)
    assert obs.rejected[0].as_dict()["line"] == 3


# ----------------------------------------------------------------------------- files

@pytest.mark.parametrize("content, words", [
    (b"", "empty"),
    (b"  \n\n\t\n", "empty"),
    (b"# only a comment\n\n", "only comments"),
    (b"time,body,east,north,east_err,north_err\n", "no data rows"),
    (b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR", "binary"),
    ("time,body\n58000,Tärn\n".encode("latin-1"), "UTF-8"),
])
def test_unusable_files(tmp_path, content, words):
    path = tmp_path / "f.csv"
    path.write_bytes(content)
    refused(path, words, **READ)


def test_missing_file_and_directory(tmp_path):
    with pytest.raises(InputError, match="does not exist") as info:
        read_observations(tmp_path / "absent.csv", **READ)
    assert "absent.csv" in str(info.value)
    with pytest.raises(InputError, match="directory"):
        read_observations(tmp_path, **READ)


@pytest.mark.parametrize("edit, words", [
    (lambda text: text.replace("# datatype:", "# datatype: [unclosed"), "malformed ECSV header"),
    (lambda text: text.replace("time body east", "time body eest"), "malformed ECSV header"),
    (lambda text: text.replace("# %ECSV 1.0", "# ECSV one"), "ECSV header line"),
])
def test_malformed_ecsv(tmp_path, edit, words):
    path = write(tmp_path, "broken.ecsv", edit(ecsv_text(offsets_table())))
    refused(path, words)


@pytest.mark.parametrize("drop, words", [
    (["time"], "time"),
    (["north_err"], "north_err"),
    (["north", "north_err"], "north, north_err"),
    (["east", "north", "east_err", "north_err"], "none of the columns"),
])
def test_missing_columns_are_named(tmp_path, drop, words):
    base = {key: value for key, value in CARTESIAN.items() if key not in drop}
    path = write(tmp_path, "cols.csv", csv_text(base, [{}]))
    refused(path, words, **READ)


def test_mixed_column_sets_and_listing_a_file_twice(tmp_path):
    path = write(tmp_path, "mix.csv", csv_text({**CARTESIAN, "rv": "1", "rv_err": "1"}, [{}]))
    with pytest.raises(InputError, match="mixes"):
        read_observations(path, **READ)
    good = write(tmp_path, "good.csv", csv_text(CARTESIAN, [{}]))
    with pytest.raises(InputError, match="more than once"):
        read_observations([good, tmp_path / "." / "good.csv"], **READ)


def test_read_table_reads_one_file(tmp_path):
    path = write(tmp_path, "one.csv", csv_text(VELOCITY, [{}]))
    assert read_table(path, **READ).rows_used == 1
    with pytest.raises(ConfigError):
        read_table([path, path], **READ)


# ----------------------------------------------------------------------------- units

def test_missing_unit_says_how_to_state_it(tmp_path):
    path = write(tmp_path, "u.csv", csv_text(CARTESIAN, [{}]))
    units = {key: value for key, value in UNITS.items() if key != "north_err"}
    with pytest.raises(InputError) as info:
        read_observations(path, **{**READ, "units": units})
    message = str(info.value)
    assert info.value.column == "north_err" and "`units`" in message and "--units" in message


@pytest.mark.parametrize("changed, words", [
    ({"east": "furlongs per fortnight"}, "cannot parse|can parse"),
    ({"east": "km/s"}, "angle unit"),
    ({"north": "km", "north_err": "km"}, "like 'east'"),
    ({"east_err": "au"}, "like 'east'"),
    ({"distance": "deg"}, "length unit"),
    ({"corr": "deg"}, "no unit"),
])
def test_unusable_units_name_the_column(tmp_path, changed, words):
    path = write(tmp_path, "u.csv", csv_text(CARTESIAN, [{}]))
    info = refused(path, words, **{**READ, "units": {**UNITS, **changed}})
    assert info.value.column in changed


def test_position_angle_and_velocity_units(tmp_path):
    polar = write(tmp_path, "p.csv", csv_text(POLAR, [{}]))
    with pytest.raises(InputError, match="angle unit") as info:
        read_observations(polar, **{**READ, "units": {**UNITS, "pa": "mas/yr"}})
    assert info.value.column == "pa"
    rv = write(tmp_path, "v.csv", csv_text(VELOCITY, [{"rv": "1250", "rv_err": "50"}]))
    obs = read_observations(rv, **{**READ, "units": {"rv": "m/s", "rv_err": "m/s"}})
    np.testing.assert_allclose(obs.velocities.rv, [1.25])
    with pytest.raises(InputError, match="velocity unit"):
        read_observations(rv, **{**READ, "units": {"rv": "m", "rv_err": "m/s"}})


def test_ecsv_units_and_units_option_must_agree(tmp_path):
    path = write(tmp_path, "a.ecsv", ecsv_text(offsets_table()))
    same = read_observations(path, units={"east": "0.001 arcsec"})
    np.testing.assert_allclose(same.astrometry.east[0], 0.12)
    with pytest.raises(InputError, match="conflict|agree") as info:
        read_observations(path, units={"east": "arcsec"})
    assert info.value.column == "east"


def test_unrecognised_ecsv_unit(tmp_path):
    text = ecsv_text(offsets_table()).replace("unit: mas, datatype: float64}", "unit: blips, "
                                              "datatype: float64}", 1)
    path = write(tmp_path, "blips.ecsv", text)
    with pytest.raises(InputError, match="blips") as info:
        read_observations(path)
    assert info.value.column == "east"


# ----------------------------------------------------------------------------- velocities

def test_rv_table_with_instruments_and_primary_rows(tmp_path):
    table = Table()
    table["time"] = Time([2458000.5, 2458001.5, 2458002.5, 2458003.5], format="jd", scale="tdb")
    table["body"] = ["Hale", "Hale", "Tarn", "Hale"]
    table["rv"] = [-1250.0, 300.0, 15000.0, 800.0] * u.m / u.s
    table["rv_err"] = [5.0, 6.0, 90.0, 5.0] * u.m / u.s
    table["instrument"] = ["Spectro-A", "Spectro-B", "Spectro-A", ""]
    path = write(tmp_path, "rv.ecsv", ecsv_text(table))
    obs = read_observations(path, primary="Hale")
    rv = obs.velocities
    np.testing.assert_allclose(rv.rv, [-1.25, 0.3, 15.0, 0.8])
    np.testing.assert_allclose(rv.rv_err, [0.005, 0.006, 0.09, 0.005])
    assert rv.instrument.tolist() == ["Spectro-A", "Spectro-B", "Spectro-A", ""]
    assert rv.body.tolist() == ["Hale", "Hale", "Tarn", "Hale"]
    assert obs.primary == "Hale" and obs.companions == ["Tarn"] and obs.astrometry is None
    np.testing.assert_allclose(rv.time.jd, table["time"].jd)


# ----------------------------------------------------------------------------- fuzzing

FUZZ_CSV = "# invented\n" + csv_text(CARTESIAN, [{}, {"time": "58001.5", "body": "Veyl"}])
FUZZ_ECSV = ecsv_text(offsets_table())
PIECES = st.sampled_from([",", "#", '"', "'", "\n", "\r\n", "\r", " ", "\t", "nan", "-", "0",
                          "1e999", "x", "%ECSV", "---", ": ", "{", "}", "[", "]", "!",
                          "!!python/object/apply:os.system ['true']", "é", "\x00", "\ufeff",
                          "datatype", "unit: km/s", "time", "east_err", "primary", "\u2028"])


@st.composite
def mutated(draw):
    text = draw(st.sampled_from([FUZZ_CSV, FUZZ_ECSV]))
    for _ in range(draw(st.integers(1, 4))):
        at = draw(st.integers(0, len(text)))
        cut = draw(st.integers(0, 6))
        piece = draw(st.one_of(PIECES, st.text(max_size=4)))
        text = text[:at] + piece + text[at + cut:]
    return text


@pytest.mark.parametrize("text, suffix", [(FUZZ_CSV, ".csv"), (FUZZ_ECSV, ".ecsv")])
def test_fuzz_bases_are_valid(tmp_path, text, suffix):
    # Negative control: the fuzz tests would also pass if every file were refused.
    obs = read_observations(write(tmp_path, f"base{suffix}", text), **READ)
    assert obs.rows_used == len(text.splitlines()) - data_line(text, 0) + 1
    assert obs.rejected == []


def read_anything(path, skip):
    """Read; any exception other than a massfit one fails the calling test."""
    try:
        obs = read_observations(path, **READ, skip_bad_rows=skip)
    except MassfitError:
        return
    assert obs.rows_read == obs.rows_used + len(obs.rejected)


@pytest.mark.filterwarnings("ignore")
@settings(max_examples=200, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(text=mutated(), skip=st.booleans(), suffix=st.sampled_from([".csv", ".ecsv"]))
def test_fuzz_mutated_text_raises_only_massfit_errors(tmp_path, text, skip, suffix):
    path = tmp_path / f"fuzz{suffix}"
    path.write_bytes(text.encode("utf-8", "surrogatepass"))
    read_anything(path, skip)


@pytest.mark.filterwarnings("ignore")
@settings(max_examples=100, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(head=st.integers(0, len(FUZZ_ECSV)), junk=st.binary(max_size=200),
       skip=st.booleans())
def test_fuzz_random_bytes_raise_only_massfit_errors(tmp_path, head, junk, skip):
    path = tmp_path / "junk.ecsv"
    path.write_bytes(FUZZ_ECSV.encode()[:head] + junk)
    read_anything(path, skip)

"""Bad input reaching the command line: one line naming the key, file, line or column,
exit status 2 and no traceback (each case ran into a traceback or a silent mistake)."""

import contextlib
import io
import subprocess
import sys
import warnings
from types import SimpleNamespace

import pytest

from massfit.cli.commands import main


def run_cli(*args, cwd=None):
    """A real process (where the failure was a traceback in one)."""
    return subprocess.run([sys.executable, "-m", "massfit", *args], capture_output=True,
                          text=True, cwd=cwd, timeout=600)


def run_main(*args):
    """The same command in this process (faster); warnings count as stderr output."""
    err = io.StringIO()
    with warnings.catch_warnings(record=True) as caught, contextlib.redirect_stderr(err), \
            contextlib.redirect_stdout(io.StringIO()):
        warnings.simplefilter("always")
        try:
            status = main([str(a) for a in args])
        except SystemExit as exc:
            status = exc.code
    text = err.getvalue() + "".join(f"{w.category.__name__}: {w.message}\n" for w in caught)
    return SimpleNamespace(returncode=status, stderr=text)


def assert_one_line_error(proc, *needles):
    """Exit 2, one 'massfit: error:' line holding every needle, nothing else on stderr."""
    assert proc.returncode == 2, proc.stderr
    lines = [line for line in proc.stderr.splitlines() if line.strip()]
    errors = [line for line in lines if line.startswith("massfit: error:")]
    assert len(errors) == 1, proc.stderr
    assert "Traceback" not in proc.stderr and "Warning" not in proc.stderr, proc.stderr
    for needle in needles:
        assert needle in errors[0], errors[0]
    return errors[0]


def test_negative_seed_on_the_command_line(binary_file, tmp_path):
    path, _ = binary_file
    proc = run_cli("fit", str(path), "--out", str(tmp_path / "o"), "--seed", "-5",
                   "--no-plots", "--max-steps", "100")
    assert_one_line_error(proc, "--seed", "at least 0")
    assert not (tmp_path / "o").exists()


def test_negative_seed_in_a_config(binary_file, tmp_path):
    path, _ = binary_file
    config = tmp_path / "neg.toml"
    config.write_text(f'[data]\nfiles = ["{path.name}"]\n[sampler]\nseed = -7\n')
    proc = run_main("fit", config, "--out", tmp_path / "o", "--no-plots", "--max-steps", "100")
    assert_one_line_error(proc, "neg.toml", "sampler.seed")


def test_negative_batch_seed(binary_file, tmp_path):
    path, _ = binary_file
    systems = tmp_path / "systems.csv"
    systems.write_text(f"system,files,seed\nwren,{path.name},-2\n")
    proc = run_main("batch", systems, "--out", tmp_path / "b", "--seed", "1")
    assert_one_line_error(proc, "row 1", "seed")
    proc = run_main("batch", systems, "--out", tmp_path / "b", "--seed", "-3")
    assert_one_line_error(proc, "--seed")


@pytest.mark.parametrize("option, value", [("--parallax", "41.3 km"),
                                           ("--parallax-err", "1 pc")])
def test_a_parallax_must_be_an_angle(binary_file, tmp_path, option, value):
    path, _ = binary_file
    extra = [] if option == "--parallax" else ["--parallax", "41.3 mas"]
    proc = run_main("fit", path, "--out", tmp_path / "o", option, value, *extra,
                    "--no-plots", "--max-steps", "100")
    assert_one_line_error(proc, option, "not an angle")


def _plain_csv(folder, rows):
    """A plain CSV of east/north rows (time in JD TDB, offsets in mas)."""
    lines = ["time,body,east,north,east_err,north_err"]
    lines += [",".join(str(v) for v in row) for row in rows]
    path = folder / "plain.csv"
    path.write_text("\n".join(lines) + "\n")
    return path


# A short chain: on code that wrongly accepts the input the test fails quickly.
CSV_OPTIONS = ("--max-steps", "100", "--time-format", "jd", "--time-scale", "tdb", "--parallax", "25 mas",
               "--units", "east=mas,north=mas,east_err=mas,north_err=mas")


def _good_rows(n=8):
    return [(2458000.5 + 97.0 * k, "Wren", 80.0 - 3 * k, 30.0 + 2 * k, 0.5, 0.5)
            for k in range(n)]


def test_rows_all_at_one_time_are_one_epoch(tmp_path):
    rows = [(2458088.5, "Wren", 85.0 + k, 36.0 - k, 0.5, 0.5) for k in range(7)]
    proc = run_main("fit", _plain_csv(tmp_path, rows), *CSV_OPTIONS, "--out",
                    tmp_path / "o", "--no-plots", "--max-steps", "100")
    assert_one_line_error(proc, "'Wren'", "1 astrometric epoch", "7 row(s)")


def test_listed_companion_without_data_is_named(binary_file, tmp_path):
    path, _ = binary_file
    config = tmp_path / "c.toml"
    config.write_text(f'[data]\nfiles = ["{path.name}"]\n[companions.C]\n')
    proc = run_main("fit", config, "--out", tmp_path / "o", "--no-plots", "--max-steps", "100")
    assert_one_line_error(proc, "companion 'C'", "[companions.C]", "bodies in the data: Wren")


def test_a_column_given_two_units_is_refused(tmp_path):
    # Taking the last of east=mas,east=deg silently gave a mass wrong by 1e11.
    proc = run_main("fit", _plain_csv(tmp_path, _good_rows()), "--time-format", "jd",
                    "--time-scale", "tdb", "--parallax", "25 mas", "--units",
                    "east=mas,north=mas,east_err=mas,north_err=mas,east=deg",
                    "--out", tmp_path / "o", "--no-plots", "--max-steps", "100")
    assert_one_line_error(proc, "--units", "'east' is given twice")


def test_a_unit_for_a_column_that_does_not_exist_is_refused(tmp_path):
    proc = run_main("fit", _plain_csv(tmp_path, _good_rows()), *CSV_OPTIONS[:-1],
                    "east=mas,north=mas,east_err=mas,north_err=mas,east_er=mas",
                    "--out", tmp_path / "o", "--no-plots", "--max-steps", "100")
    assert_one_line_error(proc, "units", "'east_er'", "no file has")


def test_a_tab_in_an_ecsv_header_is_reported_at_its_own_line(binary_file, tmp_path):
    path, _ = binary_file
    lines = path.read_text().splitlines()
    at = next(k for k, line in enumerate(lines) if line.startswith("# - {name: north,"))
    lines[at] = lines[at].replace("north, unit", "north,\tunit")
    tabbed = tmp_path / "tabbed.ecsv"
    tabbed.write_text("\n".join(lines) + "\n")
    proc = run_main("fit", tabbed, "--out", tmp_path / "o", "--no-plots", "--max-steps", "100")
    assert_one_line_error(proc, f"tabbed.ecsv, line {at + 1}: ", "tab")


@pytest.mark.parametrize("column, value, needle", [
    (2, "1e308", "column 'east': is too large"),
    (4, "1e-320", "column 'east_err': is too small"),
    (0, "1e300", "column 'time': is JD 1e+300"),
    (0, "-1e300", "column 'time': is JD -1e+300"),
])
def test_absurd_values_are_named_by_file_line_and_column(tmp_path, column, value, needle):
    rows = [list(row) for row in _good_rows()]
    rows[2][column] = value
    proc = run_main("fit", _plain_csv(tmp_path, rows), *CSV_OPTIONS, "--out",
                    tmp_path / "o", "--no-plots", "--max-steps", "100")
    assert_one_line_error(proc, "plain.csv, line 4, ", needle)


def test_huge_times_in_a_real_process(tmp_path):
    rows = [list(row) for row in _good_rows()]
    rows[0][0] = "1e300"
    proc = run_cli("fit", _plain_csv(tmp_path, rows), *CSV_OPTIONS, "--out",
                   tmp_path / "o", "--no-plots", "--max-steps", "100")
    assert_one_line_error(proc, "plain.csv, line 2, column 'time'")


SECRET = "not-for-the-terminal-4711"


def _secret_setup(tmp_path):
    """A config that lists, by a slip of the path, a file outside its folder."""
    (tmp_path / "secret.txt").write_text(f"root:x:0:0:{SECRET}:/root:/bin/sh\nx:y\n")
    configs = tmp_path / "configs"
    configs.mkdir()
    (configs / "slip.toml").write_text('[data]\nfiles = ["../secret.txt"]\n')
    return configs


def test_a_file_that_is_not_a_table_is_not_quoted(tmp_path):
    configs = _secret_setup(tmp_path)
    proc = run_main("fit", configs / "slip.toml", "--out", tmp_path / "o", "--no-plots", "--max-steps", "100")
    assert_one_line_error(proc, "secret.txt, line 1", "not an observation table")
    assert SECRET not in proc.stderr


def test_a_batch_does_not_quote_it_in_results(tmp_path):
    configs = _secret_setup(tmp_path)
    proc = run_main("batch", configs, "--out", tmp_path / "b", "--workers", "1")
    assert proc.returncode == 3 and "Traceback" not in proc.stderr
    results = (tmp_path / "b" / "results.ecsv").read_text()
    assert "not an observation table" in results
    assert SECRET not in results and SECRET not in proc.stderr


def test_a_symlink_loop_listed_in_a_config(tmp_path):
    (tmp_path / "loop_a.csv").symlink_to(tmp_path / "loop_b.csv")
    (tmp_path / "loop_b.csv").symlink_to(tmp_path / "loop_a.csv")
    config = tmp_path / "loop.toml"
    config.write_text('[data]\nfiles = ["loop_a.csv"]\n')
    proc = run_main("fit", config, "--out", tmp_path / "o", "--no-plots", "--max-steps", "100")
    assert_one_line_error(proc, "loop_a.csv", "cannot be read")


def test_a_symlink_loop_in_a_batch_folder(tmp_path):
    folder = tmp_path / "configs"
    folder.mkdir()
    (folder / "x.toml").symlink_to(folder / "y.toml")
    (folder / "y.toml").symlink_to(folder / "x.toml")
    proc = run_main("batch", folder, "--out", tmp_path / "b", "--workers", "1", "--seed", "1")
    assert proc.returncode == 3 and "Traceback" not in proc.stderr, proc.stderr
    results = (tmp_path / "b" / "results.ecsv").read_text()
    assert results.count("cannot read the config file") == 2


def test_future_utc_is_converted_once_with_a_note_and_no_warning(tmp_path):
    import massfit
    from massfit.read.timescales import LEAP_SECOND_NOTE

    # ISO dates of 2061-2063 in UTC: past any leap-second table, which ERFA flags as a
    # "dubious year" (ERFA's dat(): more than a few years past the table's release).
    rows = [(f"206{1 + k // 4}-0{1 + 2 * (k % 4)}-15T00:00:00", "Wren", 80.0 - 3 * k,
             30.0 + 2 * k, 0.5, 0.5) for k in range(8)]
    path = _plain_csv(tmp_path, rows)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        obs = massfit.read_observations(path, time_format="isot", time_scale="utc",
                                        units={"east": "mas", "north": "mas",
                                               "east_err": "mas", "north_err": "mas"})
    assert not [w for w in caught if "dubious" in str(w.message)]
    assert obs.notes == [LEAP_SECOND_NOTE]
    # Negative control: TDB dates need no leap seconds and get no note.
    tdb = massfit.read_observations(path, time_format="isot", time_scale="tdb",
                                    units={"east": "mas", "north": "mas",
                                           "east_err": "mas", "north_err": "mas"})
    assert tdb.notes == []

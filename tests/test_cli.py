"""The command line as a user meets it: help, a fit, the demo, and bad input."""

import json
import subprocess
import sys

import pytest

from massfit.cli.commands import main

SUMMARY_KEYS = {"central_mass", "central_gm", "parallax", "converged", "diagnostics",
                "companions", "inputs"}
BLOCK_KEYS = {"unit", "median", "lower_68", "upper_68", "lower_95", "upper_95"}


def run_cli(*args, cwd=None):
    return subprocess.run([sys.executable, "-m", "massfit", *args], capture_output=True,
                          text=True, cwd=cwd, timeout=600)


@pytest.mark.parametrize("command", [[], ["fit"], ["demo"]])
def test_help_on_every_command(command):
    proc = run_cli(*command, "--help")
    assert proc.returncode == 0
    assert "usage: massfit" in proc.stdout


def test_fit_writes_the_conventional_summary(binary_file, tmp_path):
    path, truth = binary_file
    out = tmp_path / "out"
    status = main(["fit", str(path), "--out", str(out), "--parallax", "25 mas",
                   "--parallax-err", "0.25 mas", "--seed", "2", "--no-plots", "--quiet"])
    assert status == 0
    summary = json.loads((out / "summary.json").read_text())
    assert SUMMARY_KEYS <= set(summary)
    for key in ("central_mass", "central_gm", "parallax"):
        assert set(summary[key]) == BLOCK_KEYS
    assert summary["central_mass"]["unit"] == "kg"
    assert summary["central_gm"]["unit"] == "km3 / s2"
    assert summary["parallax"]["unit"] == "mas"
    assert summary["converged"] is True
    assert set(summary["diagnostics"]) >= {"walkers", "steps", "max_autocorr_steps",
                                           "effective_samples", "sampling_seconds",
                                           "acceptance_fraction"}
    wren = summary["companions"]["Wren"]
    for key, unit in (("period", "d"), ("semi_major_axis", "au"), ("eccentricity", ""),
                      ("inclination", "deg")):
        assert set(wren[key]) == BLOCK_KEYS and wren[key]["unit"] == unit
    inputs = summary["inputs"]
    assert inputs["rows_read"] == inputs["rows_used"] + len(inputs["rows_rejected"]) == 30
    # The mass matches the truth it was simulated from.
    solar = summary["central_mass_solar"]
    assert solar["lower_95"] <= truth["central_mass_Msun"] <= solar["upper_95"]
    assert (out / "samples.ecsv").exists() and (out / "run.json").exists()
    # Samples read back without pickle.
    from astropy.table import Table

    samples = Table.read(out / "samples.ecsv", format="ascii.ecsv")
    assert "central_mass" in samples.colnames and len(samples) > 1000


def test_not_converged_is_said_and_has_its_own_status(binary_file, tmp_path):
    path, _ = binary_file
    proc = run_cli("fit", str(path), "--out", str(tmp_path / "o"), "--parallax", "25 mas",
                   "--parallax-err", "0.25 mas", "--max-steps", "300", "--no-plots")
    assert proc.returncode == 3
    assert "NOT CONVERGED" in proc.stdout
    summary = json.loads((tmp_path / "o" / "summary.json").read_text())
    assert summary["converged"] is False
    assert summary["central_mass"]["median"] is not None


def test_existing_result_needs_force(binary_file, tmp_path):
    path, _ = binary_file
    out = tmp_path / "o"
    out.mkdir()
    (out / "summary.json").write_text("{}")
    # A summary alone does not make a massfit result: never replaced, even with --force.
    proc = run_cli("fit", str(path), "--out", str(out), "--parallax", "25 mas", "--force")
    assert proc.returncode == 2
    assert "not written by massfit" in proc.stderr and "Traceback" not in proc.stderr
    # With its run record (a result written before files_written existed) it is one.
    (out / "run.json").write_text("{}")
    proc = run_cli("fit", str(path), "--out", str(out), "--parallax", "25 mas")
    assert proc.returncode == 2
    assert "--force" in proc.stderr and "Traceback" not in proc.stderr


@pytest.mark.parametrize("extra, needle", [
    ([], "parallax"),  # angular offsets with no distance
    (["--parallax", "25 parsnips"], "--parallax"),
    (["--parallax", "-3 mas"], "positive"),
    (["--distance", "40 pc", "--parallax", "25 mas"], "not both"),
    (["--walkers", "2", "--parallax", "25 mas"], "walkers"),
])
def test_bad_options_exit_2_without_traceback(binary_file, tmp_path, extra, needle):
    path, _ = binary_file
    proc = run_cli("fit", str(path), "--out", str(tmp_path / "o"), *extra)
    assert proc.returncode == 2, proc.stderr
    assert "massfit: error:" in proc.stderr
    assert needle in proc.stderr
    assert "Traceback" not in proc.stderr


def test_bad_file_names_file_and_line(tmp_path):
    bad = tmp_path / "bad.csv"
    bad.write_text("time,body,east,north,east_err,north_err\n"
                   "2459000.5,Wren,1.0,2.0,0.1,0.1\n"
                   "2459001.5,Wren,abc,2.0,0.1,0.1\n")
    proc = run_cli("fit", str(bad), "--out", str(tmp_path / "o"), "--time-format", "jd",
                   "--time-scale", "tdb", "--units",
                   "east=au,north=au,east_err=au,north_err=au")
    assert proc.returncode == 2
    assert "bad.csv" in proc.stderr and "line 3" in proc.stderr and "east" in proc.stderr
    assert "Traceback" not in proc.stderr


def test_missing_file_exits_2(tmp_path):
    proc = run_cli("fit", str(tmp_path / "nowhere.ecsv"), "--out", str(tmp_path / "o"))
    assert proc.returncode == 2
    assert "nowhere.ecsv" in proc.stderr and "Traceback" not in proc.stderr


def test_demo_runs_and_compares_with_truth(tmp_path):
    # A short demo does not converge, and must say so (status 3), while still
    # printing the comparison with the truth.
    proc = run_cli("demo", "--out", str(tmp_path / "demo"), "--max-steps", "500",
                   "--no-plots")
    assert proc.returncode == 3, proc.stderr
    assert "NOT CONVERGED" in proc.stdout
    assert "true" in proc.stdout and "Tirrin" in proc.stdout

"""The output folder: atomic writing, no overwrite without --force, the run record."""

import datetime as dt
import hashlib
import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

import massfit
from massfit.errors import ConfigError

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def small_result(small_data_file):
    obs = massfit.read_observations(small_data_file)
    return massfit.fit(obs, seed=3, walkers=16, max_steps=200, check_every=100,
                       progress=False)


def test_existing_result_is_kept_without_force(small_result, tmp_path):
    out = small_result.save(tmp_path / "out", plots=False)
    before = (out / "summary.json").read_bytes()
    (out / "note.txt").write_text("mine")
    with pytest.raises(ConfigError, match="--force"):
        small_result.save(out, plots=False)
    assert (out / "summary.json").read_bytes() == before
    assert (out / "note.txt").exists()
    small_result.save(out, plots=False, force=True)
    assert (out / "note.txt").read_text() == "mine"  # only massfit's own files replaced


def test_a_failed_write_leaves_no_folder_that_looks_complete(small_result, tmp_path,
                                                             monkeypatch):
    def broken_figures(folder, **options):
        (Path(folder) / "corner.png").write_bytes(b"half a figure")
        raise OSError("disc full")

    monkeypatch.setattr(small_result, "write_figures", broken_figures)
    with pytest.raises(OSError, match="disc full"):
        small_result.save(tmp_path / "out")
    assert list(tmp_path.iterdir()) == []  # neither the folder nor its temporary twin


def test_cli_refuses_to_overwrite_and_records_the_run(small_data_file, tmp_path):
    env = dict(os.environ, PYTHONPATH=str(ROOT), MPLBACKEND="Agg")
    command = [sys.executable, "-m", "massfit", "fit", str(small_data_file), "--out", "res",
               "--seed", "8", "--walkers", "16", "--max-steps", "200", "--check-every",
               "100", "--threads", "1", "--no-plots", "--quiet"]
    before = dt.datetime.now(dt.timezone.utc)
    first = subprocess.run(command, cwd=tmp_path, env=env, capture_output=True, text=True)
    after = dt.datetime.now(dt.timezone.utc)
    assert first.returncode == 3  # 200 steps cannot be 50 autocorrelation times
    assert "did NOT converge" in first.stderr
    record = json.loads((tmp_path / "res" / "run.json").read_text())
    assert record["seed"] == 8
    started = dt.datetime.fromisoformat(record["started_utc"])
    finished = dt.datetime.fromisoformat(record["finished_utc"])
    assert before <= started <= finished <= after
    assert record["command_line"][1:] == command[3:]
    expected = hashlib.sha256(Path(small_data_file).read_bytes()).hexdigest()
    assert record["input_sha256"] == {str(small_data_file): expected}
    for package in ("massfit", "numpy", "scipy", "emcee", "astropy"):
        assert record["versions"][package], package
    assert record["sampler"] == {"walkers": 16, "max_steps": 200, "check_every": 100,
                                 "seed": 8, "threads": 1}

    summary = (tmp_path / "res" / "summary.json").read_bytes()
    second = subprocess.run(command, cwd=tmp_path, env=env, capture_output=True, text=True)
    assert second.returncode == 2
    assert "--force" in second.stderr and "Traceback" not in second.stderr
    assert (tmp_path / "res" / "summary.json").read_bytes() == summary

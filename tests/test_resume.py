"""Checkpoint and resume: a run killed mid-way and resumed ends where an uninterrupted
run with the same seed ends, sample for sample.

The processes are real: the CLI runs in a subprocess, is killed with SIGKILL (no
chance to clean up) while it samples, and is then resumed with ``--resume``.
"""

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

import massfit
from massfit.sample.checkpoint import checkpoint_path, partial_dir, saved_steps
from massfit.errors import ConfigError
from conftest import write_one_companion

#: Real processes killed and resumed, twice over: in the slow set (.ci/run runs it second).
pytestmark = pytest.mark.slow

ROOT = Path(__file__).resolve().parents[1]
# Small on purpose: one companion, 14 epochs, 16 walkers, a check every 50 steps.
OPTIONS = ["--seed", "11", "--walkers", "16", "--max-steps", "2400", "--check-every", "50",
           "--no-plots", "--quiet"]


@pytest.fixture(scope="module")
def data_file(small_data_file):
    return small_data_file


@pytest.fixture(scope="module", params=["two orbits", "short arc"])
def any_data_file(request, small_data_file, tmp_path_factory):
    """The small file, and a companion seen over a sixth of its orbit (sampled in
    state coordinates, massfit.sample.reparameterisation)."""
    if request.param == "two orbits":
        return small_data_file
    return write_one_companion(tmp_path_factory.mktemp("short-arc"), period=1500.0)


def _cli(*args, cwd):
    env = dict(os.environ, PYTHONPATH=str(ROOT), MPLBACKEND="Agg")
    return [sys.executable, "-m", "massfit", "fit", *map(str, args)], dict(cwd=cwd, env=env)


def _run(*args, cwd):
    command, kwargs = _cli(*args, cwd=cwd)
    return subprocess.run(command, capture_output=True, text=True, timeout=120, **kwargs)


def _iteration(path):
    """Steps saved in a checkpoint so far."""
    return saved_steps(path)


def _summary(folder):
    summary = json.loads((folder / "summary.json").read_text())
    summary["diagnostics"].pop("sampling_seconds")
    return summary


def test_killed_run_resumes_to_the_uninterrupted_result(any_data_file, tmp_path):
    data_file = any_data_file
    full = _run(data_file, "--out", "full", *OPTIONS, cwd=tmp_path)
    assert full.returncode in (0, 3), full.stderr
    full_steps = _summary(tmp_path / "full")["diagnostics"]["steps"]
    as_state = _summary(tmp_path / "full")["diagnostics"]["sampled_as_state"]
    assert bool(as_state) == ("short-arc" in str(data_file))

    command, kwargs = _cli(data_file, "--out", "cut", *OPTIONS, cwd=tmp_path)
    process = subprocess.Popen(command, stdout=subprocess.DEVNULL,
                               stderr=subprocess.DEVNULL, **kwargs)
    saved = checkpoint_path(tmp_path / "cut")
    deadline = time.monotonic() + 60
    while _iteration(saved) < 200 and process.poll() is None and time.monotonic() < deadline:
        time.sleep(0.01)
    process.send_signal(signal.SIGKILL)
    process.wait(timeout=30)
    assert process.returncode == -signal.SIGKILL
    killed_at = _iteration(saved)
    # The kill really came mid-run: part of the chain is saved, the result is not.
    assert 200 <= killed_at < full_steps
    assert not (tmp_path / "cut").exists()

    resumed = _run(data_file, "--out", "cut", "--resume", *OPTIONS, cwd=tmp_path)
    assert resumed.returncode == full.returncode, resumed.stderr
    assert "Traceback" not in resumed.stderr
    assert _summary(tmp_path / "cut") == _summary(tmp_path / "full")
    assert ((tmp_path / "cut" / "samples.ecsv").read_bytes()
            == (tmp_path / "full" / "samples.ecsv").read_bytes())
    record = json.loads((tmp_path / "cut" / "run.json").read_text())
    assert record["started_utc"] < record["resumed_utc"]
    # It continued the saved chain rather than sampling it all again.
    assert record["resumed_from_step"] == killed_at
    assert not partial_dir(tmp_path / "cut").exists()  # cleaned up once written


def test_interrupt_keeps_the_checkpoint_and_says_how_to_resume(data_file, tmp_path):
    # 64 walkers: seconds of sampling after the first check, so Ctrl-C lands mid-run.
    slow = [o if o != "16" else "64" for o in OPTIONS]
    command, kwargs = _cli(data_file, "--out", "stop", *slow, cwd=tmp_path)
    process = subprocess.Popen(command, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE,
                               text=True, **kwargs)
    saved = checkpoint_path(tmp_path / "stop")
    deadline = time.monotonic() + 60
    while _iteration(saved) < 50 and process.poll() is None and time.monotonic() < deadline:
        time.sleep(0.01)
    process.send_signal(signal.SIGINT)
    _, stderr = process.communicate(timeout=30)
    assert process.returncode == 130
    assert "--resume" in stderr and "Traceback" not in stderr
    assert saved.exists() and not (tmp_path / "stop").exists()
    # Starting again without --resume would throw the progress away: refused.
    again = _run(data_file, "--out", "stop", *slow, cwd=tmp_path)
    assert again.returncode == 2 and "--resume" in again.stderr
    assert "Traceback" not in again.stderr


def test_resume_refuses_another_seed_and_a_missing_checkpoint(data_file, tmp_path):
    obs = massfit.read_observations(data_file)
    saved = tmp_path / "checkpoint.json"
    with pytest.raises(ConfigError, match="nothing to resume"):
        massfit.fit(obs, seed=1, walkers=16, max_steps=100, check_every=50,
                    progress=False, checkpoint=saved, resume=True)
    first = massfit.fit(obs, seed=1, walkers=16, max_steps=100, check_every=50,
                        progress=False, checkpoint=saved)
    with pytest.raises(ConfigError, match="seed"):
        massfit.fit(obs, seed=2, walkers=16, max_steps=100, check_every=50,
                    progress=False, checkpoint=saved, resume=True)
    # Same settings: the finished chain is read back, not sampled again.
    again = massfit.fit(obs, seed=1, walkers=16, max_steps=100, check_every=50,
                        progress=False, checkpoint=saved, resume=True)
    np.testing.assert_array_equal(again.chain.samples, first.chain.samples)

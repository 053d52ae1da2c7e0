"""Batch fits: a local pool and a Dask cluster give the numbers of fitting each system alone.

The systems are tiny (one companion, a short chain) so the whole file stays quick; the
numbers only need to be *the same* as a single fit with the same seed, not converged.
"""

import json
from pathlib import Path

import astropy.units as u
import numpy as np
import pytest
from astropy.table import Table
from astropy.time import Time

import massfit
from massfit import batch
from massfit.cli.commands import main
from massfit.scenarios.simulate import Elements, simulate_astrometry, write_scenario

SAMPLER = "[sampler]\nwalkers = 16\nmax_steps = 200\ncheck_every = 100\n"


def _system(folder, name, mass, period, seed):
    rng = np.random.default_rng(seed)
    elements = {"Quill": Elements(period=period, ecc=0.2, inc=50.0, omega=30.0, node=70.0,
                                  periapsis_time=2460000.0)}
    times = {"Quill": Time(2460000.0 + np.sort(rng.uniform(0, 2 * period, 14)),
                           format="jd", scale="tdb")}
    table = simulate_astrometry(times, elements, mass, error=0.002 * u.au, seed=seed)
    write_scenario(folder / name, table, {"central_mass_Msun": mass},
                   name=f"{name}.ecsv")
    return folder / name / f"{name}.ecsv"


@pytest.fixture(scope="module")
def systems(tmp_path_factory):
    """Two invented systems with configs, and one whose data file is missing."""
    root = tmp_path_factory.mktemp("batch")
    configs = root / "configs"
    configs.mkdir()
    for k, (name, mass, period) in enumerate((("Arlo", 0.8, 40.0), ("Brisk", 1.6, 25.0))):
        data = _system(root, name, mass, period, seed=20 + k)
        (configs / f"{name}.toml").write_text(
            f'[data]\nfiles = ["{data}"]\n{SAMPLER}seed = {5 + k}\n')
    (configs / "Cinder.toml").write_text(
        f'[data]\nfiles = ["{root / "nowhere.ecsv"}"]\n{SAMPLER}seed = 9\n')
    return root, configs


def _alone(config):
    setup = massfit.load_config(config)
    obs = massfit.read_observations(setup.files, **setup.read_options)
    result = massfit.fit(obs, setup.system, sampler=setup.sampler, progress=False)
    return result.summary


@pytest.fixture(scope="module")
def alone(systems):
    _, configs = systems
    return {name: _alone(configs / f"{name}.toml") for name in ("Arlo", "Brisk")}


def _check_same_numbers(table, alone):
    rows = {row["system"]: row for row in table}
    assert set(rows) == {"Arlo", "Brisk", "Cinder"}
    for name, summary in alone.items():
        row = rows[name]
        assert row["status"] in ("converged", "not converged")
        for part in ("median", "lower_68", "upper_68", "lower_95", "upper_95"):
            assert row[f"mass_{part}"] == summary["central_mass"][part]
            assert row[f"gm_{part}"] == summary["central_gm"][part]
        assert bool(row["converged"]) == summary["converged"]
        assert row["steps"] == summary["diagnostics"]["steps"]
    # The broken system fails alone, with its reason, and the others still ran.
    assert rows["Cinder"]["status"] == "failed"
    assert rows["Cinder"]["seed"] == 9  # the seed its config states, even in failure
    assert "nowhere.ecsv" in rows["Cinder"]["failure"]
    assert np.isnan(rows["Cinder"]["mass_median"])


def test_dask_cluster_batch_matches_single_fits(systems, alone, tmp_path):
    distributed = pytest.importorskip("distributed")
    _, configs = systems
    jobs = batch.collect_jobs(configs, tmp_path)
    # In-process cluster: inproc transport, no network, no dashboard.
    with distributed.LocalCluster(processes=False, n_workers=1, threads_per_worker=2,
                                  dashboard_address=None) as cluster:
        table = batch.run_batch(jobs, tmp_path, scheduler=cluster.scheduler_address,
                                progress=False)
    _check_same_numbers(table, alone)
    on_disk = Table.read(tmp_path / batch.RESULTS_FILE, format="ascii.ecsv")
    assert list(on_disk["system"]) == ["Arlo", "Brisk", "Cinder"]
    assert on_disk["mass_median"].unit == u.kg
    summary = json.loads((tmp_path / "systems" / "Arlo" / "summary.json").read_text())
    assert summary["central_mass"]["median"] == alone["Arlo"]["central_mass"]["median"]


def test_local_pool_batch_matches_and_rerun_skips_finished(systems, alone, tmp_path,
                                                           monkeypatch):
    _, configs = systems
    jobs = batch.collect_jobs(configs, tmp_path)
    table = batch.run_batch(jobs, tmp_path, workers=2, progress=False)
    _check_same_numbers(table, alone)
    stamp = (tmp_path / "systems" / "Arlo" / "summary.json").stat().st_mtime_ns
    # A rerun reads the finished systems back and tries only the failed one again
    # (run in this process here: the pool itself was exercised just above).
    calls = []

    def in_process(todo, workers, scheduler):
        calls.extend(job.system for job in todo)
        return ((job, batch.fit_job(job)) for job in todo)

    monkeypatch.setattr(batch, "_execute", in_process)
    again = batch.run_batch(jobs, tmp_path, workers=1, progress=False)
    assert calls == ["Cinder"]
    assert (tmp_path / "systems" / "Arlo" / "summary.json").stat().st_mtime_ns == stamp
    assert list(again["mass_median"][:2]) == list(table["mass_median"][:2])


def test_table_of_systems_and_cli(systems, tmp_path, monkeypatch):
    root, _ = systems
    monkeypatch.setattr(batch, "_execute",
                        lambda todo, w, s: ((job, batch.fit_job(job)) for job in todo))
    listing = tmp_path / "systems.csv"
    listing.write_text("system,files,seed\n"
                       f"Arlo,{root / 'Arlo' / 'Arlo.ecsv'},5\n")
    out = tmp_path / "out"
    status = main(["batch", str(listing), "--out", str(out), "--walkers", "16",
                   "--max-steps", "200"])
    table = Table.read(out / batch.RESULTS_FILE, format="ascii.ecsv")
    single = massfit.fit(massfit.read_observations(root / "Arlo" / "Arlo.ecsv"), seed=5,
                         walkers=16, max_steps=200, progress=False).summary
    assert table["system"][0] == "Arlo"
    assert table["mass_median"][0] == single["central_mass"]["median"]
    assert status == (0 if single["converged"] else 3)


def test_bad_batch_input_is_a_user_error(tmp_path, capsys):
    listing = tmp_path / "systems.csv"
    listing.write_text("name,files\nA,a.ecsv\n")
    assert main(["batch", str(listing), "--out", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err
    assert "systems.csv" in err and "'system' column" in err
    assert main(["batch", str(tmp_path / "missing"), "--out", str(tmp_path / "o")]) == 2


# ------------------------------------------------------------------ stopping a batch
def _long_batch(systems, tmp_path):
    """A batch process whose fits would run for minutes, and its worker processes."""
    import os
    import subprocess
    import sys
    import time

    psutil = pytest.importorskip("psutil")
    root, _ = systems
    configs = tmp_path / "long"
    configs.mkdir()
    for name in ("Arlo", "Brisk", "Cinder"):
        (configs / f"{name}.toml").write_text(
            f'[data]\nfiles = ["{root / "Arlo" / "Arlo.ecsv"}"]\n[sampler]\n'
            f'max_steps = 1000000\ncheck_every = 1000000\nseed = 3\n')
    proc = subprocess.Popen([sys.executable, "-m", "massfit", "batch", str(configs), "--out",
                             str(tmp_path / "b"), "--workers", "2"],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            start_new_session=True, env={**os.environ, "MPLBACKEND": "Agg"})
    parent, workers = psutil.Process(proc.pid), []
    deadline = time.monotonic() + 240
    while len(workers) < 2 and time.monotonic() < deadline:
        workers = [child for child in parent.children(recursive=True)
                   if "spawn_main" in " ".join(_command_line(child, psutil))]
        time.sleep(0.2)
    assert len(workers) == 2, "the batch started no workers"
    time.sleep(1.0)
    return proc, workers, psutil


def _command_line(process, psutil):
    """A process's command line, or none where it ended between listing and reading
    (short-lived helpers of the pool come and go)."""
    try:
        return process.cmdline()
    except (psutil.NoSuchProcess, psutil.ZombieProcess):
        return []


def test_ctrl_c_stops_a_batch_and_writes_what_is_done(systems, tmp_path):
    import os
    import signal

    proc, workers, psutil = _long_batch(systems, tmp_path)
    os.killpg(proc.pid, signal.SIGINT)  # what Ctrl-C in a terminal sends
    _, err = proc.communicate(timeout=240)
    assert proc.returncode == 130
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1 and "interrupted" in lines[0] and "Traceback" not in err, err
    table = Table.read(tmp_path / "b" / batch.RESULTS_FILE, format="ascii.ecsv")
    assert sorted(table["system"]) == ["Arlo", "Brisk", "Cinder"]
    assert set(table["status"]) == {batch.NOT_RUN}
    _, alive = psutil.wait_procs(workers, timeout=60)
    assert not alive, "a worker outlived the interrupted batch"


def test_workers_die_with_a_killed_batch(systems, tmp_path):
    proc, workers, psutil = _long_batch(systems, tmp_path)
    proc.kill()
    proc.wait(timeout=60)
    _, alive = psutil.wait_procs(workers, timeout=120)
    assert not alive, "a worker outlived the killed batch"


# ------------------------------------------------------------------ folders and reruns
def test_system_folders_are_one_per_name(tmp_path):
    data = tmp_path / "x.ecsv"
    data.write_text("")
    listing = tmp_path / "systems.csv"
    listing.write_text("system,files\na/b,x.ecsv\na_b,x.ecsv\n../up,x.ecsv\n")
    jobs = batch.collect_jobs(listing, tmp_path / "out")
    folders = [job.output for job in jobs]
    assert len(set(folders)) == 3
    assert folders[1].endswith("/a_b")  # a safe name is kept as it is
    for folder in folders:
        assert Path(folder).parent == (tmp_path / "out" / "systems").resolve()
    listing.write_text("system,files\nWren,x.ecsv\nwren,x.ecsv\n")
    with pytest.raises(massfit.errors.ConfigError, match="share the output folder"):
        batch.collect_jobs(listing, tmp_path / "out")


def test_a_changed_seed_is_fitted_again(systems, tmp_path, monkeypatch):
    root, _ = systems
    calls = []

    def in_process(todo, workers, scheduler):
        calls.extend(job.system for job in todo)
        return ((job, batch.fit_job(job)) for job in todo)

    monkeypatch.setattr(batch, "_execute", in_process)
    listing = tmp_path / "systems.csv"
    sampler = {"walkers": 16, "max_steps": 200, "check_every": 100}
    results = {}
    for seed in (5, 5, 6):
        listing.write_text(f"system,files,seed\nArlo,{root / 'Arlo' / 'Arlo.ecsv'},{seed}\n")
        jobs = batch.collect_jobs(listing, tmp_path / "out", sampler=sampler)
        table = batch.run_batch(jobs, tmp_path / "out", progress=False)
        results.setdefault(seed, []).append(float(table["mass_median"][0]))
        assert int(table["seed"][0]) == seed
    assert calls == ["Arlo", "Arlo"]  # the same seed is read back, a new one refitted
    assert results[5][0] == results[5][1] != results[6][0]


def _single_lined(path):
    """An invented planet (2.5 M_jup, P = 300 d, e = 0.1, edge-on) of a 1 M_sun star
    named Wisp, seen in the star's velocities alone (m/s)."""
    from massfit.scenarios.simulate import simulate_velocities

    mass = 2.5 * u.M_jup.to(u.M_sun)
    elements = {"companion": Elements(period=300.0, ecc=0.1, inc=90.0, omega=40.0,
                                      node=0.0, periapsis_time=2460100.0, mass=mass)}
    times = {"Wisp": Time(2460000.0 + np.sort(np.random.default_rng(3).uniform(0, 900, 30)),
                          format="jd", scale="tdb")}
    table = simulate_velocities(times, elements, 1.0, primary="Wisp", error=5 * u.m / u.s,
                                seed=4)
    out = Table()
    out["time"] = table["time"].tdb.jd
    out["body"] = table["body"]
    out["rv"] = table["rv"].to(u.m / u.s)
    out["rv_err"] = table["rv_err"].to(u.m / u.s)
    out.meta.update(time_format="jd", time_scale="tdb")
    out.write(path, format="ascii.ecsv")
    return path


def test_table_rows_say_the_seed_used_and_what_velocities_alone_measured(
        systems, tmp_path, monkeypatch):
    root, _ = systems
    monkeypatch.setattr(batch, "_execute",
                        lambda todo, w, s: ((job, batch.fit_job(job)) for job in todo))
    # A config that states the seed and the priors but leaves the files to the table.
    shared = tmp_path / "shared.toml"
    shared.write_text(f"{SAMPLER}seed = 5\n")
    planet = _single_lined(tmp_path / "planet.ecsv")
    rv_config = tmp_path / "planet.toml"
    rv_config.write_text('[system]\nprimary = "Wisp"\ncentral_mass_prior = {kind = '
                         '"normal", mean = "1.0 Msun", sd = "0.05 Msun"}\n'
                         f"{SAMPLER}seed = 7\n")
    listing = tmp_path / "systems.csv"
    listing.write_text("system,files,config\n"
                       f"Arlo,{root / 'Arlo' / 'Arlo.ecsv'},{shared}\n"
                       f"Wisp,{planet},{rv_config}\n")
    out = tmp_path / "out"
    main(["batch", str(listing), "--out", str(out)])
    table = Table.read(out / batch.RESULTS_FILE, format="ascii.ecsv")
    rows = {row["system"]: row for row in table}
    # The seed each config states, not -1.
    assert rows["Arlo"]["seed"] == 5 and rows["Wisp"]["seed"] == 7
    assert rows["Arlo"]["measured"] == "central mass"
    # Velocities alone: said so, with the mass function and the minimum mass (a
    # stated primary mass), not a row of NaN called converged.
    wisp = rows["Wisp"]
    assert wisp["status"] != "failed", wisp["failure"]
    assert wisp["measured"] == "mass function only" and wisp["companion"] == "companion"
    assert np.isnan(wisp["mass_median"])
    # f(m) = (m sin i)^3 / (M + m)^2 (the textbook identity) = 1.36e-8 M_sun for the
    # invented 2.5 M_jup (2.39e-3 M_sun) edge-on about 1 M_sun; m sin i = 2.39e-3 M_sun.
    assert 1.0e-8 < wisp["mass_function_msun_median"] < 2.4e-8
    assert 1.5e-3 < wisp["minimum_mass_msun_median"] < 3.5e-3
    assert "central_mass_prior" in wisp["note"] or "primary mass" in wisp["note"]
    # The system's quantities (distance, precession scale, frame terms) have their
    # columns with the units of the table of quantities; empty (NaN) where a fit has
    # none of them (tests/test_dark_mass.py fills them).
    assert table["distance_median"].unit == "pc"
    assert table["frame_motion_east_lower_95"].unit == "mas / yr"
    assert table["frame_velocity_median"].unit == "km / s"
    assert np.isnan(rows["Arlo"]["frame_east_median"])
    assert np.isnan(rows["Arlo"]["mass_distance_correlation"])


def test_threads_asked_for_reach_the_workers(systems, tmp_path, monkeypatch):
    """``--threads`` is not dropped by the one-thread-per-worker rule: the compiled
    kernel's thread cap in the workers is the largest asked for, BLAS stays at one."""
    _, configs = systems
    jobs = batch.collect_jobs(configs, tmp_path / "out", sampler={"threads": 2})
    assert all(job.sampler["threads"] == 2 for job in jobs)
    for key in batch._single_threaded_children._KEYS:
        monkeypatch.delenv(key, raising=False)
    import os

    with batch._single_threaded_children(numba_threads=2):
        assert os.environ["NUMBA_NUM_THREADS"] == "2"
        assert os.environ["OMP_NUM_THREADS"] == "1"
    assert "NUMBA_NUM_THREADS" not in os.environ


def test_a_ctrl_c_while_the_workers_start_is_held_not_lost():
    # The batch holds Ctrl-C back while its workers start (they inherit the held
    # signal); one that comes meanwhile reaches the batch as soon as they have started.
    # An ignored signal, as the batch once used, would be lost and the batch run on.
    import os
    import signal

    if not hasattr(signal, "pthread_sigmask"):
        pytest.skip("signals cannot be held here")
    interrupted = False
    try:
        with batch._sigint_held():
            os.kill(os.getpid(), signal.SIGINT)
            assert signal.SIGINT in signal.sigpending()  # held, not delivered
    except KeyboardInterrupt:
        interrupted = True
    assert interrupted
    assert signal.SIGINT not in signal.pthread_sigmask(signal.SIG_BLOCK, set())

"""Progress that means something: the sampler's bar counts autocorrelation times (the
convergence criterion), the start search says its stages, and a batch says how many
systems are done and the time left."""

import numpy as np

from massfit.sample.chain import SamplerSettings, run_sampler
from massfit.sample.progress import convergence_words


def test_words_count_autocorrelation_times_against_the_fifty_needed():
    assert convergence_words(3300, 100.0, 50) == "33 of 50 autocorrelation times"
    assert convergence_words(9000, 100.0, 50) == "50 of 50 autocorrelation times"


def test_sampling_bar_runs_against_convergence_not_the_step_cap(capsys):
    def log_prob(x):  # a unit normal in two dimensions
        return -0.5 * np.sum(x * x, axis=1)

    initial = np.random.default_rng(1).normal(size=(16, 2))
    settings = SamplerSettings(walkers=16, max_steps=400, check_every=200, seed=3,
                               progress=True)
    run_sampler(log_prob, initial, settings)
    err = capsys.readouterr().err
    assert "converging: " in err and " of 50 autocorrelation times" in err
    assert "cap 400" in err
    assert "400/400" not in err  # not a count of steps against the cap
    # The last line says how it ended, with the chain's length in autocorrelation times.
    assert ("converged: 400 steps, " in err or "not converged at the step cap: 400 steps, "
            in err) and "(50 needed)" in err


def test_start_search_says_its_stages(tmp_path, capsys):
    from conftest import write_one_companion

    from massfit.model.orbit_model import OrbitModel
    from massfit.model.specs import SystemSpec
    from massfit.read.tables import read_observations
    from massfit.start.search import find_start

    path = write_one_companion(tmp_path)
    model = OrbitModel(read_observations(path), SystemSpec())
    find_start(model, progress=True)
    err = capsys.readouterr().err
    assert "start: period search for 'Quill' (1 of 1 companion(s))" in err
    assert "start: joint least squares" in err
    find_start(model, progress=False)
    assert capsys.readouterr().err == ""


def test_batch_bar_says_systems_done_and_time_left(tmp_path, capsys, monkeypatch):
    from massfit import batch

    jobs = [batch.BatchJob(system=name, output=str(tmp_path / name)) for name in "AB"]

    def quick(todo, workers, scheduler):
        for job in todo:
            yield job, batch.failed_row(job, "not fitted in this test", 0.0)

    monkeypatch.setattr(batch, "_execute", quick)
    batch.run_batch(jobs, tmp_path, progress=True)
    err = capsys.readouterr().err
    assert "systems: 2 of 2 done" in err and "left" in err and "2 failed" in err


def test_not_converged_says_which_test_failed():
    from types import SimpleNamespace

    from massfit.run import not_converged_text

    short = SimpleNamespace(steps=3000, tau=np.array([100.0, 80.0]),
                            tau_history=[(2500, 95.0), (3000, 100.0)])
    assert not_converged_text(short) == ("not converged after 3000 steps: the chain is "
                                         "30.0 autocorrelation times long (50 needed); "
                                         "raise max_steps")
    # Long enough, but the estimate moved by 4 % (3 % allowed): saying only "50 needed"
    # beside 70 would read as a contradiction.
    unsettled = SimpleNamespace(steps=3000, tau=np.array([42.8, 20.0]),
                                tau_history=[(2500, 41.1), (3000, 42.8)])
    text = not_converged_text(unsettled)
    assert "70.1 autocorrelation times long (50 needed), but" in text
    assert "the longest by 4 %; 3 % allowed for each" in text

"""Nothing lost: output folders, checkpoints, figures and full discs, in real processes.

Each failure here was once a real one: a user's folder deleted, a result lost to a
figure, two runs writing one checkpoint, a link followed, a crash on a full disc.
Every test runs the command line in a subprocess and checks the exit status, that
the error is one line naming the folder, file or lock, that no traceback is shown,
and that nothing outside the output folder changed.
"""

import hashlib
import json
import os
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pytest
from astropy.table import Table

from massfit.sample.checkpoint import checkpoint_path, exclusive_run, partial_dir
from conftest import invented_binary, write_one_companion

ROOT = Path(__file__).resolve().parents[1]
TINY = ["--walkers", "16", "--max-steps", "200", "--check-every", "50", "--seed", "5",
        "--quiet"]


def _massfit(*args, cwd, prelude=None):
    """Run ``massfit ARGS`` in a fresh process (``prelude``: Python run first)."""
    env = dict(os.environ, PYTHONPATH=str(ROOT), MPLBACKEND="Agg")
    if prelude is None:
        command = [sys.executable, "-m", "massfit", *map(str, args)]
    else:
        script = (textwrap.dedent(prelude) + "\nimport sys\nfrom massfit.cli.commands import main\n"
                  f"sys.exit(main({[str(a) for a in args]!r}))\n")
        command = [sys.executable, "-c", script]
    return subprocess.run(command, cwd=cwd, env=env, capture_output=True, text=True,
                          timeout=600)


def _tree(folder):
    """Checksums of every file under ``folder`` (links as their targets' names)."""
    out = {}
    for path in sorted(Path(folder).rglob("*")):
        if path.is_symlink():
            out[str(path)] = "-> " + os.readlink(path)
        elif path.is_file():
            out[str(path)] = hashlib.sha256(path.read_bytes()).hexdigest()
        else:
            out[str(path)] = "folder"
    return out


def _one_error_line(run, *names):
    """The run failed with one line that names each of ``names``, and no traceback."""
    lines = [line for line in run.stderr.splitlines() if line.strip()]
    assert "Traceback" not in run.stderr, run.stderr
    assert len(lines) == 1, run.stderr
    for name in names:
        assert str(name) in lines[0], lines[0]
    return lines[0]


@pytest.fixture
def work(tmp_path):
    """A working folder with one small data file, and a folder of the user's."""
    write_one_companion(tmp_path)
    mine = tmp_path / "mine"
    mine.mkdir()
    (mine / "thesis.tex").write_text("three years of work\n")
    return tmp_path


# --------------------------------------------------------------- output folders
@pytest.mark.parametrize("how", ["fit --out", "config folder", "plan --out"])
def test_a_folder_massfit_did_not_write_is_never_touched(work, how):
    before = _tree(work)
    if how == "fit --out":
        run = _massfit("fit", "quill.ecsv", "--out", "mine", *TINY, cwd=work)
    elif how == "config folder":
        configs = work / "configs"
        configs.mkdir()
        (configs / "fit.toml").write_text('[data]\nfiles = ["../quill.ecsv"]\n'
                                          '[output]\nfolder = "../mine"\n')
        before = _tree(work)
        run = _massfit("fit", "configs/fit.toml", *TINY, cwd=work)
    else:
        plan = ROOT / "example_obs" / "plan_wren" / "plan.toml"
        run = _massfit("plan", plan, "--out", "mine", "--force", cwd=work)
    assert run.returncode == 2
    _one_error_line(run, "mine", "not written by massfit")
    assert _tree(work) == before  # refused before any work: nothing made or changed


@pytest.mark.parametrize("out", [".", "..", "quill.ecsv", "quill.ecsv/inside"])
def test_the_working_folder_the_inputs_and_files_are_refused(work, out):
    inside = work / "sub"
    inside.mkdir()
    before = _tree(work)
    run = _massfit("fit", "../quill.ecsv", "--out", out, *TINY, "--force", cwd=inside) \
        if out == ".." else _massfit("fit", "quill.ecsv", "--out", out, *TINY, "--force",
                                     cwd=work)
    assert run.returncode == 2
    _one_error_line(run, f"'{out}'" if "/" not in out else "quill.ecsv")
    assert _tree(work) == before


@pytest.mark.slow  # 15 s; the default run keeps the refusal tests
def test_force_replaces_only_the_files_massfit_wrote(work):
    first = _massfit("fit", "quill.ecsv", "--out", "res", "--no-plots", *TINY, cwd=work)
    assert first.returncode == 3, first.stderr  # 200 steps: not converged
    written = json.loads((work / "res" / "run.json").read_text())["files_written"]
    assert "summary.json" in written and "run.json" in written
    (work / "res" / "notes.txt").write_text("mine")
    (work / "res" / "drafts").mkdir()
    (work / "res" / "drafts" / "a.txt").write_text("also mine")
    summary = (work / "res" / "summary.json").read_bytes()

    again = _massfit("fit", "quill.ecsv", "--out", "res", "--no-plots", *TINY, cwd=work)
    assert again.returncode == 2
    _one_error_line(again, "res", "--force")
    assert (work / "res" / "summary.json").read_bytes() == summary

    forced = _massfit("fit", "quill.ecsv", "--out", "res", "--no-plots", *TINY,
                      "--seed", "6", "--force", cwd=work)
    assert forced.returncode == 3, forced.stderr
    assert (work / "res" / "notes.txt").read_text() == "mine"
    assert (work / "res" / "drafts" / "a.txt").read_text() == "also mine"
    assert (work / "res" / "summary.json").read_bytes() != summary  # the new result
    record = json.loads((work / "res" / "run.json").read_text())
    assert record["seed"] == 6
    assert "notes.txt" not in record["files_written"]
    assert not [p for p in work.iterdir() if p.name.startswith(".res")]  # no twins left


# ------------------------------------------------------------ numbers, figures
@pytest.mark.slow  # 10 s: a whole CLI fit
def test_a_fixed_parallax_keeps_the_result_and_draws_no_panel_for_it(tmp_path):
    from massfit.scenarios.simulate import write_scenario

    table, truth = invented_binary()
    write_scenario(tmp_path, table, truth, name="wren.ecsv")
    run = _massfit("fit", "wren.ecsv", "--parallax", "25 mas", "--out", "res", *TINY,
                   cwd=tmp_path)
    assert run.returncode == 3, run.stderr  # written and flagged, not lost (was 1)
    assert "Traceback" not in run.stderr
    record = json.loads((tmp_path / "res" / "run.json").read_text())
    assert record["figures"]["failed"] == []
    assert "corner" in record["figures"]["written"]
    summary = json.loads((tmp_path / "res" / "summary.json").read_text())
    assert summary["parallax"]["lower_95"] == summary["parallax"]["upper_95"] == 25.0


@pytest.mark.slow  # two whole CLI fits: 10 s each
@pytest.mark.parametrize("broken, kept", [("orbits", "corner"), ("corner", "orbits")])
def test_a_figure_that_fails_is_a_warning_and_the_numbers_are_kept(tmp_path, broken, kept):
    # On two cores the corner is drawn in a second process: a failure there is
    # reported the same way as one here.
    write_one_companion(tmp_path)
    prelude = f"""
        import massfit.plot.figures
        def broken(result, **options):
            raise ValueError("no ink")
        massfit.plot.figures.FIGURES["{broken}"] = broken
    """
    run = _massfit("fit", "quill.ecsv", "--out", "res", *TINY, cwd=tmp_path,
                   prelude=prelude)
    assert run.returncode == 3, run.stderr  # not converged: the figure changes nothing
    warnings = [line for line in run.stderr.splitlines() if "warning" in line]
    assert len(warnings) == 1 and f"'{broken}'" in warnings[0] and "no ink" in warnings[0]
    assert "Traceback" not in run.stderr
    record = json.loads((tmp_path / "res" / "run.json").read_text())
    assert record["figures"]["failed"] == [{"figure": broken,
                                            "error": "ValueError: no ink"}]
    from massfit.plot.figures import FIGURES

    written = record["figures"]["written"]
    assert kept in written and broken not in written
    assert written == sorted(written, key=list(FIGURES).index)  # in the figures' order
    assert (tmp_path / "res" / f"{kept}.png").exists()
    assert not list((tmp_path / "res").glob(f"{broken}.*"))
    assert (tmp_path / "res" / "summary.json").exists()


def test_work_beside_a_forked_process():
    from massfit.write.beside import beside, can_fork

    assert beside(lambda: 6 * 7, lambda: "here") == (42, "here")

    def disc_full():
        raise OSError(28, "No space left on device")

    with pytest.raises(OSError, match="No space left"):
        beside(disc_full, lambda: None)
    if can_fork():
        import os

        with pytest.raises(RuntimeError, match="without a result"):
            beside(lambda: os._exit(5), lambda: None)


# ------------------------------------------------------------------ checkpoint
def test_a_second_run_into_the_same_folder_is_refused_by_the_lock(work):
    before = _tree(work)
    with exclusive_run(work / "res") as lock:  # this process is the running fit
        run = _massfit("fit", "quill.ecsv", "--out", "res", *TINY, cwd=work)
        assert run.returncode == 2
        _one_error_line(run, partial_dir(Path("res")) / "lock", f"process {os.getpid()}")
        assert lock.exists()
    assert _tree(work) == before  # the lock and its folder go with their holder


def test_a_lock_left_by_a_killed_run_is_taken_over(work):
    dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"],
                          capture_output=True, text=True).stdout.strip()
    lock = partial_dir(work / "res") / "lock"
    lock.parent.mkdir()
    lock.write_text(json.dumps({"pid": int(dead), "host": "here",
                                "started_utc": "2026-01-01T00:00:00+00:00"}))
    run = _massfit("fit", "quill.ecsv", "--out", "res", "--no-plots", *TINY, cwd=work)
    assert run.returncode == 3, run.stderr
    named = partial_dir(Path("res")) / "lock"
    assert f"took over the lock '{named}' left by process {dead}" in run.stderr
    assert not lock.parent.exists()


@pytest.mark.parametrize("where", ["partial area", "checkpoint"])
def test_a_planted_link_is_refused_not_followed(work, where):
    victim = work / "victim"
    victim.mkdir()
    (victim / "checkpoint.json").write_text("precious")
    part = partial_dir(work / "res")
    if where == "partial area":
        part.symlink_to(victim, target_is_directory=True)
        named = partial_dir(Path("res"))
    else:
        part.mkdir()
        checkpoint_path(work / "res").symlink_to(victim / "checkpoint.json")
        named = checkpoint_path(Path("res"))
    before = _tree(work)
    run = _massfit("fit", "quill.ecsv", "--out", "res", *TINY, "--force", cwd=work)
    assert run.returncode == 2
    _one_error_line(run, named, "symbolic link")
    assert _tree(work) == before
    assert (victim / "checkpoint.json").read_text() == "precious"


_DISC_FULL_AT_BLOCK = """
    import errno, numpy
    real_savez, calls = numpy.savez, []
    def savez(handle, **arrays):  # the disc fills up part-way through block {n}
        calls.append(1)
        if len(calls) == {n}:
            handle.write(b"PK half a block")
            raise OSError(errno.ENOSPC, "No space left on device")
        real_savez(handle, **arrays)
    numpy.savez = savez
"""
_DISC_FULL_AT_SAVE = """
    import errno, massfit.write.folder
    def full(path, data):
        raise OSError(errno.ENOSPC, "No space left on device", str(path))
    massfit.write.folder.write_json = full
"""


@pytest.mark.slow  # 15 s: two whole CLI fits
def test_a_full_disc_ends_with_one_line_and_resume_continues(work):
    options = ["--out", "res", "--no-plots", *TINY, "--max-steps", "300"]
    whole = _massfit("fit", "quill.ecsv", *options[:1], "whole", *options[2:], cwd=work)
    assert whole.returncode == 3, whole.stderr

    full = _massfit("fit", "quill.ecsv", *options, cwd=work,
                    prelude=_DISC_FULL_AT_BLOCK.format(n=3))
    assert full.returncode == 1
    line = _one_error_line(full, checkpoint_path(Path("res")), "No space left on device",
                           "--resume")
    kept = int(line.split("up to step ")[1].split(":")[0])
    assert kept > 0
    assert not (work / "res").exists()
    assert not list(partial_dir(work / "res").glob(".*tmp"))  # no half block left

    save_full = _massfit("fit", "quill.ecsv", *options, "--resume", cwd=work,
                         prelude=_DISC_FULL_AT_SAVE)
    assert save_full.returncode == 1
    _one_error_line(save_full, "'res'", "No space left on device", "--resume")
    assert not (work / "res").exists()

    resumed = _massfit("fit", "quill.ecsv", *options, "--resume", cwd=work)
    assert resumed.returncode == 3, resumed.stderr
    record = json.loads((work / "res" / "run.json").read_text())
    assert record["resumed_from_step"] >= kept
    read = {name: Table.read(work / name / "samples.ecsv") for name in ("res", "whole")}
    for column in read["whole"].colnames:
        np.testing.assert_array_equal(read["res"][column], read["whole"][column])


# ------------------------------------------------------------------- poor fit
def test_a_poor_fit_has_its_own_exit_status(tmp_path):
    path = write_one_companion(tmp_path)
    table = Table.read(path, format="ascii.ecsv")
    for column in ("east_err", "north_err"):
        table[column] = table[column] / 30  # errors stated 30 times too small
    table.write(path, format="ascii.ecsv", overwrite=True)
    run = _massfit("fit", path.name, "--out", "res", "--no-plots", *TINY, cwd=tmp_path)
    assert run.returncode == 4, run.stderr  # was 0 or 3 with converged: true/false
    assert "POOR" in run.stderr and "Traceback" not in run.stderr
    summary = json.loads((tmp_path / "res" / "summary.json").read_text())
    quality = summary["fit_quality"]
    assert quality["verdict"] == "poor" and quality["p_value"] < 1e-4
    assert quality["per_companion"]["Quill"]["reduced_chi2"] > 100
    assert summary["converged"] is False  # 4 wins over 3


def test_the_verdict_threshold_against_a_chi2_table():
    # chi^2 with 1 degree of freedom exceeds 15.137 with probability 1e-4: the
    # square of the two-sided normal quantile 3.8906 (standard tables; from memory).
    from massfit.summarise.adequacy import fit_quality

    def block(chi2):
        comp = {"chi2": chi2, "n_values": 3, "reduced_chi2": chi2, "p_value": None}
        from scipy.stats import chi2 as dist

        comp["p_value"] = float(dist.sf(chi2, 1))
        return {"companions": {"b": comp},
                "total": dict(comp, n_values=3, n_parameters=2)}

    assert fit_quality(block(15.0))["verdict"] == "good"
    assert fit_quality(block(15.3))["verdict"] == "poor"
    assert fit_quality(block(50.0), tested=False)["verdict"] == "not tested"


def test_a_refused_run_leaves_no_folder_behind(work):
    # The input is refused after the output folder was checked and locked: the lock,
    # its hidden folder and the parent folders made for it all go again.
    (work / "bad.ecsv").write_text("# %ECSV 1.0\nnot a table\n")
    before = _tree(work)
    run = _massfit("fit", "bad.ecsv", "--out", "new/deeper/res", *TINY, cwd=work)
    assert run.returncode == 2
    _one_error_line(run, "bad.ecsv")
    assert _tree(work) == before


def test_a_result_from_before_the_file_list_is_recognised_by_its_names(tmp_path):
    from massfit.errors import ConfigError
    from massfit.write.folder import check_output_folder, massfit_files

    old = tmp_path / "old"
    old.mkdir()
    for name in ("summary.json", "run.json", "samples.ecsv", "corner.png", "notes.txt"):
        (old / name).write_text("{}")
    assert massfit_files(old) == {"summary.json", "run.json", "samples.ecsv",
                                  "corner.png"}
    with pytest.raises(ConfigError, match="--force"):
        check_output_folder(old)
    check_output_folder(old, force=True)
    (old / "run.json").unlink()  # no record: not massfit's, whatever the names
    assert massfit_files(old) is None
    with pytest.raises(ConfigError, match="not written by massfit"):
        check_output_folder(old, force=True)

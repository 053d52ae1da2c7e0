"""The README's quick start as a new user runs it: `massfit demo` leaves the working
folder as it was, and `massfit fit --arviz` writes the posterior for ArviZ."""

import os
import subprocess
import sys
from pathlib import Path

import pytest

from figure_helpers import write_system

ROOT = Path(__file__).resolve().parents[1]


def _run(args, cwd, env_extra=None, timeout=600):
    env = dict(os.environ, MPLBACKEND="Agg", **(env_extra or {}))
    env["PYTHONPATH"] = os.pathsep.join(
        [str(ROOT)] + [p for p in env.get("PYTHONPATH", "").split(os.pathsep) if p])
    return subprocess.run([sys.executable, "-m", "massfit", *args], cwd=cwd, env=env,
                          capture_output=True, text=True, timeout=timeout)


@pytest.mark.slow
def test_demo_writes_into_a_new_temporary_folder_not_the_working_one(tmp_path):
    work, temp = tmp_path / "work", tmp_path / "temp"
    work.mkdir()
    temp.mkdir()
    done = _run(["demo", "--max-steps", "100", "--check-every", "100", "--no-plots",
                 "--quiet"], work, {"TMPDIR": str(temp)})
    assert done.returncode in (0, 3), done.stderr  # 3: a chain this short has not converged
    assert list(work.iterdir()) == []
    (folder,) = [p for p in temp.iterdir() if p.name.startswith("massfit-demo-")]
    assert (folder / "summary.json").is_file()
    assert str(folder) in done.stdout  # the user is told where it went
    # A named folder is still honoured.
    done = _run(["demo", "--max-steps", "100", "--check-every", "100", "--no-plots",
                 "--quiet", "--out", "named"], work, {"TMPDIR": str(temp)})
    assert done.returncode in (0, 3), done.stderr
    assert (work / "named" / "summary.json").is_file()


def _hidden_arviz(folder):
    """A folder that, first on the path, makes `import arviz` fail as if not installed."""
    (folder / "arviz").mkdir(parents=True)
    (folder / "arviz" / "__init__.py").write_text(
        "raise ImportError('arviz is hidden by the test')\n")
    return str(folder)


def test_fit_arviz_without_arviz_is_refused_before_fitting(tmp_path):
    paths = write_system(tmp_path)
    hide = _hidden_arviz(tmp_path / "hide")
    done = _run(["fit", *map(str, paths), "--parallax", "25 mas", "--out", "out",
                 "--arviz"], tmp_path,
                {"PYTHONPATH": hide + os.pathsep + os.environ.get("PYTHONPATH", "")},
                timeout=120)
    assert done.returncode == 2
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and 'pip install "massfit[arviz]"' in lines[0]
    assert "Traceback" not in done.stderr
    assert not (tmp_path / "out").exists()


@pytest.mark.slow
def test_fit_arviz_writes_the_posterior_as_netcdf(tmp_path):
    arviz = pytest.importorskip("arviz")
    paths = write_system(tmp_path)
    done = _run(["fit", *map(str, paths), "--parallax", "25 mas", "--parallax-err",
                 "0.2 mas", "--max-steps", "200", "--check-every", "100", "--no-plots",
                 "--seed", "1", "--arviz", "--out", "out"], tmp_path)
    assert done.returncode in (0, 3), done.stderr
    data = arviz.from_netcdf(tmp_path / "out" / "posterior.nc")
    assert data.posterior["central_mass"].attrs["units"] == "kg"
    assert set(data.posterior["period"].coords["companion"].values) == {"Aster", "Brel"}

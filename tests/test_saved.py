"""A saved output folder read back without refitting, and redrawn from the command line."""

import json

import numpy as np
import pytest

import massfit
from massfit.cli.commands import main
from massfit.errors import InputError


@pytest.fixture(scope="module")
def saved(tmp_path_factory):
    from figure_helpers import small_result

    result = small_result()
    folder = tmp_path_factory.mktemp("saved") / "out"
    result.save(folder, plots=False)
    return result, folder


def test_load_result_rebuilds_the_model_and_keeps_the_numbers(saved):
    original, folder = saved
    back = massfit.load_result(folder)
    assert back.summary == json.loads((folder / "summary.json").read_text())
    assert np.array_equal(back.chain.samples, original.chain.samples)
    assert back.model.names == original.model.names
    # The rebuilt model gives the saved posterior densities back (same data, priors
    # and angle windows).
    lp = back.model.log_prob(back.chain.samples[:200])
    assert np.allclose(lp, original.chain.log_prob[:200], rtol=0, atol=1e-8)
    for name in ("Aster", "Brel"):
        for key, values in original.samples["companions"][name].items():
            assert np.array_equal(back.samples["companions"][name][key], values)
    for key in ("central_mass", "central_gm", "parallax"):
        assert np.array_equal(back.samples[key], original.samples[key])
    assert set(back.samples) == set(original.samples)
    assert back.report() == original.report()


def test_folder_holds_the_validated_observations(saved):
    _, folder = saved
    record = json.loads((folder / "run.json").read_text())
    state = record["model"]
    assert state["parameter_names"][0] == "central.log10_mass"
    assert state["system"]["parallax"]["prior"] == "Normal"
    assert (folder / "observations.ecsv").exists()


def test_redraw_command_writes_the_chosen_figures(saved, tmp_path):
    _, folder = saved
    status = main(["redraw", str(folder), "--figures", "orbits,residuals",
                   "--formats", "svg,png", "--to", str(tmp_path)])
    assert status == 0
    names = sorted(p.name for p in tmp_path.iterdir())
    assert names == sorted(["orbits.svg", "orbits.png", "residuals.svg", "residuals.png",
                            "parameters.tex", "parameters.md", "parameters.ecsv"])
    assert (tmp_path / "orbits.svg").read_text().lstrip().startswith("<?xml")


@pytest.mark.slow  # 7 s of drawing
def test_redraw_by_default_draws_the_figures_the_fit_writes(saved, tmp_path):
    # Not every registered figure: none the data cannot fill (velocity figures for an
    # astrometric fit) and not the full corner, which is drawn only on request.
    from massfit.plot.figures import applicable_figures

    result, folder = saved
    assert main(["redraw", str(folder), "--formats", "png", "--to", str(tmp_path),
                 "--no-tables"]) == 0
    drawn = sorted(p.stem for p in tmp_path.iterdir())
    assert drawn == sorted(applicable_figures(result))
    assert "corner_full" not in drawn and "rv" not in drawn


@pytest.mark.parametrize("args, needle", [
    (["--figures", "orbit"], "--figures"),
    (["--formats", "docx"], "--formats"),
])
def test_redraw_refuses_bad_options(saved, args, needle, capsys):
    _, folder = saved
    assert main(["redraw", str(folder), *args]) == 2
    assert needle in capsys.readouterr().err


def test_redraw_needs_a_result_folder(tmp_path, capsys):
    assert main(["redraw", str(tmp_path)]) == 2
    assert "summary.json" in capsys.readouterr().err
    (tmp_path / "summary.json").write_text("{}")
    (tmp_path / "run.json").write_text("{}")
    with pytest.raises(InputError, match="no 'model' block"):
        massfit.load_result(tmp_path)


def test_html_summary_is_a_table(saved):
    original, _ = saved
    html = original._repr_html_()
    assert html.count("<table>") == 1 and "</table>" in html
    assert "Companion Aster" in html and "Companion Brel" in html
    assert "NOT converged" in html  # the fixture's short chain did not converge
    period = original.summary["companions"]["Aster"]["period"]
    from massfit.write.tables import round_interval

    assert round_interval(period).html() in html


def test_fit_command_writes_figures_unless_told_not_to(binary_file, tmp_path, monkeypatch):
    # The drawing itself is tested elsewhere; here only that `massfit fit` asks for
    # every figure by default and for none with --no-plots.
    from massfit.result.fit_result import FitResult

    calls = []
    monkeypatch.setattr(FitResult, "write_figures",
                        lambda self, folder, **kw: calls.append((folder, kw)) or [])
    # All in this process (a forked one's calls would not reach this list).
    monkeypatch.setattr("massfit.write.beside.can_fork", lambda: False)
    path, _ = binary_file
    common = ["fit", str(path), "--parallax", "25 mas", "--parallax-err", "0.25 mas",
              "--max-steps", "200", "--quiet"]
    assert main(common + ["--out", str(tmp_path / "a")]) in (0, 3)
    # One figure at a time, so that one that fails costs no other (see FitResult.save).
    asked = [stem for _, kw in calls for stem in kw["figures"]]
    assert asked == ["corner", "orbits", "residuals", "periodogram"]  # all that apply
    n_calls = len(calls)
    assert main(common + ["--out", str(tmp_path / "b"), "--no-plots"]) in (0, 3)
    assert len(calls) == n_calls
    # The tables are written either way.
    assert (tmp_path / "b" / "parameters.tex").exists()


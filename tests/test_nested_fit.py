"""End to end with the nested engine (slow): ``massfit fit --sampler nested`` and
``massfit compare`` on an invented, well-sampled orbit.

The truth is known (the simulated elements); the compare check pits the true model
(free eccentricity) against one that cannot hold it (a circular orbit, e = 0.3 true):
the evidence must favour the true one strongly (Kass & Raftery 1995's scale, from
memory: ln B > 5 very strong), and the averaged mass must stay that of the true model.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import astropy.units as u
import numpy as np
import pytest
from astropy.time import Time

import massfit
from massfit.compare import compare_models
from massfit.sample.nested import NestedSettings
from massfit.scenarios.simulate import Elements, simulate_astrometry

pytestmark = pytest.mark.slow

TRUE_MASS = 0.8


@pytest.fixture(scope="module")
def orbit_file(tmp_path_factory):
    rng = np.random.default_rng(5)
    t = 2458000.0 + np.sort(rng.uniform(0.0, 1500.0, 18))
    elements = {"Brin": Elements(period=600.0, ecc=0.3, inc=50.0, omega=70.0, node=120.0,
                                 periapsis_time=2458100.0)}
    table = simulate_astrometry({"Brin": Time(t, format="jd", scale="tdb")}, elements,
                                TRUE_MASS, parallax=40 * u.mas, error=1.0 * u.mas, seed=3)
    path = tmp_path_factory.mktemp("brin") / "brin.ecsv"
    table.write(path, format="ascii.ecsv")
    return path


def test_cli_fit_with_the_nested_sampler(orbit_file, tmp_path):
    out = tmp_path / "out"
    proc = subprocess.run([sys.executable, "-m", "massfit", "fit", str(orbit_file),
                           "--parallax", "40 mas", "--out", str(out), "--seed", "2",
                           "--sampler", "nested", "--live-points", "60", "--no-plots",
                           "--quiet"], capture_output=True, text=True, timeout=1800)
    assert proc.returncode == 0, proc.stderr
    summary = json.loads((out / "summary.json").read_text())
    assert summary["sampler"]["engine"] == "nested" and summary["converged"] is True
    assert np.isfinite(summary["evidence"]["log_evidence"])
    assert 0 < summary["evidence"]["log_evidence_err"] < 1
    mass = summary["central_mass_solar"]
    assert mass["lower_95"] < TRUE_MASS < mass["upper_95"]
    assert "ln evidence" in proc.stdout
    # The summary keys DEVELOPERS.md documents ("Evidence and weighed modes").
    assert {"engine", "library", "sampler", "sample", "live_points", "runs_per_box",
            "dlogz", "boxes", "likelihood_calls", "convergence_basis"} <= set(
        summary["sampler"])
    assert {"log_evidence", "log_evidence_err", "laplace_log_evidence",
            "start_log_likelihood", "best_log_likelihood", "peak_reached",
            "unit"} <= set(summary["evidence"])
    (mode,) = summary["weighed_modes"]  # one solution: one box, all the probability
    assert {"probability", "probability_err", "probability_runs", "log_z", "log_z_err",
            "log_z_runs", "log_z_err_runs", "runs_agree", "period_boxes_days", "draws",
            "central_mass_solar", "period"} <= set(mode)
    assert mode["probability"] == 1.0 and mode["runs_agree"] is True
    # A two-body fit compared with nothing: the measure is named as absent.
    assert "comparison_measure" in summary["adequacy"]
    assert summary["adequacy"]["comparison_measure"] is None


def test_compare_favours_the_true_model(orbit_file):
    obs = massfit.read_observations(orbit_file)
    circular = massfit.SystemSpec(parallax=massfit.Fixed(40.0), companions={
        "Brin": massfit.CompanionSpec(name="Brin", eccentricity=massfit.Fixed(0.0))})
    cmp = compare_models(obs, {"eccentric": massfit.SystemSpec(parallax=massfit.Fixed(40.0)),
                               "circular": circular},
                         nested=NestedSettings(live_points=60, runs=1), seed=4)
    models = cmp.summary["models"]
    assert cmp.summary["best"] == "eccentric"
    assert models["circular"]["log_bayes_factor"] < -5
    assert models["circular"]["evidence_against_it"] == "very strong"
    avg = cmp.summary["central_mass_solar_averaged"]
    assert avg["lower_95"] < TRUE_MASS < avg["upper_95"]
    # The same verdict from the residuals alone: the circular orbit fits poorly, the
    # eccentric one well.
    assert models["circular"]["fit_quality"] == "poor"
    assert models["eccentric"]["fit_quality"] == "good"


def test_bayes_factor_of_j2_on_simulated_moons(tmp_path):
    """ln B(J2 : two-body) on a moon integrated in a J2 field (favours J2) and on the
    same moon without J2 (does not), as validation/evidence_models.py on a small scale:
    the data are integrated with the full J2 acceleration, not the secular model that is
    fitted. The J2 model's ln Z must also agree with the Laplace estimate about its
    least-squares solution (a near-Gaussian posterior; within 3, a generous bound)."""
    sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "validation"))
    from evidence_models import J2, RADIUS, moon_table

    from massfit import LogUniform, Oblate

    priors = dict(central_mass=LogUniform(1e-4, 1e-3), companions={
        "moon": massfit.CompanionSpec(name="moon", period=LogUniform(0.15, 1.5))})
    found = {}
    for truth, j2 in (("j2", J2), ("two-body", 0.0)):
        obs = moon_table(tmp_path / f"{truth}.ecsv", j2, 1, 30, 40.0)
        cmp = compare_models(obs, {
            "j2": massfit.SystemSpec(dynamics=Oblate(J2, f"{RADIUS} km"), **priors),
            "two-body": massfit.SystemSpec(**priors)},
            nested=NestedSettings(live_points=40, runs=1), seed=2)
        models = cmp.summary["models"]
        found[truth] = models["j2"]["log_evidence"] - models["two-body"]["log_evidence"]
        assert cmp.summary["all_converged"], truth
        evidence = cmp.results["j2"].summary["evidence"]
        if truth == "j2":
            assert abs(evidence["log_evidence"] - evidence["laplace_log_evidence"]) < 3.0
            assert "ln B" in " ".join(models["j2"]["adequacy_verdicts"])
    assert found["j2"] > 5.0  # "very strong" on Kass & Raftery's scale
    assert found["two-body"] < 0.0


def test_bayes_factor_of_an_extra_companion(tmp_path):
    """ln B(two companions : one) on a star's velocities with two companions (favours
    two) and with the inner one alone (does not favour the extra one), as
    validation/evidence_companions.py on a small scale (one seed, fewer live points).
    The truth is the simulated companions; the scale is Kass & Raftery 1995's (from
    memory: ln B > 5 very strong). The comparison's files and each model's summary keep
    the documented keys (DEVELOPERS.md, "Evidence and weighed modes")."""
    sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "validation"))
    from evidence_companions import bayes_factor, models, star_table

    from massfit.summarise.adequacy import MEASURE_EVIDENCE

    found = {}
    for n in (2, 1):
        obs = star_table(tmp_path / f"star_{n}.ecsv", n, 1)
        cmp = compare_models(obs, models(), nested=NestedSettings(live_points=40, runs=1),
                             seed=1)
        found[n] = bayes_factor(cmp)
        summary = cmp.results["two"].summary
        assert summary["adequacy"]["comparison_measure"] == MEASURE_EVIDENCE
        assert set(summary["adequacy"]["evidence"]["against"]["one"]) >= {
            "log_bayes_factor", "log_bayes_factor_err", "favours", "strength", "measured"}
        assert {"log_evidence", "log_evidence_err", "laplace_log_evidence",
                "peak_reached"} <= set(summary["evidence"])
        assert len(summary["weighed_modes"]) >= 1
    log_b, err = found[2]
    assert log_b > 5.0 + 3 * err, found  # very strong for the true two companions
    log_b, err = found[1]
    assert log_b < 3 * err, found  # the extra companion not favoured beyond its error
    cmp.save(tmp_path / "cmp")
    saved = json.loads((tmp_path / "cmp" / "comparison.json").read_text())
    assert {"models", "best", "central_mass_solar_averaged", "all_converged", "basis",
            "files_written"} <= set(saved)
    assert {"log_evidence", "log_evidence_err", "log_bayes_factor", "log_bayes_factor_err",
            "probability", "probability_err", "evidence_against_it"} <= set(
        saved["models"]["one"])

"""What a user reads when modes were weighed (text report, tables) and the adequacy
block judged by the evidence.

The modes are made from samples of known truth: two separated Gaussian groups in
log10 P and log10 M with set shares (85 / 15 %), so each mode's median must be its
group's centre and the probabilities the ones given; the report must not give the one
interval of the mixture for the period as if it were one solution (the negative
control: the mixture's 68 % interval, which holds one mode only).
"""

from __future__ import annotations

import copy

import numpy as np
import pytest

from massfit.summarise.adequacy import MEASURE_BIC, MEASURE_EVIDENCE, report_lines, \
    with_evidence
from massfit.summarise.derived import interval
from massfit.summarise.mode_text import weighed_modes
from massfit.write.tables import ecsv_table, latex_table, markdown_table, parameter_rows

MODES = ({"period": 300.0, "mass": 1.2, "share": 0.85},
         {"period": 1800.0, "mass": 0.04, "share": 0.15})


def _mode_summary(summary, name):
    """``summary`` with two weighed modes of companion ``name`` (samples of known truth)."""
    rng = np.random.default_rng(1)
    periods, masses, blocks = [], [], []
    for k, mode in enumerate(MODES):
        n = int(20000 * mode["share"])
        p = mode["period"] * 10 ** rng.normal(0.0, 0.002, n)
        m = mode["mass"] * 10 ** rng.normal(0.0, 0.02, n)
        periods.append(p)
        masses.append(m)
        blocks.append({"probability": mode["share"], "probability_err": 0.03,
                       "probability_runs": [mode["share"]] * 2,
                       "central_mass_solar": interval(m, "M_sun"),
                       "period": {name: interval(p, "d")}})
    out = copy.deepcopy(summary)
    out["weighed_modes"] = blocks[::-1]  # least probable first: the report sorts them
    out["central_mass_solar"] = interval(np.concatenate(masses), "M_sun")
    out["companions"][name]["period"] = interval(np.concatenate(periods), "d")
    out["sampler"] = {"library": "dynesty", "sampler": "static", "sample": "rslice",
                      "live_points": 100, "runs_per_box": 2, "boxes": 2,
                      "likelihood_calls": 1}
    out["evidence"] = {"log_evidence": -10.0, "log_evidence_err": 0.2,
                       "laplace_log_evidence": -10.3}
    return out


@pytest.fixture(scope="module")
def result():
    from figure_helpers import small_result

    base = small_result()
    name = next(iter(base.summary["companions"]))
    weighed = copy.copy(base)
    weighed.summary = _mode_summary(base.summary, name)
    return weighed, name


def test_report_gives_each_mode(result):
    weighed, name = result
    text = weighed.report()
    assert [m["probability"] for m in weighed_modes(weighed.summary)] == [0.85, 0.15]
    block = text.split(f"Companion {name}")[1].split("\nCompanion ")[0]
    # Each mode's probability and median period; the medians are the groups' centres.
    assert "2 separated modes" in block
    for mode in MODES:
        assert f"{mode['share']:.2f} +/- 0.03" in block
    lines = block.splitlines()
    first = next(line for line in lines if line.strip().startswith("0.85"))
    second = next(line for line in lines if line.strip().startswith("0.15"))
    assert float(first.split()[3]) == pytest.approx(300.0, rel=2e-3)
    assert float(second.split()[3]) == pytest.approx(1800.0, rel=2e-3)
    # Negative control: the mixture's own 68 % interval (one mode only) is not printed
    # as the period.
    mixture = weighed.summary["companions"][name]["period"]
    assert mixture["upper_68"] < 1000.0  # the 85 % mode alone
    from massfit.summarise.rounding import format_interval

    assert format_interval(mixture) not in block
    # The central mass: the value over all modes, then each mode's.
    central = text.split(f"Companion {name}")[0]
    assert "over all 2 separated modes" in central
    assert "1.20" in central and "0.040" in central
    # The sampler block with the Laplace check.
    assert "Laplace estimate about the start's solution: -10.300" in text


def test_tables_give_each_mode(result):
    weighed, name = result
    rows = parameter_rows(weighed.summary)
    names = [row.name for row in rows]
    assert "period, over all modes" in names
    modes = [row for row in rows if "mode 1 of 2" in row.name or "mode 2 of 2" in row.name]
    assert len(modes) == 4  # the central mass and the period, per mode
    assert "central mass, mode 1 of 2, p = 0.85 +/- 0.03" in names
    table = ecsv_table(weighed.summary)
    row = table[table["parameter"] == "period.mode_2"][0]
    assert row["median"] == pytest.approx(1800.0, rel=2e-3)
    assert row["mode_probability"] == pytest.approx(0.15)
    assert "period, mode 2 of 2" in markdown_table(weighed.summary)
    assert "mode 1 of 2" in latex_table(weighed.summary)
    # Negative control: an ordinary summary's tables have no mode rows or columns.
    plain = ecsv_table(result[0].summary | {"weighed_modes": []})
    assert "mode_probability" not in plain.colnames


def _block(model="oblate"):
    return {"dynamics": {"model": model}, "companions": {}, "verdicts": [],
            "comparison": {"perturbed": {"model": model, "chi2": 80.0},
                           "keplerian": {"chi2": 90.0}, "delta_aic": 10.0,
                           "delta_bic": 10.0, "preferred": "neither decisively"},
            "comparison_measure": MEASURE_BIC}


def test_adequacy_uses_the_evidence_and_says_so():
    models = {"j2": {"log_evidence": 1014.4, "log_evidence_err": 0.7, "converged": True},
              "two-body": {"log_evidence": 1010.0, "log_evidence_err": 0.7,
                           "converged": True}}
    judged = with_evidence(_block(), "j2", models)
    assert judged["comparison_measure"] == MEASURE_EVIDENCE
    (verdict,) = [v for v in judged["verdicts"] if "ln B" in v]
    # ln B = 4.4: "strong" on Kass & Raftery's scale (ln B 3-5; from memory).
    assert "ln B = 4.4 +/- 1.0" in verdict and "strong for j2" in verdict
    assert not any("delta BIC" in v for v in judged["verdicts"])
    assert "models compared by: Bayes factors" in "\n".join(report_lines(judged))
    # The other way round, and a fit that did not converge is named as such.
    models["two-body"]["converged"] = False
    other = with_evidence(_block("keplerian"), "two-body", models)
    (verdict,) = [v for v in other["verdicts"] if "ln B" in v]
    assert "ln B = -4.4" in verdict and "for j2" in verdict and "not measured" in verdict
    # Without the evidence the block rests on delta BIC, and says so.
    assert "models compared by: delta BIC" in "\n".join(report_lines(_block()))


def test_mirror_images_are_told_apart_by_their_node(result):
    """Two mirror images have the same period: the report adds each one's node."""
    from massfit.summarise.mode_text import central_mode_lines, period_mode_lines

    weighed, name = result
    summary = copy.deepcopy(weighed.summary)
    for mode, node in zip(summary["weighed_modes"], (121.0, 301.0)):
        mode["period"][name] = dict(summary["weighed_modes"][0]["period"][name])
        mode["node_half_centre_deg"] = {name: node}
        mode["ascending_node"] = {name: {"unit": "deg", "median": node, "lower_68": node - 3,
                                         "upper_68": node + 3, "lower_95": node - 6,
                                         "upper_95": node + 6}}
    lines = period_mode_lines(summary, name)
    assert "Omega" in lines[1] and "301.0 +/- 3.0 deg" in "\n".join(lines)
    assert "Omega(" in "\n".join(central_mode_lines(summary, "Msun"))


def test_an_emcee_fit_names_no_comparison_and_no_evidence():
    """A real fit's summary (the shared two-companion emcee fit of figure_helpers) has
    the adequacy block's ``comparison_measure``: null for a two-body model compared with
    nothing, the delta-BIC text once a comparison is there; and none of the nested
    engine's keys (``weighed_modes``, ``evidence``, ``sampler``), which only a nested
    fit writes (DEVELOPERS.md, "Evidence and weighed modes")."""
    from figure_helpers import small_result

    summary = small_result().summary
    assert "comparison_measure" in summary["adequacy"]
    assert summary["adequacy"]["comparison"] is None
    assert summary["adequacy"]["comparison_measure"] is None
    assert not {"weighed_modes", "evidence", "sampler"} & set(summary)
    # Judged by the evidence, the same block names the Bayes factors instead.
    models = {"a": {"log_evidence": 1.0, "log_evidence_err": 0.1, "converged": True},
              "b": {"log_evidence": 0.0, "log_evidence_err": 0.1, "converged": True}}
    assert with_evidence(summary["adequacy"], "a", models)["comparison_measure"] == \
        MEASURE_EVIDENCE

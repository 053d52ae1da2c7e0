"""Is a two-body model enough? Residual checks and a model comparison.

For the best posterior sample of a fit:

* chi^2 of each companion's astrometry, its reduced value (over the values left after
  that companion's own parameters) and the chance of a chi^2 at least that large if the
  model and the errors were right;
* the highest peak of a Lomb-Scargle periodogram of each companion's whitened
  residuals (astropy), with its false-alarm probability (Baluev's bound). A
  significant peak at the orbital period or a harmonic is the mark of an orbit that
  turns (precession) or is pulled by a neighbour;
* where the fit used a perturbed model (J2 or N-body), the two-body model fitted to the
  same data by least squares from the same solution, and the two compared by chi^2,
  AIC and BIC. With the same parameters in both (J2 is fixed; N-body masses are
  parameters in both) the information criteria differ by delta chi^2 alone.

Rules of thumb (common practice): reduced chi^2 well above 1, or a false-alarm
probability below 1e-3, says the model misses something; delta BIC above 10 is strong
evidence for the model with the lower BIC.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from massfit.model.fit_quality import POOR_FIT_P_VALUE, chi2_block
from massfit.summarise.dark_mass import relativity_adequacy, relativity_lines
from massfit.summarise.residuals import peak_text

__all__ = ["assess", "report_lines", "panels", "chi2_text", "fit_quality", "fitted_jitter",
           "quality_warnings", "with_evidence", "evidence_words", "FAP_THRESHOLD",
           "POOR_FIT_P_VALUE", "KASS_RAFTERY", "MEASURE_BIC", "MEASURE_EVIDENCE"]

#: False-alarm probability below which a residual peak is called significant.
FAP_THRESHOLD = 1e-3
#: ln B thresholds and their words (Kass & Raftery 1995, *J. Am. Stat. Assoc.* 90, 773,
#: their scale from memory: ln B above 1 positive, above 3 strong, above 5 very strong).
KASS_RAFTERY = ((5.0, "very strong"), (3.0, "strong"), (1.0, "positive"),
                (0.0, "not worth more than a bare mention"))
#: What the adequacy block's model comparison rests on: the least-squares fits'
#: information criterion...
MEASURE_BIC = ("delta BIC of the least-squares fits (chi^2 + k ln n; |delta BIC| > 10 "
               "decisive, common practice)")
#: ...or, where the models were compared by their evidence (massfit compare), the
#: Bayes factors.
MEASURE_EVIDENCE = ("Bayes factors from each model's evidence (nested sampling, massfit "
                    "compare; Kass & Raftery's scale)")


def evidence_words(log_b) -> str:
    """Kass & Raftery's words for ln B (of the better model over the other, >= 0)."""
    return next(words for limit, words in KASS_RAFTERY if log_b >= limit)


def assess(model, theta, *, periods=None, compare=None) -> dict:
    """The adequacy block of the summary for the solution ``theta``.

    Parameters
    ----------
    model : OrbitModel
    theta : ndarray, shape (n_dim,)
        The solution to judge (the best posterior sample).
    periods : dict, optional
        Each companion's orbital period (d) that bounds the residual periodogram's
        search (the summary's medians, as the figures use); by default ``theta``'s.
    compare : bool, optional
        Fit and compare the two-body model where ``model`` is perturbed; defaults to
        the model's ``spec.compare_keplerian``.

    Returns
    -------
    dict
        ``dynamics`` (the model's settings), ``companions`` (name -> ``chi2``,
        ``n_values``, ``n_own_parameters``, ``reduced_chi2``, ``p_value``,
        ``periodogram``), ``velocities`` (where there are radial velocities: the same
        with the jitter in the errors and no p-value), ``total`` (the astrometry) and
        ``comparison`` (None for a two-body fit).
    """
    from massfit.summarise.residuals import model_residuals

    theta = np.asarray(theta, dtype=float)
    res = model.residuals(theta[None, :])[0]
    if periods is None:
        phys = model.physical(theta[None, :])["companions"]
        periods = {name: float(orbit["period"][0]) for name, orbit in phys.items()}
    sky = model_residuals(model, theta) if model.rows else {}
    out = {"dynamics": model.dynamics.describe(),
           "romer_delay": bool(getattr(model.spec, "romer_delay", False)),
           "relativity": relativity_adequacy(model, theta),
           "companions": {}}
    start = 0
    chi2_astrometry, n_astrometry = 0.0, 0
    for name, rows in model.rows.items():
        n_values = 2 * rows.t.size
        part = res[start:start + n_values]
        start += n_values
        own = sum(1 for p in model.names if p.startswith(f"{name}."))
        chi2 = float(part @ part)
        chi2_astrometry += chi2
        n_astrometry += n_values
        out["companions"][name] = {
            **chi2_block(chi2, n_values, own),
            "n_own_parameters": own,
            "periodogram": _peak(sky[name], periods.get(name)),
        }
    if model.has_velocities:
        out["velocities"] = _velocity_block(model, theta)
        if not fitted_jitter(model):
            # Jitter fixed: the velocities test the fit with their stated errors too.
            chi2_astrometry += out["velocities"]["chi2"]
            n_astrometry += out["velocities"]["n_values"]
    out["total"] = chi2_block(chi2_astrometry, n_astrometry, model.n_dim)
    out["total"]["n_parameters"] = model.n_dim
    if compare is None:
        compare = bool(getattr(model.spec, "compare_keplerian", True))
    perturbed = model.dynamics.label != "keplerian"
    out["comparison"] = _compare(model, theta) if perturbed and compare else None
    out["comparison_measure"] = MEASURE_BIC if out["comparison"] else None
    out["verdicts"] = _verdicts(out)
    return out


def with_evidence(block, label, models) -> dict:
    """The adequacy block of model ``label`` judged by the evidence of the models
    compared with it.

    Parameters
    ----------
    block : dict
        The model's adequacy block (:func:`assess`).
    label : str
    models : dict
        Label -> ``log_evidence``, ``log_evidence_err``, ``converged`` (the models of
        :class:`massfit.compare.Comparison`).

    Returns
    -------
    dict
        The block with ``evidence`` (per other model: ln B of this model over it with
        its error, and the words of Kass & Raftery's scale for the better one),
        ``comparison_measure`` :data:`MEASURE_EVIDENCE`, and its verdicts remade on
        the Bayes factors (the delta BIC, if any, kept but no longer the verdict).
    """
    own = models[label]
    others = {}
    for other, m in models.items():
        if other == label:
            continue
        log_b = own["log_evidence"] - m["log_evidence"]
        others[other] = {"log_bayes_factor": float(log_b),
                         "log_bayes_factor_err": float(np.hypot(own["log_evidence_err"],
                                                                m["log_evidence_err"])),
                         "favours": label if log_b >= 0 else other,
                         "strength": evidence_words(abs(log_b)),
                         "measured": bool(own["converged"] and m["converged"])}
    out = dict(block, evidence={"model": label, "against": others},
               comparison_measure=MEASURE_EVIDENCE)
    out["verdicts"] = _verdicts(out)
    return out


def _evidence_verdicts(evidence) -> list:
    out = []
    for other, b in evidence["against"].items():
        text = (f"{evidence['model']} vs {other}: ln B = {b['log_bayes_factor']:.1f} +/- "
                f"{b['log_bayes_factor_err']:.1f} (the evidence, nested sampling): "
                f"{b['strength']} for {b['favours']}")
        if not b["measured"]:
            text += " - but a nested fit did not converge, so this is not measured"
        out.append(text)
    return out


def _peak(residuals, orbital_period):
    """The residual periodogram's strongest peak, as the figures draw it.

    One periodogram for the terminal, summary.json and the figures:
    :func:`massfit.summarise.residuals.residual_periodogram` on the same residuals with
    the same orbital period (the summary's median) gives the same peak and
    false-alarm probability everywhere.
    """
    from massfit.summarise.residuals import residual_periodogram

    pgram = residual_periodogram(residuals, orbital_period=orbital_period)
    if pgram is None:
        return None
    frequency = pgram["frequency"]
    out = {"peak_period": float(pgram["best_period"]), "peak_power": pgram["best_power"],
           "false_alarm_probability": pgram["fap"],
           "searched_periods": [float(1.0 / frequency[-1]), float(1.0 / frequency[0])],
           "rows_searched": pgram["values"]}
    if orbital_period:
        out["peak_over_orbital_period"] = out["peak_period"] / orbital_period
    return out


def fitted_jitter(model) -> bool:
    """True where a velocity jitter is a sampled parameter (it absorbs any misfit)."""
    return any(p.startswith("rv.") and "jitter" in p.rsplit(".", 1)[-1]
               for p in model.names)


def _velocity_block(model, theta):
    """chi^2 of the radial velocities (the jitter in their errors) and their residual
    periodogram; a fitted jitter absorbs misfit, so then no p-value is given."""
    from massfit.summarise.residuals import model_velocity_residuals

    res = model_velocity_residuals(model, theta)
    own = sum(1 for p in model.names if p.startswith("rv."))
    block = chi2_block(res.chi2, res.normalised.size, own)
    note = "the jitter is fixed: chi^2 tests the velocities with their stated errors"
    if fitted_jitter(model):
        block["p_value"] = None
        note = "the fitted jitter is in the errors: chi^2 is no test of the fit"
    return {**block, "n_own_parameters": own, "note": note,
            "periodogram": _peak(res, None)}


def _compare(model, theta):
    """Least-squares chi^2 of the perturbed and of the two-body model, side by side."""
    from massfit.orbits.dynamics import Keplerian
    from massfit.errors import MassfitError
    from massfit.model.orbit_model import OrbitModel

    spec = replace(model.spec, dynamics=Keplerian(), companions=dict(model.companions),
                   strict_companions=True)
    try:
        kepler_model = OrbitModel(model.observations, spec)
    except MassfitError as exc:  # the data may not suit the two-body model: say so
        return {"error": f"the two-body model could not be set up: {exc}"}
    kepler_model.node_width = dict(model.node_width)
    kepler_model.centres = {k: dict(v) for k, v in model.centres.items()}
    if kepler_model.names != model.names:
        return {"error": "the two models sample different parameters; not compared"}
    n_values = int(sum(2 * rows.t.size for rows in model.rows.values()))
    chi2 = {"perturbed": _least_squares_chi2(model, theta),
            "keplerian": _least_squares_chi2(kepler_model, theta)}
    # The two-body model also gets its own start: from the perturbed solution alone
    # its least squares can stall (a J2 model's anomalistic period is not the rate a
    # two-body ellipse needs, and over a long baseline the phases drift apart).
    # Its least squares re-centres the angle windows, so it runs after the first chi^2.
    try:
        from massfit.start.least_squares import solve_least_squares
        from massfit.start.search import two_body_start

        _, _, values = two_body_start(model)
        # Its companions' masses are zero; give them the perturbed solution's (the
        # two-body model samples them too), keeping each orbit's M1 + m_k.
        phys = model.physical(np.asarray(theta, dtype=float)[None, :])
        for name in model.companions:
            mass = float(phys["companions"][name]["mass"][0])
            values[name] = dict(values[name], mass=mass)
        shared = np.mean([float(phys["companions"][n]["mass"][0]) for n in model.companions])
        values["central_mass"] = max(values["central_mass"] - shared, 1e-30)
        own = solve_least_squares(kepler_model, values)
        if own is not None:
            chi2["keplerian"] = min(chi2["keplerian"],
                                    _least_squares_chi2(kepler_model, own))
    except MassfitError:
        pass  # the least squares from the perturbed solution still bounds the chi^2
    rows = {}
    for label, which in (("perturbed", model), ("keplerian", kepler_model)):
        k = which.n_dim
        rows[label] = {"model": which.dynamics.label, "chi2": chi2[label],
                       "n_parameters": k, "aic": float(chi2[label] + 2 * k),
                       "bic": float(chi2[label] + k * np.log(n_values))}
    delta_bic = rows["keplerian"]["bic"] - rows["perturbed"]["bic"]
    rows["n_values"] = n_values
    rows["delta_chi2"] = rows["keplerian"]["chi2"] - rows["perturbed"]["chi2"]
    rows["delta_aic"] = rows["keplerian"]["aic"] - rows["perturbed"]["aic"]
    rows["delta_bic"] = delta_bic
    rows["preferred"] = ("perturbed" if delta_bic > 10 else
                         "keplerian" if delta_bic < -10 else "neither decisively")
    return rows


def _least_squares_chi2(model, theta):
    if getattr(model.dynamics, "start_evaluations", None):
        # An integrated model: least squares through its linearised departure from
        # two-body orbits (massfit/start/linearised.py), a few integrations a round
        # rather than one per coordinate an iteration (minutes on four moons).
        from massfit.start.linearised import linearised_least_squares

        return float(linearised_least_squares(model, np.asarray(theta, dtype=float))[1])
    from scipy.optimize import least_squares

    from massfit.start.least_squares import parameter_bounds, residual_function

    fun = residual_function(model)
    low, high = parameter_bounds(model)
    width = np.where(np.isfinite(high - low), high - low, 1.0)
    x0 = np.clip(theta, low + 1e-9 * width, high - 1e-9 * width)
    best = float(np.sum(fun(x0) ** 2))
    try:
        fit = least_squares(fun, x0, bounds=(low, high), method="trf", x_scale="jac",
                            max_nfev=100 * model.n_dim)
        best = min(best, float(np.sum(fit.fun ** 2)))
    except (ValueError, np.linalg.LinAlgError):
        pass  # keep the chi^2 at the starting solution, which is still an upper bound
    return best


def _verdicts(block):
    out = []
    for name, comp in panels(block).items():
        peak = comp["periodogram"]
        red = comp["reduced_chi2"]
        if red is not None and comp["p_value"] is not None and comp["p_value"] < 1e-3:
            out.append(f"{name}: reduced chi2 {red:.2f} (p = {comp['p_value']:.1e}): the "
                       f"model or the errors miss something")
        if peak is not None and peak["false_alarm_probability"] < FAP_THRESHOLD:
            ratio = peak.get("peak_over_orbital_period")
            where = "" if ratio is None else f" ({ratio:.3g} x the orbital period)"
            out.append(f"{name}: residual {peak_text(peak)}{where}: a signal the model "
                       f"left unexplained")
    comparison = block["comparison"]
    if comparison and "delta_bic" in comparison and not block.get("evidence"):
        out.append(f"{block['dynamics']['model']} vs two-body: delta BIC = "
                   f"{comparison['delta_bic']:.1f} (positive favours "
                   f"{block['dynamics']['model']}); preferred: {comparison['preferred']}")
    if not out and not block["companions"] \
            and (block.get("velocities") or {}).get("p_value") is None:
        # Velocities alone: the fitted jitter absorbs misfit, so only the periodogram tests.
        out.append("no residual periodic signal (chi2 is no test with a fitted jitter)")
    elif not out:
        out.append("no sign that the model misses anything (chi2 and residual "
                   "periodograms consistent with noise)")
    if block.get("evidence"):
        out.extend(_evidence_verdicts(block["evidence"]))
    return out


def fit_quality(block, *, tested=True) -> dict:
    """The summary's ``fit_quality``: is the best fit's chi^2 probable for the stated errors?

    Parameters
    ----------
    block : dict or None
        The adequacy block of the fit (:func:`assess`), at the best posterior sample.
    tested : bool
        False where fitted jitter terms absorb any misfit (radial velocities with a
        sampled jitter, :func:`fitted_jitter`): the verdict is then ``"not tested"``.
        With a fixed jitter the block's ``total`` holds the velocities too.

    Returns
    -------
    dict
        ``verdict`` (``"good"``, ``"poor"`` or ``"not tested"``), ``chi2``,
        ``n_values``, ``n_parameters``, ``reduced_chi2``, ``p_value``,
        ``poor_below_p_value`` (:data:`POOR_FIT_P_VALUE`) and ``per_companion``
        (name -> ``chi2``, ``n_values``, ``reduced_chi2``, ``p_value``). A poor fit
        makes ``massfit fit`` exit with its own status.
    """
    out = {"verdict": "not tested", "chi2": None, "n_values": None, "n_parameters": None,
           "reduced_chi2": None, "p_value": None, "poor_below_p_value": POOR_FIT_P_VALUE,
           "per_companion": {}}
    if block is None or not tested or "total" not in block:
        out["note"] = ("radial velocities: their fitted jitter absorbs any misfit, so "
                       "chi^2 is no test of the fit" if not tested else
                       "no relative astrometry to test")
        return out
    total = block["total"]
    out.update({k: total[k] for k in ("chi2", "n_values", "n_parameters", "reduced_chi2",
                                      "p_value")})
    out["per_companion"] = {name: {k: comp[k] for k in ("chi2", "n_values",
                                                         "reduced_chi2", "p_value")}
                            for name, comp in block["companions"].items()}
    if total["p_value"] is None:
        out["note"] = "no more values than parameters: chi^2 tests nothing"
        return out
    out["verdict"] = "poor" if total["p_value"] < POOR_FIT_P_VALUE else "good"
    return out


def quality_warnings(quality) -> list:
    """The summary's warning for a poor fit (none for a good or untested one)."""
    if quality["verdict"] != "poor":
        return []
    return [f"the best fit is poor: chi2 = {quality['chi2']:.4g} for "
            f"{quality['n_values']} measured values and {quality['n_parameters']} "
            f"parameters (p = {quality['p_value']:.2g}); the errors may be "
            f"underestimated, a period alias may have been chosen, or the model misses "
            f"an effect: do not quote the intervals as they are"]


def panels(block) -> dict:
    """The adequacy block's entries in the order of the figures' panels: each companion's
    astrometry, then the radial velocities (under ``VELOCITY_PANEL``)."""
    from massfit.summarise.residuals import VELOCITY_PANEL

    out = dict(block["companions"])
    if block.get("velocities") is not None:
        out[VELOCITY_PANEL] = block["velocities"]
    return out


def chi2_text(entry) -> str:
    """``chi2 = 41.3 for 40 values (reduced 1.06)``: the one way a panel's chi^2 is
    written, in the terminal and in the figures."""
    text = f"chi2 = {entry['chi2']:.1f} for {entry['n_values']} values"
    if entry.get("reduced_chi2") is not None:
        text += f" (reduced {entry['reduced_chi2']:.2f})"
    return text


def report_lines(block) -> list:
    """Lines of the terminal report for an adequacy block."""
    lines = [f"Model adequacy ({block['dynamics']['model']}"
             f"{', Romer delay on' if block.get('romer_delay') else ''})"]
    for name, comp in panels(block).items():
        text = f"  {name:<10} {chi2_text(comp)}"
        if comp.get("note"):
            text += f" ({comp['note']})"
        if comp["periodogram"] is not None:
            text += f"; residual {peak_text(comp['periodogram'])}"
        lines.append(text)
    comparison = block["comparison"]
    if comparison and "delta_bic" in comparison:
        lines.append(f"  two-body chi2 {comparison['keplerian']['chi2']:.1f} vs "
                     f"{comparison['perturbed']['model']} "
                     f"{comparison['perturbed']['chi2']:.1f}: delta AIC "
                     f"{comparison['delta_aic']:.1f}, delta BIC {comparison['delta_bic']:.1f}")
    elif comparison:
        lines.append(f"  comparison: {comparison['error']}")
    if block.get("comparison_measure"):
        lines.append(f"  models compared by: {block['comparison_measure']}")
    lines += relativity_lines(block.get("relativity"))
    lines += [f"  -> {text}" for text in block["verdicts"]]
    return lines

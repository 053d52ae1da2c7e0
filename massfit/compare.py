"""Models of one data set compared by their evidence (nested sampling).

Each model (two-body or J2 or mutual pulls; N or N + 1 companions; with or without a
velocity trend: any :class:`~massfit.model.specs.SystemSpec`) is fitted to the
same observations with the nested engine (:mod:`massfit.sample.nested`), which gives
its evidence Z_i = p(data | model i). With equal prior odds the models' posterior
probabilities are Z_i / sum_j Z_j, and the Bayes factor of model i over model j is
Z_i / Z_j (Kass & Raftery 1995, *J. Am. Stat. Assoc.* 90, 773; their scale, from
memory: ln B above 1 is positive, above 3 strong, above 5 very strong evidence).
The central mass averaged over the models is the mixture of each model's posterior
draws weighted by its probability.

Each ln Z carries the error the nested runs state (and their scatter between
independent runs); the probabilities' errors come from drawing the ln Z within them.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from massfit.errors import ConfigError
from massfit.summarise.adequacy import KASS_RAFTERY, evidence_words, with_evidence
from massfit.summarise.derived import interval
from massfit.run import fit

__all__ = ["compare_models", "Comparison", "KASS_RAFTERY"]

#: Draws of the mixture of the models' central masses.
AVERAGE_DRAWS = 40_000


def compare_models(observations, models, *, nested=None, seed=None, progress=False):
    """Fit each model with the nested sampler and weigh them by their evidence.

    Parameters
    ----------
    observations : Observations
        The one data set every model is fitted to.
    models : dict
        Label -> :class:`~massfit.model.specs.SystemSpec` (at least two).
    nested : NestedSettings, optional
    seed : int, optional
        The same seed for every model (each fit's runs are independent of the others').

    Returns
    -------
    Comparison
    """
    if len(models) < 2:
        raise ConfigError("a comparison needs at least two models", key="models")
    results = {}
    for label, spec in models.items():
        results[label] = fit(observations, spec, engine="nested", nested=nested, seed=seed,
                             progress=progress)
    return Comparison(results, seed=seed)


class Comparison:
    """The models' evidences, Bayes factors and central masses, and the average.

    Attributes
    ----------
    results : dict
        Label -> :class:`~massfit.result.fit_result.FitResult` (nested engine).
    summary : dict
        ``models`` (per label: ``log_evidence``, ``log_evidence_err``,
        ``log_bayes_factor`` against the best model with its error, ``probability``
        with ``probability_err``, ``evidence_against_it`` (Kass & Raftery's words
        for the best model over it), ``central_mass_solar``, ``converged``),
        ``best``, ``central_mass_solar_averaged``, ``basis``.
    """

    def __init__(self, results, *, seed=None):
        self.results = dict(results)
        self.summary = self._build(seed)

    def _build(self, seed):
        labels = list(self.results)
        log_z = np.array([self.results[k].summary["evidence"]["log_evidence"]
                          for k in labels])
        err = np.array([self.results[k].summary["evidence"]["log_evidence_err"]
                        for k in labels])
        best = int(np.argmax(log_z))
        rng = np.random.default_rng(seed)
        draws = log_z + err * rng.standard_normal((4000, log_z.size))
        draws -= draws.max(axis=1, keepdims=True)
        shares = np.exp(draws) / np.exp(draws).sum(axis=1, keepdims=True)
        prob = np.exp(log_z - log_z.max())
        prob /= prob.sum()
        models = {}
        for j, label in enumerate(labels):
            summary = self.results[label].summary
            log_b = float(log_z[j] - log_z[best])
            models[label] = {
                "log_evidence": float(log_z[j]), "log_evidence_err": float(err[j]),
                "log_bayes_factor": log_b,
                "log_bayes_factor_err": float(np.hypot(err[j], err[best])) if j != best
                else 0.0,
                "probability": float(prob[j]), "probability_err": float(shares[:, j].std()),
                "evidence_against_it": None if j == best else evidence_words(-log_b),
                "central_mass_solar": summary.get("central_mass_solar"),
                "converged": bool(summary["converged"]),
                "fit_quality": summary["fit_quality"]["verdict"]}
        # Each model's adequacy block now judged by the evidence (it says so).
        for label in labels:
            summary = self.results[label].summary
            if summary.get("adequacy"):
                summary["adequacy"] = with_evidence(summary["adequacy"], label, models)
                models[label]["adequacy_verdicts"] = list(summary["adequacy"]["verdicts"])
        counts = rng.multinomial(AVERAGE_DRAWS, prob)
        mixture = [rng.choice(self.results[k].samples["central_mass_solar"], size=n)
                   for k, n in zip(labels, counts)
                   if n and "central_mass_solar" in self.results[k].samples]
        averaged = interval(np.concatenate(mixture), "M_sun") if mixture else None
        return {"models": models, "best": labels[best],
                "central_mass_solar_averaged": averaged,
                "all_converged": all(m["converged"] for m in models.values()),
                "basis": ("ln Z by nested sampling (dynesty), each model's modes in their "
                          "own period boxes; equal prior odds; Bayes factors against the "
                          "best model; the averaged mass mixes the models' posterior "
                          "draws by their probabilities")}

    def report(self) -> str:
        """A plain-text table for the terminal."""
        s = self.summary
        rows = [("model", "ln Z", "ln B vs best", "probability",
                 "central mass (M_sun, 68 %)")]
        for label, m in s["models"].items():
            mass = m["central_mass_solar"]
            mass_text = ("-" if not mass or mass["median"] is None else
                         f"{mass['median']:.5g} ({mass['lower_68']:.5g} .. "
                         f"{mass['upper_68']:.5g})")
            rows.append((label, f"{m['log_evidence']:.2f} +- {m['log_evidence_err']:.2f}",
                         f"{m['log_bayes_factor']:.2f} +- {m['log_bayes_factor_err']:.2f}",
                         f"{m['probability']:.3f} +- {m['probability_err']:.3f}",
                         mass_text + ("" if m["converged"] else "  (NOT converged)")))
        widths = [max(len(row[j]) for row in rows) for j in range(len(rows[0]))]
        lines = ["  ".join(cell.ljust(w) if j in (0, 4) else cell.rjust(w)
                           for j, (cell, w) in enumerate(zip(row, widths))).rstrip()
                 for row in rows]
        for label, m in s["models"].items():
            if m["evidence_against_it"] is not None:
                lines.append(f"  against {label}: {m['evidence_against_it']} evidence "
                             f"for {s['best']}")
        for label, m in s["models"].items():
            lines += [f"  adequacy of {label}: {text}" for text in m.get("adequacy_verdicts", [])]
        avg = s["central_mass_solar_averaged"]
        if avg is not None:
            lines.append(f"central mass averaged over the models: {avg['median']:.5g} M_sun "
                         f"(68 %: {avg['lower_68']:.5g} .. {avg['upper_68']:.5g}; 95 %: "
                         f"{avg['lower_95']:.5g} .. {avg['upper_95']:.5g})")
        return "\n".join(lines)

    def save(self, out, *, force=False, inputs=()) -> Path:
        """Write ``comparison.json`` and ``comparison.txt`` into the folder ``out``."""
        from massfit.write.folder import atomic_folder, write_json

        out = Path(out)
        with atomic_folder(out, record="comparison.json", force=force,
                           inputs=inputs) as tmp:
            write_json(tmp / "comparison.json", self.summary)
            (tmp / "comparison.txt").write_text(self.report() + "\n")
        return out

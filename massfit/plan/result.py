"""What the planner returns: the ranking, the curve, the report text and JSON."""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.table import Table
from astropy.time import Time

from massfit.constants import G_REL_UNCERTAINTY

#: Relative sigma above which a Gaussian forecast is flagged as only indicative
#: (common practice: a linearised error above ~30 % no longer describes the posterior).
_GAUSSIAN_LIMIT = 0.3


_METHOD_TEXT = {"fisher": "Fisher matrix at the assumed elements",
                "posterior": "linear update of the posterior samples"}


@dataclass
class PlanResult:
    """What the planner found.

    Attributes
    ----------
    method : str
        ``"fisher"`` (an assumed system) or ``"posterior"`` (a finished fit).
    central_mass : Quantity
        The assumed (or posterior median) central mass.
    current : dict
        The precision before any candidate epoch (the observed epochs, or the
        posterior): a block as :func:`forecast_precision` returns.
    all_candidates : dict
        The precision with every candidate epoch added.
    ranking : astropy.table.Table
        Every candidate epoch with the precision after adding it alone, the expected
        information gain and, for the chosen ones, their order.
    curve : astropy.table.Table
        Precision against the number of added epochs, chosen by the planner and
        evenly spaced.
    checks : list of dict
        Simulated fits that test the forecast (assumed systems only).
    notes : list of str
    mode_separation : list of dict
        Where the fit weighed several modes: every candidate epoch, best first, with
        the bound on picking the wrong mode after it (:mod:`massfit.plan.modes`).
    """

    method: str
    central_mass: u.Quantity
    current: dict
    all_candidates: dict
    ranking: Table
    curve: Table
    checks: list = field(default_factory=list)
    notes: list = field(default_factory=list)
    inputs: dict = field(default_factory=dict)
    mode_separation: list = field(default_factory=list)

    # ------------------------------------------------------------------ text
    def report(self) -> str:
        """Text for a terminal, with a paragraph a proposal can quote."""
        unit = mass_unit(self.central_mass)
        mass = self.central_mass.to_value(unit)
        lines = [f"Planning for a central mass of {mass:.6g} {unit} "
                 f"({_METHOD_TEXT[self.method]})"]
        lines.append(f"  now ({self.inputs.get('now', '')}): "
                     f"{_percent_text(self.current['gm_relative_sigma'])} of GM")
        lines.append(f"  with all {self.all_candidates['epochs'] - self.current['epochs']} "
                     f"candidate epochs: {_percent_text(self.all_candidates['gm_relative_sigma'])}")
        lines.append("")
        lines.append("Precision against the number of added epochs (1-sigma of GM):")
        lines.append(f"  {'n':>3}  {'planner':>10}  {'evenly spaced':>13}")
        for row in self.curve:
            lines.append(f"  {row['n_epochs']:>3}  {_percent_text(row['planned_gm_rel_sigma']):>10}"
                         f"  {_percent_text(row['even_gm_rel_sigma']):>13}")
        lines.append("")
        lines.append("Best next epochs (each alone added to what is in hand):")
        lines.append(f"  {'rank':>4}  {'time (UTC)':<19}  {'sigma after':>11}  "
                     f"{'shrink':>7}  {'gain [nat]':>10}  chosen")
        for row in self.ranking[:10]:
            chosen = "" if row["planned_order"] < 0 else f"#{row['planned_order']}"
            shrink = (f"{row['shrink_percent']:>6.2f}%" if np.isfinite(row["shrink_percent"])
                      else f"{'-':>7}")
            gain = (f"{row['information_gain']:>10.4f}" if np.isfinite(row["information_gain"])
                    else f"{'-':>10}")
            lines.append(f"  {row['rank']:>4}  {row['time_utc'][:19]:<19}  "
                         f"{_percent_text(row['gm_rel_sigma_after']):>11}  {shrink}  {gain}  "
                         f"{chosen}")
        if self.checks:
            lines.append("")
            lines.append("Check: simulated at the assumed elements and fitted (short chains):")
            for c in self.checks:
                lines.append(f"  {c['schedule']:<26} forecast "
                             f"{_percent_text(c['forecast_gm_rel_sigma'])}"
                             f", fit {_percent_text(c['fit_gm_rel_sigma'])} (ratio "
                             f"{c['ratio']:.2f}); true GM "
                             f"{'inside' if c['truth_inside_95'] else 'OUTSIDE'} the 95.45 % "
                             f"interval; chain "
                             f"{'converged' if c['converged'] else 'NOT converged'}")
                if c.get("fit_chi2", 0) > 3 * c.get("values", np.inf):
                    lines.append(f"    the fit has chi2 = {c['fit_chi2']:.4g} for "
                                 f"{c['values']} values: it found another solution "
                                 f"(an alias?), so this schedule may not fix the orbit")
        lines.append("")
        lines.append(self.paragraph())
        wide = [row["n_epochs"] for row in self.curve
                if _GAUSSIAN_LIMIT < row["planned_gm_rel_sigma"] < np.inf]
        if wide or _GAUSSIAN_LIMIT < self.current["gm_relative_sigma"] < np.inf:
            lines.append(f"note: where sigma exceeds {100 * _GAUSSIAN_LIMIT:.0f} % the "
                         f"Gaussian forecast is only indicative: the data leave the orbit "
                         f"open and a fit may find several solutions")
        for note in self.notes:
            lines.append(f"note: {note}")
        return "\n".join(lines)

    def paragraph(self) -> str:
        """A plain paragraph stating the forecast, for a proposal."""
        unit = mass_unit(self.central_mass)
        mass = self.central_mass.to_value(unit)
        best = self.curve[-1] if len(self.curve) else None
        text = []
        errs = self.inputs.get("error_text", "the stated errors")
        if self.method == "fisher":
            now = (f"{_percent_text(self.current['gm_relative_sigma'])} from the "
                   f"{self.current['epochs']} epochs in hand" if self.current["determined"]
                   else "no determination yet from the epochs in hand")
            text.append(f"At the assumed elements (central mass {mass:.4g} {unit}), a Fisher-"
                        f"matrix forecast that marginalises over every orbital element"
                        f"{' and the parallax' if self.inputs.get('parallax_prior') else ''} "
                        f"gives a 1-sigma precision on GM of {now}")
        else:
            text.append(f"The present posterior gives GM to "
                        f"{_percent_text(self.current['gm_relative_sigma'])} (1 sigma; central "
                        f"mass {mass:.4g} {unit})")
        if best is not None:
            text.append(f"; adding {best['n_epochs']} epochs chosen by the planner from the "
                        f"candidates (errors {errs}) brings it to "
                        f"{_percent_text(best['planned_gm_rel_sigma'])}, against "
                        f"{_percent_text(best['even_gm_rel_sigma'])} for the same number evenly "
                        f"spaced")
        text.append(f"; all {self.all_candidates['epochs'] - self.current['epochs']} "
                    f"candidate epochs give "
                    f"{_percent_text(self.all_candidates['gm_relative_sigma'])}.")
        if self.checks:
            ratios = [c["ratio"] for c in self.checks]
            text.append(f" Simulated fits of {len(self.checks)} schedule(s) gave posterior "
                        f"widths {min(ratios):.2f}-{max(ratios):.2f} times the forecast.")
        text.append(f" The mass in kg carries G's own relative uncertainty of "
                    f"{G_REL_UNCERTAINTY:.1e} in addition.")
        return "".join(text)

    def __str__(self) -> str:
        return self.report()

    def _repr_html_(self) -> str:
        from html import escape

        return f"<pre>{escape(self.report())}</pre>"

    # ------------------------------------------------------------------ plot
    def plot(self, *, figsize=None):
        """Predicted precision against the number of added epochs, and when to observe.

        Returns
        -------
        matplotlib.figure.Figure
        """
        import matplotlib.pyplot as plt

        fig, (top, bottom) = plt.subplots(2, 1, figsize=figsize or (7.0, 7.0),
                                          gridspec_kw={"height_ratios": [3, 2]})
        n = np.asarray(self.curve["n_epochs"])
        planned = 100 * np.asarray(self.curve["planned_gm_rel_sigma"], dtype=float)
        even = 100 * np.asarray(self.curve["even_gm_rel_sigma"], dtype=float)
        top.plot(n, planned, "o-", color="C0", label="epochs chosen by the planner")
        top.plot(n, even, "s--", color="C1", label="evenly spaced epochs")
        now = 100 * self.current["gm_relative_sigma"]
        if math.isfinite(now):
            top.axhline(now, color="0.4", lw=1, ls=":", label="now (no new epoch)")
        everything = 100 * self.all_candidates["gm_relative_sigma"]
        if math.isfinite(everything):
            top.axhline(everything, color="C2", lw=1, ls="-.",
                        label=f"all {self.all_candidates['epochs'] - self.current['epochs']}"
                              f" candidates")
        colours = {"planned": "C0", "evenly spaced": "C1", "all candidates": "C2"}
        for check in self.checks:
            top.plot(check["n_added"] if check["schedule"] != "all candidates"
                     else n.max() if n.size else 0,
                     100 * check["fit_gm_rel_sigma"], "x", ms=10, mew=2,
                     color=colours.get(check["schedule"], "k"),
                     label=f"simulated fit, {check['schedule']}")
        top.set_yscale("log")
        top.set_xlabel("number of added epochs")
        top.set_ylabel(r"predicted 1$\sigma$ of GM  [%]")
        top.set_title("Forecast precision of the central mass")
        top.grid(True, which="both", alpha=0.3)
        top.legend(fontsize=8)
        years = Time(np.asarray(self.ranking["time_jd"], dtype=float), format="jd",
                     scale="tdb").jyear
        after = 100 * np.asarray(self.ranking["gm_rel_sigma_after"], dtype=float)
        order = np.argsort(years)
        bottom.plot(years[order], after[order], "-", color="0.5", lw=1,
                    label="one candidate epoch added alone")
        rank = np.asarray(self.ranking["planned_order"])
        picked = rank > 0
        bottom.plot(years[picked], after[picked], "o", color="C0",
                    label="chosen (number: order of importance)")
        for y, s_, k in zip(years[picked], after[picked], rank[picked]):
            bottom.annotate(str(k), (y, s_), textcoords="offset points", xytext=(0, 6),
                            ha="center", fontsize=7, color="C0")
        if math.isfinite(now):
            bottom.axhline(now, color="0.4", lw=1, ls=":")
        bottom.set_yscale("log")
        bottom.set_xlabel("candidate epoch [Julian year, TDB]")
        bottom.set_ylabel(r"1$\sigma$ of GM [%]")
        bottom.grid(True, which="both", alpha=0.3)
        bottom.legend(fontsize=8)
        fig.tight_layout()
        return fig

    # ------------------------------------------------------------------ files
    def summary(self) -> dict:
        """The numbers as a JSON-ready dict."""
        unit = mass_unit(self.central_mass)
        return {"method": self.method,
                "central_mass": {"unit": unit,
                                 "value": float(self.central_mass.to_value(unit))},
                "now": _json_block(self.current, unit),
                "all_candidates": _json_block(self.all_candidates, unit),
                "planned_next": _planned_list(self.ranking),
                "checks": self.checks, "notes": self.notes, "inputs": self.inputs,
                "mode_separation": self.mode_separation,
                "paragraph": self.paragraph()}

    def save(self, out_dir, *, plots=True, force=False) -> Path:
        """Write ``plan.json``, ``next_epochs.ecsv``, ``precision.ecsv`` and the figure.

        The folder is written beside its final place and renamed into it at the end.
        An existing plan or fit is replaced only if ``force`` is true, and then only
        the files massfit wrote; a folder massfit did not write is never touched (see
        :mod:`massfit.write.folder`).
        """
        import matplotlib.pyplot as plt

        from massfit.write.folder import atomic_folder, write_json

        out = Path(out_dir)
        with atomic_folder(out, record="plan.json", force=force) as tmp:
            write_json(tmp / "plan.json", self.summary())
            self.ranking.write(tmp / "next_epochs.ecsv", format="ascii.ecsv")
            self.curve.write(tmp / "precision.ecsv", format="ascii.ecsv")
            if plots:
                fig = self.plot()
                for ext in ("png", "pdf"):
                    fig.savefig(tmp / f"precision.{ext}", dpi=150 if ext == "png" else None)
                plt.close(fig)
        return out


def _planned_list(ranking):
    picked = [row for row in ranking if row["planned_order"] > 0]
    picked.sort(key=lambda row: row["planned_order"])
    return [{"order": int(r["planned_order"]), "time_utc": str(r["time_utc"]),
             "time_jd_tdb": float(r["time_jd"]),
             "gm_rel_sigma_after_all_so_far": float(r["planned_gm_rel_sigma"])}
            for r in picked]


def _json_block(block, unit):
    out = {k: (None if isinstance(v, float) and not math.isfinite(v) else v)
           for k, v in block.items() if k != "mass_sigma"}
    sigma = block["mass_sigma"].to_value(unit)
    out["mass_sigma"] = {"unit": unit, "value": float(sigma) if math.isfinite(sigma) else None}
    return out


def _percent_text(rel):
    if rel is None or not math.isfinite(rel):
        return "undetermined"
    pct = 100 * rel
    return f"{pct:.3g} %" if pct >= 0.01 else f"{pct:.2e} %"


def mass_unit(mass):
    from massfit.summarise.derived import best_mass_unit

    name = best_mass_unit(float(mass.to_value(u.M_sun)))
    return {"Msun": "solMass", "Mjup": "jupiterMass", "Mearth": "earthMass"}[name]

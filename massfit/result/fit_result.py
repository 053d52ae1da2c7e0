"""The result of a fit: numbers, text for a terminal or a notebook, and an output folder."""

from __future__ import annotations

from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.table import Table

from massfit.summarise.dark_mass import summary_blocks, summary_lines
from massfit.summarise.mode_text import central_mode_lines, nested_lines, period_mode_lines
from massfit.summarise.derived import best_mass_unit, derived_samples, interval
from massfit.summarise.quantities import CENTRAL, COMPANION, MASS_UNIT_KEYS
from massfit.summarise.result_text import (companion_lines, format_value, quality_line,
                                           velocity_lines)
from massfit.summarise.rounding import WIDE_LABEL, format_range

__all__ = ["FitResult", "FigureWarning", "format_value", "best_mass_unit"]


#: Central-mass blocks of the summary, in order (names and units: summarise/quantities.py).
_CENTRAL_BLOCKS = ("central_mass", "central_gm", "central_mass_solar", "central_mass_jupiter",
                   "central_mass_earth")
#: Companion quantities of the summary, in order.
_COMPANION_BLOCKS = tuple(key for key in COMPANION if key != "semi_major_axis_angle")


def _velocity_summary(rv) -> dict:
    out = {"offset": {lab: interval(v, "km / s") for lab, v in rv["offset"].items()},
           "jitter": {lab: interval(v, "km / s") for lab, v in rv["jitter"].items()}}
    for term, unit in (("slope", "km / s / d"), ("curvature", "km / s / d2")):
        if term in rv:
            out[f"trend_{term}"] = interval(rv[term], unit)
    return out


class FitResult:
    """Everything a fit produced.

    Attributes
    ----------
    model : OrbitModel
    chain : Chain
        The posterior samples and the sampler's diagnostics.
    start : Start
        The starting solution and any comparable modes.
    samples : dict
        Derived physical samples (see :func:`massfit.summarise.derived.derived_samples`).
    summary : dict
        The content of ``summary.json``.
    """

    def __init__(self, model, chain, start, *, settings=None, warnings=None, record=None,
                 checks=None):
        self.model = model
        self.chain = chain
        self.start = start
        self.settings = settings
        self.samples = derived_samples(model, chain.samples, seed=getattr(settings, "seed", None))
        self.warnings = list(warnings or [])
        self.record = dict(record or {})
        # Posterior checks beyond the convergence test (massfit.summarise.posterior_checks).
        self.checks = dict(checks or {})
        self.summary = self._build_summary()

    # ------------------------------------------------------------------ numbers
    @property
    def converged(self) -> bool:
        return bool(self.chain.converged)

    @property
    def poor_fit(self) -> bool:
        """True when the best fit's chi^2 is improbable for the stated errors."""
        return self.summary["fit_quality"]["verdict"] == "poor"

    def _build_summary(self) -> dict:
        s = self.samples
        obs = self.model.observations
        chain = self.chain
        summary = {}
        for key in _CENTRAL_BLOCKS:
            # Velocities alone may leave the central mass open: null, never a number.
            summary[key] = interval(s[key], CENTRAL[key].unit_text) if key in s else None
        if "central_mass_note" in s:
            summary["central_mass_note"] = s["central_mass_note"]
        if "parallax" in s:
            summary["parallax"] = interval(s["parallax"], "mas")
            if self.model.parallax_from_velocities:
                summary["parallax_note"] = (
                    "no parallax was given: sampled with a "
                    f"{self.model.spec.parallax.describe('mas')} prior and fixed by the "
                    "companion's radial velocities with its relative astrometry")
        summary.update(summary_blocks(self.model, s, interval))
        summary["converged"] = self.converged
        from massfit.summarise.adequacy import fit_quality, fitted_jitter, quality_warnings

        companions = self._companion_blocks()
        adequacy = self._adequacy({name: comp["period"]["median"]
                                   for name, comp in companions.items()})
        summary["fit_quality"] = fit_quality(
            adequacy, tested=not (self.model.has_velocities and fitted_jitter(self.model)))
        names = self.model.names
        k_mass = names.index("central.log10_mass") if "central.log10_mass" in names else 0
        summary["diagnostics"] = {
            "walkers": int(chain.walkers),
            "steps": int(chain.steps),
            "max_autocorr_steps": float(np.max(chain.tau)),
            "effective_samples": chain.effective_samples(k_mass),
            # The mass's own autocorrelation time where the sampler moved in the
            # angular mass (massfit.sample.reparameterisation), else None.
            "mass_autocorr_steps": (None if getattr(chain, "key_tau", None) is None
                                    else float(chain.key_tau)),
            # Of the central mass where it is sampled, else of the first coordinate.
            "effective_samples_of": names[k_mass] if names else None,
            "sampling_seconds": float(chain.seconds),
            "acceptance_fraction": float(chain.acceptance_fraction),
            "burn_in_steps": int(chain.burn_in),
            "thin": int(chain.thin),
            "required_autocorr_multiple": 50,
            "autocorr_steps": {n: float(t) for n, t in
                               zip(chain.coordinate_names or names, chain.tau)},
            # Companions sampled as a position and velocity (massfit.sample.reparameterisation).
            "sampled_as_state": list(chain.state_bodies),
        }
        summary["companions"] = companions
        if self.model.sight is not None:
            # Elements are then against the ICRS equator and x axis (conventions).
            summary["viewing"] = self.model.viewing_description()
        if "rv" in s:
            summary["velocities"] = _velocity_summary(s["rv"])
        summary["adequacy"] = adequacy
        summary["modes"] = list(self.start.modes)
        summary["posterior_modes"] = list(self.checks.get("posterior_modes", []))
        summary["candidate_modes"] = list(self.checks.get("candidate_modes", []))
        if summary["candidate_modes"]:
            from massfit.start.modes import MIN_WEIGHT, WEIGHT_BASIS

            summary["candidate_modes_basis"] = {"weight": WEIGHT_BASIS,
                                                "must_visit_above": MIN_WEIGHT}
        if getattr(chain, "evidence", None):
            from massfit.summarise.posterior_checks import weighed_mode_blocks

            summary["sampler"] = dict(chain.engine)
            summary["evidence"] = dict(chain.evidence, unit="ln (natural log), the "
                                       "likelihood's Gaussian normalisation included")
            summary["weighed_modes"] = weighed_mode_blocks(chain.modes, chain.mode_members,
                                                           s)
        if getattr(chain, "surrogate", None):
            summary["surrogate"] = chain.surrogate  # massfit/linearised_fit.py
        if self.checks.get("central_mass_over_modes") is not None:
            summary["central_mass_over_modes"] = self.checks["central_mass_over_modes"]
        summary["prior_sensitivity"] = self.checks.get("prior_sensitivity")
        summary["warnings"] = list(self.warnings) + quality_warnings(summary["fit_quality"])
        summary["inputs"] = {
            "files": list(obs.files),
            "rows_read": int(obs.rows_read),
            "rows_used": int(obs.rows_used),
            "rows_rejected": [r.as_dict() for r in obs.rejected],
            "unused_columns": dict(obs.unused_columns),
        }
        return summary

    def _companion_blocks(self) -> dict:
        """The summary's interval blocks of each companion."""
        out = {}
        for name, comp in self.samples["companions"].items():
            block = {key: interval(comp[key], COMPANION[key].unit_text)
                     for key in _COMPANION_BLOCKS if key in comp}
            if "semi_major_axis_angle" in comp:
                block["semi_major_axis_angle"] = interval(comp["semi_major_axis_angle"], "mas")
            if "ascending_node" in comp:
                block["node_ambiguity_deg"] = (180.0 if self.model.node_width[name] < 6
                                               else 0.0)
            out[name] = block
        return out

    def _adequacy(self, periods):
        """Residual checks at the best sample, and the two-body comparison, for every
        fit (velocities alone too); the periodograms search up to the figures' limit,
        set by the summary's median periods."""
        from massfit.summarise.adequacy import assess

        best = self.chain.samples[int(np.argmax(self.chain.log_prob))]
        return assess(self.model, best, periods=periods)

    def _chain_lines(self, d, s) -> list:
        out = []
        out.append("Sampler")
        out.append(f"  {d['walkers']} walkers x {d['steps']} steps, "
                   f"max autocorrelation {d['max_autocorr_steps']:.1f} steps "
                   f"(chain = {d['steps'] / max(d['max_autocorr_steps'], 1):.0f} tau), "
                   f"acceptance {d['acceptance_fraction']:.2f}")
        of = d.get("effective_samples_of", "central.log10_mass")  # older summaries lack it
        of = "the mass" if of == "central.log10_mass" else of
        out.append(f"  effective samples of {of}: {d['effective_samples']:.0f}; "
                   f"sampling took {d['sampling_seconds']:.1f} s; "
                   f"converged: {'yes' if self.converged else 'NO'}")
        if len(s.get("candidate_modes", [])) > 1:
            from massfit.summarise.posterior_checks import mode_report_lines

            out.extend(mode_report_lines(s["candidate_modes"],
                                         s.get("central_mass_over_modes")))
        else:
            for mode in s["modes"]:
                mass = ("" if mode["central_mass"] is None
                        else f", central mass {mode['central_mass']:.4g} M_sun")
                out.append(f"  other mode: {mode['body']} P = {mode['period']:.6g} d "
                           f"(best {mode['best_period']:.6g} d){mass}, delta chi2 = "
                           f"{mode['delta_chi2']:.1f}")
        return out

    # --------------------------------------------------------------------- text
    def report(self) -> str:
        """A plain-text summary for the terminal."""
        s = self.summary
        lines = []
        if not self.converged:
            lines += ["*** NOT CONVERGED: the chain is shorter than 50 autocorrelation times,",
                      "*** their estimate has not settled, or the walkers missed a mode of",
                      "*** the posterior (see the warnings); do not quote these numbers.", ""]
        quality = s["fit_quality"]
        if quality["verdict"] == "poor":
            lines += [f"*** POOR FIT: chi2 = {quality['chi2']:.4g} for {quality['n_values']} "
                      f"values (reduced {quality['reduced_chi2']:.3g}, p = "
                      f"{quality['p_value']:.2g});",
                      "*** the model or the stated errors do not describe the data.", ""]
        lines.append("Central body")
        if s["central_gm"] is None:
            lines.append(f"  mass    = not determined: {s.get('central_mass_note', '')}")
        else:
            lines.append(f"  GM      = {format_value(s['central_gm'])} km^3/s^2   "
                         f"({WIDE_LABEL}: {format_range(s['central_gm'])})")
            lines.append(f"  mass    = {format_value(s['central_mass'])} kg   "
                         f"(includes the uncertainty of G)")
            key_unit = best_mass_unit(s["central_mass_solar"]["median"] or 1.0)
            key = MASS_UNIT_KEYS[key_unit]
            lines.append(f"          = {format_value(s[key])} {s[key]['unit']}   "
                         f"({WIDE_LABEL}: {format_range(s[key])})")
            lines.extend(central_mode_lines(s, key_unit))
            if "central_mass_note" in s:
                lines.append(f"  note: {s['central_mass_note']}")
        if "parallax" in s:
            lines.append(f"  parallax = {format_value(s['parallax'])} mas")
        lines.extend(summary_lines(s, format_value))
        if s.get("viewing"):
            view = s["viewing"]
            lines.append(f"Orbits in ICRS axes (i, node, omega against the ICRS equator); "
                         f"line of sight per row from {view['direction_from']}, "
                         f"{view['offsets']} offsets")
        by_period = sorted(s["companions"].items(),
                           key=lambda item: item[1]["period"]["median"] or 0.0)
        for name, comp in by_period:
            lines.append(f"Companion {name}")
            lines.extend(companion_lines(comp, period_mode_lines(s, name)))
        if s.get("velocities"):
            lines.extend(velocity_lines(s["velocities"]))
        if s.get("adequacy"):
            from massfit.summarise.adequacy import report_lines

            lines.extend(report_lines(s["adequacy"]))
        lines.append(quality_line(s["fit_quality"]))
        d = s["diagnostics"]
        if "evidence" in s:
            lines.extend(nested_lines(s, self.converged))
        else:
            lines.extend(self._chain_lines(d, s))
        if s.get("surrogate"):
            from massfit.model.surrogate import check_line

            lines.append(check_line(s["surrogate"]))
        for text in s["warnings"]:
            lines.append(f"  warning: {text}")
        inputs = s["inputs"]
        lines.append(f"Inputs: {inputs['rows_used']} of {inputs['rows_read']} rows used "
                     f"from {len(inputs['files'])} file(s); "
                     f"{len(inputs['rows_rejected'])} rejected")
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.report()

    def __repr__(self) -> str:
        m = self.summary["central_mass_solar"]
        mass = "not determined" if m is None else f"{m['median']:.6g} M_sun"
        return (f"<FitResult central mass {mass}, "
                f"{len(self.summary['companions'])} companion(s), "
                f"converged={self.converged}>")

    def _repr_html_(self) -> str:
        from html import escape

        from massfit.write.tables import html_table

        s = self.summary
        d = s["diagnostics"]
        head = ("<p><b>massfit result</b> &mdash; "
                + ("converged" if self.converged else
                   "<span style='color:#b00'><b>NOT converged</b>: do not quote these "
                   "numbers</span>")
                + f"; {d['walkers']} walkers &times; {d['steps']} steps, "
                  f"{d['steps'] / max(d['max_autocorr_steps'], 1):.0f} autocorrelation "
                  f"times, {d['effective_samples']:.0f} effective samples of the mass</p>")
        notes = "".join(f"<li>{escape(text)}</li>" for text in s["warnings"])
        inputs = s["inputs"]
        tail = (f"<p>{inputs['rows_used']} of {inputs['rows_read']} rows used from "
                f"{len(inputs['files'])} file(s); {len(inputs['rows_rejected'])} rejected. "
                f"Medians with 68.27 % and 95.45 % credible intervals.</p>")
        return (head + html_table(s) + (f"<ul>{notes}</ul>" if notes else "") + tail)

    def table(self, fmt: str = "markdown", *, mass_unit: str | None = None):
        """The parameter summary as a table.

        Parameters
        ----------
        fmt : {"latex", "markdown", "html", "ecsv"}
            ``ecsv`` returns an astropy Table (write it with ``format="ascii.ecsv"``);
            the others return text.
        mass_unit : {"Msun", "Mjup", "Mearth", "kg"}, optional
            The unit of the central mass beside kg.

        Times of periapsis are given in the input's time format and scale where every
        file gave the same (JD in TDB otherwise).
        """
        from massfit.write import tables

        makers = {"latex": tables.latex_table, "markdown": tables.markdown_table,
                  "html": tables.html_table, "ecsv": tables.ecsv_table}
        if fmt not in makers:
            from massfit.errors import ConfigError

            raise ConfigError(f"unknown table format {fmt!r}; accepted: "
                              f"{', '.join(makers)}", key="fmt")
        observations = self.model.observations
        form = observations.time_form() if hasattr(observations, "time_form") else None
        return makers[fmt](self.summary, mass_unit=mass_unit, time_form=form)

    # ----------------------------------------------------------------- samples
    def samples_table(self) -> Table:
        """Posterior samples (sampled coordinates and derived quantities) as a Table."""
        table = Table()
        for k, name in enumerate(self.model.names):
            table[name] = self.chain.samples[:, k]
        table["log_prob"] = self.chain.log_prob
        for key, values in self.samples.items():
            if key in ("companions", "rv") or not isinstance(values, np.ndarray):
                continue  # velocity terms are sampled columns already; notes are text
            table[key] = values
            if key in CENTRAL and CENTRAL[key].unit != u.one:
                table[key].unit = CENTRAL[key].unit
        for name, comp in self.samples["companions"].items():
            for key, values in comp.items():
                table[f"{name}.{key}"] = values
                # A time of periapsis is a date (JD, TDB), not a duration in days.
                if key in COMPANION and COMPANION[key].unit != u.one \
                        and key != "periapsis_time":
                    table[f"{name}.{key}"].unit = COMPANION[key].unit
        table.meta["converged"] = self.converged
        return table

    def to_inference_data(self):
        """The posterior as ArviZ ``InferenceData``: one chain per walker, physical units.

        See :func:`massfit.result.inference_data.to_inference_data`; needs arviz
        (``pip install "massfit[arviz]"``). ``save(..., arviz=True)`` writes it as
        NetCDF (``posterior.nc``).
        """
        from massfit.result.inference_data import to_inference_data

        return to_inference_data(self)

    # -------------------------------------------------------------------- plots
    def corner_plot(self, **kwargs):
        """Corner plot of the central mass and key parameters; see :func:`massfit.plot.corner_plot`."""
        from massfit.plot import corner_plot

        return corner_plot(self, **kwargs)

    def velocity_plot(self, **kwargs):
        """Radial velocities against phase, with residuals; see :func:`massfit.plot.velocity_plot`."""
        from massfit.plot import velocity_plot

        return velocity_plot(self, **kwargs)

    def velocity_time_plot(self, **kwargs):
        """Radial velocities against time, with residuals; see :func:`massfit.plot.velocity_time_plot`."""
        from massfit.plot import velocity_time_plot

        return velocity_time_plot(self, **kwargs)

    def orbit_plot(self, **kwargs):
        """Sky-plane orbits with the data; see :func:`massfit.plot.orbit_plot`."""
        from massfit.plot import orbit_plot

        return orbit_plot(self, **kwargs)

    def residual_plot(self, **kwargs):
        """Normalised residuals against time; see :func:`massfit.plot.residual_plot`."""
        from massfit.plot import residual_plot

        return residual_plot(self, **kwargs)

    def periodogram_plot(self, **kwargs):
        """Periodograms of the residuals; see :func:`massfit.plot.periodogram_plot`."""
        from massfit.plot import periodogram_plot

        return periodogram_plot(self, **kwargs)

    def leftover_signals(self, **kwargs) -> list:
        """Companions whose residuals keep a periodic signal; see :mod:`massfit.summarise.residuals`."""
        from massfit.summarise.residuals import leftover_signals

        return leftover_signals(self, **kwargs)

    def write_figures(self, folder, *, figures=None, formats=("png", "pdf")) -> list:
        """Draw figures and write them into ``folder``; returns the paths written.

        Parameters
        ----------
        figures : list of str, optional
            Stems of :data:`massfit.plot.figures.FIGURES` (all by default).
        formats : sequence of str
            File types matplotlib can write (``png``, ``pdf``, ``svg``, ``eps``...).
        """
        import matplotlib.pyplot as plt

        from massfit.plot import FIGURES, applicable_figures, save_figure

        chosen = applicable_figures(self) if figures is None else list(figures)
        unknown = [f for f in chosen if f not in FIGURES]
        if unknown:
            from massfit.errors import ConfigError

            raise ConfigError(f"unknown figure {', '.join(unknown)}; accepted: "
                              f"{', '.join(FIGURES)}", key="figures")
        paths = []
        for stem in chosen:
            fig = FIGURES[stem](self)
            try:
                paths += save_figure(fig, Path(folder) / stem, formats)
            finally:
                plt.close(fig)
        return paths

    def write_tables(self, folder) -> list:
        """Write the parameter summary as LaTeX, Markdown and ECSV into ``folder``."""
        from massfit.write.tables import TABLE_FORMATS

        paths = []
        for fmt, name in TABLE_FORMATS.items():
            path = Path(folder) / name
            table = self.table(fmt)
            if fmt == "ecsv":
                table.write(path, format="ascii.ecsv", overwrite=True)
            else:
                path.write_text(table)
            paths.append(path)
        return paths

    # --------------------------------------------------------------------- save
    def save(self, out_dir, *, plots=True, force=False, formats=("png", "pdf"),
             arviz=False, processes=1) -> Path:
        """Write the output folder: summary, samples, observations, tables and figures.

        ``massfit.load_result`` reads the folder back (``massfit redraw`` on the
        command line).

        The folder is written beside its final place and renamed into it at the end,
        so a half-written folder never looks complete. The numbers are written before
        the figures: a figure that fails is a :class:`FigureWarning`, listed in
        run.json (``figures.failed``), and the rest of the result is kept. An existing
        result is replaced only if ``force`` is true, and then only the files massfit
        wrote; a folder massfit did not write is never touched (see
        :mod:`massfit.write.folder`). With ``arviz=True`` the posterior is also written
        as ArviZ InferenceData in NetCDF, ``posterior.nc`` (see
        :meth:`to_inference_data`; needs arviz). With ``processes=2`` the corner plot
        is drawn in a forked second process from the start, while this one writes the
        numbers and draws the other figures (``massfit fit`` does so on a machine with
        two cores or more).
        """
        from massfit.write.folder import atomic_folder, write_json
        from massfit.write.saved_state import (RUN_FILE, SAMPLES_FILE, SUMMARY_FILE, model_state,
                                              write_ecsv, write_observations)

        out = Path(out_dir)
        # Before anything is written: a missing arviz is a one-line error, not half a folder.
        posterior = self.to_inference_data() if arviz else None
        record = {**self.record, "model": model_state(self.model)}
        with atomic_folder(out, record=RUN_FILE, force=force,
                           inputs=self.model.observations.files) as tmp:
            def numbers():
                write_json(tmp / SUMMARY_FILE, self.summary)
                write_ecsv(self.samples_table(), tmp / SAMPLES_FILE)
                # What massfit.load_result needs to rebuild the model and redraw.
                write_observations(self.model.observations, tmp)
                self.write_tables(tmp)
                if posterior is not None:
                    from massfit.result.inference_data import INFERENCE_DATA_FILE

                    posterior.to_netcdf(str(tmp / INFERENCE_DATA_FILE))
                write_json(tmp / RUN_FILE, record)

            if plots:
                record["figures"] = self._write_figures_or_warn(tmp, formats, processes,
                                                                first=numbers)
                write_json(tmp / RUN_FILE, record)
            else:
                numbers()
        return out

    def _write_figures_or_warn(self, folder, formats, processes=1, first=None) -> dict:
        """Draw every figure that applies; one that fails is a warning, not a lost result.

        ``first`` (writing the numbers) is done here before any figure. With
        ``processes`` = 2 (and fork available) the corner plots are drawn in a second
        process meanwhile, from the start, while this one does ``first`` and draws the
        rest.
        """
        import warnings

        from massfit.plot.figures import applicable_figures
        from massfit.write.beside import beside, can_fork

        stems = applicable_figures(self)
        apart = [stem for stem in stems if stem.startswith("corner")]
        if processes > 1 and can_fork() and apart and len(apart) < len(stems):
            rest = [stem for stem in stems if stem not in apart]

            def here():
                if first is not None:
                    first()
                return self._draw_each(folder, rest, formats)

            from massfit.plot.style import load_drawing

            load_drawing()  # once, before the fork: both processes start with it
            there, mine = beside(lambda: self._draw_each(folder, apart, formats), here)
            done = {key: sorted(there[key] + mine[key],
                                key=lambda d: stems.index(d if isinstance(d, str)
                                                          else d["figure"]))
                    for key in ("written", "failed")}
        else:
            if first is not None:
                first()
            done = self._draw_each(folder, stems, formats)
        for failure in done["failed"]:
            warnings.warn(f"the figure '{failure['figure']}' could not be drawn "
                          f"({failure['error']}); the numbers are saved without it",
                          FigureWarning, stacklevel=3)
        return done

    def _draw_each(self, folder, stems, formats) -> dict:
        done = {"written": [], "failed": []}
        for stem in stems:
            try:
                self.write_figures(folder, figures=[stem], formats=formats)
            except OSError:
                raise  # the disc, not the figure: the whole write fails (see save)
            except Exception as exc:  # noqa: BLE001 - a figure never costs the numbers
                for path in Path(folder).glob(f"{stem}.*"):
                    path.unlink()  # half a figure is no figure
                reason = " ".join(f"{type(exc).__name__}: {exc}".split())
                done["failed"].append({"figure": stem, "error": reason})
            else:
                done["written"].append(stem)
        return done


class FigureWarning(UserWarning):
    """A figure of a saved result could not be drawn; the numbers were saved."""

"""The model's data, prepared once: each companion's settings and astrometric rows, the
velocities by instrument, offsets measured from another companion, and the rows packed for
the compiled kernels.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from massfit.constants import LIGHT_DAYS_PER_PC
from massfit.errors import ConfigError, InputError, ModelError
from massfit.model.parts import AstrometryRows, KernelRows, VelocityRows, data_files, file_stem
from massfit.model.specs import DEFAULT_REFLEX_MASS_PRIOR, CompanionSpec, InstrumentSpec
from massfit.orbits.dynamics import Keplerian
from massfit.priors import Fixed, Uniform

__all__ = ["ModelData"]


class ModelData:
    """The part of OrbitModel that prepares its data (a mixin: it reads and sets the model's own attributes)."""

    def _has_velocity_of(self, name) -> bool:
        # The primary's reflex carries every companion's signal; a companion's own
        # velocities carry its own.
        if self.velocity_rows is None:
            return False
        k = list(self.companions).index(name)
        return bool(np.any(self.velocity_rows.owner == k) or np.any(self.velocity_rows.owner < 0))

    def _companion_specs(self, observations):
        primary = observations.primary
        velocities = observations.velocities
        astrometric = ([] if self.velocity_only else
                       list(dict.fromkeys(observations.astrometry.body.tolist())))
        spectroscopic = []
        if velocities is not None:
            spectroscopic = [b for b in dict.fromkeys(velocities.body.tolist())
                             if b != primary]
        for name in spectroscopic:
            if self.velocity_only or name in astrometric:
                continue
            row = int(np.flatnonzero(velocities.body == name)[0])
            raise InputError(
                f"radial velocities of body '{name}', which has no astrometry; a joint "
                f"fit needs every companion's positions (or is '{name}' the primary? "
                f"its rows are named '{primary}')", file=velocities.file[row],
                line=int(velocities.line[row]), column="body")
        names = astrometric or spectroscopic
        if self.velocity_only and not names:
            # Only the primary's velocities: the companions are those listed, or one.
            names = list(self.spec.companions) or ["companion"]
        primary_rv = velocities is not None and bool(np.any(velocities.body == primary))
        # A listed companion without data is the first thing to say: an unlisted body
        # in the data is often the same one under another name.
        for name in self.spec.companions:
            if name not in names:
                raise ModelError(f"companion '{name}' is listed in the model ([companions."
                                 f"{name}]) but no row of the data has body '{name}'; "
                                 f"bodies in the data: {', '.join(names) or 'none'}")
        specs = {}
        for name in names:
            if name in self.spec.companions:
                comp = self.spec.companions[name]
            elif self.spec.strict_companions:
                raise self._unlisted_body(observations, name)
            else:
                comp = CompanionSpec(name)
            if comp.mass is None:
                reflex = primary_rv and not self.velocity_only
                comp = replace(comp, mass=DEFAULT_REFLEX_MASS_PRIOR if reflex
                               else Fixed(0.0))
            specs[name] = comp
        for name in astrometric:
            rows = observations.astrometry.body == name
            # Rows at one time are one epoch however many there are.
            times = observations.astrometry.time[rows].jd
            n_epochs = len(np.unique(times)) if self._distinct_epochs else len(times)
            if 2 * n_epochs < 7 and not primary_rv and name not in spectroscopic:
                raise ModelError(
                    f"{data_files(observations.astrometry.file[rows])}: "
                    f"companion '{name}' has {n_epochs} astrometric epoch(s) (distinct "
                    f"times) in {int(rows.sum())} row(s); an orbit and the central mass "
                    f"need at least 4 (7 numbers for 7 unknowns)")
        return specs

    def _check_references(self, astrometry):
        """Offsets measured from another body name a companion of this fit."""
        reference = astrometry.reference_body
        if reference is None:
            return
        for row in np.flatnonzero(reference != ""):
            if reference[row] not in self.companions:
                raise InputError(
                    f"names '{reference[row]}', which is neither the primary "
                    f"('{self.observations.primary}') nor a companion with astrometry "
                    f"({', '.join(self.companions)})", file=astrometry.file[row],
                    line=int(astrometry.line[row]), column="reference_body")
        if not self.dynamics.offsets_between_companions:
            raise ModelError(f"offsets measured from another companion (reference_body) "
                             f"need the keplerian, perturbed or n-body model, not the "
                             f"{self.dynamics.label} one")

    def _unlisted_body(self, observations, name):
        message = (f"the data have a body '{name}' that the model does not list; add "
                   f"it under [companions] or remove its rows")
        for data in (observations.astrometry, observations.velocities):
            if data is not None and np.any(data.body == name):
                row = int(np.flatnonzero(data.body == name)[0])
                return InputError(message, file=data.file[row], line=int(data.line[row]),
                                  column="body")
        return ModelError(message)

    def _prepare_velocities(self) -> VelocityRows:
        data = self.observations.velocities
        labels = np.where(data.instrument == "",
                          [f"{file_stem(f)}" for f in data.file], data.instrument)
        names = list(dict.fromkeys(labels.tolist()))
        for label in self.spec.instruments:
            if label not in names:
                raise self._missing_instrument(label)
        index = np.array([names.index(x) for x in labels], dtype=int)
        companions = list(self.companions)
        owner = np.array([-1 if b == self.observations.primary else companions.index(b)
                          for b in data.body], dtype=int)
        t = data.time.tdb.jd - self.epoch_jd
        offsets, jitters = [], []
        for j, label in enumerate(names):
            own = self.spec.instruments.get(label, InstrumentSpec())
            rv = data.rv[index == j]
            err = data.rv_err[index == j]
            spread = max(float(np.ptp(rv)), 10.0 * float(np.median(err)))
            # With frame terms the primary's velocity is frame.velocity: a free zero
            # point per instrument would be the same number again.
            offsets.append(own.offset if own.offset is not None or self.spec.frame is None
                           else Fixed(0.0))
            jitters.append(own.jitter or self.spec.jitter or Uniform(0.0, spread))
        return VelocityRows(t=t, rv=data.rv.astype(float), err2=data.rv_err ** 2,
                             instrument=index, owner=owner, labels=names,
                             t_trend=float(np.mean(t)), offsets=offsets, jitters=jitters)

    def _missing_instrument(self, label):
        rejected = [r for r in self.observations.rejected]
        where = "; ".join(f"{r.file} line {r.line}: {r.reason}" for r in rejected[:5])
        more = f" (rows rejected: {where})" if where else ""
        return ConfigError(f"instrument '{label}' has no usable radial velocities{more}; "
                           f"remove its entry or fix its rows",
                           key=f"velocities.instruments.{label}")

    def _prepare_rows(self, name) -> AstrometryRows:
        data = self.observations.astrometry
        index = np.flatnonzero(data.body == name)
        t = data.time.tdb.jd[index] - self.epoch_jd
        distance = data.distance[index]
        has_distance = np.isfinite(distance)
        if self.spec.light_time:
            t = t - np.where(has_distance, distance * LIGHT_DAYS_PER_PC, 0.0)
        length = data.length[index]
        scale = np.where(length, 1.0, np.where(has_distance, 1.0 / np.where(
            has_distance, distance, 1.0), 1.0))
        uses_parallax = ~length & ~has_distance
        polar = data.polar[index]
        corr = np.where(polar, 0.0, data.corr[index])
        return AstrometryRows(
            index=index, t=t, scale=scale, uses_parallax=uses_parallax,
            cart=np.flatnonzero(~polar), polar=np.flatnonzero(polar),
            east=data.east[index][~polar], north=data.north[index][~polar],
            east_err=data.east_err[index][~polar], north_err=data.north_err[index][~polar],
            corr=corr[~polar], corr_factor=1.0 / np.sqrt(1.0 - corr[~polar] ** 2),
            sep=data.sep[index][polar], sep_err=data.sep_err[index][polar],
            pa=data.pa[index][polar], pa_err=data.pa_err[index][polar],
            sight=None if self.sight is None else self.sight.select(index),
            reference=(None if data.reference_body is None
                       or not np.any(data.reference_body[index] != "")
                       else data.reference_body[index]),
        )

    def _pack_for_kernel(self):
        """Each companion's rows as the fused compiled chi^2 takes them, or None.

        Only plain two-body astrometry goes through the fused kernel: velocities, other
        dynamics and the Romer delay keep the general path (the same sums, assembled
        from the residual arrays).
        """
        if (self.velocity_rows is not None or type(self.dynamics) is not Keplerian
                or getattr(self.spec, "romer_delay", False) or self.sight is not None
                or self.spec.frame is not None or self.spec.relativity is not None
                or any(rows.reference is not None for rows in self.rows.values())):
            return None
        return self.packed_rows()

    def packed_rows(self) -> dict:
        """Each companion's astrometry as the compiled kernels take it: east/north rows
        first, then sep/pa, times from the companion's reference epoch."""
        packs = {}
        for name, rows in self.rows.items():
            order = np.concatenate([rows.cart, rows.polar])
            n_polar = rows.polar.size
            packs[name] = KernelRows(
                dt=np.ascontiguousarray(rows.t[order] - self.reference_epoch(name)),
                scale=np.ascontiguousarray(rows.scale[order], dtype=float),
                uses_parallax=np.ascontiguousarray(rows.uses_parallax[order]),
                n_cart=int(rows.cart.size),
                obs1=np.concatenate([rows.east, rows.sep]),
                obs2=np.concatenate([rows.north, rows.pa]),
                err1=np.concatenate([rows.east_err, rows.sep_err]),
                err2=np.concatenate([rows.north_err, rows.pa_err]),
                corr=np.concatenate([rows.corr, np.zeros(n_polar)]),
                corr_factor=np.concatenate([rows.corr_factor, np.ones(n_polar)]))
        return packs

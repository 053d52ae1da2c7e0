"""One compiled log-posterior for the models people run most.

Two-body relative astrometry, with or without radial velocities, or radial velocities
alone (the semi-amplitudes then parameters themselves), the parallax sampled or fixed,
the priors and the sampler's change of coordinates
(:mod:`massfit.sample.reparameterisation`) go from the sampled coordinates of all
walkers to their log-posteriors in one call of a numba kernel
(:mod:`massfit.orbits._posterior_numba`), the walkers shared among threads.
:meth:`OrbitModel.log_prob <massfit.model.orbit_model.OrbitModel.log_prob>` takes this
path by itself where the model qualifies (:func:`compiled_posterior` says why not
otherwise) and the Python path, ``OrbitModel.log_prob_python``, stays the reference:
tests/test_compiled_posterior.py compares the two to 1e-12.

A per-row line of sight (a moving observer: the orbit in ICRS axes, each row projected
onto the tangent plane at the primary, with the light time along it) is compiled too.

Models that do not qualify keep the general path: other dynamics
(J2, integrated pulls), the light time across the system, apparent offsets,
offsets measured from another companion, any setting of the model this module does not
know (so terms added to the model later fall back until they are compiled here), and
priors other than uniform, log-uniform and normal.
"""

from __future__ import annotations

import copy
import dataclasses
import os
import threading
from typing import NamedTuple

import numpy as np

from massfit.orbits import kepler
from massfit.model.specs import DEFAULT_SEMI_AMPLITUDE_PRIOR
from massfit.orbits.dynamics import Keplerian
from massfit.priors import LogUniform, Normal, Uniform

__all__ = ["CompiledPosterior", "compiled_posterior", "why_not_compiled", "on_threads",
           "thread_count", "THREADS_FROM_WORK"]

#: SystemSpec fields and their meaning the compiled path knows. A field added later
#: (a new term of the model) sends the model to the Python path unless it has its
#: default value.
KNOWN_SETTINGS = frozenset({
    "primary", "central_mass", "parallax", "companions", "light_time",
    "strict_companions", "trend", "slope", "curvature", "jitter", "instruments",
    "romer_delay", "dynamics", "compare_keplerian", "viewing"})

_TRANSFORMS = {"identity": 0, "log10": 1, "cos": 2, "disc": 3}
_PRIORS = {Uniform: 0, LogUniform: 1, Normal: 2}


def why_not_compiled(model, *, any_dynamics=False) -> str | None:
    """Why ``model`` takes the Python path (a short phrase), or None if it qualifies
    (``any_dynamics``: whatever its dynamics, for the two-body part of a surrogate)."""
    if kepler.numba_kernel is None:
        return "numba is not installed"
    spec = model.spec
    for item in dataclasses.fields(spec):
        if item.name not in KNOWN_SETTINGS and getattr(spec, item.name) != _default(item):
            return f"the model setting '{item.name}' is not compiled"
    if type(model.dynamics) is not Keplerian and not any_dynamics:
        return f"the {model.dynamics.label} dynamics"
    if spec.romer_delay:
        return "the light time across the system"
    if model.sight is not None and model.sight.apparent is not None:
        return "apparent offsets (differential aberration)"
    if any(rows.reference is not None for rows in model.rows.values()):
        return "offsets from another companion"
    for k in model.prior_plan.varying:
        param = model.parameters[k]
        if param.transform not in _TRANSFORMS or type(param.prior) not in _PRIORS:
            return f"the prior of {param.name}"
    return None


def _default(item):
    if item.default is not dataclasses.MISSING:
        return item.default
    if item.default_factory is not dataclasses.MISSING:
        return item.default_factory()
    return None


def compiled_posterior(model):
    """The compiled log-posterior of ``model``, or None where it does not qualify."""
    if why_not_compiled(model) is not None:
        return None
    return CompiledPosterior(model)


class KernelTables(NamedTuple):
    """The compiled log-posterior's tables (after a walker's coordinates) and the rows
    one walker's evaluation reads."""

    tables: tuple
    work_per_walker: int


class CompiledPosterior:
    """The model packed into the kernel's tables; call it with coordinates (n, n_dim).

    Parameters
    ----------
    model : OrbitModel
        A model that qualifies (:func:`why_not_compiled` is None). The angle windows
        are read from the model at each call (the start moves them).
    """

    def __init__(self, model):
        self.model = model
        column = model.column_of
        n_comp = len(model.companions)
        comp_i = np.full((n_comp, 16), -1, dtype=np.int64)
        comp_i[:, 12:16:2] = 0  # no semi-amplitude columns (kind 0) unless velocities alone
        comp_f = np.zeros((n_comp, 4))
        rows, first = [], 0
        packs = model.packed_rows()
        for k, (name, comp) in enumerate(model.companions.items()):
            for slot, kind in enumerate(("log10_period", "sqrt_e_cos_w", "sqrt_e_sin_w",
                                         "omega", "cos_inc", "node", "phase")):
                comp_i[k, slot] = column.get(f"{name}.{kind}", -1)
            if model.velocity_only:  # the semi-amplitudes are parameters (km/s)
                prior = comp.semi_amplitude or DEFAULT_SEMI_AMPLITUDE_PRIOR
                for slot, kind in ((12, "k_primary"), (14, "k_companion")):
                    if f"{name}.{kind}" in column or f"{name}.log10_{kind}" in column:
                        comp_i[k, slot + 1], comp_i[k, slot] = _scale_slot(
                            column, f"{name}.{kind}", prior)
                comp_i[k, 7:9] = -1, 0
            else:
                comp_i[k, 7:9] = _scale_slot(column, f"{name}.mass", comp.mass)
            comp_f[k] = (comp.eccentricity.value if comp.eccentricity.is_fixed else 0.0,
                         comp.inclination.value if comp.inclination is not None
                         and comp.inclination.is_fixed else 0.0,
                         comp.mass.value if comp.mass.is_fixed and not model.velocity_only
                         else 0.0,
                         model.reference_epoch(name))
            pack = packs.get(name)
            size = 0 if pack is None else pack.dt.size
            comp_i[k, 9:12] = first, first + (0 if pack is None else pack.n_cart), first + size
            first += size
            if pack is not None:
                rows.append(pack)
        self.comp_i, self.comp_f = comp_i, comp_f
        self.rows = np.ascontiguousarray(np.array([np.concatenate(
            [getattr(p, key) for p in rows] or [np.zeros(0)]) for key in (
                "dt", "scale", "obs1", "obs2", "err1", "err2", "corr", "corr_factor")],
            dtype=float).reshape(8, first))
        self.uses_parallax = np.concatenate(
            [p.uses_parallax for p in rows] or [np.zeros(0, dtype=bool)]).astype(bool)
        self.sight = np.zeros((10, 0))
        if model.sight is not None:  # per row, in the order of the packed rows
            parts = []
            for name in (n for n in model.companions if n in model.rows):
                own = model.rows[name]
                part = own.sight.select(np.concatenate([own.cart, own.polar]))
                parts.append(np.vstack([part.toward.T, part.east.T, part.north.T,
                                        part.distance[None, :]]))
            self.sight = np.ascontiguousarray(np.hstack(parts), dtype=float)
        spec = model.spec
        plx = spec.parallax
        self.glob_i = np.array([column.get("central.log10_mass", -1),
                                column.get("parallax", -1), int(model.needs_parallax),
                                column.get("rv.trend.slope", -1),
                                column.get("rv.trend.curvature", -1),
                                int(model.velocity_only), int(model.sight is not None),
                                int(bool(getattr(spec, "light_time", True)))],
                               dtype=np.int64)
        self.glob_f = np.array([
            spec.central_mass.value if spec.central_mass.is_fixed else 0.0,
            plx.value if plx is not None and plx.is_fixed else 0.0,
            model.log_normalisation, 0.0, 0.0, 0.0, model.prior_plan.constant])
        self._velocities(model)
        self._priors(model)
        self._window_key = None
        #: A linear correction (theta0, power, mix, base, slope): see
        #: :mod:`massfit.model.surrogate`; empty here.
        self.linear = _NO_LINEAR

    def _velocities(self, model):
        vel = model.velocity_rows
        if vel is None:
            self.vel = np.zeros((3, 0))
            self.vel_i = np.zeros((2, 0), dtype=np.int64)
            self.inst_i = np.zeros((0, 3), dtype=np.int64)
            self.inst_f = np.zeros((0, 2))
            return
        self.vel = np.ascontiguousarray(np.vstack([vel.t, vel.rv, vel.err2]), dtype=float)
        self.vel_i = np.ascontiguousarray(np.vstack([vel.instrument, vel.owner]),
                                          dtype=np.int64)
        self.inst_i = np.full((len(vel.labels), 3), -1, dtype=np.int64)
        self.inst_f = np.zeros((len(vel.labels), 2))
        for j, label in enumerate(vel.labels):
            offset = vel.offsets[j]
            if offset is not None and offset.is_fixed:
                self.inst_f[j, 0] = offset.value
            else:
                self.inst_i[j, 0] = model.column_of[f"rv.{label}.offset"]
            self.inst_i[j, 1:] = _scale_slot(model.column_of, f"rv.{label}.jitter",
                                             vel.jitters[j])
            self.inst_f[j, 1] = vel.jitters[j].value if vel.jitters[j].is_fixed else 0.0
        self.glob_f[3] = vel.t_trend
        for slot, term in ((4, "slope"), (5, "curvature")):
            prior = getattr(model.spec, term)
            used = model.trend_has(term) and prior is not None
            if f"rv.trend.{term}" not in model.column_of and used:
                self.glob_f[slot] = prior.value

    def _priors(self, model):
        plan = model.prior_plan
        self.low, self.high = plan.low.astype(float), plan.high.astype(float)
        self.discs_i = np.array([d[:2] for d in plan.discs], dtype=np.int64).reshape(-1, 2)
        self.discs_f = np.array([d[2:] for d in plan.discs], dtype=float).reshape(-1, 2)
        var_i, var_f = [], []
        for k in plan.varying:
            param = model.parameters[k]
            prior = param.prior
            partner = (model.column_of[param.name.replace("cos_w", "sin_w")]
                       if param.transform == "disc" else -1)
            var_i.append((k, _TRANSFORMS[param.transform], _PRIORS[type(prior)], partner))
            var_f.append(_prior_numbers(prior) + (param.low, param.high))
        self.var_i = np.array(var_i, dtype=np.int64).reshape(-1, 4)
        self.var_f = np.array(var_f, dtype=float).reshape(-1, 7)

    def likelihood_only(self):
        """A copy that gives the log-likelihood (its normalisation included) instead of
        the log-posterior: the prior's densities and constant left out, its support
        (box, sqrt(e) discs, angle windows) kept, -inf outside it. For samplers that
        draw from the prior themselves (nested sampling); one row costs about 10 us
        against about 1 ms on the Python path."""
        out = copy.copy(self)
        out.var_i = np.zeros((0, 4), dtype=np.int64)
        out.var_f = np.zeros((0, 7))
        out.glob_f = self.glob_f.copy()
        out.glob_f[6] = 0.0  # the prior's constant (the kernel's GF_CONST)
        return out

    @property
    def available(self) -> bool:
        """False where the compiled kernel was switched off (``kepler.numba_kernel``)."""
        return kepler.numba_kernel is not None

    def window_key(self) -> tuple:
        """The model's window centres now (the start moves them)."""
        return tuple((c["node"], c["phase"]) for c in self.model.centres.values())

    def windows(self, key=None):
        """(columns, [low, high) rows) of the angle windows, as the model has them now
        (``key``: :meth:`window_key`, where the caller has it)."""
        model = self.model
        key = self.window_key() if key is None else key
        if key != self._window_key:
            cols, bounds = [], []
            for k, param in enumerate(model.parameters):
                if param.transform == "window" and not param.name.endswith(".omega"):
                    cols.append(k)
                    bounds.append(model.window(*param.name.rsplit(".", 1)))
            self._windows = (np.array(cols, dtype=np.int64),
                             np.array(bounds, dtype=float).reshape(-1, 2))
            self._window_key = key
        return self._windows

    def kernel_tables(self, change=None, *, window_key=None) -> KernelTables:
        """:meth:`arguments` with the work of one walker's evaluation, for compiled
        code that calls ``walker_log_posterior`` itself."""
        return KernelTables(self.arguments(change, window_key=window_key),
                            self.work_per_walker)

    def arguments(self, change=None, *, window_key=None) -> tuple:
        """The kernel's tables after the coordinates: what
        ``_posterior_numba.log_posterior`` takes after ``(sampled, out)`` and
        ``walker_log_posterior`` after one walker's coordinates. ``change`` and
        ``window_key`` as in :meth:`__call__`."""
        if change is None:
            change = _NO_CHANGE
        win_i, win_f = self.windows(window_key)
        return (self.comp_i, self.comp_f, self.glob_i, self.glob_f, self.rows,
                self.uses_parallax, self.sight, self.vel, self.vel_i, self.inst_i,
                self.inst_f, self.low, self.high, self.discs_i, self.discs_f, win_i, win_f,
                self.var_i, self.var_f, *change, *self.linear)

    def __call__(self, sampled, change=None, *, window_key=None):
        """Log-posterior of each row of ``sampled`` (n, n_dim), -inf outside the support.

        ``change`` holds the sampler's change of coordinates as the kernel's tables
        ``(lon_i, lon_f, st_i, st_f, st_comp, angular_i, mass_i)``
        (:meth:`massfit.sample.reparameterisation.SamplerCoordinates.compiled_tables`);
        None for the model's own coordinates.
        """
        sampled = np.ascontiguousarray(np.atleast_2d(sampled), dtype=float)
        out = np.empty(sampled.shape[0])
        _use_threads(sampled.shape[0] * self.work_per_walker)
        kepler.posterior_kernel.log_posterior(
            sampled, out, *self.arguments(change, window_key=window_key))
        return out

    @property
    def work_per_walker(self) -> int:
        """Rows one walker's evaluation reads (what decides the threads' worth)."""
        return int(self.rows.shape[1] + self.vel.shape[1])


_NO_CHANGE = (np.zeros((0, 6), dtype=np.int64), np.zeros((0, 3)),
              np.zeros((0, 6), dtype=np.int64), np.zeros((0, 6)),
              np.zeros(0, dtype=np.int64), np.full(2, -1, dtype=np.int64),
              np.zeros(0, dtype=np.int64))


_NO_LINEAR = (np.zeros(0), np.zeros(0, dtype=np.int64), np.zeros((0, 0)),
              np.zeros((2, 0)), np.zeros((2, 0, 0)), np.zeros((0, 0, 0)),
              np.zeros((2, 0, 0)))


def _scale_slot(column, name, prior):
    """(column, kind) of a positive quantity: kind 0 fixed, 1 sampled, 2 as log10."""
    if prior.is_fixed:
        return -1, 0
    if isinstance(prior, LogUniform):
        body, kind = name.rsplit(".", 1)
        return column[f"{body}.log10_{kind}"], 2
    return column[name], 1


def _prior_numbers(prior):
    """(mean, log log(high/low) or sd, low, high, log(sd sqrt(2 pi))): what the kernel's
    densities need, computed as :mod:`massfit.priors` computes them."""
    if isinstance(prior, Normal):
        return (prior.mean, prior.sd, prior.low, prior.high,
                float(np.log(prior.sd * np.sqrt(2.0 * np.pi))))
    if isinstance(prior, LogUniform):
        return (0.0, float(np.log(np.log(prior.high / prior.low))), prior.low, prior.high,
                0.0)
    return (0.0, 0.0, prior.low, prior.high, 0.0)


#: Below this many walker-rows in one call, threads cost more than they save. With
#: libgomp's threads spinning between calls (see massfit/__init__.py) the Tarrant set's
#: chain (27 walkers x 230 rows a call) ran 1.6-1.7x faster on two threads than on
#: one (benchmarks/RESULTS.md, threads); before, when they slept, 2.4x slower.
THREADS_FROM_WORK = 5_000

_requested = threading.local()


def thread_count(requested=None, work=None) -> int:
    """Threads the compiled kernel uses: ``requested``, or where None every core
    numba was started with if a call's ``work`` (walkers x rows) is at least
    :data:`THREADS_FROM_WORK` (or unknown), else one."""
    try:
        import numba
    except ImportError:  # pragma: no cover
        return 1
    most = int(numba.config.NUMBA_NUM_THREADS)
    if requested is None:
        if work is not None and work < THREADS_FROM_WORK:
            return 1
        requested = os.cpu_count() or 1
    return max(1, min(int(requested), most))


def on_threads(log_prob, requested=None):
    """``log_prob`` with the compiled kernel on ``requested`` threads (None: as
    :func:`thread_count` decides per call)."""

    def threaded(theta):
        _requested.count = requested
        try:
            return log_prob(theta)
        finally:
            _requested.count = None

    return threaded


def _use_threads(work):
    use_threads(getattr(_requested, "count", None), work)


def use_threads(requested, work):
    """Set numba's threads for the calling thread as :func:`thread_count` decides."""
    # numba's thread count belongs to the calling thread: set it where it changes
    # (setting it costs more than the rest of this function).
    count = thread_count(requested, work)
    if getattr(_requested, "set", None) != count:
        import numba

        numba.set_num_threads(count)
        _requested.set = count

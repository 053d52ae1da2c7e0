"""Nested sampling (dynesty): the evidence, and the weight of each separated mode.

emcee's walkers do not cross between separated modes of the posterior (period aliases,
a short arc that several periods fit), so they cannot weigh them. Nested sampling
integrates the posterior mass instead: it gives the evidence

    Z = integral of p(data | theta) p(theta) dtheta

with its error, and posterior samples weighted by it. Single runs over the whole
period range lose whole modes on sparse data (their live points leave a narrow mode
before it is found), so where the start found several modes
(:mod:`massfit.start.modes`) each mode is integrated on its own, with every period
prior cut to the mode's box (:func:`massfit.start.modes.period_box`):

    Z_k = Z(box k) * P(box k),   P(box k) = the prior probability of the box,

and the weight of mode k is Z_k / sum_j Z_j. Each box is run :attr:`NestedSettings.runs`
times with independent seeds; the runs of a box must agree within their stated errors
(:data:`AGREEMENT_SIGMAS`), or the result is not converged. What lies outside all the
boxes (where the start found no solution) is taken to hold no posterior mass.

The likelihood is the model's own (``OrbitModel.log_likelihood``, its Gaussian
normalisation included, so ln Z is absolute). The prior is the model's, drawn through
:class:`PriorTransform`, which maps dynesty's unit cube to the model's coordinates by
each prior's inverse cdf (:meth:`massfit.priors.Prior.quantile`). The model's
coordinates are used as they are; the sampler coordinates of emcee
(:mod:`massfit.sample.reparameterisation`) exist for the walkers' mixing, which nested
sampling's moves within the unit cube do not need. Improper flat priors (velocity
offsets and trends without a stated prior) have no inverse cdf: they become uniform
boxes wide enough for any orbit the data allow (:func:`flat_box`), named in the
result's notes, since the evidence depends on their width.
"""

from __future__ import annotations

import time
import warnings
from dataclasses import dataclass, field

import numpy as np

from massfit.sample import ENGINES  # noqa: F401 (named here too, for older callers)
from massfit.sample.chain import Chain
from massfit.sample.prior_transform import PriorTransform, flat_box
from massfit.sample.nested_boxes import (EDGE_LIMIT, MAX_WIDENINGS, WIDEN, boxes_of,
                                         edge_weight, in_node_half, mirror_halves,
                                         period_boxes,
                                         laplace_log_evidence, peak_margin)

__all__ = ["LIVE_PER_DIMENSION", "NestedSettings", "NestedChain", "PriorTransform", "flat_box",
           "run_nested", "boxes_of", "require_dynesty", "nested_box", "weigh_boxes",
           "periodic_columns", "AGREEMENT_SIGMAS", "ENGINES"]

#: Two runs of one box agree when their ln Z differ by at most this many combined errors.
AGREEMENT_SIGMAS = 3.0
#: Live points per sampled coordinate where none are given: on the yearly-sampled
#: Tamsin set (7 coordinates, 525 -> measured at 500) three runs per alias box agree
#: within their stated ln Z errors (0.23) and the weights match importance sampling
#: to 0.01 (docs/validation.md, "The nested sampler").
LIVE_PER_DIMENSION = 75
#: Draws from the (weighted) posterior handed on as the result's samples.
POSTERIOR_DRAWS = 20_000
#: Draws of the ln Z errors used to propagate them into the modes' weights.
ERROR_DRAWS = 4000
TWO_PI = 2.0 * np.pi


@dataclass
class NestedSettings:
    """How the nested sampler runs.

    Parameters
    ----------
    live_points : int or None
        dynesty's live points per run; None: :data:`LIVE_PER_DIMENSION` per sampled
        coordinate (:meth:`live_points_for`).
    sample : str
        dynesty's way of drawing a new live point: "rslice" (random slices) or
        "rwalk" (random walks), both from existing live points.
    dynamic : bool
        dynesty's dynamic sampler (more live points where the posterior is) instead
        of the static one.
    runs : int
        Independent runs of each mode's box (at least 1); with 2 or more they must
        agree.
    dlogz : float
        Stop when the live points could add at most this much to ln Z.
    seed : int or None
    """

    live_points: int | None = None
    sample: str = "rslice"
    dynamic: bool = False
    runs: int = 2
    dlogz: float = 0.1
    seed: int | None = None
    max_calls: int | None = None

    def live_points_for(self, n_dim: int) -> int:
        """The live points of a run over ``n_dim`` coordinates."""
        return int(self.live_points or LIVE_PER_DIMENSION * n_dim)

    def check(self, *, key_prefix: str = "", file=None) -> None:
        """Raise a ConfigError naming the first setting that cannot be used."""
        from massfit.errors import ConfigError

        for name, least in (("live_points", 20), ("runs", 1)):
            value = getattr(self, name)
            if name == "live_points" and value is None:
                continue
            if not isinstance(value, int) or isinstance(value, bool) or value < least:
                raise ConfigError(f"{name} must be a whole number of at least {least}",
                                  key=f"{key_prefix}{name}", file=file)
        if self.sample not in ("rslice", "rwalk"):
            raise ConfigError("accepted: rslice, rwalk", key=f"{key_prefix}nested_sample",
                              file=file)
        if not (isinstance(self.dlogz, (int, float)) and 0 < self.dlogz <= 10):
            raise ConfigError("dlogz must be a number in (0, 10]", key=f"{key_prefix}dlogz",
                              file=file)


@dataclass
class NestedChain(Chain):
    """A :class:`~massfit.sample.chain.Chain` made by nested sampling.

    ``samples`` are equally weighted draws from the posterior (over all modes);
    ``walkers`` holds the live points, ``steps`` the iterations of all runs, ``tau``
    ones (the draws are independent). ``evidence`` is ``log_evidence`` and
    ``log_evidence_err`` (natural log, the likelihood's normalisation included) and
    ``modes`` one entry per box (see :func:`weigh_boxes`), ``mode_members`` per box a
    boolean mask of the samples drawn from it.
    """

    evidence: dict = field(default_factory=dict)
    modes: list = field(default_factory=list)
    mode_members: list = field(default_factory=list)
    engine: dict = field(default_factory=dict)
    notes: list = field(default_factory=list)
    kish_samples: float = 0.0

    def effective_samples(self, k: int = 0) -> float:
        """Kish's effective sample size of the importance weights (all coordinates)."""
        return float(self.kish_samples)


def _log_likelihood(model):
    """log p(data | theta) of one point, finite (dynesty's need): the compiled kernel
    without the prior's densities where the model qualifies (about 10 us a call), else
    the model's Python path (about 1 ms)."""
    compiled = getattr(model, "compiled", None)
    if compiled is not None and compiled.available:
        kernel = compiled.likelihood_only()

        def log_like(theta):
            value = float(kernel(theta[None, :])[0])
            return value if np.isfinite(value) else -1e300
        return log_like

    def log_like(theta):
        value = float(model.log_likelihood(theta[None, :])[0])
        # dynesty wants a finite number; -1e300 is below any live point.
        return value if np.isfinite(value) else -1e300
    return log_like


def periodic_columns(model) -> list:
    """Columns whose window is a whole turn (phases, a free node with velocities, a
    fixed-eccentricity omega): dynesty wraps them, so a mode across the window's
    edge stays one piece. A half-turn node window (astrometry alone) is no period of
    the likelihood by itself (it comes with omega + pi) and is not among them."""
    out = []
    for k, param in enumerate(model.parameters):
        if param.transform != "window":
            continue
        body, which = param.name.rsplit(".", 1)
        if which != "node" or model.node_width[body] >= TWO_PI:
            out.append(k)
    return out


def require_dynesty():
    """The dynesty module, or a ConfigError that says how to install it."""
    try:
        import dynesty
    except ImportError:
        from massfit.errors import ConfigError

        raise ConfigError('the nested sampler needs dynesty: pip install "massfit[nested]"',
                          key="sampler") from None
    return dynesty


def _sample(model, transform, settings, common):
    """dynesty's sampler, run to its stopping rule."""
    dynesty = require_dynesty()

    periodic = [k for k in periodic_columns(model) if k not in transform.bounded]
    common = dict(common, periodic=periodic or None)
    live = settings.live_points_for(model.n_dim)
    if settings.dynamic:
        sampler = dynesty.DynamicNestedSampler(_log_likelihood(model), transform,
                                               model.n_dim, **common)
        sampler.run_nested(nlive_init=live, dlogz_init=settings.dlogz,
                           maxcall=settings.max_calls, print_progress=False)
    else:
        sampler = dynesty.NestedSampler(_log_likelihood(model), transform, model.n_dim,
                                        nlive=live, **common)
        sampler.run_nested(dlogz=settings.dlogz, maxcall=settings.max_calls,
                           print_progress=False)
    return sampler


def nested_box(model, settings, seed, boxes=None, centres=None) -> dict:
    """One dynesty run over the prior (with the periods of ``boxes`` cut to them).

    ``centres`` (companion -> {"node", "phase"}, the mode's own) centres the angle
    windows on the mode during the run, so that its posterior does not straddle a
    window's edge (the start centres them on the heaviest mode only); the samples
    are folded back into the model's windows after it.

    Returns
    -------
    dict
        ``log_z`` (of the box's own renormalised prior), ``log_z_err``,
        ``log_box_mass``, ``samples`` (model coordinates), ``weights`` (normalised),
        ``iterations``, ``calls``, ``seconds``, ``efficiency`` (%), ``notes``
        (the improper priors' boxes, and dynesty's own warnings, once each).
    """
    kept = {name: dict(c) for name, c in getattr(model, "centres", {}).items()}
    try:
        for name, centre in (centres or {}).items():
            model.centres[name].update(centre)
        for key, (low, high) in (boxes or {}).items():
            if key.endswith(".node"):  # the node's window about its half
                model.centres[key.split(".")[0]]["node"] = 0.5 * (low + high)
        transform = PriorTransform(model, boxes)
        rng = np.random.default_rng(seed)
        started = time.perf_counter()
        common = dict(sample=settings.sample, bound="multi", rstate=rng)
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            sampler = _sample(model, transform, settings, common)
    finally:
        for name, centre in kept.items():
            model.centres[name].update(centre)
    res = sampler.results
    weights = np.exp(res.logwt - res.logz[-1])
    calls = int(np.sum(res.ncall))
    return {"log_z": float(res.logz[-1]), "log_z_err": float(res.logzerr[-1]),
            "log_box_mass": transform.log_box_mass,
            "samples": (model.fold_into_windows(np.asarray(res.samples)) if kept
                        else np.asarray(res.samples)),
            "weights": weights / weights.sum(), "iterations": int(res.niter),
            "max_log_like": float(np.max(res.logl)),
            "calls": calls, "seconds": time.perf_counter() - started,
            "efficiency": float(res.eff),
            "reached_dlogz": settings.max_calls is None or calls < settings.max_calls,
            "notes": transform.notes + sorted({f"dynesty: {w.message}" for w in caught})}


def weigh_boxes(runs, *, seed=None, agreement=AGREEMENT_SIGMAS) -> dict:
    """Each box's evidence over its runs, the boxes' weights with errors, the total.

    Parameters
    ----------
    runs : list of list of dict
        Per box, its runs (:func:`nested_box`).

    Returns
    -------
    dict
        ``log_evidence``, ``log_evidence_err`` (the sum over the boxes), ``boxes``:
        per box ``log_z`` (with the box's prior probability, the runs averaged),
        ``log_z_err``, ``log_z_runs``, ``log_z_err_runs``, ``runs_agree``,
        ``probability``, ``probability_err``, ``probability_runs`` (the weights each
        set of runs alone gives).
    """
    from scipy.special import logsumexp

    boxes = []
    for box_runs in runs:
        values = np.array([r["log_z"] + r["log_box_mass"] for r in box_runs])
        errors = np.array([r["log_z_err"] for r in box_runs])
        mean = float(np.mean(values))
        # The runs' own scatter counts too where it exceeds their stated errors.
        err = float(np.sqrt(np.mean(errors ** 2) / values.size))
        if values.size > 1:
            err = max(err, float(np.std(values, ddof=1) / np.sqrt(values.size)))
        agree = all(abs(a - b) <= agreement * np.hypot(ea, eb)
                    for i, (a, ea) in enumerate(zip(values, errors))
                    for b, eb in list(zip(values, errors))[i + 1:])
        boxes.append({"log_z": mean, "log_z_err": err, "log_z_runs": values.tolist(),
                      "log_z_err_runs": errors.tolist(), "runs_agree": bool(agree)})
    log_z = np.array([b["log_z"] for b in boxes])
    log_err = np.array([b["log_z_err"] for b in boxes])
    rng = np.random.default_rng(seed)
    draws = log_z + log_err * rng.standard_normal((ERROR_DRAWS, log_z.size))
    total = logsumexp(draws, axis=1)
    weights = np.exp(log_z - logsumexp(log_z))
    spread = np.exp(draws - total[:, None]).std(axis=0)
    n_runs = min(len(r) for r in runs)
    for j, box in enumerate(boxes):
        box["probability"] = float(weights[j])
        box["probability_err"] = float(spread[j])
        per_run = []
        for i in range(n_runs):
            lz = np.array([runs[b][i]["log_z"] + runs[b][i]["log_box_mass"]
                           for b in range(len(runs))])
            per_run.append(float(np.exp(lz[j] - logsumexp(lz))))
        box["probability_runs"] = per_run
    return {"log_evidence": float(logsumexp(log_z)),
            "log_evidence_err": float(np.std(total)), "boxes": boxes}


def _mixture(runs, probabilities, rng, draws=POSTERIOR_DRAWS):
    """Equal-weight posterior draws over all boxes, and Kish's effective size."""
    counts = rng.multinomial(draws, probabilities)
    parts, squares = [], 0.0
    for box_runs, count, p in zip(runs, counts, probabilities):
        samples = np.concatenate([r["samples"] for r in box_runs])
        weights = np.concatenate([r["weights"] / len(box_runs) for r in box_runs])
        squares += float(np.sum((p * weights) ** 2))
        if count:
            parts.append(samples[rng.choice(samples.shape[0], size=count, p=weights)])
    return np.concatenate(parts), 1.0 / squares


def run_nested(model, start, settings: NestedSettings, checkpoint=None) -> NestedChain:
    """Nested sampling of the model's posterior, mode by mode where the start found
    several (see the module notes); the result as a :class:`NestedChain`.

    With ``checkpoint`` (:mod:`massfit.sample.checkpoint`) each finished run is saved
    beside it, and runs saved there by an interrupted fit with the same settings are
    taken instead of repeated (each run's seed is fixed by the fit's).
    """
    dynesty = require_dynesty()

    started = time.perf_counter()
    seeds = np.random.SeedSequence(settings.seed).spawn(64)
    plan, runs, box_notes = _planned_runs(model, start, settings, seeds, checkpoint)
    weighed = weigh_boxes(runs, seed=settings.seed)
    probabilities = np.array([b["probability"] for b in weighed["boxes"]])
    rng = np.random.default_rng(seeds[-1])
    samples, kish = _mixture(runs, probabilities, rng)
    modes = []
    for (mode, boxes), box in zip(plan, weighed["boxes"]):
        entry = dict(box, period_boxes_days={n: list(b)
                                             for n, b in period_boxes(boxes).items()})
        halves = {n.split(".")[0]: float(np.degrees(np.mean(b)) % 360.0)
                  for n, b in boxes.items() if n.endswith(".node")}
        if halves:  # a mirror image: its half of the node circle, by its middle
            entry["node_half_centre_deg"] = halves
        if mode is not None:
            entry["start_periods"] = dict(mode["periods"])
            entry["laplace_weight"] = mode["weight"]
        modes.append(entry)
    flat = [r for box_runs in runs for r in box_runs]
    check = _start_check(model, start, plan, runs)
    converged = (all(b["runs_agree"] for b in weighed["boxes"])
                 and all(r["reached_dlogz"] for r in flat) and check["peak_reached"])
    live = settings.live_points_for(model.n_dim)
    engine = {"engine": "nested", "library": f"dynesty {dynesty.__version__}",
              "sampler": "dynamic" if settings.dynamic else "static",
              "sample": settings.sample, "live_points": live,
              "runs_per_box": settings.runs, "dlogz": settings.dlogz,
              "boxes": len(plan), "likelihood_calls": int(sum(r["calls"] for r in flat)),
              "convergence_basis": (
                  "every run stopped by its dlogz rule and, per box, the runs' ln Z "
                  f"agree within {AGREEMENT_SIGMAS:g} combined errors")}
    chain = NestedChain(
        samples=samples, log_prob=model.log_prob(samples),
        steps=int(sum(r["iterations"] for r in flat)), walkers=live,
        tau=np.ones(model.n_dim), converged=bool(converged), burn_in=0, thin=1,
        acceptance_fraction=float(np.mean([r["efficiency"] for r in flat]) / 100.0),
        seconds=time.perf_counter() - started, tau_history=[],
        evidence={"log_evidence": weighed["log_evidence"],
                  "log_evidence_err": weighed["log_evidence_err"], **check},
        modes=modes, mode_members=[_member_mask(model, samples, b) for _, b in plan],
        engine=engine, notes=list(dict.fromkeys(
            box_notes + [n for r in flat for n in r["notes"]] + check.pop("notes"))),
        kish_samples=kish)
    return chain


def _planned_runs(model, start, settings, seeds, checkpoint):
    """The boxes and their runs. A single solution's box whose posterior reaches its
    edges is widened and run again (:mod:`massfit.sample.nested_boxes`), at last
    replaced by the whole prior; the notes say so."""
    notes, factor = [], 1.0
    for widening in range(MAX_WIDENINGS + 2):
        plan = boxes_of(start, model, factor)
        if widening > MAX_WIDENINGS:
            plan = mirror_halves([(None, {})], model)
        runs = _box_runs(model, settings, plan, seeds, checkpoint)
        boxes = period_boxes(plan[0][1])
        if any(mode is not None for mode, _ in plan) or not boxes:
            return plan, runs, notes
        share = max(edge_weight(model, box_runs, boxes) for box_runs in runs)
        if share <= EDGE_LIMIT:
            return plan, runs, notes
        text = ", ".join(f"{n} {lo:.8g}-{hi:.8g} d" for n, (lo, hi) in boxes.items())
        notes.append(f"the period box about the start's solution ({text}) held "
                     f"{share:.2g} of the posterior near its edges: "
                     + (f"widened by a factor {WIDEN:g}" if widening < MAX_WIDENINGS
                        else "the whole prior used instead"))
        factor *= WIDEN
    raise AssertionError("unreachable")


def _start_check(model, start, plan, runs) -> dict:
    """The runs against the start's least-squares solution: the Laplace ln Z about it
    and whether the box holding it reached its likelihood (see
    :mod:`massfit.sample.nested_boxes`)."""
    if getattr(start, "theta", None) is None:
        return {"peak_reached": True, "notes": []}
    own_boxes = [b for b, (mode, _) in enumerate(plan)
                 if mode is None or mode.get("started")] or [0]
    # (runs saved by an older version carry no best ln L: not checked then)
    best = max(r.get("max_log_like", np.inf) for b in own_boxes for r in runs[b])
    own = float(model.log_likelihood(np.asarray(start.theta, dtype=float)[None, :])[0])
    margin = peak_margin(model.n_dim)
    reached = bool(not np.isfinite(own) or best >= own - margin)
    best = best if np.isfinite(best) else None
    notes = [] if reached else [
        f"the nested runs' best ln L ({best:.6g}) stayed {own - best:.3g} below the "
        f"start's least-squares solution ({own:.6g}; allowed {margin:g}): they did not "
        "find the posterior's peak, so ln Z and the weights are not measured"]
    return {"laplace_log_evidence": laplace_log_evidence(model, start, PriorTransform(model)),
            "laplace_basis": ("Laplace approximation about the start's least-squares "
                              "solution, the proper prior's density included"),
            "start_log_likelihood": own if np.isfinite(own) else None,
            "best_log_likelihood": best, "peak_reached": reached, "notes": notes}


def _box_runs(model, settings, plan, seeds, checkpoint):
    """Per box, its runs: taken from the checkpoint where saved with the same seed,
    live points, move and box, else run (and saved)."""
    from massfit.sample.checkpoint import read_nested_runs, write_nested_run

    saved = read_nested_runs(checkpoint) if checkpoint is not None else {}
    live = settings.live_points_for(model.n_dim)
    runs, k = [], 0
    for b, (mode, boxes) in enumerate(plan):
        box_runs = []
        for r in range(settings.runs):
            seed = int(seeds[k % 64].generate_state(1)[0])
            k += 1
            key = {"seed": seed, "live_points": live, "sample": settings.sample,
                   "dynamic": settings.dynamic, "dlogz": settings.dlogz,
                   "boxes": {n: list(v) for n, v in boxes.items()}}
            old = saved.get((b, r))
            if old is not None and old.get("key") == key:
                box_runs.append(old)
                continue
            centres = None if mode is None else mode.get("window_centres")
            record = dict(nested_box(model, settings, seed, boxes, centres), key=key)
            if checkpoint is not None:
                write_nested_run(checkpoint, b, r, record)
            box_runs.append(record)
        runs.append(box_runs)
    return runs


def _member_mask(model, samples, boxes):
    """Which samples lie in the period boxes (all True without boxes)."""
    inside = np.ones(samples.shape[0], dtype=bool)
    for key, half in boxes.items():
        if key.endswith(".node"):
            inside &= in_node_half(samples[:, model.column_of[key]], half)
    for name, (low, high) in period_boxes(boxes).items():
        period = 10.0 ** samples[:, model.column_of[f"{name}.log10_period"]]
        inside &= (period >= low) & (period <= high)
    return inside

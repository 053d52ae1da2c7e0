"""The compiled log-posterior gives the Python path's numbers.

The reference is the general path (``OrbitModel.log_prob_python`` and
``SamplerCoordinates.log_prob_python``: numpy, written from the conventions); the
compiled kernel (massfit/model/compiled_posterior.py) must agree with it to 1e-12
relative on every walker, give -inf exactly where it does, and refuse the models it
does not cover. Configurations: east/north and sep/pa rows with a sampled parallax
(normal prior), the same with the parallax fixed, per-row distances (no parallax),
astrometry with radial velocities of both stars (jitter, offsets, a sampled companion
mass), priors that are not flat where they are sampled, the sampler's sky-fixed angles
and state vectors, points on the edges of the priors and outside them.
"""

from dataclasses import dataclass, replace

import numpy as np
import pytest
from test_speed_paths import _model as speed_paths_model

from massfit.model.compiled_posterior import compiled_posterior, why_not_compiled
from massfit.model.orbit_model import OrbitModel
from massfit.model.specs import SystemSpec
from massfit.orbits import kepler
from massfit.priors import Fixed, LogUniform, Normal, Uniform
from massfit.sample.reparameterisation import SamplerCoordinates
from massfit.start.search import parameter_bounds

pytestmark = pytest.mark.skipif(kepler.numba_kernel is None,
                                reason="the compiled path needs numba")

RTOL = 1e-12


def _model(example, *, fixed_plane=False, system_changes=None, velocities_only=False,
           primary_only=False, **companion_priors):
    model = speed_paths_model(example, fixed_plane=fixed_plane, **companion_priors)
    if system_changes:
        model = OrbitModel(model.observations, replace(model.spec, **system_changes))
    if velocities_only:  # the same velocities without the visual orbit
        obs = replace(model.observations, astrometry=None)
        if primary_only:  # a single-lined binary: the primary's reflex alone
            obs = replace(obs, velocities=obs.velocities.select(
                obs.velocities.body == obs.primary))
        model = OrbitModel(obs, model.spec)
    return model


def _points(model, n=600, seed=0):
    """Points straddling every bound (inside and outside both occur), a few of them
    exactly on the edges of the priors."""
    low, high = parameter_bounds(model)
    low = np.where(np.isfinite(low), low, -3.0)
    high = np.where(np.isfinite(high), high, 3.0)
    rng = np.random.default_rng(seed)
    theta = low + (high - low) * rng.uniform(-0.02, 1.02, (n, model.n_dim))
    plan = model.prior_plan
    for k in range(model.n_dim):  # edges: each coordinate on its box's bounds in turn
        for row, edge in ((2 * k, plan.low[k]), (2 * k + 1, plan.high[k])):
            if np.isfinite(edge) and row < n:
                theta[row, k] = edge
    return theta


def _assert_same(fast, reference):
    assert np.array_equal(np.isfinite(fast), np.isfinite(reference))
    assert np.all(fast[~np.isfinite(fast)] == -np.inf)
    finite = np.isfinite(reference)
    assert 0 < np.sum(finite) < len(reference)  # both inside and outside the support
    assert np.allclose(fast[finite], reference[finite], rtol=RTOL, atol=0.0)


CONFIGURATIONS = {
    # sep/pa and east/north rows, angular, parallax sampled with a normal prior,
    # a normal prior on the companion's mass
    "mirren": dict(example="mirren"),
    "mirren, parallax fixed": dict(example="mirren",
                                   system_changes={"parallax": Fixed(41.3)}),
    # per-row distances: no parallax at all
    "orvane on a fixed plane": dict(example="orvane", fixed_plane=True),
    # seen by a moving observer: a line of sight per row, the light time along it
    "orvane": dict(example="orvane"),
    "orvane without the light time": dict(example="orvane",
                                          system_changes={"light_time": False}),
    # velocities of both stars with the visual orbit: offsets, jitters, the mass
    "sorrel": dict(example="sorrel"),
    "sorrel with a trend": dict(example="sorrel", system_changes={"trend": "quadratic"}),
    # priors not flat in the sampled coordinate take the per-coordinate terms
    "mirren, varying priors": dict(example="mirren", eccentricity=Normal(
        0.2, 0.1, low=0.0, high=0.95), inclination=Uniform(0.2, 1.4)),
    "sorrel, fixed e and i": dict(example="sorrel", eccentricity=Fixed(0.3),
                                  inclination=Fixed(1.1)),
    # velocities alone: both stars' semi-amplitudes, two instruments; then one star's
    # (the primary's rows only), a fixed e, a trend
    "sorrel, velocities alone": dict(example="sorrel", velocities_only=True),
    "sorrel, velocities alone, fixed e, trend": dict(
        example="sorrel", velocities_only=True, eccentricity=Fixed(0.3),
        system_changes={"trend": "quadratic"}),
    "sorrel, the primary's velocities alone": dict(example="sorrel", velocities_only=True,
                                                   primary_only=True),
}


def _near_enough(model, theta):
    """With a line of sight, the points whose orbits stay within a tenth of the
    observer's distance: farther out, D + d.r nears zero in the projection and both
    paths' last-digit differences (numpy's and libm's sines) grow without bound."""
    if model.sight is None:
        return theta
    phys = model.physical(theta, lenient=True)
    reach = np.max([orbit["semi_major_axis"] * (1.0 + orbit["ecc"])
                    for orbit in phys["companions"].values()], axis=0)
    return theta[~(reach > 0.1 * np.min(model.sight.distance))]


@pytest.mark.parametrize("name", list(CONFIGURATIONS))
def test_compiled_log_posterior_equals_the_python_path(name):
    model = _model(**CONFIGURATIONS[name])
    assert model.compiled is not None, why_not_compiled(model)
    theta = _near_enough(model, _points(model, n=600 if model.sight is None else 3000))
    _assert_same(model.log_prob(theta), model.log_prob_python(theta))


@pytest.mark.parametrize("name", ["mirren", "sorrel", "orvane on a fixed plane", "orvane"])
def test_compiled_change_of_coordinates_equals_the_python_path(name):
    # Every companion in turn as a state vector, the others with sky-fixed angles
    # (retrograde and prograde), from points about the start's values.
    model = _model(**CONFIGURATIONS[name])
    theta = _near_enough(model, _points(model, n=400 if model.sight is None else 3000,
                                        seed=3))
    inside = theta[np.isfinite(model.log_prob_python(theta))]
    assert len(inside) > 5
    for body in model.companions:
        others = [b for b in model.companions if b != body]
        coordinates = SamplerCoordinates(
            model, state={body: (40.0, 0.7)},
            longitude={b: ((-1.0) ** k, 1.0) for k, b in enumerate(others)})
        sampled = coordinates.to_sampled(np.repeat(inside, 4, axis=0))
        rng = np.random.default_rng(7)
        sampled = sampled * (1.0 + 0.05 * rng.standard_normal(sampled.shape))
        fast = coordinates.log_prob(sampled)
        reference = coordinates.log_prob_python(sampled)
        _assert_same(fast, reference)
        # the state vectors' mirror wall: depth_1 < 0 is outside
        k = coordinates.names.index(f"{body}.depth_1")
        assert np.all(fast[sampled[:, k] < 0] == -np.inf) or model.node_width[body] > 4


def test_compiled_angular_units_equal_the_python_path():
    # The parallax sampled and every offset an angle: the mass as log10(M plx^3) and a
    # state-vector companion in mas and mas/day (both paths, all walkers, plx <= 0 too).
    model = _model(**CONFIGURATIONS["mirren"])
    theta = _points(model, n=400, seed=5)
    inside = theta[np.isfinite(model.log_prob_python(theta))]
    body = next(iter(model.companions))
    coordinates = SamplerCoordinates(model, state={body: (40.0, 0.7)}, angular_mass=True)
    assert "central.log10_angular_mass" in coordinates.names
    sampled = coordinates.to_sampled(np.repeat(inside, 4, axis=0))
    rng = np.random.default_rng(8)
    sampled = sampled * (1.0 + 0.05 * rng.standard_normal(sampled.shape))
    sampled[:5, model.names.index("parallax")] *= -1.0  # no density at plx < 0
    fast = coordinates.log_prob(sampled)
    _assert_same(fast, coordinates.log_prob_python(sampled))
    assert np.all(fast[:5] == -np.inf)


def test_models_the_kernel_does_not_cover_take_the_python_path():
    # (Each named reason is one the compiled kernel does not compute.)
    assert "light time" in why_not_compiled(
        _model("mirren", system_changes={"romer_delay": True}))
    apparent = _model("orvane")  # differential aberration is not in the kernel
    apparent.sight = replace(apparent.sight,
                             apparent=np.tile(np.eye(2), (len(apparent.sight), 1, 1)))
    assert "apparent offsets" in why_not_compiled(apparent)
    # relativistic terms (massfit.orbits.relativity) are not in the kernel
    from massfit.orbits.relativity import RelativitySpec

    relativistic = _model("sorrel", system_changes={"relativity": RelativitySpec()})
    assert "relativity" in why_not_compiled(relativistic)
    assert relativistic.compiled is None
    assert compiled_posterior(apparent) is None

    @dataclass
    class LaterSpec(SystemSpec):  # a term added to the model after this kernel
        frame_term: float = 0.0

    model = _model("mirren")
    later = OrbitModel(model.observations, LaterSpec(**{
        k: getattr(model.spec, k) for k in SystemSpec.__dataclass_fields__}, frame_term=1.0))
    assert "frame_term" in why_not_compiled(later)
    assert later.compiled is None
    theta = _points(later, n=50)
    assert np.array_equal(later.log_prob(theta), later.log_prob_python(theta))


def test_switching_off_the_kernel_gives_the_python_path(monkeypatch):
    model = _model("mirren")
    theta = _points(model, n=100)
    monkeypatch.setattr(kepler, "numba_kernel", None)
    assert not model.compiled.available
    reference = model.log_prob_python(theta)
    assert np.array_equal(model.log_prob(theta), reference)


def test_the_numbers_do_not_depend_on_the_threads():
    import numba

    from massfit.model.compiled_posterior import THREADS_FROM_WORK, on_threads, thread_count

    model = _model("sorrel")
    theta = _points(model, n=300)
    one = on_threads(model.log_prob, 1)(theta)
    most = on_threads(model.log_prob, numba.config.NUMBA_NUM_THREADS)(theta)
    assert np.array_equal(one, most)
    # the default: every core for big calls, one thread where waking more costs more
    assert thread_count(None, work=THREADS_FROM_WORK - 1) == 1
    assert thread_count(None, work=10 * THREADS_FROM_WORK) == min(
        numba.config.NUMBA_NUM_THREADS, __import__("os").cpu_count())
    assert thread_count(5) == min(5, numba.config.NUMBA_NUM_THREADS)


def test_compiled_companion_masses_sampled_as_masses_equal_the_python_path():
    # A companion's log10 mass sampled as the mass itself (M_sun), as where companions
    # pull on each other, together with a state-vector companion (whose GM takes that
    # mass) and the angular mass: both paths, masses <= 0 (no density) too.
    model = _model("mirren", mass=LogUniform(1e-4, 0.5))
    body = next(iter(model.companions))
    assert f"{body}.log10_mass" in model.names
    theta = _points(model, n=400, seed=6)
    inside = theta[np.isfinite(model.log_prob_python(theta))]
    for options in ({}, {"state": {body: (40.0, 0.7)}, "angular_mass": True}):
        coordinates = SamplerCoordinates(model, linear_mass=[body], **options)
        k = coordinates.names.index(f"{body}.mass")
        sampled = coordinates.to_sampled(np.repeat(inside, 4, axis=0))
        rng = np.random.default_rng(9)
        sampled = sampled * (1.0 + 0.05 * rng.standard_normal(sampled.shape))
        sampled[:5, k] *= -1.0
        fast = coordinates.log_prob(sampled)
        _assert_same(fast, coordinates.log_prob_python(sampled))
        assert np.all(fast[:5] == -np.inf)

"""N-body model: the two-body limit, energy conservation, and the model's hook."""

import numpy as np
import pytest

from massfit.orbits.dynamics import Keplerian, orbit_state
from massfit.errors import ConfigError
from massfit.model.specs import CompanionSpec, SystemSpec
from massfit.model.orbit_model import OrbitModel
from massfit.orbits.nbody import HAVE_NUMBA, integrate_system, total_energy
from massfit.orbits.perturbed import NBody
from massfit.priors import Fixed, LogUniform
from massfit.read.tables import read_observations
from massfit.scenarios.examples import DEMO_DIR


#: Both integrators: the compiled one (numba, per-walker steps) and the numpy one
#: (scipy's solve_ivp on the stacked walkers).
PATHS = [pytest.param(True, id="compiled", marks=pytest.mark.skipif(
    not HAVE_NUMBA, reason="numba not installed")), pytest.param(False, id="numpy")]


def _state(a, ecc, inc, omega, node, mean, period):
    pos, vel = orbit_state(np.array(a), np.array(ecc), np.radians(inc), np.radians(omega),
                           np.radians(node), np.array(mean), 2 * np.pi / np.array(period))
    return np.stack(pos, axis=-1), np.stack(vel, axis=-1)


def _invented_triple(scale_masses=1.0):
    """A 1.1 M_sun star with two companions of 0.02 and 0.05 M_sun (invented)."""
    from massfit.constants import GM_SUN

    central = np.array([1.1])
    masses = np.array([[0.02, 0.05]]) * scale_masses
    periods = np.array([40.0, 130.0])
    a = np.cbrt(GM_SUN * (central + masses[0]) * periods ** 2 / (4 * np.pi ** 2))
    pos, vel = _state(a, [0.1, 0.2], [60.0, 70.0], [30.0, 200.0], [10.0, 25.0],
                      [0.3, 2.0], periods)
    return central, masses, pos[None], vel[None], periods, a


@pytest.mark.parametrize("compiled", [PATHS[0], pytest.param(False, id="numpy",
                                                            marks=pytest.mark.slow)])
def test_energy_is_conserved_to_1e10(compiled):  # the numpy path: 9 s, in the slow step
    central, masses, pos, vel, periods, _ = _invented_triple()
    t = np.linspace(-800.0, 1600.0, 31)  # about 60 inner orbits, both directions
    # DOP853 does not conserve energy by construction: its drift follows the
    # tolerance (over this span about 9e-9 at rtol 1e-10; 6e-11 at 1e-12, the fitting
    # default; 6e-12 at 1e-13).
    positions, velocities = integrate_system(t, central, masses, pos, vel, rtol=1e-13,
                                             compiled=compiled)
    energy0 = total_energy(central, masses, pos, vel)
    energy = total_energy(central[:, None], masses[:, None, :],
                          positions.transpose(0, 2, 1, 3), velocities.transpose(0, 2, 1, 3))
    assert np.all(np.isfinite(energy))
    assert np.max(np.abs(energy / energy0[:, None] - 1)) <= 1e-10


@pytest.mark.parametrize("compiled", PATHS)
def test_massless_limit_is_keplerian(compiled):
    central, masses, pos, vel, periods, a = _invented_triple(scale_masses=1e-12)
    t = np.linspace(-600.0, 600.0, 41)
    positions, _ = integrate_system(t, central, masses, pos, vel, rtol=1e-12,
                                    compiled=compiled)
    for k, (ecc, inc, omega, node, mean) in enumerate([(0.1, 60, 30, 10, 0.3),
                                                        (0.2, 70, 200, 25, 2.0)]):
        kep, _ = _state(a[k], ecc, inc, omega, node, mean + 2 * np.pi * t / periods[k],
                        periods[k])
        assert np.max(np.abs(positions[0, k] - kep)) <= 1e-9 * a[k]


@pytest.mark.slow  # every walker integrated twice at rtol 1e-14
def test_both_integrators_agree_walker_by_walker():
    # Walkers of different masses and orbits in one call: the compiled path steps
    # each on its own, the numpy path steps the stack together. Both must land on
    # the same states to the accuracy their tolerance allows, at unsorted times of
    # both signs.
    if not HAVE_NUMBA:
        pytest.skip("numba not installed")
    central, masses, pos, vel, periods, a = _invented_triple()
    rng = np.random.default_rng(4)
    n = 6
    masses = masses * rng.uniform(0.2, 3.0, (n, 2))
    pos = pos * (1 + 0.02 * rng.standard_normal((n, 2, 3)))
    vel = np.repeat(vel, n, axis=0)
    central = np.repeat(central, n)
    t = rng.uniform(-300.0, 300.0, 25)
    t[3] = 0.0
    fast, fast_v = integrate_system(t, central, masses, pos, vel, rtol=1e-12, compiled=True)
    slow, slow_v = integrate_system(t, central, masses, pos, vel, rtol=1e-12,
                                    compiled=False)
    assert np.all(np.isfinite(fast))
    np.testing.assert_allclose(fast, slow, rtol=0, atol=1e-8 * a[1])
    np.testing.assert_allclose(fast_v, slow_v, rtol=0, atol=1e-7 * np.max(np.abs(vel)))
    np.testing.assert_array_equal(fast[:, :, 3], pos)  # time 0 is the initial state


def test_mutual_pull_moves_the_companions():
    # Negative control for the limit above: with real masses the orbits differ.
    central, masses, pos, vel, periods, a = _invented_triple()
    t = np.array([600.0])
    heavy, _ = integrate_system(t, central, masses, pos, vel)
    light, _ = integrate_system(t, central, masses * 1e-12, pos, vel)
    assert np.max(np.abs(heavy - light)) > 1e-4 * a[0]


def test_model_with_nbody_matches_keplerian_for_tiny_masses():
    obs = read_observations(DEMO_DIR / "moons.ecsv")
    # Two moons keep the integration short in the default run.
    keep = np.isin(obs.astrometry.body, ["Doss", "Tirrin"])
    from dataclasses import replace
    obs = replace(obs, astrometry=obs.astrometry.select(keep))
    comps = {n: CompanionSpec(n, mass=Fixed(1e-16)) for n in ("Doss", "Tirrin")}
    kep = OrbitModel(obs, SystemSpec(companions=comps))
    nbd = OrbitModel(obs, SystemSpec(companions=comps, dynamics=NBody()))
    assert kep.names == nbd.names
    values = {"central_mass": 7.9e-4, "parallax": None,
              "Doss": dict(period=8.7321, ecc=0.021, omega=4.3, inc=1.46, node=0.47,
                           mean_anomaly_ref=1.0, mass=1e-16),
              "Tirrin": dict(period=19.6014, ecc=0.035, omega=5.5, inc=1.49, node=0.5,
                             mean_anomaly_ref=2.0, mass=1e-16)}
    theta = kep.from_physical(values)
    phys = kep.physical(theta[None])
    a_states = Keplerian().states(kep, phys, want_velocity=True)
    b_states = nbd.dynamics.states(nbd, phys, want_velocity=True)
    # The default tolerance (1e-12) over 57 orbits of the inner moon: agreement to
    # 1e-7 of the orbit's size, some thousand times below the data's precision.
    a_au, v_au_d = 0.0132, 0.01
    for name in comps:
        np.testing.assert_allclose(np.array(b_states[name][0]), np.array(a_states[name][0]),
                                   rtol=0, atol=1e-7 * a_au)
        np.testing.assert_allclose(np.array(b_states[name][1]), np.array(a_states[name][1]),
                                   rtol=0, atol=1e-7 * v_au_d)


def test_nbody_gives_unstated_masses_a_prior():
    obs = read_observations(DEMO_DIR / "moons.ecsv")
    model = OrbitModel(obs, SystemSpec(dynamics=NBody()))
    assert all(isinstance(c.mass, LogUniform) for c in model.companions.values())
    assert "Pell.log10_mass" in model.names


def test_bad_tolerance_is_a_config_error():
    with pytest.raises(ConfigError, match="tolerance"):
        NBody(rtol=0.1)


def test_nbody_start_recovers_the_pair_masses(tmp_path):
    # The invented interacting pair (massfit.orbits.nbody.PAIR_TRUTH), fewer epochs than in
    # validation/interacting_pair.py (which runs emcee on three noise seeds). From the
    # data alone, the start step (two-body search, then N-body least squares) must
    # find every mass within 4 of its Laplace sigmas, and measure the companions'
    # masses (not leave them to their prior). Negative control: with massless
    # companions (two-body orbits) the central mass lands far off and the fit is far
    # worse.
    from massfit.orbits.nbody import PAIR_TRUTH, simulate_interacting_pair
    from massfit.start.least_squares import solve_least_squares, values_from_theta
    from massfit.start.search import find_start

    obs = read_observations(simulate_interacting_pair(tmp_path / "pair.ecsv", n_obs=30))
    truth = {"central": PAIR_TRUTH["central_mass"],
             **{n: el["mass"] for n, el in PAIR_TRUTH["companions"].items()}}
    comps = {n: CompanionSpec(n, mass=LogUniform(1e-4, 0.5))
             for n in PAIR_TRUTH["companions"]}
    model = OrbitModel(obs, SystemSpec(companions=comps, dynamics=NBody()))
    start = find_start(model)
    n_values = 2 * len(obs.astrometry)
    assert start.chi2 < 1.3 * n_values
    for name, true in truth.items():
        k = model.names.index(f"{name}.log10_mass")
        mass = 10 ** start.theta[k]
        sd = mass * np.log(10) * np.sqrt(start.covariance[k, k])
        print(f"{name}: {mass:.6g} +- {sd:.2g} (truth {true})")
        assert abs(mass - true) < 4 * sd
        assert sd < 0.05 * true
    # The control: the same model with massless companions (1e-12 M_sun: a mass of
    # exactly zero would get the mass prior), i.e. two-body orbits, polished from the
    # N-body solution.
    massless = OrbitModel(obs, SystemSpec(
        companions={n: CompanionSpec(n, mass=Fixed(1e-12)) for n in comps},
        dynamics=NBody()))
    values = values_from_theta(model, start.theta)
    values["central_mass"] += np.mean([values[n]["mass"] for n in comps])
    for name in comps:
        values[name]["mass"] = 1e-12
    theta = solve_least_squares(massless, values, rounds=3)
    res = massless.residuals(theta[None])[0]
    mass = 10 ** theta[massless.names.index("central.log10_mass")]
    print(f"massless companions: central {mass:.6g}, chi2 {res @ res:.0f}")
    assert abs(mass - truth["central"]) > 10 * 2e-4  # ten sigmas of the N-body fit
    assert res @ res > 10 * n_values


def test_only_a_relative_mirror_image_changes_the_nbody_sky(tmp_path):
    # Mirroring an orbit through the sky plane, (omega, node) -> (omega + pi,
    # node + pi), leaves a two-body orbit's sky path as it was. Mirroring every
    # companion leaves the N-body sky paths as they were too (the mirror is a symmetry
    # of Newton's equations); mirroring one changes the mutual inclination and so the
    # paths. Hence the N-body model's full node window for all companions but one.
    from massfit.orbits.nbody import PAIR_TRUTH, simulate_interacting_pair

    obs = read_observations(simulate_interacting_pair(tmp_path / "pair.ecsv", n_obs=20))
    comps = {n: CompanionSpec(n, mass=LogUniform(1e-4, 0.5))
             for n in PAIR_TRUTH["companions"]}
    model = OrbitModel(obs, SystemSpec(companions=comps, dynamics=NBody()))
    first, second = list(PAIR_TRUTH["companions"])
    assert model.node_width == {first: np.pi, second: 2 * np.pi}
    values = {"central_mass": 1.0, "parallax": None}
    for name, el in PAIR_TRUTH["companions"].items():
        values[name] = dict(period=el["period"], ecc=el["ecc"], inc=np.radians(el["inc"]),
                            omega=np.radians(el["omega"]), node=np.radians(el["node"]),
                            mass=el["mass"], mean_anomaly_ref=el["mean0"])
    phys = model.physical(model.from_physical(values)[None])

    def sky(mirrored):
        changed = {"central_mass": phys["central_mass"], "parallax": None,
                   "companions": {}}
        for name, orbit in phys["companions"].items():
            orbit = dict(orbit)
            if name in mirrored:
                orbit["omega"], orbit["node"] = orbit["omega"] + np.pi, orbit["node"] + np.pi
            changed["companions"][name] = orbit
        states = model.dynamics.states(model, changed)
        return np.concatenate([np.concatenate(states[n][0][:2], axis=1) for n in states],
                              axis=1)

    plain = sky(())
    np.testing.assert_allclose(sky((first, second)), plain, rtol=0, atol=1e-9)
    assert np.max(np.abs(sky((second,)) - plain)) > 1e-3  # au; errors are 2e-4 au

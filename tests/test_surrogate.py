"""The linearised surrogate of the integrated model against the integrator itself.

The reference is massfit's integrator of the perturbed model (J2 and mutual pulls),
which agrees with REBOUND's IAS15 and REBOUNDx's harmonics to the accuracy stated in
``tests/test_perturbed.py`` (open reference libraries: Rein & Liu 2012, Tamayo et al.
2020). The tolerance stated here: every predicted value within 0.05 of its error at
draws of the Laplace approximation, and the importance weights' effective sample size
above 90 % (``MIN_ESS_FRACTION``); the negative control (draws 30 times wider) shows
that the check fails where the linearisation does.
"""

import numpy as np
import pytest

from massfit.orbits import kepler

pytestmark = pytest.mark.skipif(kepler.numba_kernel is None,
                                reason="the surrogate needs the compiled kernel")


def _model_at_truth(tmp_path, epochs=40, measured_from=False, **options):
    from test_perturbed import _moving_observer_moons

    from massfit.model.orbit_model import OrbitModel
    from massfit.model.specs import SystemSpec
    from massfit.orbits.perturbed import Perturbed
    from massfit.start.least_squares import covariance_at

    obs, moons, values = _moving_observer_moons(tmp_path, epochs)
    dynamics = Perturbed(j2=0.01, equatorial_radius="60000 km", steps_per_orbit=24,
                         **options)
    model = OrbitModel(obs, SystemSpec(dynamics=dynamics))
    for name, mass in zip(moons, (3e-8, 9e-8)):  # invented masses: pulls switched on
        values[name] = dict(values[name], mass=mass)
    model.centres = {name: {"node": values[name]["node"], "phase": np.pi} for name in moons}
    theta = model.recentre(model.from_physical(values))
    if measured_from:  # every other row of the second moon measured from the first
        first, second = list(moons)[:2]
        rows = model.rows[second]
        rows.reference = np.where(np.arange(rows.t.size) % 2 == 0, first, "")
    # The rows replaced by the integrated model's own offsets at theta plus noise of
    # their errors, so that theta fits (chi^2 about the number of values).
    rng = np.random.default_rng(7)
    for name, (east, north) in model.all_predicted_offsets(theta).items():
        rows = model.rows[name]
        assert rows.polar.size == 0
        rows.east = east[0] + rows.east_err * rng.standard_normal(rows.east.size)
        rows.north = north[0] + rows.north_err * rng.standard_normal(rows.north.size)
    return model, theta, covariance_at(model, theta)


def test_linearised_surrogate_agrees_with_the_integrator(tmp_path):
    from massfit.model.surrogate import (LinearisedPosterior, packed_values,
                                         surrogate_check)

    model, theta, cov = _model_at_truth(tmp_path)
    surrogate = LinearisedPosterior(model, theta, np.sqrt(np.diag(cov)))
    # The integrated orbits are far from the two-body ones from the same elements
    # (hundreds of errors): the correction is not small, only smooth.
    assert surrogate.largest_departure > 100
    # At the linearisation point the compiled surrogate is the exact log-posterior.
    exact = model.log_prob_python(theta[None])
    np.testing.assert_allclose(surrogate(theta[None]), exact, rtol=1e-12)
    np.testing.assert_allclose(surrogate.values(theta[None]), packed_values(model, theta),
                               rtol=0, atol=1e-9 * np.max(np.abs(packed_values(model, theta))))
    draws = np.random.default_rng(3).multivariate_normal(theta, cov, size=40)
    check = surrogate_check(model, surrogate, draws)
    assert check["finite"] == 40
    assert check["largest_value_error_sigma"] < 0.05
    assert check["ess_fraction"] > 0.9 and check["passed"]
    # Negative control: 30 times the posterior's width is far outside what a linear
    # correction follows, and the check says so.
    wide = np.random.default_rng(4).multivariate_normal(theta, 900 * cov, size=40)
    control = surrogate_check(model, surrogate, wide)
    assert control["largest_value_error_sigma"] > 0.05
    assert not control["passed"]


def test_second_order_terms_recover_a_known_quadratic():
    # A vector function with known first, second and third orders, evaluated at +-
    # each axis and +- each pair: the second derivatives come back to rounding, the odd
    # orders cancel; a rank-two Q is carried by two terms, and terms below the floor
    # are left out.
    from massfit.model.surrogate import low_rank_quadratic, second_order_terms

    rng = np.random.default_rng(11)
    n, values = 5, 7
    shapes, forms = rng.standard_normal((values, 2)), rng.standard_normal((2, n, n))
    forms = forms + np.swapaxes(forms, 1, 2)
    q = np.einsum("vt,tjk->jkv", shapes, forms)  # rank two over the values
    linear, cubic = rng.standard_normal((values, n)), rng.standard_normal((values, n))

    def f(z):
        return (0.5 * np.einsum("nj,jkv,nk->nv", z, q, z) + z @ linear.T
                + (z ** 3) @ cubic.T)

    eye = np.eye(n)
    first, second = np.triu_indices(n, k=1)
    pairs = eye[first] + eye[second]
    curvature, failed = second_order_terms(f(np.vstack([eye, -eye, pairs, -pairs])), n)
    assert failed == 0
    np.testing.assert_allclose(curvature, q, atol=1e-12)
    kept, terms = low_rank_quadratic(curvature, floor=1e-9)
    assert kept.shape == (2, n, n) and terms.shape == (values, 2)
    z = rng.standard_normal((20, n))
    np.testing.assert_allclose(np.einsum("nj,tjk,nk->nt", z, kept, z) @ terms.T,
                               0.5 * np.einsum("nj,jkv,nk->nv", z, q, z), atol=1e-10)
    assert low_rank_quadratic(1e-3 * curvature, floor=1e3)[0].shape[0] == 0
    # A pair whose value is not finite is left out and counted.
    broken = f(np.vstack([eye, -eye, pairs, -pairs]))
    broken[2 * n] = np.nan
    assert second_order_terms(broken, n)[1] == 1


def test_second_order_surrogate_along_the_posterior_axes(tmp_path, monkeypatch):
    # With the Laplace covariance (not only its diagonal) the slope is taken along the
    # posterior's principal axes and the second-order terms are added. These invented
    # moons need none at the default floor (the linear surrogate is within 0.05 of an
    # error); with every term kept, the predicted values at draws of the posterior
    # (masses drawn as masses, as the sampler moves them) come closer to the
    # integrator's than the linear surrogate's, and the compiled kernel's chi^2 is the
    # surrogate's values'.
    import massfit.model.surrogate as module
    from massfit.model.surrogate import (LinearisedPosterior, linear_coordinates,
                                         log10_mass_columns, model_coordinates,
                                         packed_values, surrogate_check)

    model, theta, cov = _model_at_truth(tmp_path)
    power = log10_mass_columns(model)
    u0 = linear_coordinates(theta, power)
    scale = np.where(power == 1, u0 * np.log(10.0), 1.0)
    draws = model_coordinates(np.random.default_rng(5).multivariate_normal(
        u0, cov * scale[:, None] * scale[None, :], size=30), power)
    assert LinearisedPosterior(model, theta, cov).quadratic_terms == 0
    monkeypatch.setattr(module, "QUADRATIC_FLOOR", 0.0)
    second = LinearisedPosterior(model, theta, cov)
    first = LinearisedPosterior(model, theta, cov, quadratic=False)
    n = theta.size
    assert second.integrations == 1 + 2 * n + n * (n - 1) and second.quadratic_failed == 0
    assert first.integrations == 1 + 2 * n and first.quadratic_terms == 0
    assert second.quadratic_terms == module.MAX_QUADRATIC_TERMS
    np.testing.assert_allclose(second(theta[None]), model.log_prob_python(theta[None]),
                               rtol=1e-12)
    exact = packed_values(model, draws)
    errors = [np.abs(s.values(draws) - exact) / s.errors() for s in (first, second)]
    assert np.max(errors[1]) < np.max(errors[0]) and np.mean(errors[1]) < np.mean(errors[0])
    check = surrogate_check(model, second, draws)
    assert check["passed"] and check["largest_value_error_sigma"] < 0.05
    # The compiled kernel's second-order terms are the Python values' (chi^2 from both).
    seen = model.rows
    predicted = second.values(draws[:1])[0]
    observed = np.concatenate([np.vstack([seen[name].east, seen[name].north])
                               for name in model.companions if name in seen], axis=1)
    chi2 = float(np.sum(((observed - predicted) / second.errors()) ** 2))
    exact_lp, approx_lp = model.log_prob_python(draws[:1]), second(draws[:1])
    exact_chi2 = float(np.sum(((observed - exact[0]) / second.errors()) ** 2))
    np.testing.assert_allclose(approx_lp - exact_lp, -0.5 * (chi2 - exact_chi2), atol=1e-8)


def test_surrogate_of_rows_measured_from_another_moon(tmp_path):
    # Half of the second moon's rows are measured from the first moon (their model:
    # the difference of the two integrated orbits, seen along each row's line of
    # sight). The kernel's two-body part predicts them from the planet and the first
    # moon's offset is carried by the departure: exact at the linearisation point, and
    # within 0.05 of an error at posterior draws, the exact check passing.
    from massfit.model.compiled_posterior import why_not_compiled
    from massfit.model.surrogate import (LinearisedPosterior, packed_values,
                                         surrogate_check, why_not_linearised)

    model, theta, cov = _model_at_truth(tmp_path, measured_from=True)
    assert why_not_compiled(model, any_dynamics=True) == "offsets from another companion"
    assert why_not_linearised(model) is None
    surrogate = LinearisedPosterior(model, theta, cov)
    np.testing.assert_allclose(surrogate(theta[None]), model.log_prob_python(theta[None]),
                               rtol=1e-12)
    exact = packed_values(model, theta)
    np.testing.assert_allclose(surrogate.values(theta[None]), exact, rtol=0,
                               atol=1e-9 * np.max(np.abs(exact)))
    draws = np.random.default_rng(3).multivariate_normal(theta, cov, size=40)
    check = surrogate_check(model, surrogate, draws)
    assert check["finite"] == 40 and check["passed"]
    assert check["largest_value_error_sigma"] < 0.05
    # The rows measured from the first moon are not the second moon's offsets from the
    # planet (the departure carries the whole first moon's offset, thousands of errors).
    assert surrogate.largest_departure > 1000


@pytest.mark.slow  # a whole fit (the staged start, three short chains): about 20 s
@pytest.mark.parametrize("weighing", ["fails", "passes"])
def test_a_fit_whose_surrogate_check_fails_is_not_converged(tmp_path, monkeypatch, weighing):
    # Three linearisations, every check failing (the threshold raised past 100 %):
    # the chain is not converged whatever its autocorrelation time (here every
    # autocorrelation test passes) unless the draws weighed by the integrator have the
    # effective number needed; the summary and the report say which.
    import massfit.linearised_fit as linearised_fit
    import massfit.model.surrogate as surrogate
    from massfit import fit
    from massfit.linearised_fit import ROUNDS
    from massfit.model.specs import SystemSpec

    import massfit.sample.chain as chain

    model, theta, _ = _model_at_truth(tmp_path, surrogate="linearised")
    monkeypatch.setattr(surrogate, "MIN_ESS_FRACTION", 1.01)
    monkeypatch.setattr(linearised_fit, "RELINEARISE_SHIFT_SD", -1.0)  # every round
    monkeypatch.setattr(linearised_fit, "MAX_WEIGHED_DRAWS", 60)
    monkeypatch.setattr(linearised_fit, "MIN_WEIGHED_EFFECTIVE",
                        10 ** 9 if weighing == "fails" else 20)
    monkeypatch.setattr(linearised_fit, "MAX_WEIGHT_SHARE", 0.5)
    # Every chain passes its autocorrelation test, so that only the check can fail.
    update = chain.ConvergenceTest.update

    def passing(self, steps):
        out = update(self, steps)
        self.converged = True
        return out

    monkeypatch.setattr(chain.ConvergenceTest, "update", passing)
    monkeypatch.setattr(chain, "arrival_step", lambda log_prob, n_dim: 0)  # nor this
    result = fit(model.observations, SystemSpec(dynamics=model.dynamics), seed=2,
                 max_steps=100, check_every=100, progress=False)
    block = result.summary["surrogate"]
    assert len(block["rounds"]) == ROUNDS
    assert all(r["chain_converged"] and not r["passed"] for r in block["rounds"])
    assert 0 < block["weighed"]["draws"] <= 60
    assert result.summary["adequacy"]["dynamics"]["surrogate"] == "linearised"
    if weighing == "fails":
        assert not block["passed"] and not block["weighed"]["passed"]
        assert not result.converged
        assert any("linearised surrogate did not match" in w
                   for w in result.summary["warnings"])
        assert "FAILED" in result.report()
    else:
        assert block["passed"] and block["weighed"]["passed"] and result.converged
        # At most the weighed draws' effective number (nan: the 100-step chain's own
        # autocorrelation time is unknown).
        effective = result.summary["diagnostics"]["effective_samples"]
        assert np.isnan(effective) or effective <= block["weighed"]["ess"] + 1e-9
        assert "weighed by the integrator instead" in result.report()


def test_importance_resampling_recovers_a_known_target():
    # Proposal N(0, 2^2) (the "surrogate"), target N(0.5, 1) (the "exact model"): the
    # resampled draws have the target's mean and sd, and the weights' effective
    # fraction is 1 / E_q[(p/q)^2], computed here by quadrature (scipy). Negative
    # control: a proposal narrower than the target (N(0, 0.3^2)) is refused by the
    # largest weight's share.
    from types import SimpleNamespace

    from scipy import integrate, stats

    from massfit.linearised_fit import importance_resampled

    target = stats.norm(0.5, 1.0)
    model = SimpleNamespace(names=["x"], log_prob_python=lambda d: target.logpdf(d[:, 0]))
    for width, passes in ((2.0, True), (0.3, False)):
        proposal = stats.norm(0.0, width)
        surrogate = lambda d, q=proposal: q.logpdf(d[:, 0])  # noqa: E731
        rng = np.random.default_rng(5)
        chain = SimpleNamespace(samples=proposal.rvs(size=(20000, 1), random_state=rng),
                                log_prob=None)
        # (for the narrow proposal the integral diverges: no finite effective fraction)
        second = integrate.quad(lambda x: target.pdf(x) ** 2 / proposal.pdf(x),
                                -12, 12)[0] if passes else 100.0
        drawn = chain.samples.copy()
        record = importance_resampled(model, surrogate, chain, 1.0 / second, rng)
        assert record["passed"] is passes
        if not passes:  # the chain's own draws stay
            np.testing.assert_array_equal(chain.samples, drawn)
        if passes:
            assert record["ess_fraction"] == pytest.approx(1.0 / second, rel=0.1)
            tolerance = 4.0 / np.sqrt(record["ess"])
            assert abs(np.mean(chain.samples) - 0.5) < tolerance
            assert abs(np.std(chain.samples) - 1.0) < tolerance
            assert chain.weighed_effective == record["ess"]
            np.testing.assert_allclose(chain.log_prob, target.logpdf(chain.samples[:, 0]))


@pytest.mark.slow  # scipy's exact least squares on the integrator as the reference: ~20 s
def test_linearised_least_squares_reaches_the_exact_minimum(tmp_path):
    # The start's polish through the linearised departure ends where the integrated
    # model's own least squares (scipy's trust region on the integrator) ends, from a
    # point ten Laplace sigmas off in every coordinate, the masses 30 % off.
    from massfit.model.surrogate import log10_mass_columns
    from massfit.start.least_squares import chi2_at, solve_least_squares, values_from_theta
    from massfit.start.linearised import linearised_least_squares

    model, theta, cov = _model_at_truth(tmp_path)
    rng = np.random.default_rng(11)
    sigma = np.sqrt(np.diag(cov))
    masses = log10_mass_columns(model) == 1
    off = np.where(masses, theta + np.log10(1.3), theta + 10 * sigma * rng.choice([-1, 1], theta.size))
    polished, chi2, integrations = linearised_least_squares(model, off)
    assert chi2 == pytest.approx(chi2_at(model, polished), rel=1e-12)
    exact = solve_least_squares(model, values_from_theta(model, off), rounds=2)
    assert chi2 < chi2_at(model, off) - 1000
    assert chi2 <= chi2_at(model, exact) + 0.1
    # Within a tenth of a sigma of the exact solution in every coordinate.
    assert np.all(np.abs(polished - exact) < 0.1 * sigma)


@pytest.mark.slow  # the two-body model's own start inside: about 15 s
def test_model_comparison_of_an_integrated_model_uses_the_linearised_least_squares(tmp_path):
    # The adequacy block's perturbed-vs-two-body comparison polishes the integrated
    # model through its linearised departure: its chi^2 is at most the one at the
    # truth (where the data were drawn: about one per value).
    from massfit.start.least_squares import chi2_at
    from massfit.summarise.adequacy import assess

    model, theta, _ = _model_at_truth(tmp_path)
    comparison = assess(model, theta)["comparison"]
    at_truth = chi2_at(model, theta)
    assert comparison["perturbed"]["chi2"] <= at_truth + 1e-9
    assert at_truth - comparison["perturbed"]["chi2"] < 3 * model.n_dim
    assert 0.7 < comparison["perturbed"]["chi2"] / comparison["n_values"] < 1.3


def test_no_surrogate_for_radial_velocities():
    # The surrogate's departure is the astrometry's alone: a model with radial
    # velocities is refused by name (integrated models refuse velocities today, see
    # OrbitModel; this keeps the surrogate honest if they take them one day).
    from types import SimpleNamespace

    from massfit.model.surrogate import why_not_linearised

    assert why_not_linearised(SimpleNamespace(velocity_rows=object())) == "radial velocities"

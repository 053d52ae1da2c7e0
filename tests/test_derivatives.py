"""The one finite-difference Jacobian (start and planner) against analytic derivatives."""
import numpy as np
import pytest

from massfit.model.derivatives import difference_jacobian


def _batch(points):
    x, y = points[:, 0], points[:, 1]
    return np.column_stack([np.sin(x) * y, x ** 3 + np.exp(y), x * y])


def _exact(theta):
    x, y = theta
    return np.array([[np.cos(x) * y, np.sin(x)], [3 * x ** 2, np.exp(y)], [y, x]])


@pytest.mark.parametrize("central, tol", [(False, 1e-6), (True, 1e-9)])
def test_matches_the_analytic_jacobian(central, tol):
    theta = np.array([0.7, -0.3])
    step = (1e-8 if not central else 1e-5) * np.ones(2)
    jac = difference_jacobian(_batch, theta, step, central=central)
    assert jac.shape == (3, 2)
    np.testing.assert_allclose(jac, _exact(theta), atol=tol)


@pytest.mark.parametrize("central", [False, True])
def test_one_point_at_a_time_gives_the_same_numbers(central):
    theta = np.array([1.1, 0.4])
    step = np.array([1e-6, -1e-6])            # a backward step as the start takes at a bound
    together = difference_jacobian(_batch, theta, step, central=central)
    alone = difference_jacobian(_batch, theta, step, central=central, one_at_a_time=True)
    np.testing.assert_array_equal(together, alone)


def test_central_differences_are_more_accurate_than_forward_ones():
    theta = np.array([0.7, -0.3])
    step = 1e-4 * np.ones(2)
    forward = np.abs(difference_jacobian(_batch, theta, step) - _exact(theta)).max()
    central = np.abs(difference_jacobian(_batch, theta, step, central=True) - _exact(theta)).max()
    assert central < forward / 100

"""Planning with modes (massfit.plan.modes): the epochs that tell a fit's modes apart.

The Bhattacharyya distance between normal distributions against its closed forms
(Bhattacharyya 1943; e.g. Fukunaga 1990, *Introduction to Statistical Pattern
Recognition*, sec. 3.4, from memory): equal covariances sigma^2 I give |d|^2 / (8
sigma^2); in one dimension (1/4) d^2 / (s1^2 + s2^2) + (1/2) ln((s1^2 + s2^2) /
(2 s1 s2)). The ranking of a two-mode posterior puts first the epoch where the modes'
predictions lie furthest apart, and last the one where they meet.
"""

from __future__ import annotations

import astropy.units as u
import numpy as np
from astropy.time import Time

from massfit.plan.modes import bhattacharyya, mode_labels, separating_epochs
from massfit.plan.posterior import Posterior
from massfit.plan.schedule import Schedule


def test_bhattacharyya_closed_forms():
    d = np.array([0.3, -1.2])
    assert np.isclose(bhattacharyya(d, 0.25 * np.eye(2), np.zeros(2), 0.25 * np.eye(2)),
                      d @ d / (8 * 0.25))
    s1, s2, dm = 0.7, 1.9, 1.3
    exact = 0.25 * dm ** 2 / (s1 ** 2 + s2 ** 2) + 0.5 * np.log((s1 ** 2 + s2 ** 2)
                                                                / (2 * s1 * s2))
    got = bhattacharyya(np.array([dm]), np.array([[s1 ** 2]]), np.array([0.0]),
                        np.array([[s2 ** 2]]))
    assert np.isclose(got, exact)


def test_the_epoch_where_the_modes_differ_most_comes_first():
    rng = np.random.default_rng(1)
    n = 600
    # Two period aliases of one companion; the rest of the orbit alike, a little spread.
    period = np.where(np.arange(n) < 400, 300.0, 1800.0) * (1 + 1e-4 * rng.standard_normal(n))
    gm_msun = 4 * np.pi ** 2 * 1.2 ** 3 / (300.0 / 365.25) ** 2
    a = np.where(period < 1000, 1.2, 1.2 * (1800 / 300) ** (2 / 3) * 0.3)
    companions = {"b": {"period": period, "ecc": np.full(n, 0.1), "inc": np.full(n, 1.0),
                        "omega": np.full(n, 0.5), "node": np.full(n, 0.3),
                        "periapsis_time": np.full(n, 2460000.0) + rng.normal(0, 1, n),
                        "semi_major_axis": a}}
    posterior = Posterior(gm=np.full(n, gm_msun), parallax=np.full(n, 25.0),
                          companions=companions)
    times = Time(2460500.0 + np.arange(0, 400, 10.0), format="jd", scale="tdb")
    schedule = Schedule(times, np.full(times.size, 2.0) * u.mas)
    modes = [{"period_boxes_days": {"b": [200, 400]}, "probability": 0.6},
             {"period_boxes_days": {"b": [1000, 3000]}, "probability": 0.4}]
    labels = mode_labels(companions, modes)
    assert np.sum(labels == 0) == 400 and np.sum(labels == 1) == 200
    ranked = separating_epochs(posterior, schedule, labels, [0.6, 0.4])
    epoch, east, north = posterior.predicted(schedule)
    gap = np.hypot(east[labels == 0].mean(0) - east[labels == 1].mean(0),
                   north[labels == 0].mean(0) - north[labels == 1].mean(0))
    assert np.isclose(ranked[0]["time_jd_tdb"], schedule.tdb_jd[np.argmax(gap)])
    assert np.isclose(ranked[-1]["time_jd_tdb"], schedule.tdb_jd[np.argmin(gap)])
    assert ranked[0]["wrong_mode_bound_after"] < ranked[0]["wrong_mode_bound_now"]
    assert np.isclose(ranked[0]["wrong_mode_bound_now"], np.sqrt(0.6 * 0.4))

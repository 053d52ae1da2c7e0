"""Shared fixtures: small invented systems written as ECSV, and a quick sampler set-up."""

import os

import astropy.units as u
import numpy as np
import pytest
from astropy.time import Time

os.environ.setdefault("MPLBACKEND", "Agg")

from massfit.simulate import Elements, simulate_astrometry, write_scenario  # noqa: E402


def invented_binary(seed=11, n=30, parallax=25.0 * u.mas, error=0.5 * u.mas):
    """One companion ('Wren') around an invented 1.3 M_sun star, 85 % of an orbit."""
    rng = np.random.default_rng(seed)
    elements = {"Wren": Elements(period=3650.0, ecc=0.42, inc=58.0, omega=75.0, node=141.0,
                                 periapsis_time=2459400.0)}
    times = {"Wren": Time(2458000.0 + np.sort(rng.uniform(0, 3100, n)), format="jd",
                          scale="tdb")}
    table = simulate_astrometry(times, elements, 1.3, parallax=parallax, error=error,
                                seed=seed)
    truth = {"central_mass_Msun": 1.3, "parallax_mas": parallax.to_value(u.mas),
             "companions": {k: dict(v) for k, v in elements.items()}}
    return table, truth


@pytest.fixture
def binary_file(tmp_path):
    table, truth = invented_binary()
    write_scenario(tmp_path, table, truth, name="wren.ecsv")
    return tmp_path / "wren.ecsv", truth

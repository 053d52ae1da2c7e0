"""Shared fixtures: small invented systems written as ECSV, and a quick sampler set-up."""

import os

import astropy.units as u
import numpy as np
import pytest
from astropy.time import Time

os.environ.setdefault("MPLBACKEND", "Agg")

from massfit.scenarios.simulate import Elements, simulate_astrometry, write_scenario  # noqa: E402


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


def write_one_companion(folder, *, name="Quill", span=260.0, epochs=14, period=118.0,
                        error=0.01, seed=4):
    """One invented companion of a 0.9 M_sun primary, offsets in au; returns the path."""
    times = {name: Time(2460100.0 + np.linspace(0.0, span, epochs), format="jd",
                        scale="tdb")}
    elements = {name: Elements(period=period, ecc=0.15, inc=55.0, omega=70.0, node=20.0,
                               periapsis_time=2460130.0)}
    table = simulate_astrometry(times, elements, 0.9, error=error * u.au, seed=seed)
    write_scenario(folder, table, {"central_mass_Msun": 0.9}, name=f"{name.lower()}.ecsv")
    return folder / f"{name.lower()}.ecsv"


@pytest.fixture(scope="session")
def small_data_file(tmp_path_factory):
    """An ECSV file of one companion over about two orbits (14 epochs)."""
    return write_one_companion(tmp_path_factory.mktemp("small-data"))


@pytest.fixture(autouse=True, scope="session")
def _ctrl_c_reaches_child_processes():
    """Tests that press Ctrl-C in a child process (a batch, a fit) need it to start as
    under a terminal. A suite started in the background by a non-interactive shell
    has SIGINT ignored, and an ignored signal stays ignored in every process it
    starts: the child would rightly ignore the Ctrl-C and run on. A handled signal is
    reset to its default in a new program, so this gives the children the terminal's."""
    import signal

    if signal.getsignal(signal.SIGINT) is signal.SIG_IGN:
        signal.signal(signal.SIGINT, signal.default_int_handler)
    yield

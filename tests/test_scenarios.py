"""The bundled example data: made by the simulator, identical in both places."""

import filecmp
import json
from pathlib import Path

import massfit
from massfit.scenarios.examples import DEMO_DIR, write_all

ROOT = Path(__file__).resolve().parents[1]


def test_example_obs_matches_the_package_copy():
    for name in ("moons.ecsv", "truth.json"):
        assert filecmp.cmp(ROOT / "example_obs" / "orvane" / name, DEMO_DIR / name,
                           shallow=False)


def test_demo_truth_describes_the_data():
    truth = json.loads((DEMO_DIR / "truth.json").read_text())
    obs = massfit.read_observations(DEMO_DIR / "moons.ecsv")
    assert set(obs.companions) == set(truth["companions"])
    # Nominal GM of Jupiter, IAU 2015 Resolution B3: 1.2668653e8 km^3/s^2.
    assert abs(truth["central_gm_km3_s2"] / (truth["central_mass_Mjup"] * 1.2668653e8) - 1) < 1e-9

"""The bundled example data: made by the simulator, identical in both places."""

import filecmp
import json
from pathlib import Path

import massfit
from massfit.scenarios import DEMO_DIR, write_all
from test_example_obs import same_but_last_digits

ROOT = Path(__file__).resolve().parents[1]


def test_example_obs_matches_the_package_copy():
    for name in ("moons.ecsv", "truth.json"):
        assert filecmp.cmp(ROOT / "example_obs" / "orvane" / name, DEMO_DIR / name,
                           shallow=False)


def test_scenarios_regenerate_to_the_last_digits(tmp_path, monkeypatch):
    import massfit.scenarios as scenarios

    # write_all writes the package copy to PACKAGE_DATA: point it away from the
    # checkout, or the test rewrites the very files it compares with.
    monkeypatch.setattr(scenarios, "PACKAGE_DATA", tmp_path / "pkg")
    write_all(tmp_path / "obs")
    for name in ("moons.ecsv", "truth.json"):
        again = (tmp_path / "obs" / "orvane" / name).read_text()
        assert same_but_last_digits(again, (DEMO_DIR / name).read_text()), name


def test_demo_truth_describes_the_data():
    truth = json.loads((DEMO_DIR / "truth.json").read_text())
    obs = massfit.read_observations(DEMO_DIR / "moons.ecsv")
    assert set(obs.companions) == set(truth["companions"])
    # Nominal GM of Jupiter, IAU 2015 Resolution B3: 1.2668653e8 km^3/s^2.
    assert abs(truth["central_gm_km3_s2"] / (truth["central_mass_Mjup"] * 1.2668653e8) - 1) < 1e-9

"""Every invented scenario in example_obs/: documented, fittable, and the package copy equal."""

import filecmp
import json
import math
import re
from pathlib import Path

import numpy as np
import pytest

import massfit
from massfit.scenarios.examples import PACKAGE_DATA, SCENARIOS

ROOT = Path(__file__).resolve().parents[1]
EXAMPLES = ROOT / "example_obs"


def test_every_scenario_has_its_folder():
    assert set(SCENARIOS) <= {p.name for p in EXAMPLES.iterdir() if p.is_dir()}


@pytest.mark.parametrize("name", sorted(SCENARIOS))
def test_package_copy_agrees_with_example_obs(name):
    here, there = EXAMPLES / name, PACKAGE_DATA / name
    files = sorted(p.name for p in here.iterdir())
    assert files == sorted(p.name for p in there.iterdir())
    assert {"README.md", "truth.json"} <= set(files)
    for file in files:
        assert filecmp.cmp(here / file, there / file, shallow=False), file


_NUMBER = re.compile(r"([-+]?(?:\d+\.\d*|\.\d+|\d+)(?:[eE][-+]?\d+)?)")


def same_but_last_digits(first: str, second: str, rtol: float = 1e-12) -> bool:
    """The texts agree word for word, and number for number to ``rtol``.

    numpy and astropy releases may round the last binary digit of a simulated value
    differently (1e-16 relative); anything larger is a change of the example.
    """
    a, b = _NUMBER.split(first), _NUMBER.split(second)
    if len(a) != len(b):
        return False
    # re.split with a group alternates text (even indices) and numbers (odd indices).
    return all(x == y if k % 2 == 0 else math.isclose(float(x), float(y), rel_tol=rtol)
               for k, (x, y) in enumerate(zip(a, b)))


def test_scenarios_regenerate_every_file(tmp_path, monkeypatch):
    import massfit.scenarios.examples as scenarios

    monkeypatch.setattr(scenarios, "PACKAGE_DATA", tmp_path / "pkg")
    scenarios.write_all(tmp_path / "obs")
    for name in SCENARIOS:
        for path in (EXAMPLES / name).iterdir():
            kept = path.read_text()
            for again in (tmp_path / "obs" / name / path.name, tmp_path / "pkg" / name /
                          path.name):
                assert same_but_last_digits(again.read_text(), kept), path
    # Negative control: a change in the sixth digit, or in a word, is seen.
    assert not same_but_last_digits("east 56715.91074", "east 56715.91075")
    assert not same_but_last_digits("body Pell 1.0", "body Doss 1.0")
    assert same_but_last_digits("x 114621.04544112939", "x 114621.04544112936")


def test_mirren_readme_and_config_state_the_truth():
    folder = EXAMPLES / "mirren"
    truth = json.loads((folder / "truth.json").read_text())
    readme = (folder / "README.md").read_text()
    assert f"{truth['central_mass_Msun']} solar masses" in readme
    assert f"parallax of {truth['parallax_mas']} mas" in readme
    setup = massfit.load_config(folder / "config.toml")
    obs = massfit.read_observations(setup.files, **setup.read_options)
    assert obs.companions == ["Mirren-b"] and obs.rows_used == 18
    # A partial orbit: the data span about a third of the period.
    span = float(np.ptp(obs.astrometry.time.tdb.jd))
    assert 0.2 < span / truth["companions"]["Mirren-b"]["period"] < 0.4
    # The companion's mass prior in the config is the one the README describes: 14 +/- 3
    # Jupiter masses (IAU 2015 nominal GM_jup / GM_sun = 1/1047.57; from memory).
    prior = setup.system.companions["Mirren-b"].mass
    assert prior.mean == pytest.approx(14 / 1047.57, rel=2e-3)
    assert prior.sd == pytest.approx(3 / 1047.57, rel=2e-3)

"""The dynamics models from the config, the command line and the API."""

import pytest

import massfit
from massfit.cli.commands import main
from massfit.config.fit import parse_config
from massfit.orbits.dynamics import Keplerian
from massfit.errors import ConfigError
from massfit.orbits.oblate import Oblate


def _config(**dynamics):
    return {"data": {"files": ["x.ecsv"]}, "dynamics": dynamics}


def test_config_builds_each_model():
    assert isinstance(parse_config({"data": {"files": ["x.ecsv"]}}).system.dynamics,
                      Keplerian)
    setup = parse_config(_config(model="oblate", j2=0.016, equatorial_radius="60268 km",
                                 equator_inclination="80 deg", equator_node="10 deg"))
    dyn = setup.system.dynamics
    assert isinstance(dyn, Oblate) and dyn.j2 == 0.016 and dyn.radius_km == 60268.0
    assert dyn.pole is not None
    assert setup.system.compare_keplerian is True
    nbody = parse_config(_config(model="n-body", rtol=1e-11)).system.dynamics
    assert isinstance(nbody, massfit.NBody) and nbody.rtol == 1e-11
    romer = parse_config({"data": {"files": ["x.ecsv"]}, "system": {"romer_delay": True}})
    assert romer.system.romer_delay is True


@pytest.mark.parametrize("dynamics, key", [
    ({"model": "oblate", "j2": 0.01}, "dynamics.equatorial_radius"),
    ({"model": "wobbly"}, "dynamics.model"),
    ({"model": "keplerian", "j2": 0.01}, "dynamics.j2"),
    ({"model": "oblate", "j2": "big", "equatorial_radius": "1 km"}, "dynamics.j2"),
    ({"model": "oblate", "j2": 0.01, "equatorial_radius": "1 kg"},
     "dynamics.equatorial_radius"),
    ({"model": "oblate", "j2": 0.01, "equatorial_radius": "1 km", "pole": "up"},
     "dynamics.pole"),
    ({"model": "n-body", "rtol": 0.5}, "dynamics.rtol"),
    ({"model": "n-body", "j2": 0.01}, "dynamics.j2"),
    ({"model": "perturbed", "mutual_pulls": True, "steps_per_orbit": 2},
     "dynamics.steps_per_orbit"),
    ({"model": "perturbed", "mutual_pulls": True, "steps_per_orbit": "many"},
     "dynamics.steps_per_orbit"),
])
def test_config_errors_name_the_key(dynamics, key):
    with pytest.raises(ConfigError) as info:
        parse_config(_config(**dynamics), file="sys.toml")
    assert info.value.key == key
    assert "sys.toml" in str(info.value)


def test_cli_reports_bad_dynamics_options_without_traceback(tmp_path, capsys):
    status = main(["fit", str(tmp_path / "none.ecsv"), "--out", str(tmp_path / "o"),
                   "--dynamics", "oblate", "--j2", "0.01"])
    err = capsys.readouterr().err
    assert status == 2
    assert "--equatorial-radius" in err and "Traceback" not in err
    status = main(["fit", str(tmp_path / "none.ecsv"), "--out", str(tmp_path / "o"),
                   "--dynamics", "n-body", "--steps-per-orbit", "3"])
    err = capsys.readouterr().err
    assert status == 2 and len(err.strip().splitlines()) == 1
    assert "--steps-per-orbit" in err and "8 to 1000" in err and "Traceback" not in err


def test_api_names():
    spec = massfit.SystemSpec(dynamics=massfit.Oblate(0.015, "70000 km"), romer_delay=True)
    assert spec.dynamics.radius_km == 70000.0


def test_saved_model_state_rebuilds_the_dynamics():
    # A result folder keeps the assumptions in run.json; the dynamics must come back.
    import json

    from massfit.result.loading import _decode
    from massfit.write.saved_state import _encode

    for dynamics in (massfit.Oblate(0.015, "70000 km", "80 deg", "20 deg"),
                     massfit.NBody(rtol=1e-11), massfit.NBody(steps_per_orbit=32),
                     Keplerian()):
        spec = massfit.SystemSpec(dynamics=dynamics, romer_delay=True)
        back = _decode(json.loads(json.dumps(_encode(spec))))
        assert type(back.dynamics) is type(dynamics)
        assert back.dynamics.describe() == dynamics.describe()
        assert back.romer_delay is True

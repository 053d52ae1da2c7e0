"""The TOML config: every key checked, paths relative to the file, priors parsed."""

import numpy as np
import pytest

from massfit.config.fit import load_config
from massfit.errors import ConfigError
from massfit.priors import Fixed, LogUniform, Normal, Uniform


def write(tmp_path, text, name="fit.toml"):
    path = tmp_path / name
    path.write_text(text)
    return path


def test_full_config_resolves(tmp_path):
    sub = tmp_path / "cfg"
    sub.mkdir()
    path = write(sub, """
[data]
files = ["../obs/wren.ecsv"]
skip_bad_rows = true
[system]
primary = "Hollin"
parallax = "25 mas"
parallax_err = "0.25 mas"
central_mass_prior = {kind = "log-uniform", low = "0.1 Msun", high = "10 Msun"}
[companions.Wren]
period_prior = {kind = "log-uniform", low = "1 yr", high = "100 yr"}
eccentricity_prior = {kind = "uniform", low = 0, high = 0.8}
inclination_prior = {kind = "normal", mean = "60 deg", sd = "5 deg"}
mass = "10 Mjup"
[sampler]
walkers = 40
max_steps = 2000
seed = 4
[output]
folder = "results"
""")
    setup = load_config(path)
    assert setup.files == [(tmp_path / "obs" / "wren.ecsv").resolve()]
    assert setup.output == (sub / "results").resolve()
    assert setup.read_options["skip_bad_rows"] is True
    assert setup.read_options["primary"] == "Hollin"
    spec = setup.system
    assert isinstance(spec.parallax, Normal) and spec.parallax.mean == 25.0
    assert isinstance(spec.central_mass, LogUniform)
    assert spec.central_mass.low == pytest.approx(0.1)
    wren = spec.companions["Wren"]
    assert wren.period.low == pytest.approx(365.25)
    assert isinstance(wren.eccentricity, Uniform) and wren.eccentricity.high == 0.8
    assert wren.inclination.mean == pytest.approx(np.radians(60))
    # 10 Jupiter masses in nominal solar masses: GM_jup / GM_sun (IAU 2015 B3).
    assert isinstance(wren.mass, Fixed)
    assert wren.mass.value == pytest.approx(10 * 1.2668653e17 / 1.3271244e20, rel=1e-6)
    assert spec.strict_companions
    assert setup.sampler.walkers == 40 and setup.sampler.seed == 4


@pytest.mark.parametrize("text, key", [
    ("[data]\nfiles = ['a.ecsv']\nfiels = 1\n", "data.fiels"),
    ("[data]\nfiles = ['a.ecsv']\n[sampler]\nwalkers = 'many'\n", "sampler.walkers"),
    ("[data]\nfiles = ['a.ecsv']\n[sampler]\nwalkers = 4.5\n", "sampler.walkers"),
    ("[data]\nfiles = ['a.ecsv']\n[system]\nparallax = 25\n", "system.parallax"),
    ("[data]\nfiles = ['a.ecsv']\n[system]\nparallax = '25 furlongs'\n", "system.parallax"),
    ("[data]\nfiles = []\n", "data.files"),
    ("[data]\nfiles = ['a.ecsv']\n[companions.B]\nperiod = '3 d'\n", "companions.B.period"),
    ("[data]\nfiles = ['a.ecsv']\n[companions.B]\nperiod_prior = {kind = 'gamma'}\n",
     "companions.B.period_prior.kind"),
    ("[data]\nfiles = ['a.ecsv']\n[companions.B]\n"
     "eccentricity_prior = {kind = 'uniform', low = 0, high = 1.5}\n",
     "companions.B.eccentricity_prior"),
    ("[data]\nfiles = ['a.ecsv']\n[system]\n"
     "central_mass_prior = {kind = 'log-uniform', low = '0 Msun', high = '1 Msun'}\n",
     "system.central_mass_prior"),
    ("[wrong]\n", "wrong"),
])
def test_bad_config_names_the_key(tmp_path, text, key):
    path = write(tmp_path, text)
    with pytest.raises(ConfigError) as info:
        load_config(path)
    assert f"key '{key}'" in str(info.value)
    assert str(path) in str(info.value)


def test_broken_toml_names_the_file(tmp_path):
    path = write(tmp_path, "[data\nfiles = 3")
    with pytest.raises(ConfigError, match="not valid TOML"):
        load_config(path)


def test_config_fit_from_cli(tmp_path, binary_file):
    from massfit.cli.commands import main

    data, _ = binary_file
    path = write(tmp_path, f"""
[data]
files = ["{data.name}"]
[system]
parallax = "25 mas"
parallax_err = "0.25 mas"
[sampler]
seed = 1
max_steps = 400
[output]
folder = "out"
plots = false
""", name="wren.toml")
    # binary_file wrote the data into tmp_path too, so the relative path resolves.
    assert data.parent == tmp_path
    status = main(["fit", str(path), "--quiet"])
    assert status == 3  # 400 steps cannot be 50 autocorrelation times
    assert (tmp_path / "out" / "summary.json").exists()

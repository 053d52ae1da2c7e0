"""One table of quantities: the summary, the samples, the parameter tables and the corner
plot name every quantity from summarise/quantities.py, and agree with each other."""

import astropy.units as u
import numpy as np
import pytest

from massfit.summarise.quantities import CENTRAL, COMPANION, MASS_UNIT_KEYS, described
from massfit.write.tables import parameter_rows


def _block(value, unit):
    return {"unit": unit, "median": value, "lower_68": value * 0.99, "upper_68": value * 1.01,
            "lower_95": value * 0.98, "upper_95": value * 1.02}


def test_units_of_the_table_are_astropy_units_of_the_stated_text():
    # The unit text written in summary.json reads back as the astropy unit of the entry
    # (dates excepted: a JD is a time on a scale, not a duration).
    for d in list(CENTRAL.values()) + list(COMPANION.values()):
        if d.key == "periapsis_time":
            continue
        text = (d.unit_text.replace("M_sun", "solMass").replace("M_jup", "jupiterMass")
                .replace("M_earth", "earthMass"))
        assert u.Unit(text or "") == d.unit, d.key


def test_mass_unit_keys_are_summary_keys_with_the_unit_of_their_name():
    # Nominal masses (IAU 2015 B3, as astropy ships them): the unit names map to them.
    assert CENTRAL[MASS_UNIT_KEYS["Msun"]].unit == u.M_sun
    assert CENTRAL[MASS_UNIT_KEYS["Mjup"]].unit == u.M_jup
    assert CENTRAL[MASS_UNIT_KEYS["Mearth"]].unit == u.M_earth
    assert described("b.period") is COMPANION["period"]


def test_parameter_table_takes_words_symbols_and_units_from_the_table():
    summary = {"central_gm": _block(1.2e8, "km3 / s2"), "central_mass": _block(1.8e27, "kg"),
               "central_mass_solar": _block(9.1e-4, "M_sun"),
               "central_mass_jupiter": _block(0.95, "M_jup"),
               "central_mass_earth": _block(302.0, "M_earth"),
               "companions": {"b": {"period": _block(3.5, "d"),
                                    "rv_semi_amplitude": _block(0.02, "km / s"),
                                    "periapsis_argument": _block(40.0, "deg")}}}
    rows = parameter_rows(summary)
    by_key = {row.key: row for row in rows}
    assert [row.key for row in rows] == ["central_gm", "central_mass", "central_mass_jupiter",
                                         "b.period", "b.periapsis_argument",
                                         "b.rv_semi_amplitude"]
    for row in rows:
        d = described(row.key)
        assert (row.name, row.symbol, row.unit_text) == (d.words, d.symbol, d.unit_text)
    # The companion's omega is labelled as the companion's (the primary's is +180 deg).
    assert "companion" in by_key["b.periapsis_argument"].name


def test_fit_samples_summary_and_corner_use_the_same_keys(tmp_path):
    from massfit import fit
    from massfit.plot import corner_plot

    from conftest import write_one_companion

    path = write_one_companion(tmp_path, seed=3)
    result = fit(path, walkers=16, max_steps=300, seed=1, progress=False)
    # Every derived sample of the central body and of a companion has its entry, and
    # the summary's block of it is in the entry's unit.
    for key, values in result.samples.items():
        if isinstance(values, np.ndarray):
            assert key in CENTRAL, key
            assert result.summary[key]["unit"] == CENTRAL[key].unit_text
    for comp, samples in result.samples["companions"].items():
        for key in samples:
            assert key in COMPANION, key
            if key in result.summary["companions"][comp]:
                assert result.summary["companions"][comp][key]["unit"] == COMPANION[key].unit_text
    table = result.samples_table()
    assert table["central_mass_solar"].unit == u.M_sun
    fig = corner_plot(result)
    labels = " ".join(ax.get_xlabel() for ax in fig.axes)
    assert "$P_{" in labels and "$e_{" in labels  # the symbols of the table, per body
    import matplotlib.pyplot as plt

    plt.close(fig)

"""The one table of reported quantities: each one's key, words, symbol and unit.

Every place that names a quantity — ``summary.json``, ``samples.ecsv``, the parameter
tables, the corner plot, the terminal report — takes it from here, so that adding a
summary quantity is one entry and no two places can spell the same thing differently.

Keys are those of ``summary.json`` (companion quantities without the body's name in
front); the samples of a fit use the same keys.
"""

from __future__ import annotations

from dataclasses import dataclass

import astropy.units as u

from massfit.model.frame import FRAME_UNITS

__all__ = ["Described", "CENTRAL", "COMPANION", "SYSTEM", "SYSTEM_SAMPLED",
           "MASS_UNIT_KEYS", "MASS_UNIT_LABELS",
           "MASS_UNIT_ASTROPY", "described", "sample_key_of_mass_unit"]


@dataclass(frozen=True)
class Described:
    """How one quantity is named and measured.

    Attributes
    ----------
    key : str
        The key in ``summary.json`` and in the samples.
    words : str
        Its name in words, for tables and messages.
    symbol : str
        LaTeX math, without dollar signs.
    unit : astropy.units.UnitBase
        Its unit (``u.one`` for a pure number).
    unit_text : str
        The unit as ``summary.json`` writes it ("" for a pure number).
    unit_latex : str
        The unit as LaTeX math, without dollar signs ("" for a pure number).
    plain : str
        The symbol in plain text, for the terminal (default: ``symbol``).
    """

    key: str
    words: str
    symbol: str
    unit: u.UnitBase
    unit_text: str
    unit_latex: str
    plain: str = ""

    def __post_init__(self):
        if not self.plain:
            object.__setattr__(self, "plain", self.symbol)

    def axis_label(self) -> str:
        """``$symbol$ [$unit$]`` for an axis or a corner panel."""
        return f"${self.symbol}$" + (f" [${self.unit_latex}$]" if self.unit_latex else "")


_KM_S = r"\mathrm{km\,s^{-1}}"
_DEG = r"^\circ"
_MSUN = r"M_\odot"

#: The central body's quantities.
CENTRAL = {d.key: d for d in (
    Described("central_gm", "gravitational parameter", "GM", u.km ** 3 / u.s ** 2,
              "km3 / s2", r"\mathrm{km^{3}\,s^{-2}}"),
    Described("central_mass", "central mass", "M", u.kg, "kg", r"\mathrm{kg}"),
    Described("central_mass_solar", "central mass", "M", u.M_sun, "M_sun", _MSUN),
    Described("central_mass_jupiter", "central mass", "M", u.M_jup, "M_jup", r"M_\mathrm{J}"),
    Described("central_mass_earth", "central mass", "M", u.M_earth, "M_earth",
              r"M_\oplus"),
    Described("parallax", "parallax", r"\varpi", u.mas, "mas", r"\mathrm{mas}",
              plain="parallax"),
)}

#: Each companion's quantities.
COMPANION = {d.key: d for d in (
    Described("period", "period", "P", u.day, "d", r"\mathrm{d}"),
    Described("semi_major_axis", "semi-major axis", "a", u.au, "au", r"\mathrm{au}"),
    Described("semi_major_axis_km", "semi-major axis", "a", u.km, "km", r"\mathrm{km}"),
    Described("semi_major_axis_angle", "semi-major axis", "a", u.mas, "mas", r"\mathrm{mas}"),
    Described("eccentricity", "eccentricity", "e", u.one, "", ""),
    Described("inclination", "inclination", "i", u.deg, "deg", _DEG),
    Described("periapsis_argument", "argument of periapsis (the companion's)", r"\omega",
              u.deg, "deg", _DEG, plain="omega"),
    Described("ascending_node", "position angle of the node", r"\Omega", u.deg, "deg", _DEG,
              plain="Omega"),
    Described("periapsis_time", "time of periapsis", r"t_\mathrm{p}", u.day, "JD (TDB)",
              r"\mathrm{JD\ (TDB)}", plain="t_p"),
    Described("mass", "companion mass", "m", u.M_sun, "M_sun", _MSUN),
    Described("rv_semi_amplitude", "velocity semi-amplitude of the primary", "K_1",
              u.km / u.s, "km / s", _KM_S, plain="K1"),
    Described("rv_semi_amplitude_companion", "velocity semi-amplitude of the companion",
              "K_2", u.km / u.s, "km / s", _KM_S, plain="K2"),
    Described("mass_function", "mass function", "f(m)", u.M_sun, "M_sun", _MSUN),
    Described("mass_function_companion", "mass function of the companion's velocities",
              "f_2(M)", u.M_sun, "M_sun", _MSUN, plain="f2(M)"),
    Described("minimum_mass", "minimum mass (i = 90 deg)", r"m_\mathrm{min}", u.M_sun,
              "M_sun", _MSUN, plain="m_min"),
    Described("mass_sin3i", "companion mass times sin^3 i", r"m \sin^3 i", u.M_sun, "M_sun",
              _MSUN, plain="m sin3i"),
    Described("primary_mass_sin3i", "primary mass times sin^3 i", r"M \sin^3 i", u.M_sun,
              "M_sun", _MSUN, plain="M sin3i"),
    Described("mass_ratio", "mass ratio (companion / primary)", "q", u.one, "", ""),
    Described("inclination_to_equator", "inclination to the primary's equator",
              r"i_\mathrm{eq}", u.deg, "deg", _DEG, plain="i_eq"),
    Described("node_on_equator", "node on the primary's equator", r"\Omega_\mathrm{eq}",
              u.deg, "deg", _DEG, plain="Om_eq"),
)}

_MAS = r"\mathrm{mas}"
_MAS_YR = r"\mathrm{mas\,yr^{-1}}"

#: The whole system's quantities beyond the central mass (where a fit has them): the
#: distance, the precession scale, the frame terms (``frame.<term>``: the primary's
#: place and motion in the data's frame) and the mass-distance correlation.
SYSTEM = {d.key: d for d in (
    Described("distance", "distance", "d", u.pc, "pc", r"\mathrm{pc}"),
    Described("precession_scale", "precession scale (1 = relativistic)",
              r"f_\mathrm{prec}", u.one, "", "", plain="f_prec"),
    # the frame terms' units are the model's own (massfit.model.frame.FRAME_UNITS)
    Described("frame.east", "position of the mass, east, at the reference epoch", "x_0",
              u.Unit(FRAME_UNITS["east"]), FRAME_UNITS["east"], _MAS),
    Described("frame.north", "position of the mass, north, at the reference epoch", "y_0",
              u.Unit(FRAME_UNITS["north"]), FRAME_UNITS["north"], _MAS),
    Described("frame.motion_east", "proper motion of the mass, east", r"\mu_x",
              u.Unit(FRAME_UNITS["motion_east"]), FRAME_UNITS["motion_east"], _MAS_YR,
              plain="mu_x"),
    Described("frame.motion_north", "proper motion of the mass, north", r"\mu_y",
              u.Unit(FRAME_UNITS["motion_north"]), FRAME_UNITS["motion_north"], _MAS_YR,
              plain="mu_y"),
    Described("frame.velocity", "line-of-sight velocity of the mass", r"v_{z,0}",
              u.Unit(FRAME_UNITS["velocity"]), FRAME_UNITS["velocity"], _KM_S,
              plain="v_z0"),
    Described("mass_distance_correlation", "correlation of log mass and log distance",
              r"\rho_{\ln M,\ln d}", u.one, "", "", plain="rho(ln M, ln d)"),
)}
#: Those of them with samples (interval blocks): the corner's and the tables' rows.
SYSTEM_SAMPLED = tuple(key for key in SYSTEM if key != "mass_distance_correlation")

#: Mass units offered for the central mass: the name users give -> its summary key.
MASS_UNIT_KEYS = {"Msun": "central_mass_solar", "Mjup": "central_mass_jupiter",
                  "Mearth": "central_mass_earth", "kg": "central_mass"}
#: ... its LaTeX symbol and its astropy unit.
MASS_UNIT_LABELS = {name: CENTRAL[key].unit_latex for name, key in MASS_UNIT_KEYS.items()}
MASS_UNIT_ASTROPY = {name: CENTRAL[key].unit for name, key in MASS_UNIT_KEYS.items()}


def described(key: str) -> Described:
    """The description of a summary key: central (``central_gm``), the system's
    (``distance``, ``frame.east``) or a companion's (``period`` or ``b.period``)."""
    if key in CENTRAL:
        return CENTRAL[key]
    if key in SYSTEM:
        return SYSTEM[key]
    return COMPANION[key.rsplit(".", 1)[-1]]


def sample_key_of_mass_unit(unit: str) -> str:
    """The summary (and sample) key of the central mass in a unit ("Msun", ...)."""
    try:
        return MASS_UNIT_KEYS[unit]
    except KeyError:
        from massfit.errors import ConfigError

        raise ConfigError(f"unknown mass unit {unit!r}; accepted: {', '.join(MASS_UNIT_KEYS)}",
                          key="mass_unit") from None

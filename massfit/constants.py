"""Physical constants in massfit's internal units, all taken from astropy.constants.

Internal units: lengths in au, times in days (86400 s), GM in au^3/day^2, masses in
nominal solar masses (GM / GM_sun, IAU 2015 Resolution B3), velocities in km/s where
they meet the user and au/day inside the kernel.
"""

from __future__ import annotations

import astropy.constants as const
import astropy.units as u

__all__ = [
    "DAY_S", "AU_KM", "GM_SUN", "GM_SUN_KM3_S2", "C_AU_PER_DAY", "KM_S_PER_AU_DAY",
    "LIGHT_DAYS_PER_PC", "AU_PER_PC", "G_SI", "G_REL_UNCERTAINTY", "MASS_UNITS",
]

DAY_S = 86400.0
AU_KM = const.au.to_value(u.km)
#: Nominal solar GM (IAU 2015) in au^3 / day^2.
GM_SUN = (const.GM_sun * (DAY_S * u.s) ** 2 / const.au ** 3).to_value(u.one)
GM_SUN_KM3_S2 = const.GM_sun.to_value(u.km ** 3 / u.s ** 2)
C_AU_PER_DAY = (const.c * DAY_S * u.s / const.au).to_value(u.one)
KM_S_PER_AU_DAY = AU_KM / DAY_S
LIGHT_DAYS_PER_PC = (const.pc / const.c).to_value(u.day)
AU_PER_PC = (const.pc / const.au).to_value(u.one)
#: Newton's constant (CODATA 2018, as astropy ships it) and its relative uncertainty.
G_SI = const.G.value
G_REL_UNCERTAINTY = const.G.uncertainty / const.G.value

#: Mass units offered for reporting: name -> GM of one unit in km^3/s^2.
MASS_UNITS = {
    "Msun": const.GM_sun.to_value(u.km ** 3 / u.s ** 2),
    "Mjup": const.GM_jup.to_value(u.km ** 3 / u.s ** 2),
    "Mearth": const.GM_earth.to_value(u.km ** 3 / u.s ** 2),
}

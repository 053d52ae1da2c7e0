"""Values with units as users write them ("12.3 mas", "1.1 Msun"), read into astropy
quantities with their dimension checked, for options, config keys and priors."""

from __future__ import annotations

import astropy.units as u
import numpy as np

__all__ = ["parse_quantity"]


def parse_quantity(text, *, expect, key=None, file=None):
    """Read ``"VALUE UNIT"`` (a string, a number with a default unit, or a Quantity).

    Parameters
    ----------
    text : str or Quantity
        What the user wrote, e.g. ``"12.3 mas"`` or ``"1.1 Msun"``.
    expect : astropy.units.Unit
        A unit the value must convert to (physical type checked with astropy).
    key : str, optional
        The config key or option, for the error message.
    file : str, optional
        The config file, for the error message.

    Returns
    -------
    astropy.units.Quantity
    """
    from massfit.errors import ConfigError

    if isinstance(text, u.Quantity):
        quantity = text
    else:
        try:
            quantity = u.Quantity(str(text).replace("Msun", "M_sun")
                                  .replace("Mjup", "M_jup").replace("Mearth", "M_earth"))
        except (TypeError, ValueError) as exc:
            raise ConfigError(f"cannot read '{text}' as a value with a unit "
                              f"(write it like '1.5 {expect.to_string()}')",
                              key=key, file=file) from exc
    if quantity.unit == u.dimensionless_unscaled and expect != u.dimensionless_unscaled:
        raise ConfigError(f"'{text}' has no unit; give one that converts to "
                          f"{expect.to_string()}", key=key, file=file)
    equivalencies = u.parallax() if expect.physical_type in ("length", "angle") else []
    if not quantity.unit.is_equivalent(expect, equivalencies=equivalencies):
        raise ConfigError(f"'{text}' is not in a unit that converts to "
                          f"{expect.to_string()}", key=key, file=file)
    if not np.all(np.isfinite(quantity.value)):
        raise ConfigError(f"'{text}' is not a finite number", key=key, file=file)
    return quantity

"""Prior distributions on physical quantities.

Each prior is a small object with a vectorised ``log_pdf`` and a ``sample`` method. The
model pairs a prior with the coordinate it samples in and adds the Jacobian itself, so a
prior always means a density on the physical quantity it is written for.

Config and API form (a TOML inline table or a dict)::

    {kind = "log-uniform", low = "1e-6 Msun", high = "10 Msun"}
    {kind = "uniform", low = 0, high = 0.9}
    {kind = "normal", mean = "12.0 mas", sd = "0.3 mas"}       # optional low, high
    {kind = "fixed", value = "0.002 Msun"}
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from massfit.errors import ConfigError

__all__ = ["Prior", "Uniform", "LogUniform", "Normal", "Fixed", "prior_from_spec"]


class Prior:
    """Base class. ``low`` and ``high`` bound the support (may be infinite)."""

    low: float = -np.inf
    high: float = np.inf

    def log_pdf(self, x):
        raise NotImplementedError

    def sample(self, rng, size):
        raise NotImplementedError

    def quantile(self, u):
        """The value below which a fraction ``u`` (0..1) of the prior lies (the inverse
        of :meth:`cdf`); maps a uniform draw to a draw from the prior."""
        raise NotImplementedError

    def cdf(self, x):
        """The prior probability below ``x``."""
        raise NotImplementedError

    @property
    def is_fixed(self) -> bool:
        return False

    def _inside(self, x):
        return (x >= self.low) & (x <= self.high)


@dataclass(frozen=True)
class Uniform(Prior):
    low: float
    high: float

    def __post_init__(self):
        _check_order(self.low, self.high, "uniform")

    def log_pdf(self, x):
        x = np.asarray(x, dtype=float)
        return np.where(self._inside(x), -np.log(self.high - self.low), -np.inf)

    def sample(self, rng, size):
        return rng.uniform(self.low, self.high, size)

    def quantile(self, u):
        return self.low + np.asarray(u, dtype=float) * (self.high - self.low)

    def cdf(self, x):
        return np.clip((np.asarray(x, dtype=float) - self.low) / (self.high - self.low),
                       0.0, 1.0)

    def describe(self, unit=""):
        return f"uniform on [{self.low:.4g}, {self.high:.4g}] {unit}".strip()


@dataclass(frozen=True)
class LogUniform(Prior):
    low: float
    high: float

    def __post_init__(self):
        if not self.low > 0:
            raise ConfigError(f"a log-uniform prior needs low > 0, got {self.low}")
        _check_order(self.low, self.high, "log-uniform")

    def log_pdf(self, x):
        x = np.asarray(x, dtype=float)
        with np.errstate(divide="ignore", invalid="ignore"):
            value = -np.log(x) - np.log(np.log(self.high / self.low))
        return np.where(self._inside(x), value, -np.inf)

    def sample(self, rng, size):
        return np.exp(rng.uniform(np.log(self.low), np.log(self.high), size))

    def quantile(self, u):
        return self.low * (self.high / self.low) ** np.asarray(u, dtype=float)

    def cdf(self, x):
        with np.errstate(divide="ignore", invalid="ignore"):
            share = np.log(np.asarray(x, dtype=float) / self.low) / np.log(self.high /
                                                                              self.low)
        return np.clip(np.nan_to_num(share, nan=0.0, neginf=0.0), 0.0, 1.0)

    def describe(self, unit=""):
        return f"log-uniform on [{self.low:.4g}, {self.high:.4g}] {unit}".strip()


@dataclass(frozen=True)
class Normal(Prior):
    mean: float
    sd: float
    low: float = -np.inf
    high: float = np.inf

    def __post_init__(self):
        if not (np.isfinite(self.sd) and self.sd > 0):
            raise ConfigError(f"a normal prior needs sd > 0, got {self.sd}")
        _check_order(self.low, self.high, "normal")

    def log_pdf(self, x):
        # Truncation changes only a constant, which no fit depends on.
        x = np.asarray(x, dtype=float)
        z = (x - self.mean) / self.sd
        value = -0.5 * z * z - np.log(self.sd * np.sqrt(2.0 * np.pi))
        return np.where(self._inside(x), value, -np.inf)

    def sample(self, rng, size):
        out = rng.normal(self.mean, self.sd, size)
        bad = ~self._inside(out)
        while np.any(bad):
            out[bad] = rng.normal(self.mean, self.sd, bad.sum())
            bad = ~self._inside(out)
        return out

    def _bounds(self):
        """The truncation's standard-normal cdf at low and high."""
        from scipy.special import ndtr

        return (ndtr((self.low - self.mean) / self.sd),
                ndtr((self.high - self.mean) / self.sd))

    def quantile(self, u):
        # The truncated normal's inverse cdf (the truncation renormalises the density).
        from scipy.special import ndtri

        lo, hi = self._bounds()
        p = lo + np.asarray(u, dtype=float) * (hi - lo)
        return np.clip(self.mean + self.sd * ndtri(p), self.low, self.high)

    def cdf(self, x):
        from scipy.special import ndtr

        lo, hi = self._bounds()
        z = (np.asarray(x, dtype=float) - self.mean) / self.sd
        return np.clip((ndtr(z) - lo) / (hi - lo), 0.0, 1.0)

    def describe(self, unit=""):
        return f"normal({self.mean:.6g}, {self.sd:.3g}) {unit}".strip()


@dataclass(frozen=True)
class Fixed(Prior):
    value: float

    @property
    def is_fixed(self) -> bool:
        return True

    def log_pdf(self, x):
        return np.zeros_like(np.asarray(x, dtype=float))

    def sample(self, rng, size):
        return np.full(size, self.value, dtype=float)

    def quantile(self, u):
        return np.full(np.shape(u), self.value, dtype=float)

    def cdf(self, x):
        return np.where(np.asarray(x, dtype=float) >= self.value, 1.0, 0.0)

    def describe(self, unit=""):
        return f"fixed at {self.value:.6g} {unit}".strip()


def _check_order(low, high, kind):
    if not low < high:
        raise ConfigError(f"a {kind} prior needs low < high, got low={low}, high={high}")


_KINDS = {
    "uniform": ("low", "high"),
    "log-uniform": ("low", "high"),
    "normal": ("mean", "sd"),
    "fixed": ("value",),
}


def prior_from_spec(spec, *, unit, key, file=None, convert=None):
    """Build a prior from a config/API description.

    Parameters
    ----------
    spec : dict or Prior
        ``{"kind": ..., ...}`` as documented in this module, or a Prior (returned as is).
    unit : astropy.units.Unit or None
        Unit that values are converted to; ``None`` for dimensionless values.
    key : str
        The config key, for error messages.
    convert : callable, optional
        ``convert(value, key) -> float`` replacing the default unit handling.

    Returns
    -------
    Prior
    """
    if isinstance(spec, Prior):
        return spec
    if not isinstance(spec, dict):
        raise ConfigError("a prior is a table such as {kind = \"uniform\", low = 0, "
                          "high = 1}", key=key, file=file)
    kind = spec.get("kind")
    if kind not in _KINDS:
        raise ConfigError(f"unknown prior kind {kind!r}; accepted: "
                          f"{', '.join(_KINDS)}", key=f"{key}.kind", file=file)
    allowed = set(_KINDS[kind]) | {"kind"} | ({"low", "high"} if kind == "normal" else set())
    for name in spec:
        if name not in allowed:
            raise ConfigError(f"unknown key for a {kind} prior; accepted: "
                              f"{', '.join(sorted(allowed))}", key=f"{key}.{name}", file=file)
    for name in _KINDS[kind]:
        if name not in spec:
            raise ConfigError(f"a {kind} prior needs '{name}'", key=key, file=file)
    if convert is None:
        def convert(value, where):
            return _to_float(value, unit, where, file)
    values = {name: convert(spec[name], f"{key}.{name}") for name in spec if name != "kind"}
    builder = {"uniform": Uniform, "log-uniform": LogUniform, "normal": Normal,
               "fixed": Fixed}[kind]
    try:
        return builder(**values)
    except ConfigError as exc:
        raise ConfigError(exc.reason, key=key, file=file) from None


def _to_float(value, unit, key, file):
    from massfit.quantities import parse_quantity
    import astropy.units as u

    if unit is None or unit == u.dimensionless_unscaled:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise ConfigError(f"expected a number, got {value!r}", key=key, file=file)
        return float(value)
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        raise ConfigError(f"'{value}' has no unit; write it like \"{value} "
                          f"{unit.to_string()}\"", key=key, file=file)
    quantity = parse_quantity(value, expect=unit, key=key, file=file)
    return float(quantity.to_value(unit, equivalencies=u.parallax()))

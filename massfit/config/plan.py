"""The TOML configuration of an observing plan, checked key by key.

Layout (``[assumed]`` or ``fit_folder``, and ``[epochs].candidates``, are required)::

    time_scale = "utc"                # scale of every time written in this file
    time_format = "jd"                # only for times written as numbers

    fit_folder = "fit-out"            # plan from a finished fit's posterior, or:

    [assumed]                         # plan from assumed elements
    central_mass = "0.74 Msun"
    parallax = "24.0 mas"
    parallax_err = "0.05 mas"         # a Gaussian prior; without it the parallax is fixed

    [assumed.companions.Wren]
    period = "4310 d"
    eccentricity = 0.42
    inclination = "58 deg"
    periapsis_argument = "212 deg"    # of the companion's relative orbit
    ascending_node = "104 deg"        # position angle of the ascending node
    periapsis_time = "2029-05-14T00:00:00"
    mass = "0.08 Msun"                # the companion's own mass (default 0)

    [epochs]                          # each: a table file, or an evenly spaced range
    observed = {start = "2024-01-10T00:00:00", stop = "2026-06-01T00:00:00",
                every = "110 d", error = "0.5 mas"}
    candidates = "nights.ecsv"
    error = "0.5 mas"                 # for files without an error column
    error_unit = "mas"                # for a plain CSV error column
    next = 6                          # how many next epochs to choose

    [check]                           # simulate and fit to test the forecast
    schedules = 2                     # 0 to 3: planned, evenly spaced, all candidates
    max_steps = 2000
    seed = 1

    [output]
    folder = "plan-out"
    plots = true
    replace_existing = false          # true: replace a plan massfit wrote there (--force)
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import astropy.units as u

from massfit.config.fit import check_keys, read_toml, real_path
from massfit.quantities import parse_quantity
from massfit.errors import ConfigError
from massfit.plan.schedule import Schedule, parse_time
from massfit.plan.system import AssumedSystem
from massfit.sample.chain import check_seed

__all__ = ["PlanSetup", "load_plan_config", "parse_plan_config", "plan_setup",
           "schedule_from_spec"]

_SCHEMA = {
    "time_scale": str, "time_format": str, "fit_folder": str,
    "assumed": {"central_mass": str, "parallax": str, "parallax_err": str,
                "companions": dict},
    "epochs": {"observed": object, "candidates": object, "error": str, "error_unit": str,
               "next": int},
    "check": {"schedules": int, "max_steps": int, "seed": int},
    "output": {"folder": str, "plots": bool, "replace_existing": bool},
}
_COMPANION = {"period": str, "eccentricity": (int, float), "inclination": str,
              "periapsis_argument": str, "ascending_node": str, "periapsis_time": object,
              "mass": str}
_RANGE = {"start": object, "stop": object, "every": str, "error": str}


@dataclass
class PlanSetup:
    """Everything a plan config says, resolved and checked.

    Attributes
    ----------
    source : AssumedSystem or Path
        The assumed system, or the folder of a finished fit.
    candidates, observed : Schedule or None
    n_next, check, check_steps, seed : int
    output : Path or None
    plots : bool
    replace_existing : bool
        Replace a result massfit wrote before in the output folder (``--force``).
    raw : dict
        The config as read.
    """

    source: object
    candidates: Schedule | None = None
    observed: Schedule | None = None
    n_next: int = 5
    check: int = 0
    check_steps: int = 2000
    seed: int = 0
    output: Path | None = None
    plots: bool = True
    replace_existing: bool = False
    raw: dict = field(default_factory=dict)


def load_plan_config(path) -> PlanSetup:
    """Read and check a plan's TOML config; paths in it are relative to the file."""
    path = Path(path)
    return parse_plan_config(read_toml(path), base=path.parent, file=str(path))


def parse_plan_config(raw: dict, *, base=".", file=None) -> PlanSetup:
    """Check a plan config dictionary (as TOML gives it) and resolve it."""
    base = Path(base)
    check_keys(raw, _SCHEMA, "", file)
    times = {"time_scale": raw.get("time_scale"), "time_format": raw.get("time_format")}
    if ("assumed" in raw) == ("fit_folder" in raw):
        raise ConfigError("give either an [assumed] system or a fit_folder to plan from",
                          key="assumed", file=file)
    if "assumed" in raw:
        source = _assumed(raw["assumed"], times, file)
    else:
        source = real_path(base / raw["fit_folder"])
    epochs = raw.get("epochs", {})
    error = epochs.get("error")
    unit = epochs.get("error_unit")
    candidates = None
    if "candidates" in epochs:
        candidates = schedule_from_spec(epochs["candidates"], "epochs.candidates", base,
                                        times, error, file, unit)
    observed = None
    if "observed" in epochs:
        observed = schedule_from_spec(epochs["observed"], "epochs.observed", base, times,
                                      error, file, unit)
    check = raw.get("check", {})
    check_seed(check.get("seed"), key="check.seed", file=file)
    out = raw.get("output", {})
    return PlanSetup(source=source, candidates=candidates, observed=observed,
                     n_next=epochs.get("next", 5), check=check.get("schedules", 0),
                     check_steps=check.get("max_steps", 2000), seed=check.get("seed", 0),
                     output=real_path(base / out["folder"]) if "folder" in out else None,
                     plots=out.get("plots", True),
                     replace_existing=out.get("replace_existing", False), raw=raw)


def schedule_from_spec(spec, key, base, times, error, file=None,
                       error_unit=None) -> Schedule:
    """A schedule from a file name or a ``{start, stop, every, error}`` table."""
    if isinstance(spec, str):
        path = Path(spec)
        path = path if path.is_absolute() else Path(base) / path
        return Schedule.read(path, error=error, time_format=times.get("time_format"),
                             time_scale=times.get("time_scale"), error_unit=error_unit)
    if not isinstance(spec, dict):
        raise ConfigError("give a schedule file name, or a table {start, stop, every, "
                          "error}", key=key, file=file)
    check_keys(spec, _RANGE, f"{key}.", file)
    for name in ("start", "stop", "every"):
        if name not in spec:
            raise ConfigError(f"an evenly spaced schedule needs '{name}'", key=key, file=file)
    try:
        return Schedule.every(spec["start"], spec["stop"], spec["every"],
                              spec.get("error", error), time_format=times.get("time_format"),
                              time_scale=times.get("time_scale"), key_prefix=f"{key}.")
    except ConfigError as exc:
        raise ConfigError(exc.reason, key=exc.key, file=file) from None


def _assumed(table, times, file):
    for name in ("central_mass", "companions"):
        if name not in table:
            raise ConfigError(f"the assumed system needs '{name}'", key=f"assumed.{name}",
                              file=file)
    mass = parse_quantity(table["central_mass"], expect=u.kg, key="assumed.central_mass",
                          file=file)
    plx = err = None
    if "parallax" in table:
        plx = parse_quantity(table["parallax"], expect=u.mas, key="assumed.parallax",
                             file=file).to(u.mas, equivalencies=u.parallax())
    if "parallax_err" in table:
        if plx is None:
            raise ConfigError("a parallax error needs a parallax", key="assumed.parallax_err",
                              file=file)
        err = parse_quantity(table["parallax_err"], expect=u.mas,
                             key="assumed.parallax_err", file=file).to(u.mas)
        if not err.value > 0:
            raise ConfigError("the parallax error must be positive",
                              key="assumed.parallax_err", file=file)
    if plx is not None and not plx.value > 0:
        raise ConfigError("the parallax must be positive", key="assumed.parallax", file=file)
    if not table["companions"]:
        raise ConfigError("list at least one companion", key="assumed.companions", file=file)
    companions = {name: _companion(name, body, times, file)
                  for name, body in table["companions"].items()}
    return AssumedSystem(central_mass=mass, companions=companions, parallax=plx,
                         parallax_err=err)


def _companion(name, body, times, file):
    key = f"assumed.companions.{name}"
    if not isinstance(body, dict):
        raise ConfigError("a companion is a table of elements", key=key, file=file)
    for item, value in body.items():
        if item not in _COMPANION:
            raise ConfigError(f"unknown key; accepted here: {', '.join(sorted(_COMPANION))}",
                              key=f"{key}.{item}", file=file)
        expected = _COMPANION[item]
        if expected is str and not isinstance(value, str):
            raise ConfigError(f"expected a value with a unit such as \"58 deg\", got "
                              f"{value!r}", key=f"{key}.{item}", file=file)
        if expected == (int, float) and (isinstance(value, bool)
                                         or not isinstance(value, (int, float))):
            raise ConfigError(f"expected a number, got {value!r}", key=f"{key}.{item}",
                              file=file)
    needed = ["period", "eccentricity", "inclination", "periapsis_argument",
              "ascending_node", "periapsis_time"]
    for item in needed:
        if item not in body:
            raise ConfigError(f"the assumed elements need '{item}'", key=f"{key}.{item}",
                              file=file)

    def angle(item):
        return float(parse_quantity(body[item], expect=u.deg, key=f"{key}.{item}",
                                    file=file).to_value(u.deg))

    period = float(parse_quantity(body["period"], expect=u.day, key=f"{key}.period",
                                  file=file).to_value(u.day))
    if not period > 0:
        raise ConfigError("the period must be positive", key=f"{key}.period", file=file)
    ecc = float(body["eccentricity"])
    if not 0 <= ecc < 0.99:
        raise ConfigError("the eccentricity must be in [0, 0.99)", key=f"{key}.eccentricity",
                          file=file)
    inc = angle("inclination")
    if not 0 <= inc <= 180:
        raise ConfigError("the inclination must be in [0, 180] deg", key=f"{key}.inclination",
                          file=file)
    out = {"period": period, "ecc": ecc, "inc": inc, "omega": angle("periapsis_argument"),
           "node": angle("ascending_node"),
           "periapsis_time": parse_time(body["periapsis_time"], times.get("time_format"),
                                         times.get("time_scale"),
                                         key=f"{key}.periapsis_time")}
    if "mass" in body:
        out["mass"] = parse_quantity(body["mass"], expect=u.kg, key=f"{key}.mass", file=file)
        if out["mass"].value < 0:
            raise ConfigError("a mass cannot be negative", key=f"{key}.mass", file=file)
    return out


def plan_setup(source, *, candidates=None, start=None, stop=None, every=None, error=None,
               error_unit=None, observed=None, n_next=None, check=None, check_steps=None,
               seed=None, time_format=None, time_scale=None, out=None) -> PlanSetup:
    """The set-up of ``massfit plan``: a config or a fit folder, then the options.

    Options given here override the config's ``[epochs]``, ``[check]`` and
    ``[output]``; the candidate epochs come from ``candidates`` (a file) or from
    ``start``, ``stop`` and ``every`` (with ``error``).
    """
    path = Path(source)
    if path.suffix.lower() == ".toml":
        setup = load_plan_config(path)
    elif path.is_dir():
        setup = PlanSetup(source=path)
    else:
        raise ConfigError("give a plan config (.toml) or the output folder of a fit",
                          key=str(path))
    times = {"time_scale": time_scale or setup.raw.get("time_scale"),
             "time_format": time_format or setup.raw.get("time_format")}
    error = error if error is not None else setup.raw.get("epochs", {}).get("error")
    error_unit = error_unit or setup.raw.get("epochs", {}).get("error_unit")
    ranged = [start, stop, every]
    if candidates is not None and any(v is not None for v in ranged):
        raise ConfigError("give candidate epochs as a file or as a range, not both",
                          key="--candidates")
    if candidates is not None:
        setup.candidates = schedule_from_spec(candidates, "--candidates", ".", times, error,
                                              error_unit=error_unit)
    elif any(v is not None for v in ranged):
        if not all(v is not None for v in ranged):
            raise ConfigError("a range of candidate epochs needs --start, --stop and --every",
                              key="--start" if start is None else
                              "--stop" if stop is None else "--every")
        setup.candidates = Schedule.every(start, stop, every, error,
                                          time_format=times.get("time_format"),
                                          time_scale=times.get("time_scale"))
    if setup.candidates is None:
        raise ConfigError("say which epochs could be observed: --candidates FILE, or "
                          "--start, --stop, --every and --error", key="--candidates")
    if observed is not None:
        setup.observed = schedule_from_spec(observed, "--observed", ".", times, error,
                                            error_unit=error_unit)
    for name, value in (("n_next", n_next), ("check", check), ("check_steps", check_steps),
                        ("seed", seed)):
        if value is not None:
            setattr(setup, name, value)
    if out is not None:
        setup.output = Path(out)
    if setup.output is None:
        raise ConfigError("say where to write the plan with --out DIR", key="--out")
    return setup

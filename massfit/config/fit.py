"""The TOML configuration of a fit, checked key by key.

Layout (every key optional except ``data.files``, which a batch table's row may give
instead)::

    [data]
    files = ["moons.ecsv"]            # relative to this config file
    time_format = "jd"                # for plain CSV: an astropy Time format
    time_scale = "utc"                #   and scale
    units = {east = "mas", north = "mas", east_err = "mas", north_err = "mas"}
    skip_bad_rows = false             # reject (and list) bad rows instead of stopping

    [system]
    primary = "Ossery"                # name of the primary's own velocity rows
    parallax = "48.2 mas"             # with parallax_err: a Gaussian prior; alone: fixed
    parallax_err = "0.3 mas"
    distance = "20.7 pc"              # a fixed distance instead of a parallax
    light_time = true                 # with per-row distances, evaluate at t - d/c
    romer_delay = false               # light time across the system (along z)
    central_mass_prior = {kind = "log-uniform", low = "1e-6 Msun", high = "1 Msun"}

    [companions.Tamsin]               # listing companions makes the list strict
    period_prior = {kind = "log-uniform", low = "1 d", high = "100 d"}
    eccentricity_prior = {kind = "uniform", low = 0, high = 0.5}
    inclination_prior = {kind = "normal", mean = "88 deg", sd = "1 deg"}
    mass = "1e-4 Msun"                # a fixed companion mass, or
    mass_prior = {kind = "normal", mean = "1e-4 Msun", sd = "2e-5 Msun"}
    semi_amplitude_prior = {kind = "uniform", low = "0 m/s", high = "500 m/s"}  # RV only

    [velocities]                      # radial velocities (any table with an rv column)
    trend = "linear"                  # "none" (default), "linear" or "quadratic"
    slope_prior = {kind = "normal", mean = "0 m / (s d)", sd = "1 m / (s d)"}  # default flat
    curvature_prior = {kind = "normal", mean = "0 m / (s d2)", sd = "0.01 m / (s d2)"}
    jitter_prior = {kind = "log-uniform", low = "0.1 m/s", high = "100 m/s"}

    [velocities.instruments.Halden]   # one instrument label of the velocity files
    offset_prior = {kind = "normal", mean = "-12.4 km/s", sd = "1 km/s"}  # default flat
    jitter_prior = {kind = "fixed", value = "0 m/s"}

    [dynamics]                        # how the companions move (default: keplerian)
    model = "perturbed"               # "keplerian", "oblate" (secular J2), "perturbed"
                                      #   (integrated J2, J4, pulls) or "n-body" (pulls)
    j2 = 0.0162                       # oblate, perturbed: the primary's J2 ...
    j4 = -0.0007                      # perturbed: ... and J4 ...
    equatorial_radius = "58300 km"    #   ... at this reference radius
    equator_inclination = "81 deg"    #   optional, with equator_node: the equator on
    equator_node = "33 deg"           #   the sky (default: from the orbits)
    mutual_pulls = true               # perturbed: the companions pull on each other
    rtol = 1e-12                      # perturbed, n-body: the integrator's tolerance
    # steps_per_orbit = 24            # perturbed, n-body: fixed steps instead (faster
                                      #   where the data's errors allow; see the docs)
    start_evaluations = 300           # perturbed, n-body: cap per least-squares pass
    surrogate = "linearised"          # perturbed, n-body (the default): sample a surrogate
                                      #   checked against the integrator ("none": the
                                      #   integrator at every step)
    compare_keplerian = true          # adequacy: also fit the two-body model

    [frame]                           # the primary's own place and motion in the data's
                                      #   frame (a dark mass; positions against background
                                      #   stars): an empty table turns it on, priors flat
    east_prior = {kind = "normal", mean = "0 mas", sd = "10 mas"}  # position at the epoch
    north_prior = {kind = "normal", mean = "0 mas", sd = "10 mas"}
    motion_east_prior = {kind = "normal", mean = "0 mas/yr", sd = "1 mas/yr"}
    motion_north_prior = {kind = "fixed", value = "0 mas/yr"}
    velocity_prior = {kind = "uniform", low = "-500 km/s", high = "500 km/s"}

    [relativity]                      # first-order relativistic terms (any of them)
    precession = true                 # Schwarzschild periapsis advance ...
    precession_scale_prior = {kind = "uniform", low = -5, high = 10}  # ... scaled (default
                                      #   fixed at 1, the relativistic value)
    gravitational_redshift = true     # GM / (r c) on the companions' own velocities
    transverse_doppler = true         # v^2 / (2 c) on them
    exact_doppler = true              # the Doppler factor and redshift whole (default
                                      #   false: the first-order terms alone)

    [viewing]                         # a primary inside the solar system (moving line of sight)
    ephemeris_body = "jupiter"        # its direction and distance per row from astropy
    ephemeris = "builtin"             #   or the path of a JPL kernel (.bsp)
    site = ["-68.4 deg", "-24.1 deg", "2150 m"]  # longitude, latitude, height (default:
                                      #   the Earth's centre)
    offsets = "astrometric"           # or "apparent" (differential aberration modelled)
    pole_ra = "251.3 deg"             # the primary's north pole: elements are also given
    pole_dec = "57.8 deg"             #   against its equator

    [sampler]
    walkers = 64
    max_steps = 50000
    check_every = 500
    seed = 1
    threads = 2                       # cores for the log-posterior (default: all)
    engine = "nested"                 # "emcee" (default) or "nested" (dynesty: evidence,
    live_points = 525                 #   modes weighed, each in its own period box;
                                      #   default 75 per sampled coordinate)
    runs_per_box = 2                  # nested: independent runs of each box (must agree)

    [output]
    folder = "fit-out"                # relative to this config file
    plots = true
    replace_existing = false          # true: replace a result massfit wrote there (--force)
"""

from __future__ import annotations

import os
import sys
from dataclasses import dataclass, field
from pathlib import Path

import astropy.units as u

from massfit.errors import ConfigError
from massfit.model.specs import CompanionSpec, SystemSpec
from massfit.priors import Fixed, prior_from_spec
from massfit.sample.chain import SamplerSettings
from massfit.sample.nested import ENGINES, NestedSettings
from massfit.orbits.viewing import viewing_from_settings

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

__all__ = ["FitSetup", "load_config", "parse_config"]

_SCHEMA = {
    "data": {"files": list, "time_format": str, "time_scale": str, "units": dict,
             "skip_bad_rows": bool},
    "system": {"primary": str, "parallax": str, "parallax_err": str, "distance": str,
               "light_time": bool, "romer_delay": bool, "central_mass_prior": dict},
    "companions": dict,
    "velocities": {"trend": str, "slope_prior": dict, "curvature_prior": dict,
                   "jitter_prior": dict, "instruments": dict},
    "dynamics": {"model": str, "j2": float, "j4": float, "equatorial_radius": str,
                 "equator_inclination": str, "equator_node": str, "rtol": float,
                 "steps_per_orbit": int, "surrogate": str,
                 "mutual_pulls": bool, "start_evaluations": int,
                 "compare_keplerian": bool},
    "frame": {f"{term}_prior": dict for term in ("east", "north", "motion_east",
                                                 "motion_north", "velocity")},
    "relativity": {"precession": bool, "precession_scale_prior": dict,
                   "gravitational_redshift": bool, "transverse_doppler": bool,
                   "exact_doppler": bool},
    "viewing": {"ephemeris_body": str, "ephemeris": str, "site": list, "offsets": str,
                "pole_ra": str, "pole_dec": str},
    "sampler": {"walkers": int, "max_steps": int, "check_every": int, "seed": int,
                "threads": int, "engine": str, "live_points": int, "runs_per_box": int},
    "output": {"folder": str, "plots": bool, "replace_existing": bool},
}
_COMPANION_KEYS = {"period_prior": dict, "eccentricity_prior": dict,
                   "inclination_prior": dict, "mass": str, "mass_prior": dict,
                   "semi_amplitude_prior": dict}
_INSTRUMENT_KEYS = {"offset_prior": dict, "jitter_prior": dict}
_KM_S = u.km / u.s


@dataclass
class FitSetup:
    """Everything a config file says, resolved and checked.

    Attributes
    ----------
    files : list of Path
    read_options : dict
        Keyword arguments for :func:`massfit.read_observations`.
    system : SystemSpec
    sampler : SamplerSettings
    engine : str
        "emcee" or "nested" (``[sampler] engine``).
    nested : NestedSettings
        The nested sampler's settings (``live_points``, ``runs_per_box``).
    output : Path or None
    plots : bool
    replace_existing : bool
        Replace a result massfit wrote before in the output folder (``--force``).
    source : dict
        The config as read (for the run record).
    """

    files: list
    read_options: dict = field(default_factory=dict)
    system: SystemSpec = field(default_factory=SystemSpec)
    sampler: SamplerSettings = field(default_factory=SamplerSettings)
    engine: str = "emcee"
    nested: NestedSettings = field(default_factory=NestedSettings)
    output: Path | None = None
    plots: bool = True
    replace_existing: bool = False
    source: dict = field(default_factory=dict)


def real_path(path) -> Path:
    """The absolute path with symlinks followed; a symlink loop stays a path (reading it
    then fails with a clean error) instead of raising as ``Path.resolve`` does."""
    return Path(os.path.realpath(path))


def load_config(path, *, files=None) -> FitSetup:
    """Read and check a TOML config; paths in it are relative to the file.

    ``files`` (paths) are the observations to fit in place of the config's
    ``data.files``, which the config then need not list (a batch table's row).
    """
    path = Path(path)
    return parse_config(read_toml(path), base=path.parent, file=str(path), files=files)


def read_toml(path) -> dict:
    """The TOML file at ``path`` as a dict; a ConfigError naming the file if unreadable."""
    path = Path(path)
    try:
        text = path.read_bytes()
    except OSError as exc:
        raise ConfigError(f"cannot read the config file ({exc.strerror})", file=path) from None
    try:
        raw = tomllib.loads(text.decode("utf-8"))
    except UnicodeDecodeError:
        raise ConfigError("the config is not UTF-8 text", file=path) from None
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"not valid TOML: {exc}", file=path) from None
    return raw


def parse_config(raw: dict, *, base=".", file=None, files=None) -> FitSetup:
    """Check a config dictionary (as TOML gives it) and resolve it (``files``: see
    :func:`load_config`)."""
    try:
        return _parse(raw, Path(base), file, files)
    except ConfigError as exc:
        if exc.file is None and file is not None:
            raise ConfigError(exc.reason, key=exc.key, file=file) from None
        raise


def _engine(raw, file):
    """The ``[sampler]`` table split: (engine, NestedSettings, emcee's keys)."""
    raw = dict(raw)
    engine = raw.pop("engine", "emcee")
    if engine not in ENGINES:
        raise ConfigError(f"unknown engine {engine!r}; accepted: {', '.join(ENGINES)}",
                          key="sampler.engine", file=file)
    nested = NestedSettings(live_points=raw.pop("live_points", None),
                            runs=raw.pop("runs_per_box", NestedSettings.runs))
    try:
        nested.check(key_prefix="sampler.", file=file)
    except ConfigError as exc:
        key = exc.key.replace("sampler.runs", "sampler.runs_per_box")
        raise ConfigError(exc.reason, key=key, file=file) from None
    return engine, nested, raw


def _parse(raw, base, file, given=None):
    check_keys(raw, _SCHEMA, "", file)
    data = raw.get("data", {})
    if given:
        data = {**data, "files": [str(real_path(f)) for f in given]}
    if "files" not in data or not data["files"]:
        raise ConfigError("list the observation files, e.g. files = [\"moons.ecsv\"]",
                          key="data.files", file=file)
    for k, name in enumerate(data["files"]):
        if not isinstance(name, str):
            raise ConfigError("each file is a string path", key=f"data.files[{k}]",
                              file=file)
    files = [real_path(base / name) for name in data["files"]]
    read_options = {key: data[key] for key in ("time_format", "time_scale", "units",
                                               "skip_bad_rows") if key in data}
    for col, unit in read_options.get("units", {}).items():
        if not isinstance(unit, str):
            raise ConfigError("a unit is a string such as \"mas\"",
                              key=f"data.units.{col}", file=file)
    system = _system(raw.get("system", {}), raw.get("companions"), file)
    _velocities(system, raw.get("velocities", {}), file)
    _dynamics(system, raw.get("dynamics", {}), file)
    _frame_and_relativity(system, raw, file)
    system.viewing = viewing_from_settings(raw.get("viewing", {}), file=file)
    read_options["primary"] = system.primary
    engine, nested, chain_keys = _engine(raw.get("sampler", {}), file)
    sampler = SamplerSettings(**chain_keys)
    sampler.check(key_prefix="sampler.", file=file)
    out = raw.get("output", {})
    return FitSetup(files=files, read_options=read_options, system=system, sampler=sampler,
                    engine=engine, nested=nested,
                    output=real_path(base / out["folder"]) if "folder" in out else None,
                    plots=out.get("plots", True),
                    replace_existing=out.get("replace_existing", False), source=raw)


def check_keys(table, schema, prefix, file):
    if not isinstance(table, dict):
        raise ConfigError("expected a table", key=prefix.rstrip(".") or None, file=file)
    for key, value in table.items():
        where = f"{prefix}{key}"
        if key not in schema:
            raise ConfigError(f"unknown key; accepted here: {', '.join(sorted(schema))}",
                              key=where, file=file)
        expected = schema[key]
        if isinstance(expected, dict):
            check_keys(value, expected, f"{where}.", file)
        elif not _is_type(value, expected):
            raise ConfigError(f"expected {_type_name(expected)}, got {type(value).__name__} "
                              f"{value!r}", key=where, file=file)


def _is_type(value, expected):
    if expected is int:
        return isinstance(value, int) and not isinstance(value, bool)
    if expected is float:
        return isinstance(value, (int, float)) and not isinstance(value, bool)
    return isinstance(value, expected)


def _type_name(kind):
    return {list: "a list", dict: "a table", str: "a string", int: "a whole number",
            float: "a number", bool: "true or false"}[kind]


def _system(table, companions, file):
    from massfit.run import distance_prior

    plx = distance_prior(table.get("parallax"), table.get("parallax_err"),
                         table.get("distance"), key_prefix="system.")
    spec = SystemSpec(primary=table.get("primary", "primary"), parallax=plx,
                      light_time=table.get("light_time", True),
                      romer_delay=table.get("romer_delay", False))
    if "central_mass_prior" in table:
        spec.central_mass = _mass_prior(table["central_mass_prior"],
                                        "system.central_mass_prior", file)
    if companions is not None:
        spec.strict_companions = True
        for name, body in companions.items():
            spec.companions[name] = _companion(name, body, file)
    return spec


def _velocities(system, table, file):
    from massfit.model.specs import TRENDS, InstrumentSpec

    trend = table.get("trend", "none")
    if trend not in TRENDS:
        raise ConfigError(f"unknown trend {trend!r}; accepted: {', '.join(TRENDS)}",
                          key="velocities.trend", file=file)
    system.trend = trend
    for term, unit in (("slope", _KM_S / u.day), ("curvature", _KM_S / u.day ** 2)):
        key = f"{term}_prior"
        if key in table:
            if term == "curvature" and trend != "quadratic" or trend == "none":
                raise ConfigError(f"a {term} prior needs trend = \"quadratic\""
                                  if term == "curvature" else
                                  "a slope prior needs trend = \"linear\" or "
                                  "\"quadratic\"", key=f"velocities.{key}", file=file)
            setattr(system, term, prior_from_spec(table[key], unit=unit,
                                                  key=f"velocities.{key}", file=file))
    if "jitter_prior" in table:
        system.jitter = _jitter_prior(table["jitter_prior"], "velocities.jitter_prior", file)
    for label, body in table.get("instruments", {}).items():
        key = f"velocities.instruments.{label}"
        check_keys(body, _INSTRUMENT_KEYS, f"{key}.", file)
        spec = InstrumentSpec()
        if "offset_prior" in body:
            spec.offset = prior_from_spec(body["offset_prior"], unit=_KM_S,
                                          key=f"{key}.offset_prior", file=file)
        if "jitter_prior" in body:
            spec.jitter = _jitter_prior(body["jitter_prior"], f"{key}.jitter_prior", file)
        system.instruments[label] = spec


def _jitter_prior(spec, key, file):
    prior = prior_from_spec(spec, unit=_KM_S, key=key, file=file)
    low = prior.value if prior.is_fixed else prior.low
    if low < 0:
        raise ConfigError("a jitter cannot be negative", key=key, file=file)
    return prior
def _dynamics(spec, table, file):
    from massfit.orbits.registry import make_dynamics

    options = {k: v for k, v in table.items() if k not in ("model", "compare_keplerian")}
    spec.dynamics = make_dynamics(table.get("model", "keplerian"), file=file, **options)
    spec.compare_keplerian = table.get("compare_keplerian", True)


#: The frame terms' units in a config.
def _frame_and_relativity(spec, raw, file):
    """The [frame] and [relativity] tables (each present turns its terms on)."""
    from massfit.model.frame import FRAME_UNITS, FrameSpec
    from massfit.orbits.relativity import RelativitySpec

    if "frame" in raw:
        frame = FrameSpec()
        for term, unit in FRAME_UNITS.items():
            key = f"{term}_prior"
            if key in raw["frame"]:
                setattr(frame, term, prior_from_spec(raw["frame"][key], unit=u.Unit(unit),
                                                     key=f"frame.{key}", file=file))
        spec.frame = frame
    if "relativity" in raw:
        table = raw["relativity"]
        rel = RelativitySpec(**{k: table[k] for k in ("precession", "gravitational_redshift",
                                                      "transverse_doppler", "exact_doppler")
                                if k in table})
        if "precession_scale_prior" in table:
            if not rel.precession:
                raise ConfigError("a precession scale needs precession = true",
                                  key="relativity.precession_scale_prior", file=file)
            rel.precession_scale = prior_from_spec(
                table["precession_scale_prior"], unit=None,
                key="relativity.precession_scale_prior", file=file)
        spec.relativity = rel


def _mass_prior(spec, key, file):
    return prior_from_spec(spec, unit=u.M_sun, key=key, file=file)


def _companion(name, body, file):
    key = f"companions.{name}"
    check_keys(body, _COMPANION_KEYS, f"{key}.", file)
    comp = CompanionSpec(name)
    if "period_prior" in body:
        comp.period = prior_from_spec(body["period_prior"], unit=u.day,
                                      key=f"{key}.period_prior", file=file)
    if "eccentricity_prior" in body:
        comp.eccentricity = prior_from_spec(body["eccentricity_prior"], unit=None,
                                            key=f"{key}.eccentricity_prior", file=file)
        ecc = comp.eccentricity  # a fixed value has no bounds of its own
        low, high = (ecc.value, ecc.value) if ecc.is_fixed else (ecc.low, ecc.high)
        if low < 0 or high >= 1:
            raise ConfigError("eccentricity must stay within [0, 1)",
                              key=f"{key}.eccentricity_prior", file=file)
    if "inclination_prior" in body:
        comp.inclination = prior_from_spec(body["inclination_prior"], unit=u.rad,
                                           key=f"{key}.inclination_prior", file=file)
    if "mass" in body and "mass_prior" in body:
        raise ConfigError("give either mass (fixed) or mass_prior, not both",
                          key=f"{key}.mass", file=file)
    if "mass" in body:
        comp.mass = prior_from_spec({"kind": "fixed", "value": body["mass"]}, unit=u.M_sun,
                                    key=f"{key}.mass", file=file)
    if "mass_prior" in body:
        comp.mass = _mass_prior(body["mass_prior"], f"{key}.mass_prior", file)
    if "semi_amplitude_prior" in body:
        comp.semi_amplitude = prior_from_spec(body["semi_amplitude_prior"], unit=_KM_S,
                                              key=f"{key}.semi_amplitude_prior", file=file)
        low = comp.semi_amplitude.value if comp.semi_amplitude.is_fixed else \
            comp.semi_amplitude.low
        if low < 0:
            raise ConfigError("a semi-amplitude cannot be negative",
                              key=f"{key}.semi_amplitude_prior", file=file)
    if isinstance(comp.mass, Fixed) and comp.mass.value < 0:
        raise ConfigError("a mass cannot be negative", key=f"{key}.mass", file=file)
    return comp

"""Option groups shared by several commands, and how they change a config's settings."""

from __future__ import annotations

import argparse

from massfit.errors import ConfigError

__all__ = ["sampler_options", "sampler_overrides", "SAMPLER_OVERRIDES", "dynamics_options", "apply_dynamics_options",
           "viewing_options", "apply_viewing_options", "units_option", "central_mass_options",
           "apply_central_mass_options"]


def sampler_options(parser):
    parser.add_argument("--seed", type=int, metavar="N", help="random seed (repeats the run)")
    parser.add_argument("--walkers", type=int, metavar="N", help="number of emcee walkers")
    parser.add_argument("--max-steps", type=int, metavar="N", help="step cap (default 50000)")
    parser.add_argument("--check-every", type=int, metavar="N", help="steps between "
                        "convergence checks (default 500)")
    parser.add_argument("--threads", type=int, metavar="N",
                        help="threads that share the walkers in the compiled log-posterior "
                             "(default: every core for large data sets, else one; the "
                             "numbers do not depend on it)")


#: The sampler options above that become SamplerSettings fields of the same name.
SAMPLER_OVERRIDES = ("seed", "walkers", "max_steps", "check_every", "threads")


def sampler_overrides(args, keys=SAMPLER_OVERRIDES) -> dict:
    """The sampler options given on the command line, as SamplerSettings fields."""
    return {k: getattr(args, k) for k in keys if getattr(args, k, None) is not None}



def dynamics_options(parser):
    group = parser.add_argument_group("beyond two-body orbits (override the config)")
    group.add_argument("--dynamics", choices=("keplerian", "oblate", "perturbed", "n-body"),
                       help="how the companions move (default keplerian; oblate: secular "
                            "J2; perturbed: integrated J2, J4 and mutual pulls; n-body: "
                            "mutual pulls only)")
    group.add_argument("--j2", type=float, metavar="J2",
                       help="oblate, perturbed: the primary's J2")
    group.add_argument("--j4", type=float, metavar="J4", help="perturbed: the primary's J4")
    group.add_argument("--equatorial-radius", metavar="'VALUE UNIT'",
                       help="oblate, perturbed: the reference radius of the harmonics, "
                            "e.g. '58300 km'")
    group.add_argument("--equator-inclination", metavar="'VALUE UNIT'",
                       help="oblate, perturbed: the equator's inclination on the sky (with "
                            "--equator-node; default: oblate, each orbit in the equator; "
                            "perturbed, the mean orbit normal)")
    group.add_argument("--equator-node", metavar="'VALUE UNIT'",
                       help="oblate, perturbed: position angle of the equator's "
                            "ascending node")
    group.add_argument("--mutual-pulls", action=argparse.BooleanOptionalAction, default=None,
                       help="perturbed: the companions pull on each other (default on)")
    group.add_argument("--rtol", type=float, metavar="TOL",
                       help="perturbed, n-body: relative tolerance of the integrator "
                            "(default 1e-12)")
    group.add_argument("--steps-per-orbit", type=int, metavar="N",
                       help="perturbed, n-body: fixed integrator steps per orbit of the "
                            "fastest companion instead of adaptive ones (8-1000)")
    group.add_argument("--start-evaluations", type=int, metavar="N",
                       help="perturbed, n-body: cap on the evaluations of each "
                            "least-squares pass of the start (default 300)")
    group.add_argument("--surrogate", choices=("none", "linearised"),
                       help="perturbed, n-body: sample through a surrogate (two-body "
                            "orbits plus the departure from them to second order about "
                            "the start), checked against the integrator at draws of the "
                            "chain (default linearised; none: the integrator at every "
                            "step)")
    group.add_argument("--romer-delay", action="store_true",
                       help="delay each companion by the light time across the system")


DYNAMICS_OPTIONS = ("j2", "j4", "equatorial_radius", "equator_inclination",
                     "equator_node", "mutual_pulls", "rtol", "steps_per_orbit",
                     "start_evaluations", "surrogate")


def apply_dynamics_options(args, system):
    """The config's dynamics, changed where the command line says so."""
    from dataclasses import replace

    from massfit.orbits.registry import make_dynamics

    given = {k: getattr(args, k, None) for k in DYNAMICS_OPTIONS}
    given = {k: v for k, v in given.items() if v is not None}
    if getattr(args, "romer_delay", False):
        system = replace(system, romer_delay=True)
    if getattr(args, "dynamics", None) is None and not given:
        return system
    current = getattr(system.dynamics, "label", "keplerian")
    model = args.dynamics or current
    # Settings the command line leaves alone keep the config's values.
    merged = dict(getattr(system.dynamics, "settings", {})) if model == current else {}
    merged.update(given)
    return replace(system, dynamics=make_dynamics(model, key_prefix="--", **merged))



def viewing_options(parser):
    group = parser.add_argument_group("a primary inside the solar system (override the "
                                      "config's [viewing])")
    group.add_argument("--ephemeris-body", metavar="NAME",
                       help="the primary's direction and distance per row from astropy's "
                            "ephemeris, e.g. 'jupiter'")
    group.add_argument("--ephemeris", metavar="KERNEL",
                       help="'builtin' (default) or the path of a JPL kernel (.bsp)")
    group.add_argument("--site", metavar="'LON, LAT, HEIGHT'",
                       help="observatory, e.g. '-68.4 deg, -24.1 deg, 2150 m' (default: "
                            "the Earth's centre)")
    group.add_argument("--offsets", choices=("astrometric", "apparent"),
                       help="apparent: the offsets carry the differential aberration of "
                            "the observer's velocity (default astrometric)")
    group.add_argument("--pole", metavar="'RA, DEC'",
                       help="the primary's north pole, e.g. '251.3 deg, 57.8 deg': "
                            "elements also against its equator")


def apply_viewing_options(args, system):
    """The config's [viewing], changed where the command line says so."""
    from dataclasses import replace

    from massfit.orbits.viewing import viewing_from_settings

    given = {k: getattr(args, k, None) for k in ("ephemeris_body", "ephemeris", "site",
                                                  "offsets")}
    pole = getattr(args, "pole", None)
    if pole is not None:
        parts = pole.split(",")
        if len(parts) != 2:
            raise ConfigError("give the pole as 'RA, DEC', e.g. '251.3 deg, 57.8 deg'",
                              key="--pole")
        given["pole_ra"], given["pole_dec"] = (p.strip() for p in parts)
    given = {k: v for k, v in given.items() if v is not None}
    if not given:
        return system
    current = system.viewing
    merged = {} if current is None else {
        "ephemeris_body": current.ephemeris_body, "ephemeris": current.ephemeris,
        "offsets": current.offsets}
    merged.update(given)
    spec = viewing_from_settings(merged, key_prefix="--")
    if current is not None and "site" not in given:
        spec.site = current.site
    if current is not None and "pole_ra" not in given:
        spec.pole_ra, spec.pole_dec = current.pole_ra, current.pole_dec
    return replace(system, viewing=spec)



def units_option(text):
    units = {}
    for part in text.split(","):
        if "=" not in part:
            raise ConfigError(f"'{part}' is not COLUMN=UNIT", key="--units")
        col, unit = (piece.strip() for piece in part.split("=", 1))
        if col in units:
            raise ConfigError(f"column '{col}' is given twice ({col}={units[col]} and "
                              f"{col}={unit}); give each column one unit", key="--units")
        units[col] = unit
    return units



def central_mass_options(parser):
    parser.add_argument("--central-mass", metavar="'VALUE UNIT'",
                        help="the primary's mass as known from elsewhere, e.g. '0.95 Msun' "
                             "(fixed unless --central-mass-err is given); radial velocities "
                             "alone need it for the companions' minimum masses")
    parser.add_argument("--central-mass-err", metavar="'VALUE UNIT'",
                        help="1-sigma error of --central-mass (a Gaussian prior)")


def apply_central_mass_options(args, system):
    """The config's central-mass prior, replaced where the command line gives one."""
    from dataclasses import replace

    import astropy.units as u

    from massfit.priors import prior_from_spec

    value, err = getattr(args, "central_mass", None), getattr(args, "central_mass_err", None)
    if value is None:
        if err is not None:
            raise ConfigError("an error needs a value: give --central-mass too",
                              key="--central-mass-err")
        return system
    if err is None:
        prior = prior_from_spec({"kind": "fixed", "value": value}, unit=u.M_sun,
                                key="--central-mass")
    else:
        prior = prior_from_spec({"kind": "normal", "mean": value, "sd": err,
                                 "low": "0 Msun"}, unit=u.M_sun, key="--central-mass")
    if getattr(prior, "value", getattr(prior, "mean", None)) <= 0:
        raise ConfigError("the central mass must be positive", key="--central-mass")
    return replace(system, central_mass=prior)

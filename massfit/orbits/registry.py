"""The dynamics models by name: what ``[dynamics] model`` and ``--dynamics`` accept, and
the object each name builds (:func:`make_dynamics`)."""

from __future__ import annotations

from massfit.errors import ConfigError
from massfit.orbits.dynamics import Keplerian

__all__ = ["make_dynamics", "MODEL_OPTIONS"]


#: The names ``[dynamics] model`` accepts, and the settings each one takes.
MODEL_OPTIONS = {
    "keplerian": (),
    "oblate": ("j2", "equatorial_radius", "equator_inclination", "equator_node"),
    "n-body": ("rtol", "steps_per_orbit", "start_evaluations", "surrogate"),
    "perturbed": ("j2", "j4", "equatorial_radius", "equator_inclination", "equator_node",
                  "mutual_pulls", "rtol", "steps_per_orbit", "start_evaluations",
                  "surrogate"),
}


def make_dynamics(model="keplerian", *, key_prefix="dynamics.", file=None, **options):
    """The dynamics object for a config's ``[dynamics]`` table or the CLI options.

    Parameters
    ----------
    model : str
        One of :data:`MODEL_OPTIONS`.
    key_prefix : str
        Prefix of the names in error messages (``"dynamics."`` or ``"--"``).
    file : str, optional
        The config file, for error messages.
    **options
        The model's settings (None values are ignored).

    Returns
    -------
    Keplerian or a subclass
        ``"oblate"`` is the secular J2 model (:class:`massfit.orbits.oblate.Oblate`),
        ``"perturbed"`` the integrated one with any of J2, J4 and mutual pulls
        (:class:`massfit.orbits.perturbed.Perturbed`), ``"n-body"`` the latter with mutual
        pulls only.
    """
    options = {k: v for k, v in options.items() if v is not None}
    if model not in MODEL_OPTIONS:
        raise ConfigError(f"unknown dynamics model '{model}'; accepted: "
                          f"{', '.join(MODEL_OPTIONS)}", key=f"{key_prefix}model", file=file)
    for key in options:
        if key not in MODEL_OPTIONS[model]:
            allowed = ", ".join(MODEL_OPTIONS[model]) or "no settings"
            raise ConfigError(f"this does not apply to the {model} model (it takes "
                              f"{allowed})", key=_renamed(key, key_prefix), file=file)
    if model == "keplerian":
        return Keplerian()
    if model == "oblate":
        from massfit.orbits.oblate import Oblate

        for key in ("j2", "equatorial_radius"):
            if key not in options:
                raise ConfigError("the oblate model needs J2 and the equatorial radius",
                                  key=_renamed(key, key_prefix), file=file)
        try:
            return Oblate(options["j2"], options["equatorial_radius"],
                          options.get("equator_inclination"), options.get("equator_node"))
        except ConfigError as exc:
            raise ConfigError(exc.reason, key=_renamed(exc.key, key_prefix),
                              file=file) from None
    from massfit.orbits.perturbed import NBody, Perturbed

    try:
        return Perturbed(**options) if model == "perturbed" else NBody(**options)
    except ConfigError as exc:
        raise ConfigError(exc.reason, key=_renamed(exc.key, key_prefix), file=file) from None


def _renamed(key, prefix):
    """A ``dynamics.x_y`` key as the caller names it (``--x-y`` on the command line)."""
    name = key.split(".", 1)[-1] if key else ""
    return prefix + (name.replace("_", "-") if prefix == "--" else name)

"""massfit's version: the installed distribution's, or the source tree's when run from a checkout."""

from importlib import metadata

try:
    __version__ = metadata.version("massfit")
except metadata.PackageNotFoundError:  # pragma: no cover - running from a checkout
    __version__ = "0.1.0"

"""Public names imported on first use (PEP 562), for packages whose import should stay
light (``massfit`` and ``massfit.plot``: the command line's --help needs neither)."""

from __future__ import annotations

import importlib

__all__ = ["lazy_names"]


def lazy_names(package, where):
    """(``__getattr__``, ``__dir__``) for ``package`` (its ``globals()``) whose names
    ``where`` maps to the modules they live in; a name is imported once, then kept."""

    def __getattr__(name):
        if name in where:
            value = getattr(importlib.import_module(where[name]), name)
            package[name] = value
            return value
        raise AttributeError(f"module {package['__name__']!r} has no attribute {name!r}")

    def __dir__():
        return sorted(set(package) | set(where))

    return __getattr__, __dir__

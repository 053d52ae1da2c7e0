"""The run record (run.json): versions, command, config, input checksums, seed, times."""

from __future__ import annotations

import hashlib
import platform
from importlib import metadata

__all__ = ["run_record", "sha256"]

_PACKAGES = ("massfit", "numpy", "scipy", "emcee", "astropy", "corner", "matplotlib",
             "numba")


def sha256(path) -> str:
    """SHA-256 of a file's bytes, read in blocks."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def _version(name):
    try:
        return metadata.version(name)
    except metadata.PackageNotFoundError:
        if name == "massfit":  # running from a checkout that is not installed
            from massfit.version import __version__

            return __version__
        return None


def run_record(*, argv=None, config=None, files=()) -> dict:
    """What is needed to repeat a run: versions, command line, config and input hashes."""
    hashes = {}
    for path in files:
        try:
            hashes[str(path)] = sha256(path)
        except OSError:
            hashes[str(path)] = None
    return {
        "versions": {name: _version(name) for name in _PACKAGES},
        "platform": platform.platform(),
        "command_line": list(argv or []),
        "config": config or {},
        "input_sha256": hashes,
    }

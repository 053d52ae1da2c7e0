"""The exceptions massfit raises for its users.

Every error a user can cause is a :class:`MassfitError`. The command line prints its
message on one line and exits with status 2 (1 for a :class:`WriteError`, where the
disc, not the input, is at fault); it never shows a traceback for these.
Messages name the file, line and column (or the config key or option) and say what
would be accepted.
"""

from __future__ import annotations

import os

__all__ = ["MassfitError", "InputError", "ConfigError", "ModelError", "WriteError",
           "os_error_text"]


class MassfitError(Exception):
    """Base class for every error that a user of massfit can cause and fix."""


class InputError(MassfitError, ValueError):
    """An observation file, or a row or column in it, that massfit cannot use.

    Parameters
    ----------
    reason : str
        One plain sentence: what is wrong and what would be accepted.
    file : str, optional
        The path of the file.
    line : int, optional
        The 1-based line number in that file (physical line, comments counted).
    column : str, optional
        The column name.
    """

    def __init__(self, reason: str, *, file=None, line=None, column=None):
        self.reason = reason
        self.file = None if file is None else str(file)
        self.line = line
        self.column = column
        super().__init__(self._format())

    def _format(self) -> str:
        where = []
        if self.file is not None:
            where.append(self.file)
        if self.line is not None:
            where.append(f"line {self.line}")
        if self.column is not None:
            where.append(f"column '{self.column}'")
        prefix = ", ".join(where)
        return f"{prefix}: {self.reason}" if prefix else self.reason


class ConfigError(MassfitError, ValueError):
    """A configuration key, option or API argument with a value massfit cannot use.

    Parameters
    ----------
    reason : str
        What is wrong and what would be accepted.
    key : str, optional
        The dotted config key (``sampler.walkers``) or the option (``--walkers``).
    file : str, optional
        The config file, where there is one.
    """

    def __init__(self, reason: str, *, key=None, file=None):
        self.reason = reason
        self.key = key
        self.file = None if file is None else str(file)
        where = []
        if self.file is not None:
            where.append(self.file)
        if key is not None:
            where.append(f"key '{key}'")
        prefix = ", ".join(where)
        super().__init__(f"{prefix}: {reason}" if prefix else reason)


class ModelError(MassfitError, ValueError):
    """A model that the data cannot constrain or that is inconsistent with the data.

    For example angular offsets with no distance, parallax or radial velocity to turn
    them into lengths, or a companion with too few epochs for its orbit.
    """


class WriteError(MassfitError):
    """The checkpoint or the result could not be written (a full disc, no permission).

    The message says what was kept and whether ``--resume`` continues from it.
    """


def os_error_text(exc: OSError) -> str:
    """One line for an OSError: the system's name of the error, and the file if known.

    (Some libraries' messages run over several lines.)
    """
    reason = os.strerror(exc.errno) if exc.errno else " ".join(str(exc).split())
    return f"{reason} ('{exc.filename}')" if exc.filename else reason

"""The command line: a thin layer over the API, one function per command.
"""

from massfit.cli.commands import main

__all__ = ["main"]

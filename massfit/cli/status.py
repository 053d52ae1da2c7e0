"""Exit statuses of the ``massfit`` command, in one place for every command.

0 done, converged and a good fit; 1 the checkpoint or the result could not be written (a
full disc: one line says what was kept and whether ``--resume`` continues); 2 a problem
with the input, the config, an option or the output folder (one line on stderr, no
traceback); 3 the fit finished but did not converge (the result is written and flagged);
4 the best fit's chi^2 is improbable for the stated errors (``fit_quality`` poor; the
result is written and flagged; 4 wins over 3, since a longer chain cannot mend it); 130
interrupted (``fit`` keeps a checkpoint in the output folder's partial area, and
``--resume`` continues from it).
"""

from __future__ import annotations

import sys

from massfit.model.fit_quality import POOR_FIT_P_VALUE

__all__ = ["EXIT_OK", "EXIT_WRITE_FAILED", "EXIT_USER_ERROR", "EXIT_NOT_CONVERGED",
           "EXIT_POOR_FIT", "EXIT_INTERRUPTED", "FIT_EXIT_STATUS", "notice"]

EXIT_OK = 0
EXIT_WRITE_FAILED = 1
EXIT_USER_ERROR = 2
EXIT_NOT_CONVERGED = 3
EXIT_POOR_FIT = 4
EXIT_INTERRUPTED = 130

FIT_EXIT_STATUS = (
    "Exit status: 0 converged and a good fit; 1 the checkpoint or the result could not be "
    "written (a full disc; --resume continues); 2 bad input, option or output folder; 3 "
    f"not converged; 4 a poor fit (chi^2 improbable for the stated errors, p < "
    f"{POOR_FIT_P_VALUE:g}; wins over 3); 130 interrupted.")


def notice(text):
    """One line on stderr, prefixed with the program's name."""
    print(f"massfit: {text}", file=sys.stderr)

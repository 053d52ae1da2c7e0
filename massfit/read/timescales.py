"""Time-scale conversions of UTC dates outside the leap-second table, in one place.

UTC counts leap seconds, and these are announced only months ahead. ERFA (through
astropy) flags every UTC date outside its leap-second table (before 1960, or years
past the table's last entry) with ``ErfaWarning: ... dubious year`` and converts it as
if no further leap second were added. For an orbit that is an error of about a second
per unannounced leap second, negligible for every orbit massfit fits unless its
companion moves by a measurable amount in a few seconds. massfit therefore converts
such dates quietly here and says once, in the fit's notes, that it did, rather than
letting the warning reach terminals, notebooks and progress bars on every conversion.
"""

from __future__ import annotations

import contextlib
import warnings

__all__ = ["quiet_leap_seconds", "tdb_jd", "LEAP_SECOND_NOTE"]

LEAP_SECOND_NOTE = (
    "some UTC times lie outside the leap-second table (before 1960 or past its last "
    "entry); they were converted as if no further leap second were added, an error of "
    "about a second per leap second still to be announced")


class _Seen:
    """How many conversions met a date outside the leap-second table."""

    def __init__(self):
        self.count = 0


def _is_dubious_year(warning) -> bool:
    return (warning.category.__name__ == "ErfaWarning"
            and "dubious year" in str(warning.message))


@contextlib.contextmanager
def quiet_leap_seconds():
    """Convert times without ERFA's "dubious year" warnings; other warnings pass on.

    Yields an object whose ``count`` says how many such warnings were held back.
    """
    seen = _Seen()
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        yield seen
    for warning in caught:
        if _is_dubious_year(warning):
            seen.count += 1
        else:
            warnings.warn_explicit(warning.message, warning.category, warning.filename,
                                   warning.lineno, source=warning.source)


def tdb_jd(time):
    """The Julian date (TDB) of an astropy Time, converted quietly."""
    with quiet_leap_seconds():
        return time.tdb.jd

"""Rounding an interval for print, one rule for every table, report and figure.

Rounding follows the interval, not a fixed number of digits: the smaller 68 % half-width
keeps two significant figures when its three leading digits are 100-354 and one when
they are 355-949 (949.5 and up round to 1000 and keep two). This is the rounding rule of
the Particle Data Group's Review of Particle Physics (introduction, from memory), common
practice in astronomy too. The median is given to the same decimal place, and numbers
far from 1 share one power of ten with their errors.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

__all__ = ["Rounded", "round_interval", "format_interval", "format_range", "print_exponent",
           "WIDE_LABEL", "NARROW_LABEL"]

#: What the summary's intervals are (the conventions' percentiles), said the same way in
#: every report, table and figure: never "95 %" for the 2.275th to 97.725th percentile.
NARROW_LABEL = "68.27 %"
WIDE_LABEL = "95.45 %"


@dataclass(frozen=True)
class Rounded:
    """An interval rounded for print: ``(median +plus -minus) x 10^exponent``.

    Attributes
    ----------
    median, plus, minus : str
        Mantissas, already rounded to the same decimal place.
    exponent : int
        Power of ten shared by the three (0 when none is needed).
    """

    median: str
    plus: str
    minus: str
    exponent: int = 0

    @property
    def symmetric(self) -> bool:
        return self.plus == self.minus

    def text(self) -> str:
        """``4.1153 +0.0012 -0.0011`` or ``4.1153 +/- 0.0012``, with ``e+08`` if scaled."""
        body = (f"{self.median} +/- {self.plus}" if self.symmetric
                else f"{self.median} +{self.plus} -{self.minus}")
        return f"({body}) e{self.exponent:+03d}" if self.exponent else body

    def latex(self) -> str:
        """Math-mode LaTeX (without the dollar signs)."""
        body = (rf"{self.median} \pm {self.plus}" if self.symmetric
                else rf"{self.median}^{{+{self.plus}}}_{{-{self.minus}}}")
        return rf"({body}) \times 10^{{{self.exponent}}}" if self.exponent else body

    def html(self) -> str:
        body = (f"{self.median} &plusmn; {self.plus}" if self.symmetric
                else f"{self.median}<sup>+{self.plus}</sup><sub>&minus;{self.minus}</sub>")
        return f"({body}) &times; 10<sup>{self.exponent}</sup>" if self.exponent else body


def _error_place(width: float) -> int:
    """Decimal place (as a power of ten) to which an error of ``width`` is quoted."""
    k = math.floor(math.log10(width))
    leading = width / 10.0 ** k * 100.0  # three leading digits, 100 <= leading < 1000
    if leading < 354.5:
        return k - 1  # two significant figures
    if leading < 949.5:
        return k  # one
    return k  # rounds up to 10^(k+1), quoted with two figures: 1.0 x 10^(k+1)


def round_interval(block: dict, *, exponent: int | None = None) -> Rounded | None:
    """Round an interval block (median and 68 % bounds) for print.

    Parameters
    ----------
    block : dict
        An interval block of the summary (``median``, ``lower_68``, ``upper_68``).
    exponent : int, optional
        Force this power of ten; by default one is used only for numbers below 1e-3
        or from 1e5 up.

    Returns
    -------
    Rounded or None
        None where the block has no median (nothing finite was sampled).
    """
    med = block.get("median")
    if med is None:
        return None
    # A fixed quantity (no width) gets six significant figures: no error to speak of.
    place, exponent = _placed(block, exponent)
    show = _shower(place, exponent)
    up = max(block["upper_68"] - med, 0.0)
    down = max(med - block["lower_68"], 0.0)
    return Rounded(show(med), show(up), show(down), exponent)


def _shower(place, exponent):
    """Text of a number rounded at ``place`` and scaled by ``10**exponent``."""
    decimals = max(0, exponent - place)
    scale = 10.0 ** exponent

    def show(x):
        # Round at the error's decimal place first so that e.g. 1234.5 with error 100
        # prints 1200, not 1234.
        value = round(x / 10.0 ** place) * 10.0 ** place if place > 0 else x
        text = f"{value / scale:.{decimals}f}"
        return "0" if float(text) == 0 and text.startswith("-") else text

    return show


def format_range(block: dict, which: str = "95", *, separator: str = " .. ") -> str:
    """An interval's bounds (``which`` "95" or "68") rounded like its value.

    The bounds take the decimal place and power of ten of the median as
    :func:`round_interval` prints it, so ``1.6111 +/- 0.0014 e+11`` has the 95.45 %
    range ``(1.6083 .. 1.6139) e+11``, never ``1.60832e+11 .. 1.6139e+11``.
    """
    if block.get("median") is None or block.get(f"lower_{which}") is None:
        return "undetermined"
    place, exponent = _placed(block, print_exponent(block))
    show = _shower(place, exponent)
    body = f"{show(block[f'lower_{which}'])}{separator}{show(block[f'upper_{which}'])}"
    return f"({body}) e{exponent:+03d}" if exponent else body


def _placed(block: dict, exponent):
    """The decimal place and power of ten at which ``block``'s median is printed."""
    med = block["median"]
    up = max(block["upper_68"] - med, 0.0)
    down = max(med - block["lower_68"], 0.0)
    widths = [w for w in (up, down) if w > 0]
    place = (_error_place(min(widths)) if widths else
             (math.floor(math.log10(abs(med))) - 5) if med else 0)
    if exponent is None:
        size = max(abs(med), max(widths, default=0.0))
        magnitude = math.floor(math.log10(size)) if size > 0 else 0
        exponent = magnitude if (magnitude >= 5 or magnitude < -3) else 0
    return place, exponent


def print_exponent(block):
    """The power of ten an interval is printed with (None: chosen by size)."""
    # Dates read best in full (JD 2461320.8581, not 2.4613208581e6).
    return 0 if str(block.get("unit", "")).startswith("JD") else None


def format_interval(block: dict) -> str:
    """One interval as plain text (``undetermined`` when nothing finite was sampled)."""
    rounded = round_interval(block, exponent=print_exponent(block))
    return "undetermined" if rounded is None else rounded.text()

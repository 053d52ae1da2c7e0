"""What the start search says while it runs (it can take minutes): one line per stage."""

from __future__ import annotations

import sys

__all__ = ["start_reporter"]


def start_reporter(progress=None, label=None):
    """A ``say(text)`` that prints ``start: text`` (or ``start (label): text``) on stderr.

    ``progress`` None shows the lines only where stderr is a terminal, as the
    sampler's bar; False never.
    """
    show = sys.stderr.isatty() if progress is None else bool(progress)
    prefix = "start" if not label else f"start ({label})"

    def say(text):
        if show:
            print(f"{prefix}: {text}", file=sys.stderr, flush=True)

    return say

"""Two pieces of work at once: one in a forked copy of this process, one here.

Drawing figures is single-threaded matplotlib; on a machine with a second core the
figures of a saved fit are split in two groups and drawn side by side
(:meth:`massfit.result.fit_result.FitResult.save`). A forked child starts with the
parent's memory, so nothing (the fit, its model) has to be pickled to get there; only
the child's small return value comes back, through a pipe.
"""

from __future__ import annotations

import multiprocessing
import os
import traceback

__all__ = ["can_fork", "beside"]


def can_fork() -> bool:
    """Whether this platform can fork (not on Windows; macOS can, but matplotlib and
    system frameworks there are not safe after a fork, so it is not used)."""
    return (hasattr(os, "fork") and "fork" in multiprocessing.get_all_start_methods()
            and not os.uname().sysname == "Darwin")


def beside(child, here):
    """``(child(), here())`` with ``child`` run in a forked process meanwhile.

    ``child`` must return something picklable and must not use threads the parent
    started (numba's parallel kernels, for one). An exception in the child is raised
    here after ``here`` finished, with the child's traceback in its message; a child
    that dies without a word is a RuntimeError. Without fork, both run here in turn.
    """
    if not can_fork():
        return child(), here()
    context = multiprocessing.get_context("fork")
    receive, send = context.Pipe(duplex=False)
    process = context.Process(target=_run, args=(child, send), daemon=True)
    process.start()
    send.close()
    try:
        mine = here()
    finally:
        try:
            status, value = receive.recv() if receive.poll(None) else ("lost", None)
        except EOFError:
            status, value = "lost", None
        process.join()
        receive.close()
    if status == "ok":
        return value, mine
    if status == "raised":
        error, text = value
        raise error from RuntimeError(f"in the second process:\n{text}")
    raise RuntimeError(f"the second process ended without a result "
                       f"(exit code {process.exitcode})")


def _run(child, send):
    try:
        send.send(("ok", child()))
    except BaseException as exc:  # noqa: BLE001 - everything goes back to the parent
        try:
            send.send(("raised", (exc, traceback.format_exc())))
        except Exception:  # noqa: BLE001 - an exception that cannot be pickled
            send.send(("raised", (RuntimeError(f"{type(exc).__name__}: {exc}"),
                                  traceback.format_exc())))
    finally:
        send.close()

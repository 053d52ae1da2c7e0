"""What the sampler shows while it runs: progress towards convergence, in plain words.

The chain converges when it is ``TAU_MULTIPLE`` (50) autocorrelation times long and the
estimate has settled (see :mod:`massfit.sample.chain`), so the bar counts
autocorrelation times, not steps against the step cap:
``converging: 33 of 50 autocorrelation times |#####     | step 4000, cap 50000``.
Until the first estimate the bar counts steps.
"""

from __future__ import annotations

import sys

__all__ = ["ConvergenceBar", "convergence_words"]


def convergence_words(steps: int, tau_max: float, needed: float) -> str:
    """``33 of 50 autocorrelation times`` for a chain of ``steps`` steps."""
    times = steps / tau_max if tau_max > 0 else 0.0
    return f"{min(times, needed):.0f} of {needed:.0f} autocorrelation times"


class ConvergenceBar:
    """A tqdm bar on stderr over the autocorrelation times needed (or nothing, if hidden).

    Parameters
    ----------
    show : bool
        Draw it at all.
    max_steps : int
        The step cap, named beside the bar.
    needed : float
        Autocorrelation times needed for convergence.
    done : int
        Steps already in the chain (a resumed run).
    """

    def __init__(self, show, max_steps, needed, done=0):
        self.max_steps, self.needed, self.steps = int(max_steps), float(needed), int(done)
        self._bar, self._tau = None, None
        if show:
            from tqdm.auto import tqdm

            self._bar = tqdm(total=self.needed, file=sys.stderr,
                             bar_format=self._format(None))

    def _format(self, tau_max):
        """The bar's whole line (tqdm fills in only ``{bar}``)."""
        steps = f"step {self.steps}, cap {self.max_steps}"
        if tau_max is None:
            return f"converging: {steps} (no autocorrelation estimate yet)"
        words = convergence_words(self.steps, tau_max, self.needed)
        wait = ("; waiting for the estimate to settle"
                if self.steps >= self.needed * tau_max else "")
        return (f"converging: {words} |{{bar}}| {steps}; longest autocorrelation "
                f"{tau_max:.0f} steps{wait}")

    def stepped(self, steps: int) -> None:
        """The chain is now ``steps`` steps long."""
        self.steps = int(steps)

    def checked(self, steps: int, tau_max: float) -> None:
        """A convergence check found the largest autocorrelation time ``tau_max``."""
        self.steps, self._tau = int(steps), float(tau_max)
        if self._bar is None:
            return
        times = self.steps / tau_max if tau_max > 0 else 0.0
        self._bar.bar_format = self._format(tau_max)
        self._bar.n = min(times, self.needed)
        self._bar.refresh()

    def close(self, converged: bool | None = None) -> None:
        """End the bar; its last line says whether the chain converged."""
        if self._bar is None:
            return
        if converged is not None and self._tau is not None:
            long = (f"{self.steps} steps, {self.steps / self._tau:.0f} autocorrelation "
                    f"times ({self.needed:.0f} needed)")
            self._bar.bar_format = (f"converged: {long}" if converged else
                                    f"not converged at the step cap: {long}")
            self._bar.refresh()
        self._bar.close()

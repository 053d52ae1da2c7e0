"""The model's log-prior: each parameter's prior in its own coordinate, the angle windows, and
the constant normalisation of the Gaussian terms.
"""

from __future__ import annotations

import numpy as np

from massfit.model.parts import LN10, TWO_PI, PriorPlan
from massfit.priors import LogUniform, Uniform

__all__ = ["PriorTerms"]


class PriorTerms:
    """The part of OrbitModel that evaluates its log-prior (a mixin)."""

    def _gaussian_normalisation(self) -> float:
        total = 0.0
        for rows in self.rows.values():
            total -= np.sum(np.log(TWO_PI * rows.east_err * rows.north_err / rows.corr_factor))
            total -= np.sum(np.log(TWO_PI * rows.sep_err * rows.pa_err))
        if self.velocity_rows is not None:
            # The jitter's share of the normalisation is in the residuals (see there).
            total -= 0.5 * np.sum(np.log(TWO_PI * self.velocity_rows.err2))
        return float(total)

    @property
    def prior_plan(self) -> PriorPlan:
        """The prior as a box with a constant density, the discs and the rest."""
        return self._prior_plan

    @property
    def log_normalisation(self) -> float:
        """The Gaussian likelihood's constant (velocities' jitter terms aside)."""
        return self._log_norm

    # ----------------------------------------------------------------- priors
    def log_prior(self, theta):
        """Log prior density of the sampled coordinates, shape (n,)."""
        theta = np.atleast_2d(theta)
        plan = self._prior_plan
        # One errstate for the whole loop: entering it costs as much as a small prior.
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            # Most coordinates have a prior that is flat where they are sampled (a
            # log-uniform period in log10 P, a uniform e on the sqrt(e) disc, an
            # isotropic cos i): one box test and a constant stand for them all.
            inside = np.all((theta >= plan.low) & (theta <= plan.high), axis=1)
            for k, j, low, high in plan.discs:
                ecc = theta[:, k] ** 2 + theta[:, j] ** 2
                inside &= (ecc >= low) & (ecc <= high)
            lp = np.full(theta.shape[0], plan.constant)
            for k in plan.varying:
                lp += self._log_prior_one(self.parameters[k], theta[:, k], theta)
            lp += self._log_prior_windows(theta)
            lp = np.where(inside, lp, -np.inf)
        return np.where(np.isnan(lp), -np.inf, lp)

    def _plan_prior(self) -> PriorPlan:
        """Split the prior into a box with a constant density, and the rest."""
        low = np.full(self.n_dim, -np.inf)
        high = np.full(self.n_dim, np.inf)
        constant, varying, discs = 0.0, [], []
        for k, param in enumerate(self.parameters):
            prior, kind = param.prior, param.transform
            value = None
            if kind == "window":
                continue  # all of them in one piece, from the current centres
            if kind == "flat":
                value, box = 0.0, (param.low, param.high)
            elif kind == "identity" and type(prior) is Uniform:
                value, box = -np.log(prior.high - prior.low), (prior.low, prior.high)
            elif kind == "log10" and type(prior) is LogUniform:
                # p(x) dx = dx / (x ln(high/low)), and dx = x ln10 du.
                value = np.log(LN10) - np.log(np.log(prior.high / prior.low))
                box = (np.log10(prior.low), np.log10(prior.high))
            elif kind == "cos" and type(prior) is Uniform and prior.low == 0.0 \
                    and prior.high == np.pi:
                value, box = 0.0, (param.low, param.high)
            elif kind == "disc" and param.name.endswith("sqrt_e_sin_w"):
                value, box = 0.0, (param.low, param.high)  # counted with its partner
            elif kind == "disc" and type(prior) is Uniform:
                partner = self.column_of[param.name.replace("cos_w", "sin_w")]
                discs.append((k, partner, prior.low, prior.high))
                value = -np.log(prior.high - prior.low) - np.log(np.pi)
                box = (param.low, param.high)
            if value is None or not np.isfinite(value):
                varying.append(k)
                continue
            constant += value
            low[k] = max(box[0], param.low)
            high[k] = min(box[1], param.high)
        return PriorPlan(low=low, high=high, constant=float(constant),
                          varying=varying, discs=discs)

    def _log_prior_windows(self, theta):
        # Angle windows are flat: only "inside all of them" matters, so one comparison
        # of every window column replaces a pass per angle (the same numbers).
        cols, lows, highs = [], [], []
        for k, param in enumerate(self.parameters):
            if param.transform != "window" or param.name.endswith(".omega"):
                continue
            low, high = self.window(*param.name.rsplit(".", 1))
            cols.append(k)
            lows.append(low)
            highs.append(high)
        if not cols:
            return 0.0
        u = theta[:, cols]
        return np.where(np.all((u >= lows) & (u < highs), axis=1), 0.0, -np.inf)

    def _log_prior_one(self, param, u, theta):
        inside = (u >= param.low) & (u <= param.high)
        if param.transform == "log10":
            x = 10.0 ** u
            value = param.prior.log_pdf(x) + np.log(x * LN10)
        elif param.transform == "identity":
            value = param.prior.log_pdf(u)
        elif param.transform == "flat":  # an improper flat prior (offsets, trends)
            value = np.zeros_like(u)
        elif param.transform == "cos":
            inc = np.arccos(np.clip(u, -1.0, 1.0))
            # Uniform in cos i is isotropic; any other prior on i needs 1/sin i.
            if isinstance(param.prior, Uniform) and param.prior.low == 0.0 \
                    and param.prior.high == np.pi:
                value = np.zeros_like(u)
            else:
                value = param.prior.log_pdf(inc) - np.log(np.sin(inc))
        elif param.transform == "disc":
            if param.name.endswith("sqrt_e_sin_w"):
                return np.where(inside, 0.0, -np.inf)  # counted with its partner
            k = theta[:, self.column_of[param.name.replace("cos_w", "sin_w")]]
            ecc = u * u + k * k
            # Uniform on the disc is uniform in e and omega: p(h, k) = p(e) / pi.
            value = param.prior.log_pdf(ecc) - np.log(np.pi)
        else:  # an angle window
            body, kind = param.name.rsplit(".", 1)
            if kind == "omega":
                return np.zeros_like(u)
            low, high = self.window(body, kind)
            inside = (u >= low) & (u < high)
            value = np.zeros_like(u)
        return np.where(inside, value, -np.inf)

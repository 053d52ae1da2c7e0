"""The nested sampler's prior: dynesty's unit cube -> the model's coordinates.

Each coordinate is drawn through its prior's inverse cdf
(:meth:`massfit.priors.Prior.quantile`), so that uniform draws on the cube are draws
from the model's prior; improper flat priors become named uniform boxes
(:func:`flat_box`). The inverse map and the prior's density in the model's
coordinates (:meth:`PriorTransform.log_density`) give the Laplace check of ln Z.
"""

from __future__ import annotations

import numpy as np

__all__ = ["PriorTransform", "flat_box"]

TWO_PI = 2.0 * np.pi


def flat_box(model, param):
    """(low, high) of a uniform box standing in for an improper flat prior.

    Offsets: the instrument's velocities' range widened by that range (at least 10
    errors) each way. Trend slope: the velocities' full range per the data's span,
    each way; curvature: that per span squared, times 8. Any orbit the data allow
    lies well inside.
    """
    vel = model.velocity_rows
    spread = float(np.ptp(vel.rv)) + 10.0 * float(np.sqrt(np.max(vel.err2)))
    span = max(float(np.ptp(vel.t)), 1.0)
    kind, label = param.target
    if kind == "offset":
        rv = vel.rv[vel.instrument == vel.labels.index(label)]
        return float(np.min(rv) - spread), float(np.max(rv) + spread)
    half = spread / span if kind == "slope" else 8.0 * spread / span ** 2
    return -half, half


class PriorTransform:
    """dynesty's unit cube -> the model's coordinates, distributed as the model's prior.

    Parameters
    ----------
    model : OrbitModel
        Its node and phase windows must already be centred (the start does that).
    boxes : dict, optional
        Companion name -> (low, high) days: that period prior cut to the box (the
        prior renormalised within it); :attr:`log_box_mass` is then the log of the
        box's prior probability.

    Notes
    -----
    Per coordinate: a period, mass, parallax, jitter or semi-amplitude is its prior's
    quantile of u (then log10 where sampled as log10); cos i is uniform on [-1, 1] for
    the default isotropic orientation, else the cosine of the inclination prior's
    quantile; (sqrt e cos w, sqrt e sin w) take e from its prior's quantile and w
    uniform (uniform on the sqrt(e) disc in w, as the model's prior); node and phase
    are uniform over their windows, a fixed-eccentricity omega over 2 pi.
    """

    def __init__(self, model, boxes=None):
        self.model = model
        self.notes = []
        self.log_box_mass = 0.0
        #: Columns cut to a box (a node half): not periodic in the run.
        self.bounded = []
        self._maps = []
        boxes = dict(boxes or {})
        for k, param in enumerate(model.parameters):
            self._maps.append(self._map_of(param, boxes))

    def _map_of(self, param, boxes):
        name, kind, prior = param.name, param.transform, param.prior
        if kind == "disc":
            if name.endswith("sqrt_e_sin_w"):
                return None  # drawn with its partner
            return ("disc", prior, self.model.column_of[name.replace("cos_w", "sin_w")])
        if kind == "window":
            body, which = name.rsplit(".", 1)
            low, high = ((-np.pi, np.pi) if which == "omega"
                         else self.model.window(body, which))
            if name in boxes:  # a mirror image's half of the node circle
                half = boxes[name]
                self.log_box_mass += float(np.log((half[1] - half[0]) / (high - low)))
                self.bounded.append(self.model.column_of[name])
                return ("linear", *half)
            return ("linear", low, high)
        if kind == "flat":
            low, high = flat_box(self.model, param)
            self.notes.append(f"{name}: an improper flat prior, drawn uniform on "
                              f"[{low:.6g}, {high:.6g}] (the evidence depends on this width)")
            return ("linear", low, high)
        if kind == "cos":
            if type(prior).__name__ == "Uniform" and prior.low == 0.0 \
                    and prior.high == np.pi:
                return ("linear", -1.0, 1.0)  # isotropic: uniform in cos i
            return ("quantile", prior, 0.0, 1.0, np.cos)
        body = name.split(".")[0]
        lo, hi = 0.0, 1.0
        if name.endswith(".log10_period") and body in boxes:
            lo, hi = (float(c) for c in prior.cdf(np.asarray(boxes[body], dtype=float)))
            if not hi > lo:
                raise ValueError(f"the period box {boxes[body]} of {body} holds no prior mass")
            self.log_box_mass += float(np.log(hi - lo))
        outer = np.log10 if kind == "log10" else None
        return ("quantile", prior, lo, hi, outer)

    def inverse(self, theta):
        """The unit-cube point that :meth:`__call__` maps to ``theta``."""
        theta = np.asarray(theta, dtype=float)
        u = np.empty(theta.size)
        for k, how in ((k, how) for k, how in enumerate(self._maps) if how is not None):
            kind = how[0]
            if kind == "disc":
                x, y = theta[k], theta[how[2]]
                u[k] = float(how[1].cdf(x * x + y * y))
                u[how[2]] = (np.arctan2(y, x) + np.pi) / TWO_PI
                continue
            if kind == "linear":
                u[k] = (theta[k] - how[1]) / (how[2] - how[1])
                continue
            _, prior, lo, hi, outer = how
            value = (theta[k] if outer is None else 10.0 ** theta[k]
                     if outer is np.log10 else np.arccos(np.clip(theta[k], -1, 1)))
            u[k] = (float(prior.cdf(value)) - lo) / (hi - lo)
        return u

    def log_density(self, theta, step=1e-6) -> float:
        """ln of the (proper) prior density at ``theta`` in the model's coordinates:
        -ln |det d theta / d u|, the Jacobian by central differences on the cube."""
        u = np.clip(self.inverse(theta), 2 * step, 1 - 2 * step)
        jac = np.empty((u.size, u.size))
        for j in range(u.size):
            up, down = u.copy(), u.copy()
            up[j] += step
            down[j] -= step
            jac[:, j] = (self(up) - self(down)) / (2 * step)
        sign, log_det = np.linalg.slogdet(jac)
        return -float(log_det) if sign != 0 else -np.inf

    def __call__(self, u):
        u = np.asarray(u, dtype=float)
        theta = np.empty(u.size)
        for k, how in enumerate(self._maps):
            if how is None:
                continue
            if how[0] == "linear":
                theta[k] = how[1] + u[k] * (how[2] - how[1])
            elif how[0] == "disc":
                ecc = float(how[1].quantile(u[k]))
                omega = TWO_PI * u[how[2]] - np.pi
                theta[k] = np.sqrt(ecc) * np.cos(omega)
                theta[how[2]] = np.sqrt(ecc) * np.sin(omega)
            else:
                _, prior, lo, hi, outer = how
                value = float(prior.quantile(lo + u[k] * (hi - lo)))
                theta[k] = value if outer is None else outer(value)
        return theta

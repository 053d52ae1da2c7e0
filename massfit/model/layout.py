"""The model's parameter vector: which parameters it has and in what order, the angle windows
the sampler moves in, and the way between physical values and the vector.
"""

from __future__ import annotations

import numpy as np

from massfit.model import extra_terms
from massfit.model.parts import TWO_PI, ParameterSlot, scale_parameter
from massfit.model.specs import DEFAULT_SEMI_AMPLITUDE_PRIOR
from massfit.priors import LogUniform, Uniform

__all__ = ["ParameterLayout"]


class ParameterLayout:
    """The part of OrbitModel that lays out its parameter vector (a mixin)."""

    def _layout(self):
        spec = self.spec
        params = []
        if not self.velocity_only and not spec.central_mass.is_fixed:
            params.append(ParameterSlot("central.log10_mass", r"$\log_{10} M/M_\odot$",
                                     spec.central_mass, "log10"))
        if self.needs_parallax and not spec.parallax.is_fixed:
            params.append(ParameterSlot("parallax", r"$\varpi$ [mas]", spec.parallax,
                                     "identity", 0.0, np.inf))
        for k, (name, comp) in enumerate(self.companions.items()):
            params.append(ParameterSlot(f"{name}.log10_period", rf"$\log_{{10}} P_{{{name}}}$",
                                     comp.period, "log10"))
            if not comp.eccentricity.is_fixed:
                params.append(ParameterSlot(f"{name}.sqrt_e_cos_w", "", comp.eccentricity,
                                         "disc", -1.0, 1.0))
                params.append(ParameterSlot(f"{name}.sqrt_e_sin_w", "", comp.eccentricity,
                                         "disc", -1.0, 1.0))
            elif comp.eccentricity.value > 0:
                params.append(ParameterSlot(f"{name}.omega", "", Uniform(-np.inf, np.inf),
                                         "window"))
            if self.velocity_only:
                params.append(ParameterSlot(f"{name}.phase", "", Uniform(-np.inf, np.inf),
                                         "window"))
                prior = comp.semi_amplitude or DEFAULT_SEMI_AMPLITUDE_PRIOR
                if self.primary_has_velocities:
                    params.append(scale_parameter(f"{name}.k_primary", prior))
                if np.any(self.velocity_rows.owner == k):
                    params.append(scale_parameter(f"{name}.k_companion", prior))
                continue
            if not (comp.inclination is not None and comp.inclination.is_fixed):
                params.append(ParameterSlot(f"{name}.cos_inc", "", comp.inclination or
                                         Uniform(0.0, np.pi), "cos", -1.0, 1.0))
            params.append(ParameterSlot(f"{name}.node", "", Uniform(-np.inf, np.inf), "window"))
            params.append(ParameterSlot(f"{name}.phase", "", Uniform(-np.inf, np.inf), "window"))
            if not comp.mass.is_fixed:
                transform = "log10" if isinstance(comp.mass, LogUniform) else "identity"
                prefix = "log10_" if transform == "log10" else ""
                params.append(ParameterSlot(f"{name}.{prefix}mass", "", comp.mass, transform,
                                         0.0 if transform == "identity" else -np.inf))
        for name, label, prior in extra_terms.parameters(spec, self.velocity_rows is not None):
            params.append(ParameterSlot(name, label, Uniform(-np.inf, np.inf), "flat")
                          if prior is None else ParameterSlot(name, label, prior, "identity"))
        if self.velocity_rows is not None:
            params.extend(self._velocity_layout())
        return params

    def _velocity_layout(self):
        vel = self.velocity_rows
        params = []
        for label, offset, jitter in zip(vel.labels, vel.offsets, vel.jitters):
            if offset is None:
                params.append(ParameterSlot(f"rv.{label}.offset", "", Uniform(-np.inf, np.inf),
                                         "flat", target=("offset", label)))
            elif not offset.is_fixed:
                params.append(ParameterSlot(f"rv.{label}.offset", "", offset, "identity",
                                         target=("offset", label)))
            if not jitter.is_fixed:
                param = scale_parameter(f"rv.{label}.jitter", jitter)
                param.target = ("jitter", label)
                params.append(param)
        terms = {"none": (), "linear": ("slope",), "quadratic": ("slope", "curvature")}
        for term in terms[self.spec.trend]:
            prior = getattr(self.spec, term)
            if prior is None:
                params.append(ParameterSlot(f"rv.trend.{term}", "", Uniform(-np.inf, np.inf),
                                         "flat", target=(term, None)))
            elif not prior.is_fixed:
                params.append(ParameterSlot(f"rv.trend.{term}", "", prior, "identity",
                                         target=(term, None)))
        return params

    # ------------------------------------------------------------- coordinates
    @property
    def names(self) -> list:
        """Names of the sampled coordinates, in order."""
        return [p.name for p in self.parameters]

    def window(self, name, kind):
        """(low, high) of an angle window: kind is 'node' or 'phase'."""
        width = self.node_width[name] if kind == "node" else TWO_PI
        centre = self.centres[name][kind]
        return centre - 0.5 * width, centre + 0.5 * width

    # ----------------------------------------------------------- conversions
    def from_physical(self, values: dict) -> np.ndarray:
        """Sampled coordinates from physical values.

        ``values`` has ``central_mass`` (M_sun), optional ``parallax`` (mas), and per
        companion name a dict with ``period``, ``ecc``, ``omega``, ``inc``, ``node``,
        ``mean_anomaly_ref``, optional ``mass`` and (velocity-only) ``k_primary``,
        ``k_companion``. With velocities, ``rv`` holds ``offset`` and ``jitter``
        (dicts by instrument label, km/s), ``slope`` and ``curvature``. Angles are
        wrapped into the current windows.
        """
        values = dict(values)
        for name in self.companions:
            if not self.velocity_only:
                values[name] = self._fold_node(name, dict(values[name]))
        theta = np.empty(self.n_dim)
        for k, param in enumerate(self.parameters):
            theta[k] = self._coordinate(param, values)
        return theta

    def _fold_node(self, name, orbit):
        # Where only astrometry constrains the body, (omega + pi, node + pi) is the
        # same orbit on the sky: move both together into the node window.
        low, _ = self.window(name, "node")
        turns = np.floor((orbit["node"] - low) / self.node_width[name])
        orbit["node"] = orbit["node"] - turns * self.node_width[name]
        if self.node_width[name] < TWO_PI:
            orbit["omega"] = orbit["omega"] + turns * np.pi
        return orbit

    def _coordinate(self, param, values):
        name = param.name
        if param.target is not None:
            kind, label = param.target
            value = values["rv"][kind] if label is None else values["rv"][kind][label]
            return float(np.log10(value) if param.transform == "log10" else value)
        if name == "central.log10_mass":
            return np.log10(values["central_mass"])
        if name == "parallax":
            return values["parallax"]
        if name.startswith("frame."):
            return float(values.get("frame", {}).get(name.split(".", 1)[1], 0.0))
        if name == "relativity.precession_scale":
            return float(values.get("precession_scale", 1.0))
        body, kind = name.rsplit(".", 1)
        orbit = values[body]
        simple = {
            "log10_period": lambda: np.log10(orbit["period"]),
            "sqrt_e_cos_w": lambda: np.sqrt(orbit["ecc"]) * np.cos(orbit["omega"]),
            "sqrt_e_sin_w": lambda: np.sqrt(orbit["ecc"]) * np.sin(orbit["omega"]),
            "omega": lambda: orbit["omega"],
            "cos_inc": lambda: np.cos(orbit["inc"]),
            "log10_mass": lambda: np.log10(orbit["mass"]),
            "mass": lambda: orbit["mass"],
        }
        for amplitude in ("k_primary", "k_companion"):
            simple[amplitude] = lambda key=amplitude: orbit[key]
            simple[f"log10_{amplitude}"] = lambda key=amplitude: np.log10(orbit[key])
        if kind in simple:
            return float(simple[kind]())
        if kind == "node":
            return float(orbit["node"])
        low, high = self.window(body, "phase")
        phase = orbit["mean_anomaly_ref"] + orbit["omega"]
        return float(low + np.mod(phase - low, high - low))

    def recentre(self, theta):
        """Centre the node and phase windows on ``theta`` (1-D) and return it."""
        theta = np.array(theta, dtype=float)
        kinds = ("phase",) if self.velocity_only else ("node", "phase")
        for name in self.companions:
            for kind in kinds:
                k = self.column_of[f"{name}.{kind}"]
                self.centres[name][kind] = float(theta[k])
        return theta

    def fold_into_windows(self, theta):
        """Rows of ``theta`` (n, n_dim) moved into the current angle windows, the same
        orbits: each phase by whole turns; where the node window is half a turn
        (astrometry alone), the node by half turns, each half turn with omega + pi
        (the sqrt(e) pair's signs flipped, or the omega coordinate moved) and the
        phase (M0 + omega) + pi. For samples drawn while the windows were centred
        elsewhere (nested sampling centres them on each mode)."""
        theta = np.array(np.atleast_2d(theta), dtype=float)
        for name in self.companions:
            column = self.column_of
            phase = theta[:, column[f"{name}.phase"]]
            if not self.velocity_only:
                node = theta[:, column[f"{name}.node"]]
                low, _ = self.window(name, "node")
                turns = np.floor((node - low) / self.node_width[name])
                node -= turns * self.node_width[name]
                if self.node_width[name] < TWO_PI:
                    odd = np.mod(turns, 2.0) == 1.0
                    phase += np.pi * turns
                    if f"{name}.sqrt_e_cos_w" in column:
                        for part in ("cos", "sin"):
                            k = column[f"{name}.sqrt_e_{part}_w"]
                            theta[odd, k] = -theta[odd, k]
                    elif f"{name}.omega" in column:
                        k = column[f"{name}.omega"]
                        theta[odd, k] = np.mod(theta[odd, k] + 2.0 * np.pi, TWO_PI) - np.pi
            low, high = self.window(name, "phase")
            phase[:] = low + np.mod(phase - low, high - low)
        return theta

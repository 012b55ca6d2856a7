"""The prior of every free rate, in expected changes along the tree's height H.

A rate r per branch-length unit is scaled to s = r H (H: the root-to-tip height the
fit's rate bounds use, ``mkforest.engine.search``), and each free rate gets the same
independent prior on s: exponential (mean m), gamma (shape a, mean m; rate a / m) or
log-uniform on [l, u] (density 1 / (s ln(u / l))). No compiled code and no SciPy, so
the workflow's config check can parse a prior cheaply.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from numbers import Number

import numpy as np

from ...errors import InputError, did_you_mean

PRIOR_KINDS = ("exponential", "gamma", "log_uniform")
_KEYS = {"exponential": ("mean",), "gamma": ("shape", "mean"), "log_uniform": ("lower", "upper")}


@dataclass(frozen=True)
class Prior:
    """One prior for every free rate, on the scaled rate s = rate * H (changes along H)."""

    kind: str = "exponential"
    mean: float = 1.0
    shape: float = 1.0
    lower: float = 1e-3
    upper: float = 1e2

    @classmethod
    def from_config(cls, block: dict, where: str) -> Prior:
        """A prior from a config block such as ``{"exponential": {"mean": 1}}``,
        ``{"gamma": {"shape": 2, "mean": 1}}`` or ``{"log_uniform": {"lower": 1e-3,
        "upper": 100}}`` (missing values take the defaults); ``where`` names the key in
        every error message."""
        if block is None:
            return cls()
        if not isinstance(block, dict) or len(block) != 1:
            raise InputError(
                f"{where} must name one prior, e.g. {{exponential: {{mean: 1}}}}; "
                f"the kinds are {', '.join(PRIOR_KINDS)}."
            )
        ((kind, values),) = block.items()
        if kind not in PRIOR_KINDS:
            raise InputError(
                f"{where}: '{kind}' is not a prior; use one of {', '.join(PRIOR_KINDS)}."
                + did_you_mean(kind, PRIOR_KINDS)
            )
        values = {} if values is None else values
        if not isinstance(values, dict):
            raise InputError(
                f"{where}.{kind} must hold its values by name ({', '.join(_KEYS[kind])})."
            )
        for key, value in values.items():
            if key not in _KEYS[kind]:
                raise InputError(
                    f"{where}.{kind}: '{key}' is not a value of this prior; it takes "
                    f"{', '.join(_KEYS[kind])}." + did_you_mean(key, _KEYS[kind])
                )
            if (
                not isinstance(value, Number)
                or isinstance(value, bool)
                or not math.isfinite(value)
                or value <= 0
            ):
                raise InputError(f"{where}.{kind}.{key} is '{value}': give a positive number.")
        prior = cls(kind, **{k: float(v) for k, v in values.items()})
        if kind == "log_uniform" and not prior.lower < prior.upper:
            raise InputError(
                f"{where}.log_uniform: lower ({prior.lower:g}) must be below upper "
                f"({prior.upper:g})."
            )
        return prior

    def log_density(self, scaled_rates):
        """Sum over the rates of ln p(s) (normalised densities on s; -inf outside a
        log-uniform range)."""
        s = np.asarray(scaled_rates, dtype=np.float64)
        if self.kind == "exponential":
            return float(np.sum(-math.log(self.mean) - s / self.mean))
        if self.kind == "gamma":
            a, b = self.shape, self.shape / self.mean
            return float(np.sum(a * math.log(b) - math.lgamma(a) + (a - 1) * np.log(s) - b * s))
        if np.any(s < self.lower) or np.any(s > self.upper):
            return -math.inf
        return float(np.sum(-np.log(s) - math.log(math.log(self.upper / self.lower))))

    def log_scale_terms(self):
        """(a, b, c, lo, hi): the density of y = ln s, ln p(s) + ln s (the Jacobian), is
        a ln s - b s + c for s in [lo, hi] and 0 outside (per rate); its gradient in y
        is a - b s. What the sampler adds to ln L."""
        if self.kind == "exponential":
            return 1.0, 1.0 / self.mean, -math.log(self.mean), 0.0, math.inf
        if self.kind == "gamma":
            a, b = self.shape, self.shape / self.mean
            return a, b, a * math.log(b) - math.lgamma(a), 0.0, math.inf
        return 0.0, 0.0, -math.log(math.log(self.upper / self.lower)), self.lower, self.upper

    def log_density_log_scale(self, scaled_rates):
        """(ln p(y), d ln p(y) / dy) of y = ln s: ln p(s) + ln s summed over the rates,
        and its gradient per rate (``log_scale_terms``)."""
        s = np.asarray(scaled_rates, dtype=np.float64)
        a, b, c, lo, hi = self.log_scale_terms()
        if np.any(s < lo) or np.any(s > hi):
            return -math.inf, np.zeros_like(s)
        value = a * float(np.sum(np.log(s))) - b * float(np.sum(s)) + c * len(s)
        return value, a - b * s

    def draw(self, rng, size):
        """Scaled rates drawn from the prior (simulation-based calibration)."""
        if self.kind == "exponential":
            return rng.exponential(self.mean, size)
        if self.kind == "gamma":
            return rng.gamma(self.shape, self.mean / self.shape, size)
        return np.exp(rng.uniform(math.log(self.lower), math.log(self.upper), size))

    def describe(self) -> str:
        """The prior in words, with its unit."""
        unit = "expected changes along the tree's height"
        if self.kind == "exponential":
            return f"exponential with mean {self.mean:g} {unit}"
        if self.kind == "gamma":
            return f"gamma with shape {self.shape:g} and mean {self.mean:g} {unit}"
        return f"log-uniform on [{self.lower:g}, {self.upper:g}] {unit}"

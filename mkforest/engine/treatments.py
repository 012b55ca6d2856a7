"""Branch-length treatments as the config names them: which exist, their bounds and
null values, and the parsing of ``models.<name>.branches``. The transforms
themselves (compiled) are in ``branches``; this module imports no compiler, so the
workflow's config check (run at every Snakemake start) stays light.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from numbers import Number

from ..errors import InputError

TREATMENTS = ("as_given", "unit", "kappa", "lambda", "delta", "early_burst")
ESTIMABLE = ("kappa", "lambda", "delta", "early_burst")
# Optimiser bounds on x (see the module docstring) and the value giving the tree's lengths.
DELTA_RANGE = (0.01, 3.0)
BOUNDS = {
    "kappa": (0.0, 3.0),
    "lambda": (0.0, 1.0),
    "delta": (math.log(DELTA_RANGE[0]), math.log(DELTA_RANGE[1])),
    "early_burst": (-10.0, 10.0),
}
NULL_VALUE = {"kappa": 1.0, "lambda": 1.0, "delta": 0.0, "early_burst": 0.0}


@dataclass(frozen=True)
class Treatment:
    """One model's branch-length treatment: its name, and the fixed parameter value
    (None when the parameter is estimated, or when the treatment has none)."""

    name: str = "as_given"
    fixed: float | None = None

    @property
    def free(self) -> bool:
        """True when the treatment adds an estimated parameter."""
        return self.name in ESTIMABLE and self.fixed is None

    @property
    def n_params(self) -> int:
        return 1 if self.free else 0

    @property
    def label(self) -> str:
        """'kappa', or 'kappa=0' for a fixed value (the `branches` column of fits.tsv)."""
        return self.name if self.fixed is None else f"{self.name}={self.fixed:g}"

    def bounds(self) -> tuple:
        return BOUNDS[self.name]

    def theta(self, x: float, tree) -> float:
        """The reported parameter for optimiser value x (a = x / H for early_burst,
        delta = e^x)."""
        if self.name == "early_burst":
            return x / _height(tree)
        if self.name == "delta":  # e^(ln 3) rounds above 3: keep the range's own ends
            return min(max(math.exp(x), DELTA_RANGE[0]), DELTA_RANGE[1])
        return float(x)

    def x_of(self, theta: float, tree) -> float:
        if self.name == "early_burst":
            return theta * _height(tree)
        if self.name == "delta":
            return math.log(theta) if theta > 0.0 else -math.inf
        return float(theta)


def parse_treatment(spec, at: str) -> Treatment:
    """A treatment from the config value of ``models.<name>.branches`` (named ``at``):
    a treatment name, or {name: value} for a fixed parameter."""
    if spec is None:
        return Treatment()
    if isinstance(spec, str):
        if spec not in TREATMENTS:
            raise InputError(
                f"{at} is '{spec}': use one of {', '.join(TREATMENTS)}, or a fixed "
                "value such as {kappa: 0}."
            )
        return Treatment(spec)
    if isinstance(spec, dict) and len(spec) == 1:
        ((name, value),) = spec.items()
        if name not in ESTIMABLE:
            raise InputError(
                f"{at}: '{name}' has no parameter to fix; a fixed value goes with "
                f"{', '.join(ESTIMABLE)}."
            )
        if not isinstance(value, Number) or isinstance(value, bool) or not math.isfinite(value):
            raise InputError(f"{at}.{name} is '{value}': give a number.")
        lo, hi = {
            "kappa": (0.0, math.inf),
            "lambda": (0.0, 1.0),
            "delta": (0.0, math.inf),
            "early_burst": (-math.inf, math.inf),
        }[name]
        if not lo <= value <= hi:
            raise InputError(f"{at}.{name} is {value}: it must lie in [{lo:g}, {hi:g}].")
        return Treatment(name, float(value))
    raise InputError(
        f"{at} must be a treatment name ({', '.join(TREATMENTS)}) or one fixed "
        "value such as {kappa: 0}."
    )


def _height(tree) -> float:
    h = tree.height
    return h if h > 0 else 1.0

"""Branch-length treatments: the one registry every stage asks, and the two parsers.

``REGISTRY`` holds one ``TreatmentKind`` per treatment: its name, the code of its
compiled transform (``branches``), the parameter's name as users see it, the range a
fixed value may take, the optimiser's box and null value, the search's step unit, the
length the fit holds the rates to, which ends of the box are only the box's edge,
its words in the methods text (with the key of its source) and its colour in figures.
``parse_treatment`` reads the config value of ``models.<name>.branches`` and
``parse_label`` the ``branches`` label of fits.tsv (``kappa``, ``kappa=0``); each is
the inverse of ``Treatment.label``. This module imports no compiler, so the
workflow's config check (run at every Snakemake start) stays light.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from numbers import Number

from ..errors import InputError

# The optimiser works on x (see ``branches``): x = theta for kappa and lambda
# ("same"), x = ln delta ("log"), x = theta H for early_burst ("height", H the tree height).
SAME, LOG, HEIGHT = "same", "log", "height"
# The length the fit holds the rates to while the branch value moves (``held``): the
# total of every branch, of the tip branches, or the geometric mean branch length
# (the compiled ``branches._held_length`` takes these codes).
HELD_TOTAL, HELD_TIPS, HELD_GEOMETRIC = 0, 1, 2


@dataclass(frozen=True)
class TreatmentKind:
    """Every fact about one branch-length treatment (None where it has no parameter)."""

    name: str
    words: str  # the methods text's description (its source cited after it)
    source: str | None  # citation key of the method, or None
    colour: str  # its colour in figures
    code: int | None = None  # compiled transform (branches._transform); None: none
    parameter: str | None = None  # the parameter's name in tables and captions
    symbol: str | None = None  # the cited paper's symbol, for the methods text only
    fixed_range: tuple | None = None  # values a fixed parameter may take (config)
    scale: str | None = None  # how the optimiser's x relates to the parameter
    box: tuple | None = None  # optimiser bounds on x
    theta_box: tuple | None = None  # the same on the parameter's scale (scale LOG)
    null: float | None = None  # parameter value giving the tree's own lengths
    null_x: float | None = None  # the same on the optimiser's scale
    step: float | None = None  # the search's unit of x (fitting's treatment space)
    held: int | None = None  # HELD_TOTAL, HELD_TIPS or HELD_GEOMETRIC
    box_edges: tuple = ()  # ends of the box ("lower", "upper") that are only its edge

    @property
    def estimable(self) -> bool:
        """True when the treatment has a parameter (estimated, or fixed in the config)."""
        return self.code is not None


DELTA_RANGE = (0.01, 3.0)

# Held lengths and step units were chosen by measurement (benchmarks/
# bench_treatment_fits.py, objective evaluations per fit against the given lengths',
# and the optima reached). delta: as it falls towards 0 the internal branches lengthen
# and the tip branches, where most change is seen, shorten, so the rates that fit rise
# steeply when held to the whole tree's length (2.2 times the given lengths'
# evaluations) and little when held to the tip branches' (1.7 times, the same optima).
# early_burst: the geometric mean (1.81 times, against 1.89 for the total, on 20 data
# sets per block, and no fit left below the given lengths' optimum, against one).
# kappa and lambda: the choices took the same evaluations within the benchmark's
# noise; the total is kept. Step units: x moves the lengths by about as much as a unit
# of the log-rates for kappa = 1 (t^kappa), lambda = 0.2 (lambda moves the internal
# lengths in proportion, the tip ones by their parents' depths), a H and ln delta = 2
# (flat; early_burst: 2 with the rates held to the geometric mean branch length; it was
# 3 with the total).
# Box edges: bounds of a branch-length parameter that are only the edge of the search
# box: there the data do not bound the parameter, and a map's count of changes follows
# the box (a kappa of 3 with its rates drew 900 changes per map on a 90-tip demo
# tree). kappa = 0 (speciation events) and lambda's 0 and 1 are models in their own
# right, not box edges.
REGISTRY = {
    k.name: k
    for k in (
        TreatmentKind("as_given", "the branch lengths as given", None, "#4c6a92"),
        TreatmentKind(
            "unit",
            "every branch of length one (change per speciation event)",
            None,
            "#c3793a",
        ),
        TreatmentKind(
            "kappa",
            "every branch length raised to an estimated power kappa",
            "pagel1994",
            "#5f9e6e",
            code=0,
            parameter="kappa",
            symbol="kappa",
            fixed_range=(0.0, math.inf),
            scale=SAME,
            box=(0.0, 3.0),
            null=1.0,
            null_x=1.0,
            step=1.0,
            held=HELD_TOTAL,
            box_edges=("upper",),
        ),
        TreatmentKind(
            "lambda",
            "internal branches multiplied by an estimated lambda in [0, 1], tip branches "
            "lengthened to keep each tip's distance from the root",
            "pagel1999",
            "#8d6ab8",
            code=1,
            parameter="lambda",
            symbol="lambda",
            fixed_range=(0.0, 1.0),
            scale=SAME,
            box=(0.0, 1.0),
            null=1.0,
            null_x=1.0,
            step=0.2,
            held=HELD_TOTAL,
            box_edges=(),
        ),
        TreatmentKind(
            "delta",
            "node distances from the root d transformed to H (d/H)^delta with H the tree "
            "height and delta estimated",
            "pagel1999",
            "#b5545c",
            code=2,
            parameter="delta",
            symbol="delta",
            fixed_range=(0.0, math.inf),
            scale=LOG,
            box=(math.log(DELTA_RANGE[0]), math.log(DELTA_RANGE[1])),
            theta_box=DELTA_RANGE,
            null=1.0,
            null_x=0.0,
            step=2.0,
            held=HELD_TIPS,
            box_edges=("lower", "upper"),
        ),
        TreatmentKind(
            "early_burst",
            # the symbol a is the cited paper's (from memory)
            "a rate that changes exponentially with distance from the root, "
            "e^(a s), a branch from s0 to s1 counting (e^(a s1) - e^(a s0))/a",
            "harmon2010",
            "#8c8c3a",
            code=3,
            parameter="rate_change",
            symbol="a",
            fixed_range=(-math.inf, math.inf),
            scale=HEIGHT,
            box=(-10.0, 10.0),
            null=0.0,
            null_x=0.0,
            step=2.0,
            held=HELD_GEOMETRIC,
            box_edges=("lower", "upper"),
        ),
    )
}

# Views of the registry under the names the engine's users import.
TREATMENTS = tuple(REGISTRY)
ESTIMABLE = tuple(n for n, k in REGISTRY.items() if k.estimable)
BOUNDS = {n: REGISTRY[n].box for n in ESTIMABLE}
NULL_VALUE = {n: REGISTRY[n].null_x for n in ESTIMABLE}  # on the optimiser's scale


def tree_height(tree) -> float:
    """The tree's height H (largest root-to-tip distance), 1 for a tree without one."""
    h = tree.height
    return h if h > 0 else 1.0


@dataclass(frozen=True)
class Treatment:
    """One model's branch-length treatment: its name, and the fixed parameter value
    (None when the parameter is estimated, or when the treatment has none)."""

    name: str = "as_given"
    fixed: float | None = None

    @property
    def kind(self) -> TreatmentKind:
        """The registry entry of this treatment."""
        return REGISTRY[self.name]

    @property
    def free(self) -> bool:
        """True when the treatment adds an estimated parameter."""
        return self.kind.estimable and self.fixed is None

    @property
    def n_params(self) -> int:
        """Estimated parameters the treatment adds (0 or 1)."""
        return 1 if self.free else 0

    @property
    def label(self) -> str:
        """'kappa', or 'kappa=0' for a fixed value (the `branches` column of fits.tsv);
        ``parse_label`` reads it back. The value is written short (``:g``) where that
        reads back to the same number, in full otherwise."""
        if self.fixed is None:
            return self.name
        text = f"{self.fixed:g}"
        return f"{self.name}={text if float(text) == self.fixed else repr(self.fixed)}"

    def bounds(self) -> tuple:
        """The optimiser's bounds on x."""
        return self.kind.box

    def theta(self, x: float, tree) -> float:
        """The reported parameter for optimiser value x (rate_change = x / H,
        delta = e^x)."""
        scale = self.kind.scale
        if scale == HEIGHT:
            return x / tree_height(tree)
        if scale == LOG:  # e^(ln 3) rounds above 3: keep the range's own ends
            lo, hi = self.kind.theta_box
            return min(max(math.exp(x), lo), hi)
        return float(x)

    def x_of(self, theta: float, tree) -> float:
        """The optimiser's x for the reported parameter theta (inverse of ``theta``)."""
        scale = self.kind.scale
        if scale == HEIGHT:
            return theta * tree_height(tree)
        if scale == LOG:
            return math.log(theta) if theta > 0.0 else -math.inf
        return float(theta)


def parse_treatment(spec, at: str) -> Treatment:
    """A treatment from the config value of ``models.<name>.branches`` (named ``at``):
    a treatment name, or {name: value} for a fixed parameter."""
    if spec is None:
        return Treatment()
    if isinstance(spec, str):
        if spec not in REGISTRY:
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
        lo, hi = REGISTRY[name].fixed_range
        if not lo <= value <= hi:
            raise InputError(f"{at}.{name} is {value}: it must lie in [{lo:g}, {hi:g}].")
        return Treatment(name, float(value))
    raise InputError(
        f"{at} must be a treatment name ({', '.join(TREATMENTS)}) or one fixed "
        "value such as {kappa: 0}."
    )


def parse_label(label) -> Treatment:
    """The treatment of a fits.tsv ``branches`` label ('as_given', 'kappa', 'kappa=0');
    an empty cell (None, NaN, '') is the given lengths. Inverse of ``Treatment.label``."""
    if label is None or (isinstance(label, float) and math.isnan(label)):
        return Treatment()
    text = str(label).strip()
    if text in ("", "nan"):
        return Treatment()
    name, sep, fixed = text.partition("=")
    if name not in REGISTRY or (sep and name not in ESTIMABLE):
        raise ValueError(f"'{text}' is no branch-length treatment label")
    return Treatment(name, float(fixed)) if sep else Treatment(name)


def null_words(names: str = "parameter") -> str:
    """'kappa = lambda = delta = 1, rate_change = 0': the null values under the parameters'
    names in tables and captions (``names="symbol"``: the cited papers' symbols, for the
    methods text)."""
    groups = {}
    for n in ESTIMABLE:
        groups.setdefault(REGISTRY[n].null, []).append(getattr(REGISTRY[n], names))
    return ", ".join(" = ".join(names) + f" = {value:g}" for value, names in groups.items())

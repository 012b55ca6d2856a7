"""Rate-matrix structures of the Mk model (Lewis 2001) and its constrained forms.

A model is a k x k table saying, for every transition i -> j, whether its rate is
a free parameter (and which), fixed at a number, or forbidden (zero). The rate
matrix Q has those rates off the diagonal and minus the row sum on it, so each
row of Q sums to zero.

Built-in kinds:
  equal          one rate for every transition
  symmetric      i -> j and j -> i share a rate
  unconstrained  every transition its own rate
  custom         transitions listed by state labels, e.g.
                   "small -> medium": grow        (one transition, rate label 'grow')
                   "medium <-> large": swap       (both directions, one rate)
                   "small -> medium -> large": up (a chain: ordered change)
                   "large -> small": 0.0          (a number fixes the rate)
                 the same label ties rates; unlisted transitions are forbidden.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from numbers import Number

import numpy as np

from ..errors import InputError, did_you_mean


@dataclass(frozen=True)
class ModelKind:
    """Every fact about one built-in model kind that a stage outside ``build_model`` asks."""

    name: str
    words: str | None  # its rate structure in the methods text (custom: from its transitions)
    switch_words: str | None  # as the switching between hidden classes (``class_switch``)
    cost: int  # CPU of one fit relative to an equal-rates fit (the scheduler's order)


# Costs measured on 200-tip, 3-state trees (benchmarks/bench_workflow.py job logs:
# equal ~2.5 ms, symmetric ~8 ms, unconstrained ~22 ms); a custom model lies between.
KIND_TABLE = {
    k.name: k
    for k in (
        ModelKind("equal", "one rate for every change", "one rate for every switch", 1),
        ModelKind(
            "symmetric",
            "one rate per pair of states, the same in both directions",
            "a shared rate in each direction between two classes",
            3,
        ),
        ModelKind(
            "unconstrained",
            "a separate rate for every change",
            "a rate of its own for every switch",
            10,
        ),
        ModelKind("custom", None, None, 5),
    )
}
KINDS = tuple(KIND_TABLE)
FREE_FORBIDDEN = -1
FIXED = -2


@dataclass(frozen=True, eq=False)
class RateModel:
    """rate_index int64 [k,k]: >= 0 parameter number, -1 forbidden, -2 fixed (value in ``fixed``).

    A model with hidden rate classes (``n_classes`` R > 1, built by
    ``mkforest.engine.hidden``) is the same table on its k_obs * R combined states
    ``state@class``, numbered class-major (combined index = class * k_obs + state);
    ``observed`` holds the k_obs observed state labels. A plain model has
    n_classes 1 and its own states as the observed ones.
    """

    name: str
    kind: str
    states: tuple
    rate_index: np.ndarray
    fixed: np.ndarray
    labels: tuple
    n_classes: int = 1
    observed: tuple = ()
    class_switch: str = ""

    @property
    def k(self) -> int:
        """Number of states (combined states with hidden classes)."""
        return len(self.states)

    @property
    def observed_states(self) -> tuple:
        """The trait's own state labels (the combined states without their class)."""
        return self.observed or self.states

    def expand_tips(self, tip_partials) -> np.ndarray:
        """Tip partials over the model's states from tip partials over the observed states:
        a tip possible in state s is possible in every class of s (class unknown)."""
        X = np.asarray(tip_partials, dtype=np.float64)
        k_obs = len(self.observed_states)
        if X.shape[-1] == self.k:
            return X
        if X.shape[-1] != k_obs:
            raise ValueError(
                f"model '{self.name}': tip partials have {X.shape[-1]} states, expected {k_obs}"
            )
        return np.tile(X, (1,) * (X.ndim - 1) + (self.n_classes,))

    def collapse(self, x, axis: int = -1) -> np.ndarray:
        """Sum an array over the classes of each observed state along ``axis``
        (probabilities of combined states -> of observed states)."""
        x = np.asarray(x)
        if self.n_classes == 1:
            return x
        x = np.moveaxis(x, axis, -1)
        k_obs = len(self.observed_states)
        out = x.reshape(x.shape[:-1] + (self.n_classes, k_obs)).sum(axis=-2)
        return np.moveaxis(out, -1, axis)

    @property
    def n_params(self) -> int:
        """Number of free rates."""
        return len(self.labels)

    def q_matrix(self, rates) -> np.ndarray:
        """Q with the given free rates (in ``labels`` order); rows sum to zero."""
        if "_free" not in self.__dict__:
            flat = self.rate_index.ravel()
            base = np.where(self.rate_index == FIXED, self.fixed, 0.0)
            np.fill_diagonal(base, 0.0)
            object.__setattr__(self, "_free", (np.flatnonzero(flat >= 0), flat[flat >= 0], base))
        pos, par, base = self._free
        q = base.copy()
        q.ravel()[pos] = np.asarray(rates, dtype=np.float64)[par]
        q.ravel()[:: self.k + 1] = -q.sum(axis=1)
        return q

    def signature(self) -> str:
        """The structure alone, independent of names: two models with the same
        signature are the same hypothesis (e.g. equal and symmetric on two states)."""
        first = {}
        parts = []
        for i in range(self.k):
            for j in range(self.k):
                p = int(self.rate_index[i, j])
                if p >= 0:
                    parts.append(f"p{first.setdefault(p, len(first))}")
                elif p == FIXED:
                    parts.append(f"={self.fixed[i, j]!r}")
                else:
                    parts.append("0")
        return " ".join(parts)

    def transitions(self):
        """(from_label, to_label, parameter index or -1/-2) for every allowed transition."""
        out = []
        for i in range(self.k):
            for j in range(self.k):
                if i != j and self.rate_index[i, j] != FREE_FORBIDDEN:
                    out.append((self.states[i], self.states[j], int(self.rate_index[i, j])))
        return out

    def describe(self) -> str:
        """One line per free rate: which transitions it governs."""
        groups = {lab: [] for lab in self.labels}
        fixed = []
        for a, b, p in self.transitions():
            if p >= 0:
                groups[self.labels[p]].append(f"{a}->{b}")
            else:
                fixed.append(f"{a}->{b}={self.fixed[self.states.index(a), self.states.index(b)]:g}")
        parts = [f"{lab}: {', '.join(tr)}" for lab, tr in groups.items()]
        if fixed:
            parts.append("fixed: " + ", ".join(fixed))
        return "; ".join(parts)


def _empty(k):
    idx = np.full((k, k), FREE_FORBIDDEN, dtype=np.int64)
    return idx, np.zeros((k, k))


ARROW = re.compile(r"\s*(<->|->)\s*")


def parse_transition(key: str, states, where: str) -> list:
    """'a -> b -> c' / 'a <-> b' into a list of (i, j) index pairs."""
    pieces = ARROW.split(str(key).strip())
    if len(pieces) < 3 or len(pieces) % 2 == 0:
        raise InputError(
            f"{where}: transition '{key}' is not of the form 'from -> to' "
            "(or 'a <-> b', or a chain 'a -> b -> c')."
        )
    names = pieces[0::2]
    arrows = pieces[1::2]
    index = {s: i for i, s in enumerate(states)}
    for n in names:
        if n not in index:
            raise InputError(
                f"{where}: transition '{key}' names state '{n}', which this trait "
                f"does not have (its states: {', '.join(states)})."
                f"{did_you_mean(n, states)}"
            )
    pairs = []
    for a, arrow, b in zip(names[:-1], arrows, names[1:]):
        if a == b:
            raise InputError(f"{where}: transition '{key}' goes from '{a}' to itself.")
        pairs.append((index[a], index[b]))
        if arrow == "<->":
            pairs.append((index[b], index[a]))
    return pairs


def build_model(kind: str, states, transitions=None, name: str | None = None) -> RateModel:
    """Build a model of the given kind on these state labels (see the module docstring)."""
    states = tuple(str(s) for s in states)
    k = len(states)
    name = name or kind
    where = f"model '{name}'"
    if k < 2:
        raise InputError(f"{where}: a model needs at least two states, got {list(states)}.")
    if kind not in KINDS:
        raise InputError(f"{where}: unknown kind '{kind}'; choose one of {', '.join(KINDS)}.")
    idx, fixed = _empty(k)
    labels: list = []
    if kind == "equal":
        idx[:] = 0
        labels = ["rate"]
    elif kind == "symmetric":
        for i in range(k):
            for j in range(i + 1, k):
                idx[i, j] = idx[j, i] = len(labels)
                labels.append(f"{states[i]}<->{states[j]}")
    elif kind == "unconstrained":
        for i in range(k):
            for j in range(k):
                if i != j:
                    idx[i, j] = len(labels)
                    labels.append(f"{states[i]}->{states[j]}")
    else:
        if not transitions:
            raise InputError(f"{where}: a custom model needs 'transitions' (e.g. 'a -> b: gain').")
        seen = {}
        for key, value in dict(transitions).items():
            for i, j in parse_transition(key, states, where):
                if (i, j) in seen:
                    raise InputError(
                        f"{where}: transition {states[i]}->{states[j]} is listed twice "
                        f"('{seen[(i, j)]}' and '{key}')."
                    )
                seen[(i, j)] = key
                if isinstance(value, Number) and not isinstance(value, bool):
                    if not np.isfinite(value) or value < 0:
                        raise InputError(
                            f"{where}: transition '{key}' is fixed at {value}; a fixed "
                            "rate must be zero or positive."
                        )
                    idx[i, j] = FIXED
                    fixed[i, j] = float(value)
                else:
                    label = str(value).strip()
                    if not label:
                        raise InputError(
                            f"{where}: transition '{key}' needs a rate label or a number."
                        )
                    if label not in labels:
                        labels.append(label)
                    idx[i, j] = labels.index(label)
    np.fill_diagonal(idx, FREE_FORBIDDEN)
    return RateModel(name, kind, states, idx, fixed, tuple(labels))


ROOTS = ("uniform", "stationary", "data_weighted")


def check_root(root, states, at: str, what: str = "a state of the trait") -> str:
    """The root treatment of one model (a treatment, or a state label: a fixed root), or
    an InputError naming the key ``at``."""
    if root in ROOTS or root in states:
        return root
    raise InputError(
        f"{at}.root is '{root}': use uniform, stationary, data_weighted, or "
        f"{what} ({', '.join(states)}).{did_you_mean(root, [*ROOTS, *states])}"
    )


# The kinds of a pair's models (mkforest.engine.pairs): how the two traits' changes
# depend on each other.
HYPOTHESES = ("independent", "dependent", "first_depends_on_second", "second_depends_on_first")

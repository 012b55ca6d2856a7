"""Hidden rate classes: rate variation among lineages (Beaulieu, O'Meara & Donoghue
2013, Syst. Biol. 62:725; the covarion idea of Tuffley & Steel 1998 and Galtier 2001).

Each observed state s is paired with an unobserved class c = 1..R; the chain runs
on the k * R combined states ``s@c``. Within class c the model's own structure
(equal, symmetric, unconstrained or custom) holds, with its own rates in every
class; a switch of class changes only the class, never the observed state:

    q(s@c -> s'@c) = within-class rate of class c        (s != s')
    q(s@c -> s@d)  = switching rate c -> d                (c != d; every pair of classes)
    q(s@c -> s'@d) = 0                                    (s != s', c != d)

Switching (``class_switch``): ``equal`` one rate for every switch, ``symmetric``
c -> d and d -> c share a rate, ``unconstrained`` every ordered pair its own rate;
the switching rates are the same whatever the observed state.

A tip observed in state s may be in any class of s (its tip partials are
repeated over the classes), so the result is an ordinary RateModel on k * R
states and the one likelihood kernel fits it. Combined states are numbered
class-major: s@c has index (c - 1) * k + s.

Class labels are arbitrary in the likelihood (any permutation of the classes
gives the same ln L), so after a fit the classes are renumbered by their mean
rate of leaving a state within the class, (1/k) sum_s sum_{s' != s} q(s@c -> s'@c):
class 1 is the slowest, class R the fastest, on every tree.
"""

from __future__ import annotations

import numpy as np

from ..errors import InputError
from .models import ARROW, FIXED, FREE_FORBIDDEN, KIND_TABLE, RateModel

MAX_CLASSES = 4
MAX_COMBINED_STATES = 32
CLASS_SEPARATOR = "@"
# the kinds that also describe switching between classes (``class_switch``)
SWITCH_KINDS = tuple(n for n, k in KIND_TABLE.items() if k.switch_words)


def check_classes(n_classes, where: str) -> int:
    """Hidden rate classes R as an int in 1..MAX_CLASSES, or an InputError naming ``where``."""
    if (
        isinstance(n_classes, bool)
        or not isinstance(n_classes, int)
        or not 1 <= n_classes <= MAX_CLASSES
    ):
        raise InputError(
            f"{where}: hidden_classes is {n_classes!r}; use a whole number from 1 "
            f"(no hidden classes) to {MAX_CLASSES}."
        )
    return n_classes


def config_classes(spec: dict, where: str) -> int:
    """The checked ``hidden_classes`` of one ``models.<name>`` or ``pairs.<name>`` entry
    (``where`` names it): the one reader of that key. An entry without it (built by hand,
    not through the schema) has none (1)."""
    return check_classes(spec.get("hidden_classes", 1), where)


def combined_label(state: str, cls: int) -> str:
    """'rock', 1 -> 'rock@1' (classes counted from 1)."""
    return f"{state}{CLASS_SEPARATOR}{cls}"


def check_switch(class_switch, where: str) -> str:
    """``class_switch`` when it is a known kind, else an InputError naming ``where``."""
    if class_switch not in SWITCH_KINDS:
        raise InputError(
            f"{where}: class_switch is {class_switch!r}; use one of {', '.join(SWITCH_KINDS)}."
        )
    return class_switch


def check_no_class_in_transitions(transitions, states, where: str) -> None:
    """A custom model's transitions name observed states only (InputError naming the model
    when one names a combined state such as 'rock@2'): the classes are added for it."""
    for key in dict(transitions or {}):
        for name in ARROW.split(str(key).strip())[0::2]:
            state, sep, cls = name.rpartition(CLASS_SEPARATOR)
            if name not in states and sep and cls.isdigit() and state in states:
                raise InputError(
                    f"{where}: transition '{key}' names hidden class {cls} ('{name}'); list "
                    "transitions between observed states only: with hidden_classes every class "
                    "gets the same structure with its own rates, and class_switch sets how "
                    "lineages change class."
                )


def with_hidden_classes(
    base: RateModel, n_classes: int, class_switch: str = "equal", name: str | None = None
) -> RateModel:
    """The model ``base`` (on the observed states) with R hidden rate classes (module docstring).

    R = 1 returns ``base`` itself. Parameter labels: within-class rates are the base
    labels followed by '@c' (``rate@1``, ``rock<->litter@2``, ``grow@1``); switching
    rates are ``class switch`` (equal), ``class 1<->2`` (symmetric) or ``class 1->2``.
    """
    where = f"model '{name or base.name}'"
    R = check_classes(n_classes, where)
    check_switch(class_switch, where)
    if R == 1:
        return base
    k = base.k
    K = k * R
    idx = np.full((K, K), FREE_FORBIDDEN, dtype=np.int64)
    fixed = np.zeros((K, K))
    labels: list = []
    for c in range(R):
        block = slice(c * k, (c + 1) * k)
        sub = base.rate_index.copy()
        free = sub >= 0
        sub[free] += len(labels)
        idx[block, block] = sub
        fixed[block, block] = np.where(base.rate_index == FIXED, base.fixed, 0.0)
        labels += [f"{lab}{CLASS_SEPARATOR}{c + 1}" for lab in base.labels]
    for c in range(R):
        for d in range(R):
            if c == d:
                continue
            if class_switch == "equal":
                label = "class switch"
            elif class_switch == "symmetric":
                label = f"class {min(c, d) + 1}<->{max(c, d) + 1}"
            else:
                label = f"class {c + 1}->{d + 1}"
            if label not in labels:
                labels.append(label)
            p = labels.index(label)
            for s in range(k):
                idx[c * k + s, d * k + s] = p
    states = tuple(combined_label(s, c + 1) for c in range(R) for s in base.states)
    return RateModel(
        name or base.name,
        base.kind,
        states,
        idx,
        fixed,
        tuple(labels),
        n_classes=R,
        observed=tuple(base.states),
        class_switch=class_switch,
    )


# First optimiser start: class c's within-class log-rates are offset by
# (c - (R - 1) / 2) * START_SPREAD around the shared guess.
START_SPREAD = float(np.log(8.0))


def spread_classes(model: RateModel, x0) -> np.ndarray:
    """Log-rate start with the classes spread apart (one factor of 8 between
    neighbouring classes); unchanged for a plain model and for switching rates."""
    x = np.array(x0, dtype=float)
    if model.n_classes == 1:
        return x
    k = len(model.observed_states)
    for c in range(model.n_classes):
        block = model.rate_index[c * k : (c + 1) * k, c * k : (c + 1) * k]
        params = np.unique(block[block >= 0])
        x[params] += (c - (model.n_classes - 1) / 2) * START_SPREAD
    return x


def class_leaving_rates(model: RateModel, Q) -> np.ndarray:
    """Mean rate of leaving a state within each class: float [R] (module docstring)."""
    k = len(model.observed_states)
    out = np.empty(model.n_classes)
    for c in range(model.n_classes):
        block = np.asarray(Q)[c * k : (c + 1) * k, c * k : (c + 1) * k]
        out[c] = (block.sum(axis=1) - np.diag(block)).mean()
    return out


def class_order(model: RateModel, rates) -> np.ndarray:
    """Old class index of each new class, slowest first (stable for ties)."""
    return np.argsort(class_leaving_rates(model, model.q_matrix(rates)), kind="stable")


def parameter_permutation(model: RateModel, order) -> np.ndarray:
    """perm with new_rates = rates[perm] when class order[i] becomes class i.

    Every class carries the same structure and the switching structure is the
    same under any renumbering of the classes, so each new parameter governs
    exactly the transitions one old parameter governed."""
    k = len(model.observed_states)
    combined = np.concatenate([np.arange(k) + c * k for c in order])  # new index -> old index
    old_idx = model.rate_index[np.ix_(combined, combined)]
    perm = np.full(model.n_params, -1, dtype=np.int64)
    new = model.rate_index
    for p in range(model.n_params):
        olds = np.unique(old_idx[new == p])
        if olds.size != 1 or olds[0] < 0:
            raise ValueError(
                f"model '{model.name}': class renumbering does not map parameter "
                f"'{model.labels[p]}' onto one parameter"
            )
        perm[p] = olds[0]
    return perm


def relabel_classes(model: RateModel, rates) -> np.ndarray:
    """perm such that rates[perm] numbers the classes slowest first (identity for R = 1)."""
    if model.n_classes == 1:
        return np.arange(model.n_params)
    return parameter_permutation(model, class_order(model, rates))


def classes_of(model: RateModel) -> np.ndarray:
    """Class number (1..R) of every combined state."""
    return np.arange(model.k) // len(model.observed_states) + 1


def observed_index(model: RateModel) -> np.ndarray:
    """Observed state index of every combined state."""
    return np.arange(model.k) % len(model.observed_states)


# Classes whose mean leaving rates differ by less than this factor are called alike.
ALIKE_FACTOR = 1.1


def class_notes(model: RateModel, fit) -> list:
    """Plain-words warnings for a fitted hidden-class model whose classes cannot mean much:
    classes with nearly the same rates (no sign of rate variation among lineages), or
    switching at the upper rate bound (lineages change class too fast to tell classes apart)."""
    if model.n_classes == 1 or not np.isfinite(fit.log_likelihood):
        return []
    notes = []
    leave = class_leaving_rates(model, fit.q_matrix)
    if leave.min() > 0 and leave.max() / leave.min() < ALIKE_FACTOR:
        notes.append(
            f"the {model.n_classes} hidden classes have nearly the same rates (within "
            f"{ALIKE_FACTOR - 1:.0%}): the data show no rate variation among lineages"
        )
    switching = [lab for lab in fit.at_upper if lab.startswith("class ")]
    if switching:
        notes.append(
            "switching between hidden classes is at the upper rate bound: lineages "
            "change class too fast for the classes to be told apart"
        )
    return notes

"""Models and hypotheses in words of the trade, for the methods text and the figures.

Config identifiers (``first_depends_on_second``, ``data_weighted``) never reach
the reader: a built-in hypothesis or root treatment is described; a user's own
model keeps the user's name, in quotes.
"""

from __future__ import annotations

from ..engine.models import FIXED, KIND_TABLE


def hypothesis_words(name: str, kind: str, first: str, second: str) -> str:
    """'changes in banding depend on aperture' for a built-in hypothesis of a pair."""
    return {
        "independent": f"{first} and {second} change independently",
        "dependent": f"changes in each of {first} and {second} depend on the other",
        "first_depends_on_second": f"changes in {first} depend on {second}",
        "second_depends_on_first": f"changes in {second} depend on {first}",
    }.get(kind, f"'{name}' (custom: only the changes listed)")


def allowed_changes(model) -> list:
    """(i, j) of every change the model allows (free, or fixed above zero)."""
    k = len(model.states)
    return [
        (i, j)
        for i in range(k)
        for j in range(k)
        if i != j
        and (
            model.rate_index[i, j] >= 0
            or (model.rate_index[i, j] == FIXED and model.fixed[i, j] > 0)
        )
    ]


def is_stepwise(model) -> bool:
    """Changes only between neighbours in the state order, every step allowed."""
    k = len(model.states)
    allowed = allowed_changes(model)
    return (
        k >= 3
        and bool(allowed)
        and all(abs(i - j) == 1 for i, j in allowed)
        and {min(i, j) for i, j in allowed} == set(range(k - 1))
    )


def model_words(model) -> str:
    """A single-trait model's rate structure in a few words."""
    words = _structure_words(model)
    n = getattr(model, "n_classes", 1)
    return words + (f", with {n} hidden rate classes" if n > 1 else "")


def _structure_words(model) -> str:
    kind = KIND_TABLE.get(model.kind)
    if kind is not None and kind.words:
        return kind.words
    if getattr(model, "n_classes", 1) > 1:
        return "only the changes listed"
    allowed = allowed_changes(model)
    if is_stepwise(model):
        return "one step at a time: " + " – ".join(model.states)
    one_way = [(i, j) for i, j in allowed if (j, i) not in allowed]
    if allowed and len(one_way) == len(allowed):
        return "one-way only: " + ", ".join(
            f"{model.states[i]} → {model.states[j]}" for i, j in allowed
        )
    return "only the changes listed"

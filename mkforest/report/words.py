"""Models and hypotheses in words of the trade, for the methods text and the figures.

Config identifiers (``first_depends_on_second``, ``data_weighted``) never reach
the reader: a built-in hypothesis or root treatment is described; a user's own
model keeps the user's name, in quotes.
"""

from __future__ import annotations

from ..engine.models import FIXED, KIND_TABLE

# Each built-in hypothesis of a pair, once: (short words for figures and the brief, its rate
# structure for the methods text). {a} and {b} are the pair's first and second trait.
HYPOTHESIS_WORDS = {
    "independent": (
        "{a} and {b} change independently",
        "{a} and {b} each change at their own rates, whatever the state of the other",
    ),
    "dependent": (
        "changes in each of {a} and {b} depend on the other",
        "the rates of {a} depend on the state of {b} and vice versa",
    ),
    "first_depends_on_second": (
        "changes in {a} depend on {b}",
        "the rates of {a} depend on the state of {b}; those of {b} do not",
    ),
    "second_depends_on_first": (
        "changes in {b} depend on {a}",
        "the rates of {b} depend on the state of {a}; those of {a} do not",
    ),
}


def hypothesis_words(name: str, kind: str, first: str, second: str) -> str:
    """'changes in banding depend on aperture' for a built-in hypothesis of a pair."""
    if kind not in HYPOTHESIS_WORDS:
        return f"'{name}' (custom: only the changes listed)"
    return HYPOTHESIS_WORDS[kind][0].format(a=first, b=second)


def hypothesis_structure(kind: str, first: str, second: str) -> str:
    """A built-in hypothesis's rate structure in the words of a methods section."""
    return HYPOTHESIS_WORDS[kind][1].format(a=first, b=second)


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

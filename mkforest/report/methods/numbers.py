"""Numbers and lists as words, for every section of the methods text."""

from __future__ import annotations

import math

# --------------------------------------------------------------------------- numbers as words


def number(x, digits: int = 2) -> str:
    """Rounded for the text; 'n/a' when missing, '<0.01' rather than a misleading 0.00."""
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "n/a"
    x = float(x)
    if x != 0 and abs(x) < 0.5 * 10**-digits:
        return f"<{10**-digits:.{digits}f}" if x > 0 else f"-<{10**-digits:.{digits}f}"
    return f"{x:.{digits}f}"


def p_value(p) -> str:
    if p is None or not math.isfinite(float(p)):
        return "n/a"
    return "<0.001" if p < 0.001 else f"{p:.3f}"


def count_of(fraction, n: int) -> int:
    """Trees behind a fraction of n trees (fractions in the tables are k / n)."""
    return int(round(float(fraction) * n)) if n else 0


def plural(n: int, word: str, many: str | None = None) -> str:
    return f"{n} {word if n == 1 else (many or word + 's')}"


def listing(items) -> str:
    items = list(items)
    if len(items) <= 2:
        return " and ".join(items)
    return ", ".join(items[:-1]) + " and " + items[-1]


def how_often(k: int, n: int) -> str:
    if n == 0:
        return "on no tree (no tree could be fitted)"
    if k == n:
        return "on every tree" if n > 1 else "on the single tree"
    if k == 0:
        return "on no tree"
    share = k / n
    if share >= 0.9:
        return "on nearly every tree"
    if share > 0.5:
        return "on most trees"
    return "on fewer than half of the trees, so the ranking depends on the tree"


def ordinal(n: int) -> str:
    suffix = "th" if 10 <= n % 100 <= 20 else {1: "st", 2: "nd", 3: "rd"}.get(n % 10, "th")
    return f"{n}{suffix}"

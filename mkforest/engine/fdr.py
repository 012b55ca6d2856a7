"""False-discovery control across many tests (NumPy only: the table jobs import it)."""

from __future__ import annotations

import numpy as np


def bh_adjusted(p_values) -> np.ndarray:
    """Benjamini-Hochberg adjusted p-values (q-values; Benjamini & Hochberg 1995):
    q_(i) = min over j >= i of m p_(j) / j, at most 1, over the m finite p-values;
    NaN stays NaN. Rejecting q <= level controls the false-discovery rate at the
    level for independent (or positively dependent) tests."""
    p = np.asarray(p_values, dtype=float)
    out = np.full(p.shape, np.nan)
    ok = np.flatnonzero(np.isfinite(p))
    m = ok.size
    if m == 0:
        return out
    order = ok[np.argsort(p[ok], kind="stable")]
    scaled = p[order] * m / np.arange(1, m + 1)
    out[order] = np.minimum(1.0, np.minimum.accumulate(scaled[::-1])[::-1])
    return out

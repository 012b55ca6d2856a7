"""One bounded descent of an objective (L-BFGS-B), as every ML search runs it.

An objective is a function x -> (value, gradient) to minimise (-ln L and its
gradient); where the data are impossible it returns ``IMPOSSIBLE_OBJECTIVE``.
"""

from __future__ import annotations

import numpy as np

from .lbfgsb import minimise
from .search import SAME_F, SAME_X

# Objective value where the data are impossible under the rates tried (e.g. an
# irreversible loss so fast that exp(-rate t) underflows). Large but finite, so
# the line search backs off instead of failing on inf.
IMPOSSIBLE_OBJECTIVE = 1e8

SCALE_FIRST_STEP = True


def descend(objective, x0, bounds, ftol=1e-10, known=(), drop=None):
    """(lowest objective, its x): one L-BFGS-B run from x0.

    With every variable bounded, L-BFGS-B's first step is the whole (projected)
    negative gradient, and far from the optimum the gradient of ln L is tens of
    log-units: one step can throw the rates onto the plateau where every tip is
    independent of the tree (ln L = -n ln k, gradient zero) and the run stops
    there, although a better optimum lies near the start. Dividing the objective
    by its largest gradient entry at x0 (when above 1) makes that first step at
    most one unit in every parameter; later steps follow the curvature the
    optimiser learns and do not depend on the scale. The gradient tolerance is
    divided alike, so the stopping rule is that of the unscaled objective.

    drop: stop when an iteration lowers the objective by less than this (absolute,
    about: L-BFGS-B's rule is relative, so ftol becomes drop / |objective at x0|)
    instead of ``ftol``.

    known: (objective, x) of the fit's earlier starts. The run stops at an iterate
    within ``SAME_X`` of one of those optima in every coordinate and within
    ``SAME_F`` of its value: it has reached a basin whose optimum is known, and
    polishing it would only find that optimum again."""
    f0, g0 = objective(x0)
    if drop is not None:
        ftol = drop / max(abs(f0), 1.0)
    lo = np.array([b[0] for b in bounds])
    hi = np.array([b[1] for b in bounds])
    # the first step is the gradient projected on the box: a component pushing
    # against a bound the start already sits on does not move
    free = ~(((x0 <= lo) & (g0 > 0)) | ((x0 >= hi) & (g0 < 0)))
    c = max(1.0, float(np.max(np.abs(g0[free]), initial=0.0))) if SCALE_FIRST_STEP else 1.0
    # every point tried, unscaled, keyed by its bytes (a list scanned per call made
    # each descent quadratic in its number of evaluations)
    seen = {np.asarray(x0, dtype=float).tobytes(): (f0, g0)}

    def scaled(x):
        key = np.asarray(x, dtype=float).tobytes()
        if key not in seen:
            seen[key] = objective(x)
        f, g = seen[key]
        return f / c, g / c

    def reached_known(x):
        f = seen.get(x.tobytes())
        return f is not None and any(
            abs(f[0] - fk) <= SAME_F and float(np.max(np.abs(x - xk))) <= SAME_X for fk, xk in known
        )

    x = minimise(
        scaled,
        x0,
        lo,
        hi,
        ftol=ftol,
        gtol=1e-6 / c,
        maxiter=1000,
        stop=reached_known if len(known) else None,
    )
    # the unscaled value at the point returned (f / c * c need not round back to f)
    key = np.asarray(x, dtype=float).tobytes()
    return (seen[key][0] if key in seen else objective(x)[0]), x

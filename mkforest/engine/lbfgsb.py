"""SciPy's L-BFGS-B (Byrd, Lu, Nocedal & Zhu 1995), driven without ``minimize``.

``scipy.optimize.minimize(method="L-BFGS-B")`` wraps the solver's reverse-
communication routine in a Python loop that, for every evaluation, re-checks
and copies x through a general-purpose function wrapper. For a likelihood
that costs 30-60 us that wrapper was about a third of a fit (measured with
cProfile on 200-tip, 3-state fits). ``minimise`` runs the same routine
(``scipy.optimize._lbfgsb.setulb``, SciPy >= 1.15) in a bare loop with the
same settings, so it visits the same points and returns the same x as
``minimize`` (tests/test_lbfgsb.py compares them). The routine is private to
SciPy: where its call signature is not the one this loop knows (older or
newer SciPy), or where it does not reach minimize's answer on a small problem
(checked once per process), ``minimise`` uses ``minimize`` itself.
"""

from __future__ import annotations

import numpy as np
from scipy.optimize import minimize

try:  # the reverse-communication routine (C since SciPy 1.15)
    from scipy.optimize import _lbfgsb
except ImportError:  # pragma: no cover - a SciPy without it
    _lbfgsb = None

# Settings of minimize's L-BFGS-B that the bare loop repeats.
MAXCOR = 10
MAXLS = 20
MAXFUN = 15000
_EPS = np.finfo(float).eps
# task codes of setulb (SciPy's __lbfgsb.c): 3 = evaluate f and g at x, 1 = new iteration
_FG = 3
_NEW_X = 1
_STOP = 5

# None until the first call checks the bare loop against minimize on a small problem
_direct = None if _lbfgsb is not None and hasattr(_lbfgsb, "setulb") else False


def minimise(fun, x0, lower, upper, ftol: float, gtol: float, maxiter: int = 1000, stop=None):
    """x at the end of one L-BFGS-B run of ``fun`` (x -> (f, gradient)) from x0 within
    [lower, upper] (arrays, finite), with minimize's ``ftol``, ``gtol`` and ``maxiter``.
    ``stop(x)``, if given, is asked at every new iterate; True ends the run there."""
    global _direct
    if _direct is None:
        _direct = _bare_loop_agrees()
    if _direct:
        return _bare(fun, x0, lower, upper, ftol, gtol, maxiter, stop)
    return _public(fun, x0, lower, upper, ftol, gtol, maxiter, stop)


def _public(fun, x0, lower, upper, ftol, gtol, maxiter, stop=None):
    last = []

    def callback(xk):
        if stop is not None and stop(xk):
            last.append(np.array(xk))
            raise StopIteration  # SciPy >= 1.11 ends the run and returns

    res = minimize(
        fun,
        x0,
        method="L-BFGS-B",
        jac=True,
        bounds=list(zip(lower, upper)),
        options={"maxiter": maxiter, "ftol": ftol, "gtol": gtol},
        callback=callback if stop is not None else None,
    )
    return last[0] if last else res.x


def _bare_loop_agrees() -> bool:
    """The bare loop reaches minimize's x on a bounded quadratic with a cross term
    (a few milliseconds, once per process); False where SciPy's routine is another."""
    A = np.array([[3.0, 1.0, 0.0], [1.0, 2.0, 0.5], [0.0, 0.5, 1.0]])
    b = np.array([1.0, -2.0, 3.0])

    def quad(x):
        return float(0.5 * x @ A @ x - b @ x), A @ x - b

    x0, lo, hi = np.array([0.5, 0.5, 0.5]), np.full(3, -1.0), np.full(3, 1.5)
    try:
        x = _bare(quad, x0, lo, hi, 1e-12, 1e-8, 100)
    except (TypeError, ValueError, AttributeError):
        return False
    return bool(np.array_equal(x, _public(quad, x0, lo, hi, 1e-12, 1e-8, 100)))


def _bare(fun, x0, lower, upper, ftol, gtol, maxiter, stop=None):
    n = len(x0)
    m = MAXCOR
    x = np.clip(np.array(x0, dtype=np.float64), lower, upper)
    low = np.array(lower, dtype=np.float64)
    up = np.array(upper, dtype=np.float64)
    nbd = np.full(n, 2, dtype=np.int32)  # 2: bounded on both sides
    f = np.array(0.0, dtype=np.float64)
    g = np.zeros(n, dtype=np.float64)
    wa = np.zeros(2 * m * n + 5 * n + 11 * m * m + 8 * m, np.float64)
    iwa = np.zeros(3 * n, dtype=np.int32)
    task = np.zeros(2, dtype=np.int32)
    ln_task = np.zeros(2, dtype=np.int32)
    lsave = np.zeros(4, dtype=np.int32)
    isave = np.zeros(44, dtype=np.int32)
    dsave = np.zeros(29, dtype=np.float64)
    factr = ftol / _EPS
    iterations = evaluations = 0
    while True:
        _lbfgsb.setulb(
            m,
            x,
            low,
            up,
            nbd,
            f,
            g,
            factr,
            gtol,
            wa,
            iwa,
            task,
            lsave,
            isave,
            dsave,
            MAXLS,
            ln_task,
        )
        if task[0] == _FG:
            fx, gx = fun(x.copy())
            f = np.array(fx, dtype=np.float64)
            g = np.array(gx, dtype=np.float64)
            evaluations += 1
        elif task[0] == _NEW_X:
            iterations += 1
            if iterations >= maxiter or evaluations > MAXFUN:
                task[0] = _STOP
                task[1] = 504
            elif stop is not None and stop(x):
                return x.copy()
        else:
            return x

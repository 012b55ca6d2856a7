"""The numbers that define a fit's search: the box of the rates and the starts.

Kept apart from the optimiser (``fitting``), which imports SciPy and the compiled
kernels, so that the methods text can quote them without that cost.
"""

# Rates lie in [LOWER / H, UPPER / H] for a tree of height H (expected changes along a
# root-to-tip path).
LOWER = 1e-6
UPPER = 1e4
AGREE_TOL = 0.01
# Starts run at least (two can agree) and at most (while the best two disagree).
MIN_STARTS = 2
MAX_STARTS = 20
# A model with p free rates runs at least min(p, RATE_STARTS) starts: surfaces with
# more rates have more local optima, and two starts can agree on a poorer one
# (measured on the demo with benchmarks/convergence_rate.py: stopping at the first
# two that agree reported a poorer optimum 3x as often as five fixed starts).
RATE_STARTS = 5
# A start that comes this close to an earlier start's optimum (every coordinate of the
# optimiser's: log-rates, and a branch value in its own unit; and ln L) stops there.
SAME_X = 1e-2
SAME_F = 1e-3
# Before two agreeing starts are accepted, each rate of the best optimum within this many
# log-units of the lower bound (effectively zero) is lifted back to its first-start value
# and descended from once (fitting._release_zeros; benchmarks/agreement.py).
ZERO_MARGIN = 2.0
# After that, moves at the bounds of the best optimum's rates, each followed by one descent
# (fitting._probe_bounds): its rates saturated together at the upper bound, every rate at
# the upper bound, and each of the ZERO_PROBES smallest rates above zero set to zero.
ZERO_PROBES = 2

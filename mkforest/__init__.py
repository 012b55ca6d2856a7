"""mkforest: Markov models of categorical trait evolution, fitted over a sample of trees.

The engine is importable on its own; the Snakemake workflow in this repository
is a thin layer of rules around it.
"""

import os

# Parallelism comes from the workflow's jobs; a BLAS thread pool per job only
# contends for the same cores (measured: 2-4x slower fits on 2 busy cores).
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

__version__ = "0.1.0"

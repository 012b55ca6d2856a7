"""mkforest: Markov models of categorical trait evolution, fitted over a sample of trees.

The engine is importable on its own; the Snakemake workflow in this repository
is a thin layer of rules around it.
"""

__version__ = "0.1.0"

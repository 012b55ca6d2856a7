"""Engine layer: rate models, the likelihood and its gradient, fitting, model
comparison, simulation, ancestral states, stochastic maps and trait pairs.

Imports only from ``mkforest.data`` and the base modules (errors, seeds); never Snakemake."""

"""Chains of the No-U-Turn sampler on a log density with its gradient, through nutpie.

nutpie (the Rust NUTS of the PyMC project; Hoffman & Gelman 2014, J. Mach. Learn. Res.
15:1593, with multinomial trajectory sampling as in Stan) calls our Python density;
its warm-up adapts the step size (dual averaging, target acceptance 0.8) and a
diagonal mass matrix from the draws' and the gradients' variances (Seyboldt 2024's
"gradient-based" adaptation), which settles in fewer warm-up iterations than the
windowed variance of Stan. Chosen over mici's NUTS by measured effective samples per
CPU second (benchmarks/bench_bayes.py).
"""

from __future__ import annotations

import numpy as np


def run_chains(density, n, starts, chains, warmup, draws, seed, low_rank=False):
    """(z [chains, draws, n], log density [chains, draws], stats) of NUTS on ``density``
    (z -> (value, gradient)). One thread: the workflow's parallelism comes from jobs.
    stats: 'diverging' [chains, draws] bool, 'maxdepth' [chains, draws] bool,
    'step_size' [chains]. ``low_rank``: nutpie's low-rank modified mass matrix."""
    import nutpie
    from nutpie.compiled_pyfunc import from_pyfunc

    def make_logp():
        def logp(x, **_):
            value, grad = density(x)
            return float(value), np.asarray(grad, dtype=np.float64)

        return logp

    def make_expand(*_):
        def expand(x, **_):
            return {"z": np.array(x, dtype=np.float64)}

        return expand

    starts = np.asarray(starts, dtype=np.float64)

    def initial_point(chain_seed):
        # nutpie asks once per chain; the chains take our seeded starts in turn
        initial_point.i = (initial_point.i + 1) % len(starts)
        return starts[initial_point.i]

    initial_point.i = -1
    model = from_pyfunc(
        n,
        make_logp,
        make_expand,
        [np.dtype("float64")],
        [(n,)],
        ["z"],
        make_initial_point_fn=initial_point,
    )
    trace = nutpie.sample(
        model,
        draws=draws,
        tune=warmup,
        chains=chains,
        cores=1,
        seed=int(seed) % (2**63),
        progress_bar=False,
        save_warmup=False,
        low_rank_modified_mass_matrix=low_rank,
    )
    z = np.asarray(trace.posterior["z"].values, dtype=np.float64).reshape(chains, draws, n)
    st = trace.sample_stats
    stats = {
        "diverging": np.asarray(st["diverging"].values, dtype=bool),
        "maxdepth": np.asarray(st["maxdepth_reached"].values, dtype=bool),
        "step_size": np.asarray(st["step_size"].values)[:, -1],
    }
    return z, np.asarray(st["logp"].values, dtype=np.float64), stats

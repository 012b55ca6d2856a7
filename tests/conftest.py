"""Random small trees, trait data and rate matrices for the reference tests.

Everything is drawn from seeded ``numpy.random.default_rng`` generators, so a
failing case is reproduced by its seed alone.
"""

from __future__ import annotations

import os
import sys

# The tests work on tiny matrices (k <= 8); BLAS worker threads only add contention
# (measured: scipy.linalg.expm of a 3x3 matrix took 20 ms with threads on a loaded
# 2-core machine, 0.03 ms with one). Must be set before numpy is imported.
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent))

from reference import (  # noqa: E402
    newick_from_arrays,
    q_from_rates,
    ref_tree_from_newick,
    reference_custom_q,
    simulate_reference,
)

# --------------------------------------------------------------------------- trees


def random_newick(rng, n_tips, p_polytomy=0.3, p_zero=0.15, mean_length=0.4, prefix="t"):
    """A random rooted Newick tree with polytomies and some zero-length branches.

    Subtrees are joined two (or, with probability p_polytomy, three or four) at a
    time until two remain, which become the root's children (the root is always
    a bifurcation so the tree reads as rooted). Each branch is exactly 0 with
    probability p_zero, otherwise exponential with the given mean. Tip names are
    shuffled so the tip order in the file is not the numbering order.
    """
    names = [f"{prefix}{i}" for i in rng.permutation(n_tips)]
    parent = []
    length = []

    def new_node():
        parent.append(-1)
        b = 0.0 if rng.random() < p_zero else float(rng.exponential(mean_length))
        length.append(b)
        return len(parent) - 1

    pool = [new_node() for _ in range(n_tips)]
    while len(pool) > 2:
        m = 2
        if rng.random() < p_polytomy:
            m = int(rng.integers(3, 5))
        m = max(2, min(m, len(pool) - 1))  # leave at least two subtrees for the root
        picked = sorted(rng.choice(len(pool), size=m, replace=False), reverse=True)
        v = new_node()
        for i in picked:
            parent[pool.pop(i)] = v
        pool.append(v)
    root = new_node()
    for c in pool:
        parent[c] = root
    length[root] = 0.0
    return newick_from_arrays(names, parent, length, rng=rng)


def yule_arrays(rng, n_tips, height=1.0):
    """A pure-birth (Yule) tree with n_tips tips, scaled to the given root-to-tip height.

    Returns (tip_labels, parent, length) with tips numbered 0..n_tips-1.
    """
    # lineage = (node id, start time); nodes get ids as they are created
    parent = [-1]
    start = {0: 0.0}
    end = {}
    active = [0]
    t = 0.0
    while len(active) < n_tips:
        t += rng.exponential(1.0 / len(active))
        i = int(rng.integers(len(active)))
        v = active.pop(i)
        end[v] = t
        for _ in range(2):
            parent.append(v)
            start[len(parent) - 1] = t
            active.append(len(parent) - 1)
    t_end = t + rng.exponential(1.0 / len(active))
    for v in active:
        end[v] = t_end
    # renumber: tips first
    tips = sorted(active)
    tip_set = set(active)
    inner = [v for v in range(len(parent)) if v not in tip_set]
    new = {v: i for i, v in enumerate(tips + inner)}
    n = len(parent)
    par = np.full(n, -1, dtype=np.int64)
    lens = np.zeros(n)
    for v in range(n):
        if parent[v] >= 0:
            par[new[v]] = new[parent[v]]
            lens[new[v]] = (end[v] - start[v]) / t_end * height
    labels = [f"s{i}" for i in range(len(tips))]
    return labels, par, lens


def yule_newick(rng, n_tips, height=1.0):
    labels, par, lens = yule_arrays(rng, n_tips, height)
    return newick_from_arrays(labels, par, lens)


# --------------------------------------------------------------------------- models

# Custom model catalogue: (states, transitions). Covers ties, forbidden and fixed
# rates, chains, both-way arrows and absorbing (irreversible) states.
CUSTOM_SPECS = [
    # ties across different transitions, one fixed rate, a->c and c->a forbidden
    (("a", "b", "c"), {"a -> b": "gain", "c -> b": "gain", "b -> a": "loss", "b -> c": 0.3}),
    # ordered, irreversible chain: 'late' is absorbing (one closed class)
    (("early", "mid", "late"), {"early -> mid -> late": "step"}),
    # both-way arrows with a tie, plus a fixed one-way return
    (("a", "b", "c", "d"), {"a <-> b": "x", "b <-> c": "y", "c <-> d": "x", "d -> a": 0.5}),
    # two absorbing states: stationary distribution not unique
    (("left", "middle", "right"), {"middle -> left": "r1", "middle -> right": "r2"}),
    # two states, irreversible loss
    (("present", "absent"), {"present -> absent": "loss"}),
    # four states: forward chain, one label for a backward step, a fixed shortcut
    (
        ("s1", "s2", "s3", "s4"),
        {"s1 -> s2 -> s3 -> s4": "fwd", "s4 -> s3": "back", "s1 -> s3": 0.2, "s3 -> s1": "back"},
    ),
    # a fixed rate of exactly zero next to free ones
    (
        ("red", "green", "blue"),
        {"red <-> green": "rg", "green -> blue": "gb", "blue -> red": 0.0, "blue -> green": 1.25},
    ),
]

KIND_CYCLE = ["equal", "symmetric", "unconstrained", "custom"]


def make_model_case(rng, seed):
    """(model, rates, Q) for a case. Q is built here from the kind's definition, not by the engine."""
    from mkforest.engine.models import build_model

    kind = KIND_CYCLE[seed % len(KIND_CYCLE)]
    if kind == "custom":
        states, transitions = CUSTOM_SPECS[(seed // len(KIND_CYCLE)) % len(CUSTOM_SPECS)]
        model = build_model("custom", states, transitions, name=f"custom{seed}")
        rates = rng.uniform(0.05, 3.0, size=model.n_params)
        q = reference_custom_q(states, transitions, dict(zip(model.labels, rates)))
        return model, rates, q
    k = int(rng.integers(2, 5))
    states = tuple(["A", "B", "C", "D"][:k])
    model = build_model(kind, states, name=f"{kind}{seed}")
    if kind == "equal":
        rates = rng.uniform(0.05, 3.0, size=1)
        off = np.full((k, k), rates[0])
    elif kind == "symmetric":
        upper = np.triu(rng.uniform(0.05, 3.0, size=(k, k)), 1)
        off = upper + upper.T
        rates = None  # engine parameter order is the engine's business; see test_model_structure
    else:
        off = rng.uniform(0.05, 3.0, size=(k, k))
        rates = None
    return model, rates, q_from_rates(off)


# --------------------------------------------------------------------------- tip data


def tip_data_mapping(rng, tree, Q, states, p_missing=0.15, p_ambiguous=0.2):
    """Simulate tip states under Q (reference simulator) and code them as text cells.

    Some cells are '?' (missing) and some list several states 'a|b' (ambiguous),
    always including the simulated state, so the data have positive likelihood
    under Q from some root state.
    """
    k = len(states)
    root_state = int(rng.integers(k))
    state = simulate_reference(tree, Q, rng, root_state)
    cells = {}
    for v, label in enumerate(tree.tip_labels):
        u = rng.random()
        if u < p_missing:
            cells[label] = "?"
        elif u < p_missing + p_ambiguous and k > 2:
            extra = rng.choice(
                [j for j in range(k) if j != state[v]],
                size=int(rng.integers(1, k - 1)),
                replace=False,
            )
            cells[label] = "|".join(states[j] for j in sorted([state[v], *extra]))
        else:
            cells[label] = states[state[v]]
    return cells


def partials_from_cells(cells, tip_labels, states):
    """float [n_tips, k]: 1 where the tip may be in the state (built here, not by the engine)."""
    out = np.zeros((len(tip_labels), len(states)))
    for v, label in enumerate(tip_labels):
        text = cells[label]
        if text == "?":
            out[v] = 1.0
        else:
            for s in text.split("|"):
                out[v, states.index(s)] = 1.0
    return out


def random_case(seed, n_min=3, n_max=7):
    """One complete random case for the brute-force comparison."""
    rng = np.random.default_rng(1000 + seed)
    model, rates, Q = make_model_case(rng, seed)
    k = len(model.states)
    # keep the brute-force sum small: k^(interior nodes)
    n_hi = n_max if k <= 3 else 6
    n_tips = int(rng.integers(n_min, n_hi + 1))
    newick = random_newick(rng, n_tips)
    ref_tree = ref_tree_from_newick(newick)
    cells = tip_data_mapping(rng, ref_tree, Q, list(model.states))
    return dict(
        seed=seed,
        model=model,
        rates=rates,
        Q=np.asarray(Q, dtype=float),
        newick=newick,
        ref_tree=ref_tree,
        cells=cells,
        states=list(model.states),
    )

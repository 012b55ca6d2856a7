"""Slow, plainly written reference implementations for the engine's reference tests.

Nothing here imports mkforest: these functions are the independent yardstick the
fast engine is measured against. They favour being obviously right over being
fast: Python loops, one ``scipy.linalg.expm`` per branch, and (for the brute
force) an explicit sum over every assignment of states to interior nodes.

A tree is anything with ``tip_labels`` (tips are nodes 0..n_tips-1), ``parent``
(-1 at the root) and ``length`` (branch length above each node). That covers the
engine's TreeArrays, but the functions never rely on its postorder numbering:
they work out the traversal from ``parent`` themselves. ``RefTree`` builds such
a tree straight from Newick with DendroPy, independently of mkforest.data.trees.

Sources:
- the likelihood is the sum over interior-node states of
  root weight x prod over branches P_{parent state, child state}(t); pruning is
  the algorithm that evaluates it without enumerating (Felsenstein 1981,
  J. Mol. Evol. 17:368) -- published source
- P(t) = expm(Q t) (scipy.linalg.expm, general-purpose reference library)
- data-weighted root: weights L_i / sum_j L_j, so L = sum_i L_i^2 / sum_i L_i
  (FitzJohn, Maddison & Otto 2009, Syst. Biol. 58:595) -- published source
- stationary root: pi with pi Q = 0, sum pi = 1 -- fact of the trade
"""

from __future__ import annotations

import itertools
import math
import re
from dataclasses import dataclass

import dendropy
import numpy as np
import scipy.linalg

# --------------------------------------------------------------------------- trees


@dataclass
class RefTree:
    """A rooted tree as plain arrays, built without mkforest.

    Tips are nodes 0..n_tips-1 (in ``tip_labels`` order); interior nodes follow
    in whatever order DendroPy's preorder gives (deliberately *not* postorder).
    """

    tip_labels: tuple
    parent: np.ndarray
    length: np.ndarray

    @property
    def n_tips(self) -> int:
        return len(self.tip_labels)

    @property
    def n_nodes(self) -> int:
        return len(self.parent)

    @property
    def root(self) -> int:
        return int(np.flatnonzero(np.asarray(self.parent) == -1)[0])


def ref_tree_from_newick(text: str) -> RefTree:
    """Parse one Newick tree with DendroPy into a RefTree (root branch ignored)."""
    tree = dendropy.Tree.get(
        data=text, schema="newick", preserve_underscores=True, rooting="force-rooted"
    )
    nodes = list(tree.preorder_node_iter())
    tips = [nd for nd in nodes if nd.is_leaf()]
    inner = [nd for nd in nodes if not nd.is_leaf()]
    number = {}
    for i, nd in enumerate(tips):
        number[nd] = i
    for i, nd in enumerate(inner):
        number[nd] = len(tips) + i
    n = len(nodes)
    parent = np.full(n, -1, dtype=np.int64)
    length = np.zeros(n)
    for nd in nodes:
        if nd.parent_node is None:
            continue
        parent[number[nd]] = number[nd.parent_node]
        if nd.edge.length is None:
            raise ValueError("reference parser: a branch has no length")
        length[number[nd]] = float(nd.edge.length)
    return RefTree(tuple(nd.taxon.label for nd in tips), parent, length)


def children_lists(tree) -> list:
    """children[v] = list of the children of v, read off ``parent``."""
    kids = [[] for _ in range(len(tree.parent))]
    for v, p in enumerate(tree.parent):
        if p >= 0:
            kids[int(p)].append(v)
    return kids


def root_of(tree) -> int:
    roots = [v for v, p in enumerate(tree.parent) if p == -1]
    assert len(roots) == 1, "a tree has exactly one root"
    return roots[0]


def postorder(tree) -> list:
    """Every node after all of its descendants, found by an explicit stack walk."""
    kids = children_lists(tree)
    order = []
    stack = [(root_of(tree), False)]
    while stack:
        v, expanded = stack.pop()
        if expanded:
            order.append(v)
        else:
            stack.append((v, True))
            for c in kids[v]:
                stack.append((c, False))
    return order


def newick_from_arrays(tip_labels, parent, length, rng=None, digits=17) -> str:
    """Write a tree as Newick; with ``rng`` the children of every node come in random order.

    Lengths are written with 17 significant digits, so they read back as the same doubles.
    """
    tree = RefTree(tuple(tip_labels), np.asarray(parent), np.asarray(length, dtype=float))
    kids = children_lists(tree)
    root = root_of(tree)
    text = {}
    for v in postorder(tree):
        if not kids[v]:
            s = tree.tip_labels[v]
        else:
            order = list(kids[v])
            if rng is not None:
                order = [order[i] for i in rng.permutation(len(order))]
            s = "(" + ",".join(text.pop(c) for c in order) + ")"
        if v != root:
            s += ":" + format(float(tree.length[v]), f".{digits}g")
        text[v] = s
    return text[root] + ";"


# --------------------------------------------------------------------------- rate matrices


def transition_matrix(Q, t) -> np.ndarray:
    """P(t) = expm(Q t) -- scipy.linalg.expm (general-purpose reference library)."""
    return scipy.linalg.expm(np.asarray(Q, dtype=float) * float(t))


def q_from_rates(off_diagonal) -> np.ndarray:
    """A rate matrix from its off-diagonal rates: diagonal = minus the row sum (fact of the trade)."""
    q = np.array(off_diagonal, dtype=float)
    np.fill_diagonal(q, 0.0)
    np.fill_diagonal(q, -q.sum(axis=1))
    return q


_ARROW = re.compile(r"\s*(<->|->)\s*")


def reference_custom_q(states, transitions: dict, value_of_label: dict) -> np.ndarray:
    """Q for a custom model, read plainly from its transition list.

    "a -> b" one transition; "a <-> b" both directions; "a -> b -> c" a chain;
    a number fixes the rate, a label takes ``value_of_label[label]``; unlisted
    transitions have rate 0.
    """
    index = {s: i for i, s in enumerate(states)}
    off = np.zeros((len(states), len(states)))
    for key, value in transitions.items():
        pieces = _ARROW.split(key.strip())
        names, arrows = pieces[0::2], pieces[1::2]
        rate = float(value) if isinstance(value, (int, float)) else value_of_label[value]
        for a, arrow, b in zip(names[:-1], arrows, names[1:]):
            off[index[a], index[b]] = rate
            if arrow == "<->":
                off[index[b], index[a]] = rate
    return q_from_rates(off)


def stationary_is_unique(Q) -> bool:
    """pi Q = 0 has a one-dimensional solution space exactly when rank(Q) = k - 1
    (one closed communicating class) -- fact of the trade."""
    Q = np.asarray(Q, dtype=float)
    return np.linalg.matrix_rank(Q, tol=1e-10) == Q.shape[0] - 1


def reference_stationary(Q, allow_nonunique=False) -> np.ndarray:
    """pi with pi Q = 0 and sum(pi) = 1, by least squares on the stacked system [Q^T; 1] pi = [0; 1].

    When several closed classes make pi non-unique, numpy's lstsq returns the
    minimum-norm solution; that is only returned with ``allow_nonunique=True``
    (the engine documents the minimum-norm choice for that case).
    """
    Q = np.asarray(Q, dtype=float)
    k = Q.shape[0]
    if not stationary_is_unique(Q) and not allow_nonunique:
        raise ValueError("stationary distribution is not unique for this Q")
    a = np.vstack([Q.T, np.ones((1, k))])
    b = np.zeros(k + 1)
    b[-1] = 1.0
    pi, *_ = np.linalg.lstsq(a, b, rcond=None)
    pi = np.where(np.abs(pi) < 1e-14, 0.0, pi)
    return pi / pi.sum()


def root_weights(root, Q, states=None, allow_nonunique=False) -> np.ndarray | None:
    """Prior weights on the root state for 'uniform', 'stationary' or a fixed state label.

    'data_weighted' has no fixed weights (they depend on the data): returns None.
    """
    k = np.asarray(Q).shape[0]
    if root == "uniform":
        return np.full(k, 1.0 / k)
    if root == "stationary":
        return reference_stationary(Q, allow_nonunique)
    if root == "data_weighted":
        return None
    w = np.zeros(k)
    w[list(states).index(root)] = 1.0
    return w


def combine_root(L, root, Q, states=None, allow_nonunique=False) -> float:
    """Total likelihood from the per-root-state likelihoods L_i."""
    L = np.asarray(L, dtype=float)
    if root == "data_weighted":
        # FitzJohn, Maddison & Otto (2009): weights L_i / sum L  =>  sum L_i^2 / sum L_i
        total = L.sum()
        return float((L * L).sum() / total) if total > 0 else 0.0
    return float((root_weights(root, Q, states, allow_nonunique) * L).sum())


# --------------------------------------------------------------------------- brute force


def brute_force_root_likelihoods(tree, tip_partials, Q) -> np.ndarray:
    """L_i = P(tip data | root state i), by summing over every interior-node assignment.

    For one assignment s of states to interior nodes the probability is
    prod over branches into interior nodes P_{s(parent), s(child)}(t) times
    prod over tips sum_j P_{s(parent), j}(t) * partial[tip, j]
    (the sum over a tip's own state is written out; with 0/1 partials it is the
    sum over the states the tip may be in).
    """
    Q = np.asarray(Q, dtype=float)
    k = Q.shape[0]
    parent = [int(p) for p in tree.parent]
    n_tips = len(tree.tip_labels)
    root = root_of(tree)
    kids = children_lists(tree)
    interior = [v for v in range(len(parent)) if kids[v] and v != root]
    P = {v: transition_matrix(Q, tree.length[v]) for v in range(len(parent)) if v != root}
    partial = np.asarray(tip_partials, dtype=float)
    L = np.zeros(k)
    for r in range(k):
        for assignment in itertools.product(range(k), repeat=len(interior)):
            state = dict(zip(interior, assignment))
            state[root] = r
            w = 1.0
            for v in range(len(parent)):
                if v == root:
                    continue
                a = state[parent[v]]
                if v < n_tips:
                    w *= sum(P[v][a, j] * partial[v, j] for j in range(k))
                else:
                    w *= P[v][a, state[v]]
                if w == 0.0:
                    break
            L[r] += w
    return L


def brute_force_log_likelihood(tree, tip_partials, Q, root="uniform", states=None) -> float:
    L = brute_force_root_likelihoods(tree, tip_partials, Q)
    total = combine_root(L, root, Q, states)
    return math.log(total) if total > 0 else -math.inf


# --------------------------------------------------------------------------- plain pruning


def pruning_root_log_partials(tree, tip_partials, Q):
    """Pruning with one expm per branch and per-node rescaling.

    Returns (p, log_scale) with L_i = p_i * exp(log_scale), max(p) = 1.
    Each interior node's partial is prod over children of P_child(t) @ partial_child;
    it is divided by its largest entry and the log of that entry is accumulated,
    so nothing underflows however large the tree.
    """
    Q = np.asarray(Q, dtype=float)
    k = Q.shape[0]
    n_tips = len(tree.tip_labels)
    kids = children_lists(tree)
    partial = {}
    log_scale = 0.0
    for v in postorder(tree):
        if v < n_tips:
            partial[v] = np.asarray(tip_partials[v], dtype=float).copy()
            continue
        prod = np.ones(k)
        for c in kids[v]:
            P = transition_matrix(Q, tree.length[c])
            child = partial.pop(c)
            contribution = np.zeros(k)
            for i in range(k):
                contribution[i] = sum(P[i, j] * child[j] for j in range(k))
            prod = prod * contribution
        biggest = prod.max()
        if biggest <= 0.0:
            return prod, -math.inf
        partial[v] = prod / biggest
        log_scale += math.log(biggest)
    return partial[root_of(tree)], log_scale


def pruning_log_likelihood(tree, tip_partials, Q, root="uniform", states=None) -> float:
    """ln L by plain pruning in log space (see pruning_root_log_partials)."""
    p, log_scale = pruning_root_log_partials(tree, tip_partials, Q)
    if not np.isfinite(log_scale):
        return -math.inf
    # L_i = c p_i, and every root treatment is homogeneous of degree one in L
    # (conditional: sum c^2 p^2 / sum c p = c sum p^2 / sum p), so ln L = ln c + ln f(p).
    total = combine_root(p, root, Q, states)
    return log_scale + math.log(total) if total > 0 else -math.inf


# --------------------------------------------------------------------------- simulation


def simulate_reference(tree, Q, rng, root_state) -> np.ndarray:
    """States at every node: each child drawn from row P_{parent state}(t) of expm(Q t)."""
    Q = np.asarray(Q, dtype=float)
    k = Q.shape[0]
    order = list(reversed(postorder(tree)))  # preorder: parents before children
    state = np.full(len(tree.parent), -1, dtype=np.int64)
    for v in order:
        p = tree.parent[v]
        if p < 0:
            state[v] = root_state
            continue
        row = transition_matrix(Q, tree.length[v])[state[p]]
        row = np.clip(row, 0.0, None)
        state[v] = rng.choice(k, p=row / row.sum())
    return state


# --------------------------------------------------------------------------- hidden rate classes


def reference_hidden_q(class_qs, switch) -> np.ndarray:
    """Rate matrix on the combined states (state s, class c), index c * k + s, written entry
    by entry from the definition of hidden rate classes (Beaulieu, O'Meara & Donoghue
    2013, Syst. Biol. 62:725 -- published source):

      (s, c) -> (s', c)  class_qs[c][s, s']   (the class's own rates)
      (s, c) -> (s, d)   switch[c, d]         (class switch, same for every state)
      (s, c) -> (s', d)  0                    (state and class never change at once)
    """
    R = len(class_qs)
    k = np.asarray(class_qs[0]).shape[0]
    off = np.zeros((k * R, k * R))
    for c in range(R):
        for s in range(k):
            for d in range(R):
                for t in range(k):
                    if c == d and s != t:
                        off[c * k + s, d * k + t] = class_qs[c][s][t]
                    elif c != d and s == t:
                        off[c * k + s, d * k + t] = switch[c][d]
    return q_from_rates(off)


def reference_hidden_tips(tip_partials, n_classes) -> np.ndarray:
    """A tip that may be in observed state s may be in (s, c) for every class c."""
    X = np.asarray(tip_partials, dtype=float)
    k = X.shape[1]
    out = np.zeros((X.shape[0], k * n_classes))
    for c in range(n_classes):
        for s in range(k):
            out[:, c * k + s] = X[:, s]
    return out


def reference_hidden_log_likelihood(tree, tip_partials, Q, root, n_classes, states=None) -> float:
    """Brute-force ln L on the combined states; a fixed root ``states.index(root)`` puts
    weight 1/R on each class of that observed state (mkforest's documented choice)."""
    L = brute_force_root_likelihoods(tree, reference_hidden_tips(tip_partials, n_classes), Q)
    if root in ("uniform", "stationary", "data_weighted"):
        total = combine_root(L, root, Q)
    else:
        k = len(states)
        s = list(states).index(root)
        total = sum(L[c * k + s] for c in range(n_classes)) / n_classes
    return math.log(total) if total > 0 else -math.inf


# --------------------------------------------------------------------------- branch-length treatments


def transformed_newick(text: str, treatment: str, theta: float | None = None) -> str:
    """The tree with its branch lengths transformed, done node by node on a DendroPy tree
    (independently of mkforest.engine.branches) and written back as Newick.

    Formulas as published, evaluated plainly (math module, no special cases beyond a
    zero-length branch staying zero under unit and kappa):
    - unit: every branch 1 -- change per speciation event
    - kappa: t -> t^kappa (Pagel 1994, Proc. R. Soc. B 255:37)
    - lambda: internal branches x lambda, each tip branch set so the tip keeps its
      distance from the root (Pagel 1999, Nature 401:877)
    - delta: node height from the root d -> H (d/H)^delta, H the largest root-to-tip
      distance, branch = difference of the new heights (Pagel 1999)
    - early_burst: a branch from s0 to s1 -> integral of e^(a s) ds from s0 to s1 =
      (e^(a s1) - e^(a s0)) / a (Harmon et al. 2010, Evolution 64:2385), here by
      scipy.integrate.quad, the integral itself rather than its closed form
    """
    import scipy.integrate

    tree = dendropy.Tree.get(
        data=text, schema="newick", preserve_underscores=True, rooting="force-rooted"
    )
    root = tree.seed_node
    dist = {}
    for nd in tree.preorder_node_iter():
        dist[nd] = 0.0 if nd is root else dist[nd.parent_node] + nd.edge.length
    height = max(dist[nd] for nd in tree.leaf_node_iter())
    new = {}
    for nd in tree.preorder_node_iter():
        if nd is root:
            continue
        t = nd.edge.length
        s0, s1 = dist[nd.parent_node], dist[nd]
        if treatment == "unit":
            new[nd] = 1.0 if t > 0 else 0.0
        elif treatment == "kappa":
            new[nd] = t**theta if t > 0 else 0.0
        elif treatment == "lambda":
            new[nd] = (s1 - theta * s0) if nd.is_leaf() else theta * t
        elif treatment == "delta":
            new[nd] = height * ((s1 / height) ** theta - (s0 / height) ** theta)
        elif treatment == "early_burst":
            new[nd] = scipy.integrate.quad(
                lambda s: math.exp(theta * s), s0, s1, epsabs=0.0, epsrel=1e-13
            )[0]
        else:
            raise ValueError(treatment)
    for nd, length in new.items():
        nd.edge.length = length
    return tree.as_string(
        schema="newick", suppress_rooting=True, real_value_format_specifier=".17g"
    ).strip()

"""Marginal ancestral state probabilities (Yang, Kumar & Nei 1995, Genetics 141:1641).

For every node v and state i the marginal posterior is

    Pr(x_v = i | data) = U_v(i) D_v(i) / sum_j U_v(j) D_v(j)

where D_v(i) is the conditional likelihood of the data below v given x_v = i
(the down pass: Felsenstein 1981 pruning, the kernel of ``likelihood``) and U_v(i) is
the probability of x_v = i jointly with all data outside the subtree of v (the
up pass). The up pass starts from the root prior pi (the root treatment:
uniform 1/k, stationary, a fixed state, or for ``data_weighted`` the root's own
normalised conditional likelihood D_root / sum D_root, FitzJohn, Maddison & Otto
2009) and walks to the tips:

    A_c(i) = U_p(i) prod_{s sibling of c} (P_s D_s)(i)      (everything but c's subtree)
    U_c(j) = sum_i A_c(i) P_c(i, j)

with P_c = exp(Q t_c). Every vector is renormalised as it is made (only ratios
within a node matter), so trees of any size neither underflow nor lose digits.
Polytomies are handled by taking the product over all siblings.

Arrays: probabilities are float64 [n_nodes, k] in the tree's node numbering
(tips 0..n_tips-1, internal nodes in postorder, root last); each row sums to 1.
Tip rows are the posterior of the tip given its own data too (an ambiguous or
missing tip gets a proper distribution over the states it may be in).
"""

from __future__ import annotations

from dataclasses import dataclass

import numba
import numpy as np

from .likelihood import LOG_SCALE, prune_matrices, root_weights, transition_matrices


class ImpossibleData(ValueError):
    """The tip data have probability zero under the rate matrix and root treatment."""


@dataclass
class Passes:
    """Everything the down and up passes produce for one tree and one rate matrix.

    P          float64 [n_nodes, k, k]  exp(Q t) for the branch above each node (identity at the root)
    down       float64 [n_nodes, k]     D_v, scaled per node (each row by its own constant)
    above      float64 [n_nodes, k]     A_v over the *parent's* states, normalised (zeros at the root)
    up         float64 [n_nodes, k]     U_v, normalised to sum 1 (the root prior at the root)
    root_prior float64 [k]              weights of the root states under the root treatment
    log_likelihood float                ln L of the tip data
    """

    P: np.ndarray
    down: np.ndarray
    above: np.ndarray
    up: np.ndarray
    root_prior: np.ndarray
    log_likelihood: float

    def marginals(self) -> np.ndarray:
        """Marginal probability of every state at every node [n_nodes, k] (rows sum to 1)."""
        out = self.up * self.down
        out /= out.sum(axis=1, keepdims=True)
        return out

    def branch_joint(self) -> np.ndarray:
        """float64 [n_nodes, k, k]: Pr(x_parent = i, x_v = j | data) for the branch above v
        (all zero for the root, which has no branch)."""
        J = self.above[:, :, None] * self.P * self.down[:, None, :]
        total = J.sum(axis=(1, 2), keepdims=True)
        np.divide(J, total, out=J, where=total > 0)
        return J


@numba.njit(cache=True)
def _normalise_max(x):
    m = 0.0
    for i in range(x.shape[0]):
        if x[i] > m:
            m = x[i]
    if m > 0.0:
        for i in range(x.shape[0]):
            x[i] /= m


@numba.njit(cache=True)
def _up_pass(child_ptr, children, n_tips, P, down, root_prior, above, up):
    """Fill ``above`` and ``up`` (see the module docstring); preorder = decreasing node index."""
    n = down.shape[0]
    k = down.shape[1]
    msg = np.empty((n, k))
    # message from each node to its parent: (P_c D_c)(i), normalised to max 1
    for c in range(n - 1):
        for i in range(k):
            s = 0.0
            for j in range(k):
                s += P[c, i, j] * down[c, j]
            msg[c, i] = s
        _normalise_max(msg[c])
    for i in range(k):
        up[n - 1, i] = root_prior[i]
        above[n - 1, i] = 0.0
    a = np.empty(k)
    for v in range(n - 1, n_tips - 1, -1):
        for p in range(child_ptr[v], child_ptr[v + 1]):
            c = children[p]
            for i in range(k):
                a[i] = up[v, i]
            for q in range(child_ptr[v], child_ptr[v + 1]):
                s = children[q]
                if s != c:
                    for i in range(k):
                        a[i] *= msg[s, i]
                    _normalise_max(a)
            total = 0.0
            for i in range(k):
                total += a[i]
            for i in range(k):
                above[c, i] = a[i] / total if total > 0.0 else 0.0
            total = 0.0
            for j in range(k):
                s = 0.0
                for i in range(k):
                    s += above[c, i] * P[c, i, j]
                up[c, j] = s
                total += s
            if total > 0.0:
                for j in range(k):
                    up[c, j] /= total


def passes(tree, tip_partials, Q, root="uniform", states=None) -> Passes:
    """Down and up passes for one tree (see the module docstring).

    Raises ImpossibleData when the tip data have probability zero under Q and
    the root treatment (e.g. a state that an irreversible model cannot reach).
    """
    Q = np.asarray(Q, dtype=np.float64)
    tip_partials = np.ascontiguousarray(tip_partials, dtype=np.float64)
    # The pruning kernel with explicit matrices: transition_matrices returns the exact
    # identity on zero-length branches, so data made impossible by a zero-length branch
    # give exactly zero (not 1e-17) and raise ImpossibleData below.
    P = transition_matrices(Q, tree.length)
    n, k = tree.n_nodes, Q.shape[0]
    down = np.empty((n, k))
    count = np.empty(n, dtype=np.int64)
    if not prune_matrices(tree.child_ptr, tree.children, tree.n_tips, P, tip_partials, down, count):
        raise ImpossibleData("the tip data are impossible under this rate matrix")
    r = down[tree.root]
    prior = np.asarray(root_weights(root, Q, r, states), dtype=np.float64)
    total = float(prior @ r)
    if not total > 0.0:
        raise ImpossibleData(
            "the tip data are impossible under this rate matrix and root treatment"
        )
    log_likelihood = float(np.log(total) - count[tree.root] * LOG_SCALE)
    n, k = down.shape
    above = np.zeros((n, k))
    up = np.zeros((n, k))
    _up_pass(tree.child_ptr, tree.children, tree.n_tips, P, down, prior / prior.sum(), above, up)
    return Passes(P, down, above, up, prior, log_likelihood)


def marginal_probabilities(tree, tip_partials, Q, root="uniform", states=None) -> np.ndarray:
    """Pr(x_v = i | data) for every node v: float64 [n_nodes, k], rows sum to 1.

    root: "uniform", "stationary", "data_weighted" or a state label (with ``states``)
    / index; as in ``likelihood.log_likelihood``.
    """
    return passes(tree, tip_partials, Q, root, states).marginals()


def observed_marginals(tree, tip_partials, Q, root, model) -> np.ndarray:
    """Marginal probabilities of the observed states under ``model`` (a RateModel):
    with hidden rate classes, computed on the combined states from tip partials
    repeated over the classes, then summed over the classes of each state."""
    combined = marginal_probabilities(tree, model.expand_tips(tip_partials), Q, root, model.states)
    return model.collapse(combined)


def averaged_probabilities(tree, tip_partials, fits, states=None) -> np.ndarray:
    """Model-averaged marginal probabilities: sum_m w_m Pr_m(x_v = i | data) / sum_m w_m.

    fits: iterable of (Q, root, weight), e.g. one per model with its Akaike
    weight on this tree, or (Q, root, weight, RateModel) where a model may have
    hidden rate classes (its probabilities are summed over the classes of each
    observed state), or (Q, root, weight, RateModel or None, tree of that model)
    for a model on its own branch lengths (mkforest.engine.branches). Models with
    weight 0 (or not finite) are skipped; models under which the data are
    impossible must have weight 0.
    """
    total = None
    wsum = 0.0
    for Q, root, weight, *extra in fits:
        weight = float(weight)
        if not np.isfinite(weight) or weight <= 0.0:
            continue
        model = extra[0] if extra else None
        on = extra[1] if len(extra) > 1 and extra[1] is not None else tree
        if model is not None:
            m = observed_marginals(on, tip_partials, Q, root, model)
        else:
            m = marginal_probabilities(on, tip_partials, Q, root, states)
        total = m * weight if total is None else total + m * weight
        wsum += weight
    if total is None:
        raise ValueError("model averaging needs at least one model with a positive weight")
    return total / wsum

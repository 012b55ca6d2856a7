"""The demo data set: an invented radiation, generated here from a seed.

Scenario (invented): the lantern snails (genus *Lumasta*) of the imaginary
Orrin archipelago, a radiation of land snails that colonised leaf litter, rock
faces and tree canopies. Four traits were simulated on the "true" tree under
known rates:

  habitat   litter / rock / canopy     (unconstrained rates)
  size      small / medium / large     (ordered: only one step at a time)
  banding   plain / banded             \\ simulated together: bands are gained
  aperture  round / toothed            /  and kept on toothed shells, lost on round ones
  glow      dull / glowing             independent of banding
  lip       thin / flared              changes at speciation events: simulated on the
                                       true tree with every branch of length 1

A posterior-like sample of trees is made from the true tree by random
nearest-neighbour interchanges and branch-length noise (trees.nex, lengths in
time). trees_molecular.nex holds the same trees with lengths in expected
substitutions per site: each branch's time multiplied by its own lognormal
clock rate, as a relaxed-clock analysis of sequences would give. The traits
evolved in time, so they fit the dated trees better: the demo's two tree sets.

The trees differ in topology and branch lengths as a real posterior sample
does. The true rates are written to truth.yaml beside the data.

Run: python -m mkforest.demo demo/data
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import yaml

from .data.trees import parse_newick
from .engine.models import build_model
from .engine.simulate import simulate_states

SYLLABLES = [
    "ra",
    "ven",
    "ti",
    "lor",
    "ma",
    "qu",
    "sel",
    "do",
    "fi",
    "nar",
    "cu",
    "pel",
    "zo",
    "ria",
    "mon",
    "est",
    "la",
    "vo",
    "ki",
    "ne",
]


def species_names(n: int, rng) -> list:
    names = set()
    while len(names) < n:
        k = rng.integers(2, 4)
        epithet = "".join(rng.choice(SYLLABLES, size=k)) + rng.choice(
            ["a", "is", "ens", "um", "ii"]
        )
        names.add(f"Lumasta_{epithet}")
    return sorted(names)


class _Node:
    __slots__ = ("children", "length", "name")

    def __init__(self, name=None, length=0.0):
        self.children = []
        self.length = length
        self.name = name


def yule_tree(names: list, rng, height: float = 1.0) -> _Node:
    """Pure-birth tree with the given tip names, scaled to the given height."""
    lineages = [_Node() for _ in range(1)]
    times = {id(lineages[0]): 0.0}
    t = 0.0
    nodes = [lineages[0]]
    while len(lineages) < len(names):
        t += rng.exponential(1.0 / len(lineages))
        parent = lineages.pop(rng.integers(len(lineages)))
        parent.length = t - times[id(parent)] + parent.length
        for _ in range(2):
            child = _Node()
            times[id(child)] = t
            parent.children.append(child)
            lineages.append(child)
            nodes.append(child)
    t += rng.exponential(1.0 / len(lineages))
    for leaf in lineages:
        leaf.length = t - times[id(leaf)]
    order = rng.permutation(len(names))
    for leaf, i in zip(lineages, order):
        leaf.name = names[i]
    nodes[0].length = 0.0
    for nd in nodes:
        nd.length *= height / t
    return nodes[0]


def _copy(node: _Node) -> _Node:
    new = _Node(node.name, node.length)
    new.children = [_copy(c) for c in node.children]
    return new


def _internal_edges(root: _Node):
    out = []
    stack = [root]
    while stack:
        nd = stack.pop()
        for c in nd.children:
            if c.children:
                out.append((nd, c))
            stack.append(c)
    return out


def perturbed(root: _Node, rng, n_swaps: float = 3.0, noise: float = 0.15) -> _Node:
    """A copy with random nearest-neighbour interchanges (favouring short
    branches, as posterior uncertainty does) and lognormal branch-length noise."""
    tree = _copy(root)
    for _ in range(rng.poisson(n_swaps)):
        edges = _internal_edges(tree)
        lengths = np.array([c.length for _, c in edges])
        p = np.exp(-lengths / lengths.mean())
        parent, child = edges[rng.choice(len(edges), p=p / p.sum())]
        sibling = next(s for s in parent.children if s is not child)
        i = rng.integers(len(child.children))
        parent.children[parent.children.index(sibling)] = child.children[i]
        child.children[i] = sibling
    stack = [tree]
    while stack:
        nd = stack.pop()
        for c in nd.children:
            c.length *= float(np.exp(rng.normal(0.0, noise)))
            stack.append(c)
    return tree


def newick(node: _Node, rename=None, fmt: str = ".6f") -> str:
    def rec(nd):
        s = (
            (rename or {}).get(nd.name, nd.name)
            if not nd.children
            else "(" + ",".join(rec(c) for c in nd.children) + ")"
        )
        return f"{s}:{nd.length:{fmt}}"

    return rec(node).rsplit(":", 1)[0] + ";"


TRUE_RATES = {
    "habitat": {
        "kind": "unconstrained",
        "states": ["litter", "rock", "canopy"],
        "rates": {
            "litter->rock": 1.2,
            "litter->canopy": 0.6,
            "rock->litter": 0.4,
            "rock->canopy": 0.2,
            "canopy->litter": 0.9,
            "canopy->rock": 0.3,
        },
    },
    "size": {
        "kind": "custom",
        "states": ["small", "medium", "large"],
        "transitions": {"small -> medium -> large": "grow", "large -> medium -> small": "shrink"},
        "rates": {"grow": 1.5, "shrink": 0.5},
    },
    "glow": {
        "kind": "unconstrained",
        "states": ["dull", "glowing"],
        "rates": {"dull->glowing": 0.6, "glowing->dull": 0.9},
    },
}

# banding and aperture evolve together (joint states banding+aperture): bands
# are gained fast and kept on toothed shells, lost fast on round ones. With
# these rates an independent-vs-dependent test on a 90-tip tree rejected in 6
# of 8 simulated data sets (chi-square, 5%).
JOINT_STATES = ["plain+round", "plain+toothed", "banded+round", "banded+toothed"]
JOINT_RATES = {
    ("plain+round", "plain+toothed"): 0.8,
    ("plain+toothed", "plain+round"): 0.8,
    ("banded+round", "banded+toothed"): 0.8,
    ("banded+toothed", "banded+round"): 0.8,
    ("plain+round", "banded+round"): 0.1,
    ("banded+round", "plain+round"): 2.0,
    ("plain+toothed", "banded+toothed"): 2.0,
    ("banded+toothed", "plain+toothed"): 0.1,
}


# lip: equal rates per speciation event (unit branch lengths); a separate seeded
# stream, so the other traits and the trees do not change with it. With this
# rate, unit lengths beat the given lengths by AICc on 9 of 10 simulated data
# sets on 90-tip Yule trees (equal-rates model; measured while writing it).
LIP_RATE_PER_EVENT = 0.3
# substitutions per site per unit of time, and the spread of the per-branch clock
CLOCK_RATE = 0.02
CLOCK_SPREAD = 1.6  # strong rate variation among branches, so the two sets differ clearly


def relaxed_clock(root: _Node, rng) -> _Node:
    """A copy with every branch's time multiplied by CLOCK_RATE and its own lognormal rate."""
    tree = _copy(root)
    stack = [tree]
    while stack:
        nd = stack.pop()
        for c in nd.children:
            c.length *= CLOCK_RATE * float(np.exp(rng.normal(0.0, CLOCK_SPREAD)))
            stack.append(c)
    return tree


def _write_nexus(path, tree_lines, translate, comment) -> None:
    nexus = ["#NEXUS", f"[{comment}]", "BEGIN TREES;", "  TRANSLATE"]
    nexus += [f"    {num} {name}," for name, num in translate.items()]
    nexus[-1] = nexus[-1].rstrip(",")
    nexus.append("  ;")
    for i, nwk in enumerate(tree_lines):
        nexus.append(f"  TREE sample_{i + 1} = [&R] {nwk}")
    nexus.append("END;")
    Path(path).write_text("\n".join(nexus) + "\n")


def make_demo(
    out_dir, n_tips: int = 90, n_trees: int = 120, seed: int = 2026, height: float = 1.0
) -> dict:
    """Write trees.nex, traits.tsv and truth.yaml into out_dir; returns their paths."""
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)
    names = species_names(n_tips, rng)
    truth = yule_tree(names, rng, height)
    true_arrays = parse_newick(newick(truth))
    columns = {}
    for trait, spec in TRUE_RATES.items():
        model = build_model(spec["kind"], spec["states"], spec.get("transitions"), trait)
        q = model.q_matrix([spec["rates"][lab] for lab in model.labels])
        st = simulate_states(true_arrays, q, rng)
        columns[trait] = [spec["states"][s] for s in st[: true_arrays.n_tips]]
    k = len(JOINT_STATES)
    q = np.zeros((k, k))
    for (a, b), r in JOINT_RATES.items():
        q[JOINT_STATES.index(a), JOINT_STATES.index(b)] = r
    np.fill_diagonal(q, -q.sum(axis=1))
    st = simulate_states(true_arrays, q, rng)
    columns["banding"] = [JOINT_STATES[s].split("+")[0] for s in st[: true_arrays.n_tips]]
    columns["aperture"] = [JOINT_STATES[s].split("+")[1] for s in st[: true_arrays.n_tips]]
    extra = np.random.default_rng([seed, 14])
    unit = true_arrays.with_lengths(np.where(true_arrays.length > 0, 1.0, 0.0))
    lip = build_model("equal", ["thin", "flared"])
    st = simulate_states(unit, lip.q_matrix([LIP_RATE_PER_EVENT]), extra)
    lip_column = [["thin", "flared"][s] for s in st[: true_arrays.n_tips]]
    # field realities: a few unknown cells and one polymorphic population
    for trait in columns:
        for i in rng.choice(true_arrays.n_tips, size=3, replace=False):
            columns[trait][i] = "?"
    columns["habitat"][int(rng.integers(true_arrays.n_tips))] = "litter|rock"
    columns["lip"] = lip_column
    order = ["habitat", "size", "banding", "aperture", "glow", "lip"]
    lines = ["taxon\t" + "\t".join(order)]
    for i, taxon in sorted(enumerate(true_arrays.tip_labels), key=lambda x: x[1]):
        lines.append(taxon + "\t" + "\t".join(columns[t][i] for t in order))
    traits_path = out / "traits.tsv"
    traits_path.write_text("\n".join(lines) + "\n")

    translate = {name: str(i + 1) for i, name in enumerate(sorted(names))}
    samples = [perturbed(truth, rng) for _ in range(n_trees)]
    trees_path = out / "trees.nex"
    _write_nexus(
        trees_path,
        [newick(t, translate) for t in samples],
        translate,
        "Lumasta lantern snails: an invented radiation generated by mkforest.demo",
    )
    molecular_path = out / "trees_molecular.nex"
    _write_nexus(
        molecular_path,
        [newick(relaxed_clock(t, extra), translate, ".6g") for t in samples],
        translate,
        "Lumasta lantern snails, the same trees in expected substitutions per "
        "site (relaxed clock), generated by mkforest.demo",
    )
    (out / "true_tree.nwk").write_text(newick(truth) + "\n")
    truth_doc = {
        "true_rates": TRUE_RATES,
        "banding_aperture_joint_rates": {f"{a} -> {b}": r for (a, b), r in JOINT_RATES.items()},
        "lip": {
            "model": "equal",
            "rate_per_speciation_event": LIP_RATE_PER_EVENT,
            "branch_lengths": "unit (every branch 1)",
        },
        "molecular_trees": {"clock_rate": CLOCK_RATE, "lognormal_sd_per_branch": CLOCK_SPREAD},
        "tree_height": height,
        "n_tips": n_tips,
        "n_trees": n_trees,
        "seed": seed,
    }
    (out / "truth.yaml").write_text(yaml.safe_dump(truth_doc, sort_keys=False))
    return {"trees": trees_path, "traits": traits_path, "trees_molecular": molecular_path}


def main(argv=None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    out = argv[0] if argv else "demo/data"
    paths = make_demo(out)
    print(f"demo data written: {paths['trees']}, {paths['traits']}")
    return 0


if __name__ == "__main__":
    sys.exit(main())

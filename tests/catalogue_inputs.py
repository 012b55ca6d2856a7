"""Small invented inputs of the shapes users bring, written by test code (never the demo).

Each writer returns the path it wrote. The taxa are invented moss-dwelling
tardigrade-like creatures of no real group; names with spaces are quoted in the
tree files, as programs that write posterior samples do.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from conftest import random_newick

from mkforest.data.clades import count_clades
from mkforest.data.trees import parse_newick

# eight taxa, two with spaces and a quote-worthy character in the name
TAXA = [
    "Vexa minor",
    "Vexa major",
    "Olm_tarsi",
    "Olm_grava",
    "Quill's pod",
    "Brun_a",
    "Brun_b",
    "Brun_c",
]


def quote(label: str) -> str:
    if any(c in label for c in " ()[]':;,"):
        return "'" + label.replace("'", "''") + "'"
    return label


def rename(newick: str, names: dict) -> str:
    """Replace the generated tip names t0, t1, ... by ``names[i]`` (longest first)."""
    for i in sorted(names, key=lambda i: -len(str(i))):
        newick = newick.replace(f"t{i}:", f"{names[i]}:")
    return newick


def unresolved_sample(
    n_trees: int = 5, n_tips: int = 8, seed: int = 3, p_polytomy=0.2, p_zero=0.0, mean_length=0.3
) -> list:
    """Newick strings (tips t0..t{n-1}) of random trees in which no clade is in more than
    half of the trees, so the majority-rule consensus is a star at the base."""
    rng = np.random.default_rng(seed)
    for _ in range(1000):
        texts = [
            random_newick(
                rng, n_tips, p_polytomy=p_polytomy, p_zero=p_zero, mean_length=mean_length
            )
            for _ in range(n_trees)
        ]
        trees = [parse_newick(t, i) for i, t in enumerate(texts)]
        counts = count_clades(trees)
        full = (1 << n_tips) - 1
        if max(c for m, c in counts.items() if m != full) <= n_trees // 2:
            return texts
    raise AssertionError("no unresolved sample drawn")


def posterior_nexus(
    path: Path, newicks: list, taxa: list, rooted: str = "[&R] ", comments: bool = True
) -> Path:
    """A NEXUS file as posterior samplers write it: a TAXA block, a TRANSLATE table of
    numbers, one TREE line per sample with comments (state, likelihood) before the tree."""
    lines = [
        "#NEXUS",
        "[written by an invented sampler for the mkforest tests]",
        "",
        "BEGIN TAXA;",
        f"  DIMENSIONS NTAX={len(taxa)};",
        "  TAXLABELS",
    ]
    lines += [f"    {quote(t)}" for t in taxa] + ["  ;", "END;", "", "BEGIN TREES;", "  TRANSLATE"]
    lines += [f"    {i + 1} {quote(t)}," for i, t in enumerate(taxa)]
    lines[-1] = lines[-1].rstrip(",")
    lines.append("  ;")
    for k, nwk in enumerate(newicks):
        body = rename(nwk, {i: str(i + 1) for i in range(len(taxa))})
        note = f"[&lnP=-{1200 + 3.25 * k:.2f},posterior=-{1250 + k}] " if comments else ""
        lines.append(f"  TREE STATE_{1000 * k} = {rooted}{note}{body}")
    lines.append("END;")
    path.write_text("\n".join(lines) + "\n")
    return path


def unrooted(newick: str) -> str:
    """The same tree written unrooted (its base split three ways), as analyses without a
    clock write it."""
    import dendropy

    tree = dendropy.Tree.get(
        data=newick, schema="newick", rooting="force-unrooted", preserve_underscores=True
    )
    tree.deroot()
    return tree.as_string(schema="newick", suppress_rooting=True).strip()

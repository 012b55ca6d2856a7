"""Small invented inputs of the shapes users bring, written by test code (never the demo).

Each writer returns the path it wrote. The taxa are invented moss-dwelling
tardigrade-like creatures of no real group; names with spaces are quoted in the
tree files, as programs that write posterior samples do.
"""

from __future__ import annotations

import re
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


# --------------------------------------------------------------------------- issue 21, item 5
# Invented files of the exact shapes tree programs write (no real data). Each writer
# returns the path; the trees hold the eight TAXA.


def _tips_named(newick: str, names: dict) -> str:
    return rename(newick, names)


def _random_trees(n_trees: int, seed: int, p_zero: float = 0.0) -> list:
    rng = np.random.default_rng(seed)
    return [random_newick(rng, len(TAXA), p_polytomy=0.0, p_zero=p_zero) for _ in range(n_trees)]


def sampler_unrooted_translate(path: Path, n_trees: int = 4) -> Path:
    """A sampler's output: no TAXA block, a lower-case translate block whose last entry
    ends with ';' on its own line, trees marked [&U] and named by chain state."""
    lines = ["#NEXUS", "", "begin trees;", "\ttranslate"]
    lines += [f"\t\t{i + 1} {quote(t)}," for i, t in enumerate(TAXA)]
    lines[-1] = lines[-1].rstrip(",")
    lines.append("\t\t;")
    for k, nwk in enumerate(_random_trees(n_trees, 11)):
        body = unrooted(_tips_named(nwk, {i: str(i + 1) for i in range(len(TAXA))}))
        lines.append(f"tree gen.{250000 * k} = [&U] {body}")
    lines.append("end;")
    path.write_text("\n".join(lines) + "\n")
    return path


def consensus_with_comments(path: Path) -> Path:
    """A consensus tree whose comments hold braces, quotes, % and +- , before and after the
    colon, on internal nodes and tips."""
    (nwk,) = _random_trees(1, 12)
    nwk = _tips_named(nwk, {i: quote(t) for i, t in enumerate(TAXA)})
    before = '[&prob=1.0,prob_range={0.1,0.2},prob(percent)="100",prob+-sd="100+-0"]'
    after = "[&length_range={0.05,0.2},height_95%_HPD={1.5,2.5}]"
    nwk = re.sub(r":([0-9.eE-]+)", lambda m: f"{before}:{after}{m.group(1)}", nwk)
    path.write_text(f"#NEXUS\nbegin trees;\n\ttree con_50_majrule = [&R] {nwk}\nend;\n")
    return path


def bootstrap_lines(path: Path, lengths: bool = True, n_trees: int = 4) -> Path:
    """Bare Newick trees one per line, support values as internal node labels."""
    rng = np.random.default_rng(13)
    out = []
    for nwk in _random_trees(n_trees, 13):
        nwk = unrooted(_tips_named(nwk, {i: quote(t) for i, t in enumerate(TAXA)}))
        nwk = re.sub(r"\)(?=[:,);])", lambda m: f"){int(rng.integers(40, 101))}", nwk)
        out.append(nwk if lengths else re.sub(r":[0-9.eE-]+", "", nwk))
    path.write_text("\n".join(out) + "\n")
    return path


def time_trees_with_rates(path: Path, n_trees: int = 3) -> Path:
    """Dated trees with [&rate=...] on every node, tips included, and a root ending ':0;'."""
    rng = np.random.default_rng(14)
    lines = ["#NEXUS", "begin trees;"]
    for k, nwk in enumerate(_random_trees(n_trees, 14)):
        nwk = _tips_named(nwk, {i: quote(t) for i, t in enumerate(TAXA)})
        nwk = re.sub(
            r":([0-9.eE-]+)",
            lambda m: f"[&rate={rng.uniform(0.5, 2):.6f}]:{m.group(1)}",
            nwk,
        )
        nwk = nwk.rstrip(";") + "[&rate=1.0]:0;"
        lines.append(f"tree STATE_{k * 1000} = [&R] {nwk}")
    lines.append("end;")
    path.write_text("\n".join(lines) + "\n")
    return path


def odd_length_digits(path: Path) -> Path:
    """Lengths written 1.0000001999999988 and 9.99999993922529E-8, in a file whose name
    has parentheses (pass such a path)."""
    (nwk,) = _random_trees(1, 15)
    nwk = _tips_named(nwk, {i: quote(t) for i, t in enumerate(TAXA)})
    values = iter(["1.0000001999999988", "9.99999993922529E-8"] * 20)
    nwk = re.sub(r":([0-9.eE-]+)", lambda m: f":{next(values)}", nwk)
    path.write_text("[&R] " + nwk + "\n")
    return path


SHAPES = {
    # name: (writer, file name, trees.root it needs)
    "sampler_unrooted_translate": (sampler_unrooted_translate, "run1.trees", "midpoint"),
    "consensus_with_comments": (consensus_with_comments, "consensus.tre", None),
    "bootstrap_with_lengths": (bootstrap_lines, "boot.tre", "midpoint"),
    "time_trees_with_rates": (time_trees_with_rates, "dated.trees", None),
    "odd_length_digits": (odd_length_digits, "tree (final).nwk", None),
}

"""Trees as compact arrays.

Trees are read once with DendroPy and turned into plain arrays; the likelihood
kernel never walks DendroPy objects.

Node numbering (the one convention everything relies on): tips are nodes
``0 .. n_tips-1`` in ``tip_labels`` order; internal nodes follow in postorder,
so every child has a smaller index than its parent and the root is the last
node. Looping ``v = 0 .. n_nodes-1`` is a postorder; the reverse is a preorder.
"""

from __future__ import annotations

import dataclasses
import io
import json
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import InputError
from .newick import read_tree_text, unclosed_comment


@dataclass(frozen=True, eq=False)
class TreeArrays:
    """One rooted tree.

    parent    int64 [n_nodes]    parent of each node; -1 at the root
    length    float64 [n_nodes]  length of the branch above each node; 0 at the root
    child_ptr int64 [n_nodes+1]  children of v are children[child_ptr[v]:child_ptr[v+1]]
    children  int64 [n_nodes-1]
    index     position of the tree in its input file (0-based, before burn-in)
    tree_set  name of the tree set it belongs to (config ``tree_sets``; "" when unnamed)
    """

    tip_labels: tuple
    parent: np.ndarray
    length: np.ndarray
    child_ptr: np.ndarray
    children: np.ndarray
    index: int = 0
    tree_set: str = ""
    _cache: dict = field(default_factory=dict, repr=False, compare=False)

    @property
    def n_tips(self) -> int:
        return len(self.tip_labels)

    @property
    def n_nodes(self) -> int:
        return len(self.parent)

    @property
    def root(self) -> int:
        return self.n_nodes - 1

    def children_of(self, v: int) -> np.ndarray:
        return self.children[self.child_ptr[v] : self.child_ptr[v + 1]]

    def depths(self) -> np.ndarray:
        """Distance from the root to every node."""
        if "depths" not in self._cache:
            depth = np.zeros(self.n_nodes)
            for v in range(self.n_nodes - 2, -1, -1):
                depth[v] = depth[self.parent[v]] + self.length[v]
            self._cache["depths"] = depth
        return self._cache["depths"]

    @property
    def height(self) -> float:
        """Largest root-to-tip distance."""
        return float(self.depths()[: self.n_tips].max())

    @property
    def total_length(self) -> float:
        return float(self.length.sum())

    def tip_sets(self) -> list:
        """For every node, the frozenset of tip labels below it."""
        sets: list = [None] * self.n_nodes
        for v in range(self.n_tips):
            sets[v] = frozenset([self.tip_labels[v]])
        for v in range(self.n_tips, self.n_nodes):
            sets[v] = frozenset().union(*(sets[c] for c in self.children_of(v)))
        return sets

    def node_name(self, v: int) -> str:
        """A name a person can find in the tree: the tip label, or the tips it joins."""
        if v < self.n_tips:
            return f"tip '{self.tip_labels[v]}'"
        below = sorted(self.tip_sets()[v])
        return f"the ancestor of '{below[0]}' and '{below[-1]}'"

    def scaled(self, factor: float) -> TreeArrays:
        return self.with_lengths(self.length * factor)

    def with_tree_set(self, name: str) -> TreeArrays:
        return TreeArrays(
            self.tip_labels,
            self.parent,
            self.length,
            self.child_ptr,
            self.children,
            self.index,
            name,
        )

    def with_lengths(self, lengths) -> TreeArrays:
        """The same tree (topology, index, set) with other branch lengths."""
        return TreeArrays(
            self.tip_labels,
            self.parent,
            np.ascontiguousarray(lengths, dtype=np.float64),
            self.child_ptr,
            self.children,
            self.index,
            self.tree_set,
        )


def _build(tip_labels, parent_of, length_of, index) -> TreeArrays:
    parent = np.asarray(parent_of, dtype=np.int64)
    n = len(parent)
    counts = np.bincount(parent[parent >= 0], minlength=n)
    child_ptr = np.zeros(n + 1, dtype=np.int64)
    np.cumsum(counts, out=child_ptr[1:])
    # children grouped by parent, each group in increasing node order (the root is last)
    children = np.argsort(parent[: n - 1], kind="stable").astype(np.int64)
    return TreeArrays(
        tuple(tip_labels),
        parent,
        np.asarray(length_of, dtype=np.float64),
        child_ptr,
        children,
        index,
    )


def _describe(node) -> str:
    if node.is_leaf():
        return f"tip '{node.taxon.label if node.taxon else '?'}'"
    leaves = [lf.taxon.label for lf in node.leaf_iter() if lf.taxon is not None]
    if not leaves:
        return "an unlabelled internal node"
    leaves.sort()
    return f"the ancestor of '{leaves[0]}' and '{leaves[-1]}'"


# The one way forward for trees written without branch lengths (bootstrap trees often are):
# the same words wherever such a tree stops a run.
NO_LENGTHS_FIX = (
    "no branch has a length. Trees without lengths can be analysed with one unit of "
    "length per branch (change per speciation event): set branches: unit in every model "
    "(models.<name>.branches; mkforest init writes it so) and leave out pairs, which use "
    "the given lengths; or give trees with branch lengths."
)


def has_any_length(tree) -> bool:
    """A DendroPy tree with a length on at least one branch (the root's own edge aside)."""
    root = tree.seed_node
    return any(nd.edge.length is not None for nd in tree.preorder_node_iter() if nd is not root)


def unit_lengths(tree) -> None:
    """Give every branch of a DendroPy tree written without lengths the length 1
    (change per speciation event, when every model uses ``branches: unit``)."""
    for nd in tree.preorder_node_iter():
        if nd is not tree.seed_node:
            nd.edge.length = 1.0


# A sampler's chain often starts from a tree whose branches all have one length, or a
# length near 1e-7; kept in a sample it is no draw from the posterior (common practice).
START_TINY = 1e-6


def looks_like_chain_start(lengths) -> str:
    """Why a tree with these branch lengths (the root's own edge left out) looks like a
    sampler's starting tree, or "" when it does not."""
    body = np.asarray(lengths, dtype=float)
    if len(body) < 3:
        return ""
    if body.max() <= START_TINY:
        return f"every branch is {body.max():.2g} or shorter"
    if body.max() - body.min() <= 1e-9 * body.max():
        return f"every branch has the same length ({body[0]:g})"
    return ""


# What a tree file may hold besides the trees: (data-check item, words) for each.
_COMMENT = re.compile(r"\[[^\]]*\]")
# a label right after a closing parenthesis (comments removed first): a support value or name
_INTERNAL_LABEL = re.compile(r"\)[ \t]*(?:'[^']*'|[^\s:,;()\[\]']+)")


def tree_file_features(text: str) -> list:
    """[(item, words)]: the features of a tree file's text that a reader meets besides the
    trees (a translate table, rooting tags, comments, internal node labels, quoted names)
    and what is done with each, for ``mkforest init``'s comments and the data check."""
    out = []
    if re.search(r"(?im)^\s*translate\b", text):
        out.append(("translate_table", "a translate table (numbers for taxon names)"))
    tags = sorted({t.upper() for t in re.findall(r"\[&([RrUu])\]", text)})
    if tags:
        out.append(("rooting_tags", "rooting tags " + " and ".join(f"[&{t}]" for t in tags)))
    if re.search(r"\[&(?![RrUu]\])", text):
        out.append(("node_comments", "comments on nodes or trees such as [&...] (ignored)"))
    if re.search(r"'[^']*'", text):
        out.append(("quoted_names", "quoted names"))
    if _INTERNAL_LABEL.search(_COMMENT.sub("", text)):
        out.append(
            ("internal_labels", "labels on internal nodes, such as support values (ignored)")
        )
    return out


def looks_unrooted(tree) -> bool:
    """A DendroPy tree whose base splits three or more ways and is not marked [&R]."""
    return len(tree.seed_node.child_nodes()) > 2 and tree.is_rooted is not True


def from_dendropy(tree, index: int = 0, source: str = "tree", rooted: bool = False) -> TreeArrays:
    """Convert one DendroPy tree, checking what the likelihood needs.

    rooted: the tree is known to be rooted (a tree mkforest built or rerooted
    itself), so a basal polytomy is a polytomy, never a sign of an unrooted tree.
    """
    where = f"{source}, tree {index}"
    root = tree.seed_node
    if not rooted and looks_unrooted(tree):
        raise InputError(
            f"{where}: the tree is unrooted (its base splits {len(root.child_nodes())} ways). "
            "Trait models need a rooted tree: set trees.root in the config to midpoint or to "
            "{outgroup: [taxon, ...]}; if the basal polytomy is intended, mark the tree as "
            "rooted with a [&R] comment before it."
        )
    nodes = list(tree.postorder_node_iter())
    tips = [nd for nd in nodes if nd.is_leaf()]
    internals = [nd for nd in nodes if not nd.is_leaf()]
    if len(tips) < 2:
        raise InputError(f"{where}: the tree has fewer than two tips.")
    number = {}
    labels = []
    for i, nd in enumerate(tips):
        if nd.taxon is None or not nd.taxon.label:
            raise InputError(f"{where}: a tip has no label; every tip needs a taxon name.")
        number[nd] = i
        labels.append(nd.taxon.label)
    for i, nd in enumerate(internals):
        number[nd] = len(tips) + i
    seen = set()
    for lab in labels:
        if lab in seen:
            raise InputError(
                f"{where}: tip '{lab}' appears more than once; tip labels must be unique."
            )
        seen.add(lab)
    n = len(nodes)
    parent = np.full(n, -1, dtype=np.int64)
    length = np.zeros(n)
    for nd in nodes:
        v = number[nd]
        if nd is root:
            continue
        parent[v] = number[nd.parent_node]
        if nd.edge.length is None:
            if not has_any_length(tree):
                raise InputError(f"{where}: {NO_LENGTHS_FIX}")
            raise InputError(
                f"{where}: the branch above {_describe(nd)} has no length. Every branch needs "
                "a length (use a time-calibrated or otherwise dated tree)."
            )
        bl = float(nd.edge.length)
        if not np.isfinite(bl) or bl < 0:
            raise InputError(
                f"{where}: the branch above {_describe(nd)} has length {bl}; lengths must be "
                "zero or positive."
            )
        length[v] = bl
    return _build(labels, parent, length, index)


def _detect_schema(text: str) -> str:
    return "nexus" if text.lstrip().upper().startswith("#NEXUS") else "newick"


def _tree_file_text(path: Path, schema):
    """(text, schema) of a tree file, or InputError when it is missing or empty. A
    byte-order mark (as Windows editors write) is dropped; line ends are read as LF."""
    if not path.is_file():
        raise InputError(f"tree file '{path}' does not exist.")
    text = path.read_text(encoding="utf-8-sig")
    schema = schema or _detect_schema(text)
    if not text.strip():
        raise InputError(f"tree file '{path}' is empty.")
    return text, schema


def _check_comments(text: str, path: Path) -> None:
    """Before DendroPy reads a file: a comment never closed would swallow the rest of it
    (trees silently dropped, or an endless loop in a NEXUS TAXA block)."""
    line = unclosed_comment(text)
    if line is not None:
        raise InputError(
            f"tree file '{path}', line {line}: a comment opened with '[' is never "
            "closed with ']', so everything after it would be ignored. Close the "
            "comment or remove the '['."
        )


def _unreadable(exc, path: Path, schema: str) -> InputError:
    """DendroPy raises several types; all mean a malformed file: one sentence."""
    line = getattr(exc, "line_num", None)
    at = f", line {line}" if line else ""
    msg = getattr(exc, "message", None) or str(exc).splitlines()[0]
    if "Duplicate taxon labels:" in msg:
        dup = msg.rsplit("Duplicate taxon labels:", 1)[1].strip()
        msg = (
            f"tip '{dup}' appears more than once in one tree; tip labels must be unique "
            "within a tree"
        )
    return InputError(f"tree file '{path}'{at}: cannot be read as {schema.upper()}: {msg}")


def parse_tree_file(path, schema: str | None = None):
    """Every tree of a Newick or NEXUS file as a DendroPy TreeList, unchecked
    (InputError naming the file and line when it cannot be read)."""
    path = Path(path)
    text, schema = _tree_file_text(path, schema)
    _check_comments(text, path)
    import dendropy  # imported here: fit jobs only load prepared arrays

    try:
        trees = dendropy.TreeList.get(data=text, schema=schema, preserve_underscores=True)
    except Exception as exc:
        raise _unreadable(exc, path, schema) from None
    if len(trees) == 0:
        raise InputError(f"tree file '{path}' holds no trees.")
    return trees


def iter_tree_file(path, schema: str | None = None, text: str | None = None):
    """The trees of a Newick or NEXUS file one at a time, as DendroPy trees: a sample
    of 1,000 trees of 1,000 tips held at once as DendroPy objects took 1.3 GB.
    ``text``: the file's text and schema already read by ``_tree_file_text``."""
    path = Path(path)
    if text is None:
        text, schema = _tree_file_text(path, schema)
    _check_comments(text, path)
    import dendropy

    try:
        yield from dendropy.Tree.yield_from_files(
            files=[io.StringIO(text)], schema=schema, preserve_underscores=True
        )
    except Exception as exc:
        raise _unreadable(exc, path, schema) from None


def read_trees(
    path,
    schema: str | None = None,
    root=None,
    fast: bool = True,
    no_lengths: str = "error",
    filled: list | None = None,
) -> list:
    """Read every tree in a Newick or NEXUS file (TRANSLATE tables, [&R]/[&U] and quoted labels handled).

    root: None (trees must be rooted as written), "midpoint", or {"outgroup": [taxa]}
    (the ``trees.root`` config key); see ``reroot``.
    no_lengths: "unit" gives a tree written without any branch length one unit per
    branch (before rooting, so a midpoint counts branches; their positions are appended
    to ``filled``); "error" stops on it.

    Trees kept as written go through the fast reader (``newick.read_tree_text``);
    a file it does not handle, and every file to be rerooted, is read with DendroPy
    one tree at a time (so only the arrays of the whole sample are held), which
    also gives the messages for bad trees. ``fast=False`` always takes the DendroPy
    path (the tests compare the two; benchmarks/bench_tree_reading.py times them).
    """
    path = Path(path)
    text, schema = _tree_file_text(path, schema)
    if root is None and fast:
        arrays = read_tree_text(text, schema)
        if arrays is not None:
            return [
                _build(labels, parent, length, i)
                for i, (labels, parent, length) in enumerate(arrays)
            ]
    return _read_trees_dendropy(path, schema, root, text, no_lengths, filled)


def _read_trees_dendropy(
    path: Path, schema: str, root, text: str, no_lengths="error", filled=None
) -> list:
    """read_trees through DendroPy objects (``from_dendropy``)."""
    source = f"tree file '{path}'"
    out = []
    for i, t in enumerate(iter_tree_file(path, schema, text)):
        if not has_any_length(t):
            if no_lengths != "unit":
                raise InputError(f"{source}, tree {i}: {NO_LENGTHS_FIX}")
            unit_lengths(t)
            if filled is not None:
                filled.append(i)
        if root is not None:
            reroot(t, root, f"{source}, tree {i}")
        out.append(from_dendropy(t, i, source, rooted=root is not None))
    if not out:
        raise InputError(f"tree file '{path}' holds no trees.")
    return out


def describe_rooting(root) -> str:
    """The trees.root setting in words (for logs, the manifest and the methods text)."""
    if root is None:
        return "as written in the tree file"
    if root == "midpoint":
        return "at the midpoint of the longest tip-to-tip path"
    return "on the outgroup " + ", ".join(root["outgroup"])


def reroot(tree, root, where: str = "tree") -> None:
    """Root a DendroPy tree in place, as the ``trees.root`` config key asks.

    "midpoint": DendroPy's Tree.reroot_at_midpoint (the root halves the longest
    tip-to-tip path; common practice for samples without an outgroup).
    {"outgroup": [taxa]}: the root is placed halfway along the branch that
    separates the outgroup from the other taxa (common practice). The outgroup
    must be a clade of the unrooted tree; otherwise InputError names the tree
    and a taxon that breaks it up.
    """
    if tree.seed_node.edge.length is None:
        tree.seed_node.edge.length = 0.0
    if any(nd.taxon is None or not nd.taxon.label for nd in tree.leaf_node_iter()):
        # found by fuzzing: DendroPy's midpoint fails on an unlabelled tip with an assertion
        raise InputError(f"{where}: a tip has no label; every tip needs a taxon name.")
    if len(tree.leaf_nodes()) < 2:
        raise InputError(f"{where}: the tree has fewer than two tips.")
    if root == "midpoint":
        if any(
            nd.edge.length is None for nd in tree.preorder_node_iter() if nd is not tree.seed_node
        ):
            if not has_any_length(tree):
                raise InputError(f"{where}: {NO_LENGTHS_FIX}")
            raise InputError(
                f"{where}: midpoint rooting needs every branch length; a branch has "
                "none. Use trees.root: {outgroup: [...]} or give lengths."
            )
        tree.reroot_at_midpoint(update_bipartitions=False, suppress_unifurcations=True)
        tree.is_rooted = True
        return
    wanted = list(dict.fromkeys(root["outgroup"]))
    leaves = {nd.taxon.label: nd for nd in tree.leaf_node_iter() if nd.taxon is not None}
    unknown = [x for x in wanted if x not in leaves]
    if unknown:
        close = sorted(t for t in leaves if t.lower() == unknown[0].lower())
        hint = f" (did you mean '{close[0]}'?)" if close else ""
        raise InputError(
            f"{where}: outgroup taxon '{unknown[0]}' (trees.root.outgroup) is not in "
            f"this tree{hint}."
        )
    if len(wanted) >= len(leaves):
        raise InputError(
            f"{where}: trees.root.outgroup lists every taxon of the tree; the "
            "outgroup must leave at least one taxon outside it."
        )
    # first hang the tree from a taxon outside the outgroup, so that the outgroup, if it is a
    # clade of the unrooted tree, is a clade of this rooted one
    inside = set(wanted)
    anchor = next(nd for lab, nd in leaves.items() if lab not in inside)
    _reroot_on_edge(tree, anchor)
    mrca = tree.mrca(taxon_labels=wanted)
    below = {nd.taxon.label for nd in mrca.leaf_iter()}
    if below != inside:
        intruder = sorted(below - inside)[0]
        raise InputError(
            f"{where}: the outgroup ({', '.join(wanted)}) is not a clade in this tree: "
            f"the smallest group holding it also holds '{intruder}'. Check the "
            "trees.root.outgroup list, or use trees.root: midpoint."
        )
    if mrca is not tree.seed_node:
        _reroot_on_edge(tree, mrca)
    tree.is_rooted = True


def _reroot_on_edge(tree, node) -> None:
    """Root halfway along the branch above ``node``."""
    length = node.edge.length or 0.0
    if node.parent_node is tree.seed_node and len(tree.seed_node.child_nodes()) == 2:
        # already at the root's side: just split the root's two branches evenly
        other = next(c for c in tree.seed_node.child_nodes() if c is not node)
        total = length + (other.edge.length or 0.0)
        node.edge.length = other.edge.length = total / 2
        return
    tree.reroot_at_edge(
        node.edge,
        length1=length / 2,
        length2=length / 2,
        update_bipartitions=False,
        suppress_unifurcations=True,
    )


def parse_newick(text: str, index: int = 0, rooted: bool = False) -> TreeArrays:
    """One tree from a Newick string (``rooted``: a tree mkforest wrote, known to be rooted)."""
    import dendropy

    try:
        tree = dendropy.Tree.get(data=text, schema="newick", preserve_underscores=True)
    except Exception as exc:
        raise InputError(f"Newick string cannot be read: {str(exc).splitlines()[0]}") from None
    return from_dendropy(tree, index, "Newick string", rooted=rooted)


def _quote(label: str) -> str:
    if any(c in label for c in " ()[]':;,\t"):
        return "'" + label.replace("'", "''") + "'"
    return label


def to_newick(tree: TreeArrays, digits: int = 10) -> str:
    """Newick text of a tree (lengths with ``digits`` significant digits)."""
    parts: list = [None] * tree.n_nodes
    for v in range(tree.n_nodes):
        if v < tree.n_tips:
            s = _quote(tree.tip_labels[v])
        else:
            s = "(" + ",".join(parts[c] for c in tree.children_of(v)) + ")"
        if v != tree.root:
            s += f":{tree.length[v]:.{digits}g}"
        parts[v] = s
    return parts[tree.root] + ";"


# --- chunks of trees on disk -------------------------------------------------


def save_trees(path, trees: list) -> None:
    """Write trees to one .npz file (arrays concatenated, with offsets)."""
    n_nodes = np.array([t.n_nodes for t in trees], dtype=np.int64)
    labels = json.dumps([list(t.tip_labels) for t in trees])
    buf = io.BytesIO()
    np.savez(
        buf,
        n_nodes=n_nodes,
        index=np.array([t.index for t in trees], dtype=np.int64),
        parent=np.concatenate([t.parent for t in trees]),
        length=np.concatenate([t.length for t in trees]),
        labels=np.array(labels),
        tree_set=np.array(json.dumps([t.tree_set for t in trees])),
    )
    Path(path).write_bytes(buf.getvalue())


def load_trees(path) -> list:
    with np.load(path) as data:
        # each data[...] reads the whole array from the file: read each once
        labels = json.loads(str(data["labels"]))
        n_nodes, index = data["n_nodes"], data["index"]
        parents, lengths = data["parent"], data["length"]
        sets = json.loads(str(data["tree_set"])) if "tree_set" in data else [""] * len(labels)
    out = []
    shared = {}  # trees of a sample list the same tips, often in the same order: one tuple
    start = 0
    for k, n in enumerate(n_nodes):
        tips = shared.setdefault(tuple(labels[k]), tuple(labels[k]))
        tree = _build(
            tips,
            parents[start : start + n].copy(),
            lengths[start : start + n].copy(),
            int(index[k]),
        )
        out.append(dataclasses.replace(tree, tree_set=sets[k], _cache={}) if sets[k] else tree)
        start += n
    return out

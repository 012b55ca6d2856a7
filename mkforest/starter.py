"""`mkforest init`: a commented starting config written from the user's own files.

It reads the tree file and the trait table, describes what it found (trees:
count, rooted, branch lengths, ultrametric; traits: states, counts, missing
cells; taxa on one side only) in comments, and chooses settings that let the
config run as written: unrooted trees are rooted at the midpoint, tree tips
without a row in the table are treated as unknown, columns that cannot be
analysed are left out with the reason. An entry point beside cli.py: it reads
with the data layer and checks what it wrote with the workflow's own check.
"""

from __future__ import annotations

import csv
import json
import re
import textwrap
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .data.traits import DEFAULT_MISSING, combined_states, read_traits, safe_column_name
from .data.trees import looks_like_chain_start, looks_unrooted, parse_tree_file, tree_file_features
from .errors import InputError, did_you_mean
from .jobs.prepare import name_difference

REPO = Path(__file__).resolve().parents[1]
WIDTH = 92  # comment lines wrap here
MAX_STATES = 8  # more distinct values than this: a label or a measurement, not a trait
UNCONSTRAINED_MAX_STATES = 4
ULTRAMETRIC_TOLERANCE = 1e-3  # relative spread of root-to-tip distances
# Cell texts that usually mean "unknown" besides the defaults (case as written).
MISSING_LOOKALIKES = ("N/A", "n/a", "na", "NaN", "nan", "unknown", "Unknown", "missing", "??")


@dataclass
class TreeSurvey:
    n_trees: int
    tips: tuple  # tip labels of the first tree
    unrooted: list = field(default_factory=list)  # positions (0-based)
    without_lengths: list = field(default_factory=list)  # a branch without a length
    no_lengths: list = field(default_factory=list)  # no branch with a length at all
    not_ultrametric: list = field(default_factory=list)
    other_tips: list = field(default_factory=list)  # trees whose tips differ from the first
    zero_length: list = field(default_factory=list)  # trees with a branch of length 0
    names: list = field(default_factory=list)  # the trees' names (NEXUS `tree NAME =`)
    first_start: str = ""  # why the first tree looks like a sampler's starting tree
    internal_labels: bool = False  # labels on internal nodes (support values)
    features: list = field(default_factory=list)  # file features met, in words
    newick: bool = False  # a bare Newick file (no #NEXUS)

    @property
    def lengthless(self) -> bool:
        """Every tree written without any branch length (bootstrap trees often are)."""
        return bool(self.no_lengths) and len(self.no_lengths) == self.n_trees

    @property
    def chain(self) -> list:
        """The state numbers of a sampler's output (trees named `gen.250000`,
        `STATE_1000000`: one word, then increasing numbers), else []."""
        found = [CHAIN_NAME.match(n or "") for n in self.names]
        if len(found) < 2 or not all(found):
            return []
        if len({m.group(1).lower() for m in found}) != 1:
            return []
        steps = [int(m.group(2)) for m in found]
        return steps if all(b > a for a, b in zip(steps, steps[1:])) else []


CHAIN_NAME = re.compile(r"^([A-Za-z]+)[._-]?(\d+)$")
BURNIN_SHARE = 0.1  # proposed for a sampler's output: a common minimum (common practice)


def file_features(text: str) -> list:
    """What a tree file holds besides the trees, in words (for init's comments); labels on
    internal nodes are found by ``survey_trees`` from the trees read."""
    return [words for item, words in tree_file_features(text) if item != "internal_labels"]


def survey_trees(path) -> TreeSurvey:
    """What the run needs to know about a tree file, tree by tree."""
    trees = parse_tree_file(path)
    text = Path(path).read_text(encoding="utf-8-sig", errors="replace")
    first = None
    out = TreeSurvey(len(trees), ())
    out.newick = not text.lstrip().upper().startswith("#NEXUS")
    for i, tree in enumerate(trees):
        out.names.append(tree.label)
        tips = tuple(sorted(nd.taxon.label for nd in tree.leaf_node_iter() if nd.taxon))
        if first is None:
            first = tips
            out.tips = tips
        elif tips != first:
            out.other_tips.append(i)
        if looks_unrooted(tree):
            out.unrooted.append(i)
        if any(nd.label for nd in tree.preorder_node_iter() if not nd.is_leaf()):
            out.internal_labels = True
        edges = [nd.edge.length for nd in tree.preorder_node_iter() if nd is not tree.seed_node]
        if all(x is None for x in edges):
            out.no_lengths.append(i)
        if any(x is None for x in edges):
            out.without_lengths.append(i)
            continue
        if i == 0:
            out.first_start = looks_like_chain_start([float(x) for x in edges])
        if any(float(x) == 0.0 for x in edges):
            out.zero_length.append(i)
        if i in out.unrooted:
            continue  # distances from an arbitrary base say nothing about a clock
        depth = {tree.seed_node: 0.0}
        for nd in tree.preorder_node_iter():
            if nd is not tree.seed_node:
                depth[nd] = depth[nd.parent_node] + float(nd.edge.length)
        d = np.array([depth[nd] for nd in tree.leaf_node_iter()])
        if d.max() <= 0 or (d.max() - d.min()) > ULTRAMETRIC_TOLERANCE * d.max():
            out.not_ultrametric.append(i)
    out.features = file_features(text)
    if out.internal_labels:
        out.features.append("labels on internal nodes, such as support values (ignored)")
    return out


def _read_table(path: Path) -> tuple:
    """(header, rows as lists of cell text) of a CSV or TSV table (delimiter from line 1)."""
    if not path.is_file():
        raise InputError(f"trait table '{path}' does not exist.")
    with open(path, newline="", encoding="utf-8-sig") as fh:
        line = fh.readline()
        if not line.strip():
            raise InputError(f"trait table '{path}' is empty; line 1 must name the columns.")
        delimiter = "\t" if line.count("\t") >= max(1, line.count(",")) else ","
        fh.seek(0)
        rows = [r for r in csv.reader(fh, delimiter=delimiter) if any(x.strip() for x in r)]
    if not rows:  # e.g. a line of bare delimiters
        raise InputError(
            f"trait table '{path}' has no cell with text; line 1 must name the columns."
        )
    return [h.strip() for h in rows[0]], rows[1:]


def choose_taxon_column(path: Path, tips: tuple, asked: str | None) -> str:
    """The taxon column: the one asked for, else 'taxon', else the column whose
    values match the most tree tips."""
    header, rows = _read_table(path)
    if asked is not None:
        if asked not in header:
            raise InputError(
                f"trait table '{path}', line 1: no column '{asked}' (--taxon-column); "
                f"columns are: {', '.join(header)}.{did_you_mean(asked, header)}"
            )
        return asked
    if "taxon" in header:
        return "taxon"
    tipset = {t.replace("_", " ") for t in tips}
    hits = [
        len(tipset.intersection(r[i].strip().replace("_", " ") for r in rows if len(r) > i))
        for i in range(len(header))
    ]
    return header[int(np.argmax(hits))]


@dataclass
class TraitSurvey:
    name: str
    states: tuple
    counts: dict
    missing: int
    ambiguous: int
    use: bool
    why_not: str = ""
    short: str = ""  # why_not in a few words, for the printed summary
    column: str = ""  # the column's name in the table, when the trait's name differs


def survey_traits(
    path: Path, taxon_column: str, header: list, missing: list, separator: str = "|"
) -> tuple:
    """({column: TraitSurvey}, taxa in the table)."""
    columns = [c for c in header if c != taxon_column]
    if not columns:
        raise InputError(
            f"trait table '{path}' has no column besides the taxon column '{taxon_column}'."
        )
    read_traits(path, taxon_column, [], missing)  # the table as a whole: rows, taxa, fields
    out = {}
    safe = [safe_column_name(c) for c in columns]
    for column, name in zip(columns, safe):
        if safe.count(name) > 1 or (name != column and name in header):
            out[column] = TraitSurvey(
                column,
                (),
                {},
                0,
                0,
                False,
                f"its name, made fit for file names ({name}), is that of another column; "
                "rename one of them",
                "name clashes with another column",
            )
            continue
        try:
            t = read_traits(path, taxon_column, [name], missing, separator)[name]
        except InputError as exc:
            # a column the workflow would refuse (states differing only in case, a cell
            # mixing a missing code with states): left out, with the workflow's sentence
            out[column] = TraitSurvey(
                column, (), {}, 0, 0, False, str(exc).rstrip("."), "the workflow would refuse it"
            )
            continue
        counts = t.state_counts()
        n_missing = int(t.possible.all(axis=1).sum())
        observed = [s for s in t.states if counts[s] > 0]
        why = short = ""
        if t.k > MAX_STATES:
            short = f"{t.k} distinct values"
            why = (
                f"{t.k} distinct values: more like a label or a measurement than a "
                f"categorical trait (an Mk model of k states has up to k(k-1) rates)"
            )
        elif len(observed) < 2:
            short = f"only state '{observed[0]}' observed" if observed else "no observed value"
            why = short + ": nothing changes, so there is nothing to fit"
        out[column] = TraitSurvey(
            name, t.states, counts, n_missing, t.n_ambiguous(), not why, why, short, column
        )
    _, rows = _read_table(path)
    ti = header.index(taxon_column)
    return out, tuple(r[ti].strip() for r in rows)


def _missing_lookalikes(path: Path, taxon_column: str) -> list:
    """Cells such as 'N/A' or 'unknown' found in the trait columns."""
    header, rows = _read_table(path)
    ti = header.index(taxon_column)
    found = {cell.strip() for r in rows for i, cell in enumerate(r) if i != ti}
    return sorted(found & set(MISSING_LOOKALIKES))


def _y(value) -> str:
    """A YAML flow value (JSON is YAML; strings quoted only where YAML needs it)."""
    if isinstance(value, str):
        plain = re.fullmatch(r"[A-Za-z_][A-Za-z0-9_.\-]*", value) and value.lower() not in (
            "yes",
            "no",
            "true",
            "false",
            "on",
            "off",
            "null",
            "y",
            "n",
        )
        return value if plain else json.dumps(value, ensure_ascii=False)
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_y(v) for v in value) + "]"
    return json.dumps(value)


def _listing(items, limit: int = 8) -> str:
    items = list(items)
    shown = ", ".join(items[:limit])
    return shown + (f" and {len(items) - limit} more" if len(items) > limit else "")


def _config_path(path: Path, base: Path) -> str:
    """A data path as the config should hold it: relative to the folder the
    workflow runs in when the file lies below it, else absolute."""
    path = path.resolve()
    try:
        return str(path.relative_to(base.resolve()))
    except ValueError:
        return str(path)


@dataclass
class Starter:
    text: str  # the config file's content
    summary: list  # lines to print
    run: str


@dataclass
class TableSurvey:
    """What init found in the trait table, and how its taxa meet the tree tips."""

    taxon_column: str
    surveys: dict  # {column: TraitSurvey}
    taxa: tuple  # the table's taxa, as written
    missing: list  # cells read as unknown
    extra_missing: list  # of them, those found beyond the defaults
    separator: str
    combined: dict  # {separator found: [column, ...]} polymorphic cells it splits
    renamed: dict  # {table name: tree tip} matched with underscores for spaces
    tips: set
    names: set  # the table's taxa as the run will see them (after renaming)

    @property
    def used(self) -> list:
        return [s for s in self.surveys.values() if s.use]

    @property
    def trees_only(self) -> list:
        return sorted(self.tips - self.names)

    @property
    def table_only(self) -> list:
        return sorted(self.names - self.tips)

    @property
    def matched(self) -> int:
        return len(self.tips & self.names)


def spaced(name: str) -> str:
    """A taxon name with underscores read as spaces (as unquoted Newick names mean them)."""
    return name.replace("_", " ")


def survey_table(traits_file: Path, trees_file: Path, ts: TreeSurvey, asked) -> TableSurvey:
    """Read the table as init proposes it: taxon column, missing codes, the separator of
    polymorphic cells (``0/1``: set when one such character joins known states), taxa
    matched to tips with underscores for spaces."""
    taxon_column = choose_taxon_column(traits_file, ts.tips, asked)
    header = _read_table(traits_file)[0]
    extra_missing = _missing_lookalikes(traits_file, taxon_column)
    missing = list(DEFAULT_MISSING) + extra_missing
    surveys, taxa = survey_traits(traits_file, taxon_column, header, missing)
    combined: dict = {}
    for sv in surveys.values():
        for sep in combined_states(sv.states):
            combined.setdefault(sep, []).append(sv.name)
    separator = "|"
    if len(combined) == 1:
        separator = next(iter(combined))
        surveys, taxa = survey_traits(traits_file, taxon_column, header, missing, separator)
    if not any(sv.use for sv in surveys.values()):
        reasons = "; ".join(f"'{sv.name}': {sv.why_not}" for sv in surveys.values())
        raise InputError(f"trait table '{traits_file}': no column can be analysed ({reasons}).")
    tips = set(ts.tips)
    by_key: dict = {}
    for tip in ts.tips:
        by_key.setdefault(spaced(tip), []).append(tip)
    renamed = {
        x: by_key[spaced(x)][0]
        for x in taxa
        if x not in tips
        and len(by_key.get(spaced(x), [])) == 1
        and by_key[spaced(x)][0] not in taxa
    }
    names = {renamed.get(x, x) for x in taxa}
    out = TableSurvey(
        taxon_column,
        surveys,
        taxa,
        missing,
        extra_missing,
        separator,
        combined,
        renamed,
        tips,
        names,
    )
    if out.matched == 0:
        pairs = [(a, b) for a in taxa[:200] for b in ts.tips[:200] if name_difference(a, b)]
        differ = (
            f" The table has '{pairs[0][0]}' where the trees have '{pairs[0][1]}': they differ "
            f"in {name_difference(*pairs[0])}."
            if pairs
            else ""
        )
        raise InputError(
            f"no taxon of trait table '{traits_file}' (column '{taxon_column}') is a "
            f"tip of the trees in '{trees_file}'; check the taxon column and the "
            f"spelling of the names (a tip: '{ts.tips[0]}', a row: '{taxa[0]}').{differ}"
        )
    return out


class Lines:
    """The config's lines; a long comment wraps under its own indentation."""

    def __init__(self):
        self.lines: list = []

    def __call__(self, line: str) -> None:
        m = re.match(r"^(\s*#\s*)", line)
        if not m or len(line) <= WIDTH:
            self.lines.append(line)
            return
        lead = m.group(1)
        self.lines.extend(
            textwrap.wrap(
                line[len(lead) :],
                WIDTH,
                initial_indent=lead,
                subsequent_indent=lead + "  ",
                break_on_hyphens=False,
            )
        )

    def text(self) -> str:
        return "\n".join(self.lines) + "\n"


def starting_config(
    trees_file, traits_file, taxon_column=None, run: str = "my_run", base: Path | None = None
) -> Starter:
    """The commented starting config for these files (paths written relative to ``base``,
    the folder the workflow will run in)."""
    base = Path(base) if base is not None else REPO
    trees_file, traits_file = Path(trees_file), Path(traits_file)
    ts = survey_trees(trees_file)
    tab = survey_table(traits_file, trees_file, ts, taxon_column)
    w = Lines()
    w("# mkforest config written by `mkforest init` from your files. Every setting below runs")
    w("# as written; the comments say what was found and what you may want to change.")
    w("# Every key, with its default, is explained in config/template.yaml.")
    w("")
    w("# Name of the results folder: results/<run>/")
    w(f"run: {_y(run)}")
    w("")
    w("# Global seed: every random draw derives from it and from what is computed.")
    w("seed: 1")
    w("")
    _trees_block(w, ts, _config_path(trees_file, base))
    w("")
    _traits_block(w, tab, _config_path(traits_file, base))
    w("")
    _models(w, tab.used, ts.lengthless)
    w("")
    w("# Criterion for weights and ranking: aicc, aic or bic.")
    w("criterion: aicc")
    w("")
    w("fitting:")
    w("  # Optimiser starts per fit: at least `starts` (and one per free rate, up to 5), then")
    w("  # more while the two best disagree, up to `max_starts`; converged = two agree.")
    w("  starts: 2")
    w("  max_starts: 20")
    w("  # Rate bounds, in expected changes along the tree's root-to-tip height.")
    w("  lower: 1.0e-6")
    w("  upper: 1.0e+4")
    w("")
    _pairs(w, tab.used, ts.lengthless)
    w("")
    _ancestral_block(w, sorted(tab.tips & tab.names))
    return Starter(w.text(), _summary(ts, tab, trees_file, traits_file), run)


def proposed_burnin(ts: TreeSurvey) -> tuple:
    """(trees.burnin, why): a sampler's output (numbered chain states starting at 0, or a
    first tree that looks like the chain's start) loses its first tenth; else nothing."""
    chain = ts.chain
    start = f"the first tree looks like the chain's starting tree ({ts.first_start})"
    if chain and (chain[0] == 0 or ts.first_start):
        why = (
            f"the trees are numbered chain states ({ts.names[0]}, {ts.names[1]}, ...), a "
            "sampler's output"
            + (f", and {start}" if ts.first_start else " from its first state")
            + f"; the first {BURNIN_SHARE:.0%} are dropped as burn-in (a common minimum). "
            "Check the chain's trace and set the burn-in it shows"
        )
        return BURNIN_SHARE, why
    if ts.first_start and ts.n_trees > 1:
        return 1, f"{start}; it is dropped"
    if chain:
        return 0, (
            f"the trees are numbered chain states from {ts.names[0]}: the burn-in seems "
            "removed already; raise this if not"
        )
    return 0, ""


def proposed_kind(ts: TreeSurvey) -> tuple:
    """(trees.kind, why) from what the file looks like."""
    if ts.chain:
        return "posterior", "numbered chain states: a sampler's output"
    if ts.newick and ts.n_trees > 1:
        return "bootstrap", (
            "bare trees one per line, as bootstrap trees are written; change to posterior "
            "or other if they are not bootstrap trees"
        )
    return "posterior", "the default; change to bootstrap or other if the trees are not a sample"


def _trees_block(w, ts: TreeSurvey, file: str) -> None:
    w("trees:")
    w(f"  # Found: {ts.n_trees} tree(s), {len(ts.tips)} tips in the first.")
    if ts.features:
        w(f"  #   file holds: {'; '.join(ts.features)}.")
    rooted_note = (
        "all rooted"
        if not ts.unrooted
        else f"{len(ts.unrooted)} of {ts.n_trees} UNROOTED (their base splits three or more "
        "ways and no [&R] mark)"
    )
    w(f"  #   rooted: {rooted_note}")
    if ts.lengthless:
        w(
            "  #   branch lengths: none in any tree (bootstrap trees are often written so). "
            "Every model below uses branches: unit: each branch counts one unit of length, so "
            "rates are changes per speciation event, not per unit of time."
        )
    elif ts.without_lengths:
        w(
            f"  #   branch lengths: MISSING on some branches of {len(ts.without_lengths)} tree(s) "
            f"(first: tree {ts.without_lengths[0]}). The run will stop: give every branch a "
            "length, or none at all (then every model runs with branches: unit)."
        )
    else:
        w("  #   branch lengths: on every branch")
    n_rooted = ts.n_trees - len(ts.unrooted)
    if not ts.without_lengths and n_rooted == 0:
        w("  #   ultrametric: not judged (no tree is rooted)")
    elif not ts.without_lengths:
        w(
            "  #   ultrametric: "
            + (
                "yes (every tip equally far from the root)"
                if not ts.not_ultrametric
                else f"no, in {len(ts.not_ultrametric)} of {n_rooted} rooted tree(s): tips lie at "
                "different distances from the root. The models run on any branch lengths; rates are "
                "per unit of length, and the rate bounds (fitting) are scaled to each tree's "
                "root-to-tip height."
            )
        )
    if ts.other_tips:
        w(
            f"  #   WARNING: {len(ts.other_tips)} tree(s) have other tips than the first (first: tree "
            f"{ts.other_tips[0]}). The run will stop: every tree of a sample must have the same tips."
        )
    w(f"  file: {_y(file)}")
    kind, why = proposed_kind(ts)
    w(f"  # What the trees are (posterior, bootstrap or other): {why}.")
    w(f"  kind: {kind}")
    if ts.zero_length:
        w(
            f"  #   zero-length branches: in {len(ts.zero_length)} of {ts.n_trees} tree(s). Tips joined "
            "by them that differ in state make every model impossible on that tree (the run says "
            "so in its cautions); min_branch_length below lengthens such branches."
        )
    burnin, why = proposed_burnin(ts)
    w("  # Trees dropped from the start of the file: a fraction below 1 (0.1 = the first 10%)")
    w("  # or a count. Set it if the file still holds the burn-in of the tree search.")
    if why:
        w(f"  # Proposed: {why}.")
    w(f"  burnin: {burnin:g}")
    w("  # Keep every n-th tree after burn-in.")
    w("  thin: 1")
    w("  # Draw this many trees (seeded) from those left; null keeps them all.")
    w("  sample: null")
    w("  # Trees fitted by one job: auto chooses it from the trees, the fits per tree and the")
    w("  # cores (or cluster jobs); a number is used as given.")
    w("  per_job: auto")
    w("  # Branches shorter than this (in the trees' own units) are lengthened to it; 0 keeps")
    w("  # the trees as they are.")
    w("  min_branch_length: 0")
    outgroup = "  # it instead, e.g.  root: {outgroup: [" + ", ".join(ts.tips[:2]) + "]}"
    if ts.unrooted and ts.lengthless:
        w("  # Your trees are unrooted, and trait models need a root. Without lengths, the")
        w("  # midpoint is taken on one unit per branch: the root halves the longest tip-to-tip")
        w("  # path counted in branches (nothing else in such trees says where the root is).")
        w("  # If you know an outgroup, root on it instead, e.g.")
        w("  #   root: {outgroup: [" + ", ".join(ts.tips[:2]) + "]}")
        w("  root: midpoint")
    elif ts.unrooted:
        w("  # Your trees are unrooted, and trait models need a root: they are rooted at the")
        w("  # midpoint of each tree's longest tip-to-tip path. If you know an outgroup, root on")
        w(outgroup)
        w("  root: midpoint")
    else:
        w("  # How to root the trees: null (as written), midpoint, or {outgroup: [taxon, ...]}.")
        w("  root: null")


def _traits_block(w, tab: TableSurvey, file: str) -> None:
    w("traits:")
    w(f"  file: {_y(file)}")
    w(f"  taxon_column: {_y(tab.taxon_column)}")
    w(f"  # Taxa: {tab.matched} in both the table and the trees.")
    if tab.renamed:
        first = next(iter(tab.renamed.items()))
        w(
            f"  #   {len(tab.renamed)} of them written with spaces where the trees have "
            f"underscores or the reverse (e.g. '{first[0]}' = '{first[1]}'): in unquoted "
            "Newick and NEXUS names an underscore stands for a space, and the run matches them "
            "so (the data check lists them)."
        )
    if tab.table_only:
        w(
            f"  #   {len(tab.table_only)} row(s) of the table are in no tree and are not used: "
            f"{_listing(tab.table_only)}"
        )
    if tab.trees_only:
        w(
            f"  #   {len(tab.trees_only)} tree tip(s) have no row in the table: "
            f"{_listing(tab.trees_only)}"
        )
    w("  # Trait columns found (states: taxa known to be in that state; missing: unknown cells;")
    w("  # ambiguous: cells naming several states). Columns left out are listed with the reason.")
    for s in tab.surveys.values():
        counts = (
            ", ".join(f"{k} {v}" for k, v in s.counts.items())
            if len(s.states) <= MAX_STATES
            else f"{len(s.states)} distinct values"
        )
        tail = f"; ambiguous {s.ambiguous}" if s.ambiguous else ""
        w(
            f"  #   {s.name}: {counts}; missing {s.missing}{tail}"
            if s.states
            else f"  #   {s.name}:"
        )
        if s.column and s.column != s.name:
            w(f"  #     column '{s.column}' is analysed as {s.name} (a name fit for file names)")
        if not s.use:
            w(f"  #     left out: {s.why_not}")
    w(f"  columns: {_y([s.name for s in tab.used])}")
    w('  # Cells meaning "unknown" (counted as any state).')
    if tab.extra_missing:
        w(
            f"  # {', '.join(tab.extra_missing)} found in the table and read as unknown; remove "
            "from this list any that is a real state."
        )
    w(f"  missing: {_y(tab.missing)}")
    w("  # Separates the possible states of an ambiguous or polymorphic cell: a|b")
    if tab.separator != "|":
        w(
            f"  # Found: cells such as a{tab.separator}b joining states seen on their own (in "
            f"{', '.join(tab.combined[tab.separator])}): read as polymorphic, one taxon "
            "possibly in either state, not as states of their own."
        )
    elif len(tab.combined) > 1:
        w(
            f"  # Found cells joining states with several characters ({' '.join(tab.combined)}):"
            " choose the one meaning 'either state'; the others stay states of their own."
        )
    w(f"  separator: {_y(tab.separator)}")
    numeric = {s.name: s.states for s in tab.used if _numeric(s.states)}
    w("  # State order per trait (default: sorted labels), e.g.  size: [small, medium, large]")
    if numeric:
        w("  # Counts are put in numeric order (the ordered model below follows it).")
        inner = ", ".join(f"{_y(n)}: {_y(sorted(st, key=int))}" for n, st in numeric.items())
        w(f"  order: {{{inner}}}")
    else:
        w("  order: {}")
    if tab.trees_only:
        w("  # Tree tips without a row are treated as unknown in every trait (set error to stop")
        w("  # instead, or add rows with '?' to the table).")
        w("  absent_taxa: missing")
    else:
        w("  # A tree tip with no row in the table: error (stop) or missing (unknown).")
        w("  absent_taxa: error")


def _ancestral_block(w, both: list) -> None:
    w("# Ancestral states at every node (marginal) and stochastic maps of the changes.")
    w("ancestral:")
    w("  enabled: true")
    w("  # average (Akaike-weighted over the models), best (per tree), or a model name")
    w("  model: average")
    w("  # Stochastic maps per tree.")
    w("  maps: 100")
    w(
        "  # Named clades to report, e.g.  my_group: {mrca_of: ["
        + ", ".join(both[:1] + both[-1:])
        + "]}"
    )
    w("  clades: {}")
    w("  reference_tree: null")


def _summary(ts: TreeSurvey, tab: TableSurvey, trees_file, traits_file) -> list:
    """What init found, in three lines for the terminal."""
    burnin, _ = proposed_burnin(ts)
    lengths = ""
    if ts.lengthless:
        lengths = ", no branch lengths -> branches: unit"
    elif ts.without_lengths:
        lengths = ", BRANCH LENGTHS MISSING on some branches (the run will stop)"
    used = tab.used
    return [
        f"trees   {trees_file}: {ts.n_trees} tree(s), {len(ts.tips)} tips, "
        + ("rooted" if not ts.unrooted else f"{len(ts.unrooted)} unrooted -> root: midpoint")
        + lengths
        + (
            ""
            if ts.without_lengths or len(ts.unrooted) == ts.n_trees
            else (", ultrametric" if not ts.not_ultrametric else ", not ultrametric")
        )
        + (f", burn-in {burnin:g} proposed" if burnin else ""),
        f"traits  {traits_file}: {len(tab.taxa)} rows, taxon column '{tab.taxon_column}', "
        f"{len(used)} trait(s): {', '.join(s.name for s in used)}"
        + (f", separator '{tab.separator}'" if tab.separator != "|" else "")
        + "".join(f"; left out '{s.name}' ({s.short})" for s in tab.surveys.values() if not s.use),
        f"taxa    {tab.matched} matched"
        + (f" ({len(tab.renamed)} with underscores for spaces)" if tab.renamed else "")
        + (
            f", {len(tab.trees_only)} in the trees only -> absent_taxa: missing"
            if tab.trees_only
            else ""
        )
        + (f", {len(tab.table_only)} in the table only (not used)" if tab.table_only else ""),
    ]


def _numeric(states) -> bool:
    """Three or more states, every one a whole number: a count, ordered by its numbers."""
    return len(states) >= 3 and all(re.fullmatch(r"-?\d+", s) for s in states)


def _near_constant(s: TraitSurvey) -> bool:
    """One taxon or none differs from the rest: the data bound one rate at most."""
    observed = [v for v in s.counts.values() if v > 0]
    return len(observed) >= 2 and min(observed) <= 1


def _models(w, used: list, lengthless: bool = False) -> None:
    unit = "    branches: unit" if lengthless else None
    quiet = [s for s in used if _near_constant(s)]
    multi = [s.name for s in used if len(s.states) >= 3 and s not in quiet]
    free = [
        s
        for s in used
        if len(s.states) <= UNCONSTRAINED_MAX_STATES
        and s not in quiet
        and 3 * len(s.states) * (len(s.states) - 1) <= sum(s.counts.values()) + s.ambiguous
    ]
    w("# Candidate models, compared on every tree. Built-in kinds apply to every trait unless")
    w("# applies_to narrows them:")
    w("#   equal: one rate for every change; symmetric: i->j and j->i share a rate;")
    w("#   unconstrained: every change its own rate; custom: the changes you list.")
    w("#   root: uniform (default) | stationary | data_weighted | a state label")
    if lengthless:
        w("#   branches: unit: every branch one unit of length, as the trees have none.")
    if quiet:
        w(
            f"# Only one taxon differs from the rest in {', '.join(s.name for s in quiet)}: such "
            "a trait bounds one rate at most, so only one_rate is fitted to it."
        )
    w("models:")
    w("  one_rate:")
    w("    kind: equal")
    if unit:
        w(unit)
    if multi:
        w("  # On two states symmetric is the same model as equal, so it is asked for the traits")
        w("  # with three or more states only.")
        w("  mirrored:")
        w("    kind: symmetric")
        w(f"    applies_to: {_y(multi)}")
        if unit:
            w(unit)
    if free:
        w("  # Every change its own rate: k(k-1) rates for k states. Asked for traits with at most")
        w(f"  # {UNCONSTRAINED_MAX_STATES} states and at least three taxa with data per rate.")
        w("  free:")
        w("    kind: unconstrained")
        if len(free) < len(used):
            w(f"    applies_to: {_y([s.name for s in free])}")
        if unit:
            w(unit)
    counts = [s for s in used if _numeric(s.states) and s not in quiet]
    for s in counts:
        chain = sorted(s.states, key=int)
        w(f"  # '{s.name}' is a count: one step at a time, up and down (an ordered chain).")
        w(f"  {s.name}_stepwise:")
        w("    kind: custom")
        w(f"    applies_to: [{_y(s.name)}]")
        w("    transitions:")
        w(f'      "{" -> ".join(chain)}": up')
        w(f'      "{" -> ".join(reversed(chain))}": down')
        if unit:
            w(unit)
    words = [n for n in multi if n not in {s.name for s in counts}]
    if words:
        s = next(x for x in used if x.name == words[0])
        w("  # An ordered model (one step at a time) is not guessed from words. If the states")
        w(f"  # of '{s.name}' form a scale, put them in that order under traits.order")
        w(f"  # ({s.name}: [{', '.join(s.states)}] here is only the sorted order) and add:")
        w(f"  # {s.name}_stepwise:")
        w("  #   kind: custom")
        w(f"  #   applies_to: [{s.name}]")
        w("  #   transitions:")
        w('  #     "<first> -> <second> -> ... -> <last>": up')
        w('  #     "<last> -> ... -> <second> -> <first>": down')


def _pairs(w, used: list, lengthless: bool = False) -> None:
    candidates = sorted(
        (
            (len(a.states) * len(b.states), i, j, a, b)
            for i, a in enumerate(used)
            for j, b in enumerate(used)
            if i < j
        ),
        key=lambda x: x[:3],
    )
    candidates = [c for c in candidates if c[0] <= 12]
    w("# Do two traits evolve together? A pair is fitted on its joint states (first+second)")
    w("# under each hypothesis: independent, dependent, first_depends_on_second,")
    w("# second_depends_on_first; likelihood-ratio tests compare the nested ones.")
    if lengthless:
        w("# (pairs use the trees' branch lengths, which these trees lack)")
    elif candidates:
        _, _, _, a, b = candidates[0]
        w("# For example (remove the '# ' to ask for it):")
        w("# pairs:")
        w(f"#   {a.name}_with_{b.name}:")
        w(f"#     traits: [{a.name}, {b.name}]")
        w("#     hypotheses: [independent, dependent]")
        w("#     bootstrap: 0          # parametric-bootstrap replicates per test and tree")
    else:
        w("# (no two traits here have a joint space of at most 12 states)")
    w("pairs: {}")


def write_starter(
    trees_file, traits_file, taxon_column=None, output="my_config.yaml", force: bool = False
) -> tuple:
    """Write the starting config; returns (Starter, the command to run next)."""
    from .jobs.analyses import check_config

    output = Path(output)
    if output.exists() and not force:
        raise InputError(
            f"'{output}' exists already; choose another --output, or add --force to replace it."
        )
    cwd = Path.cwd().resolve()
    in_repo = (cwd / "Snakefile").is_file() and cwd == REPO.resolve()
    stem = re.sub(r"[^A-Za-z0-9_.-]", "_", output.stem) or "my_run"
    starter = starting_config(trees_file, traits_file, taxon_column, stem, base=REPO)
    # the workflow's own check of what was written (a mistake here is mkforest's, not the user's)
    import yaml

    config = yaml.safe_load(starter.text)
    here = Path.cwd()
    try:
        import os

        os.chdir(REPO)
        check_config(config, f"config written for '{output}'")
    finally:
        os.chdir(here)
    output.parent.mkdir(parents=True, exist_ok=True)
    output.write_text(starter.text)
    target = _config_path(output, REPO) if in_repo else str(output.resolve())
    command = f"make run CONFIG={target}" if in_repo else f"make -C {REPO} run CONFIG={target}"
    return starter, command

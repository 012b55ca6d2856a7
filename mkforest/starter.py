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

from .data.config import SAFE_NAME
from .data.traits import DEFAULT_MISSING, read_traits
from .data.trees import looks_unrooted, parse_tree_file
from .errors import InputError, did_you_mean

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
    without_lengths: list = field(default_factory=list)
    not_ultrametric: list = field(default_factory=list)
    other_tips: list = field(default_factory=list)  # trees whose tips differ from the first
    zero_length: list = field(default_factory=list)  # trees with a branch of length 0


def survey_trees(path) -> TreeSurvey:
    """What the run needs to know about a tree file, tree by tree."""
    trees = parse_tree_file(path)
    first = None
    out = TreeSurvey(len(trees), ())
    for i, tree in enumerate(trees):
        tips = tuple(sorted(nd.taxon.label for nd in tree.leaf_node_iter() if nd.taxon))
        if first is None:
            first = tips
            out.tips = tips
        elif tips != first:
            out.other_tips.append(i)
        if looks_unrooted(tree):
            out.unrooted.append(i)
        edges = [nd.edge.length for nd in tree.preorder_node_iter() if nd is not tree.seed_node]
        if any(x is None for x in edges):
            out.without_lengths.append(i)
            continue
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
    tipset = set(tips)
    hits = [
        len(tipset.intersection(r[i].strip() for r in rows if len(r) > i))
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


def survey_traits(path: Path, taxon_column: str, header: list, missing: list) -> tuple:
    """({column: TraitSurvey}, taxa in the table)."""
    columns = [c for c in header if c != taxon_column]
    if not columns:
        raise InputError(
            f"trait table '{path}' has no column besides the taxon column '{taxon_column}'."
        )
    read_traits(path, taxon_column, [], missing)  # the table as a whole: rows, taxa, fields
    out = {}
    for name in columns:
        try:
            t = read_traits(path, taxon_column, [name], missing)[name]
        except InputError as exc:
            # a column the workflow would refuse (states differing only in case, a cell
            # mixing a missing code with states): left out, with the workflow's sentence
            out[name] = TraitSurvey(
                name, (), {}, 0, 0, False, str(exc).rstrip("."), "the workflow would refuse it"
            )
            continue
        counts = t.state_counts()
        n_missing = int(t.possible.all(axis=1).sum())
        observed = [s for s in t.states if counts[s] > 0]
        why = short = ""
        if not SAFE_NAME.match(name):
            short = "name unfit for file names"
            why = (
                "its name has characters that cannot be used in file names; rename the "
                "column with letters, digits, '_', '-' or '.' to analyse it"
            )
        elif t.k > MAX_STATES:
            short = f"{t.k} distinct values"
            why = (
                f"{t.k} distinct values: more like a label or a measurement than a "
                f"categorical trait (an Mk model of k states has up to k(k-1) rates)"
            )
        elif len(observed) < 2:
            short = f"only state '{observed[0]}' observed" if observed else "no observed value"
            why = short + ": nothing changes, so there is nothing to fit"
        out[name] = TraitSurvey(
            name, t.states, counts, n_missing, t.n_ambiguous(), not why, why, short
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


def starting_config(
    trees_file, traits_file, taxon_column=None, run: str = "my_run", base: Path | None = None
) -> Starter:
    """The commented starting config for these files (paths written relative to ``base``,
    the folder the workflow will run in)."""
    base = Path(base) if base is not None else REPO
    trees_file, traits_file = Path(trees_file), Path(traits_file)
    ts = survey_trees(trees_file)
    taxon_column = choose_taxon_column(traits_file, ts.tips, taxon_column)
    header = _read_table(traits_file)[0]
    extra_missing = _missing_lookalikes(traits_file, taxon_column)
    missing = list(DEFAULT_MISSING) + extra_missing
    surveys, taxa = survey_traits(traits_file, taxon_column, header, missing)
    used = [s for s in surveys.values() if s.use]
    if not used:
        reasons = "; ".join(f"'{s.name}': {s.why_not}" for s in surveys.values())
        raise InputError(f"trait table '{traits_file}': no column can be analysed ({reasons}).")
    tips, table = set(ts.tips), set(taxa)
    trees_only, table_only = sorted(tips - table), sorted(table - tips)
    matched = len(tips & table)
    if matched == 0:
        raise InputError(
            f"no taxon of trait table '{traits_file}' (column '{taxon_column}') is a "
            f"tip of the trees in '{trees_file}'; check the taxon column and the "
            f"spelling of the names (a tip: '{ts.tips[0]}', a row: '{taxa[0]}')."
        )
    L = []

    def w(line: str) -> None:
        """Append a line; a long comment wraps under its own indentation."""
        m = re.match(r"^(\s*#\s*)", line)
        if not m or len(line) <= WIDTH:
            L.append(line)
            return
        lead = m.group(1)
        L.extend(
            textwrap.wrap(
                line[len(lead) :],
                WIDTH,
                initial_indent=lead,
                subsequent_indent=lead + "  ",
                break_on_hyphens=False,
            )
        )

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
    w("trees:")
    w(f"  # Found: {ts.n_trees} tree(s), {len(ts.tips)} tips in the first.")
    rooted_note = (
        "all rooted"
        if not ts.unrooted
        else f"{len(ts.unrooted)} of {ts.n_trees} UNROOTED (their base splits three or more "
        "ways and no [&R] mark)"
    )
    w(f"  #   rooted: {rooted_note}")
    w(
        "  #   branch lengths: "
        + (
            "on every branch"
            if not ts.without_lengths
            else f"MISSING in {len(ts.without_lengths)} tree(s) (first: tree {ts.without_lengths[0]}). The run "
            "will stop: every branch needs a length (use dated or otherwise measured trees)."
        )
    )
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
    w(f"  file: {_y(_config_path(trees_file, base))}")
    if ts.zero_length:
        w(
            f"  #   zero-length branches: in {len(ts.zero_length)} of {ts.n_trees} tree(s). Tips joined "
            "by them that differ in state make every model impossible on that tree (the run says "
            "so in its cautions); min_branch_length below lengthens such branches."
        )
    w("  # Trees dropped from the start of the file: a fraction below 1 (0.1 = the first 10%)")
    w("  # or a count. Set it if the file still holds the burn-in of the tree search.")
    w("  burnin: 0")
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
    if ts.unrooted:
        w("  # Your trees are unrooted, and trait models need a root: they are rooted at the")
        w("  # midpoint of each tree's longest tip-to-tip path. If you know an outgroup, root on")
        w("  # it instead, e.g.  root: {outgroup: [" + ", ".join(ts.tips[:2]) + "]}")
        w("  root: midpoint")
    else:
        w("  # How to root the trees: null (as written), midpoint, or {outgroup: [taxon, ...]}.")
        w("  root: null")
    w("")
    w("traits:")
    w(f"  file: {_y(_config_path(traits_file, base))}")
    w(f"  taxon_column: {_y(taxon_column)}")
    w(f"  # Taxa: {matched} in both the table and the trees.")
    if table_only:
        w(
            f"  #   {len(table_only)} row(s) of the table are in no tree and are not used: "
            f"{_listing(table_only)}"
        )
    if trees_only:
        w(f"  #   {len(trees_only)} tree tip(s) have no row in the table: {_listing(trees_only)}")
    w("  # Trait columns found (states: taxa known to be in that state; missing: unknown cells;")
    w("  # ambiguous: cells naming several states). Columns left out are listed with the reason.")
    for s in surveys.values():
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
        if not s.use:
            w(f"  #     left out: {s.why_not}")
    w(f"  columns: {_y([s.name for s in used])}")
    w('  # Cells meaning "unknown" (counted as any state).')
    if extra_missing:
        w(
            f"  # {', '.join(extra_missing)} found in the table and read as unknown; remove from this"
        )
        w("  # list any that is a real state.")
    w(f"  missing: {_y(missing)}")
    w("  # Separates the possible states of an ambiguous or polymorphic cell: a|b")
    w('  separator: "|"')
    w("  # State order per trait (default: sorted labels), e.g.  size: [small, medium, large]")
    w("  order: {}")
    if trees_only:
        w("  # Tree tips without a row are treated as unknown in every trait (set error to stop")
        w("  # instead, or add rows with '?' to the table).")
        w("  absent_taxa: missing")
    else:
        w("  # A tree tip with no row in the table: error (stop) or missing (unknown).")
        w("  absent_taxa: error")
    w("")
    _models(w, used)
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
    _pairs(w, used)
    w("")
    w("# Ancestral states at every node (marginal) and stochastic maps of the changes.")
    w("ancestral:")
    w("  enabled: true")
    w("  # average (Akaike-weighted over the models), best (per tree), or a model name")
    w("  model: average")
    w("  # Stochastic maps per tree.")
    w("  maps: 100")
    both = sorted(tips & table)
    w(
        "  # Named clades to report, e.g.  my_group: {mrca_of: ["
        + ", ".join(both[:1] + both[-1:])
        + "]}"
    )
    w("  clades: {}")
    w("  reference_tree: null")
    summary = [
        f"trees   {trees_file}: {ts.n_trees} tree(s), {len(ts.tips)} tips, "
        + ("rooted" if not ts.unrooted else f"{len(ts.unrooted)} unrooted -> root: midpoint")
        + ("" if not ts.without_lengths else ", BRANCH LENGTHS MISSING (the run will stop)")
        + (
            ""
            if ts.without_lengths or len(ts.unrooted) == ts.n_trees
            else (", ultrametric" if not ts.not_ultrametric else ", not ultrametric")
        ),
        f"traits  {traits_file}: {len(taxa)} rows, taxon column '{taxon_column}', "
        f"{len(used)} trait(s): {', '.join(s.name for s in used)}"
        + "".join(f"; left out '{s.name}' ({s.short})" for s in surveys.values() if not s.use),
        f"taxa    {matched} matched"
        + (f", {len(trees_only)} in the trees only -> absent_taxa: missing" if trees_only else "")
        + (f", {len(table_only)} in the table only (not used)" if table_only else ""),
    ]
    return Starter("\n".join(L) + "\n", summary, run)


def _models(w, used: list) -> None:
    multi = [s.name for s in used if len(s.states) >= 3]
    free = [
        s
        for s in used
        if len(s.states) <= UNCONSTRAINED_MAX_STATES
        and 3 * len(s.states) * (len(s.states) - 1) <= sum(s.counts.values()) + s.ambiguous
    ]
    w("# Candidate models, compared on every tree. Built-in kinds apply to every trait unless")
    w("# applies_to narrows them:")
    w("#   equal: one rate for every change; symmetric: i->j and j->i share a rate;")
    w("#   unconstrained: every change its own rate; custom: the changes you list.")
    w("#   root: uniform (default) | stationary | data_weighted | a state label")
    w("models:")
    w("  one_rate:")
    w("    kind: equal")
    if multi:
        w("  # On two states symmetric is the same model as equal, so it is asked for the traits")
        w("  # with three or more states only.")
        w("  mirrored:")
        w("    kind: symmetric")
        w(f"    applies_to: {_y(multi)}")
    if free:
        w("  # Every change its own rate: k(k-1) rates for k states. Asked for traits with at most")
        w(f"  # {UNCONSTRAINED_MAX_STATES} states and at least three taxa with data per rate.")
        w("  free:")
        w("    kind: unconstrained")
        if len(free) < len(used):
            w(f"    applies_to: {_y([s.name for s in free])}")
    if multi:
        s = next(x for x in used if x.name in multi)
        chain = " -> ".join(s.states)
        back = " -> ".join(reversed(s.states))
        w("  # An ordered model (one step at a time) is not guessed from the labels. If the states")
        w(f"  # of '{s.name}' form a scale, put them in that order under traits.order")
        w(f"  # ({s.name}: [{', '.join(s.states)}] here is only the sorted order) and add:")
        w(f"  # {s.name}_stepwise:")
        w("  #   kind: custom")
        w(f"  #   applies_to: [{s.name}]")
        w("  #   transitions:")
        w(f'  #     "{chain}": up')
        w(f'  #     "{back}": down')


def _pairs(w, used: list) -> None:
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
    if candidates:
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

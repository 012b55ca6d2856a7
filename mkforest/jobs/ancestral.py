"""Ancestral states and stochastic maps across a tree sample, as workflow jobs.

Three steps, each a plain function the workflow's scripts call:

1. ``target_clades``: which clades to report -- every clade of the summary tree
   (majority-rule consensus, or the user's reference tree) and the clades named
   in the config -- with their frequency in the tree sample.
2. ``chunk_ancestral``: for each tree of one chunk and one analysis, the model
   (one named model, the best model on that tree, or every model weighted by
   its Akaike weight on that tree), the marginal state probabilities at each
   target clade present in the tree, and N stochastic maps seeded by
   derive_seed(seed, tree index, analysis, "map").
3. ``summarise_chunks``: tidy tables across trees (mean probability and the
   central 95% interval across trees; mean change counts and times in state
   with the central 95% interval over all maps of all trees), each row with a
   plain-words ``caution`` where the numbers could mislead.

A map drawn under a fit with a rate the data do not bound from above (at the
upper bound, or with a 95% likelihood interval reaching it) is left out of the
change counts and times in state, and counted (``n_maps_at_upper``): such a
rate is only known to be large, and the number of changes a map draws grows
with it without limit (1,848 changes on a 90-tip tree were seen), so those
counts measure the optimiser's box, not the data. State probabilities
are kept: as a rate grows without bound the transition probabilities, and so
the marginal probabilities, approach a limit; they carry a caution instead.

A clade's probabilities come only from the trees that contain it (for a named
clade: the MRCA of its taxa, present in every tree).
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd

from ..data.clades import (
    check_same_taxa,
    clade_key,
    consensus_names,
    count_clades,
    find_mrca,
    majority_consensus,
    mask_of,
    node_clades,
    node_masks,
    taxon_bits,
)
from ..engine.ancestral import ImpossibleData, averaged_probabilities, marginal_probabilities
from ..engine.branches import tree_of_fit
from ..engine.compare import model_weights
from ..engine.mapping import mixed_stochastic_maps
from ..engine.treatments import parse_label
from ..errors import InputError
from ..seeds import derive_seed

CLADE_COLUMNS = [
    "tree_set",
    "clade",
    "kind",
    "n_tips",
    "frequency",
    "n_trees_with_clade",
    "key",
    "members",
    "summary_tree",
]
# kinds of clade that are nodes of the summary tree (matched exactly in every tree)
TREE_KINDS = ("consensus", "sampled", "reference")
FEW_TREES = 20  # fewer trees than this: intervals across trees are rough
RARE_CLADE = 0.5  # a clade in fewer trees than this fraction is flagged
WEAK_WEIGHT = 0.1  # non-converged / at-bound fits carrying more weight than this are flagged


# --------------------------------------------------------------------------- 1. target clades


def most_supported_tree(trees, counts, bits):
    """(position in ``trees``, log product of clade frequencies): the sampled tree whose
    clades have the highest product of their frequencies in the sample (common practice
    for choosing one sampled tree to summarise a posterior sample). Ties go to the first
    tree in the file; the root (in every tree) does not count."""
    n = len(trees)
    best, best_score = 0, -np.inf
    for i, tree in enumerate(trees):
        masks = node_masks(tree, bits)[tree.n_tips : -1]
        score = float(sum(np.log(counts[m] / n) for m in masks))
        if score > best_score + 1e-12:
            best, best_score = i, score
    return best, best_score


def target_clades(
    trees, named=(), reference=None, reference_source="reference tree", summary="consensus"
):
    """(clade table, summary tree).

    named: list of clades.NamedClade. reference: a TreeArrays to use instead of
    the majority-rule consensus. summary: "consensus" (majority-rule consensus,
    polytomies where no clade is in more than half of the trees) or
    "most_supported" (the sampled tree with the highest product of clade
    frequencies). The table has one row per clade: ``kind`` is consensus /
    sampled / reference (a node of the summary tree), named (listed members;
    the MRCA is used and monophyly counted) or named_mrca (MRCA of a few taxa);
    ``summary_tree`` says in words which tree the clades come from; ``tree_set`` is the set
    whose trees gave them and their frequency (``trees`` is one set: the first).
    """
    taxa = check_same_taxa(trees)
    bits = taxon_bits(taxa)
    counts = count_clades(trees, bits)
    n = len(trees)
    if reference is not None:
        ref_taxa = set(reference.tip_labels)
        if ref_taxa != set(taxa):
            extra = sorted(ref_taxa - set(taxa))
            lacking = sorted(set(taxa) - ref_taxa)
            what = (
                f"has taxon '{extra[0]}', which is in none of the sampled trees"
                if extra
                else f"lacks taxon '{lacking[0]}' of the sampled trees"
            )
            raise InputError(
                f"{reference_source} (ancestral.reference_tree) {what}; the reference "
                "tree must have exactly the taxa of the tree sample."
            )
        summary, kind = reference, "reference"
        described = f"{reference_source}"
    elif summary == "most_supported":
        pick, _ = most_supported_tree(trees, counts, bits)
        summary, kind = trees[pick], "sampled"
        described = (
            f"sampled tree {trees[pick].index} (highest product of clade frequencies "
            f"among {n} trees)"
        )
    else:
        summary, kind = majority_consensus(trees), "consensus"
        n_clades = summary.n_nodes - summary.n_tips - 1
        described = f"majority-rule consensus of {n} trees" + (
            "; no clade is in more than half of them, so it is unresolved" if n_clades == 0 else ""
        )
    names = consensus_names(summary)
    sets = node_clades(summary)
    rows = {}
    for v in range(summary.n_tips, summary.n_nodes):
        m = mask_of(sets[v], bits)
        rows[m] = dict(
            tree_set=trees[0].tree_set,
            clade=names[v],
            kind=kind,
            n_tips=len(sets[v]),
            frequency=counts[m] / n,
            n_trees_with_clade=counts[m],
            key=clade_key(sets[v]),
            members=",".join(sorted(sets[v])),
            summary_tree=described,
        )
    out = list(rows.values())
    for nc in named:
        m = mask_of(nc.members, bits)
        if not nc.mrca_only and m in rows:
            # a named clade that is also a node of the summary tree: one row, the config's name
            rows[m].update(clade=nc.name, kind="named")
            continue
        out.append(
            dict(
                tree_set=trees[0].tree_set,
                clade=nc.name,
                kind="named_mrca" if nc.mrca_only else "named",
                n_tips=len(nc.members),
                frequency=counts[m] / n if not nc.mrca_only else np.nan,
                n_trees_with_clade=counts[m] if not nc.mrca_only else n,
                key=clade_key(nc.members),
                members=",".join(sorted(nc.members)),
                summary_tree=described,
            )
        )
    table = pd.DataFrame(out, columns=CLADE_COLUMNS)
    dup = table["clade"][table["clade"].duplicated()]
    if len(dup):
        raise InputError(
            f"ancestral.clades: the name '{dup.iloc[0]}' is used twice (a named clade "
            "and a consensus clade share it); choose another name."
        )
    return table, summary


# --------------------------------------------------------------------------- 2. one chunk


def q_from_rate_rows(rows: pd.DataFrame, states) -> np.ndarray:
    """Rate matrix from tidy rate rows (from_state, to_state, rate) of one fit."""
    index = {s: i for i, s in enumerate(states)}
    k = len(states)
    Q = np.zeros((k, k))
    for a, b, r in zip(rows["from_state"], rows["to_state"], rows["rate"]):
        Q[index[str(a)], index[str(b)]] = float(r)
    np.fill_diagonal(Q, -Q.sum(axis=1))
    return Q


def resolve_choice(choice: str, model_names, analysis: str) -> tuple:
    """(choice used for this analysis, caution text). A named model that does not apply to
    this analysis falls back to the Akaike-weight average, and says so."""
    if choice in ("average", "best") or choice in model_names:
        return choice, ""
    return "average", (
        f"model '{choice}' (ancestral.model) is not fitted for '{analysis}'; "
        "the Akaike-weight average of its models is used instead"
    )


def fits_on_tree(tree, models: dict, fit_by: dict, rate_groups: dict, analysis: str, criterion):
    """Per model (in ``models`` order), what one tree's fits give the ancestral stage:
    (criterion values, rate matrices, roots, converged, bound, the tree of each fit, ln L).

    ``bound``: the fit has a rate the data do not bound from above (at the upper bound, or
    a 95% interval reaching it) or its branch parameter at the edge of its box: its maps
    are not drawn (their changes grow with the box, not the data). A rate at the lower
    bound is a change the data do not support (rate ~ 0), which maps handle. An impossible
    fit (ln L = -inf) has no rates and no branch parameter: weight 0, the given tree."""
    crit, Qs, roots, conv, bound, own, lls = [], [], [], [], [], [], []
    for name, (model, root) in models.items():
        row = fit_by.get((name, tree.index))
        if row is None:
            raise InputError(
                f"analysis '{analysis}': no fit of model '{name}' for tree "
                f"{tree.index} in this chunk; rerun the fit jobs."
            )
        crit.append(float(row[criterion]) if pd.notna(row[criterion]) else np.inf)
        g = rate_groups.get((name, tree.index))
        k = len(model.states)
        Qs.append(q_from_rate_rows(g, model.states) if g is not None else np.zeros((k, k)))
        roots.append(root)
        lls.append(float(row["log_likelihood"]))
        own.append(
            tree_of_fit(tree, row.get("branches"), row.get("branch_parameter"))
            if np.isfinite(lls[-1])
            else tree
        )
        conv.append(str(row["converged"]).lower() == "true")
        bound.append(
            any(
                str(row.get(col, "") or "").strip() not in ("", "nan")
                for col in ("at_upper", "open_upper")
            )
            or branch_at_box_edge(row.get("branches"), row.get("branch_at_bound"))
        )
    return crit, Qs, roots, conv, bound, own, lls


def _hidden_probabilities(model, own, Qs, roots, crit, X, names, name):
    """Probabilities of every combined state state@class at every node under one
    hidden-class model alone (None where its fit is impossible on this tree)."""
    i = names.index(name)
    if not np.isfinite(crit[i]):
        return None
    try:
        return marginal_probabilities(own[i], model.expand_tips(X), Qs[i], roots[i], model.states)
    except ImpossibleData:
        return None


def chunk_ancestral(
    trees,
    trait,
    models: dict,
    fits: pd.DataFrame,
    rates: pd.DataFrame,
    clades: pd.DataFrame,
    analysis: str,
    choice: str,
    n_maps: int,
    seed: int,
    criterion: str = "aicc",
    absent: str = "error",
) -> dict:
    """Probabilities at the target clades and maps on every tree of a chunk.

    models: {model name: (RateModel, root)} in a fixed order; fits / rates: the
    chunk's fit rows and rate rows of every model of the analysis.
    Returns plain arrays (see the keys) for ``np.savez``.
    """
    names = list(models)
    states = tuple(trait.states)
    k = len(states)
    choice_used, choice_note = resolve_choice(choice, names, analysis)
    n_trees, n_clades = len(trees), len(clades)
    prob = np.full((n_trees, n_clades, k), np.nan)
    extra = np.full((n_trees, n_clades), -1, dtype=np.int64)
    counts = np.zeros((n_trees, n_maps, k, k), dtype=np.int32)
    dwell = np.full((n_trees, n_maps, k), np.nan)
    map_model = np.full((n_trees, n_maps), -1, dtype=np.int16)
    weights = np.zeros((n_trees, len(names)))
    unconverged = np.zeros(n_trees)
    at_bound = np.zeros(n_trees)
    model_at_upper = np.zeros((n_trees, len(names)), dtype=bool)
    skipped = np.zeros(n_trees, dtype=bool)
    impossible = np.zeros(n_trees, dtype=bool)  # every model's fit has ln L = -inf
    # clade in the tree (a named clade: its taxa monophyletic; a named MRCA: always),
    # on every tree, fitted or not: each tree set's clade frequencies come from here
    present = np.zeros((n_trees, n_clades), dtype=bool)

    # models with hidden rate classes: probabilities of every combined state state@class at
    # each clade under that model alone (the classes of different models do not match up)
    hidden = [n for n in names if models[n][0].n_classes > 1]
    combined = {n: np.full((n_trees, n_clades, models[n][0].k), np.nan) for n in hidden}

    fit_by = {(r["model"], int(r["tree"])): r for r in fits.to_dict("records")}
    rate_groups = {key: g for key, g in rates.groupby(["model", "tree"])}
    bits = taxon_bits(trees[0].tip_labels) if trees else {}
    members = [m.split(",") for m in clades["members"]]
    exact = [kind in TREE_KINDS for kind in clades["kind"]]
    masks = [mask_of(mem, bits) for mem in members] if trees else []

    mrca_only = np.array([kind == "named_mrca" for kind in clades["kind"]], dtype=bool)
    for t, tree in enumerate(trees):
        nm = node_masks(tree, bits)
        in_tree = set(nm)
        present[t] = [m in in_tree for m in masks] if masks else []
        present[t, mrca_only] = True
        X = trait.tip_partials(tree, absent=absent)
        crit, Qs, roots, conv, bound, own, lls = fits_on_tree(
            tree, models, fit_by, rate_groups, analysis, criterion
        )
        w = model_weights(crit, choice_used, names)
        if not (w > 0).any():
            skipped[t] = True
            impossible[t] = all(ll == -np.inf for ll in lls)
            continue
        weights[t] = w
        model_at_upper[t] = bound
        unconverged[t] = float(sum(wi for wi, c in zip(w, conv) if not c))
        at_bound[t] = float(sum(wi for wi, b in zip(w, bound) if b))
        mix = [
            (Q, r, wi, models[name][0], tr) for Q, r, wi, name, tr in zip(Qs, roots, w, names, own)
        ]
        try:
            p = averaged_probabilities(tree, X, mix, states)
        except (ImpossibleData, ValueError):
            skipped[t] = True
            continue
        per_model = {
            name: pm
            for name in hidden
            if (pm := _hidden_probabilities(models[name][0], own, Qs, roots, crit, X, names, name))
            is not None
        }
        where = {m: v for v, m in enumerate(nm)}
        for c in range(n_clades):
            if exact[c]:  # a node of the summary tree: used only where the tree has it
                v = where.get(masks[c])
                if v is None:
                    continue
                extra[t, c] = 0
            else:  # a named clade: its MRCA, present in every tree
                v, n_extra = find_mrca(tree, members[c])
                extra[t, c] = n_extra
            prob[t, c] = p[v]
            for name, pm in per_model.items():
                combined[name][t, c] = pm[v]
        if n_maps > 0:
            rng = np.random.default_rng(derive_seed(seed, tree.index, analysis, "map"))
            # maps under a fit the data do not bound are left out of every count
            # (bound_limited_maps): not drawn at all, as their cost grows with the rate
            ms = mixed_stochastic_maps(tree, X, mix, n_maps, rng, states, skip=bound)
            counts[t] = ms.counts
            dwell[t] = ms.dwell
            map_model[t] = ms.model
    return dict(
        tree=np.array([t.index for t in trees], dtype=np.int64),
        tree_set=np.array([t.tree_set for t in trees], dtype=str),
        present=present,
        prob=prob,
        extra=extra,
        counts=counts,
        dwell=dwell,
        map_model=map_model,
        weights=weights,
        unconverged_weight=unconverged,
        bound_weight=at_bound,
        model_at_upper=model_at_upper,
        skipped=skipped,
        impossible=impossible,
        states=np.array(json.dumps(list(states))),
        models=np.array(json.dumps(names)),
        clades=np.array(json.dumps(list(clades["clade"]))),
        choice=np.array(choice_used),
        choice_note=np.array(choice_note),
        hidden_models=np.array(json.dumps({n: list(models[n][0].states) for n in hidden})),
        **{f"combined::{n}": combined[n] for n in hidden},
    )


# --------------------------------------------------------------------------- 3. across chunks


def load_chunks(paths) -> dict:
    """Concatenate the arrays of an analysis's chunk files (tree order kept)."""
    parts = [dict(np.load(p)) for p in sorted(paths)]
    if not parts:
        raise ValueError("no chunk files")
    out = {}
    for key in parts[0]:
        if parts[0][key].ndim == 0:
            out[key] = parts[0][key].item() if parts[0][key].dtype.kind in "UO" else parts[0][key]
        else:
            out[key] = np.concatenate([p[key] for p in parts])
    for key in ("states", "models", "clades"):
        out[key] = json.loads(out[key])
    out["hidden_models"] = json.loads(out["hidden_models"]) if "hidden_models" in out else {}
    return out


def tree_set_slices(data: dict) -> list:
    """[(tree set, data of that set's trees only)] in the order the sets first appear.

    Every per-tree array (first axis the trees) is cut; the rest is shared."""
    if "tree_set" not in data or "present" not in data:
        raise ValueError(
            "ancestral chunk files without 'tree_set' or 'present' (written by an "
            "older mkforest): rerun the ancestral chunk jobs (snakemake --forcerun "
            "ancestral_chunk)"
        )
    sets = np.asarray(data["tree_set"]).astype(str)
    n = len(sets)
    out = []
    for ts in dict.fromkeys(sets.tolist()):
        keep = sets == ts
        out.append(
            (
                ts,
                {
                    k: (v[keep] if isinstance(v, np.ndarray) and v.ndim and len(v) == n else v)
                    for k, v in data.items()
                },
            )
        )
    return out


def clades_in_set(clades: pd.DataFrame, data: dict) -> pd.DataFrame:
    """The clade table with frequency and n_trees_with_clade counted on one set's trees
    (``data`` cut to the set): the clades are the first set's, their support is each set's own."""
    present = np.asarray(data["present"], dtype=bool)
    n = present.shape[0]
    out = clades.copy()
    counts = present.sum(axis=0) if n else np.zeros(len(clades), dtype=int)
    mrca = (out["kind"] == "named_mrca").to_numpy()
    out["n_trees_with_clade"] = np.where(mrca, n, counts)
    out["frequency"] = np.where(mrca, np.nan, counts / n if n else np.nan)
    return out


def _q(x, p):
    return float(np.quantile(x, p)) if len(x) else np.nan


def _common_cautions(data, n_total) -> list:
    notes = []
    used = ~data["skipped"]
    n_used = int(used.sum())
    n_impossible = int(np.asarray(data.get("impossible", np.zeros(0)), dtype=bool).sum())
    if n_impossible:
        notes.append(
            f"{n_impossible} of {n_total} trees skipped: the data are impossible there "
            "under every model (ln L = -inf; see tables/data_check.tsv)"
        )
    if n_used + n_impossible < n_total:
        notes.append(
            f"{n_total - n_used - n_impossible} of {n_total} trees skipped (no model "
            "could be fitted there, or the data are impossible under the chosen model)"
        )
    if n_used and n_used < FEW_TREES:
        notes.append(
            f"only {n_used} tree{'' if n_used == 1 else 's'}: intervals across trees are rough"
        )
    nc = int((data["unconverged_weight"][used] > WEAK_WEIGHT).sum())
    if nc:
        notes.append(
            f"on {nc} of {n_used} trees, fits carrying over {WEAK_WEIGHT:.0%} of the "
            "weight did not converge"
        )
    nb = int((data["bound_weight"][used] > WEAK_WEIGHT).sum())
    if nb:
        notes.append(
            f"on {nb} of {n_used} trees, fits carrying over {WEAK_WEIGHT:.0%} of the "
            "weight have a rate the data do not bound from above (a change too fast to "
            "estimate; maps from those fits are left out of the change counts)"
        )
    if data.get("choice_note"):
        notes.append(str(data["choice_note"]))
    return notes


def state_table(analysis: str, data: dict, clades: pd.DataFrame, n_total: int) -> pd.DataFrame:
    """ancestral_states rows of one analysis: one row per clade x state."""
    states, rows = data["states"], []
    common = _common_cautions(data, n_total)
    used = ~data["skipped"]
    for c, crow in enumerate(clades.to_dict("records")):
        p = data["prob"][used, c]
        present = np.isfinite(p[:, 0])
        p = p[present]
        n = int(present.sum())
        notes = []
        kind = crow["kind"]
        if kind in TREE_KINDS + ("named",):
            freq = crow["frequency"]
            if freq < RARE_CLADE:
                notes.append(
                    f"this clade is in only {freq:.0%} of the trees "
                    f"({crow['n_trees_with_clade']} of {n_total})"
                    + ("; probabilities come from those trees only" if kind != "named" else "")
                )
        if kind == "named":
            ex = data["extra"][used, c][present]
            bad = int((ex > 0).sum())
            if bad:
                notes.append(
                    f"the listed taxa are not monophyletic in {bad} of {n} trees; there "
                    f"their most recent common ancestor is used, which holds up to "
                    f"{int(ex.max())} other tips"
                )
        if kind == "named_mrca":
            size = data["extra"][used, c][present] + crow["n_tips"]
            if len(size) and size.min() != size.max():
                notes.append(
                    f"the ancestor of the listed taxa holds {int(size.min())} to "
                    f"{int(size.max())} tips across trees"
                )
        if n == 0:
            notes.append("absent from every tree analysed")
        if 0 < n < FEW_TREES:
            notes.append(f"only {n} tree contributes" if n == 1 else f"only {n} trees contribute")
        caution = "; ".join(notes + common)
        for i, s in enumerate(states):
            x = p[:, i] if n else np.array([])
            rows.append(
                dict(
                    analysis=analysis,
                    clade=crow["clade"],
                    clade_kind=kind,
                    clade_frequency=crow["frequency"],
                    n_trees=n,
                    state=s,
                    mean_probability=float(x.mean()) if n else np.nan,
                    probability_low95=_q(x, 0.025),
                    probability_high95=_q(x, 0.975),
                    model_choice=data["choice"],
                    caution=caution,
                )
            )
    return pd.DataFrame(rows)


def branch_at_box_edge(treatment, at_bound) -> bool:
    """True when a fit's estimated branch-length parameter sits at an edge of its search box
    (``treatment``: the fits.tsv label; the edges: the registry's ``box_edges``)."""
    try:
        kind = parse_label(treatment)
    except ValueError:
        return False
    return kind.free and str(at_bound or "").strip() in kind.kind.box_edges


def bound_limited_maps(data: dict) -> np.ndarray:
    """[trees, maps] True where a map was drawn under a fit with a rate the data do not bound
    from above (fits.tsv at_upper or open_upper), or with its branch-length parameter at an
    edge of its search box (``branch_at_box_edge``)."""
    if "model_at_upper" not in data:
        raise ValueError(
            "ancestral chunk files without 'model_at_upper' (written by an older "
            "mkforest): rerun the ancestral chunk jobs (snakemake --forcerun "
            "ancestral_chunk)"
        )
    flags = np.asarray(data["model_at_upper"], dtype=bool)  # [T, models]
    model = np.asarray(data["map_model"], dtype=np.int64)  # [T, M], -1: no map
    if model.size == 0:
        return np.zeros(model.shape, dtype=bool)
    padded = np.concatenate([flags, np.zeros((flags.shape[0], 1), dtype=bool)], axis=1)
    return np.take_along_axis(padded, np.where(model < 0, flags.shape[1], model), axis=1)


def _bound_caution(n_out: int, n_maps: int, n_trees_out: int, n_trees: int) -> list:
    if not n_out:
        return []
    if n_out == n_maps:
        return [
            f"every map ({n_maps}) was drawn under a fit with a rate the data do not bound "
            "from above: the change counts cannot be estimated from these data and are not "
            "given"
        ]
    return [
        f"{n_out} of {n_maps} maps (on {n_trees_out} of {n_trees} trees) were drawn under a "
        "fit with a rate the data do not bound from above (or a branch-length parameter at "
        "the edge of its range) and are left out: their counts grow with that rate, not "
        "with the data"
    ]


def transition_tables(analysis: str, data: dict, n_total: int) -> tuple:
    """(transitions rows, state time rows, per-tree transition rows) of one analysis.

    Intervals are the central 95% of all maps of all trees pooled (phylogenetic
    and mapping uncertainty together); per-tree rows give each tree's mean over maps.
    Maps drawn under a fit with a rate at the upper bound are left out of every
    number and counted in ``n_maps_at_upper`` (see the module docstring).
    """
    states = data["states"]
    used = ~data["skipped"]
    counts = data["counts"][used]  # [T, M, k, k]
    dwell = data["dwell"][used]  # [T, M, k]
    tree_ids = data["tree"][used]
    T, M = counts.shape[:2]
    out = bound_limited_maps(data)[used]  # [T, M]
    keep = ~out
    n_out = int(out.sum())
    caution = "; ".join(
        _common_cautions(data, n_total)
        + _bound_caution(n_out, T * M, int(out.any(axis=1).sum()), T)
        + (["no maps were drawn (ancestral.maps is 0)"] if M == 0 else [])
    )
    kept = keep.reshape(T * M)
    pooled_c = counts.reshape(T * M, len(states), len(states)).astype(float)[kept]
    pooled_d = dwell.reshape(T * M, len(states))[kept]
    n_kept = int(kept.sum())
    per_tree_kept = keep.sum(axis=1)
    trows, drows, per_tree = [], [], []
    for i, a in enumerate(states):
        for j, b in enumerate(states):
            if i == j:
                continue
            x = pooled_c[:, i, j]
            trows.append(
                dict(
                    analysis=analysis,
                    from_state=a,
                    to_state=b,
                    n_trees=T,
                    n_maps=n_kept,
                    n_maps_at_upper=n_out,
                    mean_count=float(x.mean()) if len(x) else np.nan,
                    count_low95=_q(x, 0.025),
                    count_high95=_q(x, 0.975),
                    fraction_of_maps_with_change=float((x > 0).mean()) if len(x) else np.nan,
                    caution=caution,
                )
            )
            if M:
                c = counts[:, :, i, j].astype(float)
                sums = np.where(keep, c, 0.0).sum(axis=1)
                for tid, total, n_ok in zip(tree_ids, sums, per_tree_kept):
                    per_tree.append(
                        dict(
                            analysis=analysis,
                            tree=int(tid),
                            from_state=a,
                            to_state=b,
                            n_maps=int(n_ok),
                            n_maps_at_upper=int(M - n_ok),
                            mean_count=float(total / n_ok) if n_ok else np.nan,
                        )
                    )
    total = pooled_d.sum(axis=1, keepdims=True)
    frac = np.divide(pooled_d, total, out=np.zeros_like(pooled_d), where=total > 0)
    for i, s in enumerate(states):
        x = pooled_d[:, i]
        drows.append(
            dict(
                analysis=analysis,
                state=s,
                n_trees=T,
                n_maps=n_kept,
                n_maps_at_upper=n_out,
                mean_time=float(x.mean()) if len(x) else np.nan,
                time_low95=_q(x, 0.025),
                time_high95=_q(x, 0.975),
                mean_fraction=float(frac[:, i].mean()) if len(x) else np.nan,
                caution=caution,
            )
        )
    return pd.DataFrame(trows), pd.DataFrame(drows), pd.DataFrame(per_tree)


CLASS_COLUMNS = [
    "analysis",
    "model",
    "clade",
    "clade_kind",
    "clade_frequency",
    "n_trees",
    "class",
    "state",
    "mean_probability",
    "probability_low95",
    "probability_high95",
    "caution",
]


def class_table(analysis: str, data: dict, clades: pd.DataFrame, n_total: int) -> pd.DataFrame:
    """ancestral_classes rows of one analysis: for every model with hidden rate classes,
    one row per clade x class (``state`` empty: the class whatever the state) and one per
    clade x combined state ``state@class`` (``state`` set), each the mean probability
    across the trees that contain the clade under that model alone, with the central 95%
    interval. Classes are numbered slowest first on every tree (mkforest.engine.hidden)."""
    rows = []
    common = _common_cautions(data, n_total)
    for model, combined_states in data.get("hidden_models", {}).items():
        arr = data[f"combined::{model}"]  # [trees, clades, K]
        cls = [int(c.rpartition("@")[2]) for c in combined_states]
        R = max(cls)
        for c, crow in enumerate(clades.to_dict("records")):
            p = arr[:, c]
            p = p[np.isfinite(p[:, 0])]
            n = len(p)
            notes = ([] if n >= FEW_TREES or n == 0 else [f"only {n} trees contribute"]) + common
            if n == 0:
                notes.insert(0, "absent from every tree analysed, or the model was not fitted")
            caution = "; ".join(notes)
            base = dict(
                analysis=analysis,
                model=model,
                clade=crow["clade"],
                clade_kind=crow["kind"],
                clade_frequency=crow["frequency"],
                n_trees=n,
            )
            for r in range(1, R + 1):
                x = (
                    p[:, [i for i, q in enumerate(cls) if q == r]].sum(axis=1)
                    if n
                    else np.array([])
                )
                rows.append(
                    dict(
                        base,
                        **{"class": r},
                        state="",
                        mean_probability=float(x.mean()) if n else np.nan,
                        probability_low95=_q(x, 0.025),
                        probability_high95=_q(x, 0.975),
                        caution=caution,
                    )
                )
            for i, label in enumerate(combined_states):
                x = p[:, i] if n else np.array([])
                rows.append(
                    dict(
                        base,
                        **{"class": cls[i]},
                        state=label,
                        mean_probability=float(x.mean()) if n else np.nan,
                        probability_low95=_q(x, 0.025),
                        probability_high95=_q(x, 0.975),
                        caution=caution,
                    )
                )
    return pd.DataFrame(rows, columns=CLASS_COLUMNS)

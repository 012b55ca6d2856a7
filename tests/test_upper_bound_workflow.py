"""End-to-end: a trait the data cannot bound goes through the real workflow, and no
table or sentence presents a bound-limited number as an estimate.

'glow' alternates between sister tips (the tips' own order in the tree), so every
model's rates run to the upper bound (equal-rates Mk: P_ij -> 1/k as the rate grows,
Lewis 2001); 'habitat' is clustered (two clades), so its rates are estimated.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import yaml
from conftest import yule_arrays
from reference import newick_from_arrays
from workflow_helpers import run_snakemake


def _write_inputs(work):
    rng = np.random.default_rng(21)
    labels, parent, length = yule_arrays(rng, 24, height=1.0)
    # one topology, three sets of branch lengths: a small posterior-like sample
    trees = [newick_from_arrays(labels, parent, length * c) for c in (1.0, 1.3, 0.8)]
    (work / "trees.nwk").write_text("\n".join(trees) + "\n")
    lines = ["taxon\tglow\thabitat"]
    for i, t in enumerate(labels):  # tips 0..23 in the tree's own order
        lines.append(f"{t}\t{('dull', 'glowing')[i % 2]}\t{('litter', 'rock')[i >= 12]}")
    (work / "traits.tsv").write_text("\n".join(lines) + "\n")
    config = {
        "run": "bounds",
        "seed": 5,
        "trees": {"file": str(work / "trees.nwk"), "burnin": 0, "per_job": 3},
        "traits": {
            "file": str(work / "traits.tsv"),
            "taxon_column": "taxon",
            "columns": ["glow", "habitat"],
        },
        "models": {"one_rate": {"kind": "equal"}, "free": {"kind": "unconstrained"}},
        "fitting": {"starts": 2},
        "ancestral": {"enabled": True, "maps": 10},
    }
    path = work / "config.yaml"
    path.write_text(yaml.safe_dump(config, sort_keys=False))
    return path


def test_unbounded_rates_never_read_as_estimates(tmp_path):
    proc = run_snakemake(tmp_path, _write_inputs(tmp_path))
    assert proc.returncode == 0, proc.stderr[-4000:]
    out = tmp_path / "results" / "bounds"

    def tsv(name):
        return pd.read_csv(
            out / "tables" / f"{name}.tsv",
            sep="\t",
            keep_default_na=False,
            na_values=[""],
            dtype={"at_bound": str},
        )

    rates = tsv("rates")
    glow = rates[rates["analysis"] == "glow"]
    assert glow["at_bound"].isin(["upper", "open"]).all()
    assert not rates.loc[rates["analysis"] == "habitat", "at_bound"].isin(["upper", "open"]).any()

    summary = tsv("rate_summary")
    g = summary[summary["analysis"] == "glow"]
    assert (g["status"] == "unbounded").all() and g["median_rate"].isna().all()
    assert (g["n_unbounded"] == 3).all() and (g["n_estimated"] == 0).all()
    h = summary[summary["analysis"] == "habitat"]
    assert (h["status"] == "estimated").all() and h["median_rate"].notna().all()

    trans = tsv("transitions")
    tg = trans[trans["analysis"] == "glow"]
    assert (tg["n_maps"] == 0).all() and (tg["n_maps_at_upper"] == 30).all()
    assert tg["mean_count"].isna().all()
    assert trans.loc[trans["analysis"] == "habitat", "n_maps"].eq(30).all()

    text = (out / "methods.md").read_text()
    sec = re.search(r"^### glow\n(.*?)(?=^### |^## )", text, re.S | re.M).group(1)
    assert "not estimable from these data" in sec
    assert "No numbers of changes are given" in sec
    # no rate of glow appears as a number, except as the one-sided limit "≥ X"
    bare = re.sub(r"≥ [0-9.]+", "", sec)
    for x in glow["rate"]:
        assert f"{x:.2f}" not in bare, x
    assert not re.search(r"\d{3,}\.\d{2}", bare)  # no rate in the hundreds or more

    # those maps were never drawn (their cost grows with the rate, and they would be left
    # out): glow's chunk files hold empty maps, habitat's drawn ones
    from mkforest.jobs.ancestral import bound_limited_maps, load_chunks

    chunks = {a: sorted((out / "ancestral" / a).glob("chunk_*.npz")) for a in ("glow", "habitat")}
    data = load_chunks(chunks["glow"])
    assert bound_limited_maps(data).all()
    assert np.isnan(data["dwell"]).all() and (data["counts"] == 0).all()
    assert np.isfinite(load_chunks(chunks["habitat"])["dwell"]).all()

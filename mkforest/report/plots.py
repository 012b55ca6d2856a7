"""Figures of model support and rates across the tree sample (seaborn/matplotlib).

Each function returns a matplotlib Figure, so tests can read its labels;
``save`` writes it in several formats.
"""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
import seaborn as sns  # noqa: E402

PALETTE = "crest"
CRITERION_NAMES = {"aic": "AIC", "aicc": "AICc", "bic": "BIC"}


def _grid(n):
    cols = min(n, 3)
    rows = int(np.ceil(n / cols))
    return rows, cols


def support_weights(fits: pd.DataFrame, criterion: str = "aicc"):
    """Akaike weights across trees per model, one panel per analysis."""
    analyses = list(dict.fromkeys(fits["analysis"]))
    rows, cols = _grid(len(analyses))
    fig, axes = plt.subplots(rows, cols, figsize=(4.2 * cols, 3.4 * rows), squeeze=False)
    for ax, a in zip(axes.flat, analyses):
        d = fits[(fits["analysis"] == a) & fits["weight"].notna()]
        order = list(dict.fromkeys(d["model"]))
        sns.boxplot(data=d, x="model", y="weight", order=order, ax=ax, color="#d9e6e1",
                    fliersize=0, width=0.6)
        np.random.seed(0)  # seaborn jitters from NumPy's global generator: same figure every run
        sns.stripplot(data=d, x="model", y="weight", order=order, ax=ax, size=2.5, alpha=0.6,
                      color="#2b5d52", jitter=0.25)
        ax.set_ylim(-0.03, 1.03)
        ax.set_title(a)
        ax.set_xlabel("model")
        ax.set_ylabel(f"{CRITERION_NAMES.get(criterion, criterion)} weight per tree")
        ax.tick_params(axis="x", rotation=30)
    for ax in list(axes.flat)[len(analyses):]:
        ax.set_visible(False)
    fig.suptitle(f"Model support across {fits['tree'].nunique()} trees")
    fig.tight_layout()
    return fig


def support_heatmap(support: pd.DataFrame):
    """Mean Akaike weight, analysis x model."""
    table = support.pivot(index="analysis", columns="model", values="mean_weight")
    table = table.reindex(index=list(dict.fromkeys(support["analysis"])),
                          columns=list(dict.fromkeys(support["model"])))
    fig, ax = plt.subplots(figsize=(1.2 + 1.1 * table.shape[1], 1.2 + 0.6 * table.shape[0]))
    sns.heatmap(table, annot=True, fmt=".2f", vmin=0, vmax=1, cmap=PALETTE, ax=ax,
                cbar_kws={"label": "mean weight across trees"}, linewidths=0.5)
    ax.set_title("Mean model weight")
    ax.set_xlabel("model")
    ax.set_ylabel("analysis")
    fig.tight_layout()
    return fig


def rates_across_trees(rates: pd.DataFrame):
    """Rate estimates across trees per transition (log scale), one panel per analysis."""
    r = rates[rates["rate"] > 0].copy()
    r["transition"] = r["from_state"].astype(str) + "→" + r["to_state"].astype(str)
    analyses = list(dict.fromkeys(rates["analysis"]))
    rows, cols = _grid(len(analyses))
    fig, axes = plt.subplots(rows, cols, figsize=(5.0 * cols, 3.6 * rows), squeeze=False)
    for ax, a in zip(axes.flat, analyses):
        d = r[r["analysis"] == a]
        if d.empty:
            ax.set_title(f"{a} (no rates)")
            continue
        sns.boxplot(data=d, x="transition", y="rate", hue="model", ax=ax, log_scale=True,
                    palette=PALETTE, fliersize=1.5, linewidth=0.8)
        ax.set_title(a)
        ax.set_xlabel("transition")
        ax.set_ylabel("rate (per unit branch length)")
        ax.tick_params(axis="x", rotation=30)
        ax.legend(fontsize=7, title="model", title_fontsize=7)
    for ax in list(axes.flat)[len(analyses):]:
        ax.set_visible(False)
    fig.suptitle("Rate estimates across trees")
    fig.tight_layout()
    return fig


# SVG element ids from a fixed salt, and no date in the files: a rerun writes the
# same bytes, so the checksums in manifest.json repeat.
matplotlib.rcParams["svg.hashsalt"] = "mkforest"


def save(fig, paths) -> None:
    for p in paths:
        fig.savefig(p, dpi=150, metadata={"Date": None} if str(p).endswith(".svg") else None)
    plt.close(fig)

"""What every figure shares: colour-blind-safe palettes, plain-number log axes,
rates written to display precision, readable names of joint-state changes,
rates at an optimiser bound kept apart from estimates, and saving.

Palettes: the eight colours of Okabe & Ito (2008), recommended for readers with
colour-vision deficiencies by Wong (2011, Nature Methods 8:441), for categories;
cividis (Nuñez, Anderton & Renslow 2018, PLOS ONE 13:e0199239) for continuous
scales; viridis for ordered states (``ordered``).
"""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
from matplotlib import colormaps  # noqa: E402
from matplotlib.colors import to_hex, to_rgb  # noqa: E402
from matplotlib.ticker import (  # noqa: E402
    Formatter,
    FuncFormatter,
    LogLocator,
    NullFormatter,
)
from PIL import Image  # noqa: E402  (installed with matplotlib)

from ..data.traits import written_text  # noqa: E402
from ..engine.summarise import as_text, impossible_flags, rate_summary  # noqa: E402

# Okabe & Ito (2008), in an order where neighbours differ most; yellow last (faint
# as a line or text on white) and black kept apart for model averages and text.
CATEGORICAL = ["#0072B2", "#E69F00", "#009E73", "#CC79A7", "#56B4E9", "#D55E00", "#F0E442"]
MARKERS = ["o", "s", "D", "^", "v", "P", "X", "*"]
ORDERED_MAP = "cividis"
AVERAGE_COLOUR = "#000000"
BOUND_COLOUR = "#555555"
BACKGROUND = "background"  # gid of guides (grid lines, shaded columns) that text may sit on
PRECISION = 0.001  # rates below it are written "< 0.001"
# A journal page: the full-page figure area of common two-column journals (183 x 247 mm),
# and the smallest text a printed figure should carry, its body text at 100% (common
# practice of journals' figure guides; no single source). Every figure fits the page and
# writes no text smaller.
PAGE = (7.2, 9.7)  # inches, width x height
BODY_TEXT = 8.0  # points
# what a figure may draw: save crops to the drawn content and pads it by 0.1 in each side
FULL_WIDTH, FULL_HEIGHT = PAGE[0] - 0.2, PAGE[1] - 0.2


def categorical(n: int) -> list:
    """n distinct colours; beyond eight, lighter versions of the eight follow."""
    out = []
    for i in range(n):
        base = np.array(to_rgb(CATEGORICAL[i % len(CATEGORICAL)]))
        mix = 0.45 * (i // len(CATEGORICAL))
        out.append(to_hex(base + (1 - base) * min(mix, 0.8)))
    return out


STATE_MAP = "viridis"  # ordered states: lightness and hue both change along it


def ordered(n: int) -> list:
    """n colours for ordered states along viridis (van der Walt & Smith's perceptually
    uniform map, readable with colour-vision deficiencies), dark to light, skipping its
    palest end so the lightest state still shows on white. cividis varies in lightness
    alone: its middle states (1-3 of 0-4) were hard to tell apart at tip-mark size;
    viridis's neighbours differ about twice as much (CIE76 distance 33 against 18 at
    five states)."""
    cmap = colormaps[STATE_MAP]
    return [to_hex(cmap(x)) for x in np.linspace(0.0, 0.92, max(n, 2))][:n]


def state_colours(states, is_ordered: bool = False) -> dict:
    states = list(states)
    return dict(zip(states, ordered(len(states)) if is_ordered else categorical(len(states))))


def joint_colours(first_states, second_states) -> dict:
    """Colours of joint states 'a+b': the first trait's state gives the hue (Okabe &
    Ito), the second trait's state the shade, dark to light."""
    out = {}
    hues = categorical(len(first_states))
    n2 = len(second_states)
    for a, hue in zip(first_states, hues):
        base = np.array(to_rgb(hue))
        for j, b in enumerate(second_states):
            mix = 0.6 * j / max(n2 - 1, 1)
            out[f"{a}+{b}"] = to_hex(base + (1 - base) * mix)
    return out


def text_colour_on(colour) -> str:
    """Black or white, whichever reads better on the colour (relative luminance)."""
    r, g, b = to_rgb(colour)
    return "black" if 0.2126 * r + 0.7152 * g + 0.0722 * b > 0.45 else "white"


# --------------------------------------------------------------------------- shapes


def box_and_points(
    ax,
    values: list,
    labels: list,
    box_colour: str = "#cfe8f7",
    point_colour: str = CATEGORICAL[0],
    size: float = 2.5,
    jitter: float = 0.25,
    seed: int = 0,
) -> None:
    """Horizontal rows, the first at the top: a box per row (quartiles, whiskers to
    1.5 IQR, no outlier marks) and every value as a point, jittered across the row
    with a fixed seed (the same figure every run). An empty row stays empty."""
    rows = [np.asarray(v, dtype=float) for v in values]
    pos = np.arange(len(rows))
    full = [i for i, v in enumerate(rows) if len(v)]
    if full:
        ax.boxplot(
            [rows[i] for i in full],
            positions=pos[full],
            orientation="horizontal",
            widths=0.6,
            showfliers=False,
            patch_artist=True,
            boxprops={"facecolor": box_colour, "edgecolor": "#444444", "linewidth": 0.8},
            medianprops={"color": "#444444", "linewidth": 0.8},
            whiskerprops={"color": "#444444", "linewidth": 0.8},
            capprops={"color": "#444444", "linewidth": 0.8},
        )
    rng = np.random.default_rng(seed)
    for i in full:
        y = i + rng.uniform(-jitter / 2, jitter / 2, len(rows[i]))
        ax.scatter(rows[i], y, s=size**2, color=point_colour, alpha=0.6, linewidths=0, zorder=3)
    ax.set_yticks(pos, labels)
    ax.set_ylim(len(rows) - 0.5, -0.5)


def annotated_grid(
    ax, table: pd.DataFrame, cmap: str, vmin: float, vmax: float, label: str, fontsize: float = 7.5
):
    """A colour grid of a table (rows top to bottom, NaN cells blank) with each value
    written in its cell to two decimals, and a colour bar labelled ``label``."""
    data = table.to_numpy(dtype=float)
    image = ax.imshow(
        np.ma.masked_invalid(data),
        cmap=cmap,
        vmin=vmin,
        vmax=vmax,
        aspect="auto",
        interpolation="nearest",
    )
    scale = colormaps[cmap]
    for (r, c), x in np.ndenumerate(data):
        if np.isfinite(x):
            ax.text(
                c,
                r,
                f"{x:.2f}",
                ha="center",
                va="center",
                fontsize=fontsize,
                color=text_colour_on(scale((x - vmin) / (vmax - vmin))),
            )
    ax.set_xticks(range(data.shape[1]), [str(c) for c in table.columns])
    ax.set_yticks(range(data.shape[0]), [str(i) for i in table.index])
    ax.set_xticks(np.arange(data.shape[1] + 1) - 0.5, minor=True)
    ax.set_yticks(np.arange(data.shape[0] + 1) - 0.5, minor=True)
    ax.grid(which="minor", color="white", linewidth=0.5)
    ax.tick_params(which="minor", length=0)
    for spine in ax.spines.values():
        spine.set_visible(False)
    ax.figure.colorbar(image, ax=ax, label=label)


# --------------------------------------------------------------------------- numbers


def clear_end_ticks(fig) -> None:
    """Hide the tick labels of an x axis that would overlap its first or last label (the
    bound columns' names) or the tick label kept before it, measured after layout, in
    every axes of the figure."""
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    for ax in fig.axes:
        labels = [t for t in ax.get_xticklabels() if t.get_visible() and t.get_text()]
        if len(labels) < 3:
            continue
        ends = [labels[0].get_window_extent(renderer), labels[-1].get_window_extent(renderer)]
        kept = None  # and any that would overlap the last one kept, left to right
        for t in labels[1:-1]:
            box = t.get_window_extent(renderer)
            if any(box.x1 > e.x0 - 2 and box.x0 < e.x1 + 2 for e in ends) or (
                kept is not None and box.x0 < kept.x1 + 2
            ):
                t.set_visible(False)
            else:
                kept = box


def set_named(frame: pd.DataFrame) -> str:
    """The first tree set's name when a table holds several sets (the one the figures
    show), else ''."""
    if "tree_set" not in frame or frame.empty:
        return ""
    sets = [s for s in dict.fromkeys(as_text(frame["tree_set"])) if s]
    return sets[0] if len(sets) > 1 else ""


def name_tree_set(fig, tree_set: str) -> None:
    """Add "(tree set 'X')" to a figure's title (its suptitle, else its first axes' left
    title): a figure that shows one set of several says which."""
    if not tree_set:
        return
    note = f"(tree set '{tree_set}')"
    if fig.get_suptitle():
        fig.suptitle(fig.get_suptitle() + f" {note}", fontsize=BODY_TEXT + 2)
    elif fig.axes:
        ax = fig.axes[0]
        ax.set_title(ax.get_title(loc="left") + f"\n{note}", loc="left", fontsize=BODY_TEXT + 2)


class _WrittenTicks(Formatter):
    """A tick formatter that writes its labels through ``written_text`` (tick labels are
    made again at every draw from their formatter, so their text is changed there)."""

    def __init__(self, inner, names: dict):
        self.inner, self.names = inner, names

    def __call__(self, x, pos=None):
        return written_text(self.inner(x, pos), self.names)

    def format_ticks(self, values):
        return [written_text(t, self.names) for t in self.inner.format_ticks(values)]

    def set_locs(self, locs):
        self.inner.set_locs(locs)

    def get_offset(self):
        return self.inner.get_offset()

    def set_axis(self, axis):
        super().set_axis(axis)
        self.inner.set_axis(axis)


def show_written_names(fig, names: dict) -> None:
    """Write each trait's header as written in the trait table (``Leaf shape``) wherever the
    figure's text holds the name it is analysed under (``Leaf_shape``): titles, axis
    labels, tick labels, legends and notes (``data.traits.written_text``; file names keep
    the analysed name). Called on every figure before it is saved."""
    if not any(a != w for a, w in names.items()):
        return
    from matplotlib.text import Text

    for ax in fig.axes:
        for axis in (ax.xaxis, ax.yaxis):
            for fmt, setter in (
                (axis.get_major_formatter(), axis.set_major_formatter),
                (axis.get_minor_formatter(), axis.set_minor_formatter),
            ):
                if not isinstance(fmt, _WrittenTicks):
                    setter(_WrittenTicks(fmt, names))
    for text in fig.findobj(Text):
        new = written_text(text.get_text(), names)
        if new != text.get_text():
            text.set_text(new)


def rate_text(x, precision: float = PRECISION) -> str:
    """A rate as written in figures: three significant digits, never an exponent;
    below the display precision '< 0.001'."""
    if x is None or not np.isfinite(x):
        return "n/a"
    x = float(x)
    if x == 0:
        return "0"
    if abs(x) < precision:
        return f"< {precision:g}"
    if abs(x) >= 100:
        return f"{x:,.0f}"
    digits = max(0, 2 - int(np.floor(np.log10(abs(x)))))
    digits = min(digits, len(f"{precision:g}".split(".")[-1]) if precision < 1 else 0)
    return f"{x:.{digits}f}"


def plain_number(x: float) -> str:
    """A tick value as a plain number (0.001, 0.5, 20, 1,000)."""
    if x == 0:
        return "0"
    if abs(x) >= 1:
        return f"{x:,.0f}" if abs(x - round(x)) < 1e-9 * abs(x) else f"{x:g}"
    return np.format_float_positional(x, precision=12, trim="-")


def log_ticks(lo: float, hi: float) -> list:
    """Tick values between lo and hi: 1, 2 and 5 times powers of ten, or only the
    powers of ten when the range spans more than three decades."""
    decades = np.log10(hi) - np.log10(lo)
    subs = (1,) if decades > 3 else (1, 2, 5) if decades > 1 else (1, 1.5, 2, 3, 5, 7)
    out = [
        s * 10.0**e
        for e in range(int(np.floor(np.log10(lo))), int(np.ceil(np.log10(hi))) + 1)
        for s in subs
    ]
    return [x for x in out if lo <= x <= hi]


def plain_log_axis(ax, axis: str = "x") -> None:
    """Log axis with ticks at 1, 2, 5 times powers of ten (at 1 only when the range
    spans more than three decades), written as plain numbers."""
    target = ax.xaxis if axis == "x" else ax.yaxis
    lo, hi = ax.get_xlim() if axis == "x" else ax.get_ylim()
    decades = np.log10(max(hi, 1e-300)) - np.log10(max(lo, 1e-300))
    subs = (
        (1.0,)
        if decades > 3
        else (1.0, 2.0, 5.0)
        if decades > 1.2
        else (1.0, 1.5, 2.0, 3.0, 5.0, 7.0)
    )
    target.set_major_locator(LogLocator(base=10, subs=subs))
    target.set_major_formatter(FuncFormatter(lambda v, _: plain_number(v)))
    target.set_minor_formatter(NullFormatter())


# --------------------------------------------------------------------------- names of changes


def change_label(from_state: str, to_state: str, pair_traits=None) -> str:
    """'a → b'; for a trait pair, the one trait that changes and the other's state:
    'banding: plain → banded (aperture round)'. A double change keeps both."""
    if pair_traits and "+" in str(from_state) and "+" in str(to_state):
        (a1, a2), (b1, b2) = str(from_state).split("+", 1), str(to_state).split("+", 1)
        first, second = pair_traits
        if a2 == b2 and a1 != b1:
            return f"{first}: {a1} → {b1} ({second} {a2})"
        if a1 == b1 and a2 != b2:
            return f"{second}: {a2} → {b2} ({first} {a1})"
    return f"{from_state} → {to_state}"


def is_double_change(from_state: str, to_state: str) -> bool:
    """Both traits of a pair change at once (joint labels 'a+b'): rate 0 by construction."""
    a, b = str(from_state).split("+", 1), str(to_state).split("+", 1)
    return len(a) == 2 and len(b) == 2 and a[0] != b[0] and a[1] != b[1]


# --------------------------------------------------------------------------- rates at bounds


def rate_intervals(rates: pd.DataFrame) -> pd.DataFrame:
    """Per (tree set,) analysis x model x change: the median and central 95% interval
    across trees of rate_summary.tsv (``summarise.rate_summary``: one statistic, computed
    once, for the tables and every figure), under the names the figures use.

    median, low, high: over the trees where the data bound the rate, those at the lower
    bound included (an estimate of about zero); n_lower: trees at the lower bound;
    n_upper: trees where the data do not bound the rate from above (at the upper bound or
    with a 95% interval reaching it), left out of the median and counted; n_free: trees
    with a value inside the bounds. lower_value: the largest rate at the lower bound
    (NaN if none); ``median_at_lower``: the median is that bound (most estimates sit
    there), so a figure's headline is the bound with its count, not a value.
    Rows of impossible fits (ln L = -inf) are left out (``impossible_note`` counts them).
    """
    s = rate_summary(rates)
    keys = [k for k in ("tree_set", "analysis", "model", "from_state", "to_state") if k in s]
    r = rates[~impossible_flags(rates)]
    lower = r[as_text(r["at_bound"]).str.strip().eq("lower")] if "at_bound" in r else r.iloc[:0]
    bound = lower.groupby(keys, sort=False)["rate"].max().rename("lower_value").reset_index()
    out = s.merge(bound, on=keys, how="left") if len(bound) else s.assign(lower_value=np.nan)
    out = out.rename(
        columns={
            "median_rate": "median",
            "rate_low95": "low",
            "rate_high95": "high",
            "n_at_lower": "n_lower",
            "n_unbounded": "n_upper",
        }
    )
    out["n_free"] = out["n_estimated"] - out["n_lower"]
    out["median_at_lower"] = out["median"] <= out["lower_value"] * (1 + 1e-9)
    return out


def impossible_note(rates: pd.DataFrame, models=None) -> str:
    """'fits impossible (ln L = −inf), not drawn: one on 2 of 3 trees; ...' for the models
    (all, or ``models``) of rates.tsv rows with an impossible fit on some tree; '' if none."""
    keys = [k for k in ("tree_set", "tree") if k in rates]
    flags = impossible_flags(rates)
    parts = []
    for m, g in rates.groupby("model", sort=False):
        if models is not None and m not in models:
            continue
        bad = g[flags.loc[g.index]].drop_duplicates(keys)
        if len(bad):
            parts.append(f"{m} on {len(bad)} of {len(g.drop_duplicates(keys))} trees")
    return f"fits impossible (ln L = −inf), not drawn: {'; '.join(parts)}" if parts else ""


def same_as(support: pd.DataFrame | None, analysis: str) -> dict:
    """{model: the model it repeats} for an analysis (model_support's ``same_as``)."""
    if support is None or "same_as" not in support:
        return {}
    s = support[(support["analysis"] == analysis) & (as_text(support["same_as"]) != "")]
    return dict(zip(s["model"], s["same_as"]))


def ordered_changes(keys, pair_traits=None, states=None) -> list:
    """Changes (from, to) in reading order: by the trait's state order (``states``,
    else the order met in ``keys``). For a pair: the changes of the first trait, then
    those of the second, each next to itself in the other trait's other states, so a
    dependence reads as a shift between neighbouring rows. ``states`` of a pair: its
    joint states, first trait varying slowest."""
    keys = list(dict.fromkeys(keys))
    pair = bool(pair_traits) and all("+" in str(a) and "+" in str(b) for a, b in keys)
    rank = {}
    for s in states or []:
        for part in str(s).split("+", 1) if pair else [str(s)]:
            rank.setdefault(part, len(rank))
    for a, b in keys:
        for part in (*str(a).split("+", 1), *str(b).split("+", 1)) if pair else (str(a), str(b)):
            rank.setdefault(part, len(rank))

    def order(key):
        if not pair:
            return (rank[str(key[0])], rank[str(key[1])])
        (a1, a2), (b1, b2) = str(key[0]).split("+", 1), str(key[1]).split("+", 1)
        if a2 == b2:
            return (0, rank[a1], rank[b1], rank[a2])
        return (1, rank[a2], rank[b2], rank[a1])

    return sorted(keys, key=order)


# --------------------------------------------------------------------------- saving

# SVG element ids from a fixed salt, and no date in the files: a rerun writes the
# same bytes, so the checksums in manifest.json repeat.
matplotlib.rcParams["svg.hashsalt"] = "mkforest"
matplotlib.rcParams["svg.fonttype"] = "none"  # text stays text in SVG: smaller, editable


def save(fig, paths, dpi: int = 100) -> None:
    """PNG (for reading and the HTML report) and SVG (for print), as the names say.
    A PNG is stored with a 256-colour palette: the figures are flat colours and text,
    and the files shrink about threefold (the report carries every figure)."""
    for p in paths:
        svg = str(p).endswith(".svg")
        fig.savefig(
            p,
            dpi=None if svg else dpi,
            bbox_inches="tight",
            metadata={"Date": None} if svg else None,
        )
        if str(p).endswith(".png"):
            with Image.open(p) as img:
                flat = img.convert("RGB").quantize(colors=256, dither=Image.Dither.NONE)
            flat.save(p, optimize=True)
    plt.close(fig)

"""Checks a reader makes of a figure, done with matplotlib's own geometry.

After drawing, every Text artist has a bounding box in display pixels
(``get_window_extent``); so does every legend and every piece of data. Two texts
overlap when their boxes intersect by more than a pixel each way; a text or a
legend lies on the data when its box meets a data box: a line segment, a patch,
a scatter marker, a segment of a line collection (clipped to its axes).
Heatmap cells (QuadMesh, images) are not counted as data: their annotations are
meant to sit on them; nor are guides the figures mark with the gid
``style.BACKGROUND`` (grid lines, shaded columns that hold counts).
"""

from __future__ import annotations

import numpy as np
from matplotlib.collections import LineCollection, PathCollection, PolyCollection, QuadMesh
from matplotlib.image import AxesImage
from matplotlib.legend import Legend
from matplotlib.lines import Line2D
from matplotlib.patches import Patch
from matplotlib.text import Text

from mkforest.report.style import BACKGROUND

TOL = 1.0  # pixels of overlap allowed each way (antialiasing, rounding)


def _boxes_overlap(a, b, tol=TOL):
    """a: [n, 4], b: [m, 4] as x0, y0, x1, y1 -> bool [n, m]."""
    a, b = np.asarray(a, float).reshape(-1, 4), np.asarray(b, float).reshape(-1, 4)
    ox = np.minimum(a[:, None, 2], b[None, :, 2]) - np.maximum(a[:, None, 0], b[None, :, 0])
    oy = np.minimum(a[:, None, 3], b[None, :, 3]) - np.maximum(a[:, None, 1], b[None, :, 1])
    return (ox > tol) & (oy > tol)


def _candidate_texts(fig):
    """The texts matplotlib draws: titles, axis and tick labels of the ticks in view,
    texts placed in axes or figure, legend texts and titles."""
    for ax in fig.axes:
        if not ax.get_visible():
            continue
        yield from (ax.title, ax._left_title, ax._right_title)
        for axis in (ax.xaxis, ax.yaxis):
            if not axis.get_visible():
                continue
            yield axis.label
            yield axis.get_offset_text()
            for tick in axis._update_ticks():
                yield from (tick.label1, tick.label2)
        yield from ax.texts
    for lg in list(fig.legends) + [ax.get_legend() for ax in fig.axes if ax.get_legend()]:
        if lg.get_visible():
            yield lg.get_title()
            yield from lg.get_texts()
    yield from fig.texts
    for name in ("_suptitle", "_supxlabel", "_supylabel"):
        if getattr(fig, name, None) is not None:
            yield getattr(fig, name)


def texts(fig):
    """(Text, [x0, y0, x1, y1]) of every visible, non-empty text of the figure."""
    renderer = fig.canvas.get_renderer()
    out, seen = [], set()
    for t in _candidate_texts(fig):
        if id(t) in seen or not t.get_visible() or not t.get_text().strip():
            continue
        seen.add(id(t))
        bb = t.get_window_extent(renderer)
        if bb.width <= 0 or bb.height <= 0:
            continue
        out.append((t, [bb.x0, bb.y0, bb.x1, bb.y1]))
    return out


def _segment_boxes(points, pad):
    p = np.asarray(points, float)
    p = p[np.all(np.isfinite(p), axis=1)]
    if len(p) < 2:
        return np.empty((0, 4))
    a, b = p[:-1], p[1:]
    return np.column_stack(
        [
            np.minimum(a[:, 0], b[:, 0]) - pad,
            np.minimum(a[:, 1], b[:, 1]) - pad,
            np.maximum(a[:, 0], b[:, 0]) + pad,
            np.maximum(a[:, 1], b[:, 1]) + pad,
        ]
    )


def _clip(boxes, ax_box):
    if not len(boxes):
        return boxes
    x0, y0, x1, y1 = ax_box
    c = np.column_stack(
        [
            np.maximum(boxes[:, 0], x0),
            np.maximum(boxes[:, 1], y0),
            np.minimum(boxes[:, 2], x1),
            np.minimum(boxes[:, 3], y1),
        ]
    )
    return c[(c[:, 2] > c[:, 0]) & (c[:, 3] > c[:, 1])]


def data_boxes(fig):
    """Display boxes of every piece of data drawn in the figure's axes."""
    renderer = fig.canvas.get_renderer()
    dpi = fig.dpi
    out = []
    for ax in fig.axes:
        if not ax.get_visible():
            continue
        bb = ax.get_window_extent(renderer)
        ax_box = (bb.x0, bb.y0, bb.x1, bb.y1)
        for art in ax.get_children():
            if not art.get_visible() or isinstance(art, (Text, Legend, QuadMesh, AxesImage)):
                continue
            if art in (ax.patch,) or art in ax.spines.values() or art.get_gid() == BACKGROUND:
                continue
            boxes = np.empty((0, 4))
            if isinstance(art, Line2D):
                pts = art.get_transform().transform(art.get_xydata())
                pad = art.get_linewidth() * dpi / 144
                boxes = (
                    _segment_boxes(pts, pad)
                    if art.get_linestyle() not in ("None", "", " ")
                    else np.empty((0, 4))
                )
                if art.get_marker() not in (None, "", "None", " ") and len(pts):
                    r = art.get_markersize() * dpi / 144
                    boxes = np.vstack(
                        [
                            boxes,
                            np.column_stack(
                                [pts[:, 0] - r, pts[:, 1] - r, pts[:, 0] + r, pts[:, 1] + r]
                            ),
                        ]
                    )
            elif isinstance(art, LineCollection):
                tr = art.get_transform()
                pads = np.atleast_1d(art.get_linewidth()) * dpi / 144
                parts = [
                    _segment_boxes(tr.transform(np.asarray(s, float)), pads[i % len(pads)])
                    for i, s in enumerate(art.get_segments())
                    if len(s)
                ]
                boxes = np.vstack(parts) if parts else boxes
            elif isinstance(art, PathCollection):
                offs = art.get_offset_transform().transform(art.get_offsets())
                sizes = np.atleast_1d(art.get_sizes())
                if len(offs) and sizes.size:
                    r = np.sqrt(np.resize(sizes, len(offs))) * dpi / 144
                    boxes = np.column_stack(
                        [offs[:, 0] - r, offs[:, 1] - r, offs[:, 0] + r, offs[:, 1] + r]
                    )
            elif isinstance(art, PolyCollection):
                tr = art.get_transform()
                parts = []
                for path in art.get_paths():
                    v = tr.transform(path.vertices)
                    if len(v):
                        parts.append([v[:, 0].min(), v[:, 1].min(), v[:, 0].max(), v[:, 1].max()])
                boxes = np.asarray(parts, float).reshape(-1, 4)
            elif isinstance(art, Patch):
                e = art.get_window_extent(renderer)
                boxes = np.array([[e.x0, e.y0, e.x1, e.y1]])
            else:
                continue
            if art.get_clip_on():
                boxes = _clip(boxes, ax_box)
            if len(boxes):
                out.append((art, boxes))
    return out


def legends(fig):
    renderer = fig.canvas.get_renderer()
    found = list(fig.legends) + [ax.get_legend() for ax in fig.axes if ax.get_legend()]
    return [(lg, lg.get_window_extent(renderer)) for lg in found if lg.get_visible()]


def overlaps(fig) -> list:
    """Every clash a reader would see, in words (empty when the figure is clean)."""
    fig.canvas.draw()
    found = []
    items = texts(fig)
    if items:
        boxes = np.array([b for _, b in items])
        hit = _boxes_overlap(boxes, boxes)
        for i, j in zip(*np.nonzero(np.triu(hit, 1))):
            found.append(
                f"text {items[i][0].get_text()!r} overlaps text {items[j][0].get_text()!r}"
            )
    data = data_boxes(fig)
    legend_texts = {id(t) for lg, _ in legends(fig) for t in lg.get_texts()}
    legend_texts |= {id(lg.get_title()) for lg, _ in legends(fig)}
    for art, dboxes in data:
        if items:
            hit = _boxes_overlap(boxes, dboxes).any(axis=1)
            for i in np.nonzero(hit)[0]:
                if id(items[i][0]) in legend_texts:
                    continue  # reported once, as the legend's box below
                found.append(f"text {items[i][0].get_text()!r} lies on data ({type(art).__name__})")
        for lg, bb in legends(fig):
            if _boxes_overlap([[bb.x0, bb.y0, bb.x1, bb.y1]], dboxes).any():
                found.append(
                    f"legend {[t.get_text() for t in lg.get_texts()][:3]} lies on data "
                    f"({type(art).__name__})"
                )
    return found


def all_text(fig) -> list:
    fig.canvas.draw()
    return [t.get_text() for t, _ in texts(fig)]


def size_problems(fig, page=None) -> list:
    """What keeps a figure off a journal page: its size in inches beyond ``style.PAGE``
    (width x height), or a text smaller than ``style.BODY_TEXT`` points (the size
    matplotlib draws it at; a figure printed at 100%). [] when it fits."""
    from mkforest.report.style import BODY_TEXT, PAGE

    fig.canvas.draw()
    # the size as saved (style.save crops to the drawn content: bbox_inches="tight", 0.1 in
    # of padding), which can exceed the figure's own size when text spills over its edge
    tight = fig.get_tightbbox(fig.canvas.get_renderer())
    width, height = tight.width + 0.2, tight.height + 0.2
    page = page or PAGE
    out = []
    if width > page[0] + 1e-9 or height > page[1] + 1e-9:
        out.append(f"figure {width:.2f} x {height:.2f} in, page {page[0]} x {page[1]} in")
    for t, _ in texts(fig):
        if t.get_fontsize() < BODY_TEXT - 1e-9:
            out.append(f"text {t.get_text()[:40]!r} at {t.get_fontsize():g} pt")
    return out

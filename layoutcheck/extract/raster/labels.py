"""Labels: text lines grouped from the ink that is neither a rule nor a mark."""

from __future__ import annotations

import cv2
import numpy as np

from ...elements import Element
from .common import _components, _Frame, px
from .settings import RasterSettings


def _writing_is_horizontal(cx: np.ndarray, cy: np.ndarray) -> bool:
    """Whether text runs along the rows: most characters' nearest neighbours lie beside them.

    Letters of a word are closer to each other than to the lines above and below (common
    practice: line spacing is about 1.2 times the type size), so on a page turned by a quarter
    turn the nearest neighbours lie above and below instead.
    """
    if len(cx) < 3:
        return True
    from scipy.spatial import cKDTree

    pts = np.stack([cx, cy], 1)
    _, nn = cKDTree(pts).query(pts, k=2)
    d = pts[nn[:, 1]] - pts
    return bool(np.count_nonzero(np.abs(d[:, 0]) >= np.abs(d[:, 1])) >= 0.5 * len(pts))


def _find_labels(comps, frame: _Frame, ddpi, to_pt, settings: RasterSettings, marks: list[Element]) -> list[Element]:
    """Text lines among the components ``comps`` (``_components`` of the upright ink, no rules)."""
    n, labels, stats, _ = comps
    if n <= 1:
        return []
    st = stats[1:]
    x, y, w, h, area = (st[:, i].astype(float) for i in range(5))
    uw, uh = frame.size
    speck = px(settings.speckle_mm, ddpi)
    big = px(settings.max_glyph_mm, ddpi)
    border = px(settings.border_mm, ddpi) + 1
    solid = (area >= 0.7 * w * h) & (np.minimum(w, h) >= px(2.0, ddpi))  # holes, marks, filled areas
    thin, long = (px(v, ddpi) for v in settings.rule_piece_mm)
    piece = (np.minimum(w, h) <= thin) & (np.maximum(w, h) >= long)
    keep = ((np.maximum(w, h) >= max(speck, 1.5)) & (np.maximum(w, h) <= big) & ~solid & ~piece
            & (x > border) & (y > border) & (x + w < uw - border) & (y + h < uh - border))
    if not keep.any():
        return []
    across_rows = _writing_is_horizontal(x[keep] + w[keep] / 2, y[keep] + h[keep] / 2)
    ch = float(np.median(h[keep] if across_rows else w[keep]))
    gap = max(1, int(round(settings.word_gap * ch)))
    drop = np.flatnonzero(~keep)
    if len(drop) <= 256:
        # Few components left out (the usual page): clear them inside their own boxes, which is
        # several times faster than looking every pixel's label up.
        text = (labels > 0).view(np.uint8)
        for i in drop.tolist():
            bx, by, bw, bh = (int(v) for v in st[i, :4])
            text[by:by + bh, bx:bx + bw][labels[by:by + bh, bx:bx + bw] == i + 1] = 0
    else:
        text = np.take(np.concatenate([[0], keep]).astype(np.uint8), labels)
    # Join characters and words across gaps of about one character height, along the line only
    # (down the page on a sheet turned by a quarter turn).
    joined = cv2.dilate(text, cv2.getStructuringElement(cv2.MORPH_RECT, (gap, 1) if across_rows else (1, gap)))
    m, groups = _components(joined, stats=False)
    idx = np.flatnonzero(keep)
    # Every pixel of a character lies in one joined group: read the group off one of its pixels,
    # the first of its own in the top row of its bounding box.
    sx, sy, sw = (st[idx, i].astype(np.int64) for i in range(3))
    owner = np.repeat(np.arange(len(idx)), sw)
    rx = np.repeat(sx, sw) + (np.arange(len(owner)) - np.repeat(np.cumsum(sw) - sw, sw))
    ry = np.repeat(sy, sw)
    hit = np.flatnonzero(labels[ry, rx] == idx[owner] + 1)
    _, first = np.unique(owner[hit], return_index=True)
    gid = groups[ry[hit[first]], rx[hit[first]]].astype(np.int64)
    gx0 = np.full(m, np.inf)
    gy0 = np.full(m, np.inf)
    gx1 = np.full(m, -np.inf)
    gy1 = np.full(m, -np.inf)
    np.minimum.at(gx0, gid, x[idx])
    np.minimum.at(gy0, gid, y[idx])
    np.maximum.at(gx1, gid, x[idx] + w[idx])
    np.maximum.at(gy1, gid, y[idx] + h[idx])
    used = np.isfinite(gx0)
    used[0] = False
    g = np.flatnonzero(used)
    corners = _rect_corners(gx0[g], gy0[g], gx1[g], gy1[g]).reshape(-1, 2)
    orig = frame.to_original(corners).reshape(-1, 4, 2) * to_pt
    lo, hi = orig.min(1), orig.max(1)
    out = []
    mark_frames = [e.frame for e in marks]
    for (a, b), (c, d) in zip(lo, hi):
        if any(a >= mf[0] - 2 and b >= mf[1] - 2 and c <= mf[2] + 2 and d <= mf[3] + 2 for mf in mark_frames):
            continue
        out.append(Element("label-new", "label", (float(a), float(b), float(c), float(d)), angle=None, source="raster"))
    return out


def _rect_corners(x0, y0, x1, y1) -> np.ndarray:
    """(N, 4, 2) corners of axis-aligned rectangles."""
    return np.stack([np.stack([x0, y0], -1), np.stack([x1, y0], -1), np.stack([x1, y1], -1), np.stack([x0, y1], -1)], 1)

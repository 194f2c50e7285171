"""Turn straight strokes into ruling lines and boxes; shared by the vector and raster extractors.

Both extractors reduce what they see to *segments*: an ``(N, 4)`` array of endpoints
``x0, y0, x1, y1`` in points (top-left origin, y down) with a stroke width per segment. The same
code then estimates the page's dominant orientation, merges collinear pieces, closes rectangles
from crossing rules (four separate strokes that close a rectangle are one box; a table cell is a
box too) and keeps the rules that are not box edges as lines. Because a template learned from a
PDF and a scan of it go through the same assembly, the two sides describe the form alike.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..elements import Element, frame_from_center, normalise_angle


@dataclass(frozen=True)
class AssemblySettings:
    """Tolerances of the assembly, in points unless named otherwise."""

    #: Segments within this many degrees of the dominant orientation are rules (common practice:
    #: printed rules are straight to well under a degree; 2 degrees leaves room for scan bow).
    axis_tolerance_deg: float = 2.0
    #: Collinear pieces whose ends are this close are one rule (about 0.7 mm).
    join_gap: float = 2.0
    #: Rules this far apart across their direction are the same rule (about 0.5 mm).
    same_line: float = 1.5
    #: How far a rule may stop short of a crossing rule and still meet it (about 1 mm).
    meet: float = 3.0
    #: Shortest rule kept, and smallest box side kept (about 1.4 mm).
    min_length: float = 4.0
    #: A square box no larger than this is a checkbox (about 7 mm, common practice for tick boxes).
    checkbox_max: float = 20.0
    #: A rule whose length is covered by box edges to this share is not reported as a line too.
    covered_share: float = 0.8


def dominant_angle(segments: np.ndarray, weights: np.ndarray | None = None) -> float:
    """Dominant orientation of the segments modulo 90 degrees, in ``(-45, 45]``.

    Long-segment weighted: the peak of a histogram of angles modulo 90 (0.1 degree bins),
    refined by the weighted mean of the angles within 0.5 degree of the peak.

    Parameters
    ----------
    segments : (N, 4) array
        ``x0, y0, x1, y1`` per segment.
    weights : (N,) array, optional
        Defaults to the segment lengths.

    Returns
    -------
    float
        Degrees, y-down (positive looks clockwise); 0.0 when there are no segments.
    """
    seg = np.asarray(segments, dtype=float).reshape(-1, 4)
    if len(seg) == 0:
        return 0.0
    d = seg[:, 2:] - seg[:, :2]
    length = np.hypot(d[:, 0], d[:, 1])
    w = length if weights is None else np.asarray(weights, dtype=float)
    a = np.degrees(np.arctan2(d[:, 1], d[:, 0]))
    a = (a + 45.0) % 90.0 - 45.0  # [-45, 45)
    if w.sum() <= 0:
        return 0.0
    hist, edges = np.histogram(a, bins=900, range=(-45.0, 45.0), weights=w)
    # Circular smoothing over +-0.3 degree so a peak split across bins is not missed.
    kernel = np.ones(7)
    padded = np.concatenate([hist[-3:], hist, hist[:3]])
    smooth = np.convolve(padded, kernel, mode="valid")
    peak = (edges[np.argmax(smooth)] + edges[np.argmax(smooth) + 1]) / 2.0
    diff = (a - peak + 45.0) % 90.0 - 45.0
    near = np.abs(diff) <= 0.5
    if not near.any():
        return float(peak)
    est = peak + float(np.average(diff[near], weights=w[near]))
    return float((est + 45.0) % 90.0 - 45.0) if est != 45.0 else 45.0


def _rotate(pts: np.ndarray, angle_deg: float) -> np.ndarray:
    a = math.radians(angle_deg)
    c, s = math.cos(a), math.sin(a)
    return pts @ np.array([[c, s], [-s, c]])  # row vectors: p @ R.T with R = [[c, -s], [s, c]]


def _merge_axis(pos: np.ndarray, lo: np.ndarray, hi: np.ndarray, width: np.ndarray, st: AssemblySettings,
                slope: np.ndarray | None = None):
    """Merge collinear axis-aligned pieces: returns rows ``(pos, lo, hi, width, slope)``.

    ``pos`` is each piece's place across at its middle and ``slope`` how its place across changes
    along it; a merged row's ``pos`` is its place across at the middle of its span.
    """
    if len(pos) == 0:
        return np.zeros((0, 5))
    slope = np.zeros(len(pos)) if slope is None else slope
    order = np.argsort(pos, kind="stable")
    pos, lo, hi, width, slope = pos[order], lo[order], hi[order], width[order], slope[order]
    # Group by position across the rule: a new group where the gap to the previous exceeds tol.
    tol = np.maximum(st.same_line, width)
    breaks = np.flatnonzero(np.diff(pos) > tol[1:]) + 1
    mid = (lo + hi) / 2
    out = []
    for grp in np.split(np.arange(len(pos)), breaks):
        # Within a group, along the rule: a piece continues the row it meets end to end and lies
        # on (within tol across, carried along the row's last piece's slope). A group chains by
        # position alone, so on a bent or turned page two parallel rules a few points apart can
        # fall in one group through pieces elsewhere on the page; they stay two rows.
        rows: list[list] = []  # [pieces, end, last piece]
        for k in grp[np.argsort(lo[grp], kind="stable")]:
            for row in rows:
                last = row[2]
                across = pos[k] - (pos[last] + slope[last] * (mid[k] - mid[last]))
                if lo[k] <= row[1] + st.join_gap and abs(across) <= max(tol[k], tol[last]):
                    row[0].append(k)
                    if hi[k] >= row[1]:
                        row[1], row[2] = hi[k], k
                    break
            else:
                rows.append([[k], hi[k], k])
        out.extend(_merged_row(pos, lo, hi, width, slope, row[0]) for row in rows)
    return np.array(out, dtype=float)


def _merged_row(pos, lo, hi, width, slope, idx):
    idx = np.asarray(idx)
    length = np.maximum(hi[idx] - lo[idx], 1e-6)
    a, b = float(lo[idx].min()), float(hi[idx].max())
    s = float(np.average(slope[idx], weights=length))
    # Each piece's place across, carried along the common slope to the row's middle.
    at_mid = pos[idx] + s * ((a + b) / 2 - (lo[idx] + hi[idx]) / 2)
    return (float(np.average(at_mid, weights=length)), a, b, float(width[idx].max()), s)


def _crossing(hrow: np.ndarray, vrow: np.ndarray):
    """Where horizontal and vertical rows (see :func:`_merge_axis`; arrays of rows broadcast
    against each other) cross, each taken as the straight line through its middle with its
    slope: ``(x, y)``."""
    hy, hm, hs = hrow[..., 0], (hrow[..., 1] + hrow[..., 2]) / 2, hrow[..., 4]
    vx, vm, vs = vrow[..., 0], (vrow[..., 1] + vrow[..., 2]) / 2, vrow[..., 4]
    # y = hy + hs (x - hm) and x = vx + vs (y - vm), solved together.
    x = (vx + vs * (hy - hs * hm - vm)) / (1.0 - hs * vs)
    return x, hy + hs * (x - hm)


def _cells(h: np.ndarray, v: np.ndarray, st: AssemblySettings) -> list[tuple[int, int, int, int]]:
    """Smallest rectangles closed by crossing rules: ``(top h, left v, bottom h, right v)``."""
    if len(h) == 0 or len(v) == 0:
        return []
    hy, hx0, hx1 = h[:, 0], h[:, 1], h[:, 2]
    vx, vy0, vy1 = v[:, 0], v[:, 1], v[:, 2]
    # Where each pair crosses (each rule with its slope, see _crossing).
    cx, cy = _crossing(h[:, None, :], v[None, :, :])
    meets = (
        (cx >= hx0[:, None] - st.meet)
        & (cx <= hx1[:, None] + st.meet)
        & (cy >= vy0[None, :] - st.meet)
        & (cy <= vy1[None, :] + st.meet)
    )
    h_order = np.argsort(hy)
    v_order = np.argsort(vx)
    rank_h = np.empty(len(h), int)
    rank_h[h_order] = np.arange(len(h))
    rank_v = np.empty(len(v), int)
    rank_v[v_order] = np.arange(len(v))
    cells = []
    for i, j in zip(*np.nonzero(meets)):
        below = [i2 for i2 in h_order[rank_h[i] + 1:] if meets[i2, j] and hy[i2] - hy[i] >= st.min_length]
        right = [j2 for j2 in v_order[rank_v[j] + 1:] if meets[i, j2] and vx[j2] - vx[j] >= st.min_length]
        if not below or not right:
            continue
        found = None
        for i2 in below:
            for j2 in right:
                if meets[i2, j2]:
                    found = (int(i), int(j), int(i2), int(j2))
                    break
            if found:
                break
        if found:
            cells.append(found)
    return cells


def _grown(spans: list[tuple[float, float]], by: float) -> list[tuple[float, float]]:
    return [(a - by, b + by) for a, b in spans]


def _covered(lo: float, hi: float, spans: list[tuple[float, float]]) -> float:
    """Share of ``[lo, hi]`` covered by the union of ``spans``."""
    if hi <= lo:
        return 1.0
    if not spans:
        return 0.0
    s = sorted((max(a, lo), min(b, hi)) for a, b in spans if b > lo and a < hi)
    total, cur_a, cur_b = 0.0, None, None
    for a, b in s:
        if cur_b is None or a > cur_b:
            if cur_b is not None:
                total += cur_b - cur_a
            cur_a, cur_b = a, b
        else:
            cur_b = max(cur_b, b)
    if cur_b is not None:
        total += cur_b - cur_a
    return total / (hi - lo)


def assemble(
    segments: np.ndarray,
    widths: np.ndarray | None = None,
    source: str = "vector",
    settings: AssemblySettings = AssemblySettings(),
    skew_deg: float | None = None,
) -> tuple[list[Element], float]:
    """Lines and boxes from straight segments.

    Parameters
    ----------
    segments : (N, 4) array
        ``x0, y0, x1, y1`` in points.
    widths : (N,) array, optional
        Stroke widths in points (default 1).
    source : str
        ``"vector"`` or ``"raster"``, copied into the elements.
    skew_deg : float, optional
        Orientation to assemble along; measured with :func:`dominant_angle` when not given.

    Returns
    -------
    elements : list of Element
        Boxes, checkboxes and lines with provisional ids; frames and angles per
        :mod:`layoutcheck.elements`.
    skew_deg : float
        The orientation used.
    """
    seg = np.asarray(segments, dtype=float).reshape(-1, 4)
    wid = np.ones(len(seg)) if widths is None else np.asarray(widths, dtype=float).ravel()
    length = np.hypot(seg[:, 2] - seg[:, 0], seg[:, 3] - seg[:, 1])
    keep = length > 0.5
    seg, wid = seg[keep], wid[keep]
    if skew_deg is None:
        skew_deg = dominant_angle(seg)
    p0 = _rotate(seg[:, :2], -skew_deg)
    p1 = _rotate(seg[:, 2:], -skew_deg)
    d = p1 - p0
    a = np.degrees(np.arctan2(d[:, 1], d[:, 0]))
    a180 = (a + 90.0) % 180.0 - 90.0
    is_h = np.abs(a180) <= settings.axis_tolerance_deg
    is_v = np.abs(np.abs(a180) - 90.0) <= settings.axis_tolerance_deg
    is_o = ~(is_h | is_v)

    # A rule is not quite parallel to the page's axes when the page bends or is seen in slight
    # perspective: each keeps its slope, so the cells of a table follow their rules.
    h = _merge_axis((p0[is_h, 1] + p1[is_h, 1]) / 2, np.minimum(p0[is_h, 0], p1[is_h, 0]),
                    np.maximum(p0[is_h, 0], p1[is_h, 0]), wid[is_h], settings, d[is_h, 1] / d[is_h, 0])
    v = _merge_axis((p0[is_v, 0] + p1[is_v, 0]) / 2, np.minimum(p0[is_v, 1], p1[is_v, 1]),
                    np.maximum(p0[is_v, 1], p1[is_v, 1]), wid[is_v], settings, d[is_v, 0] / d[is_v, 1])
    # Columns of h and v: position across (at the middle), start, end, width, slope.
    cells = _cells(h, v, settings)

    out: list[Element] = []
    h_spans: dict[int, list] = {i: [] for i in range(len(h))}
    v_spans: dict[int, list] = {j: [] for j in range(len(v))}
    seen = set()

    def emit(kind, cx, cy, w, hgt, stroke, text=None):
        c = _rotate(np.array([[cx, cy]]), skew_deg)[0]
        ang, ww, hh = normalise_angle(skew_deg, w, hgt)
        # A drawn width is exact; one measured on a scan is whole pixels at best, too coarse to
        # say which scans could show the element (see layoutcheck.check.too_thin).
        stroke = tuple(None if v is None else float(v) for v in stroke) if source == "vector" else None
        a = (skew_deg + 90.0) % 180.0 - 90.0
        if stroke is not None and (a > 45.0 or a <= -45.0):
            stroke = stroke[::-1]  # turned a quarter: its upright sides are now level
        out.append(Element(id=f"{kind}-new", kind=kind, frame=frame_from_center(c[0], c[1], ww, hh),
                           angle=ang, text=text, source=source, stroke=stroke))

    for i, j, i2, j2 in cells:
        x0, x1, top, bottom = v[j, 0], v[j2, 0], h[i, 0], h[i2, 0]
        key = (round(x0, 1), round(top, 1), round(x1, 1), round(bottom, 1))
        if key in seen:
            continue
        seen.add(key)
        h_spans[i].append((x0, x1))
        h_spans[i2].append((x0, x1))
        v_spans[j].append((top, bottom))
        v_spans[j2].append((top, bottom))
        # The cell's corners where its rules cross: its centre and mean sides.
        tl, tr, br, bl = (np.array(_crossing(h[a], v[b]), float) for a, b in ((i, j), (i, j2), (i2, j2), (i2, j)))
        cx, cy = (tl + tr + br + bl) / 4
        w, hgt = ((tr[0] - tl[0]) + (br[0] - bl[0])) / 2, ((bl[1] - tl[1]) + (br[1] - tr[1])) / 2
        square = 0.75 <= w / hgt <= 1.33
        kind = "checkbox" if square and max(w, hgt) <= settings.checkbox_max else "box"
        emit(kind, cx, cy, w, hgt, (min(v[j, 3], v[j2, 3]), min(h[i, 3], h[i2, 3])))

    for i, (y, lo, hi, wd, _) in enumerate(h):
        if hi - lo >= settings.min_length and _covered(lo, hi, _grown(h_spans[i], settings.meet)) < settings.covered_share:
            emit("hline", (lo + hi) / 2, y, hi - lo, wd, (None, wd))
    for j, (x, lo, hi, wd, _) in enumerate(v):
        if hi - lo >= settings.min_length and _covered(lo, hi, _grown(v_spans[j], settings.meet)) < settings.covered_share:
            emit("vline", x, (lo + hi) / 2, wd, hi - lo, (wd, None))
    for k in np.flatnonzero(is_o):
        if length[keep][k] < settings.min_length:
            continue
        x0, y0, x1, y1 = seg[k]
        ang = math.degrees(math.atan2(y1 - y0, x1 - x0))
        ln = math.hypot(x1 - x0, y1 - y0)
        na, w, hgt = normalise_angle(ang, ln, wid[k])
        out.append(Element(id="line-new", kind="line", frame=frame_from_center((x0 + x1) / 2, (y0 + y1) / 2, w, hgt),
                           angle=na, source=source, stroke=(float(wid[k]),) * 2 if source == "vector" else None))
    return out, float(skew_deg)


def assign_captions(elements: list[Element], max_gap: float = 40.0) -> list[Element]:
    """Give boxes, checkboxes, fields and lines the text of their nearest label as caption.

    A label inside the element's top-left area, just above it or just left of it on the same row
    is preferred, in that order, within ``max_gap`` points (about 14 mm).
    """
    labels = [e for e in elements if e.kind in ("label", "textblock") and e.text]
    if not labels:
        return list(elements)
    lf = np.array([e.frame for e in labels])
    out = []
    for e in elements:
        if e.kind in ("label", "textblock") or e.caption:
            out.append(e)
            continue
        x0, top, x1, bottom = e.frame
        inside = (lf[:, 0] >= x0 - 1) & (lf[:, 2] <= x1 + 1) & (lf[:, 1] >= top - 1) & (lf[:, 3] <= bottom + 1)
        h_overlap = np.minimum(lf[:, 2], x1) - np.maximum(lf[:, 0], x0)
        above = (lf[:, 3] <= top + 2) & (top - lf[:, 3] <= max_gap / 2) & (h_overlap > 0)
        v_overlap = np.minimum(lf[:, 3], bottom) - np.maximum(lf[:, 1], top)
        left = (lf[:, 2] <= x0 + 2) & (x0 - lf[:, 2] <= max_gap) & (v_overlap > 0)
        right = (lf[:, 0] >= x1 - 2) & (lf[:, 0] - x1 <= max_gap) & (v_overlap > 0) & (e.kind == "checkbox")
        pick = None
        for mask, dist_of in ((inside, np.hypot(lf[:, 0] - x0, lf[:, 1] - top)), (above, top - lf[:, 3] + np.abs(lf[:, 0] - x0) * 0.1),
                              (right, lf[:, 0] - x1), (left, x0 - lf[:, 2])):
            if mask.any():
                cand = np.flatnonzero(mask)
                pick = cand[np.argmin(dist_of[cand])]
                break
        out.append(e.replace(caption=labels[pick].text) if pick is not None else e)
    return out

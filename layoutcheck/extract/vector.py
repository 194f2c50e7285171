"""Elements of a born-digital PDF page, read with pdfplumber.

pdfplumber already gives coordinates with a top-left origin (relative to the MediaBox) and
applies ``/Rotate``; the one remaining step to our convention is moving the origin to the visible
CropBox corner, done in :func:`_to_page` and nowhere else (:func:`layoutcheck.sources._display_size`
gives the matching page size).
"""

from __future__ import annotations

import math

import numpy as np

from ..elements import Element, PageElements, assign_ids, frame_from_center, normalise_angle
from ..sources import VectorPage
from .assemble import AssemblySettings, assemble, assign_captions

#: A filled shape thinner than this is a rule drawn as a filled bar (points, about 0.9 mm).
THIN_FILL = 2.5
#: A filled square between these sides is a registration mark (points: about 2.5 to 12 mm).
MARK_SIDE = (7.0, 34.0)


def _to_page(pl, pts: np.ndarray) -> np.ndarray:
    """pdfplumber coordinates to page coordinates: origin at the visible (CropBox) top-left."""
    x0, top = float(pl.cropbox[0]), float(pl.cropbox[1])
    return np.asarray(pts, dtype=float) - np.array([x0, top])


def _polygon_segments(pts: np.ndarray, closed: bool) -> np.ndarray:
    if closed and len(pts) > 2 and not np.allclose(pts[0], pts[-1]):
        pts = np.vstack([pts, pts[:1]])
    if len(pts) < 2:
        return np.zeros((0, 4))
    return np.hstack([pts[:-1], pts[1:]])


def _shape_pieces(pts: np.ndarray, filled: bool, stroked: bool, width: float, closed: bool):
    """Segments, widths and marks drawn by one straight-edged path."""
    segs = _polygon_segments(pts, closed=closed or filled)
    if not filled:
        return segs if stroked else np.zeros((0, 4)), [width] * (len(segs) if stroked else 0), []
    lengths = np.hypot(segs[:, 2] - segs[:, 0], segs[:, 3] - segs[:, 1]) if len(segs) else np.zeros(0)
    if len(segs) in (4, 5) and len(lengths) >= 4:
        sides = np.sort(lengths[lengths > 1e-6])
        if len(sides) >= 4:
            short, long = float(sides[:2].mean()), float(sides[-2:].mean())
            if short <= THIN_FILL and long > THIN_FILL:
                # A rule drawn as a filled bar: its centre line is the rule.
                k = int(np.argmax(lengths))
                centre = pts.mean(axis=0)
                d = (segs[k, 2:] - segs[k, :2]) / lengths[k]
                a, b = centre - d * long / 2, centre + d * long / 2
                return np.array([[a[0], a[1], b[0], b[1]]]), [short], []
            if MARK_SIDE[0] <= short and long <= MARK_SIDE[1] and long / short < 1.3:
                return np.zeros((0, 4)), [], [pts]
    if stroked:
        return segs, [width] * len(segs), []
    return np.zeros((0, 4)), [], []


def _graphics(pl) -> tuple[np.ndarray, np.ndarray, list[np.ndarray]]:
    segs, widths, marks = [], [], []
    for ln in pl.lines:
        p = _to_page(pl, ln["pts"])
        segs.append(_polygon_segments(p, False))
        widths += [float(ln.get("linewidth") or 1.0)] * (len(p) - 1)
    for r in pl.rects:
        p = _to_page(pl, [(r["x0"], r["top"]), (r["x1"], r["top"]), (r["x1"], r["bottom"]), (r["x0"], r["bottom"])])
        s, w, m = _shape_pieces(p, bool(r.get("fill")), bool(r.get("stroke", True)), float(r.get("linewidth") or 1.0), True)
        segs.append(s)
        widths += w
        marks += m
    for c in pl.curves:
        path = c.get("path") or []
        if any(op[0] in ("c", "v", "y") for op in path):
            continue  # curved outlines (round stamps, logos) are not rules
        p = _to_page(pl, c["pts"])
        closed = any(op[0] == "h" for op in path)
        s, w, m = _shape_pieces(p, bool(c.get("fill")), bool(c.get("stroke", True)), float(c.get("linewidth") or 1.0), closed)
        segs.append(s)
        widths += w
        marks += m
    seg = np.vstack([s for s in segs if len(s)]) if any(len(s) for s in segs) else np.zeros((0, 4))
    return seg, np.asarray(widths, dtype=float), marks


def _char_direction(ch) -> float:
    """Direction of writing of a char, degrees in y-down page coordinates.

    pdfplumber's char matrix already includes the page's ``/Rotate``.
    """
    a, b = ch["matrix"][0], ch["matrix"][1]
    return -math.degrees(math.atan2(b, a))


def _glyph_height(ch, adv: float, ang: float) -> float:
    """Height of a char across its writing direction, from its axis-aligned box."""
    s, c = abs(math.sin(math.radians(ang))), abs(math.cos(math.radians(ang)))
    if c >= s:
        return max(((ch["bottom"] - ch["top"]) - adv * s) / c, 0.1)
    return max(((ch["x1"] - ch["x0"]) - adv * c) / s, 0.1)


def _labels(pl) -> list[Element]:
    """Printed text merged into labels: runs of characters on one line with word-sized gaps."""
    chars = [c for c in pl.chars if c.get("text", "").strip() or c.get("text") == " "]
    runs: list[list[dict]] = []
    cur: list[dict] = []
    prev = None
    for ch in chars:
        ang = _char_direction(ch)
        d = np.array([math.cos(math.radians(ang)), math.sin(math.radians(ang))])
        c = np.array([(ch["x0"] + ch["x1"]) / 2, (ch["top"] + ch["bottom"]) / 2])
        adv = float(ch.get("adv") or (ch["x1"] - ch["x0"])) * math.hypot(ch["matrix"][0], ch["matrix"][1])
        size = _glyph_height(ch, adv, ang)
        item = {"ch": ch, "ang": ang, "d": d, "c": c, "adv": adv, "size": size}
        if prev is not None:
            delta = c - prev["c"]
            along = float(delta @ prev["d"])
            across = abs(float(delta[0] * prev["d"][1] - delta[1] * prev["d"][0]))
            gap = along - (prev["adv"] + adv) / 2
            same = (abs(((ang - prev["ang"]) + 180) % 360 - 180) < 1.0 and across < 0.35 * prev["size"]
                    and -0.5 * prev["size"] < gap < 1.2 * prev["size"])
            if not same:
                runs.append(cur)
                cur = []
        cur.append(item)
        prev = item
    if cur:
        runs.append(cur)
    out = []
    for run in runs:
        text = "".join(it["ch"]["text"] for it in run).strip()
        text = " ".join(text.split())
        if not text:
            continue
        visible = [it for it in run if it["ch"]["text"].strip()]
        d = visible[0]["d"]
        n = np.array([-d[1], d[0]])
        cs = np.array([it["c"] for it in visible])
        along = cs @ d
        i0, i1 = int(np.argmin(along)), int(np.argmax(along))
        start = along[i0] - visible[i0]["adv"] / 2
        end = along[i1] + visible[i1]["adv"] / 2
        across = float(np.mean(cs @ n))
        ang = visible[0]["ang"]
        hgt = float(np.median([it["size"] for it in visible]))
        centre = d * (start + end) / 2 + n * across
        na, w, h = normalise_angle(ang, end - start, hgt)
        centre = _to_page(pl, centre[None, :])[0]
        out.append(Element(id="label-new", kind="label", frame=frame_from_center(centre[0], centre[1], w, h),
                           angle=na, text=text, source="vector"))
    return out


def _fields(pl) -> list[Element]:
    out = []
    for a in pl.annots or []:
        data = a.get("data") or {}
        sub = data.get("Subtype")
        if getattr(sub, "name", sub) not in ("Widget", b"Widget"):
            continue
        name = data.get("T")
        if isinstance(name, bytes):
            name = name.decode("utf-8", "replace")
        p = _to_page(pl, [(a["x0"], a["top"]), (a["x1"], a["bottom"])])
        frame = (float(p[0, 0]), float(p[0, 1]), float(p[1, 0]), float(p[1, 1]))
        if frame[2] - frame[0] < 1 or frame[3] - frame[1] < 1:
            continue
        out.append(Element(id="field-new", kind="field", frame=frame, angle=0.0, text=name or None, source="vector"))
    return out


def _marks(marks: list[np.ndarray]) -> list[Element]:
    out = []
    for pts in marks:
        c = pts[:4].mean(axis=0)
        d = pts[1] - pts[0]
        ang, w, h = normalise_angle(math.degrees(math.atan2(d[1], d[0])), float(np.hypot(*d)), float(np.hypot(*(pts[2] - pts[1]))))
        out.append(Element(id="mark-new", kind="mark", frame=frame_from_center(c[0], c[1], w, h), angle=ang, source="vector"))
    return out


def extract_vector(page: VectorPage, settings: AssemblySettings = AssemblySettings()) -> PageElements:
    """Elements of a born-digital page: rules, boxes, checkboxes, labels, fields and marks.

    Returns
    -------
    PageElements
        Elements with ids in reading order and captions from their nearest labels.
    """
    pl = page.plumber
    seg, widths, marks = _graphics(pl)
    shapes, _ = assemble(seg, widths, source="vector", settings=settings)
    elements = shapes + _marks(marks) + _labels(pl) + _fields(pl)
    elements = assign_captions(assign_ids(elements))
    return PageElements(page.width, page.height, tuple(elements), source="vector", note="vector")

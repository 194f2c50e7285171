"""A second look at a scanned page: is a template's rule or box where the page pose puts it?

The raster extractor reads a page without knowing the form. A rule broken into dashes by a
bitonal threshold, or a checkbox whose side is joined by a stamp's edge or a tick, can then be
lost, and the template element would be reported missing although it is printed where it
belongs. Once the page pose is known, each offending rule or box is looked for again on the grey
image, side by side, at the place the pose predicts: a strip of the image is sampled across each
side (``cv2.remap``, bilinear) and the side is the row of the strip that holds ink along most of
the side, thin, with paper beside it. What is found goes back to the solver as an ordinary found
element, so it is judged like any other (moved, resized or in place); what is not found stays
missing.

Only a short reach is searched (1.5 mm, and less than a third of the box across the side), so the
second look confirms an element near its expected place and never stands in for the extractor:
a box that has really moved by several millimetres is found by the extractor or not at all.

Coordinates: elements in points (top-left origin, y down); the image in continuous pixel
coordinates as in :mod:`layoutcheck.extract.raster` (a pixel centre at ``+0.5``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import cv2
import numpy as np

from ..elements import MM_PER_INCH, POINTS_PER_INCH, Element, frame_from_center, normalise_angle, outline
from ..pose import Pose


@dataclass(frozen=True)
class LookSettings:
    """How far and how strictly the second look searches. Sizes in mm."""

    #: Farthest a side is searched from its predicted place.
    reach_mm: float = 1.5
    #: ... and at most this share of the box's size across the side (so the search of one side
    #: never reaches the opposite side, or the middle of a small checkbox).
    reach_share: float = 0.3
    #: Share of a box side's middle (the ends are left out: ticks and corners) that must hold ink
    #: on the side's row.
    side_cover: float = 0.7
    #: The same for a ruling line over its whole predicted length: a thin rule (0.5 point)
    #: scanned at 200 dpi and thresholded to black and white breaks into dashes that hold a
    #: third of its length, a fifth after strong JPEG compression; a rule with paper along both
    #: edges over its whole length is not met by chance.
    line_cover: float = 0.2
    #: Ink beside the rule (0.3 mm to 0.8 mm off its edge) at most this share of the rule's own:
    #: a rule has paper along it, a line of text or a filled area does not.
    beside: float = 0.35
    #: Thickest rule, mm (printed form rules are under 0.5 mm: common practice).
    max_width_mm: float = 0.8
    #: Least grey-level contrast between the rule and the paper.
    contrast: float = 40.0


LOOK_KINDS = ("box", "checkbox", "hline", "vline", "line")


def second_look(grey: np.ndarray, dpi: float, expected: Sequence[Element], pose: Pose,
                settings: LookSettings = LookSettings()) -> list[Element | None]:
    """Look for each expected rule or box at the place ``pose`` gives it on a scanned page.

    Parameters
    ----------
    grey : (H, W) uint8
        The page, 0 black .. 255 white.
    dpi : float
        Its resolution.
    expected : sequence of Element
        Template elements (points, template page), of the kinds in :data:`LOOK_KINDS`.
    pose : Pose
        Template points to input points.

    Returns
    -------
    list
        Per expected element, the element found (input points, ``source="look"``) or None.
    """
    img = np.ascontiguousarray(grey, dtype=np.uint8)
    scale = dpi / POINTS_PER_INCH  # points -> continuous px
    mm_px = dpi / MM_PER_INCH
    out: list[Element | None] = []
    for e in expected:
        corners = pose.apply(outline(e)) * scale
        if e.kind in ("box", "checkbox"):
            out.append(_look_box(img, e, corners, mm_px, scale, settings))
        elif e.kind in ("hline", "vline", "line"):
            out.append(_look_line(img, e, corners, mm_px, scale, settings))
        else:
            out.append(None)
    return out


def _look_box(img, e: Element, c: np.ndarray, mm_px: float, scale: float, st: LookSettings) -> Element | None:
    """The four sides of a box (corners ``c`` clockwise from top-left, px), or None."""
    width, height = np.hypot(*(c[1] - c[0])), np.hypot(*(c[3] - c[0]))
    offsets: list[float | None] = []
    for k in range(4):
        across = height if k % 2 == 0 else width
        reach = min(st.reach_mm * mm_px, st.reach_share * across)
        side = measure_side(img, c[k], c[(k + 1) % 4], reach, (0.15, 0.85), st.side_cover, mm_px, st)
        if side is None:
            return None
        offsets.append(None if side is COVERED else side.offset)
    # One side may lie under other ink on both edges: the box then keeps its expected size across
    # that side, placed by the opposite side.
    covered = [k for k in range(4) if offsets[k] is None]
    if len(covered) > 1:
        return None
    for k in covered:
        offsets[k] = -offsets[(k + 2) % 4]  # type: ignore[operator]
    # Each side moved along its outward normal; the corners are where neighbouring sides meet.
    lines = []
    for k in range(4):
        p, q = c[k], c[(k + 1) % 4]
        u = (q - p) / np.hypot(*(q - p))
        lines.append((p + offsets[k] * np.array([u[1], -u[0]]), u))
    new = np.array([_meet(lines[k - 1], lines[k]) for k in range(4)])
    if not np.isfinite(new).all():
        return None
    return _element(e.kind, new / scale)


def _look_line(img, e: Element, c: np.ndarray, mm_px: float, scale: float, st: LookSettings) -> Element | None:
    """A ruling line along the long axis of its outline ``c`` (px), or None."""
    if np.hypot(*(c[1] - c[0])) >= np.hypot(*(c[3] - c[0])):
        p, q = (c[0] + c[3]) / 2.0, (c[1] + c[2]) / 2.0
    else:
        p, q = (c[0] + c[1]) / 2.0, (c[3] + c[2]) / 2.0
    side = measure_side(img, p, q, st.reach_mm * mm_px, (0.0, 1.0), st.line_cover, mm_px, st, extent=True)
    if side is None or side is COVERED or side.extent is None:
        return None
    d, thick, (t0, t1) = side.offset, side.thick, side.extent
    u = (q - p) / np.hypot(*(q - p))
    n = np.array([u[1], -u[0]])
    a, b = p + t0 * u + d * n, p + t1 * u + d * n
    length, ang = float(np.hypot(*(b - a))), math.degrees(math.atan2(b[1] - a[1], b[0] - a[0]))
    ang, w, h = normalise_angle(ang, length, max(thick, 1.0))
    cx, cy = (a + b) / 2.0 / scale
    return Element("look-new", e.kind, frame_from_center(float(cx), float(cy), w / scale, h / scale), angle=ang,
                   source="look")


def _meet(l1, l2) -> np.ndarray:
    """Intersection of two lines given as (point, direction)."""
    (p1, u1), (p2, u2) = l1, l2
    m = np.array([u1, -u2]).T
    if abs(np.linalg.det(m)) < 1e-9:
        return np.full(2, np.nan)
    s = np.linalg.solve(m, p2 - p1)
    return p1 + s[0] * u1


def _element(kind: str, corners_pt: np.ndarray) -> Element:
    top = corners_pt[1] - corners_pt[0]
    w = float(np.hypot(*top))
    h = float(np.hypot(*(corners_pt[3] - corners_pt[0])))
    ang, w, h = normalise_angle(math.degrees(math.atan2(top[1], top[0])), w, h)
    cx, cy = corners_pt.mean(0)
    return Element("look-new", kind, frame_from_center(float(cx), float(cy), w, h), angle=ang, source="look")


#: :func:`measure_side`'s answer for a side lying under other ink on both edges.
COVERED = "covered"


@dataclass(frozen=True)
class Side:
    """A rule found by :func:`measure_side`: its centre ``offset`` along the outward normal of
    the segment and its width ``thick``, px; with ``extent``, where it starts and ends along the
    segment, px from its start."""

    offset: float
    thick: float
    extent: tuple[float, float] | None = None


def _rule_band(cov: np.ndarray, i: int, most: int, gap: tuple[int, int], beside: float):
    """The rule's rows around row ``i`` of a coverage profile, ``(a, b, clear edges)``, or None.

    The band holds the rows next to ``i`` with at least three quarters of its ink; a band of more
    than ``most`` rows is a bar or a letter's stroke, not a rule (None). An edge of the band is
    *clear* when the rows ``gap`` beyond it hold little ink: paper along the rule. A tick inside a
    box or a stamp's letter touching a side leaves that edge unclear, not the band thicker, for
    their ink covers only part of the side's length.
    """
    level = 0.75 * cov[i]
    a = b = i
    while a > 0 and cov[a - 1] >= level:
        a -= 1
        if b - a + 1 > most:
            return None
    while b < len(cov) - 1 and cov[b + 1] >= level:
        b += 1
        if b - a + 1 > most:
            return None
    clear = 0
    for beyond in (cov[max(a - gap[1], 0):max(a - gap[0], 0)], cov[b + gap[0] + 1:b + gap[1] + 1]):
        clear += int(len(beyond) == 0 or beyond.mean() <= beside * cov[i])
    return a, b, clear


def measure_side(img: np.ndarray, p: np.ndarray, q: np.ndarray, reach: float, span: tuple[float, float],
                 cover: float, mm_px: float, st: LookSettings = LookSettings(), extent: bool = False):
    """Find a straight rule near the segment ``p -> q`` (continuous px) on a grey image.

    A strip is sampled across the segment (every half pixel, out to ``reach`` and a margin
    beyond) and along it (every pixel over the ``span`` share of its length). The rule is the row
    of the strip within ``reach`` holding ink (darker than half-way between paper and ink, within
    half a pixel) in the most columns, in a band no thicker than a rule with paper beside it: on
    both edges for a ruling line (``extent``); on one edge at least for a box's side (the other
    may hold a tick or handwriting inside the box, or a stamp outside it).

    Parameters
    ----------
    img : (H, W) uint8
    p, q : (2,) arrays
        Predicted ends; the outward normal is ``(u_y, -u_x)`` for the direction ``u`` of
        ``p -> q`` (outward for a box's sides taken clockwise).
    reach : float
        Largest offset searched, px.
    span : (float, float)
        Part of the segment sampled, as shares of its length.
    cover : float
        Least share of the sampled columns with ink on the rule's row.
    mm_px : float
        Pixels per mm.
    extent : bool
        Also measure where the rule starts and ends (within 10 % of its length beyond the
        predicted ends), and ask for paper along both its edges.

    Returns
    -------
    Side, COVERED or None
        The rule found (:class:`Side`); :data:`COVERED` when the predicted place is under other
        ink that cannot be told from a rule; None when no rule is there.
    """
    vec = q - p
    length = float(np.hypot(*vec))
    if length < 3:
        return None
    u = vec / length
    n = np.array([u[1], -u[0]])
    step = 0.5
    margin = 1.0 * mm_px + st.max_width_mm * mm_px / 2
    d = np.arange(-(reach + margin), reach + margin + 1e-9, step)
    lo, hi = (-0.1, 1.1) if extent else span
    t = np.arange(lo * length, hi * length + 1e-9, 1.0)
    if len(t) < 4:
        return None
    pts = p[None, None, :] + t[None, :, None] * u + d[:, None, None] * n
    g = cv2.remap(img, (pts[..., 0] - 0.5).astype(np.float32), (pts[..., 1] - 0.5).astype(np.float32),
                  cv2.INTER_LINEAR, borderMode=cv2.BORDER_CONSTANT, borderValue=255).astype(np.float32)
    paper, ink = np.percentile(g, 90), g.min()
    if paper - ink < st.contrast:
        return None
    dark = g < (paper + ink) / 2.0
    # Ink within half a pixel of each row (the rows are half a pixel apart).
    near = dark.copy()
    near[1:] |= dark[:-1]
    near[:-1] |= dark[1:]
    inside = (t >= span[0] * length) & (t <= span[1] * length)
    cov_near = near[:, inside].mean(1)
    cov = dark[:, inside].mean(1)
    search = np.flatnonzero((np.abs(d) <= reach) & (cov_near >= cover))
    if len(search) == 0:
        return None
    most = max(2, int(math.ceil((st.max_width_mm * mm_px + 2) / step)))
    gap = (int(round(0.3 * mm_px / step)), int(round(0.8 * mm_px / step)))
    need = 2 if extent else 1
    # A band of ink along the segment with paper along its edges; among several, the one with
    # the most ink, then the nearest the predicted place.
    best = None
    for i in search[np.lexsort((np.abs(d[search]), -cov[search]))]:
        band = _rule_band(cov, int(i), most, gap, st.beside)
        if band is not None and band[2] >= need:
            best = band
            break
    if best is None:
        # Ink on the predicted row, merged with other ink (a stamp's letter lying along it): the
        # side is covered, neither confirmed nor denied.
        zero = np.abs(d) <= 1.0
        return COVERED if not extent and cov_near[zero].max() >= cover else None
    a, b, _ = best
    thick = (b - a + 1) * step
    # Sub-pixel place: the darkness-weighted centroid across the band (and a row either side,
    # for the blur), over the columns that hold the rule.
    rows = slice(max(a - 1, 0), min(b + 2, len(d)))
    cols = inside & near[a:b + 1].any(0)
    wgt = np.clip((paper - g[rows][:, cols]) / (paper - ink), 0.0, 1.0)
    if wgt.sum() <= 0:
        return None
    offset = float((d[rows][:, None] * wgt).sum() / wgt.sum())
    if not extent:
        return Side(offset, thick)
    # Extent: the outermost columns whose 1 mm window is at least half ink on the band (a window
    # centred on a solid rule's last column is half on it).
    on = near[a:b + 1].any(0).astype(np.float32)
    win = max(1, int(round(mm_px)))
    smooth = np.convolve(on, np.ones(win, np.float32) / win, mode="same")
    hit = np.flatnonzero(smooth >= 0.5)
    if len(hit) == 0:
        return None
    return Side(offset, thick, (float(t[hit[0]] - 0.5), float(t[hit[-1]] + 0.5)))

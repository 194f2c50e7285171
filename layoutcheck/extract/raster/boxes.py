"""Boxes, checkboxes and rules from the fitted segments of a scanned page."""

from __future__ import annotations

import numpy as np

from ...elements import MM_PER_INCH, POINTS_PER_INCH, Element, outline
from ..assemble import _rotate, assemble
from .settings import RasterSettings


def _find_boxes(seg: np.ndarray, wid: np.ndarray, skew: float, settings: RasterSettings,
                ink: np.ndarray | None = None, dpi: float | None = None) -> list[Element]:
    """Boxes, checkboxes and rules from fitted segments and widths (points), ``skew`` the fine one.

    With the page's ink at ``dpi``, a candidate drawn by a letter of text is no box
    (:func:`glyph_outlines`).
    """
    shapes, _ = assemble(seg, wid, source="raster", settings=settings.assembly, skew_deg=skew)
    # A short rule that closes no box is as likely a letter's stroke: only boxes keep short sides.
    shortest = settings.long_rule_mm * POINTS_PER_INCH / MM_PER_INCH
    shapes = [e for e in shapes if e.kind not in ("hline", "vline", "line") or max(e.size) >= shortest]
    smallest = settings.min_box_mm * POINTS_PER_INCH / MM_PER_INCH
    shapes = [e for e in shapes if e.kind not in ("box", "checkbox")
              or (max(e.size) >= smallest
                  and not is_glyph_box(e.frame, side_width(e.frame, seg, wid, skew), settings.min_box_inside))]
    if ink is None:
        return shapes
    boxes = [k for k, e in enumerate(shapes) if e.kind in ("box", "checkbox")]
    sides = np.array([side_width(shapes[k].frame, seg, wid, skew) for k in boxes])
    glyph = glyph_outlines([shapes[k] for k in boxes], sides, ink, dpi, settings)
    drop = {k for k, g in zip(boxes, glyph) if g}
    return [e for k, e in enumerate(shapes) if k not in drop]


def side_width(frame, seg: np.ndarray, wid: np.ndarray, skew: float, near: float = 1.5) -> float:
    """Widest stroke among the fitted segments lying on a box's four sides (points; 0 if none).

    ``frame`` is the box's frame about its centre in the page's axes turned by ``skew``
    (degrees), as :func:`~layoutcheck.extract.assemble.assemble` gives it; a segment lies on a
    side when its middle is within ``near`` points of the side's line and inside its span.
    """
    if not len(seg):
        return 0.0
    x0, top, x1, bottom = frame
    c = _rotate(np.array([[(x0 + x1) / 2, (top + bottom) / 2]]), -skew)[0]
    hw, hh = (x1 - x0) / 2, (bottom - top) / 2
    mid = _rotate((seg[:, :2] + seg[:, 2:]) / 2, -skew) - c
    d = _rotate(seg[:, 2:] - seg[:, :2], -skew)
    horiz = np.abs(d[:, 0]) >= np.abs(d[:, 1])
    on_h = horiz & (np.abs(np.abs(mid[:, 1]) - hh) <= near) & (np.abs(mid[:, 0]) <= hw)
    on_v = ~horiz & (np.abs(np.abs(mid[:, 0]) - hw) <= near) & (np.abs(mid[:, 1]) <= hh)
    on = on_h | on_v
    return float(wid[on].max()) if on.any() else 0.0


def is_glyph_box(frame, side: float, min_inside: float) -> bool:
    """Whether a closed outline is a letter's counter rather than a box: its inside (the frame,
    measured between the sides' centres, less one side's width) is under ``min_inside`` times
    the width of its sides. A printed box or checkbox has thin sides around a roomy inside; the
    bowls of a bold B or O have sides as thick as their inside is small."""
    x0, top, x1, bottom = frame
    inside = min(x1 - x0, bottom - top) - side
    return bool(side > 0 and inside < min_inside * side)


def glyph_outlines(boxes: list[Element], sides: np.ndarray, ink: np.ndarray, dpi: float,
                   settings: RasterSettings) -> np.ndarray:
    """Which box candidates lie inside a text component: drawn by a letter, not by rules.

    Parameters
    ----------
    boxes : list of Element
        Box and checkbox candidates (points).
    sides : (N,) array
        Width of each candidate's sides, points (:func:`side_width`).
    ink : (H, W) bool array
        The page's ink at ``dpi`` (its own orientation).

    Returns
    -------
    (N,) bool array
        True for a candidate whose outline is part of a connected piece of ink that is no
        larger than a letter (:attr:`RasterSettings.max_letter_mm`), that looks like a letter
        rather than a box, either

        - more than the outline: a share of its ink (:attr:`RasterSettings.letter_off_outline`)
          lies off the band of the candidate's four sides (a letter's other bowl, its stem), or
        - drawn heavy for a box: sides, less the pixel of blur a scan adds, over
          :attr:`RasterSettings.letter_stroke` of its inside (the ring of an O or a D; a
          checkbox's rules are a few hundredths of its side),

        and that stands in a line of text: beside a piece of ink of about its own height (0.8 to
        1.25 times) on the same line, no farther off than that height (the next letter of a word:
        letters of a word stand closer than their height, common practice), which is not itself
        the clean or light outline of a candidate (a row of checkboxes, heavy or blurred,
        crossed or ticked, is no word),
        unless the candidate is both heavy and more than its outline (a B beside an O). A
        checkbox beside its caption is a clean, light outline among letters smaller than itself.
    """
    import cv2

    out = np.zeros(len(boxes), bool)
    k = dpi / POINTS_PER_INCH
    letter = settings.max_letter_mm * dpi / MM_PER_INCH
    # A candidate larger than a letter is drawn by no letter; the pieces of ink are labelled only
    # around the others (twice a letter's size about them: a neighbour stands within one height).
    small = [j for j, e in enumerate(boxes) if max(e.size) * k <= letter]
    if not small or not ink.any():
        return out
    corners = np.concatenate([outline(boxes[j]) * k for j in small])
    h_full, w_full = ink.shape
    c0 = np.maximum(np.floor(corners.min(0) - 2 * letter).astype(int), 0)
    c1 = np.minimum(np.ceil(corners.max(0) + 2 * letter).astype(int), [w_full, h_full])
    window = np.ascontiguousarray(ink[c0[1]:c1[1], c0[0]:c1[0]])
    n, labels, stats, _ = cv2.connectedComponentsWithStats(window.view(np.uint8), connectivity=8)
    stats = stats.copy()
    stats[:, :2] += c0  # back to the page's pixels
    bx, by, bw, bh, area = (stats[:, i].astype(float) for i in range(5))
    h_img, w_img = labels.shape
    t = np.linspace(0.0, 1.0, 16)
    own = np.zeros(len(boxes), int)
    like = np.zeros(len(boxes), bool)
    clean = np.zeros(len(boxes), bool)
    heavy = np.zeros(len(boxes), bool)
    for j in small:
        e = boxes[j]
        c = outline(e) * k
        pts = np.concatenate([c[i] + np.outer(t, c[(i + 1) % 4] - c[i]) for i in range(4)])
        hit = labels[np.clip(np.floor(pts[:, 1]).astype(int) - c0[1], 0, h_img - 1),
                     np.clip(np.floor(pts[:, 0]).astype(int) - c0[0], 0, w_img - 1)]
        hit = hit[hit > 0]
        if not len(hit):
            continue
        lab = own[j] = int(np.bincount(hit).argmax())
        if max(bw[lab], bh[lab]) > letter:
            clean[j] = True  # ruling larger than any letter: no word, and no letter beside one
            continue
        # A stroke measured on a scan is whole pixels, blur adding one: a checkbox of 4 mm drawn
        # at 0.8 pt measures 0.38 mm at 200 dpi, a tenth of its inside.
        heavy[j] = sides[j] - 1.0 / k > settings.letter_stroke * (min(e.size) - sides[j])
        # The band of the four sides, in the component's own window.
        x0, y0, w, h = (int(v) for v in stats[lab, :4])
        band = np.zeros((h, w), np.uint8)
        poly = np.round((c - [x0, y0]) * 16).astype(np.int32)
        cv2.polylines(band, [poly], True, 1, max(1, int(round(sides[j] * k)) + 3), cv2.LINE_8, shift=4)
        wx, wy = x0 - c0[0], y0 - c0[1]
        off = np.count_nonzero((labels[wy:wy + h, wx:wx + w] == lab) & ~band.astype(bool))
        like[j] = heavy[j] or off >= settings.letter_off_outline * area[lab]
        # A clean outline: hardly any ink off its sides (a third of the share above: noise, and
        # the rounding of corners).
        clean[j] = off < settings.letter_off_outline / 3.0 * area[lab]
    rings = np.zeros(n, bool)
    # Outlines of candidates drawn light are no letters beside one, crossed or ticked (a column
    # of crossed checkboxes stands like a word turned a quarter).
    rings[own[(own > 0) & (clean | ~heavy)]] = True
    rings[0] = True
    for j in np.flatnonzero(like):
        lab = own[j]
        # A heavy letter with more than its outline (a B) may stand beside a ring (an O).
        others = rings if clean[j] or not heavy[j] else np.arange(n) == 0
        # A neighbour on the same line (rows, or columns on a page turned a quarter).
        for pos, size, cpos, csize in ((bx, bw, by, bh), (by, bh, bx, bw)):
            hgt = csize[lab]
            near = ((csize >= 0.8 * hgt) & (csize <= 1.25 * hgt)
                    & (np.minimum(cpos + csize, cpos[lab] + hgt) - np.maximum(cpos, cpos[lab]) >= 0.5 * hgt)
                    & (np.maximum(pos - (pos[lab] + size[lab]), pos[lab] - (pos + size)) <= hgt) & ~others)
            near[lab] = False
            if near.any():
                out[j] = True
                break
    return out

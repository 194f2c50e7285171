"""Boxes, checkboxes and rules from the fitted segments of a scanned page."""

from __future__ import annotations

import numpy as np

from ...elements import MM_PER_INCH, POINTS_PER_INCH, Element
from ..assemble import _rotate, assemble
from .settings import RasterSettings


def _find_boxes(seg: np.ndarray, wid: np.ndarray, skew: float, settings: RasterSettings) -> list[Element]:
    """Boxes, checkboxes and rules from fitted segments and widths (points), ``skew`` the fine one."""
    shapes, _ = assemble(seg, wid, source="raster", settings=settings.assembly, skew_deg=skew)
    # A short rule that closes no box is as likely a letter's stroke: only boxes keep short sides.
    shortest = settings.long_rule_mm * POINTS_PER_INCH / MM_PER_INCH
    shapes = [e for e in shapes if e.kind not in ("hline", "vline", "line") or max(e.size) >= shortest]
    smallest = settings.min_box_mm * POINTS_PER_INCH / MM_PER_INCH
    return [e for e in shapes if e.kind not in ("box", "checkbox")
            or (max(e.size) >= smallest
                and not is_glyph_box(e.frame, side_width(e.frame, seg, wid, skew), settings.min_box_inside))]


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

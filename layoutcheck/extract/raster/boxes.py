"""Boxes, checkboxes and rules from the fitted segments of a scanned page."""

from __future__ import annotations

import numpy as np

from ...elements import MM_PER_INCH, POINTS_PER_INCH, Element
from ..assemble import assemble
from .settings import RasterSettings


def _find_boxes(seg: np.ndarray, wid: np.ndarray, skew: float, settings: RasterSettings) -> list[Element]:
    """Boxes, checkboxes and rules from fitted segments and widths (points), ``skew`` the fine one."""
    shapes, _ = assemble(seg, wid, source="raster", settings=settings.assembly, skew_deg=skew)
    # A short rule that closes no box is as likely a letter's stroke: only boxes keep short sides.
    shortest = settings.long_rule_mm * POINTS_PER_INCH / MM_PER_INCH
    return [e for e in shapes if e.kind not in ("hline", "vline", "line") or max(e.size) >= shortest]

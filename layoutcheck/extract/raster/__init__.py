"""Elements of a scanned page: ruling lines, boxes, checkboxes, labels and registration marks.

Pixel convention
----------------
Pixel ``(col, row)`` covers ``[col, col + 1) x [row, row + 1)`` in *continuous pixel
coordinates*; a continuous pixel coordinate ``p`` is ``p * 72 / dpi`` points (so a pixel centre
is at ``(col + 0.5, row + 0.5)`` px). OpenCV's ``warpAffine`` puts pixel centres at integers:
:func:`cv_matrix` converts a continuous-coordinate matrix to OpenCV's. :mod:`layoutcheck.simulate`
uses the same convention, so a simulated scan and its truth pose agree to a small fraction of a
pixel.

Steps
-----
One module per stage, each a small pure function of arrays: :mod:`.binarise`, :mod:`.skew`,
:mod:`.rules`, :mod:`.boxes`, :mod:`.marks` and :mod:`.labels`; shared conventions in :mod:`.common`.

1. :func:`binarise`: ink mask by global Otsu on pages with an even background, by Sauvola (local
   mean and deviation from box filters) on pages whose background varies (uneven lighting, grey
   or shaded paper); the choice is measured per page by :func:`background_spread`.
2. The mask is reduced to a *detection resolution* (``RasterSettings.detect_dpi``) by area
   averaging; :func:`estimate_skew` measures the coarse page skew from projection profiles of
   the ink (rules and text lines both make sharp profiles), modulo 90 degrees.
3. The reduced mask is turned upright by the coarse skew and searched for long horizontal and
   vertical runs with separable 1-D openings (``1 x k`` and ``k x 1``). Long runs are rules;
   short ones (checkbox sides) only where both their ends meet crossing runs, which the
   straight strokes of letters do not. A run joined by other ink along it (a stamp's edge at a
   shallow angle) is placed on the band of rows that holds most of its length.
4. Each run is fitted on the *original grey image*: per column (per row for vertical rules) the
   ink-weighted centroid across the rule, then a weighted least-squares line with outlier
   rejection, in two passes. Columns where other ink enters the band (a crossing rule,
   handwriting touching the rule) are left out of the fit. A short rule is confirmed on less
   clean ink than a long one: a tick across a checkbox takes both ends of every side.
5. The segments go to :func:`layoutcheck.extract.assemble.assemble`, which closes boxes and
   checkboxes from crossing rules, exactly as for born-digital pages.
6. Ink that is not a rule: solid squares become registration marks (checked against the
   outline's minimum-area rectangle, then measured to sub-pixel on the grey image), the rest is
   grouped into text lines (labels) by joining components across gaps of about one character
   height. Speckle, solid blobs (punch holes) and ink touching the image border (scanner edges,
   shadows) are left out.

Speed (bench/bench_raster.py, one thread): an A4 page at 300 dpi in about 60 ms.
"""

from __future__ import annotations

from dataclasses import dataclass

import cv2
import numpy as np

from ...elements import POINTS_PER_INCH, Element, PageElements, assign_ids
from ...sources import RasterPage, square_pixels
from .binarise import _off_border, background_spread, binarise, otsu_threshold, sauvola_mask
from .boxes import _find_boxes
from .common import _components, _Frame, _reduce, cv_matrix, px
from .labels import _find_labels
from .marks import _find_marks
from .rules import _drop_border, _find_rules
from .settings import RasterSettings
from .skew import _on_axis, _skew_view, _upright, estimate_skew

# Imported from this package by the rest of the library, the tests and bench/bench_raster.py
# (which also times the private steps ``_reduce`` and ``_upright``).
__all__ = ["RasterDetail", "RasterSettings", "background_spread", "binarise", "cv_matrix", "estimate_skew",
           "extract_raster", "extract_raster_detail", "otsu_threshold", "px", "sauvola_mask", "_reduce", "_upright"]


@dataclass(frozen=True)
class RasterDetail:
    """Intermediate results of :func:`extract_raster`, for tests and diagnostics.

    Segments and widths are in points; ``skew_deg`` is the coarse skew of step 2.
    """

    method: str
    skew_deg: float
    segments: np.ndarray
    widths: np.ndarray


def extract_raster(page: RasterPage, settings: RasterSettings = RasterSettings()) -> PageElements:
    """Elements of a scanned page: rules, boxes, checkboxes, labels and marks.

    Parameters
    ----------
    page : RasterPage
        Grey image (0 black .. 255 white) and its dpi.
    settings : RasterSettings

    Returns
    -------
    PageElements
        Elements with ids in reading order; labels have ``angle=None`` and no text, and their
        frame is the axis-aligned bounding box of the ink.
    """
    elements, detail = extract_raster_detail(page, settings)
    note = f"raster {page.dpi:g} dpi, {detail.method}"
    return PageElements(page.width, page.height, tuple(assign_ids(elements)), source="raster", note=note,
                         dpi_xy=page.dpi_xy)


def extract_raster_detail(page: RasterPage, settings: RasterSettings = RasterSettings()) -> tuple[list[Element], RasterDetail]:
    """:func:`extract_raster` with its intermediate results (elements without final ids).

    A page with pixels that are not square (a fax) is read from its square-pixel copy
    (:func:`~layoutcheck.sources.square_pixels`): every stage below works in one resolution.
    """
    page = square_pixels(page)
    grey = np.ascontiguousarray(page.image, dtype=np.uint8)
    if grey.ndim != 2:
        raise ValueError(f"{page.source} page {page.page}: expected a grey image, got shape {grey.shape}")
    dpi = float(page.dpi)
    to_pt = POINTS_PER_INCH / dpi
    mask, method = binarise(grey, dpi, settings)
    factor = max(1, int(round(dpi / settings.detect_dpi)))
    ddpi = dpi / factor
    small = _reduce(mask, factor)
    small_bin = small >= 64
    small_bin = _off_border(small_bin, max(1, int(round(px(settings.border_mm, ddpi)))))
    small = small * small_bin.view(np.uint8)
    skew = estimate_skew(_skew_view(small_bin, ddpi), settings.max_skew_deg)
    # Coverage is turned, then thresholded low, so a one-pixel rule straddling two rows stays whole.
    up, to_up = _upright(small, skew)
    up_bin = (up >= 64).view(np.uint8)
    frame = _Frame(factor, to_up, (up.shape[1], up.shape[0]))

    seg, wid, runs = _find_rules(grey, mask, up_bin, frame, dpi, settings)
    seg, wid = seg * to_pt, wid * to_pt
    seg, wid = _drop_border(seg, wid, page, settings.border_mm)
    seg, wid, fine = _on_axis(seg, wid, skew, settings.assembly.axis_tolerance_deg)
    shapes = _find_boxes(seg, wid, fine, settings, small_bin, ddpi)

    # Ink that is not a rule.
    rules = cv2.dilate(runs.view(np.uint8), np.ones((3, 3), np.uint8)).astype(bool)
    # Ink by half coverage for the rest: the low threshold that keeps thin rules whole would
    # grow a single speck of noise into a 2 x 2 blob when the page is turned.
    solid = up >= 128
    comps = _components(solid & ~rules)
    marks = _find_marks(comps, grey, mask, frame, ddpi, to_pt, settings, skew)
    labels = _find_labels(comps, frame, ddpi, to_pt, settings, marks)
    detail = RasterDetail(method, skew, seg, wid)
    return shapes + marks + labels, detail

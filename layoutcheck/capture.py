"""Pages whose resolution is not known (a camera capture): the dpi is measured from the form.

A photograph of a sheet has no dpi of its own. The page is read once at a nominal resolution
that makes the image's longer side as long as the longest template page; the pose found then
says how much larger or smaller the form appears than it should, and that ratio corrects the
nominal dpi. The page is then checked at the measured dpi like any scan.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np

from .check import CheckSettings, best_match, extract
from .elements import POINTS_PER_INCH
from .sources import RasterPage
from .template import Template


def nominal_dpi(shape: tuple[int, ...], templates: Sequence[Template]) -> float:
    """Resolution at which the image's longer side spans the longest side of any template page."""
    longest_pt = max(max(p.width, p.height) for t in templates for p in t.pages)
    return max(shape[0], shape[1]) * POINTS_PER_INCH / longest_pt


def measure_dpi(image: np.ndarray, templates: Sequence[Template], settings: CheckSettings = CheckSettings(),
                source: str = "image", page: int = 1) -> float | None:
    """The resolution at which the form on ``image`` has its template's size, or None.

    Parameters
    ----------
    image : (H, W) uint8 array
        Grey page, 0 black .. 255 white.
    templates : sequence of Template
        Forms the page may be.

    Returns
    -------
    float or None
        ``nominal * scale`` where ``scale`` is the pose's overall scale (content size on the input
        over its size on the template) at the nominal dpi; None when no form was found.
    """
    nominal = nominal_dpi(image.shape, templates)
    found = extract(RasterPage(source, page, image, nominal))
    if not found.elements:
        return None
    _, _, match = best_match(templates, found, settings)
    if match is None or match.pose is None:
        return None
    return float(nominal * match.pose.scale)

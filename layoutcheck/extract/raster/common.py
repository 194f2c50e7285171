"""Conventions and geometry shared by the stages of the raster extractor.

The pixel convention is described in :mod:`layoutcheck.extract.raster`.
"""

from __future__ import annotations

from dataclasses import dataclass

import cv2
import numpy as np

from ...elements import MM_PER_INCH


def cv_matrix(m: np.ndarray) -> np.ndarray:
    """Convert a 2x3 map between *continuous* pixel coordinates to OpenCV's pixel-centre one.

    OpenCV samples pixel centres at integer coordinates, ours at ``+0.5``:
    ``x_cv = x - 0.5`` on both sides, so ``M_cv = T(-0.5) M T(+0.5)``.
    """
    m = np.asarray(m, dtype=float).reshape(2, 3)
    out = m.copy()
    out[:, 2] = m[:, :2] @ np.array([0.5, 0.5]) + m[:, 2] - 0.5
    return out


def _affine(m: np.ndarray, pts: np.ndarray) -> np.ndarray:
    return np.asarray(pts, dtype=float).reshape(-1, 2) @ m[:2, :2].T + m[:2, 2]


def _invert(m: np.ndarray) -> np.ndarray:
    full = np.vstack([np.asarray(m, dtype=float).reshape(2, 3), [0.0, 0.0, 1.0]])
    return np.linalg.inv(full)[:2]


def px(mm_value: float, dpi: float) -> float:
    """Millimetres to pixels at ``dpi`` (1 in = 25.4 mm)."""
    return mm_value * dpi / MM_PER_INCH


def _components(img: np.ndarray, stats: bool = True):
    """8-connected components of a 0/1 ``uint8`` image (OpenCV's Spaghetti labelling).

    16-bit labels are written (three times faster than 32-bit on a page), falling back to 32-bit
    labels on images with more than 65535 components.
    """
    img = img.view(np.uint8) if img.dtype == bool else img
    try:
        if stats:
            return cv2.connectedComponentsWithStatsWithAlgorithm(img, 8, cv2.CV_16U, cv2.CCL_SPAGHETTI)
        return cv2.connectedComponentsWithAlgorithm(img, 8, cv2.CV_16U, cv2.CCL_SPAGHETTI)
    except cv2.error:
        if stats:
            return cv2.connectedComponentsWithStats(img, connectivity=8, ltype=cv2.CV_32S)
        return cv2.connectedComponents(img, connectivity=8, ltype=cv2.CV_32S)


@dataclass(frozen=True)
class _Frame:
    """Geometry between the original image and the upright detection image."""

    factor: int  # original px per reduced px
    to_upright: np.ndarray  # 2x3, reduced continuous px -> upright continuous px
    size: tuple[int, int]  # upright (w, h)

    def to_original(self, pts: np.ndarray) -> np.ndarray:
        return _affine(_invert(self.to_upright), pts) * self.factor


def _reduce(mask: np.ndarray, factor: int) -> np.ndarray:
    """Area-reduce an ink mask by an integer factor, as uint8 coverage.

    The last ``factor - 1`` rows and columns at most are left out (whole blocks only: OpenCV's
    integer-factor path); they lie in the border band whose ink is dropped anyway.
    """
    m = mask.view(np.uint8) * np.uint8(255) if mask.dtype == bool else mask
    if factor == 1:
        return m
    h, w = m.shape
    hb, wb = max(1, h // factor), max(1, w // factor)
    return cv2.resize(m[:hb * factor, :wb * factor], (wb, hb), interpolation=cv2.INTER_AREA)

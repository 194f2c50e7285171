"""Ink mask of a grey page: global Otsu on an even background, Sauvola where it varies."""

from __future__ import annotations

import cv2
import numpy as np

from ...elements import MM_PER_INCH
from .common import _components, px
from .settings import RasterSettings


def otsu_threshold(image: np.ndarray) -> int:
    """Otsu's global threshold of a grey ``uint8`` image.

    Pixels ``<= t`` are one class (ink), pixels ``> t`` the other (paper), the convention of
    ``skimage.filters.threshold_otsu``. Computed by OpenCV (``THRESH_OTSU``).

    Returns
    -------
    int
        Threshold in ``0..255``.
    """
    return _otsu(image)[0]


def _otsu(image: np.ndarray) -> tuple[int, np.ndarray]:
    """Otsu's threshold and the ink mask (``grey <= t``) in one OpenCV pass."""
    img = np.ascontiguousarray(image, dtype=np.uint8)
    if img.ndim != 2:
        img = img.reshape(1, -1)
    t, ink = cv2.threshold(img, 0, 1, cv2.THRESH_BINARY_INV | cv2.THRESH_OTSU)
    return int(t), ink.view(bool).reshape(np.shape(image))


def background_spread(image: np.ndarray, dpi: float) -> float:
    """How much the paper's grey varies over the page, in grey levels.

    The image is reduced to about 1 mm pixels, a 5 mm grey maximum filter keeps the paper
    between strokes, and the spread is the 95th minus the 5th percentile of that background
    (percentiles, so a few marks or filled areas do not count). An evenly lit scan measures under
    15 levels; a page with a lighting gradient, shading or stains 40 and more.
    """
    f = max(1, int(round(dpi / MM_PER_INCH)))  # about 1 mm per reduced pixel
    h, w = image.shape
    # Cropped to whole blocks, so OpenCV takes its integer-factor path (four times faster).
    hb, wb = max(1, h // f), max(1, w // f)
    small = cv2.resize(image[:hb * f, :wb * f], (wb, hb), interpolation=cv2.INTER_AREA)
    bg = cv2.dilate(small, cv2.getStructuringElement(cv2.MORPH_RECT, (5, 5)))
    lo, hi = np.percentile(bg, [5, 95])
    return float(hi - lo)


def sauvola_mask(image: np.ndarray, window: int, k: float = 0.2, r: float = 128.0) -> np.ndarray:
    """Ink where ``grey <= mean * (1 + k * (std / r - 1))`` over a ``window`` square.

    Means and deviations come from normalised box filters (integral-image speed). For windows
    of more than 32 pixels they are computed on the image reduced by area averaging (of the
    grey and of its square, so the local deviation is kept) to a window of about 16 pixels, and
    the threshold is brought back by bilinear interpolation: the window's statistics vary slowly,
    and this is eight times faster at 300 dpi.
    """
    window = max(3, int(window) | 1)
    img = np.ascontiguousarray(image, dtype=np.uint8)
    h, w = img.shape
    f = max(1, window // 16)
    g = img.astype(np.float32)
    if f > 1:
        sw, sh = max(1, w // f), max(1, h // f)
        small = cv2.resize(g, (sw, sh), interpolation=cv2.INTER_AREA)
        small_sq = cv2.resize(g * g, (sw, sh), interpolation=cv2.INTER_AREA)
        win = max(3, int(round(window / f)) | 1)
    else:
        small, small_sq, win = g, g * g, window
    mean = cv2.boxFilter(small, cv2.CV_32F, (win, win), borderType=cv2.BORDER_REPLICATE)
    sq = cv2.boxFilter(small_sq, cv2.CV_32F, (win, win), borderType=cv2.BORDER_REPLICATE)
    std = np.sqrt(np.maximum(sq - mean * mean, 0.0))
    thresh = mean * (1.0 + k * (std / r - 1.0))
    if f > 1:
        thresh = cv2.resize(thresh, (w, h), interpolation=cv2.INTER_LINEAR)
    return g <= thresh


def binarise(image: np.ndarray, dpi: float = 300.0, settings: RasterSettings = RasterSettings()) -> tuple[np.ndarray, str]:
    """Ink mask of a grey page and the method used (``"otsu"`` or ``"sauvola"``).

    Parameters
    ----------
    image : (H, W) uint8
        0 black .. 255 white.
    dpi : float
        Resolution, to size the measures in mm.

    Returns
    -------
    mask : (H, W) bool
        True for ink.
    method : str
        ``"otsu"`` when :func:`background_spread` is at most ``settings.uniform_background``,
        else ``"sauvola"``.
    """
    img = np.ascontiguousarray(image, dtype=np.uint8)
    if background_spread(img, dpi) <= settings.uniform_background:
        if img.size <= 4_000_000:
            return _otsu(img)[1], "otsu"
        # Otsu's threshold from every other row and column (a quarter of the pixels, evenly
        # spread: the same threshold to a grey level), applied to the whole page.
        t = _otsu(img[::2, ::2])[0]
        _, ink = cv2.threshold(img, t, 1, cv2.THRESH_BINARY_INV)
        return ink.view(bool), "otsu"
    mask = sauvola_mask(img, int(round(px(settings.sauvola_window_mm, dpi))), settings.sauvola_k, settings.sauvola_r)
    # Paper-bright pixels are never ink, whatever the local statistics say (flat bright areas).
    mask &= img < 250
    return mask, "sauvola"


def _off_border(mask: np.ndarray, border: int, hug: int | None = None) -> np.ndarray:
    """The mask without the components that lie along the image's edge.

    Scanner lids, edge shadows and the dark rim of a turned sheet touch the border and run along
    it; printed forms keep a margin (common practice: at least 5 mm for office printers). A
    component that reaches within ``border`` px of the edge is dropped when at least half of it
    lies within ``hug`` px of the edge (default ``8 * border``): the form on a page cut off by
    the feeder also touches the edge, with its rules, but lies mostly inside.
    """
    if not (mask[:border].any() or mask[-border:].any() or mask[:, :border].any() or mask[:, -border:].any()):
        return mask  # no ink near the edge: nothing to drop
    n, labels = _components(mask, stats=False)
    if n <= 1:
        return mask
    edge = np.concatenate([labels[:border].ravel(), labels[-border:].ravel(), labels[:, :border].ravel(),
                           labels[:, -border:].ravel()])
    touching = np.zeros(n, bool)
    touching[np.unique(edge)] = True
    touching[0] = False
    if not touching.any():
        return mask
    hug = 8 * border if hug is None else hug
    h, w = labels.shape
    inner = labels[hug:h - hug, hug:w - hug]
    total = np.bincount(labels.ravel(), minlength=n)
    inside = np.bincount(inner.ravel(), minlength=n)
    drop = touching & (total - inside >= 0.5 * total)
    if not drop.any():
        return mask
    return mask & ~drop[labels]

"""Registration marks: solid squares, measured to sub-pixel on the grey image."""

from __future__ import annotations

import math

import cv2
import numpy as np

from ...elements import Element, normalise_angle
from .common import _Frame, px
from .settings import RasterSettings


def _find_marks(comps, grey, mask, frame: _Frame, ddpi, to_pt, settings: RasterSettings, skew: float) -> list[Element]:
    """Registration marks among the components ``comps`` (``_components`` of the upright ink)."""
    n, labels, stats, cents = comps
    st = stats[1:].astype(float)
    lo, hi = (px(v, ddpi) for v in settings.mark_side_mm)
    w, h, area = st[:, 2], st[:, 3], st[:, 4]
    # A square turned by up to the residual skew still fills 80 % of its upright box.
    cand = (np.minimum(w, h) >= lo * 0.85) & (np.maximum(w, h) <= hi * 1.15) & (w / np.maximum(h, 1) >= 0.75) \
        & (w / np.maximum(h, 1) <= 1.33) & (area >= 0.8 * w * h)
    out = []
    lim = (px(settings.mark_side_mm[0], ddpi * frame.factor), px(settings.mark_side_mm[1], ddpi * frame.factor))
    for i in np.flatnonzero(cand):
        c = frame.to_original(cents[i + 1] + 0.5)[0]
        e = _mark(grey, mask, c, max(w[i], h[i]) * frame.factor, to_pt, lim, skew)
        if e is not None:
            out.append(e)
    return out


def _mark(grey: np.ndarray, mask: np.ndarray, centre: np.ndarray, side: float, to_pt: float,
          lim: tuple[float, float], skew: float) -> Element | None:
    """A registration mark around ``centre`` (original px), measured at full resolution.

    The outline (``cv2.findContours``) is checked against its minimum-area rectangle (a solid
    square fills it); centre, sides and angle are then measured on the grey image by
    :func:`_square_edges`, since the rectangle of a pixel outline snaps to the axes for turns of
    a degree or two.
    """
    h, w = mask.shape
    r = int(math.ceil(side * 0.9)) + 3
    x0, y0 = max(int(centre[0]) - r, 0), max(int(centre[1]) - r, 0)
    x1, y1 = min(int(centre[0]) + r + 1, w), min(int(centre[1]) + r + 1, h)
    crop = np.ascontiguousarray(mask[y0:y1, x0:x1]).view(np.uint8)
    contours, _ = cv2.findContours(crop, cv2.RETR_EXTERNAL, cv2.CHAIN_APPROX_NONE)
    if not contours:
        return None
    cnt = max(contours, key=cv2.contourArea)
    (_, _), (rw, rh), _ = cv2.minAreaRect(cnt)
    rw, rh = rw + 1.0, rh + 1.0  # the outline runs through the outer pixels' centres
    filled = np.zeros_like(crop)
    cv2.drawContours(filled, [cnt], -1, 1, thickness=-1)
    solid = filled & crop
    area = float(np.count_nonzero(solid))
    if rw * rh <= 0 or area / (rw * rh) < 0.88 or not (0.8 <= rw / rh <= 1.25):
        return None
    m = cv2.moments(solid, binaryImage=True)
    cen = np.array([m["m10"] / m["m00"] + x0, m["m01"] / m["m00"] + y0])  # OpenCV pixel-centre coords
    fit = _square_edges(grey, cen, math.sqrt(area) / 2.0, skew)
    if fit is None:
        return None
    cen, ww, hh, theta = fit
    if not (lim[0] <= min(ww, hh) and max(ww, hh) <= lim[1]):
        return None
    ang, ww, hh = normalise_angle(skew + theta, ww, hh)
    cx, cy = (cen[0] + 0.5) * to_pt, (cen[1] + 0.5) * to_pt
    ww, hh = ww * to_pt, hh * to_pt
    return Element("mark-new", "mark", (cx - ww / 2, cy - hh / 2, cx + ww / 2, cy + hh / 2), angle=ang, source="raster")


def _square_edges(grey: np.ndarray, cen: np.ndarray, half: float, skew: float):
    """Sub-pixel sides of a solid square from the grey image.

    Along normals every half pixel over the middle three quarters of each side, the grey is
    sampled (bilinear, ``cv2.remap``) from inside the square out to the paper; the integral of the ink coverage gives the edge's distance from the
    centre to a small fraction of a pixel, and a line through those distances gives the side's
    turn. Returns ``(centre, width, height, turn_deg)`` in OpenCV pixel coordinates (turn relative
    to ``skew``), or None when the square is not clean enough to measure.
    """
    a0 = math.radians(skew)
    eu = np.array([math.cos(a0), math.sin(a0)])
    ev = np.array([-math.sin(a0), math.cos(a0)])
    t = np.arange(-0.75 * half, 0.75 * half + 1e-9, 0.5)
    step = 0.25
    d = np.arange(half - 4.0, half + 5.0, step)
    # The four sides top, bottom, left, right, sampled in one remap: (side, along, out).
    nrm = np.stack([-ev, ev, -eu, eu])
    tan = np.stack([eu, eu, ev, ev])
    # A side turned by theta (y-down) moves its outward distance by sign * t * tan(theta).
    sign = np.array([-1.0, 1.0, 1.0, -1.0])
    p = cen + t[None, :, None, None] * tan[:, None, None, :] + d[None, None, :, None] * nrm[:, None, None, :]
    g = cv2.remap(grey, p[..., 0].reshape(4 * len(t), len(d)).astype(np.float32),
                  p[..., 1].reshape(4 * len(t), len(d)).astype(np.float32), cv2.INTER_LINEAR,
                  borderMode=cv2.BORDER_REPLICATE).astype(float).reshape(4, len(t), len(d))
    ink = np.median(g[:, :, :3].reshape(4, -1), axis=1)
    paper = np.median(g[:, :, -3:].reshape(4, -1), axis=1)
    if (paper - ink < 40).any():
        return None
    cov = np.clip((paper[:, None, None] - g) / (paper - ink)[:, None, None], 0.0, 1.0)
    e = d[0] + cov.sum(2) * step  # (side, along): the edge's distance from the centre
    # A line e = e0 + slope * t per side (least squares; t is symmetric about 0).
    tc = t - t.mean()
    slope = (e * tc).sum(1) / (tc * tc).sum()
    e0 = e.mean(1) - slope * t.mean()
    theta = float(np.mean(sign * np.degrees(np.arctan(slope))))
    top, bottom, left, right = e0
    ww = left + right
    hh = top + bottom
    cen = cen + eu * (right - left) / 2.0 + ev * (bottom - top) / 2.0
    return cen, ww, hh, theta

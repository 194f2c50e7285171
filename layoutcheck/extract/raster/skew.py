"""Page skew: the coarse skew from projection profiles of the ink, the upright detection
image, and the fine skew from the fitted rules."""

from __future__ import annotations

import math

import cv2
import numpy as np

from ...elements import normalise_angle
from .common import _reduce, cv_matrix


def estimate_skew(mask: np.ndarray, max_skew_deg: float = 10.0, max_points: int = 8_000) -> float:
    """Coarse page skew, degrees in ``(-45, 45]`` modulo 90, y-down (positive looks clockwise).

    For candidate angles the ink pixels are projected across and along the angle; rules and
    text lines make both profiles sharpest at the page's own angle. The score is the sum of
    squares of both profiles, searched at 0.5 degree steps, refined at 0.1 degree steps and by a
    parabola through the best three (to about 0.02 degree on a form: the fine skew comes from the
    fitted rules, this one only turns the page upright for the search of runs).

    Parameters
    ----------
    mask : (H, W) bool
        Ink, at a resolution where a text line is a few pixels high (50-150 dpi).
    max_skew_deg : float
        Half-width of the search.
    max_points : int
        Ink pixels used at most (an even subsample beyond this).
    """
    ys, xs = np.nonzero(mask)
    if len(xs) < 20:
        return 0.0
    step = max(1, len(xs) // max_points)
    xs = xs[::step].astype(np.float64) + 0.5
    ys = ys[::step].astype(np.float64) + 0.5
    h, w = mask.shape
    xs -= w / 2.0
    ys -= h / 2.0
    half = int(math.ceil(math.hypot(w, h) / 2.0)) + 2
    nb = 2 * half + 1

    def profile(v: np.ndarray, offs: np.ndarray, m: int) -> np.ndarray:
        # Linear (soft) binning: each pixel shares itself between its two nearest bins, so the
        # pixel grid of an unturned page does not pull the estimate towards 0.
        # Shifted to positive values (``half`` exceeds any distance), so truncation is the floor.
        v = v + (half + offs)
        i = v.astype(np.int64).ravel()
        frac = (v.ravel() - i)
        # Bin i takes 1 - frac and bin i + 1 takes frac: the count per bin less the fractions,
        # plus the fractions shifted by one bin.
        part = np.bincount(i, frac, minlength=nb * m + 1)
        hist = np.bincount(i, minlength=nb * m + 1) - part
        hist[1:] += part[:-1]
        return hist[: nb * m].reshape(m, nb)

    def score(angles: np.ndarray, every: int = 1) -> np.ndarray:
        a = np.radians(angles)[:, None]
        c, s = np.cos(a), np.sin(a)
        px_, py_ = xs[::every], ys[::every]
        offs = (np.arange(len(angles)) * nb)[:, None]
        hr = profile(-px_ * s + py_ * c, offs, len(angles))  # row profile of the turned page
        hc = profile(px_ * c + py_ * s, offs, len(angles))  # column profile
        return (hr**2).sum(1) + (hc**2).sum(1)

    best = 0.0
    for lo, hi, step in ((-max_skew_deg, max_skew_deg, 0.5), (-0.5, 0.5, 0.1)):
        cand = (best if step < 0.5 else 0.0) + np.arange(lo, hi + 1e-9, step)
        sc = score(cand, 4 if step >= 0.5 else 1)  # the coarse search on a quarter of the ink
        i = int(np.argmax(sc))
        best = float(cand[i])
    est = best
    if 0 < i < len(cand) - 1:
        y0, y1, y2 = sc[i - 1], sc[i], sc[i + 1]
        den = y0 - 2 * y1 + y2
        if den < 0:
            est += step * 0.5 * (y0 - y2) / den
    return normalise_angle(est, 1.0, 1.0)[0]


def _skew_view(small_bin: np.ndarray, ddpi: float) -> np.ndarray:
    """The reduced mask at no more than about 75 dpi, for the skew search."""
    f = max(1, int(round(ddpi / 75.0)))
    if f == 1:
        return small_bin
    return _reduce(small_bin, f) >= 64


def _upright(small: np.ndarray, skew_deg: float) -> tuple[np.ndarray, np.ndarray]:
    """Turn the reduced mask by ``-skew`` about its centre onto a canvas that holds it all."""
    h, w = small.shape
    a = math.radians(skew_deg)
    c, s = abs(math.cos(a)), abs(math.sin(a))
    ow, oh = int(math.ceil(w * c + h * s)), int(math.ceil(h * c + w * s))
    ca, sa = math.cos(-a), math.sin(-a)
    lin = np.array([[ca, -sa], [sa, ca]])
    t = np.array([ow / 2.0, oh / 2.0]) - lin @ np.array([w / 2.0, h / 2.0])
    m = np.hstack([lin, t[:, None]])
    if abs(skew_deg) < 1e-9 and (ow, oh) == (w, h):
        return small, m
    out = cv2.warpAffine(small, cv_matrix(m), (ow, oh), flags=cv2.INTER_LINEAR, borderValue=0)
    return out, m


def _on_axis(seg: np.ndarray, wid: np.ndarray, skew: float, tol: float):
    """Keep fitted rules within ``tol`` degrees of the page axes; the page's fine skew.

    Runs are only searched along the page axes, so a fit far off them is a misfit. The fine skew
    is the mean of the rules' angles weighted by length cubed: the variance of a fitted line's
    angle falls with the cube of its length (least squares over evenly spread samples).
    """
    if len(seg) == 0:
        return seg, wid, skew
    d = seg[:, 2:] - seg[:, :2]
    length = np.hypot(d[:, 0], d[:, 1])
    a = np.degrees(np.arctan2(d[:, 1], d[:, 0]))
    off = (a - skew + 45.0) % 90.0 - 45.0
    ok = np.abs(off) <= tol
    seg, wid, off, length = seg[ok], wid[ok], off[ok], length[ok]
    if len(seg) == 0:
        return seg, wid, skew
    w = length**3
    med = off[np.argmax(w)]
    near = np.abs(off - med) <= 0.2
    fine = skew + float(np.average(off[near], weights=w[near]))
    return seg, wid, normalise_angle(fine, 1.0, 1.0)[0]

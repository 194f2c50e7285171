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

import math
from dataclasses import dataclass, field

import cv2
import numpy as np

from ..elements import (MM_PER_INCH, POINTS_PER_INCH, Element, PageElements, assign_ids,
                        normalise_angle)
from ..sources import RasterPage
from .assemble import AssemblySettings, assemble


@dataclass(frozen=True)
class RasterSettings:
    """How a scanned page is read. Sizes are in mm (never pixels), so 200 and 300 dpi agree."""

    #: Resolution at which rules and text are *detected* (fits are always made on the original).
    #: 150 dpi keeps a 0.2 mm rule (0.6 point) and cuts the work of detection by 4 at 300 dpi.
    detect_dpi: float = 150.0
    #: Largest page skew searched, degrees (modulo 90: a page turned by 90 degrees is skew 0).
    max_skew_deg: float = 10.0
    #: Shortest run the openings keep, mm: a small checkbox's side (3 mm) with its stroke, longer
    #: than the straight strokes of text up to about 14 pt (common practice: the cap height of
    #: 10 pt text is about 2.5 mm).
    min_rule_mm: float = 3.0
    #: Runs at least this long are rules whatever meets them; shorter runs must meet crossing
    #: runs at both ends (the sides of a checkbox), which the strokes of text do not, mm. It is
    #: also the shortest rule reported on its own (shorter ones only as sides of boxes).
    long_rule_mm: float = 8.0
    #: How far a short run may overshoot the crossing run it meets, mm: a stroke's width, or
    #: a tick that runs over a checkbox's corner (its 0.5 mm stroke, blurred, carries the run on
    #: by up to 1.2 mm).
    corner_reach_mm: float = 1.5
    #: Largest deviation (1.25 mean absolute residual) of a short rule's centre from a straight
    #: line, mm: a printed rule stays under 0.05 mm, a tick-crossed checkbox side under 0.12.
    straight_mm: float = 0.2
    #: Thickest ink run still taken as a rule, mm; thicker runs are bars, blobs or shadows.
    max_rule_width_mm: float = 1.5
    #: Side of the Sauvola window, mm (a few character heights).
    sauvola_window_mm: float = 8.0
    #: Sauvola's k and dynamic range R (Sauvola and Pietikainen 2000: k = 0.5, R = 128 for grey
    #: documents; k = 0.2 is the common practice for printed forms with thin rules).
    sauvola_k: float = 0.2
    sauvola_r: float = 128.0
    #: Background spread (grey levels, see :func:`background_spread`) above which the local
    #: method is used: an evenly lit scan spreads by under 15 levels.
    uniform_background: float = 30.0
    #: Components smaller than this on both sides are speckle, mm.
    speckle_mm: float = 0.3
    #: Components larger than this on either side are not printed characters, mm.
    max_glyph_mm: float = 15.0
    #: A solid square with a side in this range is a registration mark, mm.
    mark_side_mm: tuple[float, float] = (2.5, 12.0)
    #: Ink within this distance of the image border is left out (scanner edges and shadows), mm.
    border_mm: float = 1.0
    #: Words are joined into one label across gaps up to this many character heights.
    word_gap: float = 1.0
    #: Assembly of rules into boxes (shared with the vector extractor).
    assembly: AssemblySettings = field(default_factory=AssemblySettings)


# -- conventions ------------------------------------------------------------------------------
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


# -- binarisation -----------------------------------------------------------------------------
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


# -- skew -------------------------------------------------------------------------------------
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


# -- rule detection ---------------------------------------------------------------------------
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


def _pieces(opened: np.ndarray, horizontal: bool, min_len: float, max_width: float, long_len: float):
    """Runs left by an opening: rows ``(pos, lo, hi, thickness)`` in upright reduced px, and
    each run's bounding box ``(x, y, w, h)`` (to draw the accepted runs back).

    The runs are the outer outlines of the opening (``cv2.findContours``, four times faster than
    labelling the sparse image); their bounding boxes are those of their 8-connected pieces.
    """
    contours, _ = cv2.findContours(opened, cv2.RETR_EXTERNAL, cv2.CHAIN_APPROX_SIMPLE)
    if not contours:
        return np.zeros((0, 4)), np.zeros((0, 4), np.int64)
    st = np.array([cv2.boundingRect(c) for c in contours], dtype=np.int64).reshape(-1, 4)
    order = np.lexsort((st[:, 0], st[:, 1]))  # top to bottom, left to right
    st = st[order]
    contours = [contours[i] for i in order]
    if horizontal:
        lo, ext, pos0, thick = st[:, 0], st[:, 2], st[:, 1], st[:, 3]
    else:
        lo, ext, pos0, thick = st[:, 1], st[:, 3], st[:, 0], st[:, 2]
    pos = pos0 + thick / 2.0
    lo, hi, thick = lo.astype(float), (lo + ext).astype(float), thick.astype(float)
    # A rule joined by other ink along it (a stamp's edge crossing at a shallow angle, a stroke
    # of handwriting lying on it) leaves a piece thicker than the rule: the rule is the band of
    # rows (columns) that holds most of the piece's length. A long rule staircases across a few
    # rows (the coarse skew is a tenth of a degree off), so its band keeps rows down to a fifth
    # of the fullest; a short piece's rows are all at least ``min_len`` long, so half. Only
    # pieces of rule length (``long_len``): a checkbox's side joined by a stamp's edge is shorter
    # than the edge, whose band would win.
    for i in np.flatnonzero((ext >= long_len) & (thick > 3)):
        x, y, w, h = st[i]
        own = np.zeros((h, w), np.uint8)
        cv2.drawContours(own, [contours[i]], -1, 1, thickness=-1, offset=(-int(x), -int(y)))
        sub = (own & opened[y:y + h, x:x + w]).astype(bool)
        if np.count_nonzero(sub) >= 0.8 * ext[i] * thick[i]:
            continue  # a solid run, not one joined by other ink
        prof = sub.sum(1) if horizontal else sub.sum(0)
        top = int(np.argmax(prof))
        strong = prof >= prof[top] * (0.5 if prof[top] < 4 * min_len else 0.2)
        a = top - int(np.argmin(strong[top::-1])) + 1 if not strong[:top + 1].all() else 0
        b = top + int(np.argmin(strong[top:])) if not strong[top:].all() else len(prof)
        pos[i], thick[i] = (y if horizontal else x) + (a + b) / 2.0, float(b - a)
    keep = (ext >= min_len) & (thick <= max_width)
    rows = np.stack([pos, lo, hi, thick], 1)[keep]
    return rows, st[keep, :4]


def _runs(up_bin: np.ndarray, horizontal: bool, min_len: int, long_len: int, max_width: float):
    """Horizontal (or vertical) runs of the upright mask, by separable 1-D openings.

    Two lengths: long runs from a ``long_len`` opening, so a rule crossed by a slanted stroke
    (a stamp's edge, a signature) is not merged with it into one thick piece; and short runs
    (checkbox sides) from a ``min_len`` opening of what the long runs leave.

    Returns
    -------
    rows : (N, 4) array
        ``pos, lo, hi, thickness`` per run, upright reduced px.
    source : tuple
        ``(opened image, boxes per row)`` to paint selected runs back with :func:`_paint`.
    """
    bridge = cv2.getStructuringElement(cv2.MORPH_RECT, (2, 1) if horizontal else (1, 2))  # one-pixel breaks
    closed = cv2.morphologyEx(up_bin, cv2.MORPH_CLOSE, bridge)

    def kernel(n):
        return cv2.getStructuringElement(cv2.MORPH_RECT, (n, 1) if horizontal else (1, n))

    long_open = cv2.morphologyEx(closed, cv2.MORPH_OPEN, kernel(long_len))
    short_open = cv2.morphologyEx(closed, cv2.MORPH_OPEN, kernel(min_len))
    short_open = cv2.subtract(short_open, cv2.dilate(long_open, np.ones((3, 3), np.uint8)))  # 0/1: and-not
    # The two sets of runs are a pixel apart at least, so one labelling serves both.
    both = long_open | short_open
    rows, boxes = _pieces(both, horizontal, min_len, max_width, long_len)
    return rows, (both, boxes.reshape(-1, 4))


def _select(source, keep: np.ndarray):
    image, boxes = source
    return image, boxes[keep]


def _paint(source) -> np.ndarray:
    """Mask of the runs named by ``source`` (see :func:`_runs`): their boxes, on their opening."""
    image, boxes = source
    sel = np.zeros(image.shape, np.uint8)
    for x, y, w, h in boxes.tolist():
        sel[y:y + h, x:x + w] = 1
    return (sel & image).view(bool)


def _closed_ends(h_rows: np.ndarray, v_rows: np.ndarray, long_len: float, tol: float):
    """Which runs are rules: long runs, and short runs whose both ends meet a crossing run.

    Text strokes make short straight runs too (the bars of E, T, H); a short side of a checkbox
    differs in that both its ends meet the perpendicular sides. Repeated until nothing changes, so
    that runs kept only because of a stroke dropped in an earlier round go too.
    """
    keep_h = np.ones(len(h_rows), bool)
    keep_v = np.ones(len(v_rows), bool)
    for _ in range(6):
        new_h = _meets_both(h_rows, v_rows[keep_v], tol) | (h_rows[:, 2] - h_rows[:, 1] >= long_len)
        new_v = _meets_both(v_rows, h_rows[keep_h], tol) | (v_rows[:, 2] - v_rows[:, 1] >= long_len)
        new_h &= keep_h
        new_v &= keep_v
        if (new_h == keep_h).all() and (new_v == keep_v).all():
            break
        keep_h, keep_v = new_h, new_v
    return keep_h, keep_v


def _meets_both(rows: np.ndarray, cross: np.ndarray, reach: float) -> np.ndarray:
    """Whether both ends of each run lie on some crossing run.

    A crossing run may lie up to ``reach`` inside a run's end (a run overshoots a corner by the
    crossing stroke's width and the blur), but hardly beyond it (a gap of a pixel and a half to the crossing stroke: the gap between
    two letters is wider):
    the gap between two letters (0.3 to 1 mm) does not count as a meeting.
    """
    if len(rows) == 0 or len(cross) == 0:
        return np.zeros(len(rows), bool)
    pos, lo, hi, th = (rows[:, i][:, None] for i in range(4))
    cpos, clo, chi, cth = (cross[:, i][None, :] for i in range(4))
    out = 1.5 + cth / 2.0  # a gap of 1.5 px at most to the crossing stroke's near side
    inside = reach + (th + cth) / 2.0
    across = (pos >= clo - 1.5 - th / 2.0) & (pos <= chi + 1.5 + th / 2.0)
    at_lo = (cpos >= lo - out) & (cpos <= lo + inside) & across
    at_hi = (cpos <= hi + out) & (cpos >= hi - inside) & across
    return at_lo.any(1) & at_hi.any(1)


#: Columns sampled per rule at most, in the steering passes and in the last one (see _fit_rules).
_FIT_COLUMNS = (100, 250)


def _fit_rules(grey: np.ndarray, mask: np.ndarray, p0: np.ndarray, p1: np.ndarray, half: np.ndarray, passes: int = 2,
               share: float = 0.5, fixed: np.ndarray | None = None):
    """Sub-pixel fit of near-horizontal rules on the original image, all rules at once.

    Parameters
    ----------
    grey, mask : (H, W) arrays
        Original grey image and ink mask (transpose both for vertical rules).
    p0, p1 : (N, 2) arrays
        Rough ends of each rule, continuous px (x, y), ``p0`` left.
    half : (N,) int array
        Half-height of the band searched across each rule, px.
    share : float
        Share of the columns that must hold a clean, straight run for the rule to be confirmed.
    fixed : (N,) bool array, optional
        Rules whose slope is kept from ``p0, p1`` (the page's skew): a short rule's own slope is
        poorly determined and easily pulled by a tick crossing its corner.

    Returns
    -------
    ends : (N, 4) array
        ``x0, y0, x1, y1`` of the fitted rules, continuous px; NaN rows for rules not confirmed.
    width : (N,) array
        Stroke width in px.
    spread : (N,) array
        Deviation of the kept centroids from the fitted line (1.2533 mean absolute residual),
        px: a fraction of a pixel for a printed rule, more for the curved side of a letter.
    """
    n = len(p0)
    if n == 0:
        return np.zeros((0, 4)), np.zeros(0), np.zeros(0)
    h, w = grey.shape
    slope = (p1[:, 1] - p0[:, 1]) / np.maximum(p1[:, 0] - p0[:, 0], 1e-6)
    margin = 3
    c0 = np.clip(np.floor(p0[:, 0]).astype(int) - margin, 0, w - 1)
    c1 = np.clip(np.ceil(p1[:, 0]).astype(int) + margin, 0, w - 1)
    counts = np.maximum(c1 - c0 + 1, 0)
    line = np.repeat(np.arange(n), counts)
    start = np.repeat(np.cumsum(counts) - counts, counts)
    cols = np.repeat(c0, counts) + (np.arange(len(line)) - start)
    x = cols + 0.5
    xm = (p0[:, 0] + p1[:, 0]) / 2.0
    ym = (p0[:, 1] + p1[:, 1]) / 2.0
    rmax = int(half.max())
    k = np.arange(-rmax, rmax + 1)
    # Band arrays are (row across the rule, column along it): the reductions across the rule
    # then run over whole rows of columns at a time.
    a, b = ym.copy(), slope.copy()  # y = a + b (x - xm)
    ok = np.zeros(len(line), bool)
    width = np.zeros(n)
    all_line, all_x, all_cols = line, x, cols
    g_flat, g_st = _flat_view(grey)
    m_flat, m_st = _flat_view(mask)
    itype = np.int32 if grey.size < 2**31 else np.int64
    abs_k = np.abs(k).astype(np.int16)[:, None]
    j16 = np.arange(len(k), dtype=np.int16)[:, None]
    k32 = k.astype(np.float32)
    # Columns sampled per rule: earlier passes only steer the band (every third column, and at
    # most about 100 per rule); the last fits on every other column, at most about 250 per rule
    # (the centroid of one column is good to a few hundredths of a pixel, so 250 of them place a
    # rule far better than the scan's own pixel grid).
    along = np.arange(len(all_line)) - start
    stride_last = np.maximum(2, -(-counts // _FIT_COLUMNS[1]))
    stride_first = np.maximum(3, -(-counts // _FIT_COLUMNS[0]))
    last_sel = along % stride_last[all_line] == 0
    first_sel = along % stride_first[all_line] == 0
    for p_i in range(passes):
        sel = last_sel if p_i == passes - 1 else first_sel
        line, x, cols = all_line[sel], all_x[sel], all_cols[sel]
        inband = abs_k <= half[line][None, :]
        yp = a[line] + b[line] * (x - xm[line])
        base = np.floor(yp)
        rows = base.astype(np.int32)[None, :] + k[:, None].astype(np.int32)
        valid = inband & (rows >= 0) & (rows < h)
        rc = np.clip(rows, 0, h - 1).astype(itype)
        # Gathered through flat indices into the images' memory (no copy of a transposed view).
        cc = cols.astype(itype)[None, :]
        flat = rc * g_st[0] + cc * g_st[1]
        gu = np.take(g_flat, flat)
        ink = np.take(m_flat, flat if m_st == g_st else rc * m_st[0] + cc * m_st[1])
        ink &= valid
        # The run of ink that holds the rule in this column: seeded at the ink row nearest the
        # predicted line, grown while the ink lasts. Other ink in the band (a tick's arm, a
        # letter) is left out unless it touches the rule, and then the column is left out.
        dist = np.where(ink, abs_k, np.int16(rmax + 9))
        seed = np.argmin(dist, axis=0)
        c_idx = np.arange(len(seed))
        has = dist[seed, c_idx] <= 2
        # The run through the seed ends at the nearest rows without ink on either side of it.
        last_gap = np.maximum.accumulate(np.where(ink, np.int16(-1), j16), axis=0)
        next_gap = np.minimum.accumulate(np.where(ink, np.int16(len(k)), j16)[::-1], axis=0)[::-1]
        run_lo = last_gap[seed, c_idx].astype(np.int64) + 1
        run_hi = next_gap[seed, c_idx].astype(np.int64) - 1
        run_len = (run_hi - run_lo + 1).astype(float)
        lo_k, hi_k = rmax - half[line], rmax + half[line]
        clean = has & (run_lo > lo_k) & (run_hi < hi_k)  # the run ends inside the band
        rl, rh = run_lo.astype(np.int16)[None, :], run_hi.astype(np.int16)[None, :]
        in_run = (j16 >= rl) & (j16 <= rh)
        window = (j16 >= rl - 2) & (j16 <= rh + 2) & valid
        window &= ~(ink & ~in_run)
        paper = np.where(valid, gu, np.uint8(0)).max(0).astype(np.float32)
        dark = np.where(in_run, gu, np.uint8(255)).min(0).astype(np.float32)
        g = gu.astype(np.float32)
        wgt = np.maximum(paper[None, :] - g - np.float32(0.25) * (paper - dark)[None, :], np.float32(0.0))
        wgt[~window] = 0.0
        mass = wgt.sum(0, dtype=np.float64)
        has &= mass > 0
        # Centroid across the rule, pixel centres at +0.5 (see the module's pixel convention).
        yc = base + 0.5 + (k32 @ wgt) / np.maximum(mass, 1e-9)
        med = _group_median_int(run_len.astype(np.int64), clean & has, line, n, len(k) + 1)
        ok = has & clean & (run_len <= 1.5 * med[line] + 1)
        for _rep in range(2):
            a, b = _wls(x - xm[line], yc, mass * ok, line, n, a, b, fixed)
            res = yc - (a[line] + b[line] * (x - xm[line]))
            sig = _group_mean(np.abs(res), ok, line, n) * 1.2533  # mean |r| of a normal is 0.80 sigma
            ok &= np.abs(res) <= np.maximum(3.0 * sig[line], 0.5)
        width = med * np.sqrt(1.0 / (1.0 + b * b))
    # Extent: the outermost columns whose ink lies on the fitted rule.
    yp = a[line] + b[line] * (x - xm[line])
    ok_all = np.zeros(len(all_line), bool)
    ok_all[last_sel] = ok
    yp_all = a[all_line] + b[all_line] * (all_x - xm[all_line])
    on = mask[np.clip(np.floor(yp_all).astype(int), 0, h - 1), all_cols] | ok_all
    xs_on = np.where(on, all_x, np.nan)
    lo = np.full(n, np.nan)
    hi = np.full(n, np.nan)
    np.fmin.at(lo, all_line, xs_on - 0.5)
    np.fmax.at(hi, all_line, xs_on + 0.5)
    good = np.bincount(line, weights=ok * stride_last[line].astype(float), minlength=n)
    # Share of clean columns between the outermost clean ones: a tick running over a box's
    # corner lengthens the run found but does not make the rule less of a rule.
    ok_lo = np.full(n, np.inf)
    ok_hi = np.full(n, -np.inf)
    np.minimum.at(ok_lo, line[ok], x[ok])
    np.maximum.at(ok_hi, line[ok], x[ok])
    span = np.maximum(ok_hi - ok_lo + 1, 1)
    # A rule is unbroken: ink on the fitted line in nearly every column between its clean ends.
    # The tops and feet of a line of letters pass the other tests but break at every gap.
    r_lo = mask[np.clip(np.floor(yp_all - 0.5).astype(int), 0, h - 1), all_cols]
    r_hi = mask[np.clip(np.floor(yp_all + 0.5).astype(int), 0, h - 1), all_cols]
    inside = (all_x >= ok_lo[all_line]) & (all_x <= ok_hi[all_line])
    unbroken = np.bincount(all_line, weights=((r_lo | r_hi) & inside).astype(float), minlength=n) / span
    # A short rule (a checkbox's side) crossed by a tick loses the columns at both its ends, where
    # the tick's arms enter the band, and a stamp's edge or a stroke crossing it loses a few more:
    # its clean middle may be a quarter of the run found, and a third of it clean.
    least = 0.35 if fixed is None else np.where(fixed, 0.25, 0.35)
    need = share if fixed is None else np.where(fixed, 0.6 * share, share)
    confirmed = (good >= np.maximum(need * span, 3 * stride_last)) & (span >= least * counts) & (unbroken >= 0.9)
    ends = np.stack([lo, a + b * (lo - xm), hi, a + b * (hi - xm)], 1)
    ends[~confirmed] = np.nan
    res = yc - (a[line] + b[line] * (x - xm[line]))
    spread = _group_mean(np.abs(res), ok, line, n) * 1.2533
    return ends, width, spread


def _flat_view(a: np.ndarray) -> tuple[np.ndarray, tuple[int, int]]:
    """A 2-D array's elements in memory order and its strides in elements (no copy of a
    C- or Fortran-ordered array, such as the transpose of an image)."""
    if not (a.flags.c_contiguous or a.flags.f_contiguous):
        a = np.ascontiguousarray(a)
    return a.ravel(order="K"), (a.strides[0] // a.itemsize, a.strides[1] // a.itemsize)


def _group_median_int(values: np.ndarray, use: np.ndarray, group: np.ndarray, n: int, top: int) -> np.ndarray:
    """Median of small non-negative integers ``values < top`` per group (NaN for empty groups)."""
    v = np.clip(values, 0, top - 1)
    hist = np.bincount(group[use] * top + v[use], minlength=n * top).reshape(n, top)
    cum = np.cumsum(hist, axis=1)
    total = cum[:, -1]
    lo = np.argmax(cum >= (total[:, None] + 1) // 2, axis=1)
    hi = np.argmax(cum >= total[:, None] // 2 + 1, axis=1)
    out = (lo + hi) / 2.0
    return np.where(total > 0, out, np.nan)


def _group_mean(values: np.ndarray, use: np.ndarray, group: np.ndarray, n: int) -> np.ndarray:
    """Mean of ``values`` per group over the ``use`` entries (NaN for empty groups)."""
    w = use.astype(float)
    cnt = np.bincount(group, w, n)
    tot = np.bincount(group, np.where(use, values, 0.0), n)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(cnt > 0, tot / np.maximum(cnt, 1e-12), np.nan)


def _wls(x: np.ndarray, y: np.ndarray, w: np.ndarray, g: np.ndarray, n: int, a0: np.ndarray, b0: np.ndarray,
         fixed: np.ndarray | None = None):
    """Weighted least-squares ``y = a + b x`` per group; keeps ``a0, b0`` where undetermined.

    Groups flagged in ``fixed`` keep their slope ``b0`` and fit the offset only.
    """
    sw = np.bincount(g, w, n)
    sx = np.bincount(g, w * x, n)
    sy = np.bincount(g, w * y, n)
    sxx = np.bincount(g, w * x * x, n)
    sxy = np.bincount(g, w * x * y, n)
    det = sw * sxx - sx * sx
    good = (sw > 0) & (det > 1e-9 * np.maximum(sw * sxx, 1e-12))
    a, b = a0.copy(), b0.copy()
    b[good] = (sw * sxy - sx * sy)[good] / det[good]
    if fixed is not None:
        b[fixed] = b0[fixed]
        good |= fixed & (sw > 0)
    a[good] = (sy - b * sx)[good] / sw[good]
    return a, b


# -- marks and labels -------------------------------------------------------------------------
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


def _rect_corners(x0, y0, x1, y1) -> np.ndarray:
    """(N, 4, 2) corners of axis-aligned rectangles."""
    return np.stack([np.stack([x0, y0], -1), np.stack([x1, y0], -1), np.stack([x1, y1], -1), np.stack([x0, y1], -1)], 1)


# -- the extractor ----------------------------------------------------------------------------
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
    return PageElements(page.width, page.height, tuple(assign_ids(elements)), source="raster", note=note)


def extract_raster_detail(page: RasterPage, settings: RasterSettings = RasterSettings()) -> tuple[list[Element], RasterDetail]:
    """:func:`extract_raster` with its intermediate results (elements without final ids)."""
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

    min_len = max(3, int(round(px(settings.min_rule_mm, ddpi))))
    max_w = max(2.0, px(settings.max_rule_width_mm, ddpi))
    long_len, reach = px(settings.long_rule_mm, ddpi), max(2.0, px(settings.corner_reach_mm, ddpi))
    h_rows, h_src = _runs(up_bin, True, min_len, int(round(long_len)), max_w)
    v_rows, v_src = _runs(up_bin, False, min_len, int(round(long_len)), max_w)
    keep_h, keep_v = _closed_ends(h_rows, v_rows, long_len, reach)
    h_src, v_src = _select(h_src, keep_h), _select(v_src, keep_v)
    fits = []
    for rows, horizontal in ((h_rows[keep_h], True), (v_rows[keep_v], False)):
        if len(rows) == 0:
            fits.append((rows, np.zeros((0, 4)), np.zeros(0), np.zeros(0, bool)))
            continue
        pos, lo, hi, thick = rows.T
        if horizontal:
            a_up, b_up = np.stack([lo, pos], 1), np.stack([hi, pos], 1)
        else:
            a_up, b_up = np.stack([pos, lo], 1), np.stack([pos, hi], 1)
        a_o, b_o = frame.to_original(a_up), frame.to_original(b_up)
        half = np.ceil(thick * factor / 2.0).astype(int) + 3
        short = (hi - lo) < long_len
        if horizontal:
            ends, width, spread = _fit_rules(grey, mask, a_o, b_o, half, fixed=short)
        else:
            ends_t, width, spread = _fit_rules(grey.T, mask.T, a_o[:, ::-1], b_o[:, ::-1], half, fixed=short)
            ends = ends_t[:, [1, 0, 3, 2]]
        # A short run must also be straight: the sides of a checkbox are, the bowls of a B are not.
        good = np.isfinite(ends).all(1) & ~(short & ~(spread <= px(settings.straight_mm, dpi)))
        fits.append((rows, ends, width, good))
    # Short rules whose crossing partners failed their fits (the bars of a letter) go too.
    (hr, he, hw, hg), (vr, ve, vw, vg) = fits
    kh, kv = _closed_ends(hr[hg], vr[vg], long_len, reach)
    hg[np.flatnonzero(hg)[~kh]] = False
    vg[np.flatnonzero(vg)[~kv]] = False
    seg = np.vstack([he[hg], ve[vg]]) * to_pt
    wid = np.maximum(np.concatenate([hw[hg], vw[vg]]), 1.0) * to_pt
    h_mask = _paint(_select(h_src, hg))
    v_mask = _paint(_select(v_src, vg))
    seg, wid = _drop_border(seg, wid, page, settings.border_mm)
    seg, wid, fine = _on_axis(seg, wid, skew, settings.assembly.axis_tolerance_deg)
    shapes, _ = assemble(seg, wid, source="raster", settings=settings.assembly, skew_deg=fine)
    # A short rule that closes no box is as likely a letter's stroke: only boxes keep short sides.
    shortest = settings.long_rule_mm * POINTS_PER_INCH / MM_PER_INCH
    shapes = [e for e in shapes if e.kind not in ("hline", "vline", "line") or max(e.size) >= shortest]

    # Ink that is not a rule.
    rules = cv2.dilate(((h_mask | v_mask).view(np.uint8)), np.ones((3, 3), np.uint8)).astype(bool)
    # Ink by half coverage for the rest: the low threshold that keeps thin rules whole would
    # grow a single speck of noise into a 2 x 2 blob when the page is turned.
    solid = up >= 128
    comps = _components(solid & ~rules)
    marks = _find_marks(comps, grey, mask, frame, ddpi, to_pt, settings, skew)
    labels = _find_labels(comps, frame, ddpi, to_pt, settings, marks)
    detail = RasterDetail(method, skew, seg, wid)
    return shapes + marks + labels, detail


def _off_border(mask: np.ndarray, border: int) -> np.ndarray:
    """The mask without the components that reach within ``border`` px of the image's edge.

    Scanner lids, edge shadows and the dark rim of a turned sheet all touch the border; printed
    forms keep a margin (common practice: at least 5 mm for office printers).
    """
    if not (mask[:border].any() or mask[-border:].any() or mask[:, :border].any() or mask[:, -border:].any()):
        return mask  # no ink near the edge: nothing to drop
    n, labels = _components(mask, stats=False)
    if n <= 1:
        return mask
    edge = np.concatenate([labels[:border].ravel(), labels[-border:].ravel(), labels[:, :border].ravel(),
                           labels[:, -border:].ravel()])
    drop = np.zeros(n, bool)
    drop[np.unique(edge)] = True
    drop[0] = False
    if not drop.any():
        return mask
    return mask & ~drop[labels]


def _skew_view(small_bin: np.ndarray, ddpi: float) -> np.ndarray:
    """The reduced mask at no more than about 75 dpi, for the skew search."""
    f = max(1, int(round(ddpi / 75.0)))
    if f == 1:
        return small_bin
    return _reduce(small_bin, f) >= 64


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


def _drop_border(seg: np.ndarray, wid: np.ndarray, page: RasterPage, border_mm: float):
    """Leave out rules lying along the image border (scanner edges, shadows)."""
    if len(seg) == 0:
        return seg, wid
    b = border_mm * POINTS_PER_INCH / MM_PER_INCH
    xs, ys = seg[:, [0, 2]], seg[:, [1, 3]]
    near = ((xs <= b).all(1) | (xs >= page.width - b).all(1) | (ys <= b).all(1) | (ys >= page.height - b).all(1))
    return seg[~near], wid[~near]


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


def _writing_is_horizontal(cx: np.ndarray, cy: np.ndarray) -> bool:
    """Whether text runs along the rows: most characters' nearest neighbours lie beside them.

    Letters of a word are closer to each other than to the lines above and below (common
    practice: line spacing is about 1.2 times the type size), so on a page turned by a quarter
    turn the nearest neighbours lie above and below instead.
    """
    if len(cx) < 3:
        return True
    from scipy.spatial import cKDTree

    pts = np.stack([cx, cy], 1)
    _, nn = cKDTree(pts).query(pts, k=2)
    d = pts[nn[:, 1]] - pts
    return bool(np.count_nonzero(np.abs(d[:, 0]) >= np.abs(d[:, 1])) >= 0.5 * len(pts))


def _find_labels(comps, frame: _Frame, ddpi, to_pt, settings: RasterSettings, marks: list[Element]) -> list[Element]:
    """Text lines among the components ``comps`` (``_components`` of the upright ink, no rules)."""
    n, labels, stats, _ = comps
    if n <= 1:
        return []
    st = stats[1:]
    x, y, w, h, area = (st[:, i].astype(float) for i in range(5))
    uw, uh = frame.size
    speck = px(settings.speckle_mm, ddpi)
    big = px(settings.max_glyph_mm, ddpi)
    border = px(settings.border_mm, ddpi) + 1
    solid = (area >= 0.7 * w * h) & (np.minimum(w, h) >= px(2.0, ddpi))  # holes, marks, filled areas
    keep = ((np.maximum(w, h) >= max(speck, 1.5)) & (np.maximum(w, h) <= big) & ~solid
            & (x > border) & (y > border) & (x + w < uw - border) & (y + h < uh - border))
    if not keep.any():
        return []
    across_rows = _writing_is_horizontal(x[keep] + w[keep] / 2, y[keep] + h[keep] / 2)
    ch = float(np.median(h[keep] if across_rows else w[keep]))
    gap = max(1, int(round(settings.word_gap * ch)))
    drop = np.flatnonzero(~keep)
    if len(drop) <= 256:
        # Few components left out (the usual page): clear them inside their own boxes, which is
        # several times faster than looking every pixel's label up.
        text = (labels > 0).view(np.uint8)
        for i in drop.tolist():
            bx, by, bw, bh = (int(v) for v in st[i, :4])
            text[by:by + bh, bx:bx + bw][labels[by:by + bh, bx:bx + bw] == i + 1] = 0
    else:
        text = np.take(np.concatenate([[0], keep]).astype(np.uint8), labels)
    # Join characters and words across gaps of about one character height, along the line only
    # (down the page on a sheet turned by a quarter turn).
    joined = cv2.dilate(text, cv2.getStructuringElement(cv2.MORPH_RECT, (gap, 1) if across_rows else (1, gap)))
    m, groups = _components(joined, stats=False)
    idx = np.flatnonzero(keep)
    # Every pixel of a character lies in one joined group: read the group off one of its pixels,
    # the first of its own in the top row of its bounding box.
    sx, sy, sw = (st[idx, i].astype(np.int64) for i in range(3))
    owner = np.repeat(np.arange(len(idx)), sw)
    rx = np.repeat(sx, sw) + (np.arange(len(owner)) - np.repeat(np.cumsum(sw) - sw, sw))
    ry = np.repeat(sy, sw)
    hit = np.flatnonzero(labels[ry, rx] == idx[owner] + 1)
    _, first = np.unique(owner[hit], return_index=True)
    gid = groups[ry[hit[first]], rx[hit[first]]].astype(np.int64)
    gx0 = np.full(m, np.inf)
    gy0 = np.full(m, np.inf)
    gx1 = np.full(m, -np.inf)
    gy1 = np.full(m, -np.inf)
    np.minimum.at(gx0, gid, x[idx])
    np.minimum.at(gy0, gid, y[idx])
    np.maximum.at(gx1, gid, x[idx] + w[idx])
    np.maximum.at(gy1, gid, y[idx] + h[idx])
    used = np.isfinite(gx0)
    used[0] = False
    g = np.flatnonzero(used)
    corners = _rect_corners(gx0[g], gy0[g], gx1[g], gy1[g]).reshape(-1, 2)
    orig = frame.to_original(corners).reshape(-1, 4, 2) * to_pt
    lo, hi = orig.min(1), orig.max(1)
    out = []
    mark_frames = [e.frame for e in marks]
    for (a, b), (c, d) in zip(lo, hi):
        if any(a >= mf[0] - 2 and b >= mf[1] - 2 and c <= mf[2] + 2 and d <= mf[3] + 2 for mf in mark_frames):
            continue
        out.append(Element("label-new", "label", (float(a), float(b), float(c), float(d)), angle=None, source="raster"))
    return out

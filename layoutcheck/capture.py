"""Camera captures: the sheet found on the desk, seen flat and evenly lit, before extraction.

A photographed form lies on a desk, seen in perspective and lit unevenly. Before the raster
extractor reads it, this module

1. finds the sheet: on the photo reduced to about 2 mm per pixel, print is closed away (a grey
   closing), the paper's light is modelled as a smooth surface (a cubic in x and y, fitted in
   log-brightness to the pixels taken as paper, three rounds), and paper is what lies close
   under that surface; the desk, at most 60 % as bright as the paper under the same light, is
   not. The outline of the largest paper region is simplified to four corners and each side is
   refitted as a straight line (``cv2.fitLine``);
2. maps the sheet to an upright rectangle (``cv2.getPerspectiveTransform``,
   ``cv2.warpPerspective``), at about the photo's own resolution;
3. flattens the light: each pixel is divided by the paper's brightness around it (a grey
   closing over 6 mm, smoothed), so light falling off by a third towards the corners and a soft
   shadow leave an even page that a global threshold reads.

The result is a :class:`~layoutcheck.sources.RasterPage` the extractor reads like a scan, and the
pose from its points to the input page's points (projective), which the match is composed with,
so every caller sees one pose from template to input.

A page states no usable resolution when its file gives none, or one at which the image would be a
sheet larger than :data:`~layoutcheck.sources.MAX_SHEET_IN` (phones write 72 dpi into a
12-megapixel photo: a sheet of 55 inches). Such a page is given a working resolution
(:func:`~layoutcheck.sources.working_dpi`) from the size of the sheet found on it (a sheet whose
sides' ratio names a paper size, A4, Letter or Legal, is taken as that size); the scale is
measured from the form itself afterwards.
"""

from __future__ import annotations

from dataclasses import dataclass

import cv2
import numpy as np

from .elements import POINTS_PER_INCH
from .pose import Pose
from .sources import RasterPage, working_dpi

#: Side of the reduced photo on which the sheet is sought, pixels (about 2 mm per pixel).
SHEET_SEARCH_PX = 512
#: Paper is brighter than this share of the light surface fitted to it (log difference); the
#: desk is at most 60 % as bright (log -0.51), see :mod:`layoutcheck.simulate_camera`.
PAPER_LOG_MARGIN = -0.25
#: Finest resolution of a photo's first reading, dpi (see :func:`prepare`).
FIRST_READING_DPI = 200.0
#: White margin painted around the flattened sheet, mm: slivers of desk at the sheet's edge must
#: not become elements, and a printed form keeps at least 5 mm clear (common practice).
EDGE_MARGIN_MM = 2.0


@dataclass(frozen=True)
class Capture:
    """What the extractor reads for one input page, and how it lies on the input.

    Attributes
    ----------
    kind : str
        ``"camera"`` or ``"scan"``.
    page : RasterPage
        The page the extractor reads: for a camera capture the sheet, upright and evenly lit.
    to_input : Pose
        Points of :attr:`page` -> points of the input page (identity for a scan).
    sheet_px : (4, 2) array or None
        Corners of the sheet found on the input, pixels (top-left, top-right, bottom-right,
        bottom-left as seen), or None when no sheet was told from its surroundings.
    """

    kind: str
    page: RasterPage
    to_input: Pose
    sheet_px: np.ndarray | None = None


#: Powers ``(of x, of y)`` of the monomials of a cubic in x and y, in the order of
#: :func:`_poly_terms`' columns.
CUBIC_POWERS = ((0, 0), (1, 0), (0, 1), (2, 0), (1, 1), (0, 2), (3, 0), (2, 1), (1, 2), (0, 3))


def _poly_terms(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Monomials of a cubic in x and y (10 columns, :data:`CUBIC_POWERS`)."""
    return np.column_stack([x**a * y**b for a, b in CUBIC_POWERS])


def paper_mask(grey: np.ndarray) -> np.ndarray:
    """Paper pixels of a small grey photo (print closed away first), as a bool mask.

    The light on the paper is a smooth surface: a cubic in x and y fitted, in log-brightness, to
    the pixels taken as paper (at first those above Otsu's threshold), three rounds; paper is
    what lies within :data:`PAPER_LOG_MARGIN` of it.
    """
    h, w = grey.shape
    k = max(3, int(round(max(h, w) / 100)) | 1)  # about 5 mm: wider than any stroke of print
    closed = cv2.morphologyEx(grey, cv2.MORPH_CLOSE, cv2.getStructuringElement(cv2.MORPH_RECT, (k, k)))
    lg = np.log1p(closed.astype(np.float32))
    t, _ = cv2.threshold(closed, 0, 255, cv2.THRESH_BINARY | cv2.THRESH_OTSU)
    mask = closed > t
    xs, ys = np.arange(w) / w - 0.5, np.arange(h) / h - 0.5
    # The cubic over the whole grid is a product of the rows' and the columns' powers (the
    # design matrix is built only for the pixels fitted).
    for _ in range(3):
        inner = cv2.erode(mask.view(np.uint8), np.ones((5, 5), np.uint8)).view(bool)
        sel = np.flatnonzero(inner.ravel())
        if len(sel) < 50:
            break
        sel = sel[:: max(1, len(sel) // 20000)]
        design = _poly_terms(xs[sel % w], ys[sel // w])
        # Normal equations: ten unknowns over coordinates within half a unit of 0 are well posed,
        # and far quicker than a decomposition of the tall matrix.
        coef = np.linalg.solve(design.T @ design, design.T @ lg.ravel()[sel].astype(float))
        # Over the grid, sum of coef * y**b * x**a: powers of y (rows) @ coefficients @ powers of x.
        grid_coef = np.zeros((4, 4))
        for c, (a, b) in zip(coef, CUBIC_POWERS):
            grid_coef[b, a] = c
        surface = (ys[:, None] ** np.arange(4)) @ grid_coef @ (xs[:, None] ** np.arange(4)).T
        mask = lg > surface + PAPER_LOG_MARGIN
    return mask


def _order_corners(q: np.ndarray) -> np.ndarray:
    """Four corners as top-left, top-right, bottom-right, bottom-left (as seen)."""
    c = q.mean(axis=0)
    ang = np.arctan2(q[:, 1] - c[1], q[:, 0] - c[0])
    q = q[np.argsort(ang)]  # clockwise on screen (y down), starting anywhere
    start = int(np.argmin(q.sum(axis=1)))
    return np.roll(q, -start, axis=0)


def find_sheet(grey: np.ndarray) -> np.ndarray | None:
    """Corners of the sheet on a grey photo, pixels (continuous), or None.

    None when no bright four-sided region covering at least a fifth of the photo is told from
    its surroundings, or when the sheet runs off the photo (its outline then is not the sheet's).

    Returns
    -------
    (4, 2) array or None
        Top-left, top-right, bottom-right, bottom-left as seen.
    """
    h, w = grey.shape
    f = max(h, w) / SHEET_SEARCH_PX
    sw, sh = max(8, int(round(w / f))), max(8, int(round(h / f)))
    small = cv2.resize(grey, (sw, sh), interpolation=cv2.INTER_AREA)
    mask = paper_mask(small)
    # Bright streaks of desk grain may touch the sheet: an opening over 3 % of the photo cuts
    # them off (the sheet is far wider).
    # them off (the sheet is far wider); the outline is then taken from the mask itself near the
    # opened sheet, so the sheet's corners stay sharp.
    k = max(3, int(round(0.03 * max(sw, sh))) | 1)
    kernel = cv2.getStructuringElement(cv2.MORPH_RECT, (k, k))
    opened = cv2.morphologyEx(mask.view(np.uint8), cv2.MORPH_OPEN, kernel)
    n, labels, stats, _ = cv2.connectedComponentsWithStats(opened, connectivity=4)
    if n <= 1:
        return None
    j = 1 + int(np.argmax(stats[1:, cv2.CC_STAT_AREA]))
    if stats[j, cv2.CC_STAT_AREA] < 0.2 * sw * sh:
        return None
    near = cv2.dilate((labels == j).astype(np.uint8), cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (k, k)))
    n, labels, stats, _ = cv2.connectedComponentsWithStats(near & mask.view(np.uint8), connectivity=4)
    j = 1 + int(np.argmax(stats[1:, cv2.CC_STAT_AREA]))
    region = (labels == j).astype(np.uint8)
    # A sheet that runs off the photo touches the border along a long stretch.
    border = np.concatenate([region[0], region[-1], region[:, 0], region[:, -1]])
    if border.sum() > 0.1 * (sw + sh):
        return None
    contours, _ = cv2.findContours(region, cv2.RETR_EXTERNAL, cv2.CHAIN_APPROX_NONE)
    outline = max(contours, key=cv2.contourArea)
    hull = cv2.convexHull(outline)
    peri = cv2.arcLength(hull, True)
    quad = None
    for eps in (0.01, 0.02, 0.03, 0.05, 0.08):
        approx = cv2.approxPolyDP(hull, eps * peri, True)
        if len(approx) == 4:
            quad = approx.reshape(4, 2).astype(float)
            break
    if quad is None:
        return None
    quad = _order_corners(quad)
    # Each side refitted on the outline points near it (away from the corners), then the
    # corners are where neighbouring sides meet.
    pts = outline.reshape(-1, 2).astype(np.float32)
    lines = []
    for i in range(4):
        a, b = quad[i], quad[(i + 1) % 4]
        d = b - a
        length = float(np.hypot(*d))
        u = d / length
        rel = pts - a
        along = rel @ u
        across = np.abs(rel[:, 0] * u[1] - rel[:, 1] * u[0])
        near = (across < 3.0) & (along > 0.1 * length) & (along < 0.9 * length)
        if near.sum() < 10:
            return None
        vx, vy, x0, y0 = cv2.fitLine(pts[near], cv2.DIST_HUBER, 0, 0.01, 0.01).ravel()
        lines.append(np.cross([x0, y0, 1.0], [x0 + vx, y0 + vy, 1.0]))
    corners = []
    for i in range(4):
        p = np.cross(lines[i - 1], lines[i])
        if abs(p[2]) < 1e-9:
            return None
        corners.append(p[:2] / p[2])
    # Contour points are pixel centres of the small image: continuous coordinate + 0.5.
    out = (np.array(corners) + 0.5) * np.array([w / sw, h / sh])
    if cv2.contourArea(out.astype(np.float32)) < 0.2 * w * h:
        return None
    return out


def flatten_light(grey: np.ndarray, dpi: float) -> np.ndarray:
    """Grey page with the paper's light made even: each pixel over the paper's brightness near it.

    The paper's brightness is a grey closing over 6 mm (print is thinner) of the page reduced
    to about 1 mm per pixel, smoothed and brought back to full size; paper comes out at 240.
    """
    h, w = grey.shape
    f = max(1.0, dpi / 25.4)
    sw, sh = max(4, int(round(w / f))), max(4, int(round(h / f)))
    small = cv2.resize(grey, (sw, sh), interpolation=cv2.INTER_AREA)
    bg = cv2.morphologyEx(small, cv2.MORPH_CLOSE, cv2.getStructuringElement(cv2.MORPH_RECT, (7, 7)))
    bg = cv2.dilate(bg, np.ones((3, 3), np.uint8))
    bg = cv2.GaussianBlur(bg.astype(np.float32), (0, 0), 2.0)
    bg = cv2.resize(np.maximum(bg, 8.0), (w, h), interpolation=cv2.INTER_LINEAR)
    out = cv2.divide(grey.astype(np.float32), bg, scale=240.0)
    return np.clip(out, 0, 255).astype(np.uint8)


def rectify(grey: np.ndarray, sheet_px: np.ndarray, scale: float = 1.0) -> tuple[np.ndarray, np.ndarray]:
    """The sheet mapped to an upright rectangle at about the photo's resolution (times ``scale``).

    The rectangle's sides are the means of the sheet's opposite sides: in perspective that
    ratio is off the sheet's own by a few percent, which the match takes as a scale along one
    axis (see :func:`layoutcheck.check.camera_settings`).

    Returns ``(image, out_px_to_in_px)``: the rectified grey image and the 3 x 3 map from its
    continuous pixels to the photo's.
    """
    q = np.asarray(sheet_px, float)
    top, right, bottom, left = (np.hypot(*(q[(i + 1) % 4] - q[i])) for i in range(4))
    ow, oh = int(round(scale * (top + bottom) / 2)), int(round(scale * (left + right) / 2))
    dst = np.array([[0, 0], [ow, 0], [ow, oh], [0, oh]], dtype=np.float32)
    # Continuous pixel maps; OpenCV samples at integer pixel centres, hence the half pixels.
    m = cv2.getPerspectiveTransform(dst, q.astype(np.float32)).astype(float)
    half = np.array([[1, 0, 0.5], [0, 1, 0.5], [0, 0, 1.0]])
    cv_map = np.linalg.inv(half) @ m @ half
    out = cv2.warpPerspective(grey, cv_map, (ow, oh), flags=cv2.INTER_LINEAR | cv2.WARP_INVERSE_MAP,
                              borderMode=cv2.BORDER_REPLICATE)
    return out, m


def _px_scale(dpi: float) -> np.ndarray:
    """3 x 3 map from points to continuous pixels at ``dpi``."""
    k = dpi / POINTS_PER_INCH
    return np.diag([k, k, 1.0])


def prepare(page: RasterPage, camera: bool) -> Capture:
    """The page the extractor reads, and how it lies on the input (see the module's notes).

    Parameters
    ----------
    page : RasterPage
        The input page (its ``dpi`` a working one when the file states none).
    camera : bool
        Whether the page is taken as a photo (its file states no usable resolution). A scan is
        returned as it is.
    """
    if not camera:
        return Capture("scan", page, Pose.identity())
    grey = np.ascontiguousarray(page.image, dtype=np.uint8)
    h, w = grey.shape
    # A large photo is halved once (a Gaussian pyramid step, far cheaper than an area resize of
    # the whole photo): the sheet is sought on the half.
    half = cv2.pyrDown(grey) if min(h, w) >= 4 * SHEET_SEARCH_PX else None
    if half is None:
        sheet = find_sheet(grey)
    else:
        sheet = find_sheet(half)
        sheet = None if sheet is None else sheet * np.array([w / half.shape[1], h / half.shape[0]])
    dpi = float(page.dpi)
    if sheet is None:
        flat = flatten_light(grey, dpi)
        return Capture("camera", RasterPage(page.source, page.page, flat, dpi, False), Pose.identity())
    found_sheet = sheet
    # The sheet's own size gives the working resolution (the image's may hold much desk).
    flat_dpi = dpi if page.dpi_stated else working_dpi(grey.shape, sheet)
    # The first reading only has to find the form and its pose (the second one, in the
    # template's frame, places it finely): a photo finer than FIRST_READING_DPI is read coarser.
    # The sheet is sampled straight from the photo onto the coarser grid; only below half the
    # photo's resolution is the photo halved first (a pyramid step), so no rule aliases away.
    k = min(1.0, FIRST_READING_DPI / flat_dpi)
    src, sx, sy = grey, 1.0, 1.0
    while k < 0.5 and min(src.shape) >= 64:
        src = half if src is grey and half is not None else cv2.pyrDown(src)
        sx, sy = src.shape[1] / w, src.shape[0] / h
        k = min(1.0, FIRST_READING_DPI / (flat_dpi * (sx + sy) / 2.0))
    image, out_to_in = rectify(src, sheet * np.array([sx, sy]), k)
    flat_dpi *= (sx + sy) / 2.0 * k
    flat = flatten_light(image, flat_dpi)
    margin = max(1, int(round(EDGE_MARGIN_MM * flat_dpi / 25.4)))
    flat[:margin], flat[-margin:], flat[:, :margin], flat[:, -margin:] = 255, 255, 255, 255
    # Flat page points -> flat px -> (reduced) input px -> input px -> input points: one pose.
    to_input = Pose(np.linalg.inv(_px_scale(dpi)) @ np.diag([1 / sx, 1 / sy, 1.0]) @ out_to_in @ _px_scale(flat_dpi))
    return Capture("camera", RasterPage(page.source, page.page, flat, flat_dpi, False), to_input, found_sheet)


@dataclass(frozen=True)
class Readability:
    """How finely a camera capture shows its form, measured from the pose (template -> input).

    Attributes
    ----------
    centre_dpi : float
        Input pixels per template inch at the template page's centre (the geometric mean of
        the two local stretches).
    worst_dpi : float
        The least: along the direction shrunk most, at the point of the page where it is least.
    worst_at : (x, y)
        That point, template points.
    stretch : float
        How much more the correction must enlarge the least resolved part of the page than the
        best resolved one (largest local stretch over the page / smallest).
    """

    centre_dpi: float
    worst_dpi: float
    worst_at: tuple[float, float]
    stretch: float

    def to_dict(self) -> dict:
        from .elements import MM_PER_POINT

        return {"centre": round(self.centre_dpi, 1), "worst": round(self.worst_dpi, 1),
                "worst_at_mm": [round(v * MM_PER_POINT, 1) for v in self.worst_at],
                "stretch": round(self.stretch, 3)}


def readability(pose: Pose, template_size: tuple[float, float], input_dpi: float, n: int = 9) -> Readability:
    """Effective resolution of the form on the input, at its centre and at its worst point.

    ``pose`` maps template points to input points at ``input_dpi`` (the file's or the working
    one: it cancels out); the local stretches are the singular values of the pose's Jacobian on
    an ``n`` x ``n`` grid over the template page.
    """
    w, h = template_size
    gx, gy = np.meshgrid(np.linspace(0, w, n), np.linspace(0, h, n))
    grid = np.column_stack([gx.ravel(), gy.ravel()])
    sv = pose.local_scales(grid) * input_dpi  # input px per template inch, least and most
    centre = pose.local_scales(np.array([[w / 2, h / 2]]))[0] * input_dpi
    k = int(np.argmin(sv[:, 0]))
    return Readability(float(np.sqrt(centre[0] * centre[1])), float(sv[k, 0]), (float(grid[k, 0]), float(grid[k, 1])),
                       float(sv[:, 1].max() / max(sv[:, 0].min(), 1e-9)))


def in_template_frame(page: RasterPage, pose: Pose, size_pt: tuple[float, float], dpi: float) -> Capture:
    """The input photo seen in the template's frame through a first pose: a second reading.

    ``pose`` maps template points to the input's points. The photo is resampled
    (``cv2.warpPerspective``) onto the template page at ``dpi`` and its light flattened, so the
    extractor reads the form as a flat scan with the perspective removed (rules upright and
    square to each other, whatever the sheet's outline gave); the capture's pose to the input is
    ``pose`` itself.
    """
    from .normalise import output_size, output_to_input_px, resample

    m = output_to_input_px(pose, float(page.dpi), dpi)
    size = output_size(size_pt, dpi)
    image = resample(np.ascontiguousarray(page.image, dtype=np.uint8), m, size, interpolation="linear")
    flat = flatten_light(image, dpi)
    margin = max(1, int(round(EDGE_MARGIN_MM * dpi / 25.4)))
    flat[:margin], flat[-margin:], flat[:, :margin], flat[:, -margin:] = 255, 255, 255, 255
    return Capture("camera", RasterPage(page.source, page.page, flat, dpi, False), pose, None)


#: A side of a box, or a rule, shows ink where the darkest pixel across it (within
#: :data:`PROBE_REACH_MM`) is this many grey levels under the paper of the flattened page (240).
PROBE_INK = 40.0
#: How far across a side the probe looks, mm: the pose and the bend are good to about 1 mm.
PROBE_REACH_MM = 1.5
#: Share of a side's middle (its ends left out: corners, ticks) that must show ink for the side
#: to be there, and that may show ink for it to be absent.
PROBE_PRESENT = 0.6
PROBE_ABSENT = 0.25
#: Fewest pixels a box's shorter side must span at the photo's worst resolution for its size to
#: be judged there (a third off a side of 20 pixels is 7 pixels; finer it blurs into noise).
LEGIBLE_SIDE_PX = 20.0


def side_ink(grey: np.ndarray, dpi: float, p: np.ndarray, q: np.ndarray, samples: int = 24) -> float:
    """Share of the middle of segment ``p``-``q`` (points on ``grey``, flattened light, paper
    240) that holds ink within :data:`PROBE_REACH_MM` across it (``cv2.remap``, bilinear)."""
    k = dpi / POINTS_PER_INCH
    p, q = np.asarray(p, float) * k, np.asarray(q, float) * k
    length = float(np.hypot(*(q - p)))
    if length < 1.0:
        return 0.0
    u = (q - p) / length
    n = np.array([-u[1], u[0]])
    reach = PROBE_REACH_MM * dpi / 25.4
    t = np.linspace(0.15, 0.85, samples)
    s = np.linspace(-reach, reach, max(3, int(2 * reach) + 1))
    pts = p[None, None, :] + (t[:, None, None] * length) * u + s[None, :, None] * n  # (samples, across, 2)
    # Continuous coordinates -> OpenCV's pixel-centre ones.
    mx = (pts[..., 0] - 0.5).astype(np.float32)
    my = (pts[..., 1] - 0.5).astype(np.float32)
    strip = cv2.remap(grey, mx, my, cv2.INTER_LINEAR, borderMode=cv2.BORDER_CONSTANT, borderValue=255)
    return float((strip.min(axis=1) < 240.0 - PROBE_INK).mean())


def ink_probe(grey: np.ndarray, dpi: float, element, pose: Pose, shift=(0.0, 0.0), scale: float = 1.0) -> str:
    """Whether a box or rule is printed where ``pose`` puts it (moved by ``shift`` and scaled by
    ``scale`` about its centre first, template points).

    Returns ``"absent"`` when no side of it shows ink (each side's middle is paper on at least
    three quarters of its length), ``"present"`` when every side shows ink along most of it, and
    ``"unclear"`` otherwise (handwriting across it, print too faint for the resolution).
    """
    from .elements import outline

    c0 = np.asarray(element.center, float)
    c = pose.apply((outline(element) - c0) * scale + c0 + np.asarray(shift, float))
    if element.kind in ("box", "checkbox"):
        sides = [side_ink(grey, dpi, c[i], c[(i + 1) % 4]) for i in range(4)]
    else:
        long_first = np.hypot(*(c[1] - c[0])) >= np.hypot(*(c[3] - c[0]))
        a, b = ((c[0] + c[3]) / 2, (c[1] + c[2]) / 2) if long_first else ((c[0] + c[1]) / 2, (c[3] + c[2]) / 2)
        sides = [side_ink(grey, dpi, a, b)]
    if all(v <= PROBE_ABSENT for v in sides):
        return "absent"
    if all(v >= PROBE_PRESENT for v in sides):
        return "present"
    return "unclear"


#: Least normalised cross-correlation of a box's outline with the ink for a place to be tried.
SEEK_LEAST_SCORE = 0.2
#: Best places tried, best correlated first: writing in a box moved with it lowers its
#: correlation below that of larger boxes nearby.
SEEK_PLACES = 10
#: Scales tried for a box shrunk or grown about its centre (see :func:`seek_box`).
SEEK_SCALES = (0.5, 0.55, 0.6, 0.65, 0.7, 0.75, 0.8, 0.85, 1.2, 1.3, 1.4, 1.5)


def resized_fit(grey: np.ndarray, dpi: float, element, pose: Pose) -> float | None:
    """The size, as a ratio to its own, at which a box is printed about its own centre, or None.

    Each scale of :data:`SEEK_SCALES` is probed (:func:`ink_probe`); sides are sought a little
    across themselves, so neighbouring sizes fit too: the middle one of those that fit on the
    same side of 1 is the box's.
    """
    fits = [sc for sc in SEEK_SCALES if ink_probe(grey, dpi, element, pose, scale=sc) == "present"]
    if not fits:
        return None
    side = [sc for sc in fits if (sc < 1.0) == (fits[0] < 1.0)]
    return float(np.median(side))


def seek_box(grey: np.ndarray, dpi: float, element, pose: Pose, others, reach: float, tol: float):
    """Where a box the extractor did not find is printed, by its outline on the grey image.

    First about its own centre at the sizes of :data:`SEEK_SCALES` (the middle of those that fit);
    then, at its own size, anywhere
    within ``reach`` points of its place (normalised cross-correlation of its outline with the
    ink, ``cv2.matchTemplate``). A place counts only when every side of the box shows ink there
    (:func:`ink_probe`), and a place farther than ``tol`` points only when no other template box
    of about its size (``others``: their centres and sizes, template points) is expected there.

    Returns ``("resized", ratio)``, ``("moved", (dx, dy) template points)`` or None.
    """
    ratio = resized_fit(grey, dpi, element, pose)
    if ratio is not None:
        return "resized", ratio
    k = dpi / POINTS_PER_INCH
    from .elements import outline

    c = pose.apply(outline(element)) * k
    r = int(np.ceil(reach * k))
    lo = np.floor(c.min(0)).astype(int) - 2
    hi = np.ceil(c.max(0)).astype(int) + 2
    x0, y0 = max(0, lo[0] - r), max(0, lo[1] - r)
    x1, y1 = min(grey.shape[1], hi[0] + r), min(grey.shape[0], hi[1] + r)
    kw, kh = hi[0] - lo[0], hi[1] - lo[1]
    if x1 - x0 <= kw or y1 - y0 <= kh or kw < 4 or kh < 4:
        return None
    ink = np.clip(240.0 - grey[y0:y1, x0:x1].astype(np.float32), 0.0, None)
    kernel = np.zeros((kh, kw), np.float32)
    # Sides about as wide as a rule blurred by the lens (0.5 mm), so a side one pixel off still counts.
    cv2.polylines(kernel, [np.round(c - lo).astype(np.int32).reshape(-1, 1, 2)], True, 1.0,
                  max(2, int(round(0.5 * dpi / 25.4))))
    score = cv2.matchTemplate(ink, kernel, cv2.TM_CCOEFF_NORMED)
    # The box at its own place, in the window's coordinates; its own place is ruled out.
    own = np.array([lo[0] - x0, lo[1] - y0], float)
    yy, xx = np.mgrid[0:score.shape[0], 0:score.shape[1]]
    score[np.hypot(xx - own[0], yy - own[1]) <= tol * k] = -1.0
    inv = pose.inverse()
    centre = np.asarray(element.center, float)
    size = np.asarray(element.size, float)
    # Places where the correlation peaks within half the box's size each way: a larger box of
    # the same height nearby is one ridge of high scores, and counts once.
    near = np.ones((kh // 2 * 2 + 1, kw // 2 * 2 + 1), np.uint8)
    peaks = (score >= cv2.dilate(score, near)) & (score > SEEK_LEAST_SCORE)
    py, px_ = np.nonzero(peaks)
    for j in np.argsort(-score[py, px_])[:SEEK_PLACES]:
        d_px = np.array([px_[j], py[j]], float) - own
        moved_to = inv.apply(pose.apply(centre[None]) + d_px / k)[0]
        shift = moved_to - centre
        taken = any(np.hypot(*(np.asarray(oc) - moved_to)) <= tol and np.all(np.abs(np.asarray(os_) / size - 1) <= 0.1)
                    for oc, os_ in others)
        if not taken and ink_probe(grey, dpi, element, pose, shift=shift) == "present":
            return "moved", (float(shift[0]), float(shift[1]))
    return None


def legible(match, template_elements, grey: np.ndarray, dpi: float, worst_dpi: float, tol: float = 5.67,
            reach: float = 70.9):
    """The offending elements of a photo too small to read that are judged all the same, because
    the photo shows the fault plainly (see :func:`layoutcheck.verdict.too_small`).

    ``match`` is on the page ``grey`` (its pose: template points -> points of ``grey``). At such
    a resolution the extractor loses thin rules, so two boxes merge into one and a box goes
    unfound; what it reports is checked on the grey image at the place the pose puts the
    element (:func:`ink_probe`). A box resized counts when its shorter side spans
    :data:`LEGIBLE_SIDE_PX` pixels at ``worst_dpi``; an element moved when its place does not show
    it whole; an element missing when its place shows paper on every side, or when the box is
    found whole nearby, shrunk, grown or moved (:func:`seek_box`, within ``reach`` points; farther
    than ``tol`` is moved), it is said so instead.

    Returns ``(elements, ids)``: the match's element results (those found by the seeking with
    their new status) and the ids judged.
    """
    from dataclasses import replace

    from .elements import MM_PER_POINT

    by_id = {e.id: e for e in template_elements}
    boxes = [e for e in template_elements if e.kind in ("box", "checkbox")]
    out = set()
    results = []
    for r in match.elements:
        results.append(r)
        e = by_id.get(r.id)
        if e is None or not r.judged or r.status == "ok" or e.kind not in ("box", "checkbox", "hline", "vline"):
            continue
        if r.status == "resized":
            if e.kind in ("box", "checkbox") and min(e.size) / POINTS_PER_INCH * worst_dpi >= LEGIBLE_SIDE_PX:
                out.add(r.id)
            continue
        seen = ink_probe(grey, dpi, e, match.pose)
        if r.status == "moved":
            if seen != "present":
                out.add(r.id)
            continue
        if seen == "present":
            continue
        found = None
        if e.kind in ("box", "checkbox") and min(e.size) / POINTS_PER_INCH * worst_dpi >= LEGIBLE_SIDE_PX:
            others = [(o.center, o.size) for o in boxes if o.id != e.id]
            found = seek_box(grey, dpi, e, match.pose, others, reach, tol)
        if found is not None and found[0] == "resized":
            results[-1] = replace(r, status="resized", size_ratio=float(found[1]))
            out.add(r.id)
        elif found is not None:
            dx, dy = found[1]
            results[-1] = replace(r, status="moved", offset_mm=(dx * MM_PER_POINT, dy * MM_PER_POINT))
            out.add(r.id)
        elif seen == "absent":
            out.add(r.id)
    return tuple(results), frozenset(out)

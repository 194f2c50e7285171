"""Simulated scans of a PDF page with a known pose, for tests and benchmarks.

A page is rendered with pypdfium2 at ``oversample`` times the scan resolution, turned, scaled and
shifted with ``cv2.warpAffine`` (bilinear, white outside the page), reduced to the scan
resolution by area averaging (per axis: a fax's pixels are taller than wide), then degraded:
fill-in scribbles, halftone tints in boxes, a stamp, faded print, a smooth warp of paper that
does not lie flat, punch holes, a staple, an edge shadow, a light gradient across the page, blur,
noise, salt and pepper, JPEG, bitonal thresholding, colour (coloured ink on tinted paper) and a
feeder's cut-off edge.

The pixel convention is that of :mod:`layoutcheck.extract.raster`: pixel ``(col, row)`` covers
``[col, col + 1) x [row, row + 1)``, a continuous pixel coordinate ``p`` is ``p * 72 / dpi``
points. The truth :attr:`SimulatedScan.pose` maps template points (the PDF page, top-left origin,
y down) to scan points.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field
from typing import Sequence

import cv2
import numpy as np

from .elements import MM_PER_INCH, POINTS_PER_INCH, points
from .pose import Pose


@dataclass(frozen=True)
class ScanSettings:
    """Everything that made a simulated scan (see :func:`simulate_scan`)."""

    page: int = 1
    dpi: float = 300.0
    rotation_deg: float = 0.0
    scale: tuple[float, float] = (1.0, 1.0)
    shift_mm: tuple[float, float] = (0.0, 0.0)
    blur_sigma_px: float = 0.0
    noise_sigma: float = 0.0
    salt_pepper: float = 0.0
    jpeg_quality: int | None = None
    bitonal_threshold: int | None = None
    fill: bool = False
    stamp: bool = False
    edge_shadow: bool = False
    punch_holes: bool = False
    paper_size_pt: tuple[float, float] | None = None
    seed: int = 0
    oversample: int | None = None
    hand: bool = False
    dpi_y: float | None = None
    fade: float | None = None
    warp_mm: float = 0.0
    tint: bool = False
    colour: tuple | None = None
    cut: tuple[str, float] | None = None
    staple: bool = False
    light_gradient: float = 0.0


@dataclass(frozen=True)
class SimulatedScan:
    """A simulated scan: image, resolution and the truth pose (template -> scan points).

    The image is grey ``(H, W)``, or ``(H, W, 3)`` RGB for a colour scan; ``dpi`` is the
    resolution across, ``dpi_y`` down (None: square pixels).
    """

    image: np.ndarray = field(repr=False)
    dpi: float
    pose: Pose
    settings: ScanSettings
    #: Size of the source PDF page (the template), points.
    page_size_pt: tuple[float, float]
    dpi_y: float | None = None
    #: Largest displacement of the smooth warp over the content, mm (0 when flat).
    warp_max_mm: float = 0.0

    @property
    def dpi_xy(self) -> tuple[float, float]:
        return float(self.dpi), float(self.dpi if self.dpi_y is None else self.dpi_y)

    @property
    def size_pt(self) -> tuple[float, float]:
        """Size of the scan in points."""
        h, w = self.image.shape[:2]
        dx, dy = self.dpi_xy
        return (w * POINTS_PER_INCH / dx, h * POINTS_PER_INCH / dy)

    @property
    def bitonal(self) -> bool:
        return self.settings.bitonal_threshold is not None


def _cv(m: np.ndarray) -> np.ndarray:
    """Continuous-pixel 2x3 map to OpenCV's pixel-centre convention."""
    from .extract.raster import cv_matrix

    return cv_matrix(m)


def render_page(source_pdf: str | os.PathLike, page: int, dpi: float) -> tuple[np.ndarray, tuple[float, float]]:
    """Grey rendering of a PDF page at ``dpi`` and the page size in points (``/Rotate`` applied)."""
    import pypdfium2 as pdfium

    doc = pdfium.PdfDocument(str(source_pdf))
    try:
        pg = doc[page - 1]
        w, h = pg.get_size()
        if pg.get_rotation() % 180 == 90:
            w, h = h, w
        bitmap = pg.render(scale=dpi / POINTS_PER_INCH, grayscale=True)
        arr = np.array(bitmap.to_numpy(), dtype=np.uint8)
        if arr.ndim == 3:
            arr = arr[..., 0]
        pg.close()
    finally:
        doc.close()
    return arr, (float(w), float(h))


def truth_pose(page_size_pt: tuple[float, float], paper_size_pt: tuple[float, float], rotation_deg: float = 0.0,
               scale: tuple[float, float] = (1.0, 1.0), shift_mm: tuple[float, float] = (0.0, 0.0)) -> Pose:
    """Pose of a page laid on paper: centred and fitted to the paper, scaled, turned about the
    paper's centre (counterclockwise as seen for positive ``rotation_deg``), then shifted."""
    pw, ph = page_size_pt
    qw, qh = paper_size_pt
    fit = min(qw / pw, qh / ph) if (abs(qw - pw) > 0.5 or abs(qh - ph) > 0.5) else 1.0
    centre = np.array([pw / 2.0, ph / 2.0])
    shift = np.array([qw / 2.0, qh / 2.0]) - centre + np.asarray(points(np.asarray(shift_mm, dtype=float)))
    return Pose.from_params(rotation_deg, (scale[0] * fit, scale[1] * fit), tuple(shift), tuple(centre))


def simulate_scan(
    source_pdf: str | os.PathLike,
    page: int = 1,
    dpi: float = 300,
    rotation_deg: float = 0.0,
    scale: tuple[float, float] | float = (1.0, 1.0),
    shift_mm: tuple[float, float] = (0.0, 0.0),
    blur_sigma_px: float = 0.0,
    noise_sigma: float = 0.0,
    salt_pepper: float = 0.0,
    jpeg_quality: int | None = None,
    bitonal_threshold: int | None = None,
    fill: bool = False,
    stamp: bool = False,
    edge_shadow: bool = False,
    punch_holes: bool = False,
    paper_size_pt: tuple[float, float] | None = None,
    seed: int = 0,
    oversample: int | None = None,
    hand: bool = False,
    fade: float | None = None,
    warp_mm: float = 0.0,
    tint: bool = False,
    colour: tuple | None = None,
    cut: tuple[str, float] | None = None,
    staple: bool = False,
    light_gradient: float = 0.0,
) -> SimulatedScan:
    """Scan a PDF page in simulation.

    Parameters
    ----------
    source_pdf : path
        The PDF; ``page`` is 1-based.
    dpi : float or (dpi_x, dpi_y)
        Scan resolution, one or per axis (a fax: ``(204, 98)``); the image is
        ``round(paper size * dpi / 72)`` pixels on each axis.
    rotation_deg : float
        Turn of the content, counterclockwise as seen, about the paper's centre.
    scale : (sx, sy) or float
        Scale of the content along the template's x and y axes.
    shift_mm : (dx, dy)
        Shift of the content on the paper, mm, y down.
    blur_sigma_px, noise_sigma, salt_pepper : float
        Gaussian blur (px), Gaussian noise (grey levels), share of pixels set black or white.
    jpeg_quality : int, optional
        JPEG round trip at this quality.
    bitonal_threshold : int, optional
        Make the scan black and white: grey ``> t`` is white.
    fill, stamp, edge_shadow, punch_holes : bool
        Handwriting in some boxes and ticks in checkboxes; a turned rectangular stamp with text;
        a dark band along the left and top edges; two punch holes along the left edge.
    paper_size_pt : (w, h), optional
        Paper size; the content is centred and fitted to it ("fit to page"). Default: the page's.
    seed : int
        Seed of every random choice.
    oversample : int, optional
        Rendering resolution over the scan resolution, for anti-aliased sampling. Default: enough
        for at least 600 dpi, where pdfium's snapping of rectangle edges to its pixel grid moves
        an edge by under 0.04 point (measured: up to 0.11 point at 400 dpi).
    hand : bool
        Harsher fill-in, by hand, on top of ``fill`` (see :func:`_draw_hand`): writing on the
        free rules of the form that runs past their ends, signatures across signature rules with
        a flourish along them, and long, nearly straight strokes (crossings-out, underlines) in
        boxes.
    fade : float, optional
        Faded print (a copy of a copy): the ink keeps this share of its darkness, on paper a
        little grey (``fade=0.4`` puts black at about grey 150).
    warp_mm : float
        Largest displacement of a smooth, random warp (paper not flat on the glass), mm.
    tint : bool
        Halftone shading (dots at 20 % cover) in some boxes.
    colour : (ink RGB, paper RGB), optional
        A 24-bit colour scan: the grey page's darkness drawn in the ink colour on the paper
        colour (dropout red on white, black on yellowish paper...). The image is ``(H, W, 3)``.
    cut : (edge, share), optional
        The feeder cut the image: ``share`` of the page's height (top, bottom) or width (left,
        right) is not on it. The truth pose stays that of the page's content on the image.
    staple : bool
        A staple in a top corner's margin: a dark metal strip 12.7 mm long and 0.8 mm wide
        across the corner at 30 to 60 degrees, with a grey shadow beside it (see :func:`_staple`).
    light_gradient : float
        Light falling off across the page in a random direction: the far side is this share
        darker (0.4: paper at 60 % of its brightness there), ink and paper alike.

    Returns
    -------
    SimulatedScan
    """
    if np.isscalar(scale):
        scale = (float(scale), float(scale))  # type: ignore[arg-type]
    dpi_x, dpi_y = (float(dpi), float(dpi)) if np.isscalar(dpi) else (float(dpi[0]), float(dpi[1]))  # type: ignore[index]
    st = ScanSettings(page, dpi_x, float(rotation_deg), tuple(map(float, scale)), tuple(map(float, shift_mm)),
                      float(blur_sigma_px), float(noise_sigma), float(salt_pepper), jpeg_quality, bitonal_threshold,
                      bool(fill), bool(stamp), bool(edge_shadow), bool(punch_holes),
                      None if paper_size_pt is None else tuple(map(float, paper_size_pt)), int(seed),
                      None if oversample is None else int(oversample), bool(hand), None if dpi_x == dpi_y else dpi_y,
                      None if fade is None else float(fade), float(warp_mm), bool(tint),
                      None if colour is None else tuple(tuple(map(int, c)) for c in colour),
                      None if cut is None else (str(cut[0]), float(cut[1])), bool(staple), float(light_gradient))
    rng = np.random.default_rng(seed)
    if oversample is None:
        osx, osy = (max(2, int(math.ceil(600.0 / d))) for d in (dpi_x, dpi_y))
    else:
        osx = osy = max(1, int(oversample))
    rdpi = max(dpi_x * osx, dpi_y * osy)
    rendered, page_pt = render_page(source_pdf, page, rdpi)
    paper = page_pt if paper_size_pt is None else tuple(paper_size_pt)
    # The image holds the paper rounded to whole pixels; the pose is about the paper itself, so an
    # unturned scan of a page on its own paper size has the identity pose.
    W, H = int(round(paper[0] * dpi_x / POINTS_PER_INCH)), int(round(paper[1] * dpi_y / POINTS_PER_INCH))
    pose = truth_pose(page_pt, paper, rotation_deg, scale, shift_mm)
    if fill:
        rendered = _draw_fill(rendered, source_pdf, page, rdpi, rng)
    if hand:
        rendered = _draw_hand(rendered, source_pdf, page, rdpi, np.random.default_rng([seed, 1]))
    if tint:
        rendered = _draw_tints(rendered, source_pdf, page, rdpi, rng)
    # Continuous map: render px -> template points -> scan points -> oversampled scan px.
    render_to_pt = np.diag([POINTS_PER_INCH / rdpi, POINTS_PER_INCH / rdpi, 1.0])
    pt_to_out = np.diag([dpi_x * osx / POINTS_PER_INCH, dpi_y * osy / POINTS_PER_INCH, 1.0])
    m = (pt_to_out @ pose.matrix @ render_to_pt)[:2]
    big = cv2.warpAffine(rendered, _cv(m), (W * osx, H * osy), flags=cv2.INTER_LINEAR,
                         borderMode=cv2.BORDER_CONSTANT, borderValue=255)
    img = cv2.resize(big, (W, H), interpolation=cv2.INTER_AREA) if osx * osy > 1 else big
    img = img.astype(np.float32)
    warp_max = 0.0
    if warp_mm > 0:
        img, warp_max = _warp(img, pose, page_pt, (dpi_x, dpi_y), warp_mm, rng)
    if fade is not None:
        # Ink keeps a share of its darkness on slightly grey paper: a copy of a copy.
        paper_grey = float(rng.uniform(232, 245))
        img = paper_grey - (255.0 - img) * float(fade) * paper_grey / 255.0
    if stamp:
        img = _draw_stamp(img, dpi_x, rng)
    if punch_holes:
        for dy in (-40.0, 40.0):  # 80 mm apart, 12 mm from the edge, 6 mm across (ISO 838, from memory)
            c = (int(round(_px(12.0, dpi_x))), int(round(H / 2.0 + _px(dy, dpi_y))))
            axes = (int(round(_px(3.0, dpi_x))), int(round(_px(3.0, dpi_y))))
            cv2.ellipse(img, c, axes, 0.0, 0.0, 360.0, 25.0, -1, lineType=cv2.LINE_AA)
    if staple:
        img = _staple(img, (dpi_x, dpi_y), np.random.default_rng([seed, 2]))
    if light_gradient > 0:
        img = img * _light_falloff((H, W), float(light_gradient), np.random.default_rng([seed, 3]))
    if edge_shadow:
        xs = np.arange(W, dtype=np.float32) + 0.5
        ys = np.arange(H, dtype=np.float32) + 0.5
        fx = np.clip(xs / _px(6.0, dpi_x), 0, 1)[None, :]
        fy = np.clip(ys / _px(6.0, dpi_y), 0, 1)[:, None]
        dark = 0.25 + 0.75 * np.minimum(fx, fy) ** 0.7
        img = img * dark
    if blur_sigma_px > 0:
        img = cv2.GaussianBlur(img, (0, 0), blur_sigma_px)
    if noise_sigma > 0:
        img = img + rng.normal(0.0, noise_sigma, img.shape).astype(np.float32)
    img = np.clip(np.rint(img), 0, 255).astype(np.uint8)
    if salt_pepper > 0:
        r = rng.random(img.shape)
        img[r < salt_pepper / 2] = 0
        img[(r >= salt_pepper / 2) & (r < salt_pepper)] = 255
    if jpeg_quality is not None:
        ok, buf = cv2.imencode(".jpg", img, [cv2.IMWRITE_JPEG_QUALITY, int(jpeg_quality)])
        img = cv2.imdecode(buf, cv2.IMREAD_GRAYSCALE)
    if bitonal_threshold is not None:
        img = np.where(img > bitonal_threshold, 255, 0).astype(np.uint8)
    if colour is not None:
        ink, paper_rgb = (np.asarray(c, np.float32) for c in colour)
        dark = (255.0 - img.astype(np.float32))[..., None] / 255.0
        img = np.clip(np.rint(paper_rgb * (1.0 - dark) + ink * dark), 0, 255).astype(np.uint8)
    if cut is not None:
        img, pose = _cut(img, pose, cut, (dpi_x, dpi_y))
    return SimulatedScan(img, dpi_x, pose, st, page_pt, None if dpi_x == dpi_y else dpi_y, warp_max)


def _staple(img: np.ndarray, dpi: tuple[float, float], rng: np.random.Generator) -> np.ndarray:
    """A staple's crown across a top corner: its centre 5 to 7 mm from both edges, at 30 to 60
    degrees to the edge, 12.7 mm long and 0.8 mm wide (a standard office staple, from memory),
    nearly black, with a grey shadow 0.6 mm to one side (lit from one side, as a scanner lamp
    is). Harsher than real: a bright metal crown often scans light grey."""
    h, w = img.shape[:2]
    right = bool(rng.integers(2))
    cx_mm, cy_mm = rng.uniform(5.0, 7.0, 2)
    turn = math.radians(rng.uniform(30.0, 60.0))
    # Across the corner: from lower left to upper right in the left corner, mirrored in the right.
    ux, uy = (math.cos(turn), -math.sin(turn)) if not right else (math.cos(turn), math.sin(turn))
    half = 12.7 / 2.0
    sx, sy = dpi[0] / MM_PER_INCH, dpi[1] / MM_PER_INCH
    out = np.ascontiguousarray(img)
    for off, grey, width in ((0.6, 150.0, 1.2), (0.0, 35.0, 0.8)):  # shadow first, metal on top
        cx = (w - cx_mm * sx if right else cx_mm * sx) + off * sx
        cy = cy_mm * sy + off * sy
        a = (cx - ux * half * sx, cy - uy * half * sy)
        b = (cx + ux * half * sx, cy + uy * half * sy)
        # Sub-pixel end points (4 fractional bits) and a width of at least one pixel.
        pts = [(int(round(p[0] * 16)), int(round(p[1] * 16))) for p in (a, b)]
        thick = max(1, int(round(width * (sx + sy) / 2.0)))
        layer = np.zeros((h, w), np.float32)
        cv2.line(layer, pts[0], pts[1], 1.0, thick, cv2.LINE_AA, shift=4)
        out = out * (1.0 - layer) + np.minimum(out, grey) * layer
    return out.astype(np.float32)


def _light_falloff(shape: tuple[int, int], share: float, rng: np.random.Generator) -> np.ndarray:
    """Brightness over the image, 1 on one side falling linearly to ``1 - share`` on the far side,
    along a random direction."""
    h, w = shape
    t = rng.uniform(0.0, 2.0 * math.pi)
    ys, xs = np.mgrid[0:h, 0:w].astype(np.float32)
    along = (xs + 0.5) / w * math.cos(t) + (ys + 0.5) / h * math.sin(t)
    along = (along - along.min()) / max(float(np.ptp(along)), 1e-9)
    return (1.0 - share * along).astype(np.float32)


def _cut(img: np.ndarray, pose: Pose, cut: tuple[str, float], dpi: tuple[float, float]):
    """The image without ``share`` of it at ``edge``, and the pose of the content on what is left."""
    edge, share = cut
    h, w = img.shape[:2]
    if edge not in ("top", "bottom", "left", "right") or not 0 < share < 1:
        raise ValueError(f"cut must be (top|bottom|left|right, share in (0, 1)), got {cut!r}")
    k = int(round(share * (h if edge in ("top", "bottom") else w)))
    if edge == "top":
        img, move = img[k:], (0.0, -k * POINTS_PER_INCH / dpi[1])
    elif edge == "bottom":
        img, move = img[: h - k], (0.0, 0.0)
    elif edge == "left":
        img, move = img[:, k:], (-k * POINTS_PER_INCH / dpi[0], 0.0)
    else:
        img, move = img[:, : w - k], (0.0, 0.0)
    return np.ascontiguousarray(img), pose.compose(Pose.from_params(0.0, (1.0, 1.0), move))


def _warp(img: np.ndarray, pose: Pose, page_pt: tuple[float, float], dpi: tuple[float, float], warp_mm: float,
          rng: np.random.Generator) -> tuple[np.ndarray, float]:
    """The image displaced by a smooth random field whose largest size over the content is ``warp_mm``.

    The field is a sum of four plane waves of wavelengths 1.2 to 3 times the page's size (a sheet
    lifting off the glass bends over its whole width, not in ripples) less its affine part,
    sampled on a coarse grid and interpolated; ``cv2.remap`` draws the page through it.
    """
    h, w = img.shape[:2]
    gw, gh = max(2, w // 16), max(2, h // 16)
    u = (np.arange(gw) + 0.5) / gw
    v = (np.arange(gh) + 0.5) / gh
    uu, vv = np.meshgrid(u, v)
    field = np.zeros((gh, gw, 2), np.float32)
    for axis in (0, 1):
        for _ in range(2):
            fx, fy = rng.uniform(-0.8, 0.8, 2)
            field[..., axis] += np.sin(np.pi * (fx * uu + fy * vv) + rng.uniform(0, 2 * np.pi)).astype(np.float32)
    # Sized on the content (the page's area under the pose), where it matters.
    corners = pose.apply(np.array([[0, 0], [page_pt[0], 0], [page_pt[0], page_pt[1]], [0, page_pt[1]]], float))
    sx = corners[:, 0] * dpi[0] / POINTS_PER_INCH / w * gw
    sy = corners[:, 1] * dpi[1] / POINTS_PER_INCH / h * gh
    inside = ((uu * gw >= sx.min()) & (uu * gw <= sx.max()) & (vv * gh >= sy.min()) & (vv * gh <= sy.max()))
    if not inside.any():
        inside[:] = True
    # The part of the field that one affine pose can take (a stretch, a turn) is the pose's, not
    # the bend's: it is removed (least squares over the content), so the truth pose stays exact.
    a = np.column_stack([np.ones(int(inside.sum())), uu[inside], vv[inside]])
    for axis in (0, 1):
        coef = np.linalg.lstsq(a, field[..., axis][inside], rcond=None)[0]
        field[..., axis] -= (coef[0] + coef[1] * uu + coef[2] * vv).astype(np.float32)
    size = np.hypot(field[..., 0], field[..., 1])
    field *= warp_mm / max(float(size[inside].max() if inside.any() else size.max()), 1e-9)
    full = cv2.resize(field, (w, h), interpolation=cv2.INTER_LINEAR)
    mx = (np.arange(w, dtype=np.float32)[None, :] - full[..., 0] * dpi[0] / MM_PER_INCH)
    my = (np.arange(h, dtype=np.float32)[:, None] - full[..., 1] * dpi[1] / MM_PER_INCH)
    out = cv2.remap(img, mx, my, cv2.INTER_LINEAR, borderMode=cv2.BORDER_CONSTANT, borderValue=255)
    return out, float(warp_mm)


def _px(mm_value: float, dpi: float) -> float:
    return mm_value * dpi / MM_PER_INCH


def _page_boxes(source_pdf, page: int) -> list[tuple[float, float, float, float, str]]:
    """Boxes and checkboxes of the PDF page (points), read by the vector extractor."""
    from .extract.vector import extract_vector
    from .sources import VectorPage, read_pages

    for pg in read_pages(source_pdf, pages={page}):
        if isinstance(pg, VectorPage):
            found = extract_vector(pg)
            return [(*e.frame, e.kind) for e in found.elements if e.kind in ("box", "checkbox")]
    return []


def _draw_fill(img: np.ndarray, source_pdf, page: int, rdpi: float, rng: np.random.Generator) -> np.ndarray:
    """Handwriting-like strokes in about half the boxes, crosses in some checkboxes."""
    out = img.copy()
    k = rdpi / POINTS_PER_INCH
    sh = 4  # sub-pixel bits for cv2.polylines
    thick = max(1, int(round(_px(0.5, rdpi))))
    boxes = _page_boxes(source_pdf, page)
    for x0, top, x1, bottom, kind in boxes:
        if rng.random() < 0.4:
            continue
        # People write in fields, not across panels: skip boxes that hold other boxes.
        if any(b[0] >= x0 - 1 and b[1] >= top - 1 and b[2] <= x1 + 1 and b[3] <= bottom + 1 and b[:4] != (x0, top, x1, bottom)
               for b in boxes):
            continue
        ink = float(rng.uniform(20, 90))
        if kind == "checkbox":
            # A cross whose arms run a little over the box's edges.
            pts = [np.array([[x0 - 1, top - 1], [x1 + 1, bottom + 1]]), np.array([[x1 + 1, top - 1], [x0 - 1, bottom + 1]])]
        else:
            n = int(max(8, (x1 - x0) / 3))
            xs = np.linspace(x0 + 3, x0 + 3 + (x1 - x0 - 6) * rng.uniform(0.4, 0.95), n)
            mid = (top + bottom) / 2
            # Writing stays mostly inside the box, in a line of handwriting (at most ~3 mm high).
            amp = min((bottom - top) * rng.uniform(0.15, 0.35), 8.5 * rng.uniform(0.5, 1.0))
            if bottom - top > 40:
                mid = top + min(20.0, (bottom - top) / 2)  # first line of a large box
            ys = mid + amp * np.sin(xs * rng.uniform(0.3, 0.9) + rng.uniform(0, 6)) + rng.normal(0, amp * 0.2, n)
            if rng.random() < 0.5:
                ys[-1] = bottom + 2  # a stroke that runs onto the bottom border
            pts = [np.stack([xs, ys], 1)]
        for p in pts:
            q = np.round(p * k * (1 << sh)).astype(np.int32)
            cv2.polylines(out, [q], False, ink, thick, lineType=cv2.LINE_AA, shift=sh)
    return out


def _page_rules(source_pdf, page: int) -> tuple[list[tuple[float, float, float, float]], list, tuple[float, float]]:
    """Free horizontal rules, boxes and labels of the PDF page (points) and the page size."""
    from .extract.vector import extract_vector
    from .sources import VectorPage, read_pages

    for pg in read_pages(source_pdf, pages={page}):
        if isinstance(pg, VectorPage):
            found = extract_vector(pg)
            rules = [e.frame for e in found.elements if e.kind == "hline"]
            others = [e for e in found.elements if e.kind in ("box", "label")]
            return rules, others, (found.width, found.height)
    return [], [], (0.0, 0.0)


def _hand_line(x0: float, x1: float, base: float, height: float, rng: np.random.Generator) -> np.ndarray:
    """A line of cursive-like writing from ``x0`` to ``x1`` on the baseline ``base`` (points):
    loops up to ``height`` above it, some descenders a third of that below."""
    n = int(max(12, (x1 - x0) * 1.5))
    t = np.linspace(0.0, 1.0, n)
    xs = x0 + (x1 - x0) * t + 1.2 * np.sin(t * (x1 - x0) * rng.uniform(0.6, 1.0))
    up = 0.5 + 0.5 * np.sin(t * (x1 - x0) * rng.uniform(0.35, 0.6) + rng.uniform(0, 6))
    down = np.where(rng.random(n) < 0.12, rng.uniform(0.2, 0.35) * height, 0.0)
    ys = base - 0.4 - up * height + down + rng.normal(0.0, 0.12, n)
    return np.stack([xs, ys], 1)


def _near_straight(x0: float, x1: float, y: float, rng: np.random.Generator) -> np.ndarray:
    """A stroke drawn by hand along a straight line: a slight bow, a slant and a tremor."""
    n = int(max(10, (x1 - x0) / 1.5))
    t = np.linspace(0.0, 1.0, n)
    bow = rng.uniform(0.3, 1.0) * rng.choice([-1, 1]) * np.sin(np.pi * t)
    slant = np.tan(np.radians(rng.uniform(-1.5, 1.5))) * (x1 - x0) * (t - 0.5)
    tremor = np.cumsum(rng.normal(0.0, 0.12, n))
    tremor -= np.linspace(tremor[0], tremor[-1], n)
    return np.stack([x0 + (x1 - x0) * t, y + bow + slant + tremor], 1)


def _draw_hand(img: np.ndarray, source_pdf, page: int, rdpi: float, rng: np.random.Generator) -> np.ndarray:
    """Fill-in harsher than most offices see: ink that touches, crosses and continues rules.

    - Writing on most free rules (those shorter than 80 % of the page width), its descenders
      crossing the rule; on some, a tail stroke that touches the rule's end and runs on along
      its line for 3 to 12 mm, and on some the writing begins before the rule does.
    - On a rule captioned "Signature" (or "Issued by"), a signature: large loops across the rule,
      running past an end, and a flourish drawn along the rule.
    - In some boxes wider than 30 mm, a long, nearly straight stroke (a crossing-out or an
      underline) of 12 to 40 mm.
    """
    out = img.copy()
    k = rdpi / POINTS_PER_INCH
    sh = 4
    mm_ = POINTS_PER_INCH / MM_PER_INCH
    thick = max(1, int(round(_px(0.45, rdpi))))
    rules, others, (pw, _) = _page_rules(source_pdf, page)
    labels = [e for e in others if e.kind == "label" and e.text]
    strokes: list[np.ndarray] = []
    for x0, top, x1, bottom in rules:
        if x1 - x0 >= 0.8 * pw:
            continue
        y = (top + bottom) / 2.0
        below = [e.text.lower() for e in labels if abs(e.frame[0] - x0) < 4 * mm_ and 0 < e.frame[1] - y < 6 * mm_]
        if any(t.startswith(("signature", "issued")) for t in below):
            a = x0 + rng.uniform(0.05, 0.3) * (x1 - x0)
            b = min(x1 + rng.uniform(3, 15) * mm_, pw - 10 * mm_)
            strokes.append(_hand_line(a, b, y + rng.uniform(0.0, 1.5) * mm_, rng.uniform(6, 10) * mm_, rng))
            f0 = x0 + rng.uniform(0.0, 0.2) * (x1 - x0)
            strokes.append(_near_straight(f0, min(f0 + rng.uniform(25, 50) * mm_, pw - 10 * mm_),
                                          y + rng.uniform(-0.6, 0.6) * mm_, rng))
            continue
        if rng.random() < 0.15:
            continue
        a = x0 + rng.uniform(1, 4) * mm_ - (rng.uniform(3, 8) * mm_ if rng.random() < 0.25 else 0.0)
        b = a + rng.uniform(0.35, 0.9) * (x1 - a)
        strokes.append(_hand_line(a, b, y, rng.uniform(2.5, 4.0) * mm_, rng))
        if rng.random() < 0.5:
            # A tail that touches the rule's end and runs on along it: the inked run grows by it.
            t0 = x1 - rng.uniform(0.0, 0.5) * mm_
            tail = _near_straight(t0, x1 + rng.uniform(3, 12) * mm_, y + rng.uniform(-0.15, 0.15) * mm_, rng)
            tail[:, 1] = y + 0.3 * (tail[:, 1] - y)
            strokes.append(tail)
    for e in others:
        bx0, btop, bx1, bbottom = e.frame
        if e.kind != "box" or bx1 - bx0 < 30 * mm_ or bbottom - btop > 40 * mm_ or rng.random() < 0.6:
            continue
        a = bx0 + rng.uniform(2, 8) * mm_
        b = min(bx1 - 2 * mm_, a + rng.uniform(12, 40) * mm_)
        strokes.append(_near_straight(a, b, btop + rng.uniform(0.4, 0.7) * (bbottom - btop), rng))
    for p in strokes:
        ink = float(rng.uniform(20, 90))
        q = np.round(p * k * (1 << sh)).astype(np.int32)
        cv2.polylines(out, [q], False, ink, thick, lineType=cv2.LINE_AA, shift=sh)
    return out


def _draw_tints(img: np.ndarray, source_pdf, page: int, rdpi: float, rng: np.random.Generator) -> np.ndarray:
    """Halftone shading (round dots at 20 % cover, 60 lines per inch) inside about half the boxes.

    60 lpi is a coarse office-printer screen (common practice: 60-85 lpi for laser-printed
    tints); the dots stay 0.6 mm inside each box so they do not touch its rules.
    """
    out = img.copy()
    k = rdpi / POINTS_PER_INCH
    period = rdpi / 60.0
    radius = period * math.sqrt(0.20 / math.pi)
    inset = _px(0.6, rdpi)
    for x0, top, x1, bottom, kind in _page_boxes(source_pdf, page):
        if kind != "box" or rng.random() < 0.5:
            continue
        a0, a1 = int(x0 * k + inset), int(x1 * k - inset)
        b0, b1 = int(top * k + inset), int(bottom * k - inset)
        if a1 - a0 < 2 * period or b1 - b0 < 2 * period:
            continue
        ys, xs = np.mgrid[b0:b1, a0:a1].astype(np.float32)
        dx = (xs % period) - period / 2
        dy = (ys % period) - period / 2
        dot = np.hypot(dx, dy) <= radius
        region = out[b0:b1, a0:a1]
        region[dot] = np.minimum(region[dot], 40)
    return out


def _draw_stamp(img: np.ndarray, dpi: float, rng: np.random.Generator) -> np.ndarray:
    """A rectangular stamp outline with text, turned by 8 to 25 degrees, on free space.

    A clerk puts a receipt stamp where the sheet has room (common practice): of 24 random places
    in the middle of the page, the one whose footprint covers the least printed ink is used. It
    may still touch print; it is never put squarely over a block of fields on purpose.
    """
    h, w = img.shape
    sw, shh = _px(60.0, dpi), _px(22.0, dpi)
    canvas = np.full((int(shh * 1.6), int(sw * 1.2)), 255, np.uint8)
    ch, cw = canvas.shape
    t = max(2, int(round(_px(0.8, dpi))))
    x0, y0 = int((cw - sw) / 2), int((ch - shh) / 2)
    cv2.rectangle(canvas, (x0, y0), (int(x0 + sw), int(y0 + shh)), 60, t, lineType=cv2.LINE_AA)
    text, font, thick = "KBH RECEIVED", cv2.FONT_HERSHEY_SIMPLEX, max(1, t // 2 + 1)
    (tw, th), _ = cv2.getTextSize(text, font, 1.0, thick)
    fs = min(0.85 * sw / tw, 0.5 * shh / th)  # the text fits inside the frame
    (tw, th), _ = cv2.getTextSize(text, font, fs, thick)
    cv2.putText(canvas, text, (int(x0 + (sw - tw) / 2), int(y0 + (shh + th) / 2)), font, fs, 60, thick, cv2.LINE_AA)
    ang = float(rng.uniform(8, 25)) * (1 if rng.random() < 0.5 else -1)
    ink = cv2.integral((img < 160).astype(np.uint8))
    half_w, half_h = cw / 2.0, ch / 2.0

    def covered(x: float, y: float) -> int:
        a0, a1 = int(max(0, x - half_w)), int(min(w, x + half_w))
        b0, b1 = int(max(0, y - half_h)), int(min(h, y + half_h))
        return int(ink[b1, a1] - ink[b0, a1] - ink[b1, a0] + ink[b0, a0])

    places = [(float(rng.uniform(0.3, 0.7) * w), float(rng.uniform(0.3, 0.7) * h)) for _ in range(24)]
    cx, cy = min(places, key=lambda q: covered(*q))
    m = cv2.getRotationMatrix2D((cw / 2.0, ch / 2.0), ang, 1.0)
    m[:, 2] += [cx - cw / 2.0, cy - ch / 2.0]
    placed = cv2.warpAffine(canvas, m, (w, h), flags=cv2.INTER_LINEAR, borderValue=255)
    return np.minimum(img, placed.astype(np.float32))


def save_scan(scans: SimulatedScan | Sequence[SimulatedScan], path: str | os.PathLike, fmt: str | None = None,
              jpeg_quality: int = 90) -> str:
    """Write one or several scans to a file, always stating the dpi.

    Parameters
    ----------
    scans : SimulatedScan or sequence of them
        Several scans make a multi-page TIFF or PDF.
    path : path
    fmt : {"png", "jpeg", "tiff", "pdf"}, optional
        Default from the file's extension. TIFF is group-4 for bitonal scans, LZW for grey; PDF is
        an image-only, scanner-style PDF with each page sized by the image's dpi (grey pages JPEG
        compressed at ``jpeg_quality``, as scanners write them).
    jpeg_quality : int
        Quality of JPEG files and of the grey pages of PDFs.

    Returns
    -------
    str
        The path written.
    """
    from PIL import Image

    items = [scans] if isinstance(scans, SimulatedScan) else list(scans)
    if not items:
        raise ValueError(f"{path}: no scans to write")
    fmt = (fmt or os.path.splitext(str(path))[1].lstrip(".")).lower()
    fmt = {"jpg": "jpeg", "tif": "tiff"}.get(fmt, fmt)
    if fmt not in ("png", "jpeg", "tiff", "pdf"):
        raise ValueError(f"{path}: unknown scan format {fmt!r}: use png, jpeg, tiff or pdf")
    if fmt in ("png", "jpeg") and len(items) > 1:
        raise ValueError(f"{path}: {fmt} holds one page; use tiff or pdf for {len(items)} scans")

    def pil(s: SimulatedScan):
        if s.image.ndim == 3:
            return Image.fromarray(s.image, mode="RGB"), False
        im = Image.fromarray(s.image, mode="L")
        bitonal = s.bitonal and set(np.unique(s.image).tolist()) <= {0, 255}
        return (im.convert("1", dither=Image.Dither.NONE) if bitonal else im), bitonal

    images = [pil(s) for s in items]
    dpi = items[0].dpi_xy  # per axis: a fax states 204 x 98
    first, bitonal = images[0]
    rest = [im for im, _ in images[1:]]
    if fmt == "png":
        first.save(path, format="PNG", dpi=dpi)
    elif fmt == "jpeg":
        first.convert("RGB" if first.mode == "RGB" else "L").save(path, format="JPEG", dpi=dpi, quality=jpeg_quality)
    elif fmt == "tiff":
        comp = "group4" if all(b for _, b in images) else "tiff_lzw"
        if comp == "tiff_lzw":
            mode = "RGB" if any(im.mode == "RGB" for im, _ in images) else "L"
            first, rest = first.convert(mode), [im.convert(mode) for im in rest]
        first.save(path, format="TIFF", dpi=dpi, compression=comp, save_all=True, append_images=rest)
    else:
        if dpi[0] != dpi[1]:
            raise ValueError(f"{path}: a PDF page is written with square pixels; {dpi[0]:g} x {dpi[1]:g} dpi given")
        # Pillow stores grey pages as JPEG (as scanners do) and bitonal ones as CCITT group 4.
        first.save(path, format="PDF", resolution=float(dpi[0]), save_all=True, append_images=rest, quality=jpeg_quality)
    return str(path)

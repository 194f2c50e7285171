"""Simulated phone photographs of a PDF page, with a known homography, for tests and benchmarks.

A sheet lies on a desk and is photographed from above with a tilted phone: the page is rendered
with pypdfium2, optionally tampered (one box moved, removed or shrunk), filled in, bent gently,
seen through a random homography (corner displacements up to a share of the page width, tilt about
either axis, the phone turned a little), laid on a textured desk of random colour, lit unevenly
(light falling off towards the corners and a soft shadow), blurred by the lens, given sensor
noise, and written as a colour JPEG that states no dpi or 72 dpi (as phones do).

Harsher than real photos on purpose: a flat-bed scan is what a person would send if they could;
these are the photos that still have to be read. The desk is at most 60 % as bright as the paper
(a sheet that cannot be told from its desk cannot be found by anyone).

Pixel convention: continuous pixel ``p`` covers ``[p, p + 1)``, as in
:mod:`layoutcheck.extract.raster`. The truth :attr:`SimulatedPhoto.homography` maps template
points (the PDF page, top-left origin, y down) to continuous photo pixels; the paper bend is not
in it (it is zero at the sheet's edges and at most ``bend_mm`` inside).
"""

from __future__ import annotations

import io
import math
import os
from dataclasses import dataclass, field

import cv2
import numpy as np

from .elements import MM_PER_POINT, POINTS_PER_INCH
from .pose import Pose
from .simulate import _draw_fill, _page_boxes, render_page

#: Photo sizes (width x height of the sensor, landscape), from 2 to 12 megapixels.
PHOTO_SIZES = ((1600, 1200), (2048, 1536), (2592, 1944), (3264, 2448), (4000, 3000))
TAMPERS = ("moved", "missing", "resized")


@dataclass(frozen=True)
class CameraSettings:
    """Everything that made a simulated photo (see :func:`simulate_photo`)."""

    page: int = 1
    #: Sensor size, landscape (width, height); the photo is taken upright (portrait) for a
    #: portrait page.
    size: tuple[int, int] = (3264, 2448)
    #: Largest corner displacement of the perspective, share of the page width.
    perspective: float = 0.05
    #: Share of the frame's height the sheet spans before perspective.
    fill_frame: float = 0.82
    #: In-plane turn of the phone, degrees (at most).
    turn_deg: float = 6.0
    #: Light at the photo's corners relative to its centre lost (0.35: 35 % darker).
    falloff: float = 0.35
    #: Darkening under the soft shadow (0 for none).
    shadow: float = 0.25
    #: Largest paper bend, mm.
    bend_mm: float = 1.0
    blur_sigma_px: float = 1.0
    noise_sigma: float = 4.0
    jpeg_quality: int = 85
    #: dpi written into the file: None (none at all) or 72 (what phones write).
    file_dpi: int | None = None
    #: Store the pixels turned with an EXIF orientation tag saying how to turn them back.
    exif_turned: bool = False
    fill: bool = True
    #: ``None``, or one of :data:`TAMPERS`: a box moved (8 to 15 mm), removed, or shrunk by 30 %.
    tamper: str | None = None
    seed: int = 0


@dataclass(frozen=True)
class Tamper:
    """The planted fault: which box (its template frame, points), what was done, and how far."""

    status: str
    frame: tuple[float, float, float, float]
    offset_mm: tuple[float, float] = (0.0, 0.0)
    size_ratio: float = 1.0


@dataclass(frozen=True)
class SimulatedPhoto:
    """A simulated photo: RGB image as the viewer shows it, the truth homography, the file bytes."""

    image: np.ndarray = field(repr=False)
    #: Template points -> continuous photo pixels (of the upright image).
    homography: Pose
    settings: CameraSettings
    page_size_pt: tuple[float, float]
    tamper: Tamper | None
    jpeg: bytes = field(repr=False, default=b"")

    def save(self, path: str | os.PathLike) -> str:
        """Write the JPEG file (as the phone wrote it)."""
        with open(path, "wb") as fh:
            fh.write(self.jpeg)
        return str(path)

    def corner_error_px(self, pose_px: Pose) -> np.ndarray:
        """Distance, photo pixels, between the template page's corners under ``pose_px`` and the truth."""
        w, h = self.page_size_pt
        c = np.array([[0, 0], [w, 0], [w, h], [0, h]], dtype=float)
        return np.hypot(*(pose_px.apply(c) - self.homography.apply(c)).T)


def random_settings(rng: np.random.Generator, page: int = 1, tamper: str | None = None,
                    size: tuple[int, int] | None = None) -> CameraSettings:
    """Settings drawn over the ranges the benchmark covers."""
    return CameraSettings(
        page=page,
        size=size or PHOTO_SIZES[int(rng.integers(len(PHOTO_SIZES)))],
        perspective=float(rng.uniform(0.02, 0.05)),
        fill_frame=float(rng.uniform(0.72, 0.9)),
        turn_deg=float(rng.uniform(0.0, 6.0)),
        falloff=0.35,
        shadow=float(rng.uniform(0.1, 0.3)),
        bend_mm=float(rng.uniform(0.0, 1.0)),
        blur_sigma_px=float(rng.uniform(0.5, 1.3)),
        noise_sigma=float(rng.uniform(2.0, 6.0)),
        jpeg_quality=int(rng.integers(70, 96)),
        file_dpi=None if rng.random() < 0.5 else 72,
        exif_turned=bool(rng.random() < 0.25),
        fill=bool(rng.random() < 0.7),
        tamper=tamper,
        seed=int(rng.integers(1 << 30)),
    )


def sheet_homography(page_pt: tuple[float, float], frame_px: tuple[int, int], st: CameraSettings,
                     rng: np.random.Generator) -> np.ndarray:
    """Template points -> photo pixels: the page centred in the frame, turned, then each corner
    displaced (a tilt about one axis, plus a random part) by up to ``st.perspective`` of its width."""
    pw, ph = page_pt
    fw, fh = frame_px
    k = st.fill_frame * min(fh / ph, fw / pw)
    a = math.radians(rng.uniform(-st.turn_deg, st.turn_deg))
    rot = np.array([[math.cos(a), -math.sin(a)], [math.sin(a), math.cos(a)]])
    corners = np.array([[0, 0], [pw, 0], [pw, ph], [0, ph]], dtype=float) - (pw / 2, ph / 2)
    placed = corners * k @ rot.T + (fw / 2, fh / 2) + rng.uniform(-0.04, 0.04, 2) * (fw, fh)
    width_px = pw * k
    dmax = st.perspective * width_px
    # Tilt about the x or the y axis: one edge seen shorter than the opposite one.
    tilt = np.zeros((4, 2))
    t = rng.uniform(0.5, 1.0) * dmax * (1 if rng.random() < 0.5 else -1)
    if rng.random() < 0.5:
        tilt[[0, 1], 0] = [t, -t]  # top edge shorter (or longer)
    else:
        tilt[[0, 3], 1] = [t, -t]  # left edge shorter (or longer)
    rand = rng.uniform(-1, 1, (4, 2)) * dmax * 0.5
    disp = tilt + rand
    scale = np.maximum(1.0, np.hypot(*disp.T) / max(dmax, 1e-9))  # no corner beyond the limit
    quad = placed + disp / scale[:, None]
    src = np.float32([[0, 0], [pw, 0], [pw, ph], [0, ph]])
    return cv2.getPerspectiveTransform(src, quad.astype(np.float32)).astype(float)


def _isolated_boxes(boxes, gap: float = 8.5) -> list[tuple]:
    """Boxes (not checkboxes) at least ``gap`` points from every other box: safe to move."""
    out = []
    for b in boxes:
        if b[4] != "box" or (b[2] - b[0]) < 20 or (b[3] - b[1]) < 10:
            continue
        clear = all(o is b or o[0] > b[2] + gap or o[2] < b[0] - gap or o[1] > b[3] + gap or o[3] < b[1] - gap
                    for o in boxes)
        if clear:
            out.append(b)
    return out


def _tamper(img: np.ndarray, boxes, kind: str, k: float, rng: np.random.Generator) -> tuple[np.ndarray, Tamper | None]:
    """Move (8 to 15 mm to a blank place), remove, or shrink by 30 % one isolated box of the render."""
    cands = _isolated_boxes(boxes)
    rng.shuffle(cands)
    out = img.copy()
    pad = 2.0  # points of margin around the box's outline, to take its stroke
    for b in cands:
        x0, y0, x1, y1 = (int(round((v + s) * k)) for v, s in zip(b[:4], (-pad, -pad, pad, pad)))
        x0, y0 = max(x0, 0), max(y0, 0)
        crop = img[y0:y1, x0:x1].copy()
        frame = tuple(float(v) for v in b[:4])
        if kind == "missing":
            out[y0:y1, x0:x1] = 255
            return out, Tamper("missing", frame)
        if kind == "resized":
            cw, ch = x1 - x0, y1 - y0
            small = cv2.resize(crop, (max(1, int(round(cw * 0.7))), max(1, int(round(ch * 0.7)))), interpolation=cv2.INTER_AREA)
            out[y0:y1, x0:x1] = 255
            sy, sx = y0 + (ch - small.shape[0]) // 2, x0 + (cw - small.shape[1]) // 2
            out[sy:sy + small.shape[0], sx:sx + small.shape[1]] = small
            return out, Tamper("resized", frame, size_ratio=0.7)
        for _ in range(24):
            dist = rng.uniform(8.0, 15.0) / MM_PER_POINT
            ang = rng.uniform(0, 2 * math.pi)
            dx, dy = dist * math.cos(ang), dist * math.sin(ang)
            nx0, ny0 = int(round(x0 + dx * k)), int(round(y0 + dy * k))
            nx1, ny1 = nx0 + crop.shape[1], ny0 + crop.shape[0]
            if nx0 < 0 or ny0 < 0 or nx1 > img.shape[1] or ny1 > img.shape[0]:
                continue
            # The new place must be blank paper outside the box's old place (2 mm around it).
            m = int(round(2.0 / MM_PER_POINT * k))
            region = img[max(ny0 - m, 0):ny1 + m, max(nx0 - m, 0):nx1 + m].copy()
            oy, ox = max(ny0 - m, 0), max(nx0 - m, 0)
            ry0, ry1 = max(y0 - oy, 0), max(min(y1 - oy, region.shape[0]), 0)
            rx0, rx1 = max(x0 - ox, 0), max(min(x1 - ox, region.shape[1]), 0)
            region[ry0:ry1, rx0:rx1] = 255
            if (region < 200).mean() > 0.0005:
                continue
            out[y0:y1, x0:x1] = 255
            out[ny0:ny1, nx0:nx1] = np.minimum(out[ny0:ny1, nx0:nx1], crop)
            sdx, sdy = (nx0 - x0) / k, (ny0 - y0) / k
            return out, Tamper("moved", frame, (sdx * MM_PER_POINT, sdy * MM_PER_POINT))
    return img, None


def _desk(h: int, w: int, rng: np.random.Generator) -> tuple[np.ndarray, list[float]]:
    """A desk of random colour (at most 60 % of the paper's brightness) with wood-like texture:
    the texture (around 1) and the colour (grey levels per channel)."""
    base = rng.uniform(0.12, 0.6) * rng.uniform(0.6, 1.0, 3)
    small_h, small_w = max(8, h // 16), max(8, w // 16)
    yy, xx = np.mgrid[0:small_h, 0:small_w].astype(np.float32)
    ang = rng.uniform(0, math.pi)
    u = xx * math.cos(ang) + yy * math.sin(ang)
    grain = 0.08 * np.sin(u * rng.uniform(0.2, 0.8) + 3.0 * np.sin(yy * 0.05 + rng.uniform(0, 6)))
    grain = grain + cv2.GaussianBlur(rng.normal(0, 0.06, (small_h, small_w)).astype(np.float32), (0, 0), 1.5)
    tex = cv2.resize(grain.astype(np.float32), (w, h), interpolation=cv2.INTER_LINEAR)
    fine = np.empty((h, w), np.float32)
    cv2.randn(fine, 0.0, 0.02)  # fine grain
    tex += fine + 1.0
    return tex, [float(c * 255.0) for c in base]


def simulate_photo(source_pdf: str | os.PathLike, settings: CameraSettings = CameraSettings()) -> SimulatedPhoto:
    """Photograph a PDF page in simulation (see the module's description).

    Returns
    -------
    SimulatedPhoto
        With :attr:`~SimulatedPhoto.homography` from template points to photo pixels and, when
        ``settings.tamper`` is set and a box could be tampered, the planted :class:`Tamper`.
    """
    st = settings
    rng = np.random.default_rng(st.seed)
    cv2.setRNGSeed(int(st.seed))  # OpenCV's noise (cv2.randn) repeats too
    sw, sh = st.size
    _, page_pt = render_page(source_pdf, st.page, 10.0)
    portrait = page_pt[1] >= page_pt[0]
    fw, fh = (min(sw, sh), max(sw, sh)) if portrait else (max(sw, sh), min(sw, sh))
    hom = sheet_homography(page_pt, (fw, fh), st, rng)
    pose = Pose(hom)
    # Render at 1.5 times the photo's finest local resolution (anti-aliased by a light blur).
    corners = np.array([[0, 0], [page_pt[0], 0], [page_pt[0], page_pt[1]], [0, page_pt[1]]], dtype=float)
    px_per_pt = float(pose.local_scales(corners)[:, 1].max())
    rdpi = 1.5 * px_per_pt * POINTS_PER_INCH
    rendered, _ = render_page(source_pdf, st.page, rdpi)
    k = rdpi / POINTS_PER_INCH
    tamper = None
    if st.tamper and st.tamper not in TAMPERS:
        raise ValueError(f"unknown tamper {st.tamper!r}: use one of {', '.join(TAMPERS)}")
    if st.fill:
        rendered = _draw_fill(rendered, source_pdf, st.page, rdpi, rng)
    if st.tamper:
        # After the filling in: what is written in the box goes with it (the form was printed
        # that way and filled in as printed).
        rendered, tamper = _tamper(rendered, _page_boxes(source_pdf, st.page), st.tamper, k, rng)
    rendered = cv2.GaussianBlur(rendered, (0, 0), 0.6)
    # Photo pixel -> template point (inverse homography, then the bend) -> render pixel, by rows.
    # The sheet curls along its x axis (lifted in the middle, flat at its left and right edges);
    # seen from above, a lifted point moves away from the photo's centre in proportion to its
    # lift and its distance from that centre: ``bend_mm`` at the farthest point of the page.
    inv = np.linalg.inv(hom)
    centre = (inv @ np.array([fw / 2.0, fh / 2.0, 1.0]))
    centre = centre[:2] / centre[2]
    reach = float(np.hypot(*(corners - centre).T).max())
    bend_k = st.bend_mm / MM_PER_POINT / reach
    grey = np.empty((fh, fw), np.uint8)
    paper = np.empty((fh, fw), np.float32)
    xs = np.arange(fw, dtype=np.float32) + 0.5
    for r0 in range(0, fh, 256):
        r1 = min(fh, r0 + 256)
        gx, gy = np.meshgrid(xs, np.arange(r0, r1, dtype=np.float32) + 0.5)
        den = inv[2, 0] * gx + inv[2, 1] * gy + inv[2, 2]
        tx = (inv[0, 0] * gx + inv[0, 1] * gy + inv[0, 2]) / den
        ty = (inv[1, 0] * gx + inv[1, 1] * gy + inv[1, 2]) / den
        inside = (tx >= 0) & (tx <= page_pt[0]) & (ty >= 0) & (ty <= page_pt[1])
        b = bend_k * np.sin(np.pi * np.clip(tx / page_pt[0], 0, 1))
        mx = ((tx + b * (tx - centre[0])) * k - 0.5).astype(np.float32)
        my = ((ty + b * (ty - centre[1])) * k - 0.5).astype(np.float32)
        grey[r0:r1] = cv2.remap(rendered, mx, my, cv2.INTER_LINEAR, borderMode=cv2.BORDER_CONSTANT, borderValue=255)
        paper[r0:r1] = inside
    # The sheet's edge anti-aliased over about one pixel.
    paper = cv2.GaussianBlur(paper, (0, 0), 0.7)
    tint = [1.0, rng.uniform(0.95, 1.0), rng.uniform(0.85, 0.97)]  # warm paper
    tex, colour = _desk(fh, fw, rng)
    # Light: falling off towards the photo's corners, and a soft shadow across part of it (a
    # smooth field, computed on a grid 8 times coarser and interpolated).
    lh, lw = fh // 8 + 1, fw // 8 + 1
    yy = (np.arange(lh, dtype=np.float32) * 8 - fh / 2) / (fh / 2)
    xx = (np.arange(lw, dtype=np.float32) * 8 - fw / 2) / (fw / 2)
    light = 1.0 - st.falloff * (xx[None, :] ** 2 + yy[:, None] ** 2) / 2.0
    if st.shadow > 0:
        ang = rng.uniform(0, 2 * math.pi)
        off = rng.uniform(0.2, 0.7)
        d = xx[None, :] * math.cos(ang) + yy[:, None] * math.sin(ang) - off
        light = light * (1.0 - st.shadow / (1.0 + np.exp(-d / 0.08)))
    light = cv2.resize(light.astype(np.float32), (lw * 8, lh * 8), interpolation=cv2.INTER_LINEAR)[:fh, :fw]
    sheet = paper * grey.astype(np.float32) * light
    desk = (1.0 - paper) * light
    noise = np.empty((fh, fw), np.float32)
    chans = []
    for c in range(3):
        ch = sheet * float(tint[c]) + desk * np.minimum(tex * colour[c], 0.62 * 255.0)
        if st.blur_sigma_px > 0:
            ch = cv2.GaussianBlur(ch, (0, 0), st.blur_sigma_px)
        cv2.randn(noise, 0.0, float(st.noise_sigma))
        ch += noise
        chans.append(np.clip(ch, 0, 255).astype(np.uint8))  # astype rounds down; noise hides it
    rgb = cv2.merge(chans)
    del desk, sheet, noise, chans
    jpeg = _jpeg(rgb, st)
    # The truth: the homography the bent sheet is closest to (least squares over the page).
    gx, gy = np.meshgrid(np.linspace(0, page_pt[0], 15), np.linspace(0, page_pt[1], 15))
    grid = np.column_stack([gx.ravel(), gy.ravel()])
    # The photo shows template point t + b(t) at H(t) (see the sampling above): to first order
    # the content at t is seen at H(t - b(t)).
    bent = grid - (bend_k * np.sin(np.pi * grid[:, 0] / page_pt[0]))[:, None] * (grid - centre)
    truth = Pose.from_pairs(grid, pose.apply(bent), "projective")
    return SimulatedPhoto(rgb, truth, st, page_pt, tamper, jpeg)


def _jpeg(rgb: np.ndarray, st: CameraSettings) -> bytes:
    """The JPEG a phone writes: colour, the given quality, no dpi or 72, maybe turned with EXIF."""
    from PIL import Image

    im = Image.fromarray(rgb, mode="RGB")
    exif = Image.Exif()
    if st.exif_turned:
        # Stored turned a quarter counterclockwise; orientation 6 says "turn 90 degrees clockwise
        # to view" (EXIF 2.3, tag 0x0112).
        im = im.transpose(Image.Transpose.ROTATE_90)
        exif[0x0112] = 6
    buf = io.BytesIO()
    kw = {"quality": int(st.jpeg_quality), "exif": exif.tobytes()}
    if st.file_dpi is not None:
        kw["dpi"] = (st.file_dpi, st.file_dpi)
    im.save(buf, format="JPEG", **kw)
    return buf.getvalue()

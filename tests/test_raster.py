"""Raster extraction: binarisation, skew, rule fits and elements of simulated scans.

Outside references are named beside each check.
"""

from __future__ import annotations

import math

import cv2
import numpy as np
import pytest
from PIL import Image

from conftest_raster import make_form_pdf
from layoutcheck.elements import MM_PER_POINT, outline
from layoutcheck.extract.raster import (RasterSettings, binarise, estimate_skew, extract_raster,
                                        extract_raster_detail, otsu_threshold, sauvola_mask)
from layoutcheck.simulate import render_page, simulate_scan
from layoutcheck.sources import RasterPage

MM = 1.0 / MM_PER_POINT  # points per mm


@pytest.fixture(scope="module")
def form(tmp_path_factory):
    path = tmp_path_factory.mktemp("raster") / "kbh210.pdf"
    truth = make_form_pdf(path)
    return str(path), truth


def _page(scan) -> RasterPage:
    return RasterPage("scan", 1, scan.image, scan.dpi)


def _corner_error(element, frame, pose) -> float:
    """Largest distance (mm) between the element's corners and the drawn frame's mapped corners."""
    x0, top, x1, bottom = frame
    drawn = pose.apply(np.array([[x0, top], [x1, top], [x1, bottom], [x0, bottom]]))
    found = outline(element)
    return float(np.hypot(*(found - drawn).T).max()) * MM_PER_POINT


def _match(elements, frame, pose, kinds=("box",)):
    """The element of the given kinds nearest the mapped frame, and its corner error in mm."""
    cands = [e for e in elements if e.kind in kinds]
    if not cands:
        return None, math.inf
    errs = [_corner_error(e, frame, pose) for e in cands]
    i = int(np.argmin(errs))
    return cands[i], errs[i]


def _line_angle_errors(detail, rotation_deg: float) -> np.ndarray:
    """Angle error (degrees) of every fitted rule longer than 20 mm against the truth turn."""
    seg = detail.segments
    d = seg[:, 2:] - seg[:, :2]
    length = np.hypot(d[:, 0], d[:, 1])
    a = np.degrees(np.arctan2(d[:, 1], d[:, 0]))
    # Truth: content turned counterclockwise as seen by r is -r in y-down page angles.
    err = (a - (-rotation_deg) + 45.0) % 90.0 - 45.0
    return err[length > 20 * MM]


# -- binarisation -----------------------------------------------------------------------------
def test_otsu_threshold_matches_scikit_image():
    from skimage import data
    from skimage.filters import threshold_otsu

    # Source: scikit-image's threshold_otsu on its own sample images (a real scanned page and
    # the camera picture). Both put pixels <= t in the lower class; the integer returned may
    # differ by one where two neighbouring thresholds give (nearly) the same between-class
    # variance, since OpenCV keeps the first maximum and scikit-image rounds bin centres.
    for img in (data.page(), data.camera(), data.coins()):
        assert abs(otsu_threshold(img) - int(threshold_otsu(img))) <= 1


def test_otsu_threshold_of_two_levels():
    # A two-level image: any threshold in [low, high) separates it; Otsu's between-class
    # variance is flat there (from memory: Otsu 1979), so only the range is asserted.
    img = np.full((40, 40), 200, np.uint8)
    img[10:20, 5:35] = 30
    t = otsu_threshold(img)
    assert 30 <= t < 200
    mask, method = binarise(img, 100)
    assert method == "otsu"
    assert mask.sum() == 300  # exactly the dark bar


def test_sauvola_matches_scikit_image():
    from skimage import data
    from skimage.filters import threshold_sauvola

    # Source: scikit-image's threshold_sauvola (Sauvola and Pietikainen 2000) on its real
    # scanned page; ink is grey <= threshold in both. Pixels exactly at the threshold may fall
    # either way (float32 box filters here, float64 integral images there).
    page = data.page()
    ref = page <= threshold_sauvola(page, window_size=15, k=0.2, r=128)
    ours = sauvola_mask(page, 15, 0.2, 128.0)
    assert (ours == ref).mean() >= 0.999
    # The reduced-resolution path (windows over 32 px) against scikit-image at full resolution.
    big = cv2.resize(page, None, fx=4, fy=4, interpolation=cv2.INTER_CUBIC)
    ref = big <= threshold_sauvola(big, window_size=65, k=0.2, r=128)
    assert (sauvola_mask(big, 65, 0.2, 128.0) == ref).mean() >= 0.99


def test_binarise_switches_to_sauvola_on_uneven_lighting(form):
    path, truth = form
    scan = simulate_scan(path, dpi=150, noise_sigma=3)
    _, method = binarise(scan.image, 150)
    assert method == "otsu"
    # A lighting gradient from 35 % to 100 % across the page (planted fault).
    ramp = np.linspace(0.35, 1.0, scan.image.shape[1], dtype=np.float32)[None, :]
    dim = np.clip(scan.image * ramp, 0, 255).astype(np.uint8)
    mask, method = binarise(dim, 150)
    assert method == "sauvola"
    # Global Otsu on the same page paints the dark side black: over 20 % of the page is "ink".
    assert (dim <= otsu_threshold(dim)).mean() > 0.2
    assert mask.mean() < 0.05
    found = extract_raster(RasterPage("dim", 1, dim, 150.0))
    assert "sauvola" in found.note
    for frame in truth.boxes:
        assert _match(found.elements, frame, scan.pose)[1] <= 0.3


# -- skew -------------------------------------------------------------------------------------
@pytest.mark.parametrize("angle", [-4.0, -1.5, 0.7, 3.0])
def test_skew_of_rotated_real_page(angle):
    from skimage import data

    # Source: scikit-image's real scanned page (skimage.data.page), turned with Pillow by known
    # angles (Pillow turns counterclockwise for positive angles: -angle in y-down terms). The
    # reference is the page turned by 1 degree the same way, so both went through Pillow's
    # bicubic resampling (the unturned page, never resampled, measures 0.1 degree apart: its
    # strokes keep the pixel grid's staircase).
    def turned(a):
        img = np.asarray(Image.fromarray(data.page()).rotate(a, resample=Image.BICUBIC, expand=True, fillcolor=255))
        return estimate_skew(binarise(img, 100)[0])

    ref = turned(1.0)
    assert abs((turned(angle) - ref) - (-(angle - 1.0))) <= 0.1


# -- rule fits --------------------------------------------------------------------------------
def test_rule_fit_agrees_with_cv2_fitline():
    # A long rule drawn anti-aliased at a known slant on an A4-sized 200 dpi canvas, with a
    # crossing rule so that boxes are not needed; compared with OpenCV's cv2.fitLine (L2) on the
    # same ink mask, pixel centres at +0.5 (our convention).
    h, w = 2339, 1654
    img = np.full((h, w), 255, np.uint8)
    sh = 8
    p0, p1 = np.array([150.3, 700.2]), np.array([1500.7, 741.9])
    cv2.line(img, tuple(np.round(p0 * (1 << sh)).astype(int)), tuple(np.round(p1 * (1 << sh)).astype(int)), 0, 3,
             cv2.LINE_AA, shift=sh)
    page = RasterPage("line", 1, img, 200.0)
    _, detail = extract_raster_detail(page)
    mask, _ = binarise(img, 200)
    ys, xs = np.nonzero(mask)
    vx, vy, x0, y0 = cv2.fitLine(np.stack([xs + 0.5, ys + 0.5], 1).astype(np.float32), cv2.DIST_L2, 0, 0.01, 0.01).ravel()
    ref_angle = math.degrees(math.atan2(vy, vx))
    assert len(detail.segments) == 1
    seg = detail.segments[0] * 200 / 72.0  # points -> px
    angle = math.degrees(math.atan2(seg[3] - seg[1], seg[2] - seg[0]))
    assert abs(angle - ref_angle) <= 0.01
    # Position: distance from the reference line to the fitted segment's middle, px.
    mid = (seg[:2] + seg[2:]) / 2
    dist = abs((mid[0] - x0) * vy - (mid[1] - y0) * vx)
    assert dist <= 0.05
    # Both agree with the drawn geometry too (the centre line from p0 to p1).
    true_angle = math.degrees(math.atan2(*(p1 - p0)[::-1]))
    assert abs(angle - true_angle) <= 0.01


# -- whole pages ------------------------------------------------------------------------------
@pytest.mark.parametrize("dpi,rotation", [(200, 1.7), (300, -1.7)])
def test_every_drawn_element_found(form, dpi, rotation):
    path, truth = form
    scan = simulate_scan(path, dpi=dpi, rotation_deg=rotation, noise_sigma=4, blur_sigma_px=0.6, seed=1)
    found, detail = extract_raster_detail(_page(scan))
    # Source: the frames drawn with reportlab (tests/conftest_raster.py), mapped by the scan's
    # truth pose (itself checked against OpenCV image moments in tests/test_simulate.py).
    # Boxes and checkboxes: every drawn frame (mapped by the truth pose) within 0.3 mm.
    for frame in truth.boxes:
        e, err = _match(found, frame, scan.pose, ("box",))
        assert err <= 0.3, (frame, err)
    for frame in truth.checkboxes:
        e, err = _match(found, frame, scan.pose, ("checkbox",))
        assert err <= 0.3, (frame, err)
    kinds = [e.kind for e in found]
    assert kinds.count("box") == len(truth.boxes)
    assert kinds.count("checkbox") == len(truth.checkboxes)
    assert kinds.count("hline") == len(truth.hlines)
    assert kinds.count("vline") == len(truth.vlines)
    assert kinds.count("line") == 0
    # Marks: the four solid squares, with their turn.
    marks = [e for e in found if e.kind == "mark"]
    assert len(marks) == len(truth.marks)
    for frame in truth.marks:
        e, err = _match(marks, frame, scan.pose, ("mark",))
        assert err <= 0.3
        assert abs(e.angle - (-rotation)) <= 0.5
    # Rule angles against the truth turn.
    errs = _line_angle_errors(detail, rotation)
    assert len(errs) >= 30
    assert np.abs(errs).max() <= 0.02
    assert np.median(np.abs(errs)) <= 0.01
    # Boxes carry the page's fine skew.
    for e in found:
        if e.kind in ("box", "checkbox"):
            assert abs(e.angle - (-rotation)) <= 0.02
    assert found and all(e.source == "raster" for e in found)


@pytest.mark.parametrize("seed", [0, 1, 3])
def test_fill_in_and_stamp_do_not_break_or_add_boxes(form, seed):
    path, truth = form
    scan = simulate_scan(path, dpi=200, rotation_deg=1.7, fill=True, stamp=True, seed=seed)
    found, _ = extract_raster_detail(_page(scan))
    drawn = truth.boxes + truth.checkboxes
    for frame in drawn:
        e, err = _match(found, frame, scan.pose, ("box", "checkbox"))
        assert err <= 0.3, (frame, err)
    # No extra box or checkbox lies over a drawn one.
    boxes = [e for e in found if e.kind in ("box", "checkbox")]
    assert len(boxes) == len(drawn)


def test_shadow_holes_and_speckle_make_no_shapes(form):
    path, truth = form
    scan = simulate_scan(path, dpi=200, rotation_deg=-0.8, edge_shadow=True, punch_holes=True, salt_pepper=0.002,
                         seed=2)
    found = extract_raster(_page(scan))
    kinds = [e.kind for e in found.elements]
    assert kinds.count("box") == len(truth.boxes)
    assert kinds.count("checkbox") == len(truth.checkboxes)
    assert kinds.count("hline") == len(truth.hlines)
    assert kinds.count("vline") == len(truth.vlines)
    assert kinds.count("mark") == len(truth.marks)  # punch holes are round, not marks
    # Labels: speckle (0.002 of the pixels) adds none; about one per printed text run.
    assert kinds.count("label") <= len(truth.labels) + 5


def test_bitonal_jpeg_scan(form):
    path, truth = form
    scan = simulate_scan(path, dpi=200, rotation_deg=2.4, blur_sigma_px=0.8, jpeg_quality=35, bitonal_threshold=150,
                         seed=4)
    found, detail = extract_raster_detail(_page(scan))
    for frame in truth.boxes:
        assert _match(found, frame, scan.pose)[1] <= 0.3
    assert np.abs(_line_angle_errors(detail, 2.4)).max() <= 0.02


@pytest.mark.parametrize("turns", [1, 2, 3])
def test_pages_turned_by_quarter_turns(form, turns):
    path, truth = form
    scan = simulate_scan(path, dpi=150, rotation_deg=1.2, seed=5)
    upright = extract_raster(_page(scan))
    turned = RasterPage("turned", 1, np.ascontiguousarray(np.rot90(scan.image, turns)), 150.0)
    found = extract_raster(turned)

    def sizes(pe, kind, swap):
        s = sorted((round(e.size[1], 0), round(e.size[0], 0)) if swap else (round(e.size[0], 0), round(e.size[1], 0))
                   for e in pe.elements if e.kind == kind)
        return s

    swap = turns % 2 == 1
    count = lambda pe, k: sum(e.kind == k for e in pe.elements)  # noqa: E731
    for kind in ("box", "checkbox", "mark"):
        a, b = sizes(upright, kind, swap), sizes(found, kind, False)
        assert len(a) == len(b) == {"box": 15, "checkbox": 5, "mark": 4}[kind]
        assert np.abs(np.array(a) - np.array(b)).max() <= 1.0  # points
    # Labels: words are joined along the writing, also when it runs down the turned page.
    assert abs(count(found, "label") - count(upright, "label")) <= 2
    # Horizontal rules become vertical ones on a quarter turn.
    if swap:
        assert count(found, "vline") == count(upright, "hline") == 2
        assert count(found, "hline") == count(upright, "vline") == 1
    else:
        assert count(found, "hline") == 2 and count(found, "vline") == 1


def test_labels_agree_between_rendering_and_scan(form):
    path, truth = form
    clean, _ = render_page(path, 1, 200)
    template = extract_raster(RasterPage("clean", 1, clean, 200.0))
    scan = simulate_scan(path, dpi=200, noise_sigma=8, blur_sigma_px=0.7, jpeg_quality=50, seed=6)
    found = extract_raster(_page(scan))
    t_labels = [e for e in template.elements if e.kind == "label"]
    s_labels = [e for e in found.elements if e.kind == "label"]
    assert all(e.angle is None and e.text is None for e in s_labels)
    assert abs(len(t_labels) - len(s_labels)) <= 2
    # Every text run drawn has a label over its start (x, baseline): one label per text run.
    centres = np.array([e.center for e in s_labels])
    matched = 0
    for e in t_labels:
        d = np.hypot(*(centres - np.array(e.center)).T)
        i = int(np.argmin(d))
        f = s_labels[i].frame
        if d[i] <= 1.0 * MM and all(abs(a - b) <= 1.0 * MM for a, b in zip(f, e.frame)):
            matched += 1
    assert matched >= 0.9 * len(t_labels)
    assert len(t_labels) >= len(truth.labels) - 2


def test_settings_are_in_physical_units(form):
    # The same page at 150 and 300 dpi gives the same elements (sizes are in mm, never pixels).
    path, _ = form
    a = extract_raster(_page(simulate_scan(path, dpi=150, rotation_deg=0.9)))
    b = extract_raster(_page(simulate_scan(path, dpi=300, rotation_deg=0.9)))
    for kind in ("box", "checkbox", "hline", "vline", "mark"):
        ea = [e for e in a.elements if e.kind == kind]
        eb = [e for e in b.elements if e.kind == kind]
        assert len(ea) == len(eb)
        cb = np.array([e.center for e in eb])
        for x in ea:
            y = eb[int(np.argmin(np.hypot(*(cb - np.array(x.center)).T)))]
            assert np.abs(np.array(x.frame) - np.array(y.frame)).max() <= 0.3 * MM
    assert a.note == "raster 150 dpi, otsu"
    assert RasterSettings().min_rule_mm == 3.0


def test_blank_and_text_only_pages():
    from skimage import data

    blank = extract_raster(RasterPage("blank", 1, np.full((500, 400), 255, np.uint8), 100.0))
    assert blank.elements == () and blank.width == 400 * 72 / 100
    # scikit-image's real scanned page is text only (no rules): no boxes or marks. Its blurred
    # low-resolution words touch each other, and the feet of four of them pass for short rules
    # (measured: 4 hlines); downstream, extra content never fails a page.
    page = extract_raster(RasterPage("page", 1, data.page(), 100.0))
    kinds = [e.kind for e in page.elements]
    assert not {"box", "checkbox", "mark", "vline", "line"} & set(kinds)
    assert kinds.count("hline") <= 4
    assert kinds.count("label") >= 10
    assert "sauvola" in page.note  # the photo of the page is lit unevenly
    with pytest.raises(ValueError, match="colour page 1"):
        extract_raster(RasterPage("colour", 1, np.zeros((20, 20, 3), np.uint8), 100.0))


# -- fill-in that crosses the rules ------------------------------------------------------------
def _turn(pts, turn_deg: float, centre=(60 * MM, 40 * MM)) -> np.ndarray:
    """Points (points, y down) turned counterclockwise as seen by ``turn_deg`` about ``centre``."""
    a = math.radians(-turn_deg)  # counterclockwise as seen is a negative angle with y down
    c, s = math.cos(a), math.sin(a)
    p = np.asarray(pts, dtype=float).reshape(-1, 2) - centre
    return p @ np.array([[c, s], [-s, c]]) + centre


def _drawn_page(dpi: float, draw, size_mm=(120.0, 80.0), blur: float = 0.6, bitonal: bool = False, seed: int = 0,
                turn_deg: float = 0.0):
    """A grey page drawn with OpenCV at 8 times ``dpi`` (points in, anti-aliased, turned by
    ``turn_deg`` with :func:`_turn`), area-reduced to ``dpi`` (the module's pixel convention:
    pixel ``(c, r)`` covers ``[c, c + 1)``), blurred, with a little noise; ``bitonal``
    thresholds it at 128 as a black-and-white scanner does."""
    os_ = 8
    k = dpi * os_ / 72.0
    w, h = (int(round(v / MM_PER_POINT * dpi / 72.0)) for v in size_mm)
    big = np.full((h * os_, w * os_), 255, np.uint8)
    sh = 4

    def line(p, q, width_pt, grey=0):
        p, q = _turn([p, q], turn_deg)
        a = np.round(np.array(p) * k * (1 << sh)).astype(int)
        b = np.round(np.array(q) * k * (1 << sh)).astype(int)
        # cv2.line's thickness is in whole pixels of the big canvas.
        cv2.line(big, tuple(a.tolist()), tuple(b.tolist()), grey, max(1, int(round(width_pt * k))), cv2.LINE_AA, shift=sh)

    def rect(x0, top, x1, bottom, width_pt=0.7):
        # Sides drawn centred on the frame, as a PDF stroke is.
        for p, q in (((x0, top), (x1, top)), ((x1, top), (x1, bottom)), ((x1, bottom), (x0, bottom)), ((x0, bottom), (x0, top))):
            line(p, q, width_pt)

    draw(line, rect)
    img = cv2.resize(big, (w, h), interpolation=cv2.INTER_AREA).astype(np.float32)
    if blur:
        img = cv2.GaussianBlur(img, (0, 0), blur)
    img += np.random.default_rng(seed).normal(0, 3, img.shape).astype(np.float32)
    img = np.clip(np.rint(img), 0, 255).astype(np.uint8)
    if bitonal:
        img = np.where(img > 128, 255, 0).astype(np.uint8)
    return RasterPage("drawn", 1, img, float(dpi))


def _frame_error(e, frame, turn_deg: float = 0.0) -> float:
    """Largest distance (mm) between an element's corners and a drawn frame's turned corners."""
    x0, top, x1, bottom = frame
    drawn = _turn([[x0, top], [x1, top], [x1, bottom], [x0, bottom]], turn_deg)
    return float(np.hypot(*(outline(e) - drawn).T).max()) * MM_PER_POINT


@pytest.mark.parametrize("dpi,bitonal,turn", [(200, False, -3.1), (200, False, 0.9), (200, True, 2.6), (300, False, -3.1),
                                              (300, True, 0.9)])
def test_checkbox_crossed_by_x_is_found(dpi, bitonal, turn):
    # Planted: a row of 4 mm checkboxes on a turned page, each crossed by an X whose arms run
    # 1 point past the corners (as real ticks do), 0.5 mm strokes, in five inks, blurred; the
    # truth is the drawing itself (common practice: a checkbox of 3-5 mm). The two grey 200 dpi
    # cases lost a box each when a side's clean middle, between the arms, had to be a third of
    # the run and the arms' overshoot had to stay within 1 mm of the corner.
    side = 4 * MM
    frames = [((15 + 20 * i) * MM, 30 * MM, (15 + 20 * i) * MM + side, 30 * MM + side) for i in range(5)]
    inks = [20, 45, 60, 75, 90]

    def draw(line, rect):
        line((10 * MM, 15 * MM), (110 * MM, 15 * MM), 0.8)  # a long rule, so the page has one
        for (x0, t, x1, b), ink in zip(frames, inks):
            rect(x0, t, x1, b)
            line((x0 - 1, t - 1), (x1 + 1, b + 1), 0.5 * MM, ink)
            line((x1 + 1, t - 1), (x0 - 1, b + 1), 0.5 * MM, ink)

    found = extract_raster(_drawn_page(dpi, draw, bitonal=bitonal, seed=dpi, turn_deg=turn, blur=0.9))
    boxes = [e for e in found.elements if e.kind == "checkbox"]
    for frame in frames:
        errs = [_frame_error(e, frame, turn) for e in boxes]
        assert errs and min(errs) <= 0.3, (frame, errs)
    assert len(boxes) == len(frames)


@pytest.mark.parametrize("dpi", [200, 300])
def test_rule_joined_by_a_shallow_stroke_still_closes_its_boxes(dpi):
    # Planted: a row of three 9 mm high boxes whose top rule is crossed at 4 degrees by a 0.8 mm
    # stroke (a stamp's edge) over 60 mm: the rule's piece of ink is thicker than a rule there.
    # The truth is the drawing.
    xs = [10 * MM, 45 * MM, 80 * MM, 110 * MM]
    top, bottom = 30 * MM, 39 * MM
    frames = [(a, top, b, bottom) for a, b in zip(xs[:-1], xs[1:])]

    def draw(line, rect):
        for f in frames:
            rect(*f, width_pt=0.8)
        slope = math.tan(math.radians(4.0))
        x0, x1 = 20 * MM, 80 * MM
        y0 = top - slope * 30 * MM
        line((x0, y0), (x1, y0 + slope * (x1 - x0)), 0.8 * MM, 60)

    found = extract_raster(_drawn_page(dpi, draw, seed=dpi + 1))
    boxes = [e for e in found.elements if e.kind == "box"]
    for frame in frames:
        errs = [_frame_error(e, frame) for e in boxes]
        assert errs and min(errs) <= 0.3, (frame, errs)

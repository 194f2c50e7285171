"""The second look: a rule or box looked for again where the page pose puts it.

Faults are planted on drawn or simulated scans, and the tests assert exactly what is found:
elements lost by the extractor under a stamp, a tick or a thresholded rule are confirmed at their
place, and elements painted out or moved away are not invented.
"""

from __future__ import annotations

import math
from pathlib import Path

import cv2
import numpy as np
import pytest

from layoutcheck.check import CheckSettings, extract, learn, match_page, record_for
from layoutcheck.elements import Element, outline
from layoutcheck.extract.look import COVERED, measure_side, second_look
from layoutcheck.pose import Pose
from layoutcheck.simulate import simulate_scan
from layoutcheck.sources import RasterPage

ROOT = Path(__file__).resolve().parent.parent
REF101 = ROOT / "sample_forms" / "references" / "KBH-101_vessel_arrival.pdf"
DPI = 200.0
PT = DPI / 72.0  # px per point (the PDF unit is 1/72 in: ISO 32000-1, 8.3.2.3)
MM = DPI / 25.4  # px per mm (1 in = 25.4 mm exactly, by definition)


def _canvas(w=1200, h=900):
    return np.full((h, w), 255, np.uint8)


def _aa_line(img, p, q, width=2, shade=0):
    """An anti-aliased line between continuous-pixel points (pixel centres at +0.5)."""
    sh = 8
    a = tuple(int(round((v - 0.5) * (1 << sh))) for v in p)
    b = tuple(int(round((v - 0.5) * (1 << sh))) for v in q)
    cv2.line(img, a, b, shade, width, cv2.LINE_AA, shift=sh)


def _box_element(x0, top, x1, bottom, kind="box", angle=0.0):
    return Element("box-001", kind, (x0 / PT, top / PT, x1 / PT, bottom / PT), angle=angle)


def _draw_box(img, e: Element, pose: Pose = Pose.identity(), width=2):
    c = pose.apply(outline(e)) * PT
    for k in range(4):
        _aa_line(img, c[k], c[(k + 1) % 4], width)
    return c


def _stamp_on(img, c, mm_px, shade=40, thick_mm=1.6, overhang=3):
    """A solid stamp letter lying on a box's top side (corners ``c`` in px), ``overhang`` px past
    both its ends; a new image."""
    u = (c[1] - c[0]) / np.hypot(*(c[1] - c[0]))
    n = np.array([u[1], -u[0]])
    up = thick_mm * mm_px * n
    bar = np.array([c[0] - overhang * u, c[1] + overhang * u, c[1] + overhang * u + up, c[0] - overhang * u + up])
    out = img.copy()
    cv2.fillPoly(out, [np.round(bar - 0.5).astype(np.int32)], shade)
    return out


# -- one side ---------------------------------------------------------------------------------
@pytest.mark.parametrize("offset", [0.0, 0.37, -1.6, 2.25])
def test_side_offset_agrees_with_cv2_fitline(offset):
    # A slanted rule drawn 'offset' px outward of its predicted place (outward for a segment
    # running left to right is up, y down); slanted, so that the ink mask's pixel grid averages
    # out along it. Reference: OpenCV's cv2.fitLine (L2) on the same ink mask, pixel centres at
    # +0.5 (the project's convention), read at the segment's middle along the outward normal.
    img = _canvas()
    p, q = np.array([100.0, 400.3]), np.array([1100.0, 431.9])
    u = (q - p) / np.hypot(*(q - p))
    n = np.array([u[1], -u[0]])
    _aa_line(img, p + offset * n, q + offset * n, width=3)
    side = measure_side(img, p, q, reach=12.0, span=(0.0, 1.0), cover=0.5, mm_px=MM)
    assert side is not None and side is not COVERED
    ys, xs = np.nonzero(img < 128)
    vx, vy, x0, y0 = cv2.fitLine(np.stack([xs + 0.5, ys + 0.5], 1).astype(np.float32), cv2.DIST_L2, 0, 0.01, 0.01).ravel()
    mid = (p + q) / 2
    ref = float(np.dot(np.array([x0, y0]) - mid, n))  # fitted line's offset from the middle, outward
    assert abs(side.offset - ref) <= 0.05
    # OpenCV's anti-aliased drawing itself places a line a little off the coordinates asked for.
    assert abs(side.offset - offset) <= 0.3
    assert 2.0 <= side.thick <= 6.0


def test_side_not_found_beyond_reach_or_on_paper():
    img = _canvas()
    _aa_line(img, (100.0, 380.0), (1100.0, 380.0), width=3)  # 20 px above the predicted place
    p, q = np.array([100.0, 400.0]), np.array([1100.0, 400.0])
    assert measure_side(img, p, q, reach=12.0, span=(0.0, 1.0), cover=0.5, mm_px=MM) is None
    assert measure_side(_canvas(), p, q, reach=12.0, span=(0.0, 1.0), cover=0.5, mm_px=MM) is None


def test_a_line_of_text_is_not_a_rule():
    # Printed text where a rule is expected: its baseline row holds ink along much of the line,
    # but the letters above it leave no paper along the rule's edge.
    img = _canvas()
    cv2.putText(img, "Port of loading   Port of discharge   Date of sailing", (100, 405), cv2.FONT_HERSHEY_SIMPLEX,
                1.0, 0, 2, cv2.LINE_AA)
    e = Element("hline-001", "hline", (100 / PT, 403.5 / PT, 1000 / PT, 404.5 / PT), angle=0.0)
    assert second_look(img, DPI, [e], Pose.identity()) == [None]
    p, q = np.array([100.0, 404.0]), np.array([1000.0, 404.0])
    assert measure_side(img, p, q, reach=12.0, span=(0.0, 1.0), cover=0.2, mm_px=MM, extent=True) is None


def test_broken_thin_rule_is_confirmed_with_its_extent():
    # A 0.5 pt rule at 200 dpi thresholded to black and white keeps about a third of its length
    # in dashes (seen on simulated bitonal scans); the second look still confirms it and measures
    # where it starts and ends.
    img = _canvas()
    x = 100
    while x < 1000:
        cv2.line(img, (x, 500), (x + 7, 500), 0, 1)
        x += 20
    e = Element("hline-001", "hline", (100 / PT, 500 / PT, 988 / PT, 501 / PT), angle=0.0)  # last dash 980-987
    (found,) = second_look(img, DPI, [e], Pose.identity())
    assert found is not None and found.kind == "hline"
    x0, top, x1, bottom = (v * PT for v in found.frame)
    assert abs((top + bottom) / 2 - 500.5) <= 0.3
    assert abs(x0 - 100) <= 1.5 and abs(x1 - 988) <= 1.5


# -- boxes --------------------------------------------------------------------------------------
def test_box_with_a_stamp_letter_on_one_side_and_a_tick_inside():
    # A checkbox (4 mm) turned 2 degrees: a solid letter of a stamp lies along its whole top side,
    # and a tick's strokes touch the other sides from inside. The covered side keeps the box's
    # size; the box is found where it was drawn.
    img = _canvas()
    e = _box_element(400, 300, 400 + 4 * MM, 300 + 4 * MM, kind="checkbox")
    pose = Pose.from_params(rotation_deg=2.0, center=e.center)
    c = _draw_box(img, e, pose)
    # The stamp's letter: a solid bar over the top side, 1.5 mm thick, sitting on it.
    img = _stamp_on(img, c, MM, shade=60, thick_mm=1.5, overhang=2)
    # The tick: an X from corner to corner, 3 px wide.
    _aa_line(img, c[0] + 3 * (c[2] - c[0]) / 40, c[2] - 3 * (c[2] - c[0]) / 40, width=4)
    _aa_line(img, c[1] + 3 * (c[3] - c[1]) / 40, c[3] - 3 * (c[3] - c[1]) / 40, width=4)
    (found,) = second_look(img, DPI, [e], pose)
    assert found is not None and found.kind == "checkbox"
    expect = pose.apply(np.array([e.center]))[0]
    assert np.hypot(*(np.array(found.center) - expect)) * 25.4 / 72 <= 0.1  # mm
    assert abs(found.size[0] - e.size[0]) * 25.4 / 72 <= 0.1
    assert abs(found.size[1] - e.size[1]) * 25.4 / 72 <= 0.1


def test_box_painted_out_or_moved_is_not_invented():
    img = _canvas()
    e = _box_element(300, 300, 300 + 30 * MM, 300 + 8 * MM)
    moved = _box_element(300 + 9 * MM, 300, 300 + 39 * MM, 300 + 8 * MM)
    _draw_box(img, moved)  # drawn 9 mm to the right of where the template has it
    assert second_look(img, DPI, [e], Pose.identity()) == [None]
    assert second_look(_canvas(), DPI, [e], Pose.identity()) == [None]
    # Found where it now is, at its own size.
    (again,) = second_look(img, DPI, [moved], Pose.identity())
    assert again is not None and abs(again.center[0] - moved.center[0]) <= 0.1


def test_box_shrunk_is_measured_at_its_size():
    # A box shrunk by 10 % about its centre: each side is within reach, so the box found has the
    # shrunk size (the solver then calls it resized), not the template's.
    img = _canvas()
    e = _box_element(300, 300, 300 + 20 * MM, 300 + 8 * MM)
    cx, cy = (e.frame[0] + e.frame[2]) / 2 * PT, (e.frame[1] + e.frame[3]) / 2 * PT
    small = _box_element(cx - 9 * MM, cy - 3.6 * MM, cx + 9 * MM, cy + 3.6 * MM)
    _draw_box(img, small)
    (found,) = second_look(img, DPI, [e], Pose.identity())
    assert found is not None
    assert abs(found.size[0] / e.size[0] - 0.9) <= 0.01
    assert abs(found.size[1] / e.size[1] - 0.9) <= 0.02


# -- on a page ----------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def kbh101():
    return learn([str(REF101)])


def test_record_of_a_scan_with_a_stamped_checkbox_has_nothing_offending(kbh101):
    scan = simulate_scan(REF101, dpi=DPI, rotation_deg=-1.8, noise_sigma=3, blur_sigma_px=0.5, seed=4)
    tp = kbh101.pages[0]
    boxes = [e for e in tp.elements_for("raster") if e.kind == "checkbox"]
    assert boxes
    target = boxes[0]
    c = scan.pose.apply(outline(target)) * scan.dpi / 72.0
    img = _stamp_on(scan.image, c, scan.dpi / 25.4)
    page = RasterPage("stamped.png", 1, img, scan.dpi)
    found = extract(page)
    first = match_page(tp, found, CheckSettings())
    lost = {r.id: r.status for r in first.elements if r.status != "ok" and r.judged}
    assert lost.get(target.id) in ("missing", "resized", "moved")  # the planted fault bites
    rec = record_for(page.source, 1, found, [kbh101], CheckSettings(), page=page)
    assert rec["offending"] == []
    assert rec["second_look"] == [target.id]
    assert rec["verdict"] == "skewed"
    assert abs(rec["pose"]["rotation_deg"] - (-1.8)) <= 0.02


def test_record_of_a_scan_with_a_checkbox_painted_out_names_it_missing(kbh101):
    scan = simulate_scan(REF101, dpi=DPI, rotation_deg=1.2, noise_sigma=3, seed=5)
    tp = kbh101.pages[0]
    target = [e for e in tp.elements_for("raster") if e.kind == "checkbox"][1]
    c = scan.pose.apply(outline(target)) * scan.dpi / 72.0
    img = scan.image.copy()
    centre = c.mean(0)
    half = np.hypot(*(c[2] - c[0])) / 2 + 4
    cv2.rectangle(img, tuple(int(v) for v in centre - half), tuple(int(math.ceil(v)) for v in centre + half), 255, -1)
    page = RasterPage("painted.png", 1, img, scan.dpi)
    rec = record_for(page.source, 1, extract(page), [kbh101], CheckSettings(), page=page)
    assert [(o["id"], o["status"]) for o in rec["offending"]] == [(target.id, "missing")]
    assert target.id not in rec["second_look"]
    assert rec["verdict"] == "mismatched"

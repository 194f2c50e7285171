"""Vector extraction and the shared segment assembly."""

from __future__ import annotations

import math

import numpy as np
import pytest

from conftest import A4, MM
from layoutcheck.elements import Element, assign_ids, normalise_angle, outline
from layoutcheck.extract.assemble import assemble, dominant_angle
from layoutcheck.extract.vector import extract_vector
from layoutcheck.sources import read_pages


def rotate(segs, deg):
    a = math.radians(deg)
    r = np.array([[math.cos(a), -math.sin(a)], [math.sin(a), math.cos(a)]])
    return np.hstack([segs[:, :2] @ r.T, segs[:, 2:] @ r.T])


def test_four_separate_strokes_are_one_box():
    segs = np.array([(100, 100, 200, 100), (200, 100, 200, 150), (200, 150, 100, 150), (100, 150, 100, 100)], float)
    els, skew = assemble(segs)
    assert [(e.kind, e.frame) for e in els] == [("box", (100.0, 100.0, 200.0, 150.0))]
    assert skew == 0.0


def test_table_cells_are_boxes():
    segs = [(50, y, 350, y) for y in (100, 130, 160)] + [(x, 100, x, 160) for x in (50, 150, 250, 350)]
    els, _ = assemble(np.array(segs, float))
    assert sorted(e.frame for e in els) == sorted(
        (x, y, x + 100.0, y + 30.0) for x in (50.0, 150.0, 250.0) for y in (100.0, 130.0))
    assert {e.kind for e in els} == {"box"}


def test_turned_grid_keeps_its_frames_and_angle():
    segs = np.array([(50, y, 350, y) for y in (100, 130)] + [(x, 100, x, 130) for x in (50, 350)], float)
    els, skew = assemble(rotate(segs, 2.0))
    assert skew == pytest.approx(2.0, abs=1e-6)
    (box,) = els
    assert box.size == pytest.approx((300.0, 30.0), abs=1e-6)
    assert box.angle == pytest.approx(2.0, abs=1e-6)
    # The outline's corners are the drawn corners turned by 2 degrees (checked with numpy).
    corners = rotate(np.array([[50, 100, 350, 100], [350, 130, 50, 130]], float), 2.0).reshape(4, 2)
    assert np.allclose(outline(box), corners, atol=1e-6)


def test_dominant_angle_against_numpy_mean_of_angles():
    rng = np.random.default_rng(3)
    ang = np.radians(rng.normal(-1.3, 0.05, 200))
    segs = np.column_stack([np.zeros(200), np.zeros(200), 100 * np.cos(ang), 100 * np.sin(ang)])
    # numpy's mean of the planted angles is the reference.
    assert dominant_angle(segs) == pytest.approx(float(np.degrees(ang).mean()), abs=0.01)


def test_small_square_is_a_checkbox_and_lone_rule_a_line():
    segs = np.array([(400, 400, 410, 400), (410, 400, 410, 410), (410, 410, 400, 410), (400, 410, 400, 400),
                     (50, 300, 500, 300), (60, 320, 60, 500)], float)
    els, _ = assemble(segs)
    assert sorted(e.kind for e in els) == ["checkbox", "hline", "vline"]


@pytest.mark.parametrize("angle, w, h, expect", [
    (0.0, 10, 2, (0.0, 10, 2)),
    (90.0, 10, 2, (0.0, 2, 10)),
    (92.0, 10, 2, (2.0, 2, 10)),
    (-88.0, 10, 2, (2.0, 2, 10)),
    (180.0, 10, 2, (0.0, 10, 2)),
    (45.0, 10, 2, (45.0, 10, 2)),
])
def test_normalise_angle(angle, w, h, expect):
    got = normalise_angle(angle, w, h)
    assert got == pytest.approx(expect, abs=1e-9)


def test_ids_in_reading_order():
    els = [Element("x", "box", (300, 100, 350, 120)), Element("y", "box", (10, 101, 50, 120)),
           Element("z", "label", (10, 10, 50, 20))]
    out = assign_ids(els)
    assert [(e.id, e.frame[0]) for e in out] == [("label-001", 10.0), ("box-001", 10.0), ("box-002", 300.0)]


def extracted(path):
    """Elements of every page; a vector page is only valid while its file is being read."""
    return [extract_vector(page) for page in read_pages(path)]


def test_page_with_rotate_and_cropbox(tmp_path):
    """/Rotate and a CropBox offset are handled at the edge: frames in visible page points."""
    from pypdf import PdfReader, PdfWriter
    from pypdf.generic import RectangleObject
    from reportlab.pdfgen import canvas

    src = tmp_path / "src.pdf"
    c = canvas.Canvas(str(src), pagesize=A4, invariant=1)
    c.rect(100, 700, 200, 50)  # bottom-left user space: x 100-300, y 700-750
    c.showPage()
    c.save()
    reader = PdfReader(str(src))
    w = PdfWriter()
    page = reader.pages[0]
    page.cropbox = RectangleObject([20, 30, 580, 830])
    w.add_page(page)
    p2 = reader.pages[0]
    w.add_page(p2)
    w.pages[1].rotate(90)
    out = tmp_path / "out.pdf"
    with open(out, "wb") as fh:
        w.write(fh)
    e0, e1 = extracted(out)
    (box,) = [e for e in e0.elements if e.kind == "box"]
    # Visible top-left is (20, 830) in PDF user space: x 100 -> 80, y 750 -> 830 - 750 = 80.
    assert box.frame == pytest.approx((80.0, 80.0, 280.0, 130.0), abs=0.01)
    assert (e0.width, e0.height) == pytest.approx((560.0, 800.0))
    (box1,) = [e for e in e1.elements if e.kind == "box"]
    assert (e1.width, e1.height) == pytest.approx((800.0, 560.0))
    # Turned a quarter clockwise for display: the box stands upright, 50 wide and 200 tall.
    assert box1.size == pytest.approx((50.0, 200.0), abs=0.01)


def test_labels_fields_and_marks(tmp_path):
    from reportlab.pdfgen import canvas

    path = tmp_path / "f.pdf"
    c = canvas.Canvas(str(path), pagesize=A4, invariant=1)
    c.setFont("Helvetica", 10)
    c.drawString(50, 800, "Name of the master")
    c.drawString(300, 800, "Date")
    c.rect(20, 20, 14, 14, fill=1, stroke=0)  # a 5 mm registration mark
    c.acroForm.textfield(name="master_name", x=50, y=760, width=200, height=18, borderWidth=0)
    c.showPage()
    c.save()
    (pe,) = extracted(path)
    labels = [(e.text, round(e.frame[0], 1)) for e in pe.elements if e.kind == "label"]
    assert labels == [("Name of the master", 50.0), ("Date", 300.0)]
    (field,) = [e for e in pe.elements if e.kind == "field"]
    assert field.text == "master_name"
    assert field.frame == pytest.approx((50.0, A4[1] - 778, 250.0, A4[1] - 760), abs=0.01)
    (mark,) = [e for e in pe.elements if e.kind == "mark"]
    assert mark.frame == pytest.approx((20.0, A4[1] - 34, 34.0, A4[1] - 20), abs=0.01)
    assert MM > 2.83  # 1 mm is 2.8346 pt (1 in = 25.4 mm = 72 pt)


def test_mediabox_origin_other_than_zero(tmp_path):
    from pypdf import PdfReader, PdfWriter
    from pypdf.generic import RectangleObject
    from reportlab.pdfgen import canvas

    src = tmp_path / "src.pdf"
    c = canvas.Canvas(str(src), pagesize=A4, invariant=1)
    c.rect(100, 700, 200, 50)
    c.showPage()
    c.save()
    reader = PdfReader(str(src))
    w = PdfWriter()
    page = reader.pages[0]
    page.mediabox = RectangleObject([50, 60, A4[0], A4[1]])
    w.add_page(page)
    out = tmp_path / "mb.pdf"
    with open(out, "wb") as fh:
        w.write(fh)
    (pe,) = extracted(out)
    # Visible top-left is (50, 841.89) in user space: x 100 -> 50, top = 841.89 - 750.
    (box,) = [e for e in pe.elements if e.kind == "box"]
    assert box.frame == pytest.approx((50.0, A4[1] - 750, 250.0, A4[1] - 700), abs=0.01)
    assert (pe.width, pe.height) == pytest.approx((A4[0] - 50, A4[1] - 60))

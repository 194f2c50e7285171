"""A test form drawn with reportlab, and its truth in template points (top-left origin, y down).

Imported by tests/test_raster.py and tests/test_simulate.py (not a pytest conftest: it only
defines helpers). The form belongs to the invented Kestrel Bay Harbour Board, form KBH-210.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from reportlab.lib.pagesizes import A4  # 595.28 x 841.89 points (ISO 216: 210 x 297 mm)
from reportlab.lib.units import mm
from reportlab.pdfgen import canvas


@dataclass
class FormTruth:
    """What was drawn, in points, top-left origin, y down."""

    size: tuple[float, float]
    boxes: list[tuple[float, float, float, float]] = field(default_factory=list)
    checkboxes: list[tuple[float, float, float, float]] = field(default_factory=list)
    hlines: list[tuple[float, float, float]] = field(default_factory=list)  # x0, y, x1
    vlines: list[tuple[float, float, float]] = field(default_factory=list)  # x, y0, y1
    marks: list[tuple[float, float, float, float]] = field(default_factory=list)
    labels: list[tuple[float, float, str]] = field(default_factory=list)  # x, baseline y, text


def make_form_pdf(path, marks: bool = True) -> FormTruth:
    """Draw form KBH-210 into ``path``: a grid of boxes, rules, labels and a checkbox row."""
    W, H = A4
    t = FormTruth(size=(float(W), float(H)))
    c = canvas.Canvas(str(path), pagesize=A4)

    def rect(x0, top, w, h, lw=0.8):
        c.setLineWidth(lw)
        c.rect(x0, H - top - h, w, h, stroke=1, fill=0)

    def text(x, y, s, size=9):
        c.setFont("Helvetica", size)
        c.drawString(x, H - y, s)
        t.labels.append((x, y, s))

    text(20 * mm, 22 * mm, "KESTREL BAY HARBOUR BOARD", 14)
    text(20 * mm, 29 * mm, "Form KBH-210  Berth application", 10)
    # A grid of boxes: 3 columns x 5 rows, each with a caption above.
    for r in range(5):
        for col in range(3):
            x0, top = (20 + col * 60) * mm, (45 + r * 20) * mm
            w, h = 52 * mm, 10 * mm
            text(x0, top - 1.5 * mm, f"Field {r * 3 + col + 1}", 7)
            rect(x0, top, w, h)
            t.boxes.append((x0, top, x0 + w, top + h))
    # Rules: two long horizontal rules and one vertical rule.
    c.setLineWidth(1.0)
    for y in (150 * mm, 200 * mm):
        c.line(20 * mm, H - y, 190 * mm, H - y)
        t.hlines.append((20 * mm, y, 190 * mm))
    c.line(105 * mm, H - 205 * mm, 105 * mm, H - 260 * mm)
    t.vlines.append((105 * mm, 205 * mm, 260 * mm))
    text(20 * mm, 148 * mm, "Signature of the master", 8)
    text(20 * mm, 165 * mm, "Vessel type:", 9)
    # A checkbox row.
    for k in range(5):
        x0, top = (50 + k * 25) * mm, 160 * mm
        rect(x0, top, 4 * mm, 4 * mm, 0.7)
        t.checkboxes.append((x0, top, x0 + 4 * mm, top + 4 * mm))
        text(x0 + 6 * mm, top + 3.5 * mm, ["Ferry", "Tug", "Yacht", "Barge", "Other"][k], 8)
    text(20 * mm, 215 * mm, "Remarks of the harbour office", 9)
    text(110 * mm, 215 * mm, "Berth", 9)
    if marks:
        c.setFillGray(0)
        for x, y in ((10 * mm, 10 * mm), (195 * mm, 10 * mm), (10 * mm, 282 * mm), (195 * mm, 282 * mm)):
            side = 5 * mm
            c.rect(x, H - y - side, side, side, stroke=0, fill=1)
            t.marks.append((x, y, x + side, y + side))
    c.showPage()
    c.save()
    return t

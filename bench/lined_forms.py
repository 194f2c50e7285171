"""Four more invented Kestrel Bay Harbour Board forms, drawn for the fill-in benchmark.

The bundled sample forms are boxes and tables; many forms people fill in by hand are written on
rules instead ("Name ______"), and are signed on a signature rule. These four (KBH-501 to
KBH-504) mix write-on rules of several lengths, a signature rule, boxes, checkboxes, a small
ruled table and registration marks, each in its own arrangement, so that the benchmark has at
least eight different form pages. Drawn with reportlab at run time (``invariant=1``: the same
bytes every time); coordinates here are mm from the top-left corner, y down.
"""

from __future__ import annotations

from pathlib import Path

from reportlab.lib.pagesizes import A4, letter
from reportlab.lib.units import mm
from reportlab.pdfgen import canvas as rl_canvas


class _Page:
    def __init__(self, c, size):
        self.c, (self.w, self.h) = c, size

    def y(self, v: float) -> float:
        return self.h - v * mm

    def text(self, x, base, s, font="Helvetica", size=8):
        self.c.setFont(font, size)
        self.c.drawString(x * mm, self.y(base), s)

    def rule(self, x0, x1, yy, width=0.6):
        self.c.setLineWidth(width)
        self.c.line(x0 * mm, self.y(yy), x1 * mm, self.y(yy))

    def box(self, x0, top, x1, bottom, width=0.8):
        self.c.setLineWidth(width)
        self.c.rect(x0 * mm, self.y(bottom), (x1 - x0) * mm, (bottom - top) * mm)

    def mark(self, x, top, size=5.0):
        self.c.rect(x * mm, self.y(top + size), size * mm, size * mm, stroke=0, fill=1)

    def write_on(self, x, yy, caption, length):
        """A caption followed by a rule to write on (the caption's baseline on the rule)."""
        self.text(x, yy - 0.6, caption)
        start = x + 2.0 + len(caption) * 1.55
        self.rule(start, start + length, yy)

    def checkbox(self, x, top, label, size=4.0):
        self.box(x, top, x + size, top + size)
        self.text(x + size + 2.0, top + size - 0.9, label)

    def signature(self, x, yy, length, caption="Signature"):
        self.rule(x, x + length, yy, 0.7)
        self.text(x, yy + 3.5, caption, size=7)

    def grid(self, xs, ys, width=0.6):
        for v in ys:
            self.rule(xs[0], xs[-1], v, width)
        self.c.setLineWidth(width)
        for u in xs:
            self.c.line(u * mm, self.y(ys[0]), u * mm, self.y(ys[-1]))

    def title(self, code, name, right=192.0):
        self.text(18, 24, "KESTREL BAY HARBOUR BOARD", "Helvetica-Bold", 14)
        self.text(18, 31.5, name, size=11)
        self.box(right - 42, 16, right, 33)
        self.text(right - 34, 26.5, f"Form {code}", "Helvetica-Bold", 10)


def kbh501(p: _Page) -> None:
    """Pilot request: write-on rules, a checkbox row, a signature rule."""
    for x, t in ((10, 10), (185, 10), (10, 272), (185, 272)):
        p.mark(x, t)
    p.title("KBH-501", "Pilot Request")
    p.rule(18, 192, 38, 1.2)
    p.text(18, 46, "1. Vessel", "Helvetica-Bold", 10)
    p.write_on(18, 56, "Vessel name", 80)
    p.write_on(120, 56, "Call sign", 40)
    p.write_on(18, 66, "Agent", 90)
    p.write_on(126, 66, "Draught (m)", 30)
    p.write_on(18, 76, "Berth or anchorage", 60)
    p.write_on(110, 76, "Date and time wanted", 40)
    p.rule(18, 192, 84, 0.8)
    p.text(18, 92, "2. Movement", "Helvetica-Bold", 10)
    for i, lab in enumerate(("Inbound", "Outbound", "Shift berth", "Tow assisted")):
        p.checkbox(22 + 42 * i, 97, lab)
    p.write_on(18, 114, "Remarks", 150)
    p.rule(38.8, 188.8, 124)
    p.rule(38.8, 188.8, 134)
    p.rule(18, 192, 144, 0.8)
    p.text(18, 152, "3. Request made by", "Helvetica-Bold", 10)
    p.write_on(18, 164, "Name", 70)
    p.write_on(112, 164, "Telephone", 50)
    p.signature(18, 186, 70)
    p.box(120, 176, 192, 190)
    p.text(121, 174.5, "For office use", size=7)
    p.rule(18, 192, 266, 0.5)
    p.text(18, 270.5, "KBH-501   Kestrel Bay Harbour Board (invented)", size=6.5)


def kbh502(p: _Page) -> None:
    """Mooring declaration (Letter): boxes and rules mixed, a table, two signature rules."""
    for x, t in ((10, 10), (196, 10), (10, 259)):
        p.mark(x, t)
    p.title("KBH-502", "Mooring Declaration", right=197.9)
    p.text(18, 44, "Vessel", "Helvetica-Bold", 9)
    p.box(18, 47, 110, 56)
    p.box(116, 47, 197.9, 56)
    p.write_on(18, 66, "Master", 70)
    p.write_on(118, 66, "Flag", 50)
    p.text(18, 76, "Lines used", "Helvetica-Bold", 9)
    p.grid([18, 50, 90, 130, 197.9], [80, 87, 95, 103, 111, 119])
    for i, lab in enumerate(("Bow", "Stern", "Spring", "Breast")):
        p.checkbox(22 + 44 * i, 126, lab)
    p.write_on(18, 144, "Weather on arrival", 120)
    p.write_on(18, 154, "Mooring party", 60)
    p.write_on(118, 154, "Boat", 50)
    p.rule(18, 197.9, 162, 1.0)
    p.signature(18, 190, 60, "Signature of master")
    p.signature(110, 190, 60, "Signature of mooring master")
    p.write_on(18, 204, "Date", 40)
    p.rule(18, 197.9, 255, 0.5)


def kbh503(p: _Page) -> None:
    """Waste notification: panels of checkboxes with quantity rules, a long signature rule."""
    for x, t in ((10, 10), (185, 10), (10, 272)):
        p.mark(x, t)
    p.title("KBH-503", "Ship Waste Notification")
    p.box(18, 40, 192, 110, 1.0)
    p.text(22, 47, "A. Waste to land", "Helvetica-Bold", 10)
    for i, lab in enumerate(("Oily waste", "Sewage", "Garbage", "Cargo residues", "Other")):
        top = 53 + 11 * i
        p.checkbox(24, top, lab)
        p.rule(80, 130, top + 4.0)
        p.text(132, top + 3.4, "m3", size=7)
        p.rule(146, 186, top + 4.0)
    p.box(18, 118, 192, 170, 1.0)
    p.text(22, 125, "B. Last delivery", "Helvetica-Bold", 10)
    p.write_on(24, 136, "Port", 60)
    p.write_on(110, 136, "Date", 45)
    p.write_on(24, 148, "Quantity delivered (m3)", 40)
    p.write_on(24, 160, "Receipt number", 56)
    p.box(130, 142, 186, 164)
    p.text(24, 182, "I confirm that this notification is accurate and complete.", size=8)
    p.signature(24, 204, 90, "Signature of master or agent")
    p.write_on(130, 204, "Date", 35)
    p.rule(18, 192, 266, 0.5)


def kbh504(p: _Page) -> None:
    """Visitor pass: short rules in two columns, a photo box, tick boxes in a grid."""
    for x, t in ((10, 10), (185, 10), (10, 272), (185, 272)):
        p.mark(x, t)
    p.title("KBH-504", "Quay Visitor Pass")
    p.box(150, 42, 190, 90)
    p.text(158, 67, "Photograph", size=7)
    for i, cap in enumerate(("Family name", "Given names", "Company", "Visiting vessel", "Host")):
        p.write_on(18, 50 + 10 * i, cap, 88)
    p.rule(18, 192, 100, 1.0)
    p.text(18, 108, "Areas", "Helvetica-Bold", 9)
    for r in range(2):
        for k, lab in enumerate(("North Quay", "South Quay", "Fish dock")):
            p.checkbox(22 + 55 * k, 113 + 9 * r, lab + (" (escorted)" if r else ""))
    p.write_on(18, 142, "Valid from", 36)
    p.write_on(96, 142, "to", 36)
    p.write_on(18, 154, "Vehicle registration", 44)
    p.signature(18, 178, 64, "Signature of visitor")
    p.signature(110, 178, 64, "Issued by")
    p.rule(18, 192, 266, 0.5)


FORMS = (("KBH-501_pilot_request.pdf", A4, kbh501), ("KBH-502_mooring.pdf", letter, kbh502),
         ("KBH-503_waste.pdf", A4, kbh503), ("KBH-504_visitor_pass.pdf", A4, kbh504))


def make_forms(out_dir: Path) -> list[Path]:
    """Write the four forms' blank PDFs into ``out_dir``; their paths, in order."""
    out = []
    for name, size, draw in FORMS:
        path = Path(out_dir) / name
        c = rl_canvas.Canvas(str(path), pagesize=size, invariant=1, pageCompression=1)
        c.setAuthor("Kestrel Bay Harbour Board (invented)")
        draw(_Page(c, size))
        c.showPage()
        c.save()
        out.append(path)
    return out

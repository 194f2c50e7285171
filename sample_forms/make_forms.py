"""Draw the demo forms of the Kestrel Bay Harbour Board (an invented port authority).

Run from the repository root::

    python sample_forms/make_forms.py

It writes blank reference PDFs to ``sample_forms/references/``, derived input PDFs with planted
changes to ``sample_forms/inputs/`` and the planted truth to ``sample_forms/expected.json``.
The output is deterministic: reportlab's ``invariant=1`` fixes dates and document ids, and every
random wobble of the filled-in ink comes from a seeded generator, so running it twice gives the
same bytes.

Drawing coordinates in this file are millimetres from the top-left corner of the form, y down,
converted to reportlab's bottom-left points only inside :class:`Sheet`. Each form is drawn by a
``draw_<form>(c, revision="B", omit=(), move=None, fill=None)`` function:

``omit``
    names of elements (or whole sections) to leave out;
``move``
    name -> ``(dx_mm, dy_mm)``, dy positive *downwards*; a section name moves all it holds;
``fill``
    name -> value written in as ink: a string for a box or table cell, ``True`` for a tick in a
    checkbox, ``"~"`` for a scribbled signature, and the key ``"stamp"`` for a rotated
    "RECEIVED" stamp, given as ``(cx_mm, cy_mm, angle_deg, second_line)``.
"""

from __future__ import annotations

import contextlib
import json
import math
import random
from pathlib import Path

from reportlab.lib.pagesizes import A4, letter
from reportlab.lib.units import mm
from reportlab.pdfgen import canvas as rl_canvas

HERE = Path(__file__).resolve().parent
REFS = HERE / "references"
INPUTS = HERE / "inputs"

INK = (0.08, 0.12, 0.45)  # blue-black ballpoint
STAMP_INK = (0.62, 0.08, 0.10)
HAND_FONT = "Times-Italic"  # stands in for handwriting: not used by any printed form


def _seed(name: str) -> int:
    """A stable seed from a name (``hash`` of a str changes between runs)."""
    return sum((i + 1) * ord(ch) for i, ch in enumerate(name)) % 2**31


class Sheet:
    """One page being drawn: mm in, y down, with omit / move / fill applied by element name.

    ``frames`` records the frame of every named box, checkbox and cell drawn, in PDF points
    with the top-left origin and y down, *before* any page-level transformation.
    """

    def __init__(self, c, page_size, omit=(), move=None, fill=None, fields=False, prefix=""):
        self.c = c
        self.w, self.h = page_size
        self.omit = set(omit or ())
        self.move = dict(move or {})
        self.fill = dict(fill or {})
        self.fields = fields
        self.prefix = prefix
        self.groups: list[str] = []
        self.frames: dict[str, list[float]] = {}

    # -- placement -------------------------------------------------------------------------
    @contextlib.contextmanager
    def section(self, name):
        self.groups.append(name)
        try:
            yield not self._omitted(None)
        finally:
            self.groups.pop()

    def _omitted(self, name):
        return name in self.omit or any(g in self.omit for g in self.groups)

    def _offset(self, name):
        dx = dy = 0.0
        for key in [*self.groups, name]:
            if key in self.move:
                dx += self.move[key][0]
                dy += self.move[key][1]
        return dx, dy

    def X(self, x_mm):
        return x_mm * mm

    def Y(self, y_mm):
        return self.h - y_mm * mm

    def _record(self, name, x0, top, x1, bottom):
        self.frames[self.prefix + name] = [round(v * mm, 3) for v in (x0, top, x1, bottom)]

    # -- printed elements ------------------------------------------------------------------
    def text(self, name, x, baseline, s, font="Helvetica", size=8, align="left"):
        if self._omitted(name):
            return
        dx, dy = self._offset(name)
        self.c.setFont(font, size)
        draw = {"left": self.c.drawString, "right": self.c.drawRightString,
                "centre": self.c.drawCentredString}[align]
        draw(self.X(x + dx), self.Y(baseline + dy), s)

    def rule(self, name, y, x0=18.0, x1=192.0, width=1.0):
        if self._omitted(name):
            return
        dx, dy = self._offset(name)
        self.c.setLineWidth(width)
        self.c.line(self.X(x0 + dx), self.Y(y + dy), self.X(x1 + dx), self.Y(y + dy))

    def mark(self, name, x, top, size=5.0):
        """A solid registration mark (filled square)."""
        if self._omitted(name):
            return
        dx, dy = self._offset(name)
        self.c.rect(self.X(x + dx), self.Y(top + dy + size), size * mm, size * mm, stroke=0, fill=1)

    def panel(self, name, x0, top, x1, bottom, width=1.0):
        """A bordered panel that encloses a group of elements."""
        if self._omitted(name):
            return
        dx, dy = self._offset(name)
        self.c.setLineWidth(width)
        self.c.rect(self.X(x0 + dx), self.Y(bottom + dy), (x1 - x0) * mm, (bottom - top) * mm)

    def box(self, name, x0, top, x1, bottom, caption=None, caption_side="above", field=None,
            width=0.8):
        """A box for an entry, its caption above (or to the left), and optionally a form field."""
        if self._omitted(name):
            return
        dx, dy = self._offset(name)
        x0, x1, top, bottom = x0 + dx, x1 + dx, top + dy, bottom + dy
        c = self.c
        c.setLineWidth(width)
        c.rect(self.X(x0), self.Y(bottom), (x1 - x0) * mm, (bottom - top) * mm)
        if caption:
            c.setFont("Helvetica", 7)
            if caption_side == "above":
                c.drawString(self.X(x0), self.Y(top - 1.6), caption)
            else:  # left, right-aligned 2 mm before the box, on its middle
                c.drawRightString(self.X(x0 - 2.0), self.Y((top + bottom) / 2 + 1.0), caption)
        self._record(name, x0, top, x1, bottom)
        if field and self.fields:
            c.acroForm.textfield(
                name=field, tooltip=caption or field, value="",
                x=self.X(x0) + 1.5, y=self.Y(bottom) + 1.5,
                width=(x1 - x0) * mm - 3.0, height=(bottom - top) * mm - 3.0,
                borderWidth=0, borderColor=None, fillColor=None, textColor=(0, 0, 0),
                fontName="Helvetica", fontSize=9, relative=True,
            )
        self._ink_text(name, x0, top, x1, bottom)

    def checkbox(self, name, x, top, label=None, size=4.0, width=0.8):
        """A square checkbox with its label 2 mm to the right."""
        if self._omitted(name):
            return
        dx, dy = self._offset(name)
        x, top = x + dx, top + dy
        c = self.c
        c.setLineWidth(width)
        c.rect(self.X(x), self.Y(top + size), size * mm, size * mm)
        if label:
            c.setFont("Helvetica", 8)
            c.drawString(self.X(x + size + 2.0), self.Y(top + size - 0.9), label)
        self._record(name, x, top, x + size, top + size)
        if self.fill.get(name) is True:
            self._tick(name, x, top, size)

    def grid(self, name, xs, ys, headers, row_names, col_names, width=0.7, header_font=7):
        """A table drawn with full ruling lines, so its cells are formed by crossing rules.

        ``xs`` and ``ys`` are the column and row edges in mm; the first row holds ``headers``.
        Cell ``r``, ``c`` of the body is named ``f"{name}_{row_names[r]}_{col_names[c]}"``.
        """
        if self._omitted(name):
            return
        dx, dy = self._offset(name)
        xs = [x + dx for x in xs]
        ys = [y + dy for y in ys]
        c = self.c
        c.setLineWidth(width)
        for y in ys:
            c.line(self.X(xs[0]), self.Y(y), self.X(xs[-1]), self.Y(y))
        for x in xs:
            c.line(self.X(x), self.Y(ys[0]), self.X(x), self.Y(ys[-1]))
        c.setFont("Helvetica-Bold", header_font)
        for i, head in enumerate(headers):
            c.drawString(self.X(xs[i] + 1.5), self.Y((ys[0] + ys[1]) / 2 + 0.9), head)
        for r, rname in enumerate(row_names):
            for k, cname in enumerate(col_names):
                cell = f"{name}_{rname}_{cname}"
                x0, x1, top, bottom = xs[k], xs[k + 1], ys[r + 1], ys[r + 2]
                self._record(cell, x0, top, x1, bottom)
                self._ink_text(cell, x0, top, x1, bottom)

    # -- filled-in ink ---------------------------------------------------------------------
    def _ink_text(self, name, x0, top, x1, bottom):
        value = self.fill.get(name)
        if value is None or value is True:
            return
        if value == "~":
            self._signature(name, x0, top, x1, bottom)
            return
        rng = random.Random(_seed(name))
        c = self.c
        c.saveState()
        c.setFillColorRGB(*INK)
        size = min(11.0, (bottom - top) * mm * 0.62)
        c.setFont(HAND_FONT, size)
        bx = x0 + 2.0 + rng.uniform(-0.4, 0.6)
        by = min(bottom, top + 9.0) - min(2.4, (bottom - top) * 0.28) + rng.uniform(-0.4, 0.3)
        c.translate(self.X(bx), self.Y(by))
        c.rotate(rng.uniform(-1.5, 1.5))
        c.drawString(0, 0, str(value))
        c.restoreState()

    def _tick(self, name, x, top, size):
        rng = random.Random(_seed(name))
        c = self.c
        c.saveState()
        c.setStrokeColorRGB(*INK)
        c.setLineWidth(1.1)
        c.setLineCap(1)
        j = lambda: rng.uniform(-0.35, 0.35)  # noqa: E731
        c.line(self.X(x + 0.8 + j()), self.Y(top + 0.8 + j()),
               self.X(x + size - 0.8 + j()), self.Y(top + size - 0.7 + j()))
        c.line(self.X(x + size - 0.7 + j()), self.Y(top + 0.9 + j()),
               self.X(x + 0.9 + j()), self.Y(top + size - 0.8 + j()))
        c.restoreState()

    def _signature(self, name, x0, top, x1, bottom):
        """A scribbled signature: one smooth, wandering polyline inside the box."""
        rng = random.Random(_seed(name))
        c = self.c
        c.saveState()
        c.setStrokeColorRGB(*INK)
        c.setLineWidth(0.9)
        c.setLineJoin(1)
        c.setLineCap(1)
        mid = (top + bottom) / 2 + 1.0
        amp = (bottom - top) * 0.28
        start, stop = x0 + 6.0, min(x1 - 6.0, x0 + 70.0)
        path = c.beginPath()
        n = 90
        phase = rng.uniform(0, 3)
        for i in range(n + 1):
            t = i / n
            x = start + (stop - start) * t + 2.2 * math.sin(t * 31 + phase)
            y = mid - amp * math.sin(t * 17.0 + phase) * (0.6 + 0.4 * math.cos(t * 5)) \
                + rng.uniform(-0.25, 0.25)
            (path.moveTo if i == 0 else path.lineTo)(self.X(x), self.Y(y))
        c.drawPath(path, stroke=1, fill=0)
        c.line(self.X(start - 2), self.Y(mid + amp + 1.2), self.X(stop - 10), self.Y(mid + amp + 0.6))
        c.restoreState()

    def stamp(self):
        spec = self.fill.get("stamp")
        if not spec:
            return
        cx, cy, angle, second = spec
        c = self.c
        c.saveState()
        c.setStrokeColorRGB(*STAMP_INK)
        c.setFillColorRGB(*STAMP_INK)
        c.translate(self.X(cx), self.Y(cy))
        c.rotate(angle)
        c.setLineWidth(1.2)
        c.rect(-22 * mm, -8 * mm, 44 * mm, 16 * mm)
        c.setLineWidth(0.5)
        c.rect(-20.5 * mm, -6.5 * mm, 41 * mm, 13 * mm)
        c.setFont("Helvetica-Bold", 13)
        c.drawCentredString(0, 0.2 * mm, "RECEIVED")
        c.setFont("Helvetica", 7)
        c.drawCentredString(0, -4.4 * mm, second)
        c.restoreState()


# ------------------------------------------------------------------------------------------
# Shared page furniture
# ------------------------------------------------------------------------------------------

def _marks(s: Sheet, corners=("tl", "tr", "bl", "br")):
    w_mm, h_mm = s.w / mm, s.h / mm
    pos = {"tl": (10.0, 10.0), "tr": (w_mm - 15.0, 10.0),
           "bl": (10.0, h_mm - 15.0), "br": (w_mm - 15.0, h_mm - 15.0)}
    for k in corners:
        s.mark(f"mark_{k}", *pos[k])


def _title(s: Sheet, code, title, revision, page_note=None, right=192.0):
    s.text("board_name", 18, 24, "KESTREL BAY HARBOUR BOARD", "Helvetica-Bold", 14)
    s.text("form_title", 18, 31.5, title, "Helvetica", 11)
    s.box("code_block", right - 42, 16, right, 33)
    s.text("form_code", right - 21, 22.5, f"Form {code}", "Helvetica-Bold", 10, "centre")
    s.text("revision", right - 21, 28.5, f"Rev. {revision}", "Helvetica", 8, "centre")
    if page_note:
        s.text("page_note", right - 21, 37.5, page_note, "Helvetica", 7, "centre")


def _footer(s: Sheet, code, revision, page="1 of 1", right=192.0, y=270.0):
    s.rule("footer_rule", y, 18, right, 0.5)
    s.text("footer_left", 18, y + 4.5,
           "Kestrel Bay Harbour Board - Harbour Office, North Quay", "Helvetica", 6.5)
    s.text("footer_right", right, y + 4.5, f"{code} Rev. {revision}   Page {page}",
           "Helvetica", 6.5, "right")


# ------------------------------------------------------------------------------------------
# KBH-101 Vessel arrival notice (A4)
# ------------------------------------------------------------------------------------------

def draw_kbh101(c, revision="B", omit=(), move=None, fill=None, fields=True):
    """KBH-101 Vessel arrival notice, A4 portrait, one page. Returns the :class:`Sheet`."""
    s = Sheet(c, A4, omit, move, fill, fields)
    _marks(s)
    _title(s, "KBH-101", "Vessel Arrival Notice", revision)
    s.rule("rule_title", 38, width=1.2)

    with s.section("section_vessel"):
        s.text("heading_vessel", 18, 45.5, "1. Vessel details", "Helvetica-Bold", 10)
        s.box("vessel_name", 18, 52, 110, 61, "Vessel name", field="vessel_name")
        s.box("call_sign", 116, 52, 150, 61, "Call sign", field="call_sign")
        s.box("flag_state", 156, 52, 192, 61, "Flag state", field="flag_state")
        s.box("imo_number", 18, 67, 62, 76, "IMO number", field="imo_number")
        s.box("gross_tonnage", 68, 67, 104, 76, "Gross tonnage", field="gross_tonnage")
        s.box("length_overall", 124, 67, 158, 76, "Length overall (m)")
        s.box("draught", 164, 67, 192, 76, "Draught (m)")
        s.box("owner", 18, 82, 120, 91, "Owner / operator")
        s.box("port_of_registry", 126, 82, 192, 91, "Port of registry")
    s.rule("rule_vessel", 97)

    with s.section("section_voyage"):
        s.text("heading_voyage", 18, 104.5, "2. Voyage", "Helvetica-Bold", 10)
        s.box("last_port", 18, 111, 80, 120, "Last port of call")
        s.box("next_port", 86, 111, 148, 120, "Next port of call")
        s.box("eta", 154, 111, 192, 120, "ETA (date, time)")
        s.text("on_board_label", 18, 130, "On board:", "Helvetica", 8)
        s.checkbox("cb_passengers", 38, 126.8, "Passengers")
        s.checkbox("cb_dangerous_goods", 74, 126.8, "Dangerous goods")
        s.checkbox("cb_livestock", 116, 126.8, "Livestock")
        s.checkbox("cb_waste", 150, 126.8, "Waste to land")
        s.text("ports_caption", 18, 139.5, "Previous ports of call (last three)", "Helvetica", 7)
        s.grid("ports", [18, 90, 130, 192], [141, 148, 156, 164, 172],
               ["Port", "Date", "Agent"], ["r1", "r2", "r3"], ["port", "date", "agent"])
    s.rule("rule_voyage", 179)

    with s.section("section_declaration"):
        s.text("heading_declaration", 18, 186.5, "3. Declaration", "Helvetica-Bold", 10)
        s.text("declaration_text_1", 18, 193,
               "I declare that the particulars given on this notice are correct and complete,",
               "Helvetica", 8)
        s.text("declaration_text_2", 18, 197,
               "and that the vessel will observe the byelaws of the Harbour Board while in port.",
               "Helvetica", 8)
        s.box("master_name", 18, 204, 110, 213, "Name of master", field="master_name")
        s.box("declaration_date", 116, 204, 150, 213, "Date")
        s.box("declaration_place", 156, 204, 192, 213, "Place")
        s.box("signature", 18, 220, 110, 238, "Signature of master")
    _footer(s, "KBH-101", revision)
    s.stamp()
    return s


FILL_101 = {
    "vessel_name": "MV Tern Ridge",
    "call_sign": "K7QB",
    "flag_state": "Kestrelia",
    "imo_number": "9400127",
    "gross_tonnage": "6 240",
    "length_overall": "118.5",
    "draught": "7.2",
    "owner": "Northsound Coastal Lines",
    "port_of_registry": "Gullhaven",
    "last_port": "Port Ashby",
    "next_port": "Kestrel Bay",
    "eta": "14/03  06:30",
    "cb_passengers": True,
    "cb_dangerous_goods": True,
    "ports_r1_port": "Port Ashby",
    "ports_r1_date": "11/03",
    "ports_r1_agent": "Merrow & Hale",
    "ports_r2_port": "Skarholm",
    "ports_r2_date": "06/03",
    "ports_r2_agent": "Skar Agency",
    "ports_r3_port": "Gullhaven",
    "ports_r3_date": "28/02",
    "master_name": "R. Okonkwo-Baird",
    "declaration_date": "13/03",
    "declaration_place": "At sea",
    "signature": "~",
    "stamp": (158.0, 229.0, 7.0, "HARBOUR OFFICE  14 MAR"),
}


# ------------------------------------------------------------------------------------------
# KBH-205 Cargo manifest (US Letter)
# ------------------------------------------------------------------------------------------

def draw_kbh205(c, revision="B", omit=(), move=None, fill=None, fields=False):
    """KBH-205 Cargo manifest, US Letter portrait, one page. Returns the :class:`Sheet`."""
    s = Sheet(c, letter, omit, move, fill, fields)
    right = 197.9  # 18 mm from the right edge of a 215.9 mm page
    _marks(s, ("tl", "tr", "bl"))  # three marks: the missing one shows which way is up
    _title(s, "KBH-205", "Cargo Manifest", revision, right=right)

    with s.section("section_header"):
        # header block: one bordered panel split into six entry cells by crossing rules
        xs = [18, 78, 138, right]
        ys = [40, 52, 64]
        s.panel("header_panel", xs[0], ys[0], xs[-1], ys[-1])
        heads = [["Vessel", "Voyage no.", "Sheet no."],
                 ["Port of loading", "Port of discharge", "Date of sailing"]]
        names = [["vessel", "voyage_no", "sheet_no"],
                 ["port_loading", "port_discharge", "sailing_date"]]
        if not s._omitted("header_panel"):
            s.c.setLineWidth(0.7)
            s.c.line(s.X(xs[0]), s.Y(ys[1]), s.X(xs[-1]), s.Y(ys[1]))
            for x in xs[1:-1]:
                s.c.line(s.X(x), s.Y(ys[0]), s.X(x), s.Y(ys[-1]))
            for r in range(2):
                for k in range(3):
                    s.text(f"hdr_{names[r][k]}_caption", xs[k] + 1.5, ys[r] + 3.2, heads[r][k],
                           "Helvetica", 6.5)
                    s._record(f"hdr_{names[r][k]}", xs[k], ys[r], xs[k + 1], ys[r + 1])
                    s._ink_text(f"hdr_{names[r][k]}", xs[k], ys[r], xs[k + 1], ys[r + 1])

    with s.section("section_cargo_type"):
        s.text("cargo_type_label", 18, 73.5, "Cargo type:", "Helvetica-Bold", 8)
        s.checkbox("cb_containerised", 40, 70.3, "Containerised")
        s.checkbox("cb_break_bulk", 78, 70.3, "Break bulk")
        s.checkbox("cb_bulk_liquid", 110, 70.3, "Bulk liquid")
        s.checkbox("cb_reefer", 144, 70.3, "Refrigerated")
        s.checkbox("cb_transhipment", 172, 70.3, "Tranship")

    with s.section("section_goods"):
        xs = [18, 30, 70, 92, 150, 175, right]
        ys = [80, 88] + [88 + 9 * i for i in range(1, 15)]
        s.grid("goods", xs, ys,
               ["Item", "Marks and numbers", "Packages", "Description of goods",
                "Weight (kg)", "Class"],
               [f"r{i:02d}" for i in range(1, 15)],
               ["item", "marks", "packages", "description", "weight", "class"], width=0.6)

    with s.section("section_totals"):
        top = 222
        s.box("total_packages", 62, top, 98, top + 9, "Total packages", caption_side="left")
        s.box("total_weight", 146, top, right, top + 9, "Total weight (kg)", caption_side="left")
        s.box("prepared_by", 18, 240, 98, 249, "Prepared by (name, agency)")
        s.box("signature", 104, 240, 160, 256, "Signature")
        s.box("manifest_date", 166, 240, right, 249, "Date")
    _footer(s, "KBH-205", revision, right=right, y=263.0)
    s.stamp()
    return s


FILL_205 = {
    "hdr_vessel": "MV Tern Ridge",
    "hdr_voyage_no": "TR-0311",
    "hdr_sheet_no": "1 / 1",
    "hdr_port_loading": "Port Ashby",
    "hdr_port_discharge": "Kestrel Bay",
    "hdr_sailing_date": "11/03",
    "cb_containerised": True,
    "cb_reefer": True,
    "goods_r01_item": "1", "goods_r01_marks": "TRLU 402118", "goods_r01_packages": "1",
    "goods_r01_description": "Machine parts, crated", "goods_r01_weight": "18 400",
    "goods_r02_item": "2", "goods_r02_marks": "TRLU 402270", "goods_r02_packages": "1",
    "goods_r02_description": "Frozen fish (reefer)", "goods_r02_weight": "21 050",
    "goods_r03_item": "3", "goods_r03_marks": "KB/17/03", "goods_r03_packages": "40",
    "goods_r03_description": "Paint in drums", "goods_r03_weight": "8 200",
    "goods_r03_class": "3",
    "goods_r04_item": "4", "goods_r04_marks": "KB/17/04", "goods_r04_packages": "12",
    "goods_r04_description": "Timber, bundled", "goods_r04_weight": "9 600",
    "total_packages": "54",
    "total_weight": "57 250",
    "prepared_by": "J. Merrow, Merrow & Hale",
    "signature": "~",
    "manifest_date": "11/03",
    "stamp": (124.0, 192.0, -6.0, "CUSTOMS SHED 2  14 MAR"),
}


# ------------------------------------------------------------------------------------------
# KBH-310 Berth application (A4, two pages)
# ------------------------------------------------------------------------------------------

def draw_kbh310_page1(c, revision="B", omit=(), move=None, fill=None, fields=False):
    """KBH-310 Berth application, page 1 of 2: applicant and berth requested."""
    s = Sheet(c, A4, omit, move, fill, fields, prefix="p1:")
    _marks(s)
    _title(s, "KBH-310", "Application for a Berth", revision, page_note="Page 1 of 2")

    with s.section("section_applicant"):
        s.panel("applicant_panel", 18, 44, 192, 106)
        s.text("heading_applicant", 22, 50.5, "A. Applicant", "Helvetica-Bold", 10)
        s.box("applicant_name", 22, 57, 120, 66, "Name of applicant / agency")
        s.box("applicant_ref", 126, 57, 188, 66, "Agency reference")
        s.box("address", 22, 72, 188, 81, "Postal address")
        s.box("telephone", 22, 87, 80, 96, "Telephone")
        s.box("email", 86, 87, 188, 96, "E-mail")

    with s.section("section_berth"):
        s.panel("berth_panel", 18, 112, 192, 196)
        s.text("heading_berth", 22, 118.5, "B. Berth requested", "Helvetica-Bold", 10)
        s.box("vessel_name", 22, 125, 110, 134, "Vessel name")
        s.box("loa", 116, 125, 150, 134, "LOA (m)")
        s.box("max_draught", 156, 125, 188, 134, "Max. draught (m)")
        s.box("arrival", 22, 140, 80, 149, "Arrival (date, time)")
        s.box("departure", 86, 140, 144, 149, "Departure (date, time)")
        s.box("berth_pref", 150, 140, 188, 149, "Berth preferred")
        s.text("mooring_label", 22, 158, "Mooring:", "Helvetica", 8)
        s.checkbox("cb_alongside", 40, 154.8, "Alongside")
        s.checkbox("cb_anchorage", 72, 154.8, "Anchorage")
        s.checkbox("cb_buoy", 104, 154.8, "Buoy")
        s.checkbox("cb_port_side", 130, 154.8, "Port side to")
        s.box("purpose", 22, 166, 188, 190, "Purpose of call and cargo operations")

    with s.section("section_note"):
        s.text("note_1", 18, 205, "Applications must reach the Harbour Office at least 48 hours"
               " before arrival.", "Helvetica", 8)
        s.text("note_2", 18, 209.5, "Berths are allotted in order of arrival unless the Harbour"
               " Master directs otherwise.", "Helvetica", 8)
        s.box("office_received", 18, 222, 80, 231, "For office use: received")
        s.box("office_berth", 86, 222, 130, 231, "Berth allotted")
        s.box("office_initials", 136, 222, 160, 231, "Initials")
    _footer(s, "KBH-310", revision, page="1 of 2")
    s.stamp()
    return s


def draw_kbh310_page2(c, revision="B", omit=(), move=None, fill=None, fields=False):
    """KBH-310 Berth application, page 2 of 2: services requested and declaration."""
    s = Sheet(c, A4, omit, move, fill, fields, prefix="p2:")
    _marks(s)
    _title(s, "KBH-310", "Application for a Berth", revision, page_note="Page 2 of 2")

    with s.section("section_services"):
        s.panel("services_panel", 18, 44, 192, 150)
        s.text("heading_services", 22, 50.5, "C. Services requested", "Helvetica-Bold", 10)
        s.text("services_hint", 22, 56, "Tick each service required and give the quantity or"
               " time wanted.", "Helvetica", 7)
        services = [("fresh_water", "Fresh water"), ("bunkers", "Bunkers"),
                    ("shore_power", "Shore power"), ("waste", "Waste reception"),
                    ("pilotage", "Pilotage"), ("towage", "Towage"),
                    ("line_handling", "Line handling"), ("crane", "Mobile crane"),
                    ("security", "Security watch"), ("gangway", "Shore gangway")]
        for i, (key, label) in enumerate(services):
            col, row = divmod(i, 5)
            x = 22 + col * 86
            top = 62 + row * 17
            s.checkbox(f"cb_{key}", x, top + 2.5, label)
            s.box(f"qty_{key}", x + 38, top, x + 80, top + 9)
        s.text("qty_caption", 60, 60.5, "Quantity / time", "Helvetica", 6.5)
        s.text("qty_caption_2", 146, 60.5, "Quantity / time", "Helvetica", 6.5)

    with s.section("section_declaration"):
        s.panel("declaration_panel", 18, 158, 192, 240)
        s.text("heading_declaration", 22, 164.5, "D. Declaration", "Helvetica-Bold", 10)
        s.text("declaration_text_1", 22, 171, "I apply for a berth as set out above and undertake"
               " to pay the dues and charges of the", "Helvetica", 8)
        s.text("declaration_text_2", 22, 175.5, "Harbour Board for the services provided.",
               "Helvetica", 8)
        s.box("declarant_name", 22, 183, 120, 192, "Name")
        s.box("declarant_capacity", 126, 183, 188, 192, "Capacity (master, agent)")
        s.box("signature", 22, 199, 120, 217, "Signature")
        s.box("declaration_date", 126, 199, 188, 208, "Date")
        s.checkbox("cb_copy_by_email", 126, 214, "Send a copy by e-mail")
    _footer(s, "KBH-310", revision, page="2 of 2")
    s.stamp()
    return s


def draw_kbh310(c, revision="B", omit=(), move=None, fill=None, fields=False,
                place=contextlib.nullcontext):
    """Both pages of KBH-310, each ended with ``showPage``.

    ``omit``/``move``/``fill`` keys may carry a ``p1:``/``p2:`` prefix to aim at one page only;
    ``place`` is a context manager factory wrapped round each page (the page-level transform).
    Returns the two :class:`Sheet` objects.
    """
    sheets = []
    for page, draw in ((1, draw_kbh310_page1), (2, draw_kbh310_page2)):
        pre = f"p{page}:"
        pick = lambda d: {k[len(pre):] if k.startswith(pre) else k: v  # noqa: E731
                          for k, v in (d or {}).items()
                          if not (k[:1] == "p" and k[2:3] == ":" and not k.startswith(pre))}
        om = {k[len(pre):] if k.startswith(pre) else k for k in omit
              if not (k[:1] == "p" and k[2:3] == ":" and not k.startswith(pre))}
        with place():
            sheets.append(draw(c, revision, om, pick(move), pick(fill), fields))
        c.showPage()
    return sheets


FILL_310 = {
    "p1:applicant_name": "Merrow & Hale Shipping Agency",
    "p1:applicant_ref": "MH/2291",
    "p1:address": "4 Chandlers Row, Kestrel Bay",
    "p1:telephone": "0417 22 0931",
    "p1:email": "ops@merrowhale.example",
    "p1:vessel_name": "MV Tern Ridge",
    "p1:loa": "118.5",
    "p1:max_draught": "7.2",
    "p1:arrival": "14/03 06:30",
    "p1:departure": "16/03 18:00",
    "p1:berth_pref": "North Quay 3",
    "p1:cb_alongside": True,
    "p1:cb_port_side": True,
    "p1:purpose": "Discharge 4 containers and 52 packages; load timber",
    "p2:cb_fresh_water": True,
    "p2:qty_fresh_water": "60 t",
    "p2:cb_pilotage": True,
    "p2:qty_pilotage": "in + out",
    "p2:cb_waste": True,
    "p2:qty_waste": "3 m3",
    "p2:cb_line_handling": True,
    "p2:qty_line_handling": "4 men",
    "p2:declarant_name": "J. Merrow",
    "p2:declarant_capacity": "Agent",
    "p2:signature": "~",
    "p2:declaration_date": "12/03",
    "p2:cb_copy_by_email": True,
    "p2:stamp": (150.0, 254.0, 5.0, "HARBOUR OFFICE  12 MAR"),
}


# ------------------------------------------------------------------------------------------
# KBH-412 Crew list (A4)
# ------------------------------------------------------------------------------------------

def draw_kbh412(c, revision="B", omit=(), move=None, fill=None, fields=False):
    """KBH-412 Crew list, A4 portrait, one page: a large table. Returns the :class:`Sheet`."""
    s = Sheet(c, A4, omit, move, fill, fields)
    _marks(s, ("tl", "tr"))
    _title(s, "KBH-412", "Crew List", revision)

    with s.section("section_header"):
        s.box("vessel_name", 40, 42, 110, 50, "Vessel", caption_side="left")
        s.box("port", 130, 42, 192, 50, "Port", caption_side="left")
        s.box("list_date", 40, 54, 80, 62, "Date", caption_side="left")
        s.checkbox("cb_arrival", 96, 56, "Arrival")
        s.checkbox("cb_departure", 126, 56, "Departure")
        s.checkbox("cb_crew_change", 160, 56, "Crew change")

    with s.section("section_crew"):
        xs = [18, 28, 64, 98, 124, 150, 170, 192]
        ys = [68, 76] + [76 + 8 * i for i in range(1, 23)]
        s.grid("crew", xs, ys,
               ["No.", "Family name", "Given names", "Rank", "Nationality", "Born", "Doc. no."],
               [f"r{i:02d}" for i in range(1, 23)],
               ["no", "family", "given", "rank", "nationality", "born", "doc"], width=0.5,
               header_font=6.5)

    with s.section("section_master"):
        s.box("master_signature", 110, 258, 192, 266, "Master's signature", caption_side="left")
    _footer(s, "KBH-412", revision, y=272.0)
    s.stamp()
    return s


# ------------------------------------------------------------------------------------------
# Writing the files
# ------------------------------------------------------------------------------------------



def _canvas(path: Path, page_size, title):
    c = rl_canvas.Canvas(str(path), pagesize=page_size, invariant=1, pageCompression=1)
    c.setTitle(title)
    c.setAuthor("Kestrel Bay Harbour Board (invented)")
    c.setCreator("layoutcheck sample_forms/make_forms.py")
    return c


def _write(path: Path, form_size, page_size, draw, *, rotate_deg=0.0, scale=1.0,
           shift_mm=(0.0, 0.0), fit=False, multipage=False, **kw):
    """Draw a form onto a page, optionally turned, scaled or shifted as a whole.

    The transformation maps the form's centre to the page centre plus ``shift_mm`` (x right,
    y down), turns by ``rotate_deg`` counterclockwise as seen and scales by ``scale`` (or, with
    ``fit``, by the largest factor that fits the form on the page).
    """
    fw, fh = form_size
    pw, ph = page_size
    if fit:
        scale = min(pw / fw, ph / fh)
    c = _canvas(path, page_size, path.stem)

    @contextlib.contextmanager
    def placed():
        c.saveState()
        c.translate(pw / 2 + shift_mm[0] * mm, ph / 2 - shift_mm[1] * mm)
        if rotate_deg:
            c.rotate(rotate_deg)
        if scale != 1.0:
            c.scale(scale, scale)
        c.translate(-fw / 2, -fh / 2)
        try:
            yield
        finally:
            c.restoreState()

    if multipage:
        result = draw(c, place=placed, **kw)
    else:
        with placed():
            result = draw(c, **kw)
        c.showPage()
    c.save()
    return scale, result


def _pose(form_size, page_size, rotate_deg, scale, shift_mm):
    """Planted pose as a y-down affine ``[a, b, c, d, e, f]``: ``x' = a x + c y + e``,
    ``y' = b x + d y + f`` from reference points (pt, top-left origin) to input points."""
    fw, fh = form_size
    pw, ph = page_size
    t = math.radians(rotate_deg)
    # counterclockwise as seen is a negative angle in y-down coordinates
    cos, sin = math.cos(t), math.sin(t)
    a, b, c_, d = scale * cos, -scale * sin, scale * sin, scale * cos
    cx, cy = fw / 2, fh / 2
    e = pw / 2 + shift_mm[0] * mm - (a * cx + c_ * cy)
    f = ph / 2 + shift_mm[1] * mm - (b * cx + d * cy)
    return [round(v, 6) for v in (a, b, c_, d, e, f)]


def main() -> None:
    REFS.mkdir(parents=True, exist_ok=True)
    INPUTS.mkdir(parents=True, exist_ok=True)

    # -- references ------------------------------------------------------------------------
    _, ref101 = _write(REFS / "KBH-101_vessel_arrival.pdf", A4, A4, draw_kbh101)
    _write(REFS / "KBH-205_cargo_manifest.pdf", letter, letter, draw_kbh205)
    _write(REFS / "KBH-310_berth_application.pdf", A4, A4, draw_kbh310,
                       multipage=True)
    _write(REFS / "KBH-412_crew_list.pdf", A4, A4, draw_kbh412)

    expected = []

    def entry(name, template, verdict, form_size, page_size, page=1, rotate_deg=0.0,
              scale=1.0, shift_mm=(0.0, 0.0), offending_names=(), note="", **extra):
        row = {
            "input": f"inputs/{name}",
            "template": template,
            "page": page,
            "verdict": verdict,
            "rotation_deg": rotate_deg,
            "scale": round(scale, 6),
            "shift_mm": [float(shift_mm[0]), float(shift_mm[1])],
            "offending": [],
            "offending_names": list(offending_names),
            "filled": False,
            "page_size_pt": [round(page_size[0], 3), round(page_size[1], 3)],
            "pose_affine_pt": _pose(form_size, page_size, rotate_deg, scale, shift_mm),
        }
        row.update(extra)
        if note:
            row["note"] = note
        expected.append(row)

    def derive(name, template, verdict, form_size, page_size, draw, *, rotate_deg=0.0,
               shift_mm=(0.0, 0.0), fit=False, offending_names=(), note="", multipage=False,
               pages=1, **kw):
        scale, sheets = _write(INPUTS / name, form_size, page_size, draw, rotate_deg=rotate_deg,
                               shift_mm=shift_mm, fit=fit, multipage=multipage, **kw)
        extra = {"filled": bool(kw.get("fill")), "has_form_fields": bool(kw.get("fields", True))
                 and draw is draw_kbh101}
        if offending_names:
            got = sheets.frames
            extra["offending_frames_pt"] = {
                n: {"reference": ref, "input": got.get(n)}
                for n, ref in ref101.frames.items() if got.get(n) != ref}
        for p in range(1, pages + 1):
            entry(name, template, verdict, form_size, page_size, page=p, rotate_deg=rotate_deg,
                  scale=scale, shift_mm=shift_mm, offending_names=offending_names, note=note,
                  **extra)

    derive("101_exact.pdf", "KBH-101", "pass", A4, A4, draw_kbh101)
    derive("101_filled.pdf", "KBH-101", "pass", A4, A4, draw_kbh101, fill=FILL_101,
           note="ink only: text in boxes, ticks, signature, RECEIVED stamp")
    derive("101_rotated.pdf", "KBH-101", "skewed", A4, A4, draw_kbh101, rotate_deg=2.0,
           fill=FILL_101, fields=False,
           note="turned 2.0 degrees counterclockwise as seen about the page centre; filled; "
                "printed, so no form fields")
    derive("101_fit_to_letter.pdf", "KBH-101", "rescaled", A4, letter, draw_kbh101, fit=True,
           fields=False,
           note="A4 printed fit-to-page on Letter, centred; printed, so no form fields")
    derive("101_shifted.pdf", "KBH-101", "shifted", A4, A4, draw_kbh101, shift_mm=(8.0, 6.0),
           note="8 mm right, 6 mm down")
    derive("101_old_revision.pdf", "KBH-101", "mismatched", A4, A4, draw_kbh101, revision="A",
           move={"gross_tonnage": (12.0, 0.0)}, offending_names=["gross_tonnage"],
           note="Rev. A: box 'Gross tonnage' (with its caption and field) 12 mm further right; "
                "title block reads 'Rev. A'")
    derive("101_box_removed.pdf", "KBH-101", "mismatched", A4, A4, draw_kbh101,
           omit={"call_sign"}, offending_names=["call_sign"],
           note="box 'Call sign' left out with its caption and field")
    derive("101_section_moved.pdf", "KBH-101", "mismatched", A4, A4, draw_kbh101,
           move={"section_declaration": (0.0, 15.0)},
           offending_names=["section_declaration", "master_name", "declaration_date",
                            "declaration_place", "signature"],
           note="the whole of section '3. Declaration' (heading, text, four boxes) 15 mm lower; "
                "the rule above it stays")
    derive("205_exact.pdf", "KBH-205", "pass", letter, letter, draw_kbh205)
    derive("205_filled.pdf", "KBH-205", "pass", letter, letter, draw_kbh205, fill=FILL_205)
    derive("205_a4_fit.pdf", "KBH-205", "rescaled", letter, A4, draw_kbh205, fit=True,
           note="Letter printed fit-to-page on A4, centred")
    derive("310_filled.pdf", "KBH-310", "pass", A4, A4, draw_kbh310, fill=FILL_310,
           multipage=True, pages=2)
    derive("412_crew_list_as_101.pdf", "KBH-101", "unrecognised", A4, A4, draw_kbh412,
           note="a blank KBH-412 crew list offered as KBH-101")

    # conventions of each entry are described in sample_forms/README.md
    (HERE / "expected.json").write_text(json.dumps(expected, indent=1) + "\n")


if __name__ == "__main__":
    main()

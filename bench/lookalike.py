"""Families of look-alike forms in one house style, with revisions, for identification at scale.

Every form of the invented Kestrel Bay Harbour Board shares the house style: A4, four
registration marks, the board's name and the form's title at the top left, a form-code box at
the top right, a full-width rule under the heading, and a footer rule with the form code. The
body differs: three to four sections, each a heading label over two or three rows of captioned
boxes (or a row of captioned checkboxes), drawn from one small vocabulary of box heights and
widths, so forms share much and differ in where things are.

A form is a :class:`FormSpec` (items in mm, top-left origin, y down). From it come

- its template, built directly as element sets (no PDF is read or rendered): the elements a
  born-digital page of it has, the same elements as a scan shows them, then sections and zones
  by the library's own learning code (:func:`template_of`);
- a PDF of it (reportlab), for simulated scans (:func:`draw_pdf`).

:func:`family` gives ``n_templates`` templates: the first ten forms come in revision 1 and three
later revisions (one box moved 8 mm, one box and its caption removed, two sections swapped),
the rest in one version each. Forms are drawn from per-form seeds, so the first forms of a
family of 100 are the first forms of a family of 1,000.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from pathlib import Path

import numpy as np

MM = 72.0 / 25.4  # points per mm (1 pt = 1/72 in, ISO 32000-1; 1 in = 25.4 mm)
PAGE_MM = (210.0, 297.0)  # A4, ISO 216
LINE_WIDTH = 0.8  # points
FONT = "Helvetica"
#: Helvetica's descent, per 1000 units of font size (AFM metrics of the standard 14 fonts, from memory).
DESCENT = 207.0
REVISED = 10
CHANGES = ("moved", "removed", "reordered")
MOVE_MM = 8.0

WORDS = ("Vessel name", "Call sign", "Flag state", "IMO number", "Gross tonnage", "Length overall", "Draught",
         "Master", "Agent", "Berth", "Arrival date", "Departure date", "Cargo", "Tonnes", "Packages", "Hazard class",
         "Crew", "Passengers", "Pilot", "Tug", "Remarks", "Signature", "Date", "Official use", "Port of call",
         "Next port", "Owner", "Operator", "Quay", "Shed", "Permit no.", "Fee", "Receipt", "Inspector")
HEIGHTS_MM = (7.0, 10.0, 14.0, 24.0)


@dataclass(frozen=True)
class Row:
    """A row of captioned boxes (or checkboxes): widths and x offsets in mm."""

    xs: tuple[float, ...]
    widths: tuple[float, ...]
    height: float
    captions: tuple[str, ...]
    checkboxes: bool = False


@dataclass(frozen=True)
class Section:
    heading: str
    rows: tuple[Row, ...]


@dataclass(frozen=True)
class FormSpec:
    code: str
    title: str
    sections: tuple[Section, ...]
    revision: str | None = None
    change: str | None = None

    @property
    def name(self) -> str:
        return f"{self.code}-r{self.revision}" if self.revision else self.code


@dataclass(frozen=True)
class Item:
    """One drawn thing, mm, top-left origin: box, checkbox, hline, mark or label."""

    kind: str
    x: float
    y: float
    w: float
    h: float
    text: str | None = None
    size: float = 0.0


def _row(rng: np.random.Generator) -> Row:
    if rng.random() < 0.15:
        n = int(rng.integers(3, 6))
        caps = tuple(str(c) for c in rng.choice(WORDS, n, replace=False))
        return Row(tuple(20.0 + k * 170.0 / n for k in range(n)), (4.0,) * n, 4.0, caps, True)
    n = int(rng.integers(1, 5))
    # Widths on a 5 mm grid, at least 20 mm, 3 mm apart, filling 120 to 170 mm of the line.
    total = float(rng.choice((120.0, 140.0, 155.0, 170.0)))
    parts = np.floor(rng.dirichlet(np.ones(n)) * (total - 20.0 * n) / 5.0) * 5.0 + 20.0
    edges = np.concatenate([[0.0], np.cumsum(parts)[:-1], [total]])
    xs = tuple(float(20.0 + a) for a in edges[:-1])
    widths = tuple(float(b - a - 3.0) for a, b in zip(edges[:-1], edges[1:]))
    caps = tuple(_fit(str(c), w) for c, w in zip(rng.choice(WORDS, n, replace=False), widths))
    return Row(xs, widths, float(rng.choice(HEIGHTS_MM)), caps)


def _fit(caption: str, width_mm: float) -> str:
    """The caption, cut to the box's width (7 pt text)."""
    while len(caption) > 2 and _text_width(caption, 7.0) > (width_mm - 2.0) * MM:
        caption = caption[:-1]
    return caption


def _body_mm(sections) -> float:
    """Height the sections take on the page, mm (as :func:`layout` places them)."""
    rows = [r for s in sections for r in s.rows]
    return (sum((4.0 if r.checkboxes else r.height + 3.5) + 5.0 for r in rows) + 13.0 * len(sections) - 4.0)


def base_form(k: int, seed: int = 0) -> FormSpec:
    """Form number ``k`` of the house (its own seed); its body fits between the heading and footer rules."""
    rng = np.random.default_rng([seed, k])
    sections = []
    for s in range(int(rng.integers(3, 5))):
        rows = tuple(_row(rng) for _ in range(int(rng.integers(2, 4))))
        sections.append(Section(f"Part {'ABCD'[s]}: {rng.choice(WORDS)}", rows))
    while _body_mm(sections) > 226.0:
        last = sections[-1]
        sections[-1] = dataclasses.replace(last, rows=last.rows[:-1])
        if not sections[-1].rows:
            sections.pop()
    return FormSpec(f"KBH-{100 + k:03d}", f"{rng.choice(WORDS)} {rng.choice(('notice', 'return', 'application', 'record'))}",
                    tuple(sections))


def layout(spec: FormSpec) -> list[Item]:
    """Everything drawn on the form's page, mm."""
    items = [Item("mark", x, y, 5.0, 5.0) for x, y in ((10, 10), (195, 10), (10, 282), (195, 282))]
    items += [Item("label", 20, 14, 0, 0, "KESTREL BAY HARBOUR BOARD", 9.0),
              Item("label", 20, 22, 0, 0, spec.title.capitalize(), 12.0),
              Item("box", 145, 12, 45, 16),
              Item("label", 148, 17, 0, 0, f"Form {spec.code}", 8.0),
              Item("label", 148, 23, 0, 0, f"Rev. {spec.revision or 1}", 7.0),
              Item("hline", 15, 34, 180, 0)]
    y = 40.0
    for s_i, sec in enumerate(spec.sections):
        if s_i:
            items.append(Item("hline", 15, y, 180, 0))
            y += 4.0
        items.append(Item("label", 20, y + 1.0, 0, 0, sec.heading, 9.0))
        y += 7.0
        for row in sec.rows:
            for x, w, cap in zip(row.xs, row.widths, row.captions):
                if row.checkboxes:
                    items.append(Item("checkbox", x, y, w, w))
                    items.append(Item("label", x + w + 1.5, y + 0.5, 0, 0, cap, 7.0))
                else:
                    items.append(Item("label", x, y, 0, 0, cap, 7.0))
                    items.append(Item("box", x, y + 3.5, w, row.height))
            y += (row.height + 3.5 if not row.checkboxes else 4.0) + 5.0
        y += 2.0
    items += [Item("hline", 15, 272, 180, 0), Item("label", 20, 276, 0, 0, f"{spec.code} rev. {spec.revision or 1}", 7.0)]
    return items


# -- revisions ------------------------------------------------------------------------------------
def _boxes(spec: FormSpec) -> list[tuple[int, int, int]]:
    """(section, row, box) of every plain box of a form."""
    return [(s, r, b) for s, sec in enumerate(spec.sections) for r, row in enumerate(sec.rows) if not row.checkboxes
            for b in range(len(row.xs))]


def _room(spec: FormSpec, where: tuple[int, int, int]) -> tuple[float, float]:
    """Free mm left and right of a box in its row (rows run from 20 to 190 mm)."""
    s, r, b = where
    row = spec.sections[s].rows[r]
    left = row.xs[b] - (row.xs[b - 1] + row.widths[b - 1] + 3.0 if b else 20.0)
    right = (row.xs[b + 1] - 3.0 if b + 1 < len(row.xs) else 190.0) - (row.xs[b] + row.widths[b])
    return left, right


def revised(spec: FormSpec, change: str, revision: str, rng: np.random.Generator) -> FormSpec:
    """``spec`` with one change: a box moved 8 mm, a box removed, or two sections swapped."""
    secs = list(spec.sections)
    if change == "reordered":
        a = int(rng.integers(0, len(secs) - 1))
        secs[a], secs[a + 1] = secs[a + 1], secs[a]
    else:
        boxes = _boxes(spec)
        if change == "moved":  # a box with room for the move beside it, with its caption
            boxes = [k for k in boxes if max(_room(spec, k)) >= MOVE_MM]
        s, r, b = boxes[int(rng.integers(len(boxes)))]
        row = secs[s].rows[r]
        xs, ws, caps = list(row.xs), list(row.widths), list(row.captions)
        if change == "moved":
            xs[b] += MOVE_MM if _room(spec, (s, r, b))[1] >= MOVE_MM else -MOVE_MM
        else:
            del xs[b], ws[b], caps[b]
        rows = list(secs[s].rows)
        rows[r] = dataclasses.replace(row, xs=tuple(xs), widths=tuple(ws), captions=tuple(caps))
        secs[s] = dataclasses.replace(secs[s], rows=tuple(rows))
    return dataclasses.replace(spec, sections=tuple(secs), revision=revision, change=change)


def family(n_templates: int, seed: int = 0, n_revised: int = REVISED) -> list[FormSpec]:
    """``n_templates`` form specs: ``n_revised`` forms in four revisions, the rest in one (module notes)."""
    out = []
    k = 0
    while len(out) < n_templates:
        base = base_form(k, seed)
        if k < n_revised:
            rng = np.random.default_rng([seed, k, 1])
            out.append(dataclasses.replace(base, revision="1"))
            out += [revised(base, c, str(j + 2), rng) for j, c in enumerate(CHANGES)]
        else:
            out.append(base)
        k += 1
    return out[:n_templates]


# -- elements, templates and PDFs -----------------------------------------------------------------
def _text_width(text: str, size: float) -> float:
    from reportlab.pdfbase.pdfmetrics import stringWidth

    return stringWidth(text, FONT, size)


def elements_of(spec: FormSpec, source: str = "vector") -> list:
    """The elements of the form's page as the vector extractor reads its PDF (ids in reading order).

    Boxes are framed on their path (stroke centre), rules take the line width, labels span their
    text's advance and are as tall as the font size, centred where the glyph boxes are (baseline
    plus the font's descent, minus half the size).
    """
    from layoutcheck.elements import Element, assign_ids, frame_from_center

    out = []
    for it in layout(spec):
        x, y, w, h = it.x * MM, it.y * MM, it.w * MM, it.h * MM
        if it.kind == "label":
            tw = _text_width(it.text, it.size)
            base = y + it.size  # the baseline sits one font size below the item's top
            cy = base + it.size * DESCENT / 1000.0 - it.size / 2.0
            out.append(Element("new", "label", frame_from_center(x + tw / 2.0, cy, tw, it.size), None if source == "raster" else 0.0,
                               text=it.text, source=source))
        elif it.kind == "hline":
            out.append(Element("new", "hline", (x, y - LINE_WIDTH / 2, x + w, y + LINE_WIDTH / 2), source=source))
        else:
            out.append(Element("new", it.kind, (x, y, x + w, y + h), source=source))
    return assign_ids(out)


def template_of(spec: FormSpec):
    """The template of a form, built from its element sets by the library's learning code."""
    from layoutcheck.elements import PageElements
    from layoutcheck.template import Template, template_page, with_raster_sections
    from layoutcheck.zones import with_zones

    w, h = PAGE_MM[0] * MM, PAGE_MM[1] * MM
    vec = PageElements(w, h, tuple(elements_of(spec, "vector")), source="vector")
    ras = PageElements(w, h, tuple(e.replace(text=None) for e in elements_of(spec, "raster")), source="raster")
    page = with_raster_sections(template_page(1, vec, ras))
    t = with_zones(Template(spec.name, (page,), ()))
    return dataclasses.replace(t, form=spec.code if spec.revision else None, revision=spec.revision)


def draw_pdf(spec: FormSpec, path: str | Path) -> str:
    """The form's page as a PDF (what is printed and scanned)."""
    from reportlab.pdfgen import canvas

    w, h = PAGE_MM[0] * MM, PAGE_MM[1] * MM
    c = canvas.Canvas(str(path), pagesize=(w, h), invariant=1)
    c.setLineWidth(LINE_WIDTH)
    for it in layout(spec):
        x, y, iw, ih = it.x * MM, it.y * MM, it.w * MM, it.h * MM
        if it.kind == "label":
            c.setFont(FONT, it.size)
            c.drawString(x, h - (y + it.size), it.text)
        elif it.kind == "hline":
            c.line(x, h - y, x + iw, h - y)
        elif it.kind == "mark":
            c.rect(x, h - y - ih, iw, ih, stroke=0, fill=1)
        else:
            c.rect(x, h - y - ih, iw, ih, stroke=1, fill=0)
    c.showPage()
    c.save()
    return str(path)

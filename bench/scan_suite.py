"""A suite of simulated scans with known truth, shared by the scan benchmarks.

Forms: the five distinct form pages of the bundled sample forms. Faults are planted in the PDF
before scanning, by an overlay that paints a standalone box out (white, wider than its rules)
and, for a moved or shrunk box, draws it again at its new place or size (a moved box stays
15 mm inside the sheet).
"""

from __future__ import annotations

import io
from dataclasses import dataclass
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
REFS = ROOT / "sample_forms" / "references"
FORMS = (
    ("KBH-101_vessel_arrival.pdf", 1),
    ("KBH-205_cargo_manifest.pdf", 1),
    ("KBH-310_berth_application.pdf", 1),
    ("KBH-310_berth_application.pdf", 2),
    ("KBH-412_crew_list.pdf", 1),
)
MM = 72.0 / 25.4


@dataclass(frozen=True)
class Case:
    index: int
    form: str
    page: int
    dpi: int
    rotation_deg: float
    scale: tuple[float, float]
    shift_mm: tuple[float, float]
    noise: float
    blur: float
    jpeg: int | None
    bitonal: bool
    fill: bool
    fault: str | None  # None, "moved", "missing", "resized"
    fault_box: str | None
    fault_mm: float


def standalone_boxes(page) -> list:
    """Boxes of a template page that share no rule with another box (safe to paint out)."""
    boxes = [e for e in page.elements if e.kind == "box"]
    out = []
    for b in boxes:
        x0, t, x1, bo = b.frame
        if (x1 - x0) < 30 or (bo - t) < 14:
            continue
        alone = True
        for o in boxes:
            if o is b:
                continue
            ox0, ot, ox1, obo = o.frame
            near_x = ox0 - 6 <= x1 and ox1 + 6 >= x0
            near_y = ot - 6 <= bo and obo + 6 >= t
            if near_x and near_y:
                alone = False
                break
        if alone:
            out.append(b)
    return out


def make_cases(templates: dict, n: int, seed: int = 7) -> list[Case]:
    rng = np.random.default_rng(seed)
    cases = []
    for i in range(n):
        form, page = FORMS[i % len(FORMS)]
        tp = templates[form].pages[page - 1]
        fault = None
        box = None
        if i % 4 == 3:
            cands = standalone_boxes(tp)
            if cands:
                fault = ("moved", "missing", "resized")[(i // 4) % 3]
                box = cands[int(rng.integers(len(cands)))].id
        fitted = i % 10 == 5
        s = 0.9407 if fitted else float(rng.uniform(0.997, 1.003))
        cases.append(Case(
            index=i, form=form, page=page, dpi=(200, 300)[i % 2],
            rotation_deg=float(rng.uniform(-5, 5)),
            scale=(s, s * float(rng.uniform(0.999, 1.001))),
            shift_mm=(float(rng.uniform(-6, 6)), float(rng.uniform(-6, 6))),
            noise=float(rng.uniform(0, 10)), blur=float(rng.uniform(0, 1.0)),
            jpeg=(None, 85, 60)[i % 3], bitonal=(i % 7 == 2), fill=(i % 2 == 0),
            fault=fault, fault_box=box, fault_mm=float(rng.uniform(8, 12)),
        ))
    return cases


def overlay_pdf(src: Path, out: Path, draw, only_page: int | None = None) -> Path:
    """``src`` with ``draw(canvas, width, height)`` painted over its first page (reportlab on a
    page of the same size, merged by pypdf; points, origin bottom left), written to ``out``.
    With ``only_page`` (1-based) the file keeps that page alone, and it is the one drawn on."""
    from pypdf import PdfReader, PdfWriter
    from reportlab.pdfgen import canvas

    wtr = PdfWriter(clone_from=str(src))
    if only_page is not None:
        for k in reversed(range(len(wtr.pages))):
            if k != only_page - 1:
                wtr.remove_page(k)
    page = wtr.pages[0]
    w, h = float(page.mediabox.width), float(page.mediabox.height)
    buf = io.BytesIO()
    c = canvas.Canvas(buf, pagesize=(w, h), invariant=1)
    draw(c, w, h)
    c.showPage()
    c.save()
    page.merge_page(PdfReader(io.BytesIO(buf.getvalue())).pages[0])
    with open(out, "wb") as fh:
        wtr.write(fh)
    return out


def planted_pdf(case: Case, template, out_dir: Path) -> Path:
    """The reference page with the case's fault painted in (or the reference itself)."""
    src = REFS / case.form
    if case.fault is None:
        return src
    tp = template.pages[case.page - 1]
    box = next(e for e in tp.elements if e.id == case.fault_box)

    def draw(c, w, h):
        x0, top, x1, bottom = box.frame
        c.setStrokeColorRGB(1, 1, 1)
        c.setLineWidth(4)
        c.rect(x0, h - bottom, x1 - x0, bottom - top, stroke=1, fill=0)
        c.setStrokeColorRGB(0, 0, 0)
        c.setLineWidth(0.8)
        if case.fault == "moved":
            # The moved box stays 15 mm inside the sheet, so the scan's shift and turn (up to 6
            # mm and 5 degrees) keep all of it on the image: a box cut by the image's edge is missing.
            d = case.fault_mm * MM
            dx = d if x1 + d <= w - 15 * MM else -d
            c.rect(x0 + dx, h - bottom, x1 - x0, bottom - top)
        elif case.fault == "resized":
            cx, cy = (x0 + x1) / 2, (top + bottom) / 2
            bw, bh = (x1 - x0) * 0.7, (bottom - top) * 0.7
            c.rect(cx - bw / 2, h - cy - bh / 2, bw, bh)

    return overlay_pdf(src, out_dir / f"case{case.index:03d}.pdf", draw, only_page=case.page)


def scan(case: Case, template, out_dir: Path):
    """Simulated scan of the case: (SimulatedScan, template page number in the PDF)."""
    from layoutcheck.simulate import simulate_scan

    pdf = planted_pdf(case, template, out_dir)
    page = 1 if case.fault is not None else case.page
    return simulate_scan(pdf, page=page, dpi=case.dpi, rotation_deg=case.rotation_deg, scale=case.scale,
                         shift_mm=case.shift_mm, blur_sigma_px=case.blur, noise_sigma=case.noise,
                         jpeg_quality=case.jpeg, bitonal_threshold=128 if case.bitonal else None,
                         fill=case.fill, stamp=case.fill, seed=case.index)

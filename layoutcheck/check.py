"""Learning templates and checking pages: the stages wired together for one file at a time.

``learn`` reads references and builds a :class:`~layoutcheck.template.Template`;
``check_page`` turns one page into one JSON-ready record; ``check_file`` does every page of a
file, in order, and yields exactly one record per page (or one error record for a file that
cannot be opened at all).
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from typing import Iterator, Sequence

import numpy as np

from .consensus import Match, SolverSettings, solve
from .elements import MM_PER_POINT, PageElements
from .sources import (FAINT_CONTRAST, PageError, RasterPage, ReadLimits, VectorPage, page_content_problem, page_contrast,
                      read_pages, render_pdf_page, square_pixels, where)
from .template import Template, TemplatePage, template_page, with_raster_sections
from .verdict import Finding, Tolerances, judge, offending

#: Resolution at which a born-digital reference is rendered to learn how scans of it look
#: (200 dpi: common practice for office scans; the raster extractor works in mm, so scans at
#: other resolutions compare alike).
REFERENCE_RENDER_DPI = 200.0
#: Rendered at three times that and averaged down: pdfium snaps rectangle edges to its pixel grid
#: (by up to a few hundredths of a millimetre), which would bias the template's raster frames.
REFERENCE_OVERSAMPLE = 3


class LearnError(Exception):
    """A reference that cannot be learned from; one line naming the file and page."""


def extract(page: VectorPage | RasterPage) -> PageElements:
    """Elements of one page, by the extractor for its kind."""
    if isinstance(page, VectorPage):
        from .extract.vector import extract_vector

        return extract_vector(page)
    from .extract.raster import extract_raster

    return extract_raster(page)


def parse_pages(spec: str | None) -> set[int] | None:
    """``"1,3-5"`` -> {1, 3, 4, 5}; None for all pages."""
    if not spec:
        return None
    out: set[int] = set()
    for part in spec.split(","):
        part = part.strip()
        if not part:
            continue
        if "-" in part:
            a, b = part.split("-", 1)
            lo, hi = int(a), int(b)
            if lo < 1 or hi < lo:
                raise ValueError(f"bad page range {part!r}")
            out.update(range(lo, hi + 1))
        else:
            v = int(part)
            if v < 1:
                raise ValueError(f"bad page number {part!r}")
            out.add(v)
    return out


def reference_pages(path: str, limits: ReadLimits, pages: set[int] | None, with_raster: bool = True):
    """``(page, vector elements or None, raster elements or None)`` per page of a reference.

    A born-digital page is also rendered and read as a scan would be (at
    :data:`REFERENCE_RENDER_DPI`), so scans of the form have elements of their own kind to match.
    Raises :class:`LearnError` for a page that cannot be read.
    """
    for page in read_pages(path, limits, pages):
        if isinstance(page, PageError):
            raise LearnError(page.message)
        if isinstance(page, VectorPage):
            ras = None
            vec = extract(page)
            if with_raster:
                rendered = render_pdf_page(path, page.page, limits, REFERENCE_RENDER_DPI, REFERENCE_OVERSAMPLE)
                if isinstance(rendered, PageError):
                    raise LearnError(rendered.message)
                ras = extract(rendered)
            yield page, vec, ras
        else:
            yield page, None, extract(page)


def learn(references: Sequence[str], name: str | None = None, pages: set[int] | None = None,
          limits: ReadLimits = ReadLimits(), section_names: dict[str, str] | None = None,
          with_raster: bool = True) -> Template:
    """Learn a template from one reference (a blank PDF or a clean scan; every page of it).

    Several references are taken as good samples of the same form: see
    :func:`layoutcheck.samples.learn_from_samples`.
    """
    refs = [str(r) for r in references]
    if not refs:
        raise LearnError("no reference given")
    from .zones import with_zones

    if len(refs) > 1:
        from .samples import learn_from_samples

        return with_zones(learn_from_samples(refs, name=name, pages=pages, limits=limits, section_names=section_names,
                                             with_raster=with_raster))
    ref = refs[0]
    out_pages: list[TemplatePage] = []
    for page, vec, ras in reference_pages(ref, limits, pages, with_raster):
        tp = template_page(len(out_pages) + 1, vec, ras, section_names)
        if len(tp.elements) < 3:
            raise LearnError(f"{where(ref, page.page)}: only {len(tp.elements)} form elements found; "
                             "a template needs ruled lines, boxes or labels (blank or photographic page?)")
        out_pages.append(with_raster_sections(tp))
    if not out_pages:
        raise LearnError(f"{where(ref, None)}: no pages selected")
    stem = name or _default_name(ref)
    return with_zones(Template(stem, tuple(out_pages), (ref.split("/")[-1],)))


def _default_name(path: str) -> str:
    base = path.replace("\\", "/").split("/")[-1]
    stem = base.rsplit(".", 1)[0]
    return stem.split("_")[0] if "_" in stem else stem


# -- checking -------------------------------------------------------------------------------------
@dataclass(frozen=True)
class CheckSettings:
    tolerances: Tolerances = Tolerances()
    solver: SolverSettings = SolverSettings()
    #: Add ``zones`` (each zone of the template mapped onto the input) to every record.
    zones: bool = False
    #: Folder for normalised page images (see :mod:`layoutcheck.normalise`); None writes none.
    normalise_dir: str | None = None
    #: Resolution of normalised images; None: the input's (200 dpi for born-digital pages).
    normalise_dpi: float | None = None
    #: ``png`` or ``tiff``.
    normalise_format: str = "png"


def judged_mask(tp_elements, input_elements: PageElements) -> np.ndarray:
    """Which template elements count for this input.

    Printed text in a scan is used for the pose but not judged: without OCR, a label cannot be
    told from handwriting written beside it. Form fields are judged only when the input has any
    (a printed or flattened copy has none).
    """
    raster = input_elements.source == "raster"
    has_fields = any(e.kind == "field" for e in input_elements.elements)
    out = []
    for e in tp_elements:
        if e.kind_class == "text" and raster:
            out.append(False)
        elif e.kind == "field" and not has_fields:
            out.append(False)
        else:
            out.append(True)
    return np.array(out, bool)


def match_page(tp: TemplatePage, found: PageElements, settings: CheckSettings) -> Match:
    """Match found elements to one template page."""
    els = tp.elements_for(found.source)
    judged = judged_mask(els, found)
    unstable = set(tp.unstable)
    if unstable:
        judged &= np.array([e.id not in unstable for e in els], bool)
    return solve(els, found.elements, tp.sections, judged=judged, settings=settings.solver,
                 position_tol=settings.tolerances.element_tolerance_mm / MM_PER_POINT,
                 size_tol=settings.tolerances.element_size_pct / 100.0, slack=tp.slack,
                 page_size=(found.width, found.height))


def best_match(templates: Sequence[Template], found: PageElements, settings: CheckSettings):
    """The template page whose elements agree best: ``(template, page, match)``."""
    from .identify import candidates

    best = None
    for template, tp in candidates(templates, found):
        m = match_page(tp, found, settings)
        key = (m.pose is not None, m.support)
        if best is None or key > best[0]:
            best = (key, template, tp, m)
    if best is None:
        return None, None, None
    return best[1], best[2], best[3]


def error_record(source: str, page: int | None, message: str, elapsed_ms: float = 0.0) -> dict:
    return {
        "source": source, "page": page, "template": None, "template_page": None, "verdict": "error",
        "findings": [Finding("error", message).to_dict()], "pose": None, "support": 0.0,
        "offending": [], "sections": [], "elapsed_ms": round(elapsed_ms, 2), "error": message,
    }


def unrecognised_record(source: str, page: int | None, message: str, t0: float) -> dict:
    """A page that was read but shows no form at all (blank, black): one finding says why."""
    rec = error_record(source, page, message, (time.perf_counter() - t0) * 1000)
    rec.update(verdict="unrecognised", error=None, findings=[Finding("unrecognised", message, value=0.0).to_dict()])
    return rec


def pose_record(match: Match, tp: TemplatePage, input_size: tuple[float, float]) -> dict | None:
    if match.pose is None:
        return None
    p = match.pose
    return {
        "rotation_deg": round(p.rotation_deg, 4),
        "scale": round(p.scale, 6),
        "scale_x": round(p.scale_x, 6),
        "scale_y": round(p.scale_y, 6),
        "shift_mm": [round(float(v), 3) for v in p.shift_mm((tp.width, tp.height), input_size)],
        "matrix": [[round(v, 6) for v in row] for row in p.as_2x3()],
    }


def check_page(page: VectorPage | RasterPage | PageError, templates: Sequence[Template],
               settings: CheckSettings = CheckSettings()) -> dict:
    """One JSON-ready record for one page (see the README for the fields)."""
    t0 = time.perf_counter()
    if isinstance(page, PageError):
        return error_record(page.source, page.page, page.message)
    # A page that was read but cannot hold a form (blank, black) is "unrecognised", not "error":
    # errors are for input that could not be read at all.
    contrast = page_contrast(page.image) if isinstance(page, RasterPage) and page.image.size else None
    problem = page_content_problem(page.image, contrast) if isinstance(page, RasterPage) else None
    if problem:
        return unrecognised_record(page.source, page.page, f"Not a form: {problem}", t0)
    try:
        found = extract(page)
    except Exception as exc:  # an extractor bug on one page must not end the batch
        msg = f"{where(page.source, page.page)}: elements could not be read ({type(exc).__name__}: {exc})"
        return error_record(page.source, page.page, msg, (time.perf_counter() - t0) * 1000)
    if not found.elements:
        return unrecognised_record(page.source, page.page, "Not a form: no lines, boxes or text found on the page (blank page?)", t0)
    rec = record_for(page.source, page.page, found, templates, settings, t0, page=page)
    if contrast is not None and contrast.contrast < FAINT_CONTRAST and rec["template"] is not None:
        # Verified, but staff should know why OCR may struggle on this page.
        rec["findings"].append(Finding("pass", f"Faint print: the ink is only {contrast.contrast:.0f} grey levels darker "
                                       f"than the paper (clear print: over {FAINT_CONTRAST:.0f}); OCR may misread it",
                                       value=contrast.contrast, limit=FAINT_CONTRAST).to_dict())
    return rec


def record_for(source: str, page_no: int, found: PageElements, templates: Sequence[Template],
               settings: CheckSettings, t0: float | None = None, page=None) -> dict:
    t0 = time.perf_counter() if t0 is None else t0
    template, tp, match = best_match(templates, found, settings)
    input_size = (found.width, found.height)
    if match is None:
        msg = "no template page to compare with"
        rec = error_record(source, page_no, f"{where(source, page_no)}: {msg}")
        return rec
    if isinstance(page, RasterPage) and match.pose is not None:
        found, match = look_again(page, found, tp, match, settings)
    verdict, findings = judge(match, settings.tolerances, (tp.width, tp.height), input_size, zones=tp.zones)
    recognised = verdict != "unrecognised"
    rec = {
        "source": source,
        "page": page_no,
        "template": template.name if recognised else None,
        "template_page": tp.number if recognised else None,
        "verdict": verdict,
        "findings": [f.to_dict() for f in findings],
        "pose": pose_record(match, tp, input_size) if recognised else None,
        "support": round(match.support, 4),
        # Largest displacement of the smooth residual field (paper not flat), mm.
        "warp_mm": round(match.field.largest_mm, 2) if recognised and match.field is not None else None,
        "offending": offending(match) if recognised else [],
        "sections": [
            {"id": s.id, "name": s.name, "status": s.status, "offset_mm": [round(v, 2) for v in s.offset_mm],
             "support": round(s.support, 4), "elements": s.elements}
            for s in match.sections
        ] if recognised else [],
        "elapsed_ms": round((time.perf_counter() - t0) * 1000, 2),
        "error": None,
    }
    if found.source == "raster":
        # Template elements found only by the second look (under a stamp, across a tick, a rule
        # broken by thresholding): in place, but worth a glance when the page is reviewed.
        rec["second_look"] = [r.id for r in match.elements if r.input_index is not None
                              and found.elements[r.input_index].source == "look"] if recognised else []
    if not recognised:
        rec["findings"][0]["message"] += f" (closest: {template.name} page {tp.number})"
    if settings.zones or settings.normalise_dir:
        handoff(rec, page, found, tp, match, settings)
    return rec


def look_again(page: RasterPage, found: PageElements, tp: TemplatePage, match: Match,
               settings: CheckSettings) -> tuple[PageElements, Match]:
    """Look again, at the place the pose predicts, for the offending rules and boxes of a scan.

    What the second look finds (:func:`layoutcheck.extract.look.second_look`) is added to the
    found elements and the page is matched again, so those elements are judged like any other.
    Pages with nothing offending, or whose second look finds nothing new, are returned as they
    are.
    """
    from .extract.look import LOOK_KINDS, second_look

    wanted = {r.id for r in match.elements
              if r.judged and r.status != "ok" and r.kind in LOOK_KINDS and not r.in_moved_section}
    if not wanted:
        return found, match
    expected = [e for e in tp.elements_for(found.source) if e.id in wanted]
    square = square_pixels(page)
    looked = [e for e in second_look(square.image, square.dpi, expected, match.pose) if e is not None]
    near = 0.5 / MM_PER_POINT
    new = []
    for e in looked:
        c, s = np.array(e.center), np.array(e.size)
        if not any(f.kind_class == e.kind_class and np.all(np.abs(np.array(f.center) - c) < near)
                   and np.all(np.abs(np.array(f.size) - s) < near) for f in found.elements):
            new.append(e.replace(id=f"look-{len(new) + 1:03d}"))
    if not new:
        return found, match
    more = PageElements(found.width, found.height, found.elements + tuple(new), source=found.source,
                        note=f"{found.note}; second look: {len(new)} found".lstrip("; "))
    return more, match_page(tp, more, settings)


#: Verdicts whose page is the form in a known pose, so it can be normalised.
NORMALISABLE = ("pass", "shifted", "skewed", "rescaled")


def handoff(rec: dict, page, found: PageElements, tp: TemplatePage, match: Match, settings: CheckSettings) -> dict:
    """Add the OCR hand-off to a record: ``zones`` and the ``normalised`` image, as asked.

    ``page`` is the input page (for its dpi and image); without it zones are given in points.
    """
    recognised = rec["verdict"] != "unrecognised" and match.pose is not None
    if settings.zones:
        from .zones import zones_for_match

        if not recognised:
            rec["zones"] = []
        elif isinstance(page, RasterPage):
            # On the input's own pixel grid, per axis (a fax's pixels are twice as tall as wide).
            rec["zones"] = zones_for_match(tp, match, page.dpi_xy, (page.image.shape[1], page.image.shape[0]))
        else:
            rec["zones"] = zones_for_match(tp, match, None, (found.width, found.height))
    if settings.normalise_dir:
        rec["normalised"] = None
        if rec["verdict"] in NORMALISABLE and match.pose is not None and page is not None:
            from .normalise import normalise_page

            rec["normalised"] = normalise_page(page, match.pose, (tp.width, tp.height), settings.normalise_dir,
                                               settings.normalise_dpi, settings.normalise_format)
    return rec


def handoff_fields(rec: dict, settings: CheckSettings) -> dict:
    """Empty ``zones`` / ``normalised`` fields on a record without them, when they were asked for."""
    if settings.zones:
        rec.setdefault("zones", [])
    if settings.normalise_dir:
        rec.setdefault("normalised", None)
    return rec


def check_file(path: str, templates: Sequence[Template], settings: CheckSettings = CheckSettings(),
               limits: ReadLimits = ReadLimits(), pages: set[int] | None = None) -> Iterator[dict]:
    """Records for every page of one file, in page order; never raises for bad input."""
    for page in read_pages(path, limits, pages):
        yield handoff_fields(check_page(page, templates, settings), settings)

"""Learning templates and checking pages: the stages wired together for one file at a time.

``learn`` reads references and builds a :class:`~layoutcheck.template.Template`;
``check_page`` turns one page into one JSON-ready record; ``check_file`` does every page of a
file, in order, and yields exactly one record per page (or one error record for a file that
cannot be opened at all).
"""

from __future__ import annotations

import dataclasses
import os
import time
from dataclasses import dataclass
from typing import Iterator, Sequence

import numpy as np

from .consensus import Match, SolverSettings, solve
from .elements import MM_PER_POINT, POINTS_PER_INCH, Element, PageElements
from .identify import IdentifySettings
from .pose import Pose
from .sources import (FAINT_CONTRAST, USUAL_DPI, PageError, RasterPage, ReadLimits, VectorPage, page_content_problem,
                      page_contrast, read_pages, render_pdf_page, square_pixels, where)
from .template import LearnError, Template, TemplatePage, template_page, with_raster_sections
from .verdict import SEVERITY, UNCLEAR_WHEN_SMALL, Finding, Tolerances, judge, offending, people_first, too_small

#: Resolution at which a born-digital reference is rendered to learn how scans of it look
#: (200 dpi: common practice for office scans; the raster extractor works in mm, so scans at
#: other resolutions compare alike).
REFERENCE_RENDER_DPI = 200.0
#: Rendered at three times that and averaged down: pdfium snaps rectangle edges to its pixel grid
#: (by up to a few hundredths of a millimetre), which would bias the template's raster frames.
REFERENCE_OVERSAMPLE = 3


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


def reference_pages(path: str, limits: ReadLimits, pages: set[int] | None, with_raster: bool = True,
                    min_dpi: float = Tolerances.min_dpi):
    """``(page, vector elements or None, raster elements or None)`` per page of a reference.

    A born-digital page is also rendered and read as a scan would be (at
    :data:`REFERENCE_RENDER_DPI`), so scans of the form have elements of their own kind to match.
    A photographed reference (no usable resolution stated) is read as its sheet, found on the
    desk, upright and evenly lit (:mod:`layoutcheck.capture`); it must show every part of the
    sheet at ``min_dpi`` at least. Raises :class:`LearnError` for a page that cannot be read.
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
        elif not page.dpi_stated:
            from .capture import prepare, readability

            cap = prepare(page, camera=True)
            flat = cap.page
            read = readability(cap.to_input, (flat.width, flat.height), page.dpi)
            if read.worst_dpi < min_dpi:
                raise LearnError(f"{where(path, page.page)}: photo too small to learn from: parts of the sheet are at "
                                 f"{read.worst_dpi:.0f} dpi (at least {min_dpi:g} needed); photograph it closer")
            yield flat, None, extract(flat)
        else:
            yield page, None, extract(page)


#: Files a folder of samples is read for (``learn --update form.json more_scans/``).
SAMPLE_SUFFIXES = (".pdf", ".png", ".jpg", ".jpeg", ".tif", ".tiff")


def sample_files(paths: Sequence[str]) -> list[str]:
    """Files to learn from: the files given, and the scans and PDFs of folders given, by name."""
    out = []
    for p in paths:
        p = str(p)
        if os.path.isdir(p):
            found = sorted(os.path.join(p, f) for f in os.listdir(p) if f.lower().endswith(SAMPLE_SUFFIXES))
            if not found:
                raise LearnError(f"{p}: folder holds no scans or PDFs")
            out += found
        else:
            out.append(p)
    return out


def learn(references: Sequence[str], name: str | None = None, pages: set[int] | None = None,
          limits: ReadLimits = ReadLimits(), section_names: dict[str, str] | None = None,
          with_raster: bool = True, min_dpi: float = Tolerances.min_dpi) -> Template:
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

        per_sample = [sample_pages(p, limits, pages, with_raster) for p in refs]
        return with_zones(learn_from_samples(per_sample, refs, name or _default_name(refs[0]), section_names))
    ref = refs[0]
    out_pages: list[TemplatePage] = []
    for page, vec, ras in reference_pages(ref, limits, pages, with_raster, min_dpi):
        # A scanned sample is sorted into print and fill-in; a photo is read through its sheet,
        # whose picture is not the page's, so it is taken as it is read.
        scanned = vec is None and isinstance(page, RasterPage) and page.dpi_stated
        if scanned:
            ras, aside, why = printed_sort(page, ras)
        tp = template_page(len(out_pages) + 1, vec, ras, section_names)
        if len(tp.elements) < 3:
            raise LearnError(f"{where(ref, page.page)}: only {len(tp.elements)} form elements found; "
                             "a template needs ruled lines, boxes or labels (blank or photographic page?)")
        if scanned:
            tp = dataclasses.replace(tp, set_aside=aside, set_aside_why=why, samples=1,
                                     seen={e.id: 1 for e in tp.raster_elements + aside})
        out_pages.append(with_raster_sections(tp))
    if not out_pages:
        raise LearnError(f"{where(ref, None)}: no pages selected")
    stem = name or _default_name(ref)
    warnings = ()
    if any(p.samples == 1 for p in out_pages):
        from .samples import single_sample_warning

        warnings = (single_sample_warning(sum(len(p.set_aside) for p in out_pages)),)
    return with_zones(Template(stem, tuple(out_pages), (ref.split("/")[-1],), warnings))


def sample_pages(path: str, limits: ReadLimits, pages: set[int] | None = None, with_raster: bool = True) -> list:
    """``(vector PageElements or None, raster PageElements or None, set aside, reasons)`` per
    page of one sample file. A scanned page keeps only what looks printed, its rules cut to their
    printed span (see :func:`printed_sort`); ``reasons`` says, per element id, why an element
    looks like fill-in or was cut."""
    out = []
    for page, vec, ras in reference_pages(path, limits, pages, with_raster):
        why: dict = {}
        aside: tuple = ()
        if vec is None and ras is not None:
            ras, aside, why = printed_sort(page, ras)
        out.append((vec, ras, aside, why))
    return out


def update(template: Template, samples: Sequence[str], limits: ReadLimits = ReadLimits()) -> Template:
    """The template grown by more scanned samples (files or folders of them): see
    :func:`layoutcheck.samples.update_template`."""
    from .samples import update_template

    paths = sample_files(samples)
    return update_template(template, [sample_pages(p, limits, None, False) for p in paths], paths)


def printed_sort(page: RasterPage, found: PageElements) -> tuple[PageElements, tuple[Element, ...], dict]:
    """A scanned sample split into what is printed and what is probably fill-in.

    Returns the printed elements (rules cut to their printed span and to the structure that ends
    them), the elements set aside, and per element id the reason it was set aside or cut (see
    :mod:`layoutcheck.extract.raster.printed`). The colour of a colour image file is a cue too.
    """
    from .extract.raster.printed import sort_printed, trim_to_structure
    from .sources import read_colour

    colour = None if str(page.source).lower().endswith(".pdf") else read_colour(page.source, page.page)
    if colour is not None and colour.shape[:2] != page.image.shape:
        colour = None
    sorting = sort_printed(page.image, page.dpi, found.elements, colour)
    shaped = trim_to_structure(sorting.kept)
    why = {**sorting.reasons, **shaped.reasons}
    return (PageElements(found.width, found.height, shaped.kept, source=found.source, note=found.note,
                         dpi_xy=found.dpi_xy),
            sorting.set_aside + shaped.set_aside, why)


def learning_summary(template: Template) -> list[str]:
    """Plain lines saying what a template was learned from and how sure it is, per page."""
    lines = []
    for p in template.pages:
        line = (f"{template.name} page {p.number}: {len(p.elements)} elements in {len(p.sections)} sections"
                + (f", {len(p.raster_elements)} as seen in a scan" if p.raster_elements else ""))
        if p.unstable:
            line += f", {len(p.unstable)} unstable"
        if p.samples:
            line += (f"; from {p.samples} scanned sample{'s' if p.samples > 1 else ''}: {len(p.elements)} kept, "
                     f"{len(p.set_aside)} set aside as probable fill-in")
        lines.append(line)
        if p.unstable:
            # Found on some good samples only: not judged on input pages, so a person should know.
            by_id = {e.id: e for e in p.elements}
            names = [by_id[i].label() for i in p.unstable if i in by_id]
            shown = ", ".join(names[:10]) + (f" and {len(names) - 10} more" if len(names) > 10 else "")
            lines.append(f"  not on every sample (not judged): {shown}")
    lines += [f"warning: {w}" for w in template.warnings]
    return lines


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
    #: How far the search for a page's template goes (see :mod:`layoutcheck.identify`).
    identify: IdentifySettings = IdentifySettings()
    #: The revision each page should be: ``(form, revision)`` pairs, form None for every form
    #: that has a template of that revision. A page that matches another revision better is
    #: ``mismatched``, with a finding naming the elements that tell the two apart.
    expect_revision: tuple[tuple[str | None, str], ...] = ()

    def expected_revision(self, form: str) -> str | None:
        """The revision asked for pages of ``form``, or None."""
        named = [r for f, r in self.expect_revision if f == form]
        anyform = [r for f, r in self.expect_revision if f is None]
        return (named or anyform or [None])[0]
    #: Let a normalised image replace the file of the same name (only a resumed run does).
    normalise_replace: bool = False


#: Thinnest stroke a scan keeps, pixels across: a scanner that thresholds at mid-grey (a fax
#: does, common practice) keeps a stroke wherever it falls on the pixel grid only when it is at
#: least one pixel thick; a thinner one split between two rows of pixels is under half in each,
#: and is lost or broken into dashes (a 0.5 point rule at 98 dpi is 0.68 pixel tall).
MIN_STROKE_PX = 1.0


def too_thin(tp_elements, dpi_xy: tuple[float, float] | None) -> np.ndarray:
    """Which template elements a scan at ``dpi_xy`` (x, y) cannot show: an outline stroke under
    :data:`MIN_STROKE_PX` across on its axis. The page is taken as upright (its x the template's
    x), as scans are within a few degrees; all False for a vector input (``dpi_xy`` None)."""
    out = np.zeros(len(tp_elements), bool)
    if dpi_xy is None:
        return out
    for k, e in enumerate(tp_elements):
        if e.stroke is None:
            continue
        out[k] = any(s is not None and s * d / POINTS_PER_INCH < MIN_STROKE_PX for s, d in zip(e.stroke, dpi_xy))
    return out


def judged_mask(tp_elements, input_elements: PageElements) -> np.ndarray:
    """Which template elements count for this input.

    Printed text in a scan is used for the pose but not judged: without OCR, a label cannot be
    told from handwriting written beside it. Form fields are judged only when the input has any
    (a printed or flattened copy has none). Rules and boxes drawn too thin for the scan's
    resolution (:func:`too_thin`) are not judged: the scan cannot be relied on to show them.
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
    return np.array(out, bool) & ~too_thin(tp_elements, input_elements.dpi_xy)


def thin_finding(tp: TemplatePage, found: PageElements) -> Finding | None:
    """A note naming the rules and boxes not judged because the scan is too coarse for their
    lines (:func:`too_thin`), or None."""
    els = tp.elements_for(found.source)
    thin = [e for e, t in zip(els, too_thin(els, found.dpi_xy)) if t]
    if not thin:
        return None
    dx, dy = found.dpi_xy
    shown = ", ".join(e.id for e in thin[:6]) + (f" and {len(thin) - 6} more" if len(thin) > 6 else "")
    return Finding("pass", f"Not judged at this resolution ({dx:g} x {dy:g} dpi): {len(thin)} rules and boxes "
                           f"drawn with lines under {MIN_STROKE_PX:g} pixel thick ({shown})", value=float(len(thin)))


def match_page(tp: TemplatePage, found: PageElements, settings: CheckSettings, near=None) -> Match:
    """Match found elements to one template page (``near``: a pose known to within a few
    millimetres, see :func:`layoutcheck.consensus.solve`)."""
    els = tp.elements_for(found.source)
    judged = judged_mask(els, found)
    unstable = set(tp.unstable)
    if unstable:
        judged &= np.array([e.id not in unstable for e in els], bool)
    return solve(els, found.elements, tp.sections, judged=judged, settings=settings.solver,
                 position_tol=settings.tolerances.element_tolerance_mm / MM_PER_POINT,
                 size_tol=settings.tolerances.element_size_pct / 100.0, slack=tp.slack,
                 page_size=(found.width, found.height), unseen=too_thin(els, found.dpi_xy), near=near)


def identify_page(templates, found: PageElements, settings: CheckSettings):
    """``(index, identification)``: which template page ``found`` is (see :mod:`layoutcheck.identify`).

    ``templates`` is a :class:`~layoutcheck.index.TemplateIndex` or a sequence of templates.
    """
    from .identify import identify
    from .index import as_index

    index = as_index(templates)
    return index, identify(index, found, lambda tp: match_page(tp, found, settings), settings.tolerances.min_support,
                           settings.identify)


def alike_templates(index, settings: CheckSettings, neighbours: int = 3):
    """Pairs of template pages of ``index`` that pages would be ambiguous between (see
    :func:`layoutcheck.identify.alike_pairs`)."""
    from .identify import alike_pairs

    return alike_pairs(index, lambda tp, found: match_page(tp, found, settings), settings.tolerances.min_support,
                       settings.identify, neighbours)


def best_match(templates, found: PageElements, settings: CheckSettings):
    """The template page whose elements agree best: ``(template, page, match)``."""
    index, ident = identify_page(templates, found, settings)
    if ident.best is None:
        return None, None, None
    template, tp = index.page(ident.best.row)
    return template, tp, ident.best.match


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
    """The record's ``pose``: turn, scales and shift of the best affine approximation over the
    template page (the pose itself unless it is projective), its 2 x 3 ``matrix``, and the full
    3 x 3 ``projective`` matrix (template points -> input points)."""
    if match.pose is None:
        return None
    frame = (0.0, 0.0, tp.width, tp.height)
    p = match.pose.affine_over(frame)
    return {
        "rotation_deg": round(p.rotation_deg, 4),
        "scale": round(p.scale, 6),
        "scale_x": round(p.scale_x, 6),
        "scale_y": round(p.scale_y, 6),
        "shift_mm": [round(float(v), 3) for v in match.pose.shift_mm((tp.width, tp.height), input_size)],
        "matrix": [[round(v, 6) for v in row] for row in p.as_2x3()],
        "model": match.pose.kind,
        "projective": [[float(f"{v:.9g}") for v in row] for row in match.pose.as_3x3()],
    }


def check_page(page: VectorPage | RasterPage | PageError, templates: Sequence[Template],
               settings: CheckSettings = CheckSettings()) -> dict:
    """One JSON-ready record for one page (see the README for the fields)."""
    t0 = time.perf_counter()
    if isinstance(page, PageError):
        return error_record(page.source, page.page, page.message)
    cap = None
    try:
        if isinstance(page, RasterPage):
            from .capture import prepare

            # A photo is judged by its sheet, found on the desk and evenly lit: the desk's
            # texture must not pass for the paper's noise, nor its edges for ink.
            cap = prepare(page, camera=not page.dpi_stated)
        seen = page if cap is None else cap.page
        # A page that was read but cannot hold a form (blank, black) is "unrecognised", not
        # "error": errors are for input that could not be read at all.
        contrast = page_contrast(seen.image) if isinstance(seen, RasterPage) and seen.image.size else None
        problem = page_content_problem(seen.image, contrast) if isinstance(seen, RasterPage) else None
        if problem:
            return unrecognised_record(page.source, page.page, f"Not a form: {problem}", t0)
        found = extract(seen)
    except MemoryError:  # the worker answers for its memory limit
        raise
    except Exception as exc:  # an extractor bug on one page must not end the batch
        msg = f"{where(page.source, page.page)}: elements could not be read ({type(exc).__name__}: {exc})"
        return error_record(page.source, page.page, msg, (time.perf_counter() - t0) * 1000)
    if not found.elements:
        return unrecognised_record(page.source, page.page, "Not a form: no lines, boxes or text found on the page (blank page?)", t0)
    rec = record_for(page.source, page.page, found, templates, settings, t0, page=page, capture=cap)
    if contrast is not None and contrast.contrast < FAINT_CONTRAST and rec["template"] is not None:
        # Verified, but staff should know why OCR may struggle on this page.
        rec["findings"].append(Finding("pass", f"Faint print: the ink is only {contrast.contrast:.0f} grey levels darker "
                                       f"than the paper (clear print: over {FAINT_CONTRAST:.0f}); OCR may misread it",
                                       value=contrast.contrast, limit=FAINT_CONTRAST).to_dict())
    return rec


#: Scales considered for a photo whose sheet was found: its page is the sheet at a resolution
#: that takes the sheet's long side as its paper size's (or 11.35 in), so the form is at scale 1
#: within the spread of paper sizes (A5's 8.27 in to A3's 16.5 in long side: ISO 216; Letter
#: 11 in: ANSI).
SHEET_SCALE_RANGE = (0.7, 1.45)
#: ... and only poses that put most of the form on the sheet (a turn by a quarter that would put
#: a portrait form across a portrait sheet is not followed).
SHEET_ON_PAGE = 0.8


def camera_settings(settings: CheckSettings, sheet_found: bool = False, fine: bool = False) -> CheckSettings:
    """Settings for a camera capture: the perspective is freed whenever it is measurable, the
    agreeing set is grown region by region from the vote's cluster, and the vote takes x and y
    scales up to 15 % apart (the flattened sheet's sides are means of sides seen in perspective).
    With the sheet found, only scales near 1 and poses that put the form on the sheet are
    considered (:data:`SHEET_SCALE_RANGE`, :data:`SHEET_ON_PAGE`): a
    filled-in photo's handwriting must not pair the form's small labels with large scribbles;
    for the same reason printed text does not vote for the scale. On a sheet read ``fine`` (at
    ``--min-dpi`` or more), an element still pairs with its place under the pose found at
    :data:`SECOND_READING_SCALES` of its size, so a box shrunk by a third is found resized, not
    missing; coarser, where merged cells and lost sides leave chance partners of other sizes
    near an element's place, only scales near 1 pair (measured on the camera benchmark: pairing
    at those scales there lost a small photo's moved box and a small photo's whole form)."""
    from dataclasses import replace

    extra = {"scale_range": SHEET_SCALE_RANGE, "min_on_page": SHEET_ON_PAGE} if sheet_found else {}
    if sheet_found and fine:
        extra["pair_range"] = SECOND_READING_SCALES
    return replace(settings, solver=replace(settings.solver, perspective_min=0.0, grow=True, max_anisotropy=0.15,
                                            spread=True, text_scale=False, **extra))


def record_for(source: str, page_no: int, found: PageElements, templates: Sequence[Template],
               settings: CheckSettings, t0: float | None = None, page=None, capture=None) -> dict:
    """The record of one page from its found elements (``capture``: see :mod:`layoutcheck.capture`;
    the found elements are then those of the capture's page)."""
    from dataclasses import replace

    t0 = time.perf_counter() if t0 is None else t0
    camera = capture is not None and capture.kind == "camera"
    solve_settings = (camera_settings(settings, capture.sheet_px is not None,
                                      fine=capture.page.dpi >= settings.tolerances.min_dpi) if camera else settings)
    index, ident = identify_page(templates, found, solve_settings)
    if ident.best is None:
        msg = "no template page to compare with"
        rec = error_record(source, page_no, f"{where(source, page_no)}: {msg}")
        return rec
    match = ident.best.match
    if camera and match.pose is not None:
        first = capture
        ident, capture, found, match = second_reading(index, ident, page, capture, found, solve_settings)
        if capture is not first:
            # Read again in the template's frame: the second look matches there as it did.
            solve_settings = second_settings(solve_settings)
    template, tp = index.page(ident.best.row)
    read = page if capture is None else capture.page
    if isinstance(read, RasterPage) and match.pose is not None:
        found, match = look_again(read, found, tp, match, solve_settings)
    on_read = match
    if capture is not None and match.pose is not None:
        # One pose from template to input: the match on the capture's page, then its place on the input.
        match = replace(match, pose=match.pose.compose(capture.to_input))
    input_size = (found.width, found.height) if capture is None else (page.width, page.height)
    # A page that states its resolution is a scan unless its perspective is more than paper
    # not flat on the glass could explain: the pose departs from its best affine one by more than
    # the warp tolerance at a corner of the form.
    camera = camera or (match.pose is not None and match.pose.is_projective
                        and match.pose.perspective_over((0.0, 0.0, tp.width, tp.height)) * MM_PER_POINT
                        > settings.tolerances.max_warp_mm)
    readability = None
    plain: frozenset = frozenset()
    if camera and match.pose is not None and isinstance(page, RasterPage):
        from .capture import legible
        from .capture import readability as measure

        readability = measure(match.pose, (tp.width, tp.height), page.dpi)
        if too_small(readability, settings.tolerances) and isinstance(read, RasterPage):
            # Too small to read as a whole, yet a box moved, gone or shrunk may still show plainly.
            tol = settings.tolerances.element_tolerance_mm / MM_PER_POINT
            elements, plain = legible(on_read, tp.elements_for(found.source), read.image, read.dpi,
                                      readability.worst_dpi, tol, solve_settings.solver.status_gate)
            match = replace(match, elements=elements)
    verdict, findings = judge(match, settings.tolerances, (tp.width, tp.height), input_size, zones=tp.zones,
                              camera=camera, readability=readability, legible=plain)
    recognised = verdict != "unrecognised"
    if recognised:
        findings += routing_findings(index, ident, found, settings)
        thin = thin_finding(tp, found)
        if thin is not None:
            findings.append(thin)
        findings.sort(key=lambda f: SEVERITY[f.verdict])
        verdict = findings[0].verdict if findings else "pass"
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
        "offending": offending(match, UNCLEAR_WHEN_SMALL if camera and too_small(readability, settings.tolerances)
                               else (), plain) if recognised else [],
        "sections": [
            {"id": s.id, "name": s.name, "status": s.status, "offset_mm": [round(v, 2) for v in s.offset_mm],
             "support": round(s.support, 4), "elements": s.elements}
            for s in match.sections
        ] if recognised else [],
        "elapsed_ms": round((time.perf_counter() - t0) * 1000, 2),
        "error": None,
        "capture": "camera" if camera else "scan",
        "effective_dpi": readability.to_dict() if readability is not None and recognised else None,
    }
    if found.source == "raster":
        # Template elements found only by the second look (under a stamp, across a tick, a rule
        # broken by thresholding): in place, but worth a glance when the page is reviewed.
        rec["second_look"] = [r.id for r in match.elements if r.input_index is not None
                              and found.elements[r.input_index].source == "look"] if recognised else []
    if recognised:
        rec.update(routing_fields(index, ident, settings))
    else:
        rec["findings"][0]["message"] += f" (closest: {template.name} page {tp.number})"
        rec["closest"] = {**_names(template), "template_page": tp.number, "support": round(match.support, 4)}
    if settings.zones or settings.normalise_dir:
        handoff(rec, page, found, tp, match, settings)
    return rec


def _names(template: Template) -> dict:
    """``template``, and ``form`` and ``revision`` where the template declares them."""
    out = {"template": template.name}
    if template.form or template.revision:
        out.update(form=template.form_name, revision=template.revision)
    return out


def _revision_words(template: Template) -> str:
    return f"{template.form_name} revision {template.revision}" if template.revision else template.name


def routing_fields(index, ident, settings: CheckSettings) -> dict:
    """Record fields on how the page was routed: ``form``/``revision``, ``expected_revision``,
    ``ambiguous`` (each only where it applies)."""
    template, tp = index.page(ident.best.row)
    out = {k: v for k, v in _names(template).items() if k != "template"}
    want = settings.expected_revision(template.form_name)
    if want is not None and index.revision_row(ident.best.row, want) is not None:
        out["expected_revision"] = want
    if ident.rival is not None:
        rt, rp = index.page(ident.rival.row)
        out["ambiguous"] = {**_names(rt), "template_page": rp.number, "support": round(ident.rival.match.support, 4),
                            "margin": round(ident.best.evidence - ident.rival.evidence, 1)}
    return out


def routing_findings(index, ident, found: PageElements, settings: CheckSettings) -> list[Finding]:
    """Findings on the choice of template: another revision than the one expected; ambiguity."""
    out = []
    best = ident.best
    template, tp = index.page(best.row)
    want = settings.expected_revision(template.form_name)
    want_row = index.revision_row(best.row, want) if want is not None else None
    if want_row is not None and want_row != best.row:
        other = ident.tried.get(want_row)
        wt, wp = index.page(want_row)
        if other is None:  # the expected revision is solved here if the search did not reach it
            other_match = match_page(wp, found, settings)
        else:
            other_match = other.match
        tell = revision_differences(tp, best.match, wp, other_match, found.source, settings,
                                    (f"revision {template.revision}", f"revision {want}"))
        out.append(Finding("mismatched", f"Page is {_revision_words(template)}, not revision {want} as expected"
                           + (f": {tell[1]}" if tell[1] else ""), element=tell[0], value=None, limit=None))
    if ident.rival is not None:
        rt, rp = index.page(ident.rival.row)
        n = max(sum(e.judged for e in best.match.elements), 1)
        if rt.form_name == template.form_name and rt.name != template.name:
            tell = revision_differences(tp, best.match, rp, ident.rival.match, found.source, settings,
                                        (f"revision {template.revision}", f"revision {rt.revision}"))
            msg = (f"Ambiguous: {_revision_words(template)} and revision {rt.revision} explain this page alike "
                   f"(elements in place {best.match.support:.0%} and {ident.rival.match.support:.0%}); "
                   + (f"what tells them apart does not decide here: {tell[1]}" if tell[1]
                      else "no element tells them apart; fix the template set"))
        else:
            msg = (f"Ambiguous: {rt.name} page {rp.number} explains this page almost as well as {template.name} page "
                   f"{tp.number} ({ident.rival.match.support:.0%} of its elements in place against "
                   f"{best.match.support:.0%}); the two templates are too alike, fix the template set")
        out.append(Finding("mismatched", msg, value=float(best.evidence - ident.rival.evidence),
                           limit=float(settings.identify.ambiguity_margin * n)))
    return out


def revision_differences(tp: TemplatePage, match: Match, other_tp: TemplatePage, other: Match, source: str,
                         settings: CheckSettings, names: tuple[str, str], most: int = 4) -> tuple[str | None, str]:
    """The elements that tell two revisions apart, and how the page shows each: ``(first id, words)``.

    An element of one revision with no twin in the other (same class, every side within the
    element tolerance) tells them apart; each is said with its status against its own revision.
    """
    from .identify import told_apart

    tol = settings.tolerances.element_tolerance_mm / MM_PER_POINT
    a_els, b_els = tp.elements_for(source), other_tp.elements_for(source)
    only_a, only_b = told_apart(a_els, b_els, tol)
    status_a = {r.id: r for r in match.elements}
    status_b = {r.id: r for r in other.elements}
    words = []
    first = None
    for els, idx, status, t_words in ((a_els, only_a, status_a, names[0]), (b_els, only_b, status_b, names[1])):
        for k in sorted(idx, key=lambda k: people_first(els[k])):
            r = status.get(els[k].id)
            if r is None or not r.judged:
                continue
            first = first or r.id
            what = els[k].label()
            if r.status == "ok":
                words.append(f"{what} of {t_words} is in place")
            elif r.status == "moved" and r.offset_mm is not None:
                words.append(f"{what} of {t_words} is {float(np.hypot(*r.offset_mm)):.1f} mm off")
            else:
                words.append(f"{what} of {t_words} is {r.status}")
    shown = "; ".join(words[:most]) + (f"; and {len(words) - most} more" if len(words) > most else "")
    return first, shown


#: Most resolution at which a photo is read a second time, in its template's frame (dpi).
SECOND_READING_DPI = 200.0
#: Scales considered in the second reading (see :func:`read_again`).
SECOND_READING_SCALES = (0.6, 1.6)


def clean(match: Match) -> bool:
    """Whether every judged element of a match is in place."""
    return match.pose is not None and all(e.status == "ok" for e in match.elements if e.judged)


def settled(match: Match, tp: TemplatePage, page: RasterPage, source: str) -> bool:
    """Whether a photo's first reading, with one element out of place, stands without a second.

    ``match`` is on ``page`` (the capture's page the first reading read). It stands when exactly
    one judged element offends and the photo shows its fault plainly: found elsewhere or at
    another size (``moved``, ``resized``: the extractor found its print), or a box or checkbox
    ``missing`` whose place shows paper on every side (:func:`layoutcheck.capture.ink_probe`) and
    which is not printed about its place at another size
    (:func:`layoutcheck.capture.resized_fit`: a shrunk box is not paired by the first reading and
    is said missing). Measured on the camera benchmark's photos 0-164: the 93 whose first reading
    stands (every element in place, or this) get the same verdicts and offending elements as when
    forced to read again, and their homography's corner error is at most 2.91 photo pixels either
    way (median 1.04 against 0.92).
    """
    from .capture import ink_probe, resized_fit

    off = [r for r in match.elements if r.judged and r.status != "ok"]
    if len(off) != 1:
        return False
    r = off[0]
    if r.status in ("moved", "resized"):
        return True
    if r.status != "missing" or r.kind not in ("box", "checkbox"):
        return False
    e = next((e for e in tp.elements_for(source) if e.id == r.id), None)
    return (e is not None and ink_probe(page.image, page.dpi, e, match.pose) == "absent"
            and resized_fit(page.image, page.dpi, e, match.pose) is None)


def second_reading(index, ident, page, capture, found, settings):
    """:func:`read_again` for the chosen template page. A page that agrees with none well enough
    (its first reading may have missed the rules that tell the forms apart) is read again for
    each of the three template pages tried that it agreed with best; the best agreeing is kept.
    A page whose first reading finds every element in place, or settles it (:func:`settled`), is
    not read again. Returns ``(identification, capture, found, match)``, the identification's best being
    the template page kept, with the second reading's match."""
    from dataclasses import replace

    best = ident.best
    if clean(best.match) or settled(best.match, index.page(best.row)[1], capture.page, found.source):
        # Every element in place, or all but one whose fault the photo shows plainly: the sheet's
        # outline was good, and a second reading would find the same (measured: see settled).
        return ident, capture, found, best.match
    if best.match.support >= settings.tolerances.min_support:
        firsts = [best]
    else:
        firsts = sorted((c for c in ident.tried.values() if c.match.pose is not None),
                        key=lambda c: -c.match.support)[:3]
    kept = (best, capture, found, best.match)
    for cand in firsts:
        cap2, found2, m2 = read_again(page, capture, found, index.page(cand.row)[1], cand.match, settings)
        if cand is best and kept[3] is best.match or m2.support > kept[3].support:
            kept = (cand, cap2, found2, m2)
    cand, cap2, found2, m2 = kept
    rival = ident.rival if ident.rival is not None and ident.rival.row != cand.row else None
    return replace(ident, best=replace(cand, match=m2), rival=rival), cap2, found2, m2


def second_settings(settings: CheckSettings) -> CheckSettings:
    """Settings for matching a second reading (:func:`read_again`), and any later match on its
    page: the form now lies at scale 1 within a few percent, so only scales near it vote
    (:data:`SECOND_READING_SCALES`), while an element shrunk or grown by a third still pairs with
    its place (and is found resized)."""
    from dataclasses import replace

    return replace(settings, solver=replace(settings.solver, scale_range=SECOND_READING_SCALES))


def read_again(page: RasterPage, capture, found: PageElements, tp: TemplatePage, match: Match,
               settings: CheckSettings):
    """Read a photo a second time, in the template's frame through the first match's pose.

    The first reading sees the sheet as its outline gave it; an outline off by a few
    millimetres (a corner in shadow) leaves the rules slightly oblique to each other, and some
    are then missed. Seen through the first pose, the form is upright and square, as a flat scan
    (:func:`layoutcheck.capture.in_template_frame`). Returns ``(capture, found, match)``: the
    second reading's when it agrees at least as well, else the first's, with the match's pose
    still on the capture's page.
    """
    from .capture import in_template_frame

    pose = match.pose.compose(capture.to_input)
    centre = pose.local_scales(np.array([[tp.width / 2, tp.height / 2]]))[0]
    dpi = float(min(SECOND_READING_DPI, page.dpi * np.sqrt(centre[0] * centre[1])))
    second = in_template_frame(page, pose, (tp.width, tp.height), dpi)
    found2 = extract(second.page)
    # Seen through the first pose, the form lies where the template has it, within the first
    # pose's error: the match is refined from the identity, without a vote.
    match2 = match_page(tp, found2, second_settings(settings), near=Pose.identity())
    if match2.pose is None or match2.support < match.support:
        return capture, found, match
    return second, found2, match2


def look_again(page: RasterPage, found: PageElements, tp: TemplatePage, match: Match,
               settings: CheckSettings) -> tuple[PageElements, Match]:
    """Look again, at the place the pose predicts, for the offending rules and boxes of a scan.

    A rule found moved or resized is measured again along its ink and put on its printed span
    (:func:`layoutcheck.extract.raster.printed.printed_rules`, the rule a template learned from
    a filled scan keeps): handwriting whose tail runs on along a rule's end, or a signature's
    stroke merged with it, no longer lengthens or shifts it. What the second look finds
    (:func:`layoutcheck.extract.look.second_look`) is added to the found elements. The page is
    then matched again, so those elements are judged like any other (their ``source`` is
    ``"look"``). Pages with nothing offending, or where looking again changes nothing, are
    returned as they are.
    """
    from .consensus import RULE_KINDS
    from .extract.look import LOOK_KINDS, second_look
    from .extract.raster.printed import printed_rules

    offending = [r for r in match.elements if r.judged and r.status != "ok" and not r.in_moved_section]
    wanted = {r.id for r in offending if r.kind in LOOK_KINDS}
    partners = sorted({r.input_index for r in offending
                       if r.kind in RULE_KINDS and r.input_index is not None
                       and found.elements[r.input_index].kind in RULE_KINDS})
    if not wanted and not partners:
        return found, match
    square = square_pixels(page)
    elements = list(found.elements)
    remeasured = 0
    if partners:
        for i, (e, why) in zip(partners, printed_rules(square.image, square.dpi, [elements[i] for i in partners])):
            if why:
                elements[i] = e.replace(source="look")
                remeasured += 1
    expected = [e for e in tp.elements_for(found.source) if e.id in wanted]
    looked = [e for e in second_look(square.image, square.dpi, expected, match.pose) if e is not None]
    near = 0.5 / MM_PER_POINT
    new = []
    for e in looked:
        c, s = np.array(e.center), np.array(e.size)
        if not any(f.kind_class == e.kind_class and np.all(np.abs(np.array(f.center) - c) < near)
                   and np.all(np.abs(np.array(f.size) - s) < near) for f in elements) \
                and not any(_within_rule(e, f, near) for f in elements):
            new.append(e.replace(id=f"look-{len(new) + 1:03d}"))
    if not new and not remeasured:
        return found, match
    said = [f"{remeasured} rules put on their printed span"] * bool(remeasured) + [f"second look: {len(new)} found"] * bool(new)
    more = PageElements(found.width, found.height, tuple(elements) + tuple(new), source=found.source,
                        note="; ".join([found.note] * bool(found.note) + said), dpi_xy=found.dpi_xy)
    return more, match_page(tp, more, settings)


def _within_rule(piece: Element, rule: Element, near: float) -> bool:
    """Whether ``piece`` is a stretch of the found ``rule``: same kind, on its line (within
    ``near`` points across) and between its ends. The second look reaches only a little past
    the expected ends, so on a rule printed longer it finds a piece of it, which says nothing new.
    """
    if piece.kind != rule.kind or piece.kind not in ("hline", "vline"):
        return False
    a = 0 if piece.kind == "hline" else 1
    p0, p1, r0, r1 = piece.frame[a], piece.frame[a + 2], rule.frame[a], rule.frame[a + 2]
    return abs(piece.center[1 - a] - rule.center[1 - a]) < near and r0 - near <= p0 and p1 <= r1 + near


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

            # A photo is written at the usual resolution nearest its effective one at the form's
            # centre (its file states none; a usual value is read back as written).
            eff = (rec.get("effective_dpi") or {}).get("centre")
            dpi = settings.normalise_dpi or (float(min(USUAL_DPI, key=lambda u: abs(u - eff))) if eff else None)
            # A photo's sheet may bend: its bend is taken out too, so the page comes out flat.
            bend = match.field if rec.get("capture") == "camera" else None
            rec["normalised"] = normalise_page(page, match.pose, (tp.width, tp.height), settings.normalise_dir,
                                               dpi, settings.normalise_format, replace=settings.normalise_replace,
                                               field=bend)
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

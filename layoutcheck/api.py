"""The Python API: the one door for every caller (the command line, the demo and the watched
inbox use it and nothing below it).

Learn or load templates, then check pages held in memory or files on disk::

    import layoutcheck as lc

    templates = lc.load_templates("templates/")
    result = lc.check_page("sample_forms/inputs/101_shifted.pdf", templates)
    result.verdict, result.pose.shift_mm, result.to_record()

A page may be a path, the bytes of a file (PDF, PNG, JPEG, TIFF), a Pillow image or a numpy
array; :meth:`PageResult.to_record` is exactly the JSON Lines record ``layoutcheck verify``
writes for the same page. A page that cannot be checked raises :class:`CheckError`, whose
message names the file and page and whose ``result`` holds the error record.
"""

from __future__ import annotations

import copy
import dataclasses
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable, Sequence, Union

import numpy as np

from .batch import MEMORY_MB, PAGE_TIMEOUT_S, BatchOptions, BatchResult, OutputError, expand_inputs, run_batch
from .exitcodes import EXIT_FLAGGED, EXIT_INCOMPLETE, EXIT_PASS, EXIT_USAGE, HELP as EXIT_HELP
from .check import (CheckSettings, alike_templates, check_page as _check_page, handoff_fields, learn as _learn,
                    learning_summary, parse_pages, sample_files, update as _update)
from .index import TemplateIndex, as_index
from .report import write_report
from .sources import ReadLimits, image_page, open_document, record_path
from .summary import counts_line, summary_table
from .template import LearnError, Template, TemplateError, load_template, save_template
from .verdict import SEVERITY, VERDICTS, Tolerances
from .zones import ZoneError, apply_zone_file

__all__ = [
    "EXIT_FLAGGED", "EXIT_HELP", "EXIT_INCOMPLETE", "EXIT_PASS", "EXIT_USAGE", "MEMORY_MB", "OutputError",
    "PAGE_TIMEOUT_S", "BatchOptions", "BatchResult", "CheckError", "CheckSettings", "Finding", "LearnError", "Offending",
    "PagePose", "PageResult", "ReadLimits", "SEVERITY", "SectionResult", "Template", "TemplateError", "Tolerances",
    "VERDICTS", "ZoneError", "ZoneResult", "check_file", "check_page", "counts_line", "expand_inputs",
    "SCHEMA_VERSION", "TemplateIndex", "alike_templates", "as_index", "check_files", "learn", "learning_summary", "load_templates", "open_template_index", "parse_pages", "promote",
    "run_batch", "save_template", "schema", "show_template", "summary_table", "update_template", "write_report",
]

#: Version of the JSON Schemas shipped in ``layoutcheck/schemas/`` (their ``x-schema-version``);
#: raised whenever a record, template or zones file changes shape.
SCHEMA_VERSION = 1
SCHEMAS = ("record", "template", "zones")

#: What :func:`check_page` takes as a page.
PageInput = Union[str, os.PathLike, bytes, np.ndarray, Any]
#: What the checking functions take as templates: one, several, or paths to load them from.
TemplatesInput = Union[Template, Sequence[Template], str, os.PathLike]


class CheckError(Exception):
    """A page that could not be checked (unreadable, damaged, no template to compare with).

    The message is the record's one-line error, naming the file and page; :attr:`result` is the
    page's :class:`PageResult` (its ``to_record()`` is the error record), and :attr:`results`
    every result of the call (all pages of the file, for :func:`check_file`).
    """

    def __init__(self, result: "PageResult", results: Sequence["PageResult"] = ()):
        super().__init__(result.error)
        self.result = result
        self.results = tuple(results) or (result,)


def _from_dict(cls, d: dict):
    """A frozen result part from a record dict (lists become tuples, so nothing is mutable)."""
    def frozen(v):
        if isinstance(v, list):
            return tuple(frozen(x) for x in v)
        if isinstance(v, dict):
            return {k: frozen(x) for k, x in v.items()}
        return v

    return cls(**{f.name: frozen(d.get(f.name)) for f in dataclasses.fields(cls)})


@dataclass(frozen=True)
class PagePose:
    """The page's measured pose (see the README's record fields)."""

    #: Turn of the content, degrees, positive counterclockwise as seen.
    rotation_deg: float
    #: Content size on the input over its size on the template (physical units).
    scale: float
    scale_x: float
    scale_y: float
    #: Where the template page's centre lands relative to the input sheet's centre, mm, y down.
    shift_mm: tuple[float, float]
    #: 2 x 3 affine matrix from template points to input points.
    matrix: tuple[tuple[float, float, float], tuple[float, float, float]]


@dataclass(frozen=True)
class Finding:
    """One thing found on a page, in words a person reads."""

    verdict: str
    message: str
    element: str | None
    value: float | None
    limit: float | None


@dataclass(frozen=True)
class Offending:
    """A template element (or a whole section) out of place on the page."""

    id: str
    kind: str
    caption: str | None
    #: ``moved``, ``resized`` or ``missing``.
    status: str
    #: ``(x0, top, x1, bottom)`` in template points.
    frame: tuple[float, float, float, float]
    offset_mm: tuple[float, float] | None
    size_ratio: float | None


@dataclass(frozen=True)
class SectionResult:
    """A section of the template page as found on the input."""

    id: str
    name: str
    #: ``ok``, ``partial`` or ``moved``.
    status: str
    offset_mm: tuple[float, float]
    support: float
    elements: int


@dataclass(frozen=True)
class ZoneResult:
    """Where a named OCR zone of the template lies on the input (``in_place`` false: do not read)."""

    name: str
    origin: str
    elements: tuple[str, ...]
    frame_pt: tuple[float, float, float, float]
    #: ``px`` for scans, ``pt`` for born-digital pages.
    unit: str
    dpi: float | None
    quad: tuple[tuple[float, float], ...]
    bbox: tuple[float, float, float, float]
    in_place: bool
    status: str
    checked: dict


class PageResult:
    """The result of checking one page: the verdict and what it rests on.

    Every property is read from the page's record, so the two never disagree;
    :meth:`to_record` gives the record itself (a copy), exactly as ``verify`` writes it.
    """

    __slots__ = ("_record",)

    def __init__(self, record: dict):
        self._record = record

    def to_record(self) -> dict:
        """The JSON Lines record of this page (a fresh copy; see the README for the fields)."""
        return copy.deepcopy(self._record)

    @property
    def source(self) -> str:
        return self._record["source"]

    @property
    def page(self) -> int | None:
        return self._record["page"]

    @property
    def verdict(self) -> str:
        """``pass``, ``shifted``, ``skewed``, ``rescaled``, ``mismatched``, ``unrecognised`` or ``error``."""
        return self._record["verdict"]

    @property
    def passed(self) -> bool:
        return self._record["verdict"] == "pass"

    @property
    def template(self) -> str | None:
        return self._record["template"]

    @property
    def template_page(self) -> int | None:
        return self._record["template_page"]

    @property
    def support(self) -> float:
        return self._record["support"]

    @property
    def error(self) -> str | None:
        return self._record["error"]

    @property
    def pose(self) -> PagePose | None:
        p = self._record["pose"]
        return None if p is None else _from_dict(PagePose, p)

    @property
    def findings(self) -> tuple[Finding, ...]:
        return tuple(_from_dict(Finding, f) for f in self._record["findings"])

    @property
    def offending(self) -> tuple[Offending, ...]:
        return tuple(_from_dict(Offending, o) for o in self._record["offending"])

    @property
    def sections(self) -> tuple[SectionResult, ...]:
        return tuple(_from_dict(SectionResult, s) for s in self._record["sections"])

    @property
    def zones(self) -> tuple[ZoneResult, ...]:
        """Empty unless the check was asked for zones (``CheckSettings(zones=True)``)."""
        return tuple(_from_dict(ZoneResult, z) for z in self._record.get("zones") or ())

    def __repr__(self) -> str:
        where = f"{self.source} page {self.page}" if self.page is not None else self.source
        return f"<PageResult {where}: {self.verdict}>"


def schema(name: str = "record") -> dict:
    """The JSON Schema (draft 2020-12) of a ``record``, a ``template`` or a ``zones`` file."""
    import json
    from importlib.resources import files

    if name not in SCHEMAS:
        raise ValueError(f"no schema {name!r}; there are {', '.join(SCHEMAS)}")
    return json.loads((files("layoutcheck") / "schemas" / f"{name}.schema.json").read_text(encoding="utf-8"))


def show_template(template: Template, path: str | os.PathLike, *, reference: str | os.PathLike | None = None,
                  template_path: str | os.PathLike | None = None, dpi: float | None = None) -> Path:
    """Write a self-contained HTML page that shows what ``template`` learned (see
    :mod:`layoutcheck.report.show`); the picture is ``reference``, or the template's reference
    found beside ``template_path`` or in the current folder. Returns the page's path."""
    from .report.show import write_template_page

    return write_template_page(template, path, None if reference is None else str(reference), template_path, dpi)


# -- templates ------------------------------------------------------------------------------------
def load_templates(path: str | os.PathLike, *more: str | os.PathLike) -> tuple[Template, ...]:
    """Templates from files and folders of ``*.json`` files, in the order given (a folder sorted).

    Raises :class:`TemplateError` with a one-line message naming the file.
    """
    out: list[Template] = []
    for p in (path, *more):
        pp = Path(p)
        files = sorted(pp.glob("*.json")) if pp.is_dir() else [pp]
        if pp.is_dir() and not files:
            raise TemplateError(f"{p}: folder holds no template (*.json) files")
        out.extend(load_template(f) for f in files)
    return tuple(out)


def open_template_index(paths: Sequence[str | os.PathLike]) -> TemplateIndex:
    """Templates of files and folders as one index: signatures in arrays, elements read when a
    page needs them, stored beside the templates and refreshed when a file changes (see
    :mod:`layoutcheck.index`). A damaged file in a folder is left out and named in
    ``index.problems``; a damaged file named on its own raises :class:`TemplateError`."""
    return TemplateIndex.open([str(p) for p in paths])


def learn(references: str | os.PathLike | Sequence[str | os.PathLike], *, name: str | None = None,
          pages: str | set[int] | None = None, dpi: float | None = None, password: str | None = None,
          section_names: dict[str, str] | None = None, zones: str | os.PathLike | None = None,
          form: str | None = None, revision: str | None = None, min_dpi: float = Tolerances.min_dpi) -> Template:
    """Learn a template from a reference (a blank PDF or a clean scan) or several good samples.

    ``pages`` is ``"1,3-4"`` or a set of 1-based page numbers (default: all); ``dpi`` is assumed
    for reference scans that state none; ``section_names`` maps found section ids to names;
    ``zones`` is a zones JSON file; ``form`` and ``revision`` declare the template a revision of
    a form (``form`` defaults to the template's name); ``min_dpi`` is the least effective
    resolution anywhere on a photographed reference. Raises :class:`LearnError` naming the file
    and page.
    """
    refs = [references] if isinstance(references, (str, os.PathLike)) else list(references)
    wanted = parse_pages(pages) if isinstance(pages, str) else pages
    template = _learn(sample_files([str(r) for r in refs]), name=name, pages=wanted,
                      limits=ReadLimits(dpi=dpi, password=password), section_names=section_names, min_dpi=min_dpi)
    if form or revision:
        template = dataclasses.replace(template, form=form or template.form or template.name,
                                       revision=revision or template.revision)
    return apply_zone_file(template, zones) if zones else template


def update_template(template: Template | str | os.PathLike,
                    samples: str | os.PathLike | Sequence[str | os.PathLike], *, dpi: float | None = None,
                    password: str | None = None, zones: str | os.PathLike | None = None) -> Template:
    """A template learned from scanned samples, grown by more of them (files or folders).

    An element is kept when it is on more than half of all the samples so far (the template's
    own counting for those it was learned from), else set aside; see
    :func:`layoutcheck.samples.update_template`. Raises :class:`LearnError` (or
    :class:`TemplateError` for an unreadable template file) naming the file.
    """
    if not isinstance(template, Template):
        template = load_template(template)
    paths = [samples] if isinstance(samples, (str, os.PathLike)) else list(samples)
    grown = _update(template, [str(p) for p in paths], ReadLimits(dpi=dpi, password=password))
    return apply_zone_file(grown, zones) if zones else grown


def promote(template: Template, page: int, element_id: str) -> Template:
    """The template with a set-aside element of ``page`` taken into the form (a person's call)."""
    from .samples import promote as _promote

    return _promote(template, page, element_id)


def _templates(templates: TemplatesInput) -> tuple[Template, ...]:
    if isinstance(templates, Template):
        return (templates,)
    if isinstance(templates, (str, os.PathLike)):
        return load_templates(templates)
    out = tuple(templates)
    if not out or not all(isinstance(t, Template) for t in out):
        raise TypeError("templates must be a Template, a sequence of them, or a path to load them from")
    return out


# -- checking -------------------------------------------------------------------------------------
def check_page(image: PageInput, templates: TemplatesInput, *, page: int = 1, dpi: float | None = None,
               source: str | None = None, settings: CheckSettings = CheckSettings(),
               limits: ReadLimits = ReadLimits()) -> PageResult:
    """Check one page against the templates.

    Parameters
    ----------
    image : path, bytes, PIL.Image.Image or numpy.ndarray
        The page: a file path (page ``page`` of it), the bytes of a PDF or image file, a Pillow
        image, or an array: ``(H, W)`` grey or ``(H, W, 3|4)`` RGB(A) ``uint8``, or ``(H, W)``
        bool with True for paper (as Pillow's bitonal mode "1").
    templates : Template, sequence of Template, or path
        Forms to compare with; a path (file or folder) is loaded.
    page : int
        1-based page of a multi-page file or bytes.
    dpi : float, optional
        Resolution of the image. For files, bytes and Pillow images it is used only when the
        image states none (as ``verify --dpi``). None for an array (or an image stating none):
        a camera capture: the sheet is found, its perspective and light corrected, and the
        effective resolution measured from the form (``capture`` and ``effective_dpi`` in the
        record; see :mod:`layoutcheck.capture`).
    source : str, optional
        Name of an in-memory page in the record and in messages (default ``"image"``); a path
        names itself, made absolute as in every record.
    settings, limits
        What is judged and how (tolerances, zones, normalised output), and read limits.

    Returns
    -------
    PageResult

    Raises
    ------
    CheckError
        The page could not be checked; the message names the file and page.
    """
    tmpl = _templates(templates)
    lim = dataclasses.replace(limits, dpi=dpi) if dpi is not None else limits
    if isinstance(image, (str, os.PathLike)):
        rec = _check_document(record_path(image), tmpl, settings, lim, page)
    elif isinstance(image, (bytes, bytearray, memoryview)):
        rec = _check_document(source or "image", tmpl, settings, lim, page, data=bytes(image))
    else:
        rec = _check_picture(image, source or "image", page, dpi, tmpl, settings, lim)
    result = PageResult(handoff_fields(rec, settings))
    if result.verdict == "error":
        raise CheckError(result)
    return result


def _check_document(name: str, templates, settings, limits, page: int, data: bytes | None = None) -> dict:
    """Record of page ``page`` of the file ``name``, or of the file content ``data`` so named."""
    from .check import error_record
    from .sources import PageError, where

    with open_document(name, limits, {page}, data=data) as doc:
        if page not in doc.plan:
            errors = [e for e in doc.plan if isinstance(e, PageError)]
            e = errors[0] if errors else PageError(name, page, f"{where(name, page)}: no such page")
            return error_record(name, e.page, e.message)
        return _check_page(doc.page(page), templates, settings)


def _check_picture(image, name: str, page: int, dpi: float | None, templates, settings, limits) -> dict:
    """Record of an in-memory picture: a Pillow image or a numpy array."""
    from PIL import Image

    if isinstance(image, np.ndarray):
        image = _array_image(image, name)
    if not isinstance(image, Image.Image):
        raise TypeError(f"{name}: a page is a path, bytes, a PIL image or a numpy array, not {type(image).__name__}")
    # A resolution given here stands where the image states none; with none at all the page is
    # a camera capture, whose scale is measured from the form (see :mod:`layoutcheck.capture`).
    pg = image_page(name, page, image, dataclasses.replace(limits, dpi=dpi) if dpi else limits)
    return _check_page(pg, templates, settings)


def _array_image(arr: np.ndarray, name: str):
    """A Pillow image of an array, decoded the way a file of the same pixels would be."""
    from PIL import Image

    if arr.dtype == bool and arr.ndim == 2:
        return Image.fromarray(arr)  # mode "1": True is white paper
    if arr.dtype != np.uint8:
        raise ValueError(f"{name}: a page array must be uint8 (or bool), not {arr.dtype}")
    if arr.ndim == 2 or (arr.ndim == 3 and arr.shape[2] in (3, 4)):
        return Image.fromarray(np.ascontiguousarray(arr))
    raise ValueError(f"{name}: a page array must be (H, W), (H, W, 3) or (H, W, 4), not {arr.shape}")


def check_file(path: str | os.PathLike, templates: TemplatesInput, *, settings: CheckSettings = CheckSettings(),
               limits: ReadLimits = ReadLimits(), errors: str = "raise") -> list[PageResult]:
    """Check every page of one file, in page order, as ``verify`` does (same records).

    ``errors="raise"`` raises :class:`CheckError` for the first page that could not be checked
    (its ``results`` holds every page's result); ``errors="keep"`` returns error results among
    the others.
    """
    if errors not in ("raise", "keep"):
        raise ValueError(f"errors must be 'raise' or 'keep', not {errors!r}")
    out = run_batch([str(path)], _templates(templates), settings, limits, output=None,
                    options=BatchOptions(keep_records=True))
    results = [PageResult(r) for r in out.records]
    failed = [r for r in results if r.verdict == "error"]
    if failed and errors == "raise":
        raise CheckError(failed[0], results)
    return results


def check_files(inputs: Sequence[str | os.PathLike], templates: TemplatesInput, *,
                settings: CheckSettings = CheckSettings(), limits: ReadLimits = ReadLimits(),
                output: str | os.PathLike | None = None, options: BatchOptions = BatchOptions(),
                progress: Callable[[int, int], None] | None = None) -> BatchResult:
    """Check many files (paths, folders, globs), writing records to ``output`` as ``verify`` does."""
    return run_batch(expand_inputs([str(p) for p in inputs]), _templates(templates), settings, limits,
                     output=None if output is None else str(output), options=options, progress=progress)

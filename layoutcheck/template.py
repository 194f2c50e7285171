"""The template of a form: its pages, sections and elements, as a relation graph.

A template page holds every element of the reference with its frame, the sections the elements
fall into, and (for verifying scans) the elements as the raster extractor sees a rendering of the
reference. :attr:`Template.graph` is the networkx relation graph ``page -> section -> element``:
each edge carries the part's expected offset and scale relative to the whole's frame, and
neighbour edges join nearby elements. Saved as our own versioned JSON; :func:`load_template`
validates it and refuses broken or newer files with a one-line message.

No solving happens here.
"""

from __future__ import annotations

import contextlib
import dataclasses
import json
import math
import os
from dataclasses import dataclass, field
from functools import cached_property
from typing import Iterable, Sequence

import networkx as nx
import numpy as np

from .elements import Element, PageElements, frame_contains, frame_overlap, merge_frames

#: Version 2 adds the optional ``form`` and ``revision`` fields; a template without them is still
#: written as version 1, so layoutcheck releases that read only version 1 keep reading it.
FORMAT_VERSION = 2
FORMAT_NAME = "layoutcheck-template"

#: Bounds on what a template or zones file may hold; a file beyond them is refused with one line,
#: before (size) or while (counts, numbers) it is read, so a hostile file costs bounded time and
#: memory. The demo templates are under 100 KB with under 400 elements a page.
MAX_JSON_BYTES = 32 * 1024 * 1024
MAX_PAGES = 1000
MAX_ITEMS_PER_PAGE = 100_000
#: Largest page side, points: the PDF format's own limit of 14,400 units (ISO 32000-1, Annex C;
#: from memory). Element and zone frames may reach at most this far beyond the page.
MAX_PAGE_POINTS = 14_400.0


class TemplateError(Exception):
    """A template file that cannot be used; the message is one line naming the file."""


class LearnError(Exception):
    """A reference that cannot be learned from; one line naming the file and page."""


@dataclass(frozen=True)
class Section:
    """A part of a page that belongs together: a bordered panel or a band between rules."""

    id: str
    name: str
    frame: tuple[float, float, float, float]
    element_ids: tuple[str, ...]

    def to_dict(self) -> dict:
        return {"id": self.id, "name": self.name, "frame": [round(v, 3) for v in self.frame],
                "elements": list(self.element_ids)}

    @classmethod
    def from_dict(cls, d: dict) -> "Section":
        return cls(str(d["id"]), str(d.get("name") or d["id"]), tuple(float(v) for v in d["frame"]),  # type: ignore[arg-type]
                   tuple(str(e) for e in d["elements"]))


@dataclass(frozen=True)
class Zone:
    """A named area of a page that OCR reads, such as a form field or a captioned box.

    ``frame`` is ``(x0, top, x1, bottom)`` in template points; ``element_ids`` are the template
    elements (field, box) whose place decides whether the zone can be trusted on an input;
    ``origin`` says where it came from: ``"field"``, ``"box"`` or ``"file"`` (a zones file).
    """

    name: str
    frame: tuple[float, float, float, float]
    element_ids: tuple[str, ...] = ()
    origin: str = "box"

    def to_dict(self) -> dict:
        return {"name": self.name, "frame": [round(v, 3) for v in self.frame],
                "elements": list(self.element_ids), "origin": self.origin}

    @classmethod
    def from_dict(cls, d: dict) -> "Zone":
        return cls(str(d["name"]), tuple(float(v) for v in d["frame"]),  # type: ignore[arg-type]
                   tuple(str(e) for e in d.get("elements", [])), str(d.get("origin", "box")))


@dataclass(frozen=True)
class TemplatePage:
    """One page of a template."""

    number: int
    width: float
    height: float
    elements: tuple[Element, ...]
    sections: tuple[Section, ...]
    #: The same page as the raster extractor sees a clean rendering of it (ids shared with
    #: ``elements`` where the two agree), used when the input is a scan.
    raster_elements: tuple[Element, ...] = ()
    #: Extra tolerance per element id, in points, learned from good samples.
    slack: dict = field(default_factory=dict)
    #: Element ids that were not found on every good sample.
    unstable: tuple[str, ...] = ()
    #: Named zones for OCR (see :mod:`layoutcheck.zones`); empty in templates written before them.
    zones: tuple[Zone, ...] = ()
    #: Elements of a scanned sample set aside as probable fill-in (handwriting, a stamp): kept
    #: so a person can see them and promote one (:func:`promote`), never matched or judged.
    set_aside: tuple[Element, ...] = ()
    #: Element id -> why it was set aside (or cut to its printed span), in plain words.
    set_aside_why: dict = field(default_factory=dict)
    #: How many scanned samples the page was learned from (0: a blank PDF or unknown).
    samples: int = 0
    #: Element id -> on how many of those samples it was found (kept and set-aside elements),
    #: so that more samples can be added with the same majority rule (``learn --update``).
    seen: dict = field(default_factory=dict)

    def elements_for(self, source: str) -> tuple[Element, ...]:
        """The element set to compare an input of this source ("vector" or "raster") with."""
        if source == "raster" and self.raster_elements:
            return self.raster_elements
        return self.elements

    def section_of(self) -> dict[str, str]:
        """Element id -> section id."""
        return {eid: s.id for s in self.sections for eid in s.element_ids}

    def to_dict(self) -> dict:
        return {
            "number": self.number,
            "width": round(self.width, 3),
            "height": round(self.height, 3),
            "elements": [e.to_dict() for e in self.elements],
            "sections": [s.to_dict() for s in self.sections],
            "raster_elements": [e.to_dict() for e in self.raster_elements],
            "slack": {k: round(float(v), 3) for k, v in self.slack.items()},
            "unstable": list(self.unstable),
            "zones": [z.to_dict() for z in self.zones],
            **self._sample_fields(),
        }

    def _sample_fields(self) -> dict:
        """The fields of a page learned from scanned samples (absent for a blank reference)."""
        out: dict = {}
        if self.samples:
            out["samples"] = self.samples
        if self.seen:
            out["seen"] = {k: int(v) for k, v in self.seen.items()}
        if self.set_aside:
            out["set_aside"] = [e.to_dict() for e in self.set_aside]
        if self.set_aside_why:
            out["set_aside_why"] = dict(self.set_aside_why)
        return out

    @classmethod
    def from_dict(cls, d: dict) -> "TemplatePage":
        return cls(
            number=int(d["number"]),
            width=float(d["width"]),
            height=float(d["height"]),
            elements=tuple(Element.from_dict(e) for e in d["elements"]),
            sections=tuple(Section.from_dict(s) for s in d["sections"]),
            raster_elements=tuple(Element.from_dict(e) for e in d.get("raster_elements", [])),
            slack={str(k): float(v) for k, v in d.get("slack", {}).items()},
            unstable=tuple(d.get("unstable", [])),
            zones=tuple(Zone.from_dict(z) for z in d.get("zones", [])),
            set_aside=tuple(Element.from_dict(e) for e in d.get("set_aside", [])),
            set_aside_why={str(k): str(v) for k, v in d.get("set_aside_why", {}).items()},
            samples=int(d.get("samples", 0)),
            seen={str(k): int(v) for k, v in d.get("seen", {}).items()},
        )


@dataclass(frozen=True)
class Template:
    """A learned form: a name and its pages.

    ``form`` and ``revision`` say that the template is one revision of a form: templates that
    share a ``form`` are revisions of each other, and a page goes to the revision it matches
    best (see :mod:`layoutcheck.identify`). A template without a ``form`` is a form of its own,
    named ``name``.
    """

    name: str
    pages: tuple[TemplatePage, ...]
    references: tuple[str, ...] = ()
    #: Plain warnings about how sure the template is (say, learned from one filled scan).
    warnings: tuple[str, ...] = ()
    form: str | None = None
    revision: str | None = None

    @property
    def form_name(self) -> str:
        """The form this template is a revision of (its own name when it declares none)."""
        return self.form or self.name

    def page(self, number: int) -> TemplatePage:
        return self.pages[number - 1]

    @cached_property
    def graph(self) -> nx.DiGraph:
        """Relation graph: ``page`` -> ``section`` -> ``element`` plus neighbour edges."""
        return build_graph(self)

    def to_dict(self) -> dict:
        out = {
            "format": FORMAT_NAME,
            "format_version": FORMAT_VERSION if self.form or self.revision else 1,
            "name": self.name,
        }
        if self.form or self.revision:
            out.update(form=self.form, revision=self.revision)
        out.update(references=list(self.references), pages=[p.to_dict() for p in self.pages])
        if self.warnings:
            out["warnings"] = list(self.warnings)
        return out


# -- sections -------------------------------------------------------------------------------------
def find_sections(elements: Sequence[Element], width: float, height: float,
                  names: dict[str, str] | None = None) -> tuple[Section, ...]:
    """Sections of a page: bordered panels, else bands split by full-width rules or wide gaps.

    A panel is a box of at least a tenth of the content width's square that holds three or more
    other elements and is not the page border. Outside panels, a horizontal rule spanning 70 % of
    the content width, or an empty gap of 8 mm or more, starts a new band. Every element ends up
    in exactly one section; a section's name is its first label (or ``names[id]``).
    """
    els = list(elements)
    if not els:
        return ()
    content = merge_frames(e.frame for e in els)
    cw = content[2] - content[0]
    ch = content[3] - content[1]
    boxes = [e for e in els if e.kind == "box"]
    panels = []
    for b in sorted(boxes, key=lambda e: -(e.size[0] * e.size[1])):
        w, h = b.size
        if w >= 0.9 * cw and h >= 0.9 * ch:
            continue  # the page border
        if w * h < (0.1 * cw) ** 2:
            continue
        inside = [e for e in els if e is not b and frame_contains(b.frame, e.frame, 1.0)]
        if len(inside) >= 3 and not any(frame_contains(p.frame, b.frame, 1.0) for p in panels):
            panels.append(b)
    assigned: dict[str, int] = {}
    groups: list[list[Element]] = []
    for p in panels:
        members = [p] + [e for e in els if e is not p and e.id not in assigned and frame_contains(p.frame, e.frame, 1.0)]
        groups.append(members)
        for e in members:
            assigned[e.id] = len(groups) - 1
    rest = [e for e in els if e.id not in assigned]
    rest.sort(key=lambda e: (e.frame[1], e.frame[0]))
    gap = 8.0 / 25.4 * 72.0  # 8 mm, in points
    band: list[Element] = []
    bottom = None
    for e in rest:
        rule = e.kind == "hline" and e.size[0] >= 0.7 * cw
        # Only a gap beside no panel counts: rows of panels stand side by side.
        if band and (rule or (bottom is not None and e.frame[1] - bottom >= gap)):
            groups.append(band)
            band = []
            bottom = None
        band.append(e)
        bottom = e.frame[3] if bottom is None else max(bottom, e.frame[3])
    if band:
        groups.append(band)
    groups.sort(key=lambda g: (merge_frames(x.frame for x in g)[1], merge_frames(x.frame for x in g)[0]))
    out = []
    for k, g in enumerate(groups, start=1):
        sid = f"section-{k:02d}"
        frame = merge_frames(x.frame for x in g)
        labels = sorted((x for x in g if x.kind in ("label", "textblock") and x.text), key=lambda x: (x.frame[1], x.frame[0]))
        name = (names or {}).get(sid) or (labels[0].text if labels else sid)
        out.append(Section(sid, name[:80], frame, tuple(x.id for x in g)))
    return tuple(out)


# -- the graph ------------------------------------------------------------------------------------
def _relation(part: Sequence[float], whole: Sequence[float]) -> dict:
    """Offset of a part's centre from the whole's top-left, and its size relative to the whole."""
    ww = max(whole[2] - whole[0], 1e-9)
    wh = max(whole[3] - whole[1], 1e-9)
    cx, cy = (part[0] + part[2]) / 2, (part[1] + part[3]) / 2
    return {
        "offset": (cx - whole[0], cy - whole[1]),
        "offset_rel": ((cx - whole[0]) / ww, (cy - whole[1]) / wh),
        "scale": ((part[2] - part[0]) / ww, (part[3] - part[1]) / wh),
    }


def build_graph(template: Template, neighbours: int = 4) -> nx.DiGraph:
    """The relation graph of a template (see module docs)."""
    g = nx.DiGraph(name=template.name)
    for p in template.pages:
        pid = f"page-{p.number}"
        pframe = (0.0, 0.0, p.width, p.height)
        g.add_node(pid, level="page", frame=pframe, number=p.number)
        by_id = {e.id: e for e in p.elements}
        for s in p.sections:
            sid = f"{pid}/{s.id}"
            g.add_node(sid, level="section", frame=s.frame, name=s.name)
            g.add_edge(pid, sid, relation="part", **_relation(s.frame, pframe))
            for eid in s.element_ids:
                e = by_id.get(eid)
                if e is None:
                    continue
                nid = f"{pid}/{eid}"
                g.add_node(nid, level="element", kind=e.kind, frame=e.frame, caption=e.caption, section=sid)
                g.add_edge(sid, nid, relation="part", **_relation(e.frame, s.frame))
        if len(p.elements) > 1:
            from scipy.spatial import cKDTree

            centres = np.array([e.center for e in p.elements])
            tree = cKDTree(centres)
            k = min(neighbours + 1, len(centres))
            dist, idx = tree.query(centres, k=k)
            for i, e in enumerate(p.elements):
                for d, j in zip(np.atleast_1d(dist[i])[1:], np.atleast_1d(idx[i])[1:]):
                    o = p.elements[int(j)]
                    g.add_edge(f"{pid}/{e.id}", f"{pid}/{o.id}", relation="neighbour",
                               offset=(o.center[0] - e.center[0], o.center[1] - e.center[1]), distance=float(d))
    return g


# -- learning -------------------------------------------------------------------------------------
def match_raster_to_vector(raster: Iterable[Element], vector: Sequence[Element], tol: float = 3.0) -> list[Element]:
    """Give raster elements the id, caption and stroke of the vector element drawn in the same place.

    Unmatched raster elements keep an id of their own, prefixed ``r-``, and take the caption of
    the vector label that overlaps them, if any.
    """
    vec = list(vector)
    out = []
    used: set[str] = set()
    for r in raster:
        best, best_d = None, tol
        for v in vec:
            if v.kind_class != r.kind_class or v.id in used:
                continue
            d = max(abs(a - b) for a, b in zip(r.frame, v.frame))
            if d < best_d:
                best, best_d = v, d
        if best is not None:
            used.add(best.id)
            out.append(r.replace(id=best.id, kind=best.kind if best.kind_class == r.kind_class else r.kind,
                                 caption=best.caption, text=best.text, stroke=best.stroke))
        else:
            cap = None
            for v in vec:
                if v.kind in ("label", "textblock") and v.text and frame_overlap(v.frame, r.frame) > 0.3 * (r.size[0] * r.size[1]):
                    cap = v.text
                    break
            out.append(r.replace(id=f"r-{r.id}", caption=cap or r.caption, text=cap if r.kind == "label" else r.text))
    return out


def template_page(number: int, vector: PageElements | None, raster: PageElements | None,
                  section_names: dict[str, str] | None = None) -> TemplatePage:
    """A template page from the elements of one reference page (vector, raster or both)."""
    if vector is not None:
        elements = tuple(vector.elements)
        width, height = vector.width, vector.height
        raster_elements = tuple(match_raster_to_vector(raster.elements, elements)) if raster is not None else ()
    elif raster is not None:
        elements = tuple(raster.elements)
        width, height = raster.width, raster.height
        raster_elements = elements
    else:
        raise ValueError("a template page needs vector or raster elements")
    sections = find_sections(elements, width, height, section_names)
    return TemplatePage(number, width, height, elements, sections, raster_elements)


def with_raster_sections(page: TemplatePage) -> TemplatePage:
    """Put raster-only elements into the section whose frame holds their centre."""
    known = {eid for s in page.sections for eid in s.element_ids}
    extra: dict[str, list[str]] = {s.id: [] for s in page.sections}
    for e in page.raster_elements:
        if e.id in known or not page.sections:
            continue
        cx, cy = e.center
        best = min(page.sections, key=lambda s: _frame_distance(s.frame, cx, cy))
        extra[best.id].append(e.id)
    sections = tuple(Section(s.id, s.name, s.frame, s.element_ids + tuple(extra[s.id])) for s in page.sections)
    return dataclasses.replace(page, sections=sections)


def _frame_distance(f: Sequence[float], x: float, y: float) -> float:
    dx = max(f[0] - x, 0.0, x - f[2])
    dy = max(f[1] - y, 0.0, y - f[3])
    return float(np.hypot(dx, dy))


# -- saving and loading ---------------------------------------------------------------------------
def save_template(template: Template, path: str | os.PathLike) -> None:
    """Write the template as JSON (atomically: a crash never leaves half a file)."""
    tmp = f"{path}.tmp"
    try:
        with open(tmp, "w", encoding="utf-8") as fh:
            json.dump(template.to_dict(), fh, indent=1, ensure_ascii=False)
            fh.write("\n")
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)  # a full disk must not leave a stray temporary file
        raise


def template_from_dict(data: object, where: str = "template") -> Template:
    """Validate and build a template from parsed JSON."""
    if not isinstance(data, dict) or data.get("format") != FORMAT_NAME:
        raise TemplateError(f"{where}: not a layoutcheck template (no \"format\": \"{FORMAT_NAME}\")")
    version = data.get("format_version")
    if not isinstance(version, int):
        raise TemplateError(f"{where}: template has no valid format_version")
    if version > FORMAT_VERSION:
        raise TemplateError(f"{where}: template format_version {version} is newer than this layoutcheck reads ({FORMAT_VERSION}); upgrade layoutcheck")
    if version < 1:
        raise TemplateError(f"{where}: template format_version {version} is not valid")
    raw_pages = data.get("pages")
    if isinstance(raw_pages, list) and len(raw_pages) > MAX_PAGES:
        raise TemplateError(f"{where}: template has {len(raw_pages):,} pages, more than {MAX_PAGES:,}")
    for k, p in enumerate(raw_pages if isinstance(raw_pages, list) else [], start=1):
        for key in ("elements", "raster_elements", "sections", "zones"):
            items = p.get(key) if isinstance(p, dict) else None
            if isinstance(items, (list, dict)) and len(items) > MAX_ITEMS_PER_PAGE:
                raise TemplateError(f"{where}: template page {k} has {len(items):,} {key}, more than {MAX_ITEMS_PER_PAGE:,}")
    try:
        pages = tuple(TemplatePage.from_dict(p) for p in data["pages"])
        name = str(data["name"])
        references = tuple(str(r) for r in data.get("references") or [])
        warnings = tuple(str(w) for w in data.get("warnings") or [])
        form = _optional_text(data.get("form"), "form")
        revision = _optional_text(data.get("revision"), "revision")
    except (KeyError, TypeError, ValueError, IndexError, AttributeError, OverflowError, RecursionError) as exc:
        raise TemplateError(f"{where}: template is damaged ({type(exc).__name__}: {' '.join(str(exc).split())[:200]})") from None
    if not pages:
        raise TemplateError(f"{where}: template has no pages")
    for p in pages:
        if not (0 < p.width <= MAX_PAGE_POINTS and 0 < p.height <= MAX_PAGE_POINTS):
            raise TemplateError(f"{where}: template page {p.number} has an invalid size "
                                f"(each side must be above 0 and at most {MAX_PAGE_POINTS:g} points)")
        ids = [e.id for e in p.elements]
        if len(set(ids)) != len(ids):
            raise TemplateError(f"{where}: template page {p.number} repeats element ids")
        for e in p.elements + p.raster_elements + p.set_aside:
            if not all(isinstance(v, str) or v is None for v in (e.text, e.caption)):
                raise TemplateError(f"{where}: template page {p.number} element {e.id[:80]} has text that is not a string")
            if not _frame_ok(e.frame) or not (e.angle is None or math.isfinite(e.angle)):
                raise TemplateError(f"{where}: template page {p.number} element {e.id[:80]} has an invalid frame")
        for s in p.sections:
            if not _frame_ok(s.frame):
                raise TemplateError(f"{where}: template page {p.number} section {s.id[:80]} has an invalid frame")
        for z in p.zones:
            if not _frame_ok(z.frame):
                raise TemplateError(f"{where}: template page {p.number} zone {z.name[:80]!r} has an invalid frame")
    return Template(name, pages, references, warnings, form, revision)


def _optional_text(value: object, what: str) -> str | None:
    """A form or revision field: text, a whole number (kept as its digits) or null."""
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, (str, int)):
        raise ValueError(f"{what} must be text or a whole number, not {value!r}")
    text = str(value).strip()
    return text or None


def _frame_ok(frame) -> bool:
    """Four finite numbers, in order (x0 <= x1, top <= bottom), within the bounds of a page."""
    return (len(frame) == 4 and all(math.isfinite(v) and abs(v) <= 2 * MAX_PAGE_POINTS for v in frame)
            and frame[0] <= frame[2] and frame[1] <= frame[3])


def read_json_file(path: str | os.PathLike, what: str, error: type[Exception]):
    """Parsed JSON of a file; ``error`` with a one-line message naming the file otherwise."""
    where = os.path.basename(str(path))
    try:
        with open(path, "rb") as fh:
            # Read at most one byte past the limit: a file that is too big, or one that keeps
            # growing (a pipe, a device), is refused without being read whole.
            raw = fh.read(MAX_JSON_BYTES + 1)
    except FileNotFoundError:
        raise error(f"{where}: no such {what}{'' if what.endswith('file') else ' file'}") from None
    except OSError as exc:
        raise error(f"{where}: {what} cannot be read ({exc.strerror})") from None
    if len(raw) > MAX_JSON_BYTES:
        raise error(f"{where}: {what} is larger than {MAX_JSON_BYTES // (1024 * 1024)} MB; not read")
    try:
        return json.loads(raw.decode("utf-8"), parse_constant=_no_constant)
    except (json.JSONDecodeError, UnicodeDecodeError, ValueError) as exc:
        raise error(f"{where}: {what} is not valid JSON ({' '.join(str(exc).split())[:200]})") from None
    except RecursionError:
        raise error(f"{where}: {what} is nested too deeply to be a {what}") from None


def _no_constant(name: str):
    """NaN and Infinity are not JSON (RFC 8259), though Python's reader accepts them."""
    raise ValueError(f"{name} is not a JSON number")


def load_template(path: str | os.PathLike) -> Template:
    """Read and validate a template file; raises :class:`TemplateError` with a one-line message."""
    return template_from_dict(read_json_file(path, "template", TemplateError), os.path.basename(str(path)))

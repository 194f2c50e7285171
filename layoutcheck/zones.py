"""Zones for OCR: named areas of a template, and where each one lies on an input page.

A zone is a :class:`~layoutcheck.template.Zone`: a name, a frame in template points and the
template elements that decide whether it can be trusted. A learned template carries zones from
its form fields (the field name is the zone name) or, on a page without fields, from its boxes
and checkboxes (the caption, made slug-like, is the name). A zones file adds or replaces zones::

    {"zones": [{"name": "vessel_name", "page": 1, "frame": [51, 147, 312, 173]}]}

with frames ``[x0, top, x1, bottom]`` in points (top-left origin, y down) and an optional
``"elements"`` list of element ids.

On an input page, :func:`zone_records` maps each zone through the measured pose: four corners
(the page may be turned), an axis-aligned pixel box for cropping, and ``in_place``: false when
one of the zone's own elements was found moved, resized or missing, so OCR does not read a place
where the form has something else.
"""

from __future__ import annotations

import dataclasses
import math
import os
import re
import unicodedata
from typing import Iterable, Sequence

import numpy as np

from .elements import POINTS_PER_INCH, Element, frame_contains, frame_overlap
from .template import LearnError, Template, TemplatePage, Zone, read_json_file

#: Element kinds a zone may be made from when a page has no form fields.
BOX_KINDS = ("box", "checkbox")


class ZoneError(LearnError):
    """A zones file that cannot be used: one line naming the file and the zone."""


# -- names ----------------------------------------------------------------------------------------
def slug(text: str | None, fallback: str) -> str:
    """Lower-case ``a-z0-9_`` name from a caption: ``"Length overall (m)"`` -> ``length_overall_m``."""
    t = unicodedata.normalize("NFKD", text or "").encode("ascii", "ignore").decode("ascii")
    t = re.sub(r"[^a-z0-9]+", "_", t.lower()).strip("_")
    if not t:
        t = re.sub(r"[^a-z0-9]+", "_", fallback.lower()).strip("_") or "zone"
    if t[0].isdigit():
        t = f"z_{t}"
    return t[:60]


def unique_names(names: Iterable[str]) -> list[str]:
    """Names made unique in order: the second ``date`` becomes ``date_2``, the third ``date_3``."""
    seen: dict[str, int] = {}
    taken = set()
    out = []
    for n in names:
        if n not in taken:
            seen.setdefault(n, 1)
            taken.add(n)
            out.append(n)
            continue
        k = seen.get(n, 1)
        while True:
            k += 1
            cand = f"{n}_{k}"
            if cand not in taken:
                break
        seen[n] = k
        taken.add(cand)
        out.append(cand)
    return out


# -- zones of a page ------------------------------------------------------------------------------
def _container(frame: Sequence[float], boxes: Sequence[Element], margin: float = 2.0) -> Element | None:
    """The smallest box holding ``frame`` (within ``margin`` points)."""
    holding = [b for b in boxes if frame_contains(b.frame, frame, margin)]
    if not holding:
        return None
    return min(holding, key=lambda b: b.size[0] * b.size[1])


def _leaf_boxes(elements: Sequence[Element]) -> list[Element]:
    """Boxes and checkboxes that hold no other box, checkbox or field: the places one writes in."""
    boxes = [e for e in elements if e.kind in BOX_KINDS]
    inner = [e for e in elements if e.kind in BOX_KINDS + ("field",)]
    out = []
    for b in boxes:
        if any(o is not b and o.kind != "field" and frame_contains(b.frame, o.frame, 0.5) for o in inner):
            continue
        out.append(b)
    return out


def page_zones(page: TemplatePage) -> tuple[Zone, ...]:
    """Zones of a template page: its form fields, or else its leaf boxes and checkboxes.

    A field zone also names the box it sits in, so its place can be judged on a scan (where a
    field is not visible). Names are unique on the page.
    """
    els = page.elements
    fields = [e for e in els if e.kind == "field"]
    boxes = [e for e in els if e.kind in BOX_KINDS]
    raw: list[tuple[str, tuple, tuple[str, ...], str]] = []
    if fields:
        for f in fields:
            holder = _container(f.frame, boxes)
            ids = (f.id,) + ((holder.id,) if holder is not None else ())
            raw.append((slug(f.text or f.caption, f.id), f.frame, ids, "field"))
    else:
        for b in _leaf_boxes(els):
            raw.append((slug(b.caption, b.id), b.frame, (b.id,), "box"))
    names = unique_names(r[0] for r in raw)
    return tuple(Zone(n, r[1], r[2], r[3]) for n, r in zip(names, raw))


def with_zones(template: Template) -> Template:
    """The template with learned zones on every page that has none yet."""
    pages = tuple(p if p.zones else _replace_zones(p, page_zones(p)) for p in template.pages)
    return dataclasses.replace(template, pages=pages)


def zones_of(page: TemplatePage) -> tuple[Zone, ...]:
    """The page's zones; learned on the fly for a template written before zones existed."""
    return page.zones if page.zones else page_zones(page)


def _replace_zones(page: TemplatePage, zones: Sequence[Zone]) -> TemplatePage:
    return dataclasses.replace(page, zones=tuple(zones))


# -- zones file -----------------------------------------------------------------------------------
def elements_under(page: TemplatePage, frame: Sequence[float]) -> tuple[str, ...]:
    """Ids of the field/box elements a drawn zone belongs to.

    The smallest box or field holding the zone, else every box, checkbox and field lying mostly
    (over half its area) inside it.
    """
    cands = [e for e in page.elements if e.kind in BOX_KINDS + ("field",)]
    holder = _container(frame, [e for e in cands if e.kind in BOX_KINDS])
    field = _container(frame, [e for e in cands if e.kind == "field"])
    if holder is not None or field is not None:
        return tuple(e.id for e in (field, holder) if e is not None)
    inside = [e.id for e in cands if frame_overlap(frame, e.frame) > 0.5 * max(e.size[0] * e.size[1], 1e-9)]
    return tuple(inside)


def read_zone_file(path: str | os.PathLike, template: Template) -> dict[int, list[Zone]]:
    """Validated zones of a zones file, by page number; raises :class:`ZoneError` (one line)."""
    where = os.path.basename(str(path))
    data = read_json_file(path, "zones file", ZoneError)
    if not isinstance(data, dict) or not isinstance(data.get("zones"), list):
        raise ZoneError(f"{where}: a zones file is an object with a \"zones\" list")
    out: dict[int, list[Zone]] = {}
    seen: set[tuple[int, str]] = set()
    for k, z in enumerate(data["zones"], start=1):
        if not isinstance(z, dict):
            raise ZoneError(f"{where}: zone {k} is not an object")
        name = z.get("name")
        label = f"zone {k}" + (f" ({name!r})" if isinstance(name, str) else "")
        if not isinstance(name, str) or not name.strip():
            raise ZoneError(f"{where}: {label}: \"name\" must be a non-empty string")
        if not re.fullmatch(r"[A-Za-z0-9_.\-]{1,80}", name):
            raise ZoneError(f"{where}: {label}: name may hold only letters, digits, '_', '-' and '.' (at most 80)")
        page = z.get("page", 1)
        if isinstance(page, bool) or not isinstance(page, int) or not 1 <= page <= len(template.pages):
            raise ZoneError(f"{where}: {label}: \"page\" must be a page number from 1 to {len(template.pages)}, got {page!r}")
        frame = z.get("frame")
        if (not isinstance(frame, list) or len(frame) != 4
                or not all(isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v) for v in frame)):
            raise ZoneError(f"{where}: {label}: \"frame\" must be [x0, top, x1, bottom], four numbers in points")
        x0, top, x1, bottom = (float(v) for v in frame)
        if not (x1 > x0 and bottom > top):
            raise ZoneError(f"{where}: {label}: frame {frame} needs x0 < x1 and top < bottom")
        tp = template.page(page)
        margin = 1.0
        if x0 < -margin or top < -margin or x1 > tp.width + margin or bottom > tp.height + margin:
            raise ZoneError(f"{where}: {label}: frame {frame} lies outside page {page} "
                            f"(0, 0, {tp.width:.1f}, {tp.height:.1f} points)")
        if (page, name) in seen:
            raise ZoneError(f"{where}: {label}: name repeated on page {page}")
        seen.add((page, name))
        ids = z.get("elements")
        if ids is None:
            ids_t = elements_under(tp, (x0, top, x1, bottom))
        else:
            known = {e.id for e in tp.elements}
            if not isinstance(ids, list) or not all(isinstance(i, str) for i in ids):
                raise ZoneError(f"{where}: {label}: \"elements\" must be a list of element ids")
            bad = [i for i in ids if i not in known]
            if bad:
                raise ZoneError(f"{where}: {label}: page {page} has no element {bad[0]!r}")
            ids_t = tuple(ids)
        out.setdefault(page, []).append(Zone(name, (x0, top, x1, bottom), ids_t, "file"))
    return out


def apply_zone_file(template: Template, path: str | os.PathLike) -> Template:
    """The template with the zones of a zones file added; a zone of the same name is replaced."""
    given = read_zone_file(path, template)
    base = with_zones(template)
    pages = []
    for p in base.pages:
        new = given.get(p.number)
        if not new:
            pages.append(p)
            continue
        names = {z.name for z in new}
        kept = [z for z in p.zones if z.name not in names]
        pages.append(_replace_zones(p, kept + new))
    return dataclasses.replace(base, pages=tuple(pages))


# -- zones on an input page -----------------------------------------------------------------------
def zone_quad(frame: Sequence[float], pose_matrix: np.ndarray) -> np.ndarray:
    """Corners of a template frame on the input, in input points, 4 x 2.

    Order: the zone's top-left, top-right, bottom-right, bottom-left (in the template's sense,
    so on a page turned by 90 degrees the first corner is no longer the top-left one on screen).
    """
    from .pose import Pose

    return Pose(np.asarray(pose_matrix, dtype=float)).project_frame(frame)


def zone_records(zones: Sequence[Zone], pose_matrix: np.ndarray | None, statuses: dict[str, str],
                 judged: set[str], dpi: float | tuple[float, float] | None,
                 image_size: tuple[int, int] | None = None) -> list[dict]:
    """The ``zones`` part of a record.

    Parameters
    ----------
    zones : sequence of Zone
        Zones of the matched template page.
    pose_matrix : (3, 3) or (2, 3) array or None
        Template points -> input points. ``None`` (no pose) gives an empty list.
    statuses : dict
        Element id -> status (``ok``, ``moved``, ``resized``, ``missing``) from the match.
    judged : set of str
        Element ids that were judged on this input (a field on a scan is not).
    dpi : float, (dpi_x, dpi_y) or None
        Input resolution, one or per axis: corners in pixels (``p * dpi / 72``, continuous,
        pixel ``(c, r)`` covering ``[c, c+1) x [r, r+1)``); ``None`` gives points and
        ``unit: "pt"``. The record's ``dpi`` is one number for square pixels, else the pair.
    image_size : (width, height), optional
        Input size in pixels (or points), to clip the crop box.
    """
    if pose_matrix is None:
        return []
    if dpi is not None and np.ndim(dpi) == 1:
        dpi = float(dpi[0]) if dpi[0] == dpi[1] else [float(dpi[0]), float(dpi[1])]
    factor = 1.0 if dpi is None else np.asarray(dpi, dtype=float) / POINTS_PER_INCH
    unit = "pt" if dpi is None else "px"
    out = []
    for z in zones:
        quad = zone_quad(z.frame, pose_matrix) * factor
        lo, hi = quad.min(0), quad.max(0)
        if unit == "px":
            box = [int(math.floor(lo[0] + 1e-6)), int(math.floor(lo[1] + 1e-6)),
                   int(math.ceil(hi[0] - 1e-6)), int(math.ceil(hi[1] - 1e-6))]
        else:
            box = [round(float(v), 2) for v in (lo[0], lo[1], hi[0], hi[1])]
        outside = False
        if image_size is not None:
            w, h = image_size
            outside = bool(lo[0] < -0.5 or lo[1] < -0.5 or hi[0] > w + 0.5 or hi[1] > h + 0.5)
            box = [max(box[0], 0), max(box[1], 0), min(box[2], w), min(box[3], h)]
        own = {eid: statuses.get(eid, "missing") for eid in z.element_ids if eid in judged}
        bad = {eid: s for eid, s in own.items() if s != "ok"}
        status = "unchecked" if not own else ("ok" if not bad else _worst(bad.values()))
        out.append({
            "name": z.name,
            "origin": z.origin,
            "elements": list(z.element_ids),
            "frame_pt": [round(v, 2) for v in z.frame],
            "unit": unit,
            "dpi": dpi,
            "quad": [[round(float(x), 2), round(float(y), 2)] for x, y in quad],
            "bbox": box,
            "in_place": not bad and not outside,
            "status": "outside" if outside and not bad else status,
            "checked": own,
        })
    return out


def _worst(statuses: Iterable[str]) -> str:
    order = {"missing": 3, "moved": 2, "resized": 1}
    return max(statuses, key=lambda s: order.get(s, 0))


def zones_for_match(tp: TemplatePage, match, dpi: float | tuple[float, float] | None, image_size: tuple[int, int] | None = None) -> list[dict]:
    """``zone_records`` for a :class:`~layoutcheck.consensus.Match` against template page ``tp``."""
    if match is None or match.pose is None:
        return []
    statuses = {e.id: e.status for e in match.elements}
    judged = {e.id for e in match.elements if e.judged}
    return zone_records(zones_of(tp), match.pose.matrix, statuses, judged, dpi, image_size)

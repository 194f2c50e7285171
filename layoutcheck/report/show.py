"""A page that shows what a template learned: ``layoutcheck show TEMPLATE -o template.html``.

One section per template page: the reference picture with every element outlined and labelled
by its id, the sections outlined with their names, the zones with theirs, and elements found on
only some of the good samples marked; then a table of the elements (id, kind, caption, section,
frame in mm, learned tolerance, samples that had it) that a search box filters. The page is one
self-contained file under the same rules as the report (escaping, a Content-Security-Policy
that runs only its own pinned script and loads nothing from outside).
"""

from __future__ import annotations

import datetime as _dt
import os
from pathlib import Path

from markupsafe import Markup

from ..elements import MM_PER_POINT, outline
from ..sources import InputError
from ..template import Template, TemplatePage
from ..verdict import Tolerances
from . import _write, environment, script_hash
from .build import PAGE_DPI, clean, encode_image, kind_words, page_picture

#: The page's one script: the search box filters the element rows and marks the same elements
#: on the picture. Its sha256 goes into the CSP.
SEARCH_SCRIPT = """
(function () {
  document.querySelectorAll("input[data-search]").forEach(function (box) {
    var page = document.getElementById(box.getAttribute("data-search"));
    var rows = page.querySelectorAll("tbody tr[data-id]");
    var shapes = page.querySelectorAll("svg [data-id]");
    var count = page.querySelector(".count");
    box.addEventListener("input", function () {
      var q = box.value.trim().toLowerCase();
      var hit = {};
      var n = 0;
      rows.forEach(function (r) {
        var on = !q || r.textContent.toLowerCase().indexOf(q) >= 0;
        r.hidden = !on;
        if (on) { n += 1; hit[r.getAttribute("data-id")] = true; }
      });
      shapes.forEach(function (s) {
        s.classList.toggle("hit", !!q && !!hit[s.getAttribute("data-id")]);
      });
      count.textContent = q ? n + " of " + rows.length + " elements" : rows.length + " elements";
    });
  });
})();
"""


def csp() -> str:
    return ("default-src 'none'; img-src data:; style-src 'unsafe-inline'; "
            f"script-src {script_hash(SEARCH_SCRIPT)}; base-uri 'none'; form-action 'none'")


def find_reference(template: Template, template_path: str | os.PathLike | None) -> str | None:
    """The template's first reference, looked for beside the template file and in the current folder."""
    if not template.references:
        return None
    name = template.references[0]
    places = [Path(template_path).resolve().parent] if template_path else []
    places.append(Path.cwd())
    for folder in places:
        for cand in (folder / name, folder / "references" / name, folder.parent / "references" / name):
            if cand.is_file():
                return str(cand)
    return None


def _points(corners) -> str:
    return " ".join(f"{x:.2f},{y:.2f}" for x, y in corners)


def _mm(values) -> str:
    return ", ".join(f"{v * MM_PER_POINT:.1f}" for v in values)


def page_model(template: Template, tp: TemplatePage, picture: dict | None, tol: Tolerances) -> dict:
    """What the page shows about one template page: shapes, labels, rows."""
    unstable = set(tp.unstable)
    section_of = tp.section_of()
    names = {s.id: s.name for s in tp.sections}
    samples = tp.samples or max(1, len(template.references))
    shapes, rows = [], []
    aside = {e.id for e in tp.set_aside}
    for e in tp.elements + tp.set_aside:
        x0, top = e.frame[0], e.frame[1]
        style = "aside" if e.id in aside else "unstable" if e.id in unstable else "element"
        shapes.append({"id": e.id, "points": _points(outline(e)), "style": style, "tx": x0, "ty": max(top - 1.0, 4.0)})
        slack = tp.slack.get(e.id, 0.0) * MM_PER_POINT
        rows.append({
            "id": e.id, "kind": kind_words(e.kind), "caption": e.caption or e.text or "",
            "section": names.get(section_of.get(e.id, ""), ""),
            "frame_mm": _mm(e.frame),
            "size_mm": f"{(e.frame[2] - e.frame[0]) * MM_PER_POINT:.1f} × {(e.frame[3] - e.frame[1]) * MM_PER_POINT:.1f}",
            "tolerance": "—" if e.id in aside else
                         f"{tol.element_tolerance_mm + slack:.1f}" + (f" (+{slack:.1f} learned)" if slack >= 0.05 else ""),
            "samples": f"{tp.seen.get(e.id, samples)} of {samples}",
            "style": style,
            "why": tp.set_aside_why.get(e.id, "") if e.id in aside else "",
        })
    sections = [{"id": s.id, "name": s.name, "points": _points(_box(s.frame)), "tx": s.frame[0] + 2, "ty": s.frame[3] - 3}
                for s in tp.sections]
    zones = [{"name": z.name, "points": _points(_box(z.frame)), "tx": z.frame[0] + 1.5, "ty": z.frame[3] - 2,
              "frame_mm": _mm(z.frame)} for z in tp.zones]
    return {
        "anchor": f"page-{tp.number}", "number": tp.number, "width": tp.width, "height": tp.height,
        "width_mm": tp.width * MM_PER_POINT, "height_mm": tp.height * MM_PER_POINT,
        "picture": picture, "shapes": shapes, "sections": sections, "zones": zones, "rows": rows,
        "unstable": len(unstable), "raster": len(tp.raster_elements), "aside": len(aside),
    }


def _box(frame):
    x0, top, x1, bottom = frame
    return [(x0, top), (x1, top), (x1, bottom), (x0, bottom)]


def _picture(reference: str | None, number: int, dpi: float | None) -> tuple[dict | None, str]:
    """The reference page as a data URI, or None and why not."""
    if reference is None:
        return None, "The reference was not found beside the template (give --reference FILE): the elements are drawn on a blank page."
    try:
        from ..sources import ReadLimits, read_pages

        if dpi is not None:  # a reference scan that states no resolution
            page = next(iter(read_pages(reference, ReadLimits(dpi=dpi), {number})), None)
            image = getattr(page, "image", None)
            if image is None:
                raise InputError(getattr(page, "message", f"{reference} page {number}: no such page"))
            kind = "raster"
        else:
            image, _, kind = page_picture(reference, number, PAGE_DPI)
    except InputError as exc:
        return None, f"The reference could not be read ({clean(exc)}): the elements are drawn on a blank page."
    return {"src": encode_image(image, photo=kind == "raster"), "px": (image.shape[1], image.shape[0])}, ""


def write_template_page(template: Template, path: str | os.PathLike, reference: str | None = None,
                        template_path: str | os.PathLike | None = None, dpi: float | None = None,
                        tolerances: Tolerances = Tolerances()) -> Path:
    """Write the page that shows ``template`` (see module docs); returns its path."""
    ref = reference or find_reference(template, template_path)
    pages = []
    for tp in template.pages:
        picture, note = _picture(ref, tp.number, dpi)
        model = page_model(template, tp, picture, tolerances)
        model["note"] = note
        pages.append(model)
    html = environment().get_template("template.html").render(
        csp=csp(), script=Markup(SEARCH_SCRIPT), template=template, pages=pages,
        reference=os.path.basename(ref) if ref else None,
        generated=_dt.datetime.now().astimezone().strftime("%Y-%m-%d %H:%M %Z").strip(),
        tolerance=tolerances.element_tolerance_mm)
    out = Path(path)
    _write(out, html)
    return out

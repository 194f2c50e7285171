"""What the HTML report shows, computed from the records: plain data for the templates.

Everything here is pure arithmetic and wording over the JSON records, the templates and the
page images; :mod:`layoutcheck.report` renders it with jinja2. Geometry stays in points (the
record's pose maps template points to input points) until the very edge, where the overlay is an
SVG whose ``viewBox`` is the input page in points.
"""

from __future__ import annotations

import base64
import io
import math
import os
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Sequence

import numpy as np

from ..elements import MM_PER_POINT, POINTS_PER_INCH, Element, outline
from ..verdict import VERDICTS, Tolerances, direction_words

#: Resolution of the page pictures in the report: enough to read printed labels, small enough
#: that a few hundred pages stay a file a browser opens quickly (about 25-70 KB per A4 page).
PAGE_DPI = 110.0
#: Resolution the zoomed crops are cut from.
CROP_DPI = 200.0
#: Margin around an offending element in its crop, in points (6 mm).
CROP_MARGIN = 6.0 / MM_PER_POINT
#: Smallest crop, in points (40 x 22 mm), so that a small element shows with its surroundings.
CROP_MIN = np.array([40.0, 22.0]) / MM_PER_POINT
#: Widest crop kept, in pixels; larger ones (whole sections) are scaled down.
CROP_MAX_PX = 420

#: Plain words for each verdict, as the heading of a page.
VERDICT_TITLES = {
    "error": "Could not be checked",
    "unrecognised": "Not recognised as a known form",
    "mismatched": "Layout differs from the form",
    "incomplete": "Part of the form is not on the image",
    "retake": "Photo to be taken again",
    "rescaled": "Printed at the wrong size",
    "skewed": "Turned on the sheet",
    "shifted": "Moved on the sheet",
    "pass": "Matches the form",
}

#: What a person does next, per verdict.
VERDICT_ADVICE = {
    "error": "Check that the file opens and is a PDF or an image; then verify it again.",
    "unrecognised": "Look at the page: it may be another form, a cover sheet, a blank page or an "
                    "old version no template was learned for.",
    "mismatched": "Compare the marked elements with the form. If this version of the form is "
                  "valid, learn a template for it; otherwise send the page back.",
    "incomplete": "Scan the page again whole: part of it (named below) was cut off, and OCR cannot "
                  "read the fields there.",
    "retake": "The photo shows the form too small or too obliquely to be read reliably. Ask for a "
              "new photo taken from straight above, closer, or a scan.",
    "rescaled": "The page was printed or scanned at another size. Reprint at 100 % (no fitting "
                "to the paper) or rescale before OCR.",
    "skewed": "Deskew the page before OCR, or scan it again laid straight.",
    "shifted": "Move the content back to its place before OCR, or scan it again with the sheet "
               "against the guide.",
    "pass": "No action needed: the page can go to OCR as it is.",
}

_STRIP = re.compile("[\x00-\x08\x0b-\x1f\x7f-\x9f\u200e\u200f\u061c\u202a-\u202e\u2066-\u2069]")


def clean(text: object) -> str:
    """Text safe to show: C0/C1 controls (but newline and tab) and direction overrides removed."""
    return _STRIP.sub("", "" if text is None else str(text))


# -- small helpers ----------------------------------------------------------------------------
def _fmt_signed(v: float, digits: int) -> str:
    """``+1.5`` / ``\u22121.5`` with a true minus sign; a value that rounds to zero is ``+0.0``."""
    v = float(v)
    if round(v, digits) == 0:
        v = 0.0
    return f"{v:+.{digits}f}".replace("-", "\u2212")


def kind_words(kind: str) -> str:
    return {"hline": "line", "vline": "line", "textblock": "text", "mark": "registration mark"}.get(kind, kind)


def element_name(o: dict) -> str:
    """``Box 'Vessel name'`` for an offending entry (the id is shown beside it)."""
    kind = kind_words(o.get("kind") or "element")
    cap = clean(o.get("caption") or "").strip()
    return f"{kind.capitalize()} '{cap}'" if cap else kind.capitalize()


def offending_sentence(o: dict, tol: Tolerances) -> str:
    who = element_name(o)
    status = o.get("status")
    if o.get("kind") == "section" and status == "moved":
        return f"{who} has moved {direction_words(*o['offset_mm'])} from where this form has it, as a whole"
    if status == "missing":
        return f"{who} is missing: nothing like it was found where this form has it"
    if status == "moved" and o.get("offset_mm"):
        return f"{who} has moved {direction_words(*o['offset_mm'])} from where this form has it"
    if status == "resized" and o.get("size_ratio") is not None:
        return (f"{who} is {o['size_ratio']:.0%} of its expected size "
                f"(±{tol.element_size_pct:g} % accepted)")
    return f"{who}: {clean(status)}"


def turn_sentence(rot: float, tol: Tolerances) -> str:
    a = abs(rot)
    if a < 0.005:
        return f"Not turned (limit {tol.max_skew_deg:g}°)."
    side = "counterclockwise" if rot > 0 else "clockwise"
    if abs(a - 180.0) < 1.0:
        return "Upside down: turn the page over before OCR."
    if abs(a - 90.0) < 1.0:
        return f"Turned a quarter {side}: turn the page upright before OCR."
    words = f"Turned {a:.2f}° {side}"
    if a <= tol.max_skew_deg:
        return f"{words} — within the {tol.max_skew_deg:g}° the form's zones allow."
    if a <= 10.0:
        return (f"{words} — more than the {tol.max_skew_deg:g}° the form's zones allow; "
                "deskewing can correct this before OCR.")
    return f"{words} — far more than the {tol.max_skew_deg:g}° allowed; scan the page again laid straight."


def scale_sentence(pose: dict, tol: Tolerances) -> str:
    sx, sy = pose["scale_x"], pose["scale_y"]
    worst = max(abs(sx - 1.0), abs(sy - 1.0)) * 100.0
    size = f"{pose['scale']:.2%}" if abs(sx - sy) < 0.002 else f"{sx:.2%} across and {sy:.2%} down"
    if worst <= tol.max_scale_error_pct:
        return f"Printed at {size} of the form's size — within ±{tol.max_scale_error_pct:g} %."
    way = "smaller" if pose["scale"] < 1 else "larger"
    return (f"Printed at {size} of the form's size — {way} than the ±{tol.max_scale_error_pct:g} % "
            "the form's zones allow.")


def shift_sentence(pose: dict, tol: Tolerances) -> str:
    dx, dy = pose["shift_mm"]
    d = math.hypot(dx, dy)
    if d < 0.05:
        return f"Centred on the sheet (limit {tol.max_shift_mm:g} mm)."
    where = direction_words(dx, dy)
    if d <= tol.max_shift_mm:
        return f"Content sits {where} off centre — within {tol.max_shift_mm:g} mm."
    return f"Content sits {where} off centre — more than the {tol.max_shift_mm:g} mm allowed."


# -- geometry ---------------------------------------------------------------------------------
def pose_matrix(rec: dict) -> np.ndarray | None:
    """The record's 3 x 3 pose (the ``projective`` matrix; records without it: the 2 x 3 ``matrix``)."""
    p = rec.get("pose")
    if not p or not (p.get("projective") or p.get("matrix")):
        return None
    if p.get("projective"):
        return np.asarray(p["projective"], dtype=float)
    m = np.eye(3)
    m[:2] = np.asarray(p["matrix"], dtype=float)
    return m


def apply(m: np.ndarray, pts: np.ndarray) -> np.ndarray:
    """Template points through the record's pose (with the perspective division)."""
    from ..pose import Pose

    return Pose(m).apply(pts)


def frame_corners(frame: Sequence[float], angle: float | None = 0.0) -> np.ndarray:
    x0, top, x1, bottom = (float(v) for v in frame)
    return outline(Element("x", "box", (x0, top, x1, bottom), angle))


def found_corners(o: dict, element: Element | None) -> np.ndarray | None:
    """Corners, in template points, of where an offending element was found."""
    if o.get("status") == "missing" or (not o.get("offset_mm") and o.get("status") != "resized"):
        return None
    off = np.asarray(o.get("offset_mm") or (0.0, 0.0), dtype=float) / MM_PER_POINT
    frame = o["frame"]
    angle = element.angle if element is not None else 0.0
    corners = frame_corners(frame, angle)
    ratio = o.get("size_ratio")
    if ratio and o.get("kind") != "section" and 0.05 < ratio < 20:
        centre = corners.mean(0)
        corners = centre + (corners - centre) * ratio
    return corners + off


def points_attr(pts: np.ndarray) -> str:
    return " ".join(f"{x:.1f},{y:.1f}" for x, y in pts)


def pad_thin(corners: np.ndarray, minimum: float = 1.5) -> np.ndarray:
    """Give a hairline (a ruling line's frame) a visible width around its centre line."""
    lo, hi = corners.min(0), corners.max(0)
    if (hi - lo).min() >= minimum:
        return corners
    c = corners.mean(0)
    grown = corners.copy()
    for axis in (0, 1):
        if hi[axis] - lo[axis] < minimum:
            grown[:, axis] = c[axis] + np.sign(corners[:, axis] - c[axis] + 1e-9) * minimum / 2
    return grown


# -- page pictures ----------------------------------------------------------------------------
def resolve(source: str, base_dir: str | os.PathLike | None) -> str:
    p = Path(source)
    if not p.is_absolute() and base_dir is not None:
        p = Path(base_dir) / p
    return str(p)


def page_picture(path: str, page: int, dpi: float, kind: str | None = None) -> tuple[np.ndarray, float, str]:
    """Grey picture of one input page, its resolution and how the page was read.

    A scan (image file or a PDF that wraps one) is downscaled from its own resolution; a
    born-digital PDF page is rendered at ``dpi``. ``kind="vector"``, when the record already
    says the page is born-digital, skips reading the page to find out (the costly part).
    """
    from ..sources import InputError, PageError, RasterPage, ReadLimits, read_pages, render_page_image, square_pixels

    if kind == "vector":
        return render_page_image(path, page, dpi), dpi, kind

    kind = None
    image = None
    native = None
    gen = read_pages(path, ReadLimits(), {page})
    try:
        for pg in gen:
            if isinstance(pg, PageError):
                raise InputError(pg.message)
            if isinstance(pg, RasterPage):
                pg = square_pixels(pg)  # a fax's tall pixels shown square
                kind, image, native = "raster", pg.image, float(pg.dpi)
            else:
                kind = "vector"
            break
    finally:
        gen.close()
    if kind is None:
        raise InputError(f"{path} page {page}: no such page")
    if kind == "vector":
        return render_page_image(path, page, dpi), dpi, kind
    if native and native > dpi * 1.05:
        small = resample(image, dpi / native)
        return small, native * small.shape[1] / image.shape[1], kind
    return image, native, kind


def resample(image: np.ndarray, factor: float) -> np.ndarray:
    from PIL import Image

    h, w = image.shape[:2]
    size = (max(1, int(round(w * factor))), max(1, int(round(h * factor))))
    return np.asarray(Image.fromarray(image).resize(size, Image.LANCZOS))


def encode_image(image: np.ndarray, photo: bool = False) -> str:
    """Data URI of a grey picture: 16-level PNG, or JPEG where that is smaller (scans)."""
    from PIL import Image

    im = Image.fromarray(np.ascontiguousarray(image))
    png = io.BytesIO()
    im.quantize(16).save(png, format="PNG", optimize=True, bits=4)
    best, mime = png.getvalue(), "image/png"
    if photo:
        jpg = io.BytesIO()
        im.save(jpg, format="JPEG", quality=62, optimize=True)
        if len(jpg.getvalue()) < len(best):
            best, mime = jpg.getvalue(), "image/jpeg"
    return f"data:{mime};base64," + base64.b64encode(best).decode("ascii")


# -- the model of one page --------------------------------------------------------------------
@dataclass
class Mark:
    """One shape of the overlay."""

    points: str
    style: str  # expected, offexp, found, secexp, secfound
    tag: str = ""
    tx: float = 0.0
    ty: float = 0.0


def template_index(templates: Sequence) -> dict:
    return {t.name: t for t in templates}


def element_set(tp, rec: dict, kind: str | None):
    """The template page's elements this input was compared with ("vector" or "raster")."""
    ids = {o["id"] for o in rec.get("offending", []) if o.get("kind") != "section"}
    if not tp.raster_elements:
        return tp.elements
    hv = len(ids & {e.id for e in tp.elements})
    hr = len(ids & {e.id for e in tp.raster_elements})
    if hr != hv:
        return tp.raster_elements if hr > hv else tp.elements
    return tp.elements_for(kind or "vector")


def page_view(index: int, rec: dict, templates: dict, tol: Tolerances, base_dir, with_images: bool = True) -> dict:
    """Everything the report shows about one record."""
    verdict = rec.get("verdict", "error")
    src = clean(rec.get("source", ""))
    view: dict = {
        "anchor": f"p{index + 1}",
        "number": index + 1,
        "source": src,
        "name": clean(os.path.basename(str(rec.get("source", "")))) or src,
        "page": rec.get("page"),
        "verdict": verdict,
        "title": VERDICT_TITLES.get(verdict, verdict),
        "advice": VERDICT_ADVICE.get(verdict, ""),
        "template": clean(rec.get("template") or ""),
        "template_page": rec.get("template_page"),
        "support": float(rec.get("support") or 0.0),
        "findings": [clean(f.get("message", "")) for f in rec.get("findings", [])],
        "error": clean(rec.get("error") or ""),
        "pose": None,
        "sentences": [],
        "offending": [],
        "sections": [],
        "image": None,
        "image_note": "",
        "marks": [],
        "width": 595.0,
        "height": 842.0,
        "elapsed_ms": rec.get("elapsed_ms"),
    }
    pose = rec.get("pose")
    if pose:
        view["pose"] = {
            "rotation": _fmt_signed(pose["rotation_deg"], 2),
            "rotation_raw": pose["rotation_deg"],
            "scale": f"{pose['scale']:.4f}",
            "scale_xy": f"{pose['scale_x']:.4f} × {pose['scale_y']:.4f}",
            "shift": f"{_fmt_signed(pose['shift_mm'][0], 1)}, {_fmt_signed(pose['shift_mm'][1], 1)}",
        }
        if rec.get("capture") == "camera":
            # A photo is always turned and scaled: said, not judged.
            eff = rec.get("effective_dpi") or {}
            view["sentences"] = [f"A photo of the form (seen in perspective, corrected): turned "
                                 f"{abs(pose['rotation_deg']):.1f}°, shown at {pose['scale']:.1%}; not judged for a photo."]
            if eff:
                view["sentences"].append(f"Effective resolution {eff['centre']:.0f} dpi at the centre, "
                                         f"{eff['worst']:.0f} dpi at its worst point (at least {tol.min_dpi:g} needed).")
        else:
            view["sentences"] = [turn_sentence(pose["rotation_deg"], tol), scale_sentence(pose, tol),
                                 shift_sentence(pose, tol)]
    for k, o in enumerate(rec.get("offending", []), start=1):
        off = o.get("offset_mm")
        view["offending"].append({
            "n": k,
            "id": clean(o.get("id")),
            "kind": clean(kind_words(o.get("kind") or "")),
            "caption": clean(o.get("caption") or ""),
            "status": clean(o.get("status")),
            "offset": "—" if not off else f"{_fmt_signed(off[0], 1)}, {_fmt_signed(off[1], 1)}",
            "distance": "—" if not off else f"{math.hypot(*off):.1f}",
            "size": "—" if o.get("size_ratio") is None else f"{o['size_ratio']:.1%}",
            "sentence": clean(offending_sentence(o, tol)),
            "crop": None,
        })
    own = {o["id"]: o["sentence"] for o in view["offending"]}
    what = []
    for f in rec.get("findings", []):
        eid = f.get("element")
        what.append(own.get(eid) or clean(f.get("message", "")))
    view["what"] = what
    for s in rec.get("sections", []):
        if s.get("status") == "partial":
            view["sections"].append(clean(f"Section '{s.get('name')}' ({s.get('id')}): "
                                          f"{s.get('support', 0):.0%} of its elements in place"))
    looked = [clean(str(i)) for i in rec.get("second_look") or []]
    if looked:
        view["sections"].append(("Found only on a second look at their expected place (under a stamp, across a "
                                 "tick, a rule broken in the scan, or writing running on along a rule): " + ", ".join(looked)
                                 + ". They are in place; a glance confirms it."))
    if with_images and rec.get("page") is not None:
        _add_picture(view, rec, templates, base_dir)
    view["handoff"] = handoff_view(rec, base_dir) if with_images else None
    return view


def handoff_view(rec: dict, base_dir) -> dict | None:
    """The normalised page (template frame) with the template's zones drawn on it, if written."""
    norm = rec.get("normalised") or {}
    path = norm.get("path")
    if not path:
        if norm.get("error"):
            return {"image": None, "note": clean(f"No normalised page was written: {norm['error']}")}
        return None
    from PIL import Image

    try:
        with Image.open(resolve(str(path), base_dir)) as im:
            image = np.asarray(im.convert("L"))
    except Exception as exc:  # a report must not fail on one missing or damaged picture
        return {"image": None, "note": clean(f"The normalised page {path} could not be shown "
                                             f"({type(exc).__name__}: {' '.join(str(exc).split())}).")}
    dpi = float(norm.get("dpi") or PAGE_DPI)
    small = resample(image, PAGE_DPI / dpi) if dpi > PAGE_DPI * 1.05 else image
    zones = []
    for z in rec.get("zones") or []:
        x0, top, x1, bottom = z["frame_pt"]
        pts = np.array([[x0, top], [x1, top], [x1, bottom], [x0, bottom]], float)
        ok = bool(z.get("in_place"))
        zones.append({"name": clean(z.get("name")), "status": clean(z.get("status")), "ok": ok,
                      "points": points_attr(pts), "style": "zone" if ok else "zoneoff",
                      "tx": float(x0), "ty": float(top) - 1.5})
    return {
        "image": encode_image(small, photo=True), "image_px": (small.shape[1], small.shape[0]),
        "width": image.shape[1] * POINTS_PER_INCH / dpi, "height": image.shape[0] * POINTS_PER_INCH / dpi,
        "file": clean(os.path.basename(str(path))), "dpi": dpi, "zones": zones,
        "off": [z for z in zones if not z["ok"]],
    }


def _add_picture(view: dict, rec: dict, templates: dict, base_dir) -> None:
    from ..sources import InputError

    path = resolve(str(rec.get("source", "")), base_dir)
    want_crops = bool(rec.get("offending")) and rec.get("pose")
    # A record with a pose came from matching; those of scans always carry ``second_look``.
    known = "vector" if rec.get("pose") and "second_look" not in rec else None
    try:
        image, dpi, kind = page_picture(path, int(rec["page"]), CROP_DPI if want_crops else PAGE_DPI, known)
    except (InputError, OSError, ValueError) as exc:
        view["image_note"] = clean(f"The page picture could not be made: {exc}")
        return
    except Exception as exc:  # a report must not fail on one unreadable picture
        view["image_note"] = clean(f"The page picture could not be made ({type(exc).__name__}: {exc})")
        return
    h_px, w_px = image.shape[:2]
    view["width"] = w_px * POINTS_PER_INCH / dpi
    view["height"] = h_px * POINTS_PER_INCH / dpi
    small = image if dpi <= PAGE_DPI * 1.05 else resample(image, PAGE_DPI / dpi)
    photo = kind == "raster"
    view["image"] = encode_image(small, photo)
    view["image_px"] = (small.shape[1], small.shape[0])
    m = pose_matrix(rec)
    template = templates.get(rec.get("template"))
    if m is None or template is None or not rec.get("template_page"):
        return
    try:
        tp = template.page(int(rec["template_page"]))
    except (IndexError, ValueError):
        return
    els = element_set(tp, rec, kind)
    by_id = {e.id: e for e in els}
    for e in els:
        view["marks"].append(Mark(points_attr(apply(m, pad_thin(outline(e)))), "expected"))
    for item, o in zip(view["offending"], rec.get("offending", [])):
        is_sec = o.get("kind") == "section"
        el = by_id.get(o.get("id"))
        exp_t = frame_corners(o["frame"], el.angle if el is not None else 0.0)
        exp = apply(m, pad_thin(exp_t))
        fnd_t = found_corners(o, el)
        fnd = None if fnd_t is None else apply(m, pad_thin(fnd_t))
        n = item["n"]
        status = o.get("status")
        view["marks"].append(Mark(points_attr(exp), "secexp" if is_sec else "offexp",
                                  f"{n} {'missing' if status == 'missing' else 'expected'}",
                                  float(exp[:, 0].min()), float(exp[:, 1].min()) - 2.0))
        if fnd is not None:
            view["marks"].append(Mark(points_attr(fnd), "secfound" if is_sec else "found", f"{n} found",
                                      float(fnd[:, 0].min()), float(fnd[:, 1].max()) + 9.0))
        item["crop"] = _crops(image, dpi, exp, fnd, photo)
    view["marks"] = merge_tags(view["marks"])


def merge_tags(marks: list[Mark], near: float = 14.0) -> list[Mark]:
    """One tag for marks of one style labelled at the same place: "2, 3, 4 expected"."""
    groups: list[Mark] = []
    for mk in marks:
        if not mk.tag:
            continue
        n, word = mk.tag.split(" ", 1)
        for g in groups:
            if g.style == mk.style and g.tag.endswith(" " + word) and abs(g.tx - mk.tx) < near and abs(g.ty - mk.ty) < near:
                g.tag = g.tag[: -len(word) - 1] + f", {n} {word}"
                mk.tag = ""
                break
        else:
            groups.append(mk)
    return marks


def _crops(image: np.ndarray, dpi: float, exp: np.ndarray, fnd: np.ndarray | None, photo: bool) -> list[dict]:
    """Crops of the input picture around the expected place and (if any) the found place."""
    out = []
    for label, poly, style in (("Where the form has it", exp, "offexp"), ("Where it was found", fnd, "found")):
        if poly is None:
            continue
        lo = poly.min(0) - CROP_MARGIN
        hi = poly.max(0) + CROP_MARGIN
        centre, half = (lo + hi) / 2, np.maximum((hi - lo) / 2, CROP_MIN / 2)
        lo, hi = centre - half, centre + half
        k = dpi / POINTS_PER_INCH
        x0, y0 = max(int(lo[0] * k), 0), max(int(lo[1] * k), 0)
        x1, y1 = min(int(math.ceil(hi[0] * k)), image.shape[1]), min(int(math.ceil(hi[1] * k)), image.shape[0])
        if x1 - x0 < 2 or y1 - y0 < 2:
            continue
        crop = image[y0:y1, x0:x1]
        f = min(1.0, CROP_MAX_PX / max(crop.shape[1], 1), (CROP_MAX_PX * 0.75) / max(crop.shape[0], 1))
        if f < 1.0:
            crop = resample(crop, f)
        ox, oy = x0 / k, y0 / k
        w_pt, h_pt = (x1 - x0) / k, (y1 - y0) / k
        out.append({"label": label, "image": encode_image(crop, photo), "style": style,
                    "px": (crop.shape[1], crop.shape[0]), "view": f"{ox:.1f} {oy:.1f} {w_pt:.1f} {h_pt:.1f}",
                    "points": points_attr(poly)})
    return out


# -- the summary ------------------------------------------------------------------------------
def counts(records: Sequence[dict]) -> list[tuple[str, int]]:
    c = {v: 0 for v in VERDICTS}
    for r in records:
        c[r.get("verdict", "error")] = c.get(r.get("verdict", "error"), 0) + 1
    return [(v, c[v]) for v in VERDICTS]


def strip_plot(values: list[float | None], lo: float, hi: float, centre: float, span: float,
               fmt: str, unit: str, title: str, band_label: str) -> dict:
    """A small dot plot: one dot per page against the accepted band ``[lo, hi]``.

    The axis covers ``centre ± span``; values beyond it sit on the edge as triangles. Dots outside
    the band are drawn as crosses, so the plot reads without colour.
    """
    W, H, left, right, top, bottom = 560.0, 120.0, 52.0, 10.0, 18.0, 22.0
    n = max(len(values), 1)
    vmin, vmax = centre - span, centre + span

    def y(v: float) -> float:
        return top + (vmax - v) / (vmax - vmin) * (H - top - bottom)

    pts = []
    for i, v in enumerate(values):
        if v is None:
            continue
        x = left + (i + 0.5) / n * (W - left - right)
        clipped = min(max(v, vmin), vmax)
        shape = "edge" if clipped != v else ("out" if v < lo - 1e-12 or v > hi + 1e-12 else "in")
        pts.append({"x": round(x, 1), "y": round(y(clipped), 1), "shape": shape, "page": i + 1,
                    "text": f"page entry {i + 1}: {fmt.format(v)}{unit}"})
    ticks = [{"y": round(y(v), 1), "text": fmt.format(v) + unit} for v in (vmax, centre, vmin)]
    band = {"y": round(y(min(hi, vmax)), 1), "h": round(y(max(lo, vmin)) - y(min(hi, vmax)), 1)}
    return {"w": W, "h": H, "left": left, "right": W - right, "top": top, "bottom": H - bottom,
            "points": pts, "ticks": ticks, "band": band, "title": title, "band_label": band_label,
            "outside": sum(p["shape"] != "in" for p in pts), "count": len(pts)}


def plots(records: Sequence[dict], tol: Tolerances) -> list[dict]:
    rot = [r["pose"]["rotation_deg"] if r.get("pose") else None for r in records]
    scl = [r["pose"]["scale"] if r.get("pose") else None for r in records]
    sup = [float(r.get("support") or 0.0) if r.get("verdict") != "error" else None for r in records]
    t = tol.max_skew_deg
    rspan = max(3 * t, min(max([abs(v) for v in rot if v is not None] + [0.0]) * 1.15, 10.0), 0.5)
    s = tol.max_scale_error_pct / 100.0
    sspan = max(3 * s, min(max([abs(v - 1) for v in scl if v is not None] + [0.0]) * 1.15, 0.25), 0.01)
    return [
        strip_plot(rot, -t, t, 0.0, rspan, "{:+.2f}", "°", "Turn of each page",
                   f"accepted: ±{t:g}°"),
        strip_plot(scl, 1 - s, 1 + s, 1.0, sspan, "{:.3f}", "", "Scale of each page",
                   f"accepted: 1 ± {tol.max_scale_error_pct / 100:g}"),
        strip_plot(sup, tol.min_support, 1.0, 0.5, 0.5, "{:.2f}", "", "Support: share of elements in place",
                   f"needed: at least {tol.min_support:g}"),
    ]


TOLERANCE_WORDS = (
    ("max_skew_deg", "Turn accepted", "°"),
    ("max_scale_error_pct", "Scale error accepted", " %"),
    ("max_shift_mm", "Shift on the sheet accepted", " mm"),
    ("element_tolerance_mm", "An element may sit off its place by", " mm"),
    ("element_size_pct", "An element's size may change by", " %"),
    ("min_support", "Share of elements that must agree", ""),
)


def tolerance_rows(tol: Tolerances) -> list[tuple[str, str]]:
    d = tol.to_dict()
    return [(words, f"{d[key]:g}{unit}") for key, words, unit in TOLERANCE_WORDS]


def template_rows(templates: Sequence, records: Sequence[dict]) -> list[dict]:
    used: dict[str, int] = {}
    for r in records:
        if r.get("template"):
            used[r["template"]] = used.get(r["template"], 0) + 1
    out = []
    for t in templates:
        out.append({"name": clean(t.name), "pages": len(t.pages),
                    "elements": sum(len(p.elements) for p in t.pages),
                    "references": clean(", ".join(t.references)), "matched": used.get(t.name, 0)})
    return out

"""Verdicts: the one place where measurements are compared with tolerances."""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, fields

import numpy as np

from .consensus import Match


#: Most severe first; a page's verdict is the most severe of its findings.
VERDICTS = ("error", "unrecognised", "mismatched", "incomplete", "retake", "rescaled", "skewed", "shifted", "pass")
SEVERITY = {v: i for i, v in enumerate(VERDICTS)}


@dataclass(frozen=True)
class Tolerances:
    """What a page may deviate and still pass. Each default names its source.

    Build from a dict with :meth:`from_dict`; values are validated.
    """

    #: Degrees of turn. Common practice: OCR zones of a few mm drift out of a field beyond
    #: about half a degree over an A4 width (0.5 deg over 210 mm is 1.8 mm).
    max_skew_deg: float = 0.5
    #: Percent scale error. Common practice: 1 % over an A4 height is 3 mm, the usual margin of
    #: an OCR zone; "fit to page" printing (about 6 %) is far outside it.
    max_scale_error_pct: float = 1.0
    #: Millimetres of shift of the content on the sheet. Common practice for sheet-fed scanning:
    #: feeders place pages within a few mm.
    max_shift_mm: float = 5.0
    #: Millimetres an element may sit from its place after the page pose is removed
    #: (common practice: half the usual 4 mm margin around an OCR zone).
    element_tolerance_mm: float = 2.0
    #: Relative size change of an element still accepted (common practice).
    element_size_pct: float = 10.0
    #: Share of judged template elements that must agree for the page to be this form. Chosen
    #: so a filled form (every element there) passes with room and a different form of the same
    #: house style (shared rules and margins) does not; see docs/benchmarks.md.
    min_support: float = 0.5
    #: Least effective resolution, dpi, anywhere on the form of a camera capture before it must
    #: be taken again. OCR engines commonly want 200-300 dpi (common practice); 150 still
    #: shows 8 pt print at about 17 pixels per line.
    min_dpi: float = 150.0
    #: Most the perspective correction of a camera capture may enlarge one part of the form
    #: relative to another (a photo taken too obliquely).
    max_stretch: float = 2.0
    #: Millimetres of the form that may lie beyond an edge of the image before the page is
    #: "incomplete" (common practice: as much as an element may sit from its place; beyond it a
    #: box loses its side and a field's text may be cut).
    max_cut_mm: float = 2.0
    #: Millimetres the content may bend away from one flat pose (paper not flat on the glass,
    #: a curled sheet) before the bend is a finding of its own; each element is judged against
    #: the bend either way (common practice: as much as an element may sit from its place).
    max_warp_mm: float = 2.0

    def __post_init__(self) -> None:
        for f in fields(self):
            v = getattr(self, f.name)
            if not isinstance(v, (int, float)) or not math.isfinite(v) or v < 0:
                raise ValueError(f"tolerance {f.name} must be a non-negative number, got {v!r}")
        if self.min_support > 1:
            raise ValueError(f"tolerance min_support must be at most 1, got {self.min_support}")

    @classmethod
    def from_dict(cls, data: dict) -> "Tolerances":
        known = {f.name for f in fields(cls)}
        unknown = set(data) - known
        if unknown:
            raise ValueError(f"unknown tolerance(s): {', '.join(sorted(unknown))}")
        return cls(**{k: float(v) for k, v in data.items()})

    def to_dict(self) -> dict:
        return asdict(self)


@dataclass(frozen=True)
class Finding:
    """One thing found on a page."""

    verdict: str
    message: str
    element: str | None = None
    value: float | None = None
    limit: float | None = None

    def to_dict(self) -> dict:
        return {"verdict": self.verdict, "message": self.message, "element": self.element,
                "value": None if self.value is None else round(self.value, 4),
                "limit": self.limit}


def people_first(e) -> int:
    """Boxes and fields first, then rules and marks, then printed text: what a person looks for."""
    return {"box": 0, "checkbox": 0, "field": 1, "mark": 2, "hline": 3, "vline": 3, "line": 3}.get(e.kind, 4)


def direction_words(dx_mm: float, dy_mm: float) -> str:
    """'3.2 mm right and 1.0 mm down' for an offset in mm (y down)."""
    parts = []
    if abs(dx_mm) >= 0.05:
        parts.append(f"{abs(dx_mm):.1f} mm {'right' if dx_mm > 0 else 'left'}")
    if abs(dy_mm) >= 0.05:
        parts.append(f"{abs(dy_mm):.1f} mm {'down' if dy_mm > 0 else 'up'}")
    return " and ".join(parts) or "0.0 mm"


def rotation_words(rotation_deg: float) -> str:
    if abs(abs(rotation_deg) - 180.0) < 1.0:
        return "upside down"
    if abs(rotation_deg - 90.0) < 1.0:
        return "turned a quarter counterclockwise"
    if abs(rotation_deg + 90.0) < 1.0:
        return "turned a quarter clockwise"
    side = "counterclockwise" if rotation_deg > 0 else "clockwise"
    return f"turned {abs(rotation_deg):.2f}° {side}"


def part_words(x: float, y: float, size: tuple[float, float]) -> str:
    """'top left', 'middle', 'bottom right' ... for a template point on a page of ``size``."""
    w, h = size
    col = ("left", "", "right")[min(2, int(3 * x / max(w, 1e-9)))]
    row = ("top", "", "bottom")[min(2, int(3 * y / max(h, 1e-9)))]
    return " ".join(p for p in (row, col) if p) or "middle"


#: Statuses the extractor may give an element in place on a photo too small to read (a rule
#: lost merges two boxes into one; a box lost is missing): judged only when the photo shows the
#: fault plainly (see :func:`layoutcheck.capture.legible`).
UNCLEAR_WHEN_SMALL = ("missing", "resized", "moved")


def too_small(readability, tolerances: Tolerances) -> bool:
    """Whether a camera capture shows part of its form below the least resolution: its missing,
    resized and moved elements are then judged only where the photo shows the fault plainly."""
    return readability is not None and readability.worst_dpi < tolerances.min_dpi


EDGES = ("top", "bottom", "left", "right")


@dataclass(frozen=True)
class CutOff:
    """What of the form lies outside the captured image, under the page's pose."""

    #: Edge -> millimetres of the form beyond it (only the edges it crosses).
    beyond_mm: dict
    #: Share of the form's area (the box around its elements) that is not on the image.
    share: float
    #: Names of the sections and zones not wholly on the image.
    sections: tuple[str, ...]
    zones: tuple[str, ...]

    @property
    def worst_mm(self) -> float:
        return max(self.beyond_mm.values(), default=0.0)


def beyond_edges(frames: np.ndarray, pose, input_size: tuple[float, float]) -> np.ndarray:
    """(N, 4) points of each frame beyond the image's top, bottom, left and right edges."""
    x0, t, x1, b = (frames[:, k] for k in range(4))
    corners = np.stack([np.stack([x0, t], 1), np.stack([x1, t], 1), np.stack([x1, b], 1), np.stack([x0, b], 1)], 1)
    mapped = pose.apply(corners.reshape(-1, 2)).reshape(-1, 4, 2)
    w, h = input_size
    return np.stack([-mapped[..., 1].min(1), mapped[..., 1].max(1) - h,
                     -mapped[..., 0].min(1), mapped[..., 0].max(1) - w], 1).clip(min=0.0)


def cut_off(match: Match, input_size: tuple[float, float], tolerances: Tolerances, zones=()) -> CutOff | None:
    """What of the form is outside the image (a feeder cut the page), or None when it is all there.

    The template's elements are mapped by the pose (through :meth:`Pose.apply` only, so any kind
    of pose serves); the form is incomplete when some element lies more than
    ``tolerances.max_cut_mm`` beyond an edge. The share missing is measured on a 64 x 64 grid over
    the box around the form's elements.
    """
    if match.pose is None or not match.elements:
        return None
    from .elements import MM_PER_POINT

    frames = np.array([e.frame for e in match.elements], float)
    beyond = beyond_edges(frames, match.pose, input_size) * MM_PER_POINT
    worst = beyond.max(0)
    if worst.max() <= tolerances.max_cut_mm:
        return None
    lo, hi = frames[:, :2].min(0), frames[:, 2:].max(0)
    gx, gy = np.meshgrid(np.linspace(lo[0], hi[0], 64), np.linspace(lo[1], hi[1], 64))
    pts = match.pose.apply(np.stack([gx.ravel(), gy.ravel()], 1))
    w, h = input_size
    share = float(((pts[:, 0] < 0) | (pts[:, 0] > w) | (pts[:, 1] < 0) | (pts[:, 1] > h)).mean())

    def outside(items) -> tuple[str, ...]:
        items = list(items)
        if not items:
            return ()
        far = beyond_edges(np.array([i.frame for i in items], float), match.pose, input_size).max(1) * MM_PER_POINT
        return tuple(i.name for i, d in zip(items, far) if d > tolerances.max_cut_mm)

    return CutOff({e: float(v) for e, v in zip(EDGES, worst) if v > tolerances.max_cut_mm}, share,
                  outside(match.sections), outside(zones))


def cut_off_words(cut: CutOff) -> str:
    """'Part of the form is not on the image: ...' for a :class:`CutOff`."""
    edges = sorted(cut.beyond_mm.items(), key=lambda kv: -kv[1])
    where_ = " and ".join(f"{mm:.1f} mm beyond the {edge} edge" for edge, mm in edges)
    parts = [f"Part of the form is not on the image (cut off?): {cut.share:.0%} of it is missing, {where_}"]
    if cut.sections:
        parts.append("sections outside: " + ", ".join(f"'{n}'" for n in cut.sections))
    if cut.zones:
        shown = ", ".join(f"'{n}'" for n in cut.zones[:12])
        more = f" and {len(cut.zones) - 12} more" if len(cut.zones) > 12 else ""
        parts.append(f"zones outside: {shown}{more}")
    return "; ".join(parts)


def judge(match: Match, tolerances: Tolerances, template_size: tuple[float, float],
          input_size: tuple[float, float], zones=(), camera: bool = False, readability=None,
          legible: frozenset = frozenset()) -> tuple[str, list[Finding]]:
    """Verdict and findings of a matched page, most severe finding first.

    ``zones`` (the template page's, each with ``name`` and ``frame``) are named when the page is
    incomplete. A camera capture (``camera``) is always turned and scaled: its turn, scale and
    shift are not judged. Its ``readability`` (:class:`layoutcheck.capture.Readability`) is: too
    small or too oblique a photo must be taken again (verdict ``retake``); on a photo too small,
    missing, resized and moved elements are judged only when they are in ``legible`` (ids shown plainly
    all the same, see :func:`layoutcheck.capture.legible`), the others said in one finding.
    """
    findings: list[Finding] = []
    if match.pose is None or match.support < tolerances.min_support:
        why = match.reason or (f"only {match.support:.0%} of the template's elements agree on one placement "
                               f"(at least {tolerances.min_support:.0%} needed)")
        return "unrecognised", [Finding("unrecognised", f"Not this form: {why}", value=match.support,
                                        limit=tolerances.min_support)]
    pose = match.pose
    blurred = camera and too_small(readability, tolerances)
    unclear = []
    moved_sections = {s.id for s in match.sections if s.status == "moved"}
    for s in match.sections:
        if s.status == "moved":
            dist = float(np.hypot(*s.offset_mm))
            findings.append(Finding("mismatched", f"Section '{s.name}' ({s.id}) is {dist:.1f} mm from where this form "
                                    f"has it, as a whole ({direction_words(*s.offset_mm)})", element=s.id,
                                    value=dist, limit=tolerances.element_tolerance_mm))
    for e in sorted(match.elements, key=people_first):
        if not e.judged or e.status == "ok" or (e.in_moved_section and e.section in moved_sections and e.status == "moved"):
            continue
        who = f"{e.kind.capitalize()} '{e.caption}' ({e.id})" if e.caption else f"{e.kind.capitalize()} ({e.id})"
        if blurred and e.status in UNCLEAR_WHEN_SMALL and e.id not in legible:
            unclear.append(who)
            continue
        if e.status == "missing":
            msg = f"{who} is missing"
            val = None
        elif e.status == "moved":
            val = float(np.hypot(*e.offset_mm))
            msg = f"{who} is {val:.1f} mm from where this form has it ({direction_words(*e.offset_mm)})"
        else:
            msg = f"{who} is {e.size_ratio:.0%} of its expected size"
            val = e.size_ratio
        findings.append(Finding("mismatched", msg, element=e.id, value=val,
                                limit=tolerances.element_size_pct if e.status == "resized" else tolerances.element_tolerance_mm))
    warp = match.field.largest_mm if match.field is not None else 0.0
    if warp > tolerances.max_warp_mm:
        findings.append(Finding("shifted", f"Paper not flat: parts of the content bend up to {warp:.1f} mm away from "
                                f"one flat placement (limit {tolerances.max_warp_mm:g} mm); each element was judged "
                                "against the bend", value=warp, limit=tolerances.max_warp_mm))
    cut = cut_off(match, input_size, tolerances, zones)
    if cut is not None:
        findings.append(Finding("incomplete", cut_off_words(cut), element=",".join(cut.beyond_mm),
                                value=cut.worst_mm, limit=tolerances.max_cut_mm))
    if camera:
        if unclear:
            shown = ", ".join(unclear[:3]) + (f" and {len(unclear) - 3} more" if len(unclear) > 3 else "")
            findings.append(Finding("retake", f"{len(unclear)} of the form's elements could not be made out at this "
                                    f"resolution, so are not judged: {shown}", value=float(len(unclear))))
        if readability is not None:
            where = part_words(*readability.worst_at, template_size)
            if readability.worst_dpi < tolerances.min_dpi:
                findings.append(Finding("retake", f"Photo too small to read: the form's {where} is at "
                                        f"{readability.worst_dpi:.0f} dpi (at least {tolerances.min_dpi:g} needed); "
                                        "take it again closer, or at a higher resolution", value=readability.worst_dpi,
                                        limit=tolerances.min_dpi))
            if readability.stretch > tolerances.max_stretch:
                findings.append(Finding("retake", f"Photo taken too obliquely: removing the perspective would stretch "
                                        f"the form's {where} {readability.stretch:.1f} times as much as its best part "
                                        f"(at most {tolerances.max_stretch:g}); take it again from straight above",
                                        value=readability.stretch, limit=tolerances.max_stretch))
        findings.sort(key=lambda f: SEVERITY[f.verdict])
        return (findings[0].verdict if findings else "pass"), findings
    pose = pose.affine_over((0.0, 0.0, *template_size))
    sx, sy = pose.scale_x, pose.scale_y
    worst = max(abs(sx - 1.0), abs(sy - 1.0)) * 100.0
    if worst > tolerances.max_scale_error_pct:
        size = f"{pose.scale:.2%}" if abs(sx - sy) < 0.002 else f"{sx:.2%} across and {sy:.2%} down"
        findings.append(Finding("rescaled", f"Printed at {size} of the form's size (limit ±{tolerances.max_scale_error_pct:g} %)",
                                value=worst, limit=tolerances.max_scale_error_pct))
    rot = pose.rotation_deg
    if abs(rot) > tolerances.max_skew_deg:
        findings.append(Finding("skewed", f"Content {rotation_words(rot)} (limit {tolerances.max_skew_deg:g}°)",
                                value=rot, limit=tolerances.max_skew_deg))
    shift = match.pose.shift_mm(template_size, input_size)
    dist = float(np.hypot(*shift))
    # On a cut-off page the content is off centre because the image is short, not because the
    # page was placed askew: the shift is not judged.
    if dist > tolerances.max_shift_mm and cut is None:
        findings.append(Finding("shifted", f"Content sits {direction_words(*shift)} off centre on the sheet "
                                f"(limit {tolerances.max_shift_mm:g} mm)", value=dist, limit=tolerances.max_shift_mm))
    findings.sort(key=lambda f: SEVERITY[f.verdict])
    verdict = findings[0].verdict if findings else "pass"
    return verdict, findings


def offending(match: Match, unjudged: tuple[str, ...] = (), legible: frozenset = frozenset()) -> list[dict]:
    """Offending elements and sections for the record; a section moved as one is one entry.

    Elements whose status is in ``unjudged`` are left out (missing, resized and moved ones of a photo
    too small to read, see :func:`too_small`), except those in ``legible``.
    """
    out = []
    moved = {s.id: s for s in match.sections if s.status == "moved"}
    for s in moved.values():
        out.append({"id": s.id, "kind": "section", "caption": s.name, "status": "moved",
                    "frame": [round(v, 2) for v in s.frame], "offset_mm": [round(v, 2) for v in s.offset_mm],
                    "size_ratio": None})
    for e in sorted(match.elements, key=people_first):
        if not e.judged or e.status == "ok" or (e.status in unjudged and e.id not in legible):
            continue
        if e.in_moved_section and e.section in moved and e.status == "moved":
            continue
        out.append({"id": e.id, "kind": e.kind, "caption": e.caption, "status": e.status,
                    "frame": [round(v, 2) for v in e.frame],
                    "offset_mm": None if e.offset_mm is None else [round(v, 2) for v in e.offset_mm],
                    "size_ratio": None if e.size_ratio is None else round(e.size_ratio, 4)})
    return out

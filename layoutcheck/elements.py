"""The element of a form and the one coordinate convention of the library.

Coordinates
-----------
Everything inside layoutcheck is in **PDF points** (1/72 inch, ISO 32000-1), with the origin at
the **top-left** corner of the page and **y growing downwards** (the convention of pdfplumber).
Pixels and millimetres exist only at the edges: :mod:`layoutcheck.sources` converts scans from
pixels (using the dpi) and PDFs from their bottom-left user space, and the outputs convert to
millimetres and pixels for people and for OCR.

Frames
------
An element's ``frame`` is ``(x0, top, x1, bottom)``: its own rectangle *before* it is turned by
``angle`` about the rectangle's centre. ``angle`` is in degrees, measured in the y-down page
coordinates from +x towards +y (so a positive angle looks clockwise to a person), and is kept in
``(-45, 45]``: a frame is always described along the page axis nearest to its own, so a vertical
ruling line is a tall frame with an angle near 0, not a wide frame at 90 degrees. ``angle`` is
``None`` where the orientation cannot be measured (for instance a blob of printed text in a scan);
the frame is then the axis-aligned bounding box.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from typing import Iterable, Sequence

import numpy as np

POINTS_PER_INCH = 72.0  # ISO 32000-1, 8.3.2.3: the default user space unit is 1/72 inch
MM_PER_INCH = 25.4  # exact, by definition of the inch (international yard and pound, 1959)
MM_PER_POINT = MM_PER_INCH / POINTS_PER_INCH

#: Element kinds, and the class each belongs to for matching: elements of one class may be
#: matched to each other (a horizontal line becomes a vertical one on a page turned 90 degrees).
KIND_CLASS = {
    "hline": "line",
    "vline": "line",
    "line": "line",
    "box": "box",
    "checkbox": "box",
    "label": "text",
    "textblock": "text",
    "field": "field",
    "mark": "mark",
}
KINDS = tuple(KIND_CLASS)


@dataclass(frozen=True)
class Element:
    """One part of a form: a ruling line, box, checkbox, label, text block, field or mark.

    Attributes
    ----------
    id : str
        Stable, readable id in reading order, such as ``box-017``.
    kind : str
        One of :data:`KINDS`.
    frame : tuple of float
        ``(x0, top, x1, bottom)`` in points, before turning by ``angle`` (see module docs).
    angle : float or None
        Orientation in degrees in ``(-45, 45]``, y-down, or ``None`` when unknown.
    text : str or None
        Printed text of a label, or the field name of a form field.
    caption : str or None
        Nearest label text, so a person reads "box 'Vessel name' (box-017)".
    source : str
        ``"vector"``, ``"raster"``, or ``"look"`` (found on a scan by the second look at the
        place the page pose predicts, see :mod:`layoutcheck.extract.look`).
    stroke : (float or None, float or None) or None
        Thinnest stroke of the element's outline in points, across x (its upright sides) and
        across y (its level sides), in the element's own frame; None on an axis with no such
        side (a horizontal rule has no upright side), or None when not measured. A scan too
        coarse on an axis to keep such a stroke cannot show the element (see
        :func:`layoutcheck.check.too_thin`).
    """

    id: str
    kind: str
    frame: tuple[float, float, float, float]
    angle: float | None = 0.0
    text: str | None = None
    caption: str | None = None
    source: str = "vector"
    stroke: tuple[float | None, float | None] | None = None

    def __post_init__(self) -> None:
        if self.kind not in KIND_CLASS:
            raise ValueError(f"element {self.id}: unknown kind {self.kind!r}")
        x0, top, x1, bottom = (float(v) for v in self.frame)
        if not (x1 >= x0 and bottom >= top):
            raise ValueError(f"element {self.id}: frame {self.frame} has negative size")
        object.__setattr__(self, "frame", (x0, top, x1, bottom))

    @property
    def center(self) -> tuple[float, float]:
        x0, top, x1, bottom = self.frame
        return ((x0 + x1) / 2.0, (top + bottom) / 2.0)

    @property
    def size(self) -> tuple[float, float]:
        x0, top, x1, bottom = self.frame
        return (x1 - x0, bottom - top)

    @property
    def kind_class(self) -> str:
        return KIND_CLASS[self.kind]

    def label(self) -> str:
        """How a person reads this element: ``box 'Vessel name' (box-017)``."""
        name = self.kind
        words = self.caption or (self.text if self.kind in ("label", "textblock", "field") else None)
        if words:
            return f"{name} '{words}' ({self.id})"
        return f"{name} ({self.id})"

    def replace(self, **changes) -> "Element":
        return dataclasses.replace(self, **changes)

    def to_dict(self) -> dict:
        return {
            "id": self.id,
            "kind": self.kind,
            "frame": [round(v, 3) for v in self.frame],
            "angle": None if self.angle is None else round(self.angle, 4),
            "text": self.text,
            "caption": self.caption,
            "source": self.source,
            **({"stroke": [None if v is None else round(v, 3) for v in self.stroke]} if self.stroke else {}),
        }

    @classmethod
    def from_dict(cls, data: dict) -> "Element":
        return cls(
            id=str(data["id"]),
            kind=str(data["kind"]),
            frame=tuple(float(v) for v in data["frame"]),  # type: ignore[arg-type]
            angle=None if data.get("angle") is None else float(data["angle"]),
            text=data.get("text"),
            caption=data.get("caption"),
            source=str(data.get("source", "vector")),
            stroke=None if data.get("stroke") is None else tuple(None if v is None else float(v)
                                                                  for v in data["stroke"]),  # type: ignore[arg-type]
        )


@dataclass(frozen=True)
class PageElements:
    """What an extractor found on one page: its size in points and its elements."""

    width: float
    height: float
    elements: tuple[Element, ...]
    source: str = "vector"
    #: How the page was read, for people: e.g. "vector" or "raster 300 dpi".
    note: str = ""
    #: Resolution of a scanned input per axis ``(x, y)``, dpi (None for a vector page).
    dpi_xy: tuple[float, float] | None = None

    def of_class(self, kind_class: str) -> list[Element]:
        return [e for e in self.elements if e.kind_class == kind_class]


def normalise_angle(angle_deg: float, width: float, height: float) -> tuple[float, float, float]:
    """Bring an orientation into ``(-45, 45]``, swapping width and height when turned by 90.

    Returns ``(angle, width, height)`` describing the same rectangle.
    """
    a = (angle_deg + 90.0) % 180.0 - 90.0  # a rectangle is the same turned by 180: [-90, 90)
    if a > 45.0:
        return a - 90.0, height, width
    if a <= -45.0:
        return a + 90.0, height, width
    return a, width, height


def frame_from_center(cx: float, cy: float, w: float, h: float) -> tuple[float, float, float, float]:
    """``(x0, top, x1, bottom)`` of a rectangle of size ``w`` x ``h`` centred on ``(cx, cy)``."""
    return (cx - w / 2.0, cy - h / 2.0, cx + w / 2.0, cy + h / 2.0)




def outline(element: Element) -> np.ndarray:
    """The four corners of the element's turned rectangle, 4 x 2, clockwise from top-left."""
    cx, cy = element.center
    w, h = element.size
    a = math.radians(element.angle or 0.0)
    c, s = math.cos(a), math.sin(a)
    local = np.array([[-w / 2, -h / 2], [w / 2, -h / 2], [w / 2, h / 2], [-w / 2, h / 2]])
    rot = np.array([[c, -s], [s, c]])
    return local @ rot.T + np.array([cx, cy])


def merge_frames(frames: Iterable[Sequence[float]]) -> tuple[float, float, float, float]:
    """Smallest axis-aligned frame holding all the given frames."""
    arr = np.asarray(list(frames), dtype=float)
    return (float(arr[:, 0].min()), float(arr[:, 1].min()), float(arr[:, 2].max()), float(arr[:, 3].max()))


def frame_overlap(a: Sequence[float], b: Sequence[float]) -> float:
    """Area of the intersection of two axis-aligned frames (0 when apart)."""
    w = min(a[2], b[2]) - max(a[0], b[0])
    h = min(a[3], b[3]) - max(a[1], b[1])
    return max(w, 0.0) * max(h, 0.0)


def frame_contains(outer: Sequence[float], inner: Sequence[float], margin: float = 0.0) -> bool:
    """Whether ``inner`` lies inside ``outer`` grown by ``margin`` points."""
    return (
        inner[0] >= outer[0] - margin
        and inner[1] >= outer[1] - margin
        and inner[2] <= outer[2] + margin
        and inner[3] <= outer[3] + margin
    )


def mm(points: float | np.ndarray) -> float | np.ndarray:
    """Points to millimetres."""
    return points * MM_PER_POINT


def points(millimetres: float | np.ndarray) -> float | np.ndarray:
    """Millimetres to points."""
    return millimetres / MM_PER_POINT


def assign_ids(elements: Sequence[Element], row_gap: float = 3.0) -> list[Element]:
    """Give elements stable ids in reading order (rows top to bottom, then left to right), per kind.

    Elements whose tops lie within ``row_gap`` points of the row's first element share a row, so
    elements on one printed line sort left to right even when their tops differ by a hair.
    """
    by_top = sorted(elements, key=lambda e: (e.frame[1], e.frame[0]))
    rows: list[list[Element]] = []
    for e in by_top:
        if rows and e.frame[1] - rows[-1][0].frame[1] <= row_gap:
            rows[-1].append(e)
        else:
            rows.append([e])
    ordered = [e for row in rows for e in sorted(row, key=lambda e: (e.frame[0], e.frame[1], e.frame[2], e.frame[3]))]
    counters: dict[str, int] = {}
    out = []
    for e in ordered:
        counters[e.kind] = counters.get(e.kind, 0) + 1
        out.append(e.replace(id=f"{e.kind}-{counters[e.kind]:03d}"))
    return out

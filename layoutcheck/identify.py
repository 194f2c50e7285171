"""Which template pages a page is compared with: a cheap layout signature picks the few likely.

Matching a page against one template page costs a pose solve; against 50 templates it would
cost 50. :func:`candidates` first ranks every template page by the distance between layout
signatures (a few dozen numbers each, see :func:`signature`) and yields only the ``top`` best,
so the solver runs at most ``top`` times per page whatever the number of templates.

The signature is built to change little when a form is filled in, scanned, shifted a few mm or
printed at a slightly different scale, and to change much between different forms:

- the page aspect (short side over long side);
- the share of each element class (line, box, text, field, mark) and the log of their count;
- a coarse 4 x 4 grid of where element centres fall, by share, for the form's own content box
  (so a shift or a small scale change moves nothing between cells);
- a histogram of box sizes in mm (log-spaced bins).

Distances are L1 per part, weighted; text counts least (filling in a form adds text). The
grid is compared in all four quarter turns and the closest is kept, so a page scanned upside
down is not pushed out.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Iterator, Sequence

import numpy as np

from .elements import MM_PER_POINT, PageElements
from .template import Template, TemplatePage

CLASSES = ("line", "box", "text", "field", "mark")
GRID = 4
#: Box size bins in mm (long side): checkbox, small field, field, panel, large panel.
BOX_BINS_MM = np.array([0.0, 8.0, 25.0, 70.0, 150.0, np.inf])
#: Weights of the parts of the distance; text is the least reliable (filled-in forms add it).
WEIGHTS = {"aspect": 4.0, "share": 2.0, "count": 0.5, "grid": 1.0, "boxes": 1.5}
#: How many template pages reach the solver.
DEFAULT_TOP = 3


@dataclass(frozen=True)
class Signature:
    """A page's layout, in a few numbers (see the module notes)."""

    aspect: float
    share: np.ndarray  # (5,) share of elements per class
    count: np.ndarray  # (5,) log1p of the count per class, text excluded from the distance weight
    grid: np.ndarray  # (GRID, GRID) share of non-text element centres per cell
    boxes: np.ndarray  # (5,) share of boxes per size bin


def signature(width: float, height: float, elements) -> Signature:
    """Layout signature of a page of ``width`` x ``height`` points with these elements."""
    kinds = [e.kind_class for e in elements]
    counts = np.array([kinds.count(c) for c in CLASSES], float)
    total = max(counts.sum(), 1.0)
    structural = [e for e in elements if e.kind_class in ("line", "box", "mark")]
    grid = np.zeros((GRID, GRID))
    if structural:
        f = np.array([e.frame for e in structural], float)
        x0, y0 = f[:, 0].min(), f[:, 1].min()
        x1, y1 = f[:, 2].max(), f[:, 3].max()
        cx = (f[:, 0] + f[:, 2]) / 2.0
        cy = (f[:, 1] + f[:, 3]) / 2.0
        gx = np.clip(((cx - x0) / max(x1 - x0, 1e-6) * GRID).astype(int), 0, GRID - 1)
        gy = np.clip(((cy - y0) / max(y1 - y0, 1e-6) * GRID).astype(int), 0, GRID - 1)
        np.add.at(grid, (gy, gx), 1.0)
        grid /= len(structural)
    sizes = [max(e.size) * MM_PER_POINT for e in elements if e.kind_class == "box"]
    boxes = np.histogram(sizes, bins=BOX_BINS_MM)[0].astype(float) if sizes else np.zeros(len(BOX_BINS_MM) - 1)
    if boxes.sum():
        boxes /= boxes.sum()
    short, long = sorted((float(width), float(height)))
    return Signature(short / long if long > 0 else 1.0, counts / total, np.log1p(counts), grid, boxes)


def distance(a: Signature, b: Signature) -> float:
    """Weighted L1 distance between two signatures; 0 for the same layout."""
    count_w = np.array([1.0, 1.0, 0.2, 0.5, 1.0])
    share_w = np.array([1.0, 1.0, 0.3, 0.5, 1.0])
    grid = min(float(np.abs(np.rot90(a.grid, k) - b.grid).sum()) for k in range(4))
    return (WEIGHTS["aspect"] * abs(a.aspect - b.aspect)
            + WEIGHTS["share"] * float((share_w * np.abs(a.share - b.share)).sum())
            + WEIGHTS["count"] * float((count_w * np.abs(a.count - b.count)).sum())
            + WEIGHTS["grid"] * grid
            + WEIGHTS["boxes"] * float(np.abs(a.boxes - b.boxes).sum()))


_CACHE: dict[tuple[int, str], tuple[TemplatePage, Signature]] = {}


def page_signature(tp: TemplatePage, source: str) -> Signature:
    """Signature of a template page as an input of ``source`` ("vector"/"raster") shows it; cached."""
    key = (id(tp), source)
    hit = _CACHE.get(key)
    if hit is not None and hit[0] is tp:
        return hit[1]
    sig = signature(tp.width, tp.height, tp.elements_for(source))
    if len(_CACHE) > 4096:
        _CACHE.clear()
    _CACHE[key] = (tp, sig)
    return sig


def ranked(templates: Sequence[Template], found: PageElements) -> list[tuple[float, Template, TemplatePage]]:
    """Every template page with its signature distance to ``found``, nearest first (stable)."""
    sig = signature(found.width, found.height, found.elements)
    out = [(distance(sig, page_signature(tp, found.source)), t, tp) for t in templates for tp in t.pages]
    order = sorted(range(len(out)), key=lambda k: (out[k][0], k))
    return [out[k] for k in order]


def candidates(templates: Sequence[Template], found: PageElements, top: int = DEFAULT_TOP) -> Iterator[tuple[Template, TemplatePage]]:
    """The ``top`` template pages most like ``found``, nearest first.

    With ``top`` or fewer template pages in all, every one is yielded, in the templates' order,
    without computing signatures.
    """
    pages = [(t, p) for t in templates for p in t.pages]
    if len(pages) <= top:
        yield from pages
        return
    for _, t, tp in ranked(templates, found)[:top]:
        yield t, tp

"""Which template page a page is: a cheap layout signature ranks them, the solver decides.

Matching a page against one template page costs a pose solve; against 1,000 templates it would
cost 1,000. :func:`identify` first ranks every template page by the distance between layout
signatures (32 numbers each, see :func:`signature`) and solves only a short list, nearest first.
The list widens (the next nearest signatures, one by one, then all of them) while no template is
accepted with a clear margin over the runner-up, so a page whose form the signature ranks low is
still routed to it, and a page is called unrecognised only once every template page has been
tried. A template accepted without a clear margin (a look-alike of the house style, or a poor
scan) widens the search only to :attr:`IdentifySettings.settle` template pages.

The signature is built to change little when a form is filled in, scanned, shifted a few mm or
printed at a slightly different scale, and to change much between different forms:

- the page aspect (short side over long side);
- the share of each element class (line, box, text, field, mark) and the log of their count;
- a coarse 4 x 4 grid of where element centres fall, by share, for the form's own content box
  (so a shift or a small scale change moves nothing between cells);
- a histogram of box sizes in mm (log-spaced bins).

Distances are L1 per part, weighted; text counts least (filling in a form adds text). The grid
is compared in all four quarter turns and the closest is kept, so a page scanned upside down is
not pushed out.

How templates are told apart
----------------------------
A template is *accepted* when its support (the share of its judged elements that agree on one
placement) reaches the tolerances' ``min_support``. Accepted templates are ranked by their
*evidence*: each judged element that is in place counts +1, each one missing, moved (also as
part of a moved section) or resized counts -1. Elements two templates share count alike for
both, so the difference of two evidences is what the elements that tell them apart say: a
template that has a box the page lacks loses one, a template whose box the page has elsewhere
loses two. This is what routes a page to its own revision of a form, where support alone would
call a revision without a box as good as the one with it.

Revisions (templates that declare the same ``form``) are always all tried once one of them is
accepted. Two templates are *ambiguous* on a page when both are accepted and their evidence
differs by less than :attr:`IdentifySettings.ambiguity_margin` of the best's judged elements
(two different forms), or by less than :attr:`IdentifySettings.revision_margin` elements (two
revisions of one form: no element tells them apart on this page).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable, Iterator, Sequence

import numpy as np

from .consensus import Match
from .elements import MM_PER_POINT, PageElements

CLASSES = ("line", "box", "text", "field", "mark")
GRID = 4
#: Box size bins in mm (long side): checkbox, small field, field, panel, large panel.
BOX_BINS_MM = np.array([0.0, 8.0, 25.0, 70.0, 150.0, np.inf])
#: Weights of the parts of the distance; text is the least reliable (filled-in forms add it).
WEIGHTS = {"aspect": 4.0, "share": 2.0, "count": 0.5, "grid": 1.0, "boxes": 1.5}
_COUNT_W = np.array([1.0, 1.0, 0.2, 0.5, 1.0])
_SHARE_W = np.array([1.0, 1.0, 0.3, 0.5, 1.0])
#: How many template pages reach the solver first.
DEFAULT_TOP = 3
#: Layout of a signature vector: aspect, shares, counts, grid (row-major), box sizes.
_SLICES = {"aspect": slice(0, 1), "share": slice(1, 6), "count": slice(6, 11), "grid": slice(11, 27),
           "boxes": slice(27, 32)}
SIGNATURE_LENGTH = 32


@dataclass(frozen=True)
class Signature:
    """A page's layout, in a few numbers (see the module notes)."""

    aspect: float
    share: np.ndarray  # (5,) share of elements per class
    count: np.ndarray  # (5,) log1p of the count per class
    grid: np.ndarray  # (GRID, GRID) share of non-text element centres per cell
    boxes: np.ndarray  # (5,) share of boxes per size bin

    def vector(self) -> np.ndarray:
        """The signature as one float32 vector of :data:`SIGNATURE_LENGTH` numbers."""
        return np.concatenate([[self.aspect], self.share, self.count, self.grid.ravel(), self.boxes]).astype(np.float32)


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


def distances(query: np.ndarray, table: np.ndarray) -> np.ndarray:
    """Weighted L1 distance of one signature vector to each row of ``table`` (P x 32).

    Returns
    -------
    (P,) float64 array; 0 for the same layout.

    Examples
    --------
    >>> v = signature(595.0, 842.0, ()).vector()
    >>> float(distances(v, v[None, :])[0])
    0.0
    """
    q = np.asarray(query, np.float64)
    t = np.asarray(table, np.float64).reshape(-1, SIGNATURE_LENGTH)
    s = _SLICES
    qgrid = q[s["grid"]].reshape(GRID, GRID)
    turned = np.stack([np.rot90(qgrid, k).ravel() for k in range(4)])  # (4, 16)
    grid = np.abs(t[:, None, s["grid"]] - turned[None, :, :]).sum(axis=2).min(axis=1)
    return (WEIGHTS["aspect"] * np.abs(t[:, 0] - q[0])
            + WEIGHTS["share"] * (np.abs(t[:, s["share"]] - q[s["share"]]) * _SHARE_W).sum(axis=1)
            + WEIGHTS["count"] * (np.abs(t[:, s["count"]] - q[s["count"]]) * _COUNT_W).sum(axis=1)
            + WEIGHTS["grid"] * grid
            + WEIGHTS["boxes"] * np.abs(t[:, s["boxes"]] - q[s["boxes"]]).sum(axis=1))


def distance(a: Signature, b: Signature) -> float:
    """Weighted L1 distance between two signatures; 0 for the same layout."""
    return float(distances(a.vector(), b.vector()[None, :])[0])


# -- identification -------------------------------------------------------------------------------
@dataclass(frozen=True)
class IdentifySettings:
    """How far the search for a page's template goes, and when two templates are too alike.

    Defaults come from the look-alike benchmark (``bench/bench_identify.py``, results in
    docs/benchmarks.md).
    """

    #: Template pages solved first (nearest signatures).
    top: int = DEFAULT_TOP
    #: Once a template is accepted without a clear margin, the search goes on at most to this
    #: many template pages (nearest first) for a better one; with none accepted, to all.
    settle: int = 48
    #: The search stops once the best template's support leads every other template page tried
    #: (revisions of the same page aside) by this much ...
    clear_margin: float = 0.2
    #: ... and reaches this support: a weakly accepted template (a look-alike of the house style)
    #: does not stop the search while a better one may lie further down the list.
    sure_support: float = 0.7
    #: Two different forms are ambiguous on a page when both are accepted and the best's evidence
    #: leads by less than this share of its judged elements.
    ambiguity_margin: float = 0.1
    #: Two revisions of one form are ambiguous when the best's evidence leads by less than this
    #: many elements (1: no element tells them apart on the page).
    revision_margin: float = 1.0

    def __post_init__(self) -> None:
        if self.top < 1 or self.settle < self.top:
            raise ValueError(f"identify settings: top must be at least 1 and settle at least top, got {self.top}, {self.settle}")
        for name in ("clear_margin", "sure_support", "ambiguity_margin", "revision_margin"):
            v = getattr(self, name)
            if not np.isfinite(v) or v < 0:
                raise ValueError(f"identify settings: {name} must be a non-negative number, got {v!r}")


def evidence(match: Match) -> float:
    """Judged elements in place minus judged elements not (missing, moved, resized); see module notes."""
    if match.pose is None:
        return -float(sum(e.judged for e in match.elements))
    return float(sum((1 if e.status == "ok" else -1) for e in match.elements if e.judged))


def judged_count(match: Match) -> int:
    return int(sum(e.judged for e in match.elements))


@dataclass(frozen=True)
class Candidate:
    """One template page the page was solved against."""

    row: int
    match: Match
    accepted: bool
    evidence: float

    def key(self) -> tuple:
        """Rank: a pose, then accepted, then evidence (accepted) or support (not accepted)."""
        return (self.match.pose is not None, self.accepted,
                self.evidence if self.accepted else self.match.support, self.match.support)


@dataclass(frozen=True)
class Identification:
    """What :func:`identify` found: the best template page, and what it was weighed against.

    ``best`` is None only when there is no template page at all. ``rival`` is the template page
    that makes the choice ambiguous (None when it is not). ``tried`` holds every template page
    solved, by index row, in the order tried.
    """

    best: Candidate | None
    rival: Candidate | None = None
    tried: dict = field(default_factory=dict)


def identify(index, found: PageElements, solve: Callable, min_support: float,
             settings: IdentifySettings = IdentifySettings()) -> Identification:
    """The template page of ``index`` that ``found`` is, by the widening search (module notes).

    Parameters
    ----------
    index : layoutcheck.index.TemplateIndex
        The templates, with their signatures.
    found : PageElements
        The page.
    solve : callable
        ``solve(template_page) -> Match``.
    min_support : float
        Support at which a template is accepted (the tolerances' ``min_support``).

    Returns
    -------
    Identification
    """
    n = index.n_pages
    if n == 0:
        return Identification(None)
    order = index.ranked(found) if n > settings.top else np.arange(n)
    tried: dict[int, Candidate] = {}

    def run(rows) -> None:
        for r in rows:
            r = int(r)
            if r not in tried:
                m = solve(index.page(r)[1])
                tried[r] = Candidate(r, m, m.pose is not None and m.support >= min_support, evidence(m))

    def pick() -> Candidate:
        best = None
        for c in tried.values():  # first of equals wins: the nearest signature
            if best is None or c.key() > best.key():
                best = c
        return best  # type: ignore[return-value]

    # The first shortlist is solved whole, so its runner-up is known; beyond it, the search
    # stops as soon as a template is accepted with a clear margin. While none is accepted it
    # goes on to the last template page; once one is, only as far as ``settle``.
    run(order[:settings.top])
    best = pick()
    for k, r in enumerate(order[settings.top:], start=settings.top):
        if best.accepted:
            run(index.siblings(best.row))
            best = pick()
            if _clear(best, tried, index, settings) or k >= settings.settle:
                break
        run([r])
        best = pick()
    if best.accepted:
        run(index.siblings(best.row))
        best = pick()
    assert best is not None
    return Identification(best, _rival(best, tried, index, settings), tried)


def _others(best: Candidate, tried: dict, index) -> Iterator[Candidate]:
    """Tried template pages that are not ``best`` nor one of its revisions."""
    group = index.group(best.row)
    return (c for c in tried.values() if index.group(c.row) != group)


def _clear(best: Candidate, tried: dict, index, settings: IdentifySettings) -> bool:
    if not best.accepted or best.match.support < settings.sure_support:
        return False
    runner = max((c.match.support for c in _others(best, tried, index)), default=0.0)
    return best.match.support - runner >= settings.clear_margin


def _rival(best: Candidate, tried: dict, index, settings: IdentifySettings) -> Candidate | None:
    """The accepted template page too close to ``best`` (a revision first), or None."""
    if not best.accepted:
        return None
    group = index.group(best.row)
    sibs = [c for c in tried.values() if c.row != best.row and c.accepted and index.group(c.row) == group]
    if sibs:
        s = max(sibs, key=lambda c: c.evidence)
        if best.evidence - s.evidence < settings.revision_margin:
            return s
    others = [c for c in _others(best, tried, index) if c.accepted]
    if others:
        o = max(others, key=lambda c: c.evidence)
        if best.evidence - o.evidence < settings.ambiguity_margin * max(judged_count(best.match), 1):
            return o
    return None


def told_apart(a_elements: Sequence, b_elements: Sequence, tol: float) -> tuple[list[int], list[int]]:
    """Indices of the elements of ``a`` with no twin in ``b``, and of ``b`` with none in ``a``.

    Twins are of one element class, and their frames differ by at most ``tol`` points on every
    side: what stays after this are the elements that tell two revisions apart.
    """
    def frames(els):
        return np.array([e.frame for e in els], float).reshape(len(els), 4)

    fa, fb = frames(a_elements), frames(b_elements)
    same_class = np.array([[x.kind_class == y.kind_class for y in b_elements] for x in a_elements], bool).reshape(len(fa), len(fb))
    near = (np.abs(fa[:, None, :] - fb[None, :, :]).max(axis=2) <= tol) & same_class
    return list(np.flatnonzero(~near.any(axis=1))), list(np.flatnonzero(~near.any(axis=0)))


@dataclass(frozen=True)
class AlikePair:
    """Two template pages so alike that a page of the first could be taken for the second."""

    row: int
    other: int
    #: Share of the other's judged elements in place on a clean page of the first.
    support: float
    #: Evidence the first leads by on its own clean page (see the module notes).
    margin: float
    same_form: bool


def alike_pairs(index, solve: Callable, min_support: float, settings: IdentifySettings = IdentifySettings(),
                neighbours: int = 3) -> list[AlikePair]:
    """Pairs of template pages that pages would be ambiguous between.

    Each template page is taken as a clean page (as scans show it, where the template knows
    that) and identified against its ``neighbours`` nearest template pages by signature and its
    own revisions, with the rules of :func:`identify`: a pair is reported when the other is
    accepted and the page's own template does not lead it by the ambiguity margin.

    ``solve(template_page, found) -> Match``.
    """
    out: dict[tuple[int, int], AlikePair] = {}
    for a in range(index.n_pages):
        _, pa = index.page(a)
        src = "raster" if pa.raster_elements else "vector"
        found = PageElements(pa.width, pa.height, pa.elements_for(src), source=src)
        own = solve(pa, found)
        near = [int(r) for r in index.ranked(found) if r != a][:neighbours]
        for b in dict.fromkeys(near + index.siblings(a)):
            key = (min(a, b), max(a, b))
            if key in out:
                continue
            m = solve(index.page(b)[1], found)
            if m.pose is None or m.support < min_support:
                continue
            same = index.group(a) == index.group(b)
            margin = evidence(own) - evidence(m)
            limit = settings.revision_margin if same else settings.ambiguity_margin * max(judged_count(own), 1)
            if margin < limit:
                out[key] = AlikePair(a, b, m.support, margin, same)
    return sorted(out.values(), key=lambda p: (p.row, p.other))

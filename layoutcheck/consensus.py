"""Frame-voting consensus: find the pose of a page and the elements that disagree with it.

Every candidate correspondence between a template element and an input element predicts the pose
of the whole page by itself, because an element's frame has a position, a size and an
orientation. The predictions vote (pose clustering / Hough voting, after Ballard 1981 and Stockman
1987), in stages that keep each histogram small:

1. rotation, from the change of orientation of every pair whose two sides have one;
2. log-scale per template axis, from the change of size, for pairs that agree with the rotation;
3. shift, with rotation and scale fixed, on a 2-D grid (two grids half a cell apart, so a cluster
   is never split by a bin edge).

A vote is counted once per *template element* per bin, so a row of fifty identical checkboxes
cannot outvote the rest of the form. The winning cluster is refined by weighted least squares
(the similarity of Umeyama 1991; affine where x and y scales differ, as "fit to page" printing
and some feeders do) on a one-to-one assignment (``scipy.optimize.linear_sum_assignment``,
solved per connected block of the gated pair graph).

Parts vote for sections, and sections for the page: with the page pose fixed, the elements of
each section vote for the section's own residual shift. A section whose elements agree with each
other on a shift beyond tolerance is *moved as one*: it is reported once, as that section, and
the page pose is refitted on the sections that agree with the page.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field

import numpy as np
from scipy.optimize import linear_sum_assignment
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from .elements import KIND_CLASS, MM_PER_POINT
from .field import ResidualField, field_of_match
from .pose import Pose

#: Offsets (in cells) of the shift grids: two grids, the second shifted by half a cell on both
#: axes, so every point lies within a quarter cell of some cell's centre.
SHIFT_GRIDS = ((0.0, 0.0), (0.5, 0.5))
CLASS_CODE = {c: i for i, c in enumerate(sorted(set(KIND_CLASS.values())))}
LINE = CLASS_CODE["line"]
TEXT = CLASS_CODE["text"]
FIELD = CLASS_CODE["field"]


@dataclass(frozen=True)
class SolverSettings:
    """Knobs of the consensus solver; lengths in points."""

    #: Scales considered at all (a page printed at half or double size is still recognised).
    scale_range: tuple[float, float] = (0.5, 2.0)
    #: Size of a found element over its expected size under the page pose for the two to pair
    #: (an element shrunk or grown still pairs with its place, and is found resized); None: the
    #: scale range.
    pair_range: tuple[float, float] | None = None
    rotation_bin_deg: float = 1.0
    log_scale_bin: float = 0.02
    #: Shift grid cell, 3 mm: about the spread of single-element predictions.
    shift_bin: float = 8.5
    #: Most rotation hypotheses followed through (the 180-degree twin of a rotation is one).
    max_hypotheses: int = 4
    #: Pairs farther than this from their predicted place are not assigned while refining (6 mm).
    refine_gate: float = 17.0
    #: Pairs this close after refinement agree with the pose (1 mm).
    agree: float = 2.835
    #: Largest displacement still reported as "moved" rather than "missing" (25 mm).
    status_gate: float = 70.9
    #: x/y scale difference from which the affine refinement is kept (0.15 %) ...
    anisotropy: float = 0.0015
    #: ... when it also lowers the weighted squared residual by this share.
    affine_gain: float = 0.25
    #: Residual at which an element's weight in the refinement is halved (0.5 mm).
    robust_scale: float = 1.42
    #: Weight of each kind in the least-squares refinement: boxes and marks are located to a
    #: fraction of a pixel from four fitted rules; a rule's centre only across it; the box around
    #: a line of print in a scan moves with blur and threshold, so text barely counts (measured:
    #: at 0.3 it turned the demo scans' poses by up to 0.013 degrees, at 0.05 by 0.002).
    weights: dict = field(default_factory=lambda: {
        "box": 1.0, "checkbox": 1.0, "mark": 1.0, "field": 1.0,
        "hline": 0.3, "vline": 0.3, "line": 0.3, "label": 0.05, "textblock": 0.05,
    })
    #: Residual section shift that makes a section "moved as one" needs this many elements.
    section_min_elements: int = 3
    #: Pairs whose size change is this far (log) from a measured page scale do not vote.
    scale_gate: float = 0.12
    #: Most candidate pairs that vote; beyond it the most distinctive template elements vote.
    vote_budget: int = 6000
    #: Farthest a section may have moved as one and still be found (40 mm).
    section_reach: float = 113.4
    #: In the final assignment, points of distance one unit of |log(found size / expected size)|
    #: costs (2 mm for a size off by a factor e): of two partners about as near, the one of the
    #: expected size is taken.
    size_cost: float = 5.67
    #: The projective refinement is kept when it lowers the weighted squared residual by
    #: ``affine_gain`` and its perspective moves some agreeing element this far from the best
    #: affine map of the same elements (0.5 mm: far above what the blur of a flat scan fakes).
    #: A camera capture sets it to 0: a photo is seen in perspective by nature.
    perspective_min: float = 1.42
    #: Fewest agreeing elements for a projective refinement (8 parameters).
    projective_min_elements: int = 8
    #: Largest |log(sx / sy)| the vote takes from the boxes' own sizes; beyond it one scale is
    #: used (5 %: fit-to-page and feeders; the flattened sheet of a photo may be stretched more).
    max_anisotropy: float = 0.05
    #: Whether printed text votes for the page scale. On a photo of a filled form, blobs of
    #: handwriting beside the labels make text sizes unreliable: rules and boxes alone then
    #: vote (when at least ten pairs of them do).
    text_scale: bool = True
    #: Grow the agreeing set region by region from the vote's cluster (for pages seen in
    #: perspective, whose single-element votes agree only locally).
    grow: bool = False
    #: Another element this close to a rule's end meets it (about 1.5 mm): the rule's extent
    #: there is not judged (see :func:`free_rule_ends`).
    rule_meet: float = 4.25
    #: Spread the pose's weight over the page (see :func:`spread_weights`): a page whose paper
    #: bends is fitted as a whole, not to its densest table (camera captures set it).
    spread: bool = False
    #: Least share of the template's elements' extent a vote's pose must put on the input page
    #: to be followed, and least ratio of the turned form's shape (width over height of the box
    #: around it) to the page's for a turn to be voted for at all (0: any). A photo whose sheet
    #: was found shows the whole form on it, in the sheet's shape.
    min_on_page: float = 0.0


@dataclass(frozen=True)
class ElementResult:
    """How one template element was found on the input."""

    id: str
    kind: str
    caption: str | None
    frame: tuple[float, float, float, float]
    section: str | None
    status: str  # ok, moved, resized, missing
    input_index: int | None
    #: Displacement from where the page pose puts it, in the template's axes, millimetres.
    offset_mm: tuple[float, float] | None
    #: Found size over expected size (the larger deviation of width and height).
    size_ratio: float | None
    #: Whether this element is judged (counted in support and findings).
    judged: bool = True
    #: Part of a section that moved as one (the section is reported, not the element).
    in_moved_section: bool = False


@dataclass(frozen=True)
class SectionResult:
    id: str
    name: str
    frame: tuple[float, float, float, float]
    status: str  # ok, moved, partial
    offset_mm: tuple[float, float]
    support: float
    elements: int


@dataclass(frozen=True)
class Match:
    """Result of matching one input page to one template page."""

    pose: Pose | None
    support: float
    elements: tuple[ElementResult, ...]
    sections: tuple[SectionResult, ...]
    hypotheses: int = 0
    pairs: int = 0
    reason: str = ""
    #: Smooth displacement left after the pose (paper not flat), see :mod:`layoutcheck.field`;
    #: every element was judged against pose + field.
    field: "ResidualField | None" = None

    @property
    def recognised(self) -> bool:
        return self.pose is not None


# -- arrays ---------------------------------------------------------------------------------------
@dataclass(frozen=True)
class FrameArrays:
    """Elements as arrays: centres, sizes, angles (degrees, NaN unknown), class codes, texts."""

    centers: np.ndarray
    sizes: np.ndarray
    angles: np.ndarray
    classes: np.ndarray
    texts: tuple

    @classmethod
    def of(cls, elements) -> "FrameArrays":
        n = len(elements)
        f = np.array([e.frame for e in elements], dtype=float).reshape(n, 4)
        return cls(
            centers=np.column_stack([(f[:, 0] + f[:, 2]) / 2, (f[:, 1] + f[:, 3]) / 2]).reshape(n, 2),
            sizes=np.maximum(np.column_stack([f[:, 2] - f[:, 0], f[:, 3] - f[:, 1]]).reshape(n, 2), 0.05),
            angles=np.array([np.nan if e.angle is None else e.angle for e in elements], dtype=float),
            classes=np.array([CLASS_CODE[e.kind_class] for e in elements], dtype=int),
            texts=tuple(_norm_text(e.text) if e.kind_class == "text" else None for e in elements),
        )


def _norm_text(t: str | None) -> str | None:
    if not t:
        return None
    return re.sub(r"\s+", " ", t).strip().lower() or None


def _text_ids(a: list, b: list) -> tuple[np.ndarray, np.ndarray]:
    """Integer ids for texts (-1 for none), shared by both lists, so texts compare as arrays."""
    vocab: dict[str, int] = {}
    ids_a = np.array([-1 if t is None else vocab.setdefault(t, len(vocab)) for t in a], dtype=np.int64)
    ids_b = np.array([-1 if t is None else vocab.setdefault(t, len(vocab)) for t in b], dtype=np.int64)
    return ids_a, ids_b


def candidate_pairs(tmpl: FrameArrays, inp: FrameArrays, settings: SolverSettings = SolverSettings()) -> tuple[np.ndarray, np.ndarray]:
    """Template/input index pairs that could be the same element.

    Gated by kind class, by size (the longer side for rules, the area otherwise, within the
    scale range, allowing for a turn by 90 degrees) and, where both sides have text, by text.
    """
    lo, hi = settings.scale_range
    ti_all, ii_all = [], []
    for code in np.unique(tmpl.classes):
        ti = np.flatnonzero(tmpl.classes == code)
        ii = np.flatnonzero(inp.classes == code)
        if len(ti) == 0 or len(ii) == 0:
            continue
        ts, isz = tmpl.sizes[ti], inp.sizes[ii]
        if code == LINE:
            r = isz.max(1)[None, :] / ts.max(1)[:, None]
        else:
            r = np.sqrt((isz[:, 0] * isz[:, 1])[None, :] / (ts[:, 0] * ts[:, 1])[:, None])
        ok = (r >= lo) & (r <= hi)
        if code == TEXT:
            tt, it = _text_ids([tmpl.texts[k] for k in ti], [inp.texts[k] for k in ii])
            ok &= (tt[:, None] < 0) | (it[None, :] < 0) | (tt[:, None] == it[None, :])
        a, b = np.nonzero(ok)
        ti_all.append(ti[a])
        ii_all.append(ii[b])
    if not ti_all:
        return np.zeros(0, int), np.zeros(0, int)
    return np.concatenate(ti_all), np.concatenate(ii_all)


# -- voting ---------------------------------------------------------------------------------------
def _distinct_counts(keys: np.ndarray, owners: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per distinct key, how many distinct owners voted for it."""
    if len(keys) == 0:
        return np.zeros(0, np.int64), np.zeros(0, np.int64)
    keys = np.asarray(keys, np.int64)
    owners = np.asarray(owners, np.int64)
    k0 = keys.min()
    span = int(owners.max()) + 1
    both = np.unique((keys - k0) * span + owners)  # one sort of one int64 array
    uk, counts = np.unique(both // span, return_counts=True)
    return uk + k0, counts


def _quadrant_sizes(ts: np.ndarray, k: np.ndarray) -> np.ndarray:
    """Template sizes as they would lie on the input after a turn by ``k`` quarter turns."""
    odd = (k % 2) == 1
    out = ts.copy()
    out[odd] = ts[odd][:, ::-1]
    return out


def rotation_votes(tmpl: FrameArrays, inp: FrameArrays, ti: np.ndarray, ii: np.ndarray):
    """Rotation predicted by every pair with orientations on both sides, all quarter turns.

    Returns ``(pair_index, rotation_deg)``: the internal rotation (y-down, positive clockwise as
    seen) each pair supports, one row per quarter turn that its aspect ratio allows.
    """
    ta, ia = tmpl.angles[ti], inp.angles[ii]
    have = np.isfinite(ta) & np.isfinite(ia)
    idx = np.flatnonzero(have)
    if len(idx) == 0:
        return np.zeros(0, int), np.zeros(0)
    base = ia[idx] - ta[idx]
    t_aspect = np.log(tmpl.sizes[ti[idx], 0] / tmpl.sizes[ti[idx], 1])
    i_aspect = np.log(inp.sizes[ii[idx], 0] / inp.sizes[ii[idx], 1])
    rows_p, rows_r = [], []
    for k in range(4):
        expect = t_aspect if k % 2 == 0 else -t_aspect
        ok = np.abs(i_aspect - expect) <= np.maximum(0.35, 0.25 * np.abs(expect))
        rows_p.append(idx[ok])
        rows_r.append(base[ok] + 90.0 * k)
    p = np.concatenate(rows_p)
    r = (np.concatenate(rows_r) + 180.0) % 360.0 - 180.0
    return p, r


def _peaks_1d(values: np.ndarray, owners: np.ndarray, bin_width: float, lo: float, hi: float, circular: bool):
    """Bins of a 1-D vote (counted once per owner), soft over two neighbouring bins."""
    nb = int(math.ceil((hi - lo) / bin_width))
    pos = (values - lo) / bin_width
    b0 = np.floor(pos).astype(np.int64)
    b1 = np.where(pos - b0 >= 0.5, b0 + 1, b0 - 1)
    keys = np.concatenate([b0, b1])
    own = np.concatenate([owners, owners])
    if circular:
        keys %= nb
    else:
        keep = (keys >= 0) & (keys < nb)
        keys, own = keys[keep], own[keep]
    if len(keys) == 0:
        return np.zeros(nb)
    # Bins are few: a bins x owners table of "voted" flags counts each owner once per bin.
    seen = np.zeros((nb, int(own.max()) + 1), bool)
    seen[keys, own] = True
    return seen.sum(axis=1).astype(float)


def _circ_diff(a: np.ndarray, b: float) -> np.ndarray:
    return (a - b + 180.0) % 360.0 - 180.0


def shift_peak(shifts: np.ndarray, owners: np.ndarray, bin_width: float) -> tuple[int, np.ndarray]:
    """The fullest cell of a 2-D shift vote, counted once per owner: ``(count, mask of votes in it)``.

    Votes fall on each of :data:`SHIFT_GRIDS`; the best cell of any grid wins.
    """
    best = (-1, np.zeros(len(shifts), bool))
    for off in SHIFT_GRIDS:
        q = np.floor(shifts / bin_width + np.array(off)).astype(np.int64)
        keys = (q[:, 0] + (1 << 20)) * (1 << 21) + (q[:, 1] + (1 << 20))
        uk, counts = _distinct_counts(keys, owners)
        j = int(np.argmax(counts))
        if counts[j] > best[0]:
            best = (int(counts[j]), keys == uk[j])
    return best


@dataclass(frozen=True)
class Hypothesis:
    pose: Pose
    votes: int
    #: Template point at the middle of the elements whose votes made it (where it holds best).
    seed: tuple[float, float] = (0.0, 0.0)


def _log_sizes(fa: FrameArrays) -> np.ndarray:
    """One size per element: a rule's length, otherwise the square root of its area."""
    return np.where(fa.classes == LINE, np.log(fa.sizes.max(axis=1)), 0.5 * np.log(fa.sizes[:, 0] * fa.sizes[:, 1]))


def scale_spectrum(tmpl: FrameArrays, inp: FrameArrays, settings: SolverSettings = SolverSettings(),
                   bin_width: float = 0.01, keep: int = 2) -> list[float]:
    """Page scales at which the two sets' size spectra line up, best first.

    The histograms of log element size (per kind class, smoothed) of template and input are
    cross-correlated; a change of scale is a shift of the spectrum. This needs no
    correspondences, so it gates them: only pairs whose own size change is near a peak vote.
    """
    lo, hi = np.log(settings.scale_range[0]), np.log(settings.scale_range[1])
    lt, li = _log_sizes(tmpl), _log_sizes(inp)
    if len(lt) == 0 or len(li) == 0:
        return []
    a = min(lt.min(), li.min()) - 0.1
    b = max(lt.max(), li.max()) + 0.1
    nb = int(np.ceil((b - a) / bin_width)) + 1
    lags = np.arange(int(np.floor(lo / bin_width)), int(np.ceil(hi / bin_width)) + 1)
    total = np.zeros(len(lags))
    kern = np.exp(-0.5 * (np.arange(-4, 5) / 1.5) ** 2)
    for code in np.unique(tmpl.classes):
        ht = np.bincount(((lt[tmpl.classes == code] - a) / bin_width).astype(int), minlength=nb)[:nb].astype(float)
        hi_ = np.bincount(((li[inp.classes == code] - a) / bin_width).astype(int), minlength=nb)[:nb].astype(float)
        if ht.sum() == 0 or hi_.sum() == 0:
            continue
        ht = np.convolve(ht, kern, mode="same")
        hi_ = np.convolve(hi_, kern, mode="same")
        full = np.correlate(hi_, ht, mode="full")  # index k <-> lag k - (nb - 1)
        idx = lags + nb - 1
        ok = (idx >= 0) & (idx < len(full))
        total[ok] += full[idx[ok]] / np.sqrt(ht.sum() * hi_.sum())
    if not total.any():
        return []
    out = []
    for k in np.argsort(-total):
        if total[k] < 0.5 * total.max() or len(out) >= keep:
            break
        if any(abs(lags[k] * bin_width - v) < 0.05 for v in out):
            continue
        out.append(float(lags[k] * bin_width))
    return out


def voting_pairs(tmpl: FrameArrays, inp: FrameArrays, ti: np.ndarray, ii: np.ndarray,
                 settings: SolverSettings = SolverSettings()) -> tuple[np.ndarray, np.ndarray]:
    """The pairs that vote: size change near a spectrum peak, within the vote budget.

    Beyond the budget, template elements with the fewest candidates (the most distinctive:
    their single-element votes are the least ambiguous) vote first.
    """
    if len(ti) == 0:
        return ti, ii
    peaks = scale_spectrum(tmpl, inp, settings)
    if peaks:
        ls = _log_sizes(inp)[ii] - _log_sizes(tmpl)[ti]
        near = np.zeros(len(ti), bool)
        for p in peaks:
            near |= np.abs(ls - p) <= settings.scale_gate
        ti, ii = ti[near], ii[near]
    if len(ti) > settings.vote_budget:
        counts = np.bincount(ti, minlength=len(tmpl.centers))
        order = np.argsort(counts, kind="stable")
        order = order[counts[order] > 0]
        cum = np.cumsum(counts[order])
        chosen = order[: max(int(np.searchsorted(cum, settings.vote_budget, side="right")), 1)]
        sel = np.zeros(len(tmpl.centers), bool)
        sel[chosen] = True
        keep = sel[ti]
        ti, ii = ti[keep], ii[keep]
    return ti, ii


def gated_pairs(tmpl: FrameArrays, inp: FrameArrays, settings: SolverSettings = SolverSettings()) -> tuple[np.ndarray, np.ndarray]:
    """Voting pairs made directly, without forming every compatible pair first.

    Same result as :func:`voting_pairs` on :func:`candidate_pairs` (up to the order of pairs),
    but the inputs of each class are sorted by size, so each template element's candidates near
    a spectrum peak are one contiguous run found by binary search, and the budget is applied to
    the run lengths before any pair exists.
    """
    peaks = scale_spectrum(tmpl, inp, settings)
    if not peaks:
        return np.zeros(0, int), np.zeros(0, int)
    lt, li = _log_sizes(tmpl), _log_sizes(inp)
    runs_t, runs_start, runs_len, sorted_of = [], [], [], {}
    for code in np.unique(tmpl.classes):
        tix = np.flatnonzero(tmpl.classes == code)
        iix = np.flatnonzero(inp.classes == code)
        if len(iix) == 0:
            continue
        order = iix[np.argsort(li[iix], kind="stable")]
        sorted_of[int(code)] = order
        keys = li[order]
        merged_lo = np.full(len(tix), np.inf)
        merged_hi = np.full(len(tix), -np.inf)
        for p in peaks:  # peaks are at least 0.05 apart; their windows may overlap: take the hull
            merged_lo = np.minimum(merged_lo, lt[tix] + p - settings.scale_gate)
            merged_hi = np.maximum(merged_hi, lt[tix] + p + settings.scale_gate)
        a = np.searchsorted(keys, merged_lo, side="left")
        b = np.searchsorted(keys, merged_hi, side="right")
        runs_t.append(tix)
        runs_start.append(np.column_stack([np.full(len(tix), code), a]))
        runs_len.append(b - a)
    if not runs_t:
        return np.zeros(0, int), np.zeros(0, int)
    t_all = np.concatenate(runs_t)
    start = np.concatenate(runs_start)
    length = np.concatenate(runs_len)
    if length.sum() > settings.vote_budget:
        order = np.argsort(length, kind="stable")
        order = order[length[order] > 0]
        cum = np.cumsum(length[order])
        chosen = order[: max(int(np.searchsorted(cum, settings.vote_budget, side="right")), 1)]
        t_all, start, length = t_all[chosen], start[chosen], length[chosen]
    total = int(length.sum())
    if total == 0:
        return np.zeros(0, int), np.zeros(0, int)
    rep_t = np.repeat(t_all, length)
    rep_code = np.repeat(start[:, 0], length)
    offsets = np.arange(total) - np.repeat(np.cumsum(length) - length, length)
    pos = np.repeat(start[:, 1], length) + offsets
    ii = np.empty(total, dtype=int)
    for code, order in sorted_of.items():
        m = rep_code == code
        ii[m] = order[pos[m]]
    ti = rep_t
    text = tmpl.classes[ti] == TEXT
    if text.any():
        ta, tb = _text_ids([tmpl.texts[x] for x in ti[text]], [inp.texts[y] for y in ii[text]])
        ok = np.ones(len(ti), bool)
        ok[np.flatnonzero(text)] = (ta < 0) | (tb < 0) | (ta == tb)
        ti, ii = ti[ok], ii[ok]
    return ti, ii


def spatial_pairs(pred: np.ndarray, tmpl: FrameArrays, inp: FrameArrays, radius: float, scale: float = 1.0,
                  settings: SolverSettings = SolverSettings(), only: np.ndarray | None = None,
                  free: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Compatible pairs whose input element lies within ``radius`` of the predicted place.

    Same kind class, size within the pair range (by default the scale range) of the expected
    size, and equal text where both sides have text; found with k-d trees, so the cost grows
    with the elements, not with their product. ``only`` limits the template elements asked about, ``free`` (a mask) the
    input elements that may answer.
    """
    from scipy.spatial import cKDTree

    lo, hi = settings.pair_range or settings.scale_range
    out_t, out_i = [], []
    lt, li = _log_sizes(tmpl), _log_sizes(inp)
    t_ok = np.ones(len(tmpl.classes), bool) if only is None else np.isin(np.arange(len(tmpl.classes)), only)
    i_ok = np.ones(len(inp.classes), bool) if free is None else free
    for code in np.unique(tmpl.classes):
        tix = np.flatnonzero((tmpl.classes == code) & t_ok)
        iix = np.flatnonzero((inp.classes == code) & i_ok)
        if len(tix) == 0 or len(iix) == 0:
            continue
        sdm = cKDTree(pred[tix]).sparse_distance_matrix(cKDTree(inp.centers[iix]), radius, output_type="ndarray")
        if len(sdm) == 0:
            continue
        a, b = tix[sdm["i"]], iix[sdm["j"]]
        r = np.exp(li[b] - lt[a]) / scale
        ok = (r >= lo) & (r <= hi)
        if code == TEXT:
            ta, tb = _text_ids([tmpl.texts[x] for x in a], [inp.texts[y] for y in b])
            ok &= (ta < 0) | (tb < 0) | (ta == tb)
        out_t.append(a[ok])
        out_i.append(b[ok])
    if not out_t:
        return np.zeros(0, int), np.zeros(0, int)
    return np.concatenate(out_t), np.concatenate(out_i)


def vote_pose(tmpl: FrameArrays, inp: FrameArrays, ti: np.ndarray, ii: np.ndarray,
              settings: SolverSettings = SolverSettings(), allow=None) -> list[Hypothesis]:
    """Pose hypotheses from frame votes, best first.

    Parameters
    ----------
    tmpl, inp : FrameArrays
        Template and input elements.
    ti, ii : (P,) int arrays
        Candidate correspondences (template index, input index).
    allow : callable, optional
        ``allow(rotation_deg) -> bool``: the turns considered at all (default any).

    Returns
    -------
    list of Hypothesis
        Each with a pose (template points -> input points) and the number of distinct template
        elements whose single-element prediction fell in the winning shift cell.
    """
    ti, ii = voting_pairs(tmpl, inp, ti, ii, settings)
    if len(ti) == 0:
        return []
    pidx, prot = rotation_votes(tmpl, inp, ti, ii)
    if len(pidx):
        hist = _peaks_1d(prot, ti[pidx], settings.rotation_bin_deg, -180.0, 180.0, circular=True)
        smooth = hist + 0.5 * (np.roll(hist, 1) + np.roll(hist, -1))
        order = np.argsort(-smooth)
        if allow is not None:
            order = np.array([b for b in order if allow(-180.0 + (b + 0.5) * settings.rotation_bin_deg)], int)
        rotations = []
        for b in order:
            if smooth[b] < 0.5 * smooth[order[0]] or len(rotations) >= settings.max_hypotheses:
                break
            centre = -180.0 + (b + 0.5) * settings.rotation_bin_deg
            if any(abs(_circ_diff(np.array([centre]), r)[0]) < 10.0 for r in rotations):
                continue
            near = np.abs(_circ_diff(prot, centre)) <= 1.0 * settings.rotation_bin_deg
            # A bin allowed only for its neighbours' votes (the turns next to it were not
            # allowed) holds none of its own: its centre stands.
            rotations.append(float(centre + (np.median(_circ_diff(prot[near], centre)) if near.any() else 0.0)))
    else:
        rotations = [r for r in (0.0, 90.0, 180.0, -90.0) if allow is None or allow(r)]

    hyps = []
    for rot in rotations:
        h = _hypothesis_for_rotation(tmpl, inp, ti, ii, pidx, prot, rot, settings)
        if h is not None:
            hyps.append(h)
    hyps.sort(key=lambda h: -h.votes)
    return hyps


def _hypothesis_for_rotation(tmpl, inp, ti, ii, pidx, prot, rot, settings) -> Hypothesis | None:
    k = int(np.round(rot / 90.0)) % 4
    # Pairs that agree with this rotation: those with orientations, within 2 bins; the others
    # (text blobs of scans) are taken on trust and sorted out by the shift vote.
    agree = np.ones(len(ti), bool)
    has_angle = np.zeros(len(ti), bool)
    has_angle[pidx] = True
    agree[has_angle] = False
    ok_rot = np.abs(_circ_diff(prot, rot)) <= 2.0 * settings.rotation_bin_deg
    agree[pidx[ok_rot]] = True
    sel = np.flatnonzero(agree)
    if len(sel) == 0:
        return None
    t_i, i_i = ti[sel], ii[sel]
    ts = _quadrant_sizes(tmpl.sizes[t_i], np.full(len(sel), k))
    isz = inp.sizes[i_i]
    is_line = tmpl.classes[t_i] == LINE
    # Scale along each template axis; a rule tells only its length.
    with np.errstate(divide="ignore", invalid="ignore"):
        lr = np.log(isz / ts)
    long_axis = np.argmax(ts, axis=1)
    ls = np.where(is_line, lr[np.arange(len(sel)), long_axis], lr.mean(axis=1))
    lo, hi = np.log(settings.scale_range[0]), np.log(settings.scale_range[1])
    fin = np.isfinite(ls) & (ls >= lo) & (ls <= hi)
    if not fin.any():
        return None
    by = fin
    if not settings.text_scale:
        shaped = fin & (tmpl.classes[t_i] != TEXT)
        by = shaped if shaped.sum() >= 10 else fin
    hist = _peaks_1d(ls[by], t_i[by], settings.log_scale_bin, lo, hi, circular=False)
    smooth = hist + 0.5 * (np.roll(hist, 1) + np.roll(hist, -1))
    b = int(np.argmax(smooth))
    centre = lo + (b + 0.5) * settings.log_scale_bin
    near = by & (np.abs(ls - centre) <= 1.5 * settings.log_scale_bin)
    log_s = float(np.median(ls[near]))
    # Per-axis scales from boxes in the peak (template axes; after an odd turn they swap).
    boxy = near & ~is_line & (tmpl.classes[t_i] != TEXT)
    if boxy.sum() >= 3:
        lx, ly = np.median(lr[boxy, 0]), np.median(lr[boxy, 1])
        sx, sy = (math.exp(ly), math.exp(lx)) if k % 2 else (math.exp(lx), math.exp(ly))
        if abs(math.log(sx / sy)) > settings.max_anisotropy:
            sx = sy = math.exp(log_s)
    else:
        sx = sy = math.exp(log_s)
    a = math.radians(rot)
    c, s = math.cos(a), math.sin(a)
    lin = np.array([[c, -s], [s, c]]) @ np.diag([sx, sy])
    keep = np.abs(ls - log_s) <= 0.15
    keep &= np.isfinite(ls)
    t_i, i_i = t_i[keep], i_i[keep]
    if len(t_i) == 0:
        return None
    shifts = inp.centers[i_i] - tmpl.centers[t_i] @ lin.T
    votes, in_bin = shift_peak(shifts, t_i, settings.shift_bin)
    t0 = np.median(shifts[in_bin], axis=0)
    m = np.eye(3)
    m[:2, :2] = lin
    m[:2, 2] = t0
    seed = np.median(tmpl.centers[t_i[in_bin]], axis=0)
    return Hypothesis(Pose(m), votes, (float(seed[0]), float(seed[1])))


# -- assignment and refinement --------------------------------------------------------------------
def assign(pred: np.ndarray, inp_centers: np.ndarray, ti: np.ndarray, ii: np.ndarray, gate: float,
           cost_extra: np.ndarray | None = None) -> np.ndarray:
    """One-to-one assignment of template elements to input elements near their predicted places.

    ``pred`` are the predicted centres of all template elements; only candidate pairs within
    ``gate`` points are considered. Solved exactly with ``linear_sum_assignment`` per connected
    block of the gated pair graph. Returns, per template element, the input index or -1.
    """
    n_t = len(pred)
    out = np.full(n_t, -1, dtype=int)
    if len(ti) == 0:
        return out
    d = np.hypot(*(pred[ti] - inp_centers[ii]).T)
    cost = d if cost_extra is None else d + cost_extra
    ok = d <= gate
    ti, ii, cost = ti[ok], ii[ok], cost[ok]
    if len(ti) == 0:
        return out
    n_i = int(inp_centers.shape[0])
    # Most elements have exactly one candidate that has no other: assign those directly.
    t_deg = np.bincount(ti, minlength=n_t)
    i_deg = np.bincount(ii, minlength=n_i)
    lone = (t_deg[ti] == 1) & (i_deg[ii] == 1)
    out[ti[lone]] = ii[lone]
    ti, ii, cost = ti[~lone], ii[~lone], cost[~lone]
    if len(ti) == 0:
        return out
    big = gate * 10.0 + 1.0
    rt, rinv = np.unique(ti, return_inverse=True)
    ct, cinv = np.unique(ii, return_inverse=True)
    if len(rt) * len(ct) <= 250_000:
        # The blocks are independent, so one solve of their union is the same optimum as one
        # solve per block, without a Python loop over blocks.
        mat = np.full((len(rt), len(ct)), big)
        np.minimum.at(mat, (rinv, cinv), cost)
        r, c = linear_sum_assignment(mat)
        good = mat[r, c] < big
        out[rt[r[good]]] = ct[c[good]]
        return out
    g = coo_matrix((np.ones(len(ti)), (ti, n_t + ii)), shape=(n_t + n_i, n_t + n_i))
    ncomp, labels = connected_components(g, directed=False)
    comp = labels[ti]
    order = np.argsort(comp, kind="stable")
    ti, ii, cost, comp = ti[order], ii[order], cost[order], comp[order]
    starts = np.flatnonzero(np.r_[True, comp[1:] != comp[:-1]])
    ends = np.r_[starts[1:], len(comp)]
    for s, e in zip(starts, ends):
        rt, rinv = np.unique(ti[s:e], return_inverse=True)
        ct, cinv = np.unique(ii[s:e], return_inverse=True)
        mat = np.full((len(rt), len(ct)), big)
        np.minimum.at(mat, (rinv, cinv), cost[s:e])
        r, c = linear_sum_assignment(mat)
        good = mat[r, c] < big
        out[rt[r[good]]] = ct[c[good]]
    return out


#: Cells per side of the grid over which :func:`spread_weights` evens the weight out, and the
#: elements per cell that count in full.
SPREAD_CELLS = 8
SPREAD_PER_CELL = 3


def spread_weights(points: np.ndarray, w: np.ndarray, cells: int = SPREAD_CELLS,
                   per_cell: int = SPREAD_PER_CELL) -> np.ndarray:
    """Weights evened out over the area the points cover.

    The points' bounding box is cut into ``cells`` x ``cells`` cells; in a cell holding ``n``
    points each weight is multiplied by ``min(1, per_cell / n)``. A table of a hundred boxes then
    counts about as much as a few elements elsewhere: when the paper bends, no pose fits every
    part, and the pose fitted over the whole form (its bend left to the residual field) is not
    pulled towards the densest part, which would tilt it at the page's far edges.
    """
    pts = np.asarray(points, float).reshape(-1, 2)
    if len(pts) == 0:
        return np.asarray(w, float)
    lo, hi = pts.min(0), pts.max(0)
    ij = np.clip(((pts - lo) / np.maximum(hi - lo, 1e-9) * cells).astype(int), 0, cells - 1)
    cell = ij[:, 0] * cells + ij[:, 1]
    n = np.bincount(cell, minlength=cells * cells)[cell]
    return np.asarray(w, float) * np.minimum(1.0, per_cell / n)


def fit_pose(src: np.ndarray, dst: np.ndarray, w: np.ndarray, settings: SolverSettings,
             projective: bool = True) -> Pose | None:
    """Weighted similarity; affine when the x and y scales measurably differ; projective when
    the perspective is measurable and explains the elements clearly better (model choice by the
    share of weighted squared residual removed, as between similarity and affine). With
    ``settings.spread`` the weights are evened out over the page first (:func:`spread_weights`)."""
    if settings.spread:
        w = spread_weights(src, w)
    sim = Pose.from_pairs(src, dst, "similarity", w)
    if not sim:
        return None
    if len(src) < 6:
        return sim
    aff = Pose.from_pairs(src, dst, "affine", w)
    if not aff:
        return sim
    ws = float((w * sim.residuals(src, dst) ** 2).sum())
    wa = float((w * aff.residuals(src, dst) ** 2).sum())
    best, wb = sim, ws
    if not (abs(aff.scale_x / aff.scale_y - 1.0) <= settings.anisotropy and abs(aff.shear_deg) <= 0.1):
        if wa < (1.0 - settings.affine_gain) * ws:
            best, wb = aff, wa
    if not projective or len(src) < settings.projective_min_elements:
        return best
    proj = Pose.from_pairs(src, dst, "projective", w)
    if not proj:
        return best
    wp = float((w * proj.residuals(src, dst) ** 2).sum())
    # How far the perspective itself moves the elements: projective against the best affine map.
    bend = float(np.hypot(*(proj.apply(src) - Pose.from_pairs(src, proj.apply(src), "affine").apply(src)).T).max())
    if bend >= settings.perspective_min and wp < (1.0 - settings.affine_gain) * min(wb, wa):
        return proj
    return best


def refine(pose: Pose, tmpl: FrameArrays, inp: FrameArrays, ti: np.ndarray | None, ii: np.ndarray | None,
           weights: np.ndarray, settings: SolverSettings, usable: np.ndarray | None = None, rounds: int = 4):
    """Alternate assignment and least squares; returns ``(pose, assignment, agreeing mask)``.

    With ``ti``/``ii`` None, the pairs of each round are the compatible ones near the predicted
    places (:func:`spatial_pairs`); otherwise the given candidate pairs.
    """
    def pairs(pred, gate, scale):
        if ti is None:
            return spatial_pairs(pred, tmpl, inp, gate, scale, settings)
        return ti, ii

    gate = settings.refine_gate
    assignment = np.full(len(tmpl.centers), -1)
    agree = np.zeros(len(tmpl.centers), bool)
    for r in range(rounds):
        pred = pose.apply(tmpl.centers)
        assignment = assign(pred, inp.centers, *pairs(pred, gate, pose.scale), gate)
        got = assignment >= 0
        if usable is not None:
            got &= usable
        if got.sum() < 2:
            return pose, assignment, agree
        res = np.hypot(*(pred[got] - inp.centers[assignment[got]]).T)
        # Agreeing set: within the gate now, the tolerance at the end (shrinking schedule).
        lim = max(gate * (0.5 ** r), settings.agree * 2.0)
        keep = res <= lim
        use = np.flatnonzero(got)[keep]
        if len(use) < 2:
            return pose, assignment, agree
        # Cauchy reweighting after the first round: an element a little off its place (still
        # within tolerance) must not pull the page pose towards it.
        w = weights[use] if r == 0 else weights[use] / (1.0 + (res[keep] / settings.robust_scale) ** 2)
        new = fit_pose(tmpl.centers[use], inp.centers[assignment[use]], w, settings)
        if new is None:
            return pose, assignment, agree
        moved = float(np.abs(new.apply(tmpl.centers) - pred).max())
        pose = new
        gate = max(settings.agree * 3.0, gate * 0.6)
        if moved < 0.01 and r >= 1:
            break  # converged: no predicted place moved by a hundredth of a point
    pred = pose.apply(tmpl.centers)
    assignment = assign(pred, inp.centers, *pairs(pred, settings.refine_gate, pose.scale), settings.refine_gate)
    got = assignment >= 0
    agree = np.zeros(len(pred), bool)
    agree[got] = np.hypot(*(pred[got] - inp.centers[assignment[got]]).T) <= settings.agree
    return pose, assignment, agree


def grow(h: Hypothesis, tmpl: FrameArrays, inp: FrameArrays, weights: np.ndarray, settings: SolverSettings,
         start: float = 0.3, factor: float = 1.5, pairs: tuple[np.ndarray, np.ndarray] | None = None) -> Pose:
    """Grow the agreeing set region by region from the vote's cluster; returns the pose.

    On a page seen in perspective, single-element votes agree only locally: the winning shift
    cell holds one region of the form. Starting from the template elements within ``start`` of
    the page's extent around :attr:`Hypothesis.seed`, the pose is refitted on the elements of a
    disc that widens by ``factor`` each round, each round's pose predicting the next ring's
    places; the perspective is freed only once the disc spans most of the page (a homography
    fitted on one corner would not extrapolate). ``pairs`` limits the candidate pairs (else
    any compatible pair near its predicted place is one).
    """
    d = np.hypot(*(tmpl.centers - np.array(h.seed)).T)
    reach = float(d.max()) if len(d) else 0.0
    radius = max(start * reach, 3.0 * settings.shift_bin)
    pose = h.pose
    while True:
        inside = np.flatnonzero(d <= radius)
        for _ in range(2):
            pred = pose.apply(tmpl.centers)
            if pairs is None:
                cand = spatial_pairs(pred, tmpl, inp, settings.refine_gate, pose.scale, settings, only=inside)
            else:
                sel = np.isin(pairs[0], inside)
                cand = (pairs[0][sel], pairs[1][sel])
            a = assign(pred, inp.centers, *cand, settings.refine_gate)
            got = np.flatnonzero(a >= 0)
            if len(got) < 3:
                break
            res = np.hypot(*(pred[got] - inp.centers[a[got]]).T)
            use = got[res <= max(settings.agree * 2.0, np.median(res) * 3.0)]
            new = fit_pose(tmpl.centers[use], inp.centers[a[use]], weights[use], settings,
                           projective=radius >= 0.6 * reach)
            if new is None:
                break
            pose = new
        if radius >= reach:
            return pose
        radius = min(reach, radius * factor)


def _strong(hyps: list[Hypothesis]) -> list[Hypothesis]:
    """Hypotheses worth refining: those with at least half the votes of the best."""
    if not hyps:
        return hyps
    return [h for h in hyps if h.votes >= 0.5 * hyps[0].votes]


def _most_assigned(hyps: list[Hypothesis], tmpl: FrameArrays, inp: FrameArrays, settings: SolverSettings) -> Hypothesis:
    """The hypothesis under which most template elements find a partner near their place."""
    def count(h):
        pred = h.pose.apply(tmpl.centers)
        a = assign(pred, inp.centers, *spatial_pairs(pred, tmpl, inp, settings.refine_gate, h.pose.scale, settings),
                   settings.refine_gate)
        return int((a >= 0).sum())
    return max(hyps, key=count)


def solve_correspondences(model_frames: FrameArrays, input_frames: FrameArrays, ti: np.ndarray, ii: np.ndarray,
                          settings: SolverSettings = SolverSettings(), weights: np.ndarray | None = None):
    """Pose from candidate correspondences alone: vote, then refine on the agreeing set.

    Returns ``(pose or None, inlier_mask over the pairs)``, the shape of a robust estimator's
    answer, so it can be compared with RANSAC on the same correspondences.
    """
    if weights is None:
        weights = np.ones(len(model_frames.centers))
    hyps = _strong(vote_pose(model_frames, input_frames, ti, ii, settings))
    best = None
    for h in hyps:
        if settings.grow:
            h = Hypothesis(grow(h, model_frames, input_frames, weights, settings, pairs=(ti, ii)), h.votes, h.seed)
        # Refine on the given pairs near this hypothesis' prediction (twice the refinement gate).
        pred = h.pose.apply(model_frames.centers)
        near = np.hypot(*(pred[ti] - input_frames.centers[ii]).T) <= 2.0 * settings.refine_gate
        pose, assignment, agree = refine(h.pose, model_frames, input_frames, ti[near], ii[near], weights, settings)
        score = int(agree.sum())
        if best is None or score > best[0]:
            best = (score, pose, assignment, agree)
    if best is None:
        return None, np.zeros(len(ti), bool)
    _, pose, assignment, agree = best
    inl = (assignment[ti] == ii) & agree[ti]
    return pose, inl


# -- the page -------------------------------------------------------------------------------------
def size_ratios(tmpl: FrameArrays, inp: FrameArrays, t: np.ndarray, i: np.ndarray, pose: Pose) -> np.ndarray:
    """Found size over expected size per pair; the component farther from 1 (rules: length only)."""
    k = int(np.round(-pose.rotation_deg / 90.0)) % 4
    ts = tmpl.sizes[t] * np.array([pose.scale_x, pose.scale_y])
    if k % 2:
        ts = ts[:, ::-1]
    r = inp.sizes[i] / ts
    longer = np.argmax(ts, axis=1)
    worst = np.argmax(np.abs(np.log(r)), axis=1)
    pick = np.where(tmpl.classes[t] == LINE, longer, worst)
    return r[np.arange(len(t)), pick]


def solve(template_elements, input_elements, sections=(), *, judged=None,
          settings: SolverSettings = SolverSettings(), position_tol: float = 5.67, size_tol: float = 0.10,
          slack: dict | None = None, page_size: tuple[float, float] | None = None, unseen=None,
          near: Pose | None = None) -> Match:
    """Match one input page to one template page.

    Parameters
    ----------
    template_elements, input_elements : sequence of Element
    sections : sequence of Section
        The template page's sections (element ids per section).
    judged : (N,) bool array, optional
        Template elements whose disagreement counts (default all).
    position_tol : float
        Points an element may sit from its place and still be ``ok`` (default 2 mm).
    size_tol : float
        Relative size change still ``ok`` (default 10 %).
    slack : dict, optional
        Extra position tolerance per element id, in points (learned from good samples).
    page_size : (width, height), optional
        Size of the input page in points. An element whose expected place lies partly off the
        page is not judged: the sheet cannot show it (a corner mark of a turned scan, say).
    unseen : (N,) bool array, optional
        Template elements the input cannot be relied on to show (drawn too thin for its
        resolution): a second vote for the pose is held without them.
    near : Pose, optional
        A pose known to within a few millimetres (a photo read a second time through its first
        pose, see :func:`layoutcheck.check.read_again`): the refinement starts from it, with no
        vote and no region growing.

    Returns
    -------
    Match
    """
    # A label is named by its own text where it has no caption.
    tmpl_els = [e if e.caption or e.kind_class != "text" else e.replace(caption=e.text) for e in template_elements]
    inp_els = list(input_elements)
    slack = slack or {}
    n = len(tmpl_els)
    judged = np.ones(n, bool) if judged is None else np.asarray(judged, bool)
    if n == 0:
        return Match(None, 0.0, (), (), reason="the template page has no elements")
    if not inp_els:
        return Match(None, 0.0, _all_missing(tmpl_els, sections, judged), (), reason="no elements found on the page")
    tmpl, inp = FrameArrays.of(tmpl_els), FrameArrays.of(inp_els)

    allow = extent = None
    if settings.min_on_page > 0 and page_size is not None:
        extent = _extent(tmpl_els)
        ew, eh = extent[2] - extent[0], extent[3] - extent[1]

        def allow(rot: float) -> bool:
            # The form turned by ``rot`` has about the page's shape (a portrait form turned a
            # quarter does not lie on a portrait sheet).
            a = math.radians(rot)
            bw, bh = abs(ew * math.cos(a)) + abs(eh * math.sin(a)), abs(ew * math.sin(a)) + abs(eh * math.cos(a))
            r1, r2 = bw / max(bh, 1e-9), page_size[0] / max(page_size[1], 1e-9)
            return min(r1, r2) / max(r1, r2) >= settings.min_on_page

    def hypotheses(voters: FrameArrays):
        ti, ii = gated_pairs(voters, inp, settings)
        hyps = vote_pose(voters, inp, ti, ii, settings, allow)
        if allow is not None:
            hyps = [h for h in hyps if share_on_page(h.pose, extent, page_size) >= settings.min_on_page]
        hyps = _strong(hyps)
        return ([_most_assigned(hyps, voters, inp, settings)] if len(hyps) > 1 else hyps), ti

    if near is not None:
        hyps, ti = [Hypothesis(near, 0)], np.zeros(0, int)
    else:
        hyps, ti = hypotheses(tmpl)
    if near is None and unseen is not None and np.any(unseen):
        # Also a vote of the elements the input can show: where most of the others are lost,
        # they would set the scale the pairs are gated by, and chance pairs outvote the few found.
        # Where they are there after all, the first vote is the better; the refined score decides.
        hyps += hypotheses(FrameArrays.of([e for e, u in zip(tmpl_els, unseen) if not u]))[0]
    weights = np.array([settings.weights.get(e.kind, 0.3) for e in tmpl_els])
    best = None
    for h in hyps:
        starts = [h.pose, grow(h, tmpl, inp, weights, settings)] if settings.grow and near is None else [h.pose]
        for start in starts:
            pose, assignment, agree = refine(start, tmpl, inp, None, None, weights, settings)
            score = float(agree[judged].sum()) + 0.01 * float(agree.sum())
            if best is None or score > best[0]:
                best = (score, pose, assignment, agree)
    if best is None:
        return Match(None, 0.0, _all_missing(tmpl_els, sections, judged), (), len(hyps), len(ti),
                     reason="no element of the template has a counterpart on the page")
    _, pose, assignment, agree = best

    sec_of = np.full(n, -1)
    index = {e.id: k for k, e in enumerate(tmpl_els)}
    for s_i, s in enumerate(sections):
        for eid in s.element_ids:
            if eid in index:
                sec_of[index[eid]] = s_i

    # Sections vote for their own residual shift under the page pose.
    def vote_sections(pose: Pose):
        inv = pose.inverse()
        sec_shift = np.zeros((len(sections), 2))
        sec_moved = np.zeros(len(sections), bool)
        sec_support = np.zeros(len(sections))
        # Pairs near where the page pose puts each element, as far as a section may have moved.
        big_enough = [s_i for s_i in range(len(sections))
                      if ((sec_of == s_i) & judged).sum() >= settings.section_min_elements]
        if big_enough:
            sti, sii = spatial_pairs(pose.apply(tmpl.centers), tmpl, inp, settings.section_reach, pose.scale, settings)
        else:
            sti = sii = np.zeros(0, int)
        if len(sti):
            resid = inv.apply(inp.centers[sii]) - tmpl.centers[sti]
            for s_i, s in enumerate(sections):
                members = np.flatnonzero((sec_of == s_i) & judged)
                if len(members) < settings.section_min_elements:
                    continue
                sel = np.isin(sti, members)
                if not sel.any():
                    continue
                off, count, zero_count = _section_vote(resid[sel], sti[sel], settings)
                sec_support[s_i] = count / len(members)
                if (np.hypot(*off) > position_tol and count >= max(settings.section_min_elements, 0.6 * len(members))
                        and count > zero_count):
                    sec_shift[s_i] = off
                    sec_moved[s_i] = True
        return sec_shift, sec_moved, sec_support

    sec_shift, sec_moved, sec_support = vote_sections(pose)
    members_n = np.array([int(((sec_of == s_i) & judged).sum()) for s_i in range(len(sections))])
    lead = _page_offset(sec_shift, sec_moved, members_n, int(judged.sum()), position_tol)
    if lead is not None:
        # Sections vote for the page: most of the form moved as one means the page pose is off
        # by that much (a table of even rows paired a row out), not that the sections moved.
        # The pose shifted by their offset is kept when it explains at least as many elements.
        again = refine(Pose.from_params(shift=(float(lead[0]), float(lead[1]))).compose(pose), tmpl, inp, None, None,
                       weights, settings)
        if again[2][judged].sum() >= agree[judged].sum():
            pose, assignment, agree = again
            sec_shift, sec_moved, sec_support = vote_sections(pose)
    inv = pose.inverse()
    if sec_moved.any():
        # Sections vote for the page: refit on the elements of sections that agree with it.
        usable = ~np.isin(sec_of, np.flatnonzero(sec_moved))
        pose, assignment, agree = refine(pose, tmpl, inp, None, None, weights, settings, usable=usable, rounds=2)
        inv = pose.inverse()

    # Final assignment under each element's own expected place (page pose + section shift).
    shift_t = np.zeros((n, 2))
    has_sec = sec_of >= 0
    shift_t[has_sec] = sec_shift[sec_of[has_sec]]
    pred = pose.apply(tmpl.centers + shift_t)
    if page_size is not None:
        judged = judged & _on_page(tmpl_els, shift_t, pose, page_size)
    # Near partners first; then the elements left over look farther, among the inputs left over
    # (a moved box is found as moved, up to the status gate, without enlarging every problem).
    # Among partners about as near, the one of the expected size: a cell and the three cells
    # merged around it (a rule between them lost) share a centre.
    def sized(gate, ti, ii):
        extra = settings.size_cost * np.abs(np.log(size_ratios(tmpl, inp, ti, ii, pose)))
        return assign(pred, inp.centers, ti, ii, gate, cost_extra=extra)

    final = sized(settings.refine_gate, *spatial_pairs(pred, tmpl, inp, settings.refine_gate, pose.scale, settings))
    left = np.flatnonzero(final < 0)
    if len(left):
        free = np.ones(len(inp.centers), bool)
        free[final[final >= 0]] = False
        far = sized(settings.status_gate, *spatial_pairs(pred, tmpl, inp, settings.status_gate, pose.scale, settings,
                                                         only=left, free=free))
        final[left] = far[left]
    results = []
    ok_mask = np.zeros(n, bool)
    got = np.flatnonzero(final >= 0)
    ratios = np.full(n, np.nan)
    offsets = np.full((n, 2), np.nan)
    if len(got):
        ratios[got] = size_ratios(tmpl, inp, got, final[got], pose)
        offsets[got] = inv.apply(inp.centers[final[got]]) - tmpl.centers[got]
    # -- the residual field: each element is judged against pose + field (paper not flat) --
    field = field_of_match(tmpl.centers, offsets - shift_t, [e.kind for e in tmpl_els], final >= 0)
    bend = field.at(tmpl.centers) if field is not None else np.zeros((n, 2))
    # -- rules are judged as rules: across themselves and by the span they cover --
    rules = np.flatnonzero((final >= 0) & np.isin([e.kind for e in tmpl_els], RULE_KINDS))
    if len(rules):
        across, span_ratio = judge_rules(tmpl, inp, rules, final[rules], inv, shift_t[rules] + bend[rules],
                                         free_rule_ends(tmpl_els, rules, settings.rule_meet), size_tol, position_tol)
        offsets[rules] = across + shift_t[rules] + bend[rules]
        ratios[rules] = span_ratio
    # --
    for k, e in enumerate(tmpl_els):
        j = int(final[k])
        s_i = int(sec_of[k])
        moved_sec = bool(s_i >= 0 and sec_moved[s_i])
        if j < 0:
            results.append(ElementResult(e.id, e.kind, e.caption, e.frame, sections[s_i].id if s_i >= 0 else None,
                                         "missing", None, None, None, bool(judged[k]), moved_sec))
            continue
        # Offset in the template's axes, relative to the page pose (section shift included).
        off = offsets[k]
        own = off - shift_t[k] - bend[k]
        ratio = float(ratios[k])
        tol = position_tol + float(slack.get(e.id, 0.0))
        if np.hypot(*own) > tol:
            status = "moved"
        elif abs(ratio - 1.0) > size_tol and tmpl.classes[k] != TEXT:
            status = "resized"
        elif moved_sec:
            status = "moved"
        else:
            status = "ok"
        ok_mask[k] = status == "ok" or (moved_sec and np.hypot(*own) <= tol and status == "moved")
        results.append(ElementResult(e.id, e.kind, e.caption, e.frame, sections[s_i].id if s_i >= 0 else None,
                                     status, j, (float(off[0] * MM_PER_POINT), float(off[1] * MM_PER_POINT)),
                                     ratio, bool(judged[k]), moved_sec))
    sec_results = []
    for s_i, s in enumerate(sections):
        members = np.flatnonzero(sec_of == s_i)
        jm = members[judged[members]]
        share = float(ok_mask[jm].mean()) if len(jm) else 1.0
        status = "moved" if sec_moved[s_i] else ("ok" if share >= 0.999 else "partial")
        sec_results.append(SectionResult(s.id, s.name, s.frame, status,
                                         (float(sec_shift[s_i, 0] * MM_PER_POINT), float(sec_shift[s_i, 1] * MM_PER_POINT)),
                                         share, int(len(members))))
    support = float(ok_mask[judged].mean()) if judged.any() else 0.0
    return Match(pose, support, tuple(results), tuple(sec_results), len(hyps), len(ti), field=field)


# -- rules ----------------------------------------------------------------------------------------
RULE_KINDS = ("hline", "vline")


def free_rule_ends(tmpl_els, rules: np.ndarray, meet: float) -> np.ndarray:
    """(R, 2) bool: whether each end (low, high along the rule) of each template rule is free.

    An end is not free when another rule, box or mark of the template lies within ``meet``
    points of it (a rule running into a box side, a T-junction): in a scan the rule's ink runs on
    into that element, so its measured extent there says nothing about the rule.
    """
    frames = np.array([e.frame for e in tmpl_els], float)
    other = np.array([e.kind_class != "text" for e in tmpl_els], bool)
    out = np.ones((len(rules), 2), bool)
    for r, k in enumerate(rules):
        x0, top, x1, bottom = frames[k]
        ax = 0 if (x1 - x0) >= (bottom - top) else 1
        c = np.array([(x0 + x1) / 2, (top + bottom) / 2])
        half = (frames[k, 2 + ax] - frames[k, ax]) / 2
        for end, sign in enumerate((-1.0, 1.0)):
            p = c.copy()
            p[ax] += sign * half
            near = (other & (frames[:, 0] - meet <= p[0]) & (frames[:, 2] + meet >= p[0])
                    & (frames[:, 1] - meet <= p[1]) & (frames[:, 3] + meet >= p[1]))
            near[k] = False
            out[r, end] = not near.any()
    return out


def _rule_ends(fa: FrameArrays, idx: np.ndarray, inv: Pose) -> tuple[np.ndarray, np.ndarray]:
    """Both ends of found rules ``idx``, taken back through the pose: two (M, 2) arrays."""
    c, sz = fa.centers[idx], fa.sizes[idx]
    ang = np.radians(np.nan_to_num(fa.angles[idx]))
    ax = np.argmax(sz, axis=1)
    direction = np.where((ax == 0)[:, None], np.column_stack([np.cos(ang), np.sin(ang)]),
                         np.column_stack([-np.sin(ang), np.cos(ang)]))
    half = sz[np.arange(len(idx)), ax] / 2
    return inv.apply(c - half[:, None] * direction), inv.apply(c + half[:, None] * direction)


def _covered_share(intervals: np.ndarray, half: float) -> float:
    """Share of ``[-half, half]`` covered by the union of (K, 2) intervals."""
    iv = np.clip(intervals, -half, half)
    iv = iv[iv[:, 1] > iv[:, 0]]
    if not len(iv):
        return 0.0
    iv = iv[np.argsort(iv[:, 0])]
    total, lo, hi = 0.0, iv[0, 0], iv[0, 1]
    for a, b in iv[1:]:
        if a > hi:
            total += hi - lo
            lo, hi = a, b
        else:
            hi = max(hi, b)
    return float((total + hi - lo) / (2 * half))


def judge_rules(tmpl: FrameArrays, inp: FrameArrays, rules: np.ndarray, partners: np.ndarray, inv: Pose,
                expected_offset: np.ndarray, free: np.ndarray, size_tol: float,
                near: float = 5.67) -> tuple[np.ndarray, np.ndarray]:
    """How matched rules sit, judged as rules.

    Each found rule's two ends are taken back through the pose (``inv``) and the expected
    offset (section shift and residual field) is removed. Across the rule, its offset is the
    larger of the found line's distances from the expected line at the expected rule's two
    ends (so a turned rule counts at its worst end). Along it, nothing is measured from where
    its ends are; only its span: the share of the expected span covered by the found rules
    lying on its line (within ``near`` points across, parallel: a rule broken in pieces by a
    bend of the paper or by a stamp still covers its span), and how far its partner runs past
    a *free* end (one where no other element of the template meets it, see
    :func:`free_rule_ends`).

    Returns
    -------
    across : (R, 2) array
        Offset across each rule, in the template's axes (zero along it), points.
    span_ratio : (R,) array
        Length judged over length expected: the covered span plus any overrun at free ends, or
        the covered span alone when the rule falls short of ``1 - size_tol`` of its length.
    """
    t_c, t_s = tmpl.centers[rules], tmpl.sizes[rules]
    ax = np.argmax(t_s, axis=1)
    half = t_s[np.arange(len(rules)), ax] / 2
    ends = [e - expected_offset for e in _rule_ends(inp, partners, inv)]
    idx = np.arange(len(rules))
    along = np.column_stack([e[idx, ax] - t_c[idx, ax] for e in ends])
    acr = np.column_stack([e[idx, 1 - ax] - t_c[idx, 1 - ax] for e in ends])
    order = np.argsort(along, axis=1)
    along = np.take_along_axis(along, order, 1)
    acr = np.take_along_axis(acr, order, 1)
    run = along[:, 1] - along[:, 0]
    slope = np.where(run > 1.0, (acr[:, 1] - acr[:, 0]) / np.maximum(run, 1.0), 0.0)
    mid = acr.mean(1) - slope * along.mean(1)
    at_ends = np.abs(np.column_stack([mid - slope * half, mid + slope * half]))
    worst = np.where(at_ends[:, 0] >= at_ends[:, 1], mid - slope * half, mid + slope * half)
    across = np.zeros((len(rules), 2))
    across[idx, 1 - ax] = worst
    # Every found rule on the expected line counts towards the span it covers.
    lines = np.flatnonzero(inp.classes == LINE)
    e0, e1 = _rule_ends(inp, lines, inv)
    covered = np.zeros(len(rules))
    for r in idx:
        a, b = ax[r], 1 - ax[r]
        p0, p1 = e0 - expected_offset[r] - t_c[r], e1 - expected_offset[r] - t_c[r]
        on = ((np.abs(p0[:, b]) <= near) & (np.abs(p1[:, b]) <= near)
              & (np.abs(p1[:, a] - p0[:, a]) >= 2.0 * np.abs(p1[:, b] - p0[:, b])))
        iv = np.sort(np.column_stack([p0[on, a], p1[on, a]]), axis=1)
        own = np.array([[along[r, 0], along[r, 1]]])
        covered[r] = _covered_share(np.vstack([iv, own]), half[r])
    over = (np.where(free[:, 0], np.clip(-half - along[:, 0], 0.0, None), 0.0)
            + np.where(free[:, 1], np.clip(along[:, 1] - half, 0.0, None), 0.0)) / (2 * half)
    span_ratio = np.where(covered < 1.0 - size_tol, covered, covered + over)
    return across, span_ratio


def _extent(elements) -> tuple[float, float, float, float]:
    """Box around the elements' frames (x0, top, x1, bottom), points."""
    frames = np.array([e.frame for e in elements], float)
    return (float(frames[:, 0].min()), float(frames[:, 1].min()), float(frames[:, 2].max()), float(frames[:, 3].max()))


def share_on_page(pose: Pose, extent: tuple[float, float, float, float], page_size: tuple[float, float],
                  n: int = 16) -> float:
    """Share of an ``n`` x ``n`` grid over ``extent`` (template points) that ``pose`` puts on a
    page of ``page_size`` points."""
    x0, top, x1, bottom = extent
    gx, gy = np.meshgrid(np.linspace(x0, x1, n), np.linspace(top, bottom, n))
    p = pose.apply(np.column_stack([gx.ravel(), gy.ravel()]))
    w, h = page_size
    return float(((p[:, 0] >= 0) & (p[:, 0] <= w) & (p[:, 1] >= 0) & (p[:, 1] <= h)).mean())


def _on_page(elements, shift: np.ndarray, pose: Pose, page_size: tuple[float, float], margin: float = 2.83) -> np.ndarray:
    """Whether each element's expected outline lies on the input page, 1 mm inside its edges."""
    from .elements import outline

    corners = np.stack([outline(e) for e in elements]) + shift[:, None, :]  # (N, 4, 2)
    mapped = pose.apply(corners.reshape(-1, 2)).reshape(-1, 4, 2)
    w, h = page_size
    inside = (mapped[..., 0] >= margin) & (mapped[..., 0] <= w - margin) & (mapped[..., 1] >= margin) & (mapped[..., 1] <= h - margin)
    return inside.all(axis=1)


def _page_offset(shift: np.ndarray, moved: np.ndarray, members: np.ndarray, judged: int, tol: float) -> np.ndarray | None:
    """The offset, template points, of the moved sections that hold most of a page's judged
    elements and agree on it (within ``tol``), or None when no such group holds more than half.

    Parameters
    ----------
    shift : (S, 2) array
        Each section's residual shift under the page pose.
    moved : (S,) bool array
        Sections found moved.
    members : (S,) int array
        Judged elements per section.
    judged : int
        Judged elements of the page (in sections or not).
    tol : float
        Points two sections' shifts may differ by and be one group.
    """
    best = None
    for s_i in np.flatnonzero(moved):
        group = moved & (np.hypot(*(shift - shift[s_i]).T) <= tol)
        held = int(members[group].sum())
        if held * 2 > judged and (best is None or held > best[0]):
            best = (held, np.average(shift[group], axis=0, weights=members[group]))
    return None if best is None else best[1]


def _section_vote(resid: np.ndarray, owners: np.ndarray, settings: SolverSettings):
    """Residual shift most elements of a section agree on: ``(offset, count, count at zero)``."""
    count, in_bin = shift_peak(resid, owners, settings.shift_bin)
    near_zero = np.hypot(*resid.T) <= settings.agree * 2
    zero_count = len(np.unique(owners[near_zero]))
    return np.median(resid[in_bin], axis=0), count, zero_count


def _all_missing(tmpl_els, sections, judged) -> tuple[ElementResult, ...]:
    sec = {eid: s.id for s in sections for eid in s.element_ids}
    return tuple(ElementResult(e.id, e.kind, e.caption, e.frame, sec.get(e.id), "missing", None, None, None,
                               bool(judged[k])) for k, e in enumerate(tmpl_els))

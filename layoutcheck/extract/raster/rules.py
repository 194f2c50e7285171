"""Ruling lines: long and short runs of the upright mask, fitted to sub-pixel on the grey image."""

from __future__ import annotations

import cv2
import numpy as np

from ...elements import MM_PER_INCH, POINTS_PER_INCH
from ...sources import RasterPage
from .common import _Frame, px
from .settings import RasterSettings


def _find_rules(grey: np.ndarray, mask: np.ndarray, up_bin: np.ndarray, frame: _Frame, dpi: float,
                settings: RasterSettings) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Ruling lines of a page: runs of the upright detection image, fitted on the original.

    Parameters
    ----------
    grey, mask : (H, W) arrays
        Original grey image and its ink mask.
    up_bin : (h, w) uint8 array
        Upright, reduced 0/1 ink (see :class:`~layoutcheck.extract.raster.common._Frame`).
    frame : _Frame
        Geometry between the original and the upright image.
    dpi : float
        Resolution of the original.

    Returns
    -------
    seg : (N, 4) array
        ``x0, y0, x1, y1`` of the confirmed rules, continuous px of the original.
    wid : (N,) array
        Their stroke widths, px (at least 1).
    runs : (h, w) bool array
        The confirmed rules' runs on the upright image.
    """
    factor = frame.factor
    ddpi = dpi / factor
    min_len = max(3, int(round(px(settings.min_rule_mm, ddpi))))
    max_w = max(2.0, px(settings.max_rule_width_mm, ddpi))
    long_len, reach = px(settings.long_rule_mm, ddpi), max(2.0, px(settings.corner_reach_mm, ddpi))
    h_rows, h_src = _runs(up_bin, True, min_len, int(round(long_len)), max_w)
    v_rows, v_src = _runs(up_bin, False, min_len, int(round(long_len)), max_w)
    keep_h, keep_v = _closed_ends(h_rows, v_rows, long_len, reach)
    h_src, v_src = _select(h_src, keep_h), _select(v_src, keep_v)
    fits = []
    for rows, horizontal in ((h_rows[keep_h], True), (v_rows[keep_v], False)):
        if len(rows) == 0:
            fits.append((rows, np.zeros((0, 4)), np.zeros(0), np.zeros(0, bool)))
            continue
        pos, lo, hi, thick = rows.T
        if horizontal:
            a_up, b_up = np.stack([lo, pos], 1), np.stack([hi, pos], 1)
        else:
            a_up, b_up = np.stack([pos, lo], 1), np.stack([pos, hi], 1)
        a_o, b_o = frame.to_original(a_up), frame.to_original(b_up)
        half = np.ceil(thick * factor / 2.0).astype(int) + 3
        short = (hi - lo) < long_len
        if horizontal:
            ends, width, spread = _fit_rules(grey, mask, a_o, b_o, half, fixed=short)
        else:
            ends_t, width, spread = _fit_rules(grey.T, mask.T, a_o[:, ::-1], b_o[:, ::-1], half, fixed=short)
            ends = ends_t[:, [1, 0, 3, 2]]
        # A short run must also be straight: the sides of a checkbox are, the bowls of a B are not.
        good = np.isfinite(ends).all(1) & ~(short & ~(spread <= px(settings.straight_mm, dpi)))
        fits.append((rows, ends, width, good))
    # Short rules whose crossing partners failed their fits (the bars of a letter) go too.
    (hr, he, hw, hg), (vr, ve, vw, vg) = fits
    kh, kv = _closed_ends(hr[hg], vr[vg], long_len, reach)
    hg[np.flatnonzero(hg)[~kh]] = False
    vg[np.flatnonzero(vg)[~kv]] = False
    seg = np.vstack([he[hg], ve[vg]])
    wid = np.maximum(np.concatenate([hw[hg], vw[vg]]), 1.0)
    return seg, wid, _paint(_select(h_src, hg)) | _paint(_select(v_src, vg))


def _pieces(opened: np.ndarray, horizontal: bool, min_len: float, max_width: float, long_len: float):
    """Runs left by an opening: rows ``(pos, lo, hi, thickness)`` in upright reduced px, and
    each run's bounding box ``(x, y, w, h)`` (to draw the accepted runs back).

    The runs are the outer outlines of the opening (``cv2.findContours``, four times faster than
    labelling the sparse image); their bounding boxes are those of their 8-connected pieces.
    """
    contours, _ = cv2.findContours(opened, cv2.RETR_EXTERNAL, cv2.CHAIN_APPROX_SIMPLE)
    if not contours:
        return np.zeros((0, 4)), np.zeros((0, 4), np.int64)
    st = np.array([cv2.boundingRect(c) for c in contours], dtype=np.int64).reshape(-1, 4)
    order = np.lexsort((st[:, 0], st[:, 1]))  # top to bottom, left to right
    st = st[order]
    contours = [contours[i] for i in order]
    if horizontal:
        lo, ext, pos0, thick = st[:, 0], st[:, 2], st[:, 1], st[:, 3]
    else:
        lo, ext, pos0, thick = st[:, 1], st[:, 3], st[:, 0], st[:, 2]
    pos = pos0 + thick / 2.0
    lo, hi, thick = lo.astype(float), (lo + ext).astype(float), thick.astype(float)
    # A rule on paper that does not lie flat bends: its piece is a staircase across more rows
    # than its stroke is thick. It is cut into pieces straight to a pixel or two, each fitted
    # as a rule of its own (the judge puts a rule's pieces back together by the span they cover).
    bent = np.flatnonzero((ext >= 2 * long_len) & (thick > 3) & (thick <= 4 * max_width))
    extra_rows, extra_boxes, drop = [], [], []
    for i in bent:
        x, y, w, h = st[i]
        own = np.zeros((h, w), np.uint8)
        cv2.drawContours(own, [contours[i]], -1, 1, thickness=-1, offset=(-int(x), -int(y)))
        sub = (own & opened[y:y + h, x:x + w]).astype(bool)
        if not horizontal:
            sub = sub.T
        cols = sub.any(0)
        count = sub.sum(0)
        if not cols.any() or np.median(count[cols]) > max_width:
            continue
        idx = np.arange(sub.shape[0], dtype=float)[:, None]
        first = np.where(cols, np.argmax(sub, 0), 0)
        last = np.where(cols, sub.shape[0] - 1 - np.argmax(sub[::-1], 0), 0)
        if ((last - first + 1 > count + 1) & cols).mean() > 0.05:
            continue  # two runs in a column: other ink along the rule, not a bend
        centre = np.where(cols, (sub * idx).sum(0) / np.maximum(count, 1), np.nan)
        drift = np.nanmax(centre) - np.nanmin(centre)
        if drift <= 2.0:
            continue
        n_chunks = int(min(np.ceil(drift / 1.5), max(1, ext[i] // long_len)))
        if n_chunks < 2:
            continue
        edges = np.linspace(0, sub.shape[1], n_chunks + 1).astype(int)
        base = float(y if horizontal else x)
        start = float(x if horizontal else y)
        for a, b in zip(edges[:-1], edges[1:]):
            c = centre[a:b]
            if not np.isfinite(c).any():
                continue
            stroke = float(np.median(count[a:b][cols[a:b]]))
            spread = float(np.nanmax(c) - np.nanmin(c))
            extra_rows.append([base + float(np.nanmean(c)) + 0.5, start + a, start + b, stroke + spread])
            extra_boxes.append([x + a, y, b - a, h] if horizontal else [x, y + a, w, b - a])
        drop.append(i)
    # A rule joined by other ink along it (a stamp's edge crossing at a shallow angle, a stroke
    # of handwriting lying on it) leaves a piece thicker than the rule: the rule is the band of
    # rows (columns) that holds most of the piece's length. A long rule staircases across a few
    # rows (the coarse skew is a tenth of a degree off), so its band keeps rows down to a fifth
    # of the fullest; a short piece's rows are all at least ``min_len`` long, so half. Only
    # pieces of rule length (``long_len``): a checkbox's side joined by a stamp's edge is shorter
    # than the edge, whose band would win.
    for i in np.setdiff1d(np.flatnonzero((ext >= long_len) & (thick > 3)), drop):
        x, y, w, h = st[i]
        own = np.zeros((h, w), np.uint8)
        cv2.drawContours(own, [contours[i]], -1, 1, thickness=-1, offset=(-int(x), -int(y)))
        sub = (own & opened[y:y + h, x:x + w]).astype(bool)
        if np.count_nonzero(sub) >= 0.8 * ext[i] * thick[i]:
            continue  # a solid run, not one joined by other ink
        prof = sub.sum(1) if horizontal else sub.sum(0)
        top = int(np.argmax(prof))
        strong = prof >= prof[top] * (0.5 if prof[top] < 4 * min_len else 0.2)
        a = top - int(np.argmin(strong[top::-1])) + 1 if not strong[:top + 1].all() else 0
        b = top + int(np.argmin(strong[top:])) if not strong[top:].all() else len(prof)
        pos[i], thick[i] = (y if horizontal else x) + (a + b) / 2.0, float(b - a)
    rows = np.stack([pos, lo, hi, thick], 1)
    boxes = st[:, :4]
    if drop:
        keep_rows = np.ones(len(rows), bool)
        keep_rows[drop] = False
        rows = np.vstack([rows[keep_rows], np.array(extra_rows, float).reshape(-1, 4)])
        boxes = np.vstack([boxes[keep_rows], np.array(extra_boxes, np.int64).reshape(-1, 4)])
    keep = (rows[:, 2] - rows[:, 1] >= min_len) & (rows[:, 3] <= max_width)
    return rows[keep], boxes[keep]


def _runs(up_bin: np.ndarray, horizontal: bool, min_len: int, long_len: int, max_width: float):
    """Horizontal (or vertical) runs of the upright mask, by separable 1-D openings.

    Two lengths: long runs from a ``long_len`` opening, so a rule crossed by a slanted stroke
    (a stamp's edge, a signature) is not merged with it into one thick piece; and short runs
    (checkbox sides) from a ``min_len`` opening of what the long runs leave.

    Returns
    -------
    rows : (N, 4) array
        ``pos, lo, hi, thickness`` per run, upright reduced px.
    source : tuple
        ``(opened image, boxes per row)`` to paint selected runs back with :func:`_paint`.
    """
    bridge = cv2.getStructuringElement(cv2.MORPH_RECT, (2, 1) if horizontal else (1, 2))  # one-pixel breaks
    closed = cv2.morphologyEx(up_bin, cv2.MORPH_CLOSE, bridge)

    def kernel(n):
        return cv2.getStructuringElement(cv2.MORPH_RECT, (n, 1) if horizontal else (1, n))

    # Long runs are looked for a pixel either side across: a rule on paper that does not lie
    # flat bends by a few pixels over its length, and its staircase holds fewer than
    # ``long_len`` pixels in any one row.
    across = cv2.getStructuringElement(cv2.MORPH_RECT, (1, 3) if horizontal else (3, 1))
    long_open = cv2.morphologyEx(cv2.dilate(closed, across), cv2.MORPH_OPEN, kernel(long_len))
    short_open = cv2.morphologyEx(closed, cv2.MORPH_OPEN, kernel(min_len))
    short_open = cv2.subtract(short_open, cv2.dilate(long_open, np.ones((3, 3), np.uint8)))  # 0/1: and-not
    # The two sets of runs are a pixel apart at least, so one labelling serves both.
    both = long_open | short_open
    rows, boxes = _pieces(both, horizontal, min_len, max_width, long_len)
    return rows, (both, boxes.reshape(-1, 4))


def _select(source, keep: np.ndarray):
    image, boxes = source
    return image, boxes[keep]


def _paint(source) -> np.ndarray:
    """Mask of the runs named by ``source`` (see :func:`_runs`): their boxes, on their opening."""
    image, boxes = source
    sel = np.zeros(image.shape, np.uint8)
    for x, y, w, h in boxes.tolist():
        sel[y:y + h, x:x + w] = 1
    return (sel & image).view(bool)


def _closed_ends(h_rows: np.ndarray, v_rows: np.ndarray, long_len: float, tol: float):
    """Which runs are rules: long runs, and short runs whose both ends meet a crossing run.

    Text strokes make short straight runs too (the bars of E, T, H); a short side of a checkbox
    differs in that both its ends meet the perpendicular sides. Repeated until nothing changes, so
    that runs kept only because of a stroke dropped in an earlier round go too.
    """
    keep_h = np.ones(len(h_rows), bool)
    keep_v = np.ones(len(v_rows), bool)
    for _ in range(6):
        new_h = _meets_both(h_rows, v_rows[keep_v], tol) | (h_rows[:, 2] - h_rows[:, 1] >= long_len)
        new_v = _meets_both(v_rows, h_rows[keep_h], tol) | (v_rows[:, 2] - v_rows[:, 1] >= long_len)
        new_h &= keep_h
        new_v &= keep_v
        if (new_h == keep_h).all() and (new_v == keep_v).all():
            break
        keep_h, keep_v = new_h, new_v
    return keep_h, keep_v


def _meets_both(rows: np.ndarray, cross: np.ndarray, reach: float) -> np.ndarray:
    """Whether both ends of each run lie on some crossing run.

    A crossing run may lie up to ``reach`` inside a run's end (a run overshoots a corner by the
    crossing stroke's width and the blur), but hardly beyond it (a gap of a pixel and a half to the crossing stroke: the gap between
    two letters is wider):
    the gap between two letters (0.3 to 1 mm) does not count as a meeting.
    """
    if len(rows) == 0 or len(cross) == 0:
        return np.zeros(len(rows), bool)
    pos, lo, hi, th = (rows[:, i][:, None] for i in range(4))
    cpos, clo, chi, cth = (cross[:, i][None, :] for i in range(4))
    out = 1.5 + cth / 2.0  # a gap of 1.5 px at most to the crossing stroke's near side
    inside = reach + (th + cth) / 2.0
    across = (pos >= clo - 1.5 - th / 2.0) & (pos <= chi + 1.5 + th / 2.0)
    at_lo = (cpos >= lo - out) & (cpos <= lo + inside) & across
    at_hi = (cpos <= hi + out) & (cpos >= hi - inside) & across
    return at_lo.any(1) & at_hi.any(1)


#: Columns sampled per rule at most, in the steering passes and in the last one (see _fit_rules).
_FIT_COLUMNS = (100, 250)


def _fit_rules(grey: np.ndarray, mask: np.ndarray, p0: np.ndarray, p1: np.ndarray, half: np.ndarray, passes: int = 2,
               share: float = 0.5, fixed: np.ndarray | None = None):
    """Sub-pixel fit of near-horizontal rules on the original image, all rules at once.

    Parameters
    ----------
    grey, mask : (H, W) arrays
        Original grey image and ink mask (transpose both for vertical rules).
    p0, p1 : (N, 2) arrays
        Rough ends of each rule, continuous px (x, y), ``p0`` left.
    half : (N,) int array
        Half-height of the band searched across each rule, px.
    share : float
        Share of the columns that must hold a clean, straight run for the rule to be confirmed.
    fixed : (N,) bool array, optional
        Rules whose slope is kept from ``p0, p1`` (the page's skew): a short rule's own slope is
        poorly determined and easily pulled by a tick crossing its corner.

    Returns
    -------
    ends : (N, 4) array
        ``x0, y0, x1, y1`` of the fitted rules, continuous px; NaN rows for rules not confirmed.
    width : (N,) array
        Stroke width in px.
    spread : (N,) array
        Deviation of the kept centroids from the fitted line (1.2533 mean absolute residual),
        px: a fraction of a pixel for a printed rule, more for the curved side of a letter.
    """
    n = len(p0)
    if n == 0:
        return np.zeros((0, 4)), np.zeros(0), np.zeros(0)
    h, w = grey.shape
    slope = (p1[:, 1] - p0[:, 1]) / np.maximum(p1[:, 0] - p0[:, 0], 1e-6)
    margin = 3
    c0 = np.clip(np.floor(p0[:, 0]).astype(int) - margin, 0, w - 1)
    c1 = np.clip(np.ceil(p1[:, 0]).astype(int) + margin, 0, w - 1)
    counts = np.maximum(c1 - c0 + 1, 0)
    line = np.repeat(np.arange(n), counts)
    start = np.repeat(np.cumsum(counts) - counts, counts)
    cols = np.repeat(c0, counts) + (np.arange(len(line)) - start)
    x = cols + 0.5
    xm = (p0[:, 0] + p1[:, 0]) / 2.0
    ym = (p0[:, 1] + p1[:, 1]) / 2.0
    rmax = int(half.max())
    k = np.arange(-rmax, rmax + 1)
    # Band arrays are (row across the rule, column along it): the reductions across the rule
    # then run over whole rows of columns at a time.
    a, b = ym.copy(), slope.copy()  # y = a + b (x - xm)
    ok = np.zeros(len(line), bool)
    width = np.zeros(n)
    all_line, all_x, all_cols = line, x, cols
    g_flat, g_st = _flat_view(grey)
    m_flat, m_st = _flat_view(mask)
    itype = np.int32 if grey.size < 2**31 else np.int64
    abs_k = np.abs(k).astype(np.int16)[:, None]
    j16 = np.arange(len(k), dtype=np.int16)[:, None]
    k32 = k.astype(np.float32)
    # Columns sampled per rule: earlier passes only steer the band (every third column, and at
    # most about 100 per rule); the last fits on every other column, at most about 250 per rule
    # (the centroid of one column is good to a few hundredths of a pixel, so 250 of them place a
    # rule far better than the scan's own pixel grid).
    along = np.arange(len(all_line)) - start
    stride_last = np.maximum(2, -(-counts // _FIT_COLUMNS[1]))
    stride_first = np.maximum(3, -(-counts // _FIT_COLUMNS[0]))
    last_sel = along % stride_last[all_line] == 0
    first_sel = along % stride_first[all_line] == 0
    for p_i in range(passes):
        sel = last_sel if p_i == passes - 1 else first_sel
        line, x, cols = all_line[sel], all_x[sel], all_cols[sel]
        inband = abs_k <= half[line][None, :]
        yp = a[line] + b[line] * (x - xm[line])
        base = np.floor(yp)
        rows = base.astype(np.int32)[None, :] + k[:, None].astype(np.int32)
        valid = inband & (rows >= 0) & (rows < h)
        rc = np.clip(rows, 0, h - 1).astype(itype)
        # Gathered through flat indices into the images' memory (no copy of a transposed view).
        cc = cols.astype(itype)[None, :]
        flat = rc * g_st[0] + cc * g_st[1]
        gu = np.take(g_flat, flat)
        ink = np.take(m_flat, flat if m_st == g_st else rc * m_st[0] + cc * m_st[1])
        ink &= valid
        # The run of ink that holds the rule in this column: seeded at the ink row nearest the
        # predicted line, grown while the ink lasts. Other ink in the band (a tick's arm, a
        # letter) is left out unless it touches the rule, and then the column is left out.
        dist = np.where(ink, abs_k, np.int16(rmax + 9))
        seed = np.argmin(dist, axis=0)
        c_idx = np.arange(len(seed))
        has = dist[seed, c_idx] <= 2
        # The run through the seed ends at the nearest rows without ink on either side of it.
        last_gap = np.maximum.accumulate(np.where(ink, np.int16(-1), j16), axis=0)
        next_gap = np.minimum.accumulate(np.where(ink, np.int16(len(k)), j16)[::-1], axis=0)[::-1]
        run_lo = last_gap[seed, c_idx].astype(np.int64) + 1
        run_hi = next_gap[seed, c_idx].astype(np.int64) - 1
        run_len = (run_hi - run_lo + 1).astype(float)
        lo_k, hi_k = rmax - half[line], rmax + half[line]
        clean = has & (run_lo > lo_k) & (run_hi < hi_k)  # the run ends inside the band
        rl, rh = run_lo.astype(np.int16)[None, :], run_hi.astype(np.int16)[None, :]
        in_run = (j16 >= rl) & (j16 <= rh)
        window = (j16 >= rl - 2) & (j16 <= rh + 2) & valid
        window &= ~(ink & ~in_run)
        paper = np.where(valid, gu, np.uint8(0)).max(0).astype(np.float32)
        dark = np.where(in_run, gu, np.uint8(255)).min(0).astype(np.float32)
        g = gu.astype(np.float32)
        wgt = np.maximum(paper[None, :] - g - np.float32(0.25) * (paper - dark)[None, :], np.float32(0.0))
        wgt[~window] = 0.0
        mass = wgt.sum(0, dtype=np.float64)
        has &= mass > 0
        # Centroid across the rule, pixel centres at +0.5 (see the module's pixel convention).
        yc = base + 0.5 + (k32 @ wgt) / np.maximum(mass, 1e-9)
        med = _group_median_int(run_len.astype(np.int64), clean & has, line, n, len(k) + 1)
        ok = has & clean & (run_len <= 1.5 * med[line] + 1)
        for _rep in range(2):
            a, b = _wls(x - xm[line], yc, mass * ok, line, n, a, b, fixed)
            res = yc - (a[line] + b[line] * (x - xm[line]))
            sig = _group_mean(np.abs(res), ok, line, n) * 1.2533  # mean |r| of a normal is 0.80 sigma
            ok &= np.abs(res) <= np.maximum(3.0 * sig[line], 0.5)
        width = med * np.sqrt(1.0 / (1.0 + b * b))
    # Extent: the outermost columns whose ink lies on the fitted rule.
    yp = a[line] + b[line] * (x - xm[line])
    ok_all = np.zeros(len(all_line), bool)
    ok_all[last_sel] = ok
    yp_all = a[all_line] + b[all_line] * (all_x - xm[all_line])
    on = mask[np.clip(np.floor(yp_all).astype(int), 0, h - 1), all_cols] | ok_all
    xs_on = np.where(on, all_x, np.nan)
    lo = np.full(n, np.nan)
    hi = np.full(n, np.nan)
    np.fmin.at(lo, all_line, xs_on - 0.5)
    np.fmax.at(hi, all_line, xs_on + 0.5)
    good = np.bincount(line, weights=ok * stride_last[line].astype(float), minlength=n)
    # Share of clean columns between the outermost clean ones: a tick running over a box's
    # corner lengthens the run found but does not make the rule less of a rule.
    ok_lo = np.full(n, np.inf)
    ok_hi = np.full(n, -np.inf)
    np.minimum.at(ok_lo, line[ok], x[ok])
    np.maximum.at(ok_hi, line[ok], x[ok])
    span = np.maximum(ok_hi - ok_lo + 1, 1)
    # A rule is unbroken: ink on the fitted line in nearly every column between its clean ends.
    # The tops and feet of a line of letters pass the other tests but break at every gap.
    r_lo = mask[np.clip(np.floor(yp_all - 0.5).astype(int), 0, h - 1), all_cols]
    r_hi = mask[np.clip(np.floor(yp_all + 0.5).astype(int), 0, h - 1), all_cols]
    inside = (all_x >= ok_lo[all_line]) & (all_x <= ok_hi[all_line])
    unbroken = np.bincount(all_line, weights=((r_lo | r_hi) & inside).astype(float), minlength=n) / span
    # A short rule (a checkbox's side) crossed by a tick loses the columns at both its ends, where
    # the tick's arms enter the band, and a stamp's edge or a stroke crossing it loses a few more:
    # its clean middle may be a quarter of the run found, and a third of it clean.
    least = 0.35 if fixed is None else np.where(fixed, 0.25, 0.35)
    need = share if fixed is None else np.where(fixed, 0.6 * share, share)
    confirmed = (good >= np.maximum(need * span, 3 * stride_last)) & (span >= least * counts) & (unbroken >= 0.9)
    ends = np.stack([lo, a + b * (lo - xm), hi, a + b * (hi - xm)], 1)
    ends[~confirmed] = np.nan
    res = yc - (a[line] + b[line] * (x - xm[line]))
    spread = _group_mean(np.abs(res), ok, line, n) * 1.2533
    return ends, width, spread


def _flat_view(a: np.ndarray) -> tuple[np.ndarray, tuple[int, int]]:
    """A 2-D array's elements in memory order and its strides in elements (no copy of a
    C- or Fortran-ordered array, such as the transpose of an image)."""
    if not (a.flags.c_contiguous or a.flags.f_contiguous):
        a = np.ascontiguousarray(a)
    return a.ravel(order="K"), (a.strides[0] // a.itemsize, a.strides[1] // a.itemsize)


def _group_median_int(values: np.ndarray, use: np.ndarray, group: np.ndarray, n: int, top: int) -> np.ndarray:
    """Median of small non-negative integers ``values < top`` per group (NaN for empty groups)."""
    v = np.clip(values, 0, top - 1)
    hist = np.bincount(group[use] * top + v[use], minlength=n * top).reshape(n, top)
    cum = np.cumsum(hist, axis=1)
    total = cum[:, -1]
    lo = np.argmax(cum >= (total[:, None] + 1) // 2, axis=1)
    hi = np.argmax(cum >= total[:, None] // 2 + 1, axis=1)
    out = (lo + hi) / 2.0
    return np.where(total > 0, out, np.nan)


def _group_mean(values: np.ndarray, use: np.ndarray, group: np.ndarray, n: int) -> np.ndarray:
    """Mean of ``values`` per group over the ``use`` entries (NaN for empty groups)."""
    w = use.astype(float)
    cnt = np.bincount(group, w, n)
    tot = np.bincount(group, np.where(use, values, 0.0), n)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(cnt > 0, tot / np.maximum(cnt, 1e-12), np.nan)


def _wls(x: np.ndarray, y: np.ndarray, w: np.ndarray, g: np.ndarray, n: int, a0: np.ndarray, b0: np.ndarray,
         fixed: np.ndarray | None = None):
    """Weighted least-squares ``y = a + b x`` per group; keeps ``a0, b0`` where undetermined.

    Groups flagged in ``fixed`` keep their slope ``b0`` and fit the offset only.
    """
    sw = np.bincount(g, w, n)
    sx = np.bincount(g, w * x, n)
    sy = np.bincount(g, w * y, n)
    sxx = np.bincount(g, w * x * x, n)
    sxy = np.bincount(g, w * x * y, n)
    det = sw * sxx - sx * sx
    good = (sw > 0) & (det > 1e-9 * np.maximum(sw * sxx, 1e-12))
    a, b = a0.copy(), b0.copy()
    b[good] = (sw * sxy - sx * sy)[good] / det[good]
    if fixed is not None:
        b[fixed] = b0[fixed]
        good |= fixed & (sw > 0)
    a[good] = (sy - b * sx)[good] / sw[good]
    return a, b


def _drop_border(seg: np.ndarray, wid: np.ndarray, page: RasterPage, border_mm: float):
    """Leave out rules lying along the image border (scanner edges, shadows)."""
    if len(seg) == 0:
        return seg, wid
    b = border_mm * POINTS_PER_INCH / MM_PER_INCH
    xs, ys = seg[:, [0, 2]], seg[:, [1, 3]]
    near = ((xs <= b).all(1) | (xs >= page.width - b).all(1) | (ys <= b).all(1) | (ys >= page.height - b).all(1))
    return seg[~near], wid[~near]

"""Printed form or fill-in: which elements of a filled scan belong to the form.

A template learned from one filled scan must not learn the handwriting. Printed rules are
straight to a fraction of a pixel and of even stroke, and they line up with the rest of the
form; a pen's stroke bows and trembles, its width and darkness change along it, and it lines up
with nothing. Where the scan is in colour, fill-in ink (blue, red stamps) differs from the print.

:func:`measure_line` samples the grey image across every rule (and every side of a box) in a
straightened strip, one column per pixel along it, and measures per column the run of ink that
holds the rule: its centre across the rule and its ink mass (darkness times width). From these:

- *fit residual*: deviation of the centres from a straight line (1.4826 median absolute
  residual of a least-squares fit that rejects columns beyond three times that), mm;
- *stroke spread*: interquartile range of the ink mass over its median, over the columns where
  the stroke stays inside the strip;
- *printed span*: the stretch whose columns look like the rule's own stroke (mass, thickness,
  centre); heavier ink lying along the line past it (a tail of writing that touches an end and
  runs on) is cut off, ink crossing the rule is not.

:func:`sort_printed` adds *alignment* (edges shared with other elements within half a
millimetre) and, given a colour image, *chroma*, and sets aside what is probably fill-in, with a
reason a person can read; a rule pulled off its line by ink along it is put back on it. :func:`trim_to_structure` cuts a rule back where the printed structure
ends it: a rule that runs on along a box's edge stops at the box's side, and a rule that
overshoots a crossing side by no more than a stroke stops there.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import cv2
import numpy as np

from ...elements import MM_PER_POINT, POINTS_PER_INCH, Element, frame_from_center


@dataclass(frozen=True)
class PrintedSettings:
    """When an element is taken for fill-in. Sizes in mm."""

    #: Fit residual above which a rule that lines up with nothing is fill-in, mm. Printed rules
    #: measure at most 0.018 mm on the filled scans of bench/bench_fillin.py (200 dpi, grey,
    #: blur, noise; signature rules with a signature and its flourish across them included),
    #: long strokes written by hand at least 0.038 mm.
    wavy_mm: float = 0.022
    #: Fit residual above which a rule is fill-in even if it lines up with other elements, mm.
    very_wavy_mm: float = 0.03
    #: Allowance added to both on a bitonal scan, pixels: a rule's centre there moves in whole
    #: pixels along a turned rule (a staircase), which a grey scan spreads over the pixel. The
    #: stroke spread is not used there: a thin rule's width steps between whole pixels too.
    bitonal_px: float = 0.3
    #: Stroke spread (interquartile range of the ink mass over its median) above which a rule's
    #: stroke is uneven: at most 0.05 for printed rules on the benchmark's scans, signature rules
    #: aside (a signature across them; they line up with other elements).
    uneven: float = 0.45
    #: Edges within this distance are aligned, mm (print tolerance, common practice).
    align_mm: float = 0.5
    #: Half width of the strip sampled across a rule beyond its stroke, mm.
    band_mm: float = 1.0
    #: A column's ink mass may differ from the rule's median by this factor and still be the rule.
    mass_factor: float = 1.5
    #: Ink past the printed span shorter than this is left alone (blur, a corner), mm.
    min_trim_mm: float = 0.8
    #: ... and longer than this too: a tail of writing runs on a few millimetres, while a rule
    #: with a signature's flourish lying along a stretch of it looks the same from its ink, mm.
    max_trim_mm: float = 15.0
    #: Chroma (CIELAB a*b* distance) from the page's print above which ink is fill-in, where the
    #: scan is in colour (common practice: ballpoint blue and stamp red sit far from black print).
    chroma: float = 15.0
    #: A stroke this many times thicker than the page's print (the median stroke of the rules
    #: and box sides that line up with others) must be straighter still to count as printed:
    #: half of ``wavy_mm`` and ``very_wavy_mm``. A felt pen's stroke ruled along an edge can be
    #: nearly as straight as print (0.021 mm on the benchmark's scans) but is twice as thick;
    #: a heavy printed bar is as straight as any other rule (at most 0.005 mm there).
    heavy_factor: float = 1.5
    #: Rules whose end runs past a crossing side by no more than this are cut at the side, mm.
    corner_reach_mm: float = 1.5
    #: A rule whose measured frame lies this far off its fitted line is put on the line, mm.
    replace_mm: float = 0.15
    #: How far from its measured frame a rule's own line is looked for, mm: a signature's
    #: flourish merged with a rule pulls it by about half a millimetre; the side of a box that a
    #: stroke written in it runs along is two millimetres away or more.
    recentre_mm: float = 0.8


@dataclass(frozen=True)
class LineInk:
    """What the ink of one rule (or one side of a box) looks like along it."""

    residual_mm: float
    spread: float
    #: Printed span along the rule, as offsets from its centre, points (lo <= 0 <= hi).
    span: tuple[float, float]
    #: Mean CIELAB (a*, b*) of its ink, where the scan is in colour.
    ab: tuple[float, float] | None = None
    #: Offset of the fitted line from the rule's frame, across it at its middle, points.
    offset: float = 0.0
    #: Thickness of its stroke (median run of ink across it, blur included), mm.
    thickness_mm: float = float("nan")


@dataclass(frozen=True)
class Sorting:
    """Elements of a scan sorted into printed (kept) and probable fill-in (set aside)."""

    kept: tuple[Element, ...]
    set_aside: tuple[Element, ...]
    #: Element id -> why it was set aside (or trimmed), in plain words.
    reasons: dict = field(default_factory=dict)


def _axes(e: Element) -> tuple[np.ndarray, np.ndarray, float, float]:
    """Unit vectors along and across a rule, its length and stroke, in points."""
    a = np.radians(e.angle or 0.0)
    w, h = e.size
    ux = np.array([np.cos(a), np.sin(a)])  # the frame's x axis, turned
    uy = np.array([-np.sin(a), np.cos(a)])
    return (uy, ux, h, w) if h > w else (ux, uy, w, h)


def _strip(img: np.ndarray, centre_px: np.ndarray, along: np.ndarray, across: np.ndarray, length_px: float,
           half_px: float, border: float) -> tuple[np.ndarray, np.ndarray]:
    """The image resampled in a straightened strip: rows across the rule, one column per pixel."""
    n = max(2, int(np.ceil(length_px)))
    s = np.linspace(-length_px / 2.0, length_px / 2.0, n)
    r = int(np.ceil(half_px))
    t = np.arange(-r, r + 1, dtype=float)
    # Continuous pixel coordinates (pixel centres at +0.5) to OpenCV's (centres at integers).
    x = centre_px[0] + s[None, :] * along[0] + t[:, None] * across[0] - 0.5
    y = centre_px[1] + s[None, :] * along[1] + t[:, None] * across[1] - 0.5
    out = cv2.remap(img, x.astype(np.float32), y.astype(np.float32), cv2.INTER_LINEAR,
                    borderMode=cv2.BORDER_CONSTANT, borderValue=border)
    return out, s


def _profile(strip: np.ndarray, threshold: float, paper: float):
    """Per column of a strip: run of ink nearest the middle row, its centre and mass.

    Returns ``inside, clean, centre, mass, length`` (arrays over columns): ``inside`` where a
    run lies on the middle rows and ends inside the strip, ``clean`` where it also is not
    thickened by other ink; ``length`` is the run's, rows.
    """
    g = strip.astype(np.float32)
    rows, n = g.shape
    mid = rows // 2
    ink = g < threshold
    k = np.arange(rows)[:, None]
    dist = np.where(ink, np.abs(k - mid), rows + 9)
    seed = np.argmin(dist, axis=0)
    cols = np.arange(n)
    present = dist[seed, cols] <= 2
    last_gap = np.maximum.accumulate(np.where(ink, -1, k), axis=0)
    next_gap = np.minimum.accumulate(np.where(ink, rows, k)[::-1], axis=0)[::-1]
    lo = last_gap[seed, cols] + 1
    hi = next_gap[seed, cols] - 1
    # Clean: the run ends inside the strip and is no thicker than the rule's own stroke (ink that
    # touches it, a tick's arm, a letter's foot, thickens the run where it joins).
    length = (hi - lo + 1).astype(float)
    # The rule's own thickness is the thinner part of the runs: a pen's stroke lying along a rule
    # (a signature's flourish) may cover more than half of it.
    typical = np.percentile(length[present], 30) if present.any() else 0.0
    inside = present & (lo > 0) & (hi < rows - 1)
    clean = inside & (length <= 1.5 * typical + 1)
    # One row of anti-aliased fringe on either side belongs to the stroke.
    in_run = (k >= lo[None, :] - 1) & (k <= hi[None, :] + 1)
    w = np.where(in_run, np.maximum(paper - g, 0.0), 0.0)
    mass = w.sum(0)
    centre = (w * (k - mid)).sum(0) / np.maximum(mass, 1e-6)
    return inside, clean, centre, mass, length


def _line_fit(s: np.ndarray, c: np.ndarray):
    """Straight line ``c = a + b s`` by least squares, refitted twice without the points beyond
    three times the scaled median absolute residual; ``(a, b, that residual, points kept)``."""
    keep = np.ones(len(s), bool)
    a = b = 0.0
    sig = np.inf
    for _ in range(3):
        if keep.sum() < 3:
            break
        b, a = np.polyfit(s[keep], c[keep], 1)
        res = c - (a + b * s)
        sig = 1.4826 * float(np.median(np.abs(res[keep])))
        keep = np.abs(res) <= max(3.0 * sig, 0.25)
    return a, b, sig, keep


def measure_line(grey: np.ndarray, dpi: float, e: Element, threshold: float, paper: float,
                 settings: PrintedSettings = PrintedSettings(), ab: np.ndarray | None = None) -> LineInk:
    """How the ink of one rule looks along it (see the module notes).

    Parameters
    ----------
    grey : (H, W) uint8 array
        The page, 0 black .. 255 white.
    dpi : float
    e : Element
        A rule (``hline``, ``vline``), in points.
    threshold, paper : float
        Grey level below which a pixel is ink, and the level of the paper.
    ab : (H, W, 2) float32 array, optional
        CIELAB a* and b* of a colour scan.

    Returns
    -------
    LineInk
        The fit minimises the sum of squared distances of the column centres from the line,
        after rejecting columns beyond three times the residual reported (1.4826 times the
        median absolute distance).
    """
    k = dpi / POINTS_PER_INCH
    along, across, length, stroke = _axes(e)
    centre = np.array(e.center) * k
    band = settings.band_mm / MM_PER_POINT * k
    half = stroke * k / 2.0 + band
    # The rule is the row of the strip that ink fills along the most: a stroke that merged with
    # the rule when it was measured (a signature's flourish) may have pulled its frame off it.
    reach = settings.recentre_mm / MM_PER_POINT * k
    wide, s = _strip(grey, centre, along, across, length * k, stroke * k / 2.0 + reach, paper)
    fill = (wide < threshold).mean(1)
    shift = float(np.argmax(fill) - wide.shape[0] // 2)
    centre = centre + across * shift
    strip, s = _strip(grey, centre, along, across, length * k, half, paper)
    inside, clean, c, mass, run_len = _profile(strip, threshold, paper)
    use = clean & (mass > 0)
    if use.sum() < 5:
        return LineInk(np.inf, np.inf, (-length / 2.0, length / 2.0))
    # Spread over every column the stroke crosses the strip in: a rule that thickens is uneven.
    q1, q3 = np.percentile(mass[inside], [25, 75])
    spread = float((q3 - q1) / max(np.median(mass[inside]), 1e-6))
    ref = np.percentile(mass[use], 30)
    # The line is fitted on columns of the rule's own weight (the lighter part, as above): where
    # a pen's stroke merges with a rule along it, the centre is pulled but the ink is heavier too.
    own = use & (mass <= settings.mass_factor * ref) & (mass >= ref / settings.mass_factor)
    use = own if own.sum() >= 5 else use
    a, b, sig, keep = _line_fit(s[use], c[use])
    residual_mm = sig / k * MM_PER_POINT
    med = float(np.median(mass[use][keep]))
    med_len = float(np.median(run_len[use][keep]))
    span = _printed_span(s, inside, clean, np.abs(c - (a + b * s)), mass, run_len, med, med_len, sig, k, settings)
    colour = None
    if ab is not None:
        chans = [_strip(ab[..., j], centre, along, across, length * k, half, 0.0)[0] for j in range(2)]
        rows = strip.shape[0]
        core = (np.abs(np.arange(rows) - rows // 2) <= max(1, int(stroke * k / 2)))[:, None] & (strip < threshold)
        core &= use[None, :]
        if core.any():
            colour = (float(chans[0][core].mean()), float(chans[1][core].mean()))
    return LineInk(float(residual_mm), spread, span, colour, (shift + a) / k, med_len / k * MM_PER_POINT)


def _printed_span(s, inside, clean, res, mass, run_len, med_mass, med_len, sig, k, settings) -> tuple[float, float]:
    """Offsets (points) between which a rule is its own printed stroke.

    A column is the rule's *own* when its ink is the rule's stroke (clean, of the rule's mass
    and thickness, on its line), and *along* when it holds a run of heavier or thicker ink that
    stays inside the strip: a pen's stroke lying along the rule. Past the outermost stretch of own columns
    (a millimetre long) at each end, the rule is cut only when most of what lies beyond is along:
    ink that merely crosses the rule or touches it from one side (writing on it) leaves the
    measured end alone, since the rule may well go on beneath it.
    """
    f = settings.mass_factor
    near = res <= max(3.0 * sig, 0.6)
    own = clean & (mass <= f * med_mass) & (mass >= med_mass / f) & (run_len <= med_len + 1.5) & near
    # Ink running along the line: a run that stays inside the strip (nothing crosses it there),
    # heavier or thicker than the rule. Letters touching a rule from one side reach out of the strip.
    along = inside & ((mass > f * med_mass) | (run_len > med_len + 1.5))
    n = len(s)
    run = max(2, int(round(1.0 / MM_PER_POINT * k)))
    ok = np.convolve(own.astype(float), np.ones(run), "same") >= run - 0.5
    idx = np.flatnonzero(ok)
    if len(idx) == 0:
        return float(s[0] - 0.5) / k, float(s[-1] + 0.5) / k
    lo_i, hi_i = max(0, idx[0] - run // 2), min(n - 1, idx[-1] + run // 2)
    least = settings.min_trim_mm / MM_PER_POINT * k
    if lo_i >= least and along[:lo_i].mean() < 0.6:
        lo_i = 0
    if n - 1 - hi_i >= least and along[hi_i + 1:].mean() < 0.6:
        hi_i = n - 1
    return float(s[lo_i] - 0.5) / k, float(s[hi_i] + 0.5) / k


def _sides(e: Element) -> list[Element]:
    """The four sides of a box as rules (frames in points, the box's angle)."""
    x0, top, x1, bottom = e.frame
    cx, cy = e.center
    a = np.radians(e.angle or 0.0)
    rot = np.array([[np.cos(a), -np.sin(a)], [np.sin(a), np.cos(a)]])
    out = []
    for (px_, py_), horizontal in (((cx, top), True), ((cx, bottom), True), ((x0, cy), False), ((x1, cy), False)):
        c = rot @ np.array([px_ - cx, py_ - cy]) + [cx, cy]
        w, h = (x1 - x0, 0.5) if horizontal else (0.5, bottom - top)
        out.append(Element("side", "hline" if horizontal else "vline", frame_from_center(c[0], c[1], w, h), e.angle,
                           source="raster"))
    return out


def _edges(e: Element) -> tuple[list[float], list[float]]:
    """x and y coordinates of an element's edges (a rule's ends and its line), points."""
    x0, top, x1, bottom = e.frame
    if e.kind == "hline":
        return [x0, x1], [(top + bottom) / 2.0]
    if e.kind == "vline":
        return [(x0 + x1) / 2.0], [top, bottom]
    return [x0, x1], [top, bottom]


def alignment(elements: list[Element], tol_pt: float) -> np.ndarray:
    """Per element, how many other elements share one of its edge coordinates (within ``tol_pt``)."""
    n = len(elements)
    shared = np.zeros((n, n), bool)
    for axis in (0, 1):
        coords = [_edges(e)[axis] for e in elements]
        owner = np.repeat(np.arange(n), [len(c) for c in coords])
        v = np.array([c for cs in coords for c in cs], float)
        a, b = np.nonzero(np.abs(v[:, None] - v[None, :]) <= tol_pt)
        shared[owner[a], owner[b]] = True
    np.fill_diagonal(shared, False)
    return shared.sum(1)


def page_levels(grey: np.ndarray) -> tuple[float, float]:
    """Ink threshold (Otsu) and paper level (the 90th percentile grey) of a page.

    On a bitonal page the threshold is mid-grey: strips are resampled between pixels, so black
    and white mix there, and Otsu's threshold of a two-level image is its lower level.
    """
    small = grey[::2, ::2]
    paper = float(np.percentile(small, 90))
    if not np.any((small > 0) & (small < 255)):
        return 127.5, paper
    t, _ = cv2.threshold(np.ascontiguousarray(small), 0, 255, cv2.THRESH_BINARY | cv2.THRESH_OTSU)
    return float(t), paper


def lab_ab(rgb: np.ndarray) -> np.ndarray:
    """CIELAB a* and b* of an RGB uint8 image, as (H, W, 2) float32 (OpenCV's conversion)."""
    lab = cv2.cvtColor(np.ascontiguousarray(rgb), cv2.COLOR_RGB2LAB).astype(np.float32)
    return lab[..., 1:] - 128.0


def trim(e: Element, span: tuple[float, float]) -> Element:
    """A rule cut to ``span`` (offsets along it from its centre, points)."""
    along, _, length, stroke = _axes(e)
    lo, hi = max(span[0], -length / 2.0), min(span[1], length / 2.0)
    c = np.array(e.center) + along * (lo + hi) / 2.0
    new_len = hi - lo
    w, h = (new_len, stroke) if e.size[0] >= e.size[1] else (stroke, new_len)
    return e.replace(frame=frame_from_center(float(c[0]), float(c[1]), float(w), float(h)))


def sort_printed(grey: np.ndarray, dpi: float, elements, colour: np.ndarray | None = None,
                 settings: PrintedSettings = PrintedSettings()) -> Sorting:
    """Sort the elements of one filled scan into printed and probable fill-in.

    Rules are judged by their own ink (fit residual, stroke spread) and by alignment; a rule
    that is only a little wavy or uneven stays when it shares an edge with another element.
    A box with a side bent like writing goes. Rules are cut to their printed span. Marks and
    labels stay (labels are not judged on scans). With ``colour`` (RGB, same size as ``grey``),
    rules and boxes whose ink is far in chroma from the page's print go too.
    """
    els = list(elements)
    threshold, paper = page_levels(grey)
    bitonal = not np.any((grey > 0) & (grey < 255))
    allowance = settings.bitonal_px / dpi * 25.4 if bitonal else 0.0
    ab = lab_ab(colour) if colour is not None else None
    tol = settings.align_mm / MM_PER_POINT
    structural = [e for e in els if e.kind_class in ("line", "box", "mark")]
    aligned = dict(zip((e.id for e in structural), alignment(structural, tol)))
    inks: dict[str, list[LineInk]] = {}
    for e in els:
        if e.kind in ("hline", "vline"):
            inks[e.id] = [measure_line(grey, dpi, e, threshold, paper, settings, ab)]
        elif e.kind in ("box", "checkbox"):
            inks[e.id] = [measure_line(grey, dpi, s, threshold, paper, settings, ab) for s in _sides(e)]
    thick = [i.thickness_mm for e in els if aligned.get(e.id, 0) for i in inks.get(e.id, ())]
    thick = [t for t in thick if np.isfinite(t)]
    heavy_mm = settings.heavy_factor * float(np.median(thick)) if thick else np.inf
    print_ab = None
    if ab is not None:
        colours = [i.ab for v in inks.values() for i in v if i.ab is not None]
        if colours:
            print_ab = np.median(np.array(colours), axis=0)
    kept, aside, reasons = [], [], {}
    for e in els:
        ink = inks.get(e.id)
        if not ink:
            kept.append(e)
            continue
        why = _fill_in_reason(e, ink, aligned.get(e.id, 0), print_ab, settings, allowance, heavy_mm)
        if why:
            aside.append(e)
            reasons[e.id] = why
            continue
        if e.kind in ("hline", "vline"):
            e, why = on_printed_span(e, ink[0], settings)
            if why:
                reasons[e.id] = why
        kept.append(e)
    return Sorting(tuple(kept), tuple(aside), reasons)


def on_printed_span(e: Element, ink: LineInk, settings: PrintedSettings = PrintedSettings()) -> tuple[Element, str | None]:
    """A rule put back on its own line and cut to the span its printed stroke supports.

    The one rule for rules whose ink runs on into other ink, used when a template is learned
    from a filled scan (:func:`sort_printed`) and when a rule of a page being verified is looked
    at again (:func:`printed_rules`): ink lying along the rule past its printed stroke (a tail of
    writing) is cut off, ink merely crossing or touching it is not, and a rule pulled off its
    line by a stroke merged with it is moved back. Returns the rule and, when it changed, why,
    in plain words (else None).
    """
    span = _supported(e, ink.span, settings)
    _, across, length, _ = _axes(e)
    said = []
    if abs(ink.offset) * MM_PER_POINT >= settings.replace_mm:
        dx, dy = across * ink.offset
        x0, top, x1, bottom = e.frame
        e = e.replace(frame=(x0 + dx, top + dy, x1 + dx, bottom + dy))
        said.append(f"put on its own line ({abs(ink.offset) * MM_PER_POINT:.2f} mm off: ink along it)")
    cut = (span[0] + length / 2.0, length / 2.0 - span[1])
    if max(cut) >= settings.min_trim_mm / MM_PER_POINT:
        e = trim(e, span)
        said.append(f"cut to its printed span (ink touching it ran on {max(cut) * MM_PER_POINT:.1f} mm)")
    return e, "; ".join(said) or None


def printed_rules(grey: np.ndarray, dpi: float, rules, settings: PrintedSettings = PrintedSettings()) -> list[tuple[Element, str | None]]:
    """Rules of a page, each put on its printed span (:func:`on_printed_span`).

    Parameters
    ----------
    grey : (H, W) uint8 array
        The page, 0 black .. 255 white, at ``dpi`` with square pixels.
    dpi : float
    rules : sequence of Element
        ``hline`` and ``vline`` elements of that page, in points.

    Returns
    -------
    list of (Element, str or None)
        Per rule, in order: the rule as printed, and why it changed (None when it did not).
    """
    threshold, paper = page_levels(grey)
    return [on_printed_span(e, measure_line(grey, dpi, e, threshold, paper, settings), settings) for e in rules]


def _supported(e: Element, span: tuple[float, float], settings: PrintedSettings) -> tuple[float, float]:
    """The printed span of a rule, kept to its measured end where the ink beyond the span runs on
    longer than a tail of writing does (``max_trim_mm``): a stretch of a rule that a signature's
    flourish lies along looks, from its ink, like a tail."""
    _, _, length, _ = _axes(e)
    cap = settings.max_trim_mm / MM_PER_POINT
    lo = span[0] if span[0] + length / 2.0 <= cap else -length / 2.0
    hi = span[1] if length / 2.0 - span[1] <= cap else length / 2.0
    return lo, hi


def _fill_in_reason(e: Element, ink: list[LineInk], aligned: int, print_ab, settings: PrintedSettings,
                    allowance_mm: float = 0.0, heavy_mm: float = np.inf) -> str | None:
    """Why an element looks written rather than printed, or None.

    ``heavy_mm``: strokes at least this thick are held to half the straightness allowed
    (see ``PrintedSettings.heavy_factor``).
    """
    heavy = sum(i.thickness_mm >= heavy_mm for i in ink) >= (2 if len(ink) > 1 else 1)
    # The bitonal staircase allowance is not halved: a thick rule steps by whole pixels as well.
    f = 0.5 if heavy else 1.0
    wavy, very_wavy = f * settings.wavy_mm + allowance_mm, f * settings.very_wavy_mm + allowance_mm
    thicker = " for a stroke thicker than the print" if heavy else ""
    if e.kind in ("box", "checkbox"):
        # A tick across a checkbox leaves its sides straight (under 0.015 mm on the benchmark's
        # scans); a loop of writing closed against a box's edge has a side twice as bent as a
        # written rule may be. Sides drawn with a thick pen get no more than a rule does.
        worst = max(i.residual_mm for i in ink)
        if worst > (1 if heavy else 2) * very_wavy:
            return f"a side is not straight (off a straight line by {worst:.2f} mm{thicker})"
        far = [i for i in ink if i.ab is not None and print_ab is not None
               and np.hypot(*(np.array(i.ab) - print_ab)) > settings.chroma]
        if len(far) >= 3:
            return "its ink is not the colour of the print"
        return None
    i = ink[0]
    if print_ab is not None and i.ab is not None and np.hypot(*(np.array(i.ab) - print_ab)) > settings.chroma:
        return "its ink is not the colour of the print"
    if i.residual_mm > very_wavy:
        return f"not straight (off a straight line by {i.residual_mm:.2f} mm{thicker})"
    if not aligned:
        if i.residual_mm > wavy:
            return f"not straight (off a straight line by {i.residual_mm:.2f} mm{thicker}) and in line with nothing"
        if i.spread > settings.uneven and not allowance_mm:
            return f"uneven stroke (width varies by {100 * i.spread:.0f} %) and in line with nothing"
    return None


def trim_to_structure(elements, settings: PrintedSettings = PrintedSettings()) -> Sorting:
    """Cut rules back to where the printed structure ends them.

    A rule lying for the most part along a box's edge is that box's side, run on by ink that
    touches it: it is set aside. A rule that runs on along a box's edge (its larger part off the
    box) stops at the box's side, and one whose end overshoots a crossing rule or box side by no
    more than ``corner_reach_mm`` stops at it; likewise for vertical rules.
    """
    els = list(elements)
    reach = settings.corner_reach_mm / MM_PER_POINT
    tol = settings.align_mm / MM_PER_POINT
    boxes = [e for e in els if e.kind in ("box", "checkbox")]
    out, aside, reasons = [], [], {}
    for e in els:
        if e.kind not in ("hline", "vline"):
            out.append(e)
            continue
        horizontal = e.kind == "hline"
        x0, top, x1, bottom = e.frame
        lo, hi = (x0, x1) if horizontal else (top, bottom)
        pos = (top + bottom) / 2.0 if horizontal else (x0 + x1) / 2.0
        new_lo, new_hi = lo, hi
        side_of = None
        for b in boxes:
            bx0, btop, bx1, bbottom = b.frame
            edges, (s0, s1) = ((btop, bbottom), (bx0, bx1)) if horizontal else ((bx0, bx1), (btop, bbottom))
            if min(abs(pos - v) for v in edges) > tol:
                continue
            if min(hi, s1) - max(lo, s0) >= 0.5 * (hi - lo):
                side_of = b
                break
            # Collinear with a box's edge: the rule is not the box, it stops at the box's side.
            if s0 - reach <= new_hi <= s1 + reach and new_lo < s0 - reach:
                new_hi = min(new_hi, s0)
            elif s0 - reach <= new_lo <= s1 + reach and new_hi > s1 + reach:
                new_lo = max(new_lo, s1)
        if side_of is not None:
            aside.append(e)
            reasons[e.id] = f"the side of {side_of.label()}, run on by ink touching it"
            continue
        # Crossings: places along the rule where a perpendicular stroke of the structure meets it.
        cross = []
        for o in els:
            if o is e:
                continue
            ox0, otop, ox1, obottom = o.frame
            if o.kind == ("vline" if horizontal else "hline"):
                a, b = (otop, obottom) if horizontal else (ox0, ox1)
                if a - tol <= pos <= b + tol:
                    cross.append((ox0 + ox1) / 2.0 if horizontal else (otop + obottom) / 2.0)
            elif o in boxes:
                a, b = (otop, obottom) if horizontal else (ox0, ox1)
                if a - tol <= pos <= b + tol:
                    cross += [ox0, ox1] if horizontal else [otop, obottom]
        if cross:
            c = np.array(cross)
            over_hi = new_hi - c[(c <= new_hi) & (c >= new_hi - reach)]
            if len(over_hi):
                new_hi = new_hi - float(over_hi.min())
            over_lo = c[(c >= new_lo) & (c <= new_lo + reach)] - new_lo
            if len(over_lo):
                new_lo = new_lo + float(over_lo.min())
        if new_hi - new_lo < hi - lo - 0.25 and new_hi > new_lo:
            frame = (new_lo, top, new_hi, bottom) if horizontal else (x0, new_lo, x1, new_hi)
            out.append(e.replace(frame=frame))
            reasons[e.id] = f"cut to the structure that ends it ({(hi - lo - (new_hi - new_lo)) * MM_PER_POINT:.1f} mm)"
        else:
            out.append(e)
    return Sorting(tuple(out), tuple(aside), reasons)

"""Learning a template from several good samples of a form (clean or filled scans, or PDFs).

The first sample is the base. Every other sample is matched to it with the consensus solver;
an element of the base that is found in place on most samples becomes a template element, at the
median of where the samples put it (mapped back through each sample's pose). Elements seen on
some samples but not all are reported as *unstable*; each element's position tolerance is
widened by the largest offset the good samples show. Ink that only one sample has (its
handwriting, a stamp) is on too few samples to stay.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np

from .consensus import SolverSettings, solve
from .elements import Element, PageElements, frame_from_center
from .sources import where
from .template import LearnError, Template, TemplatePage, find_sections, match_raster_to_vector, with_raster_sections

#: Share of samples an element must be found on to be part of the template (a majority).
KEEP_SHARE = 0.5
#: Offsets up to this are "in place" while learning (points, 4 mm): good samples of one form
#: differ by print and scan tolerances, not by centimetres.
LEARN_GATE = 11.3


def consensus_elements(samples: Sequence[PageElements], settings: SolverSettings = SolverSettings()):
    """Elements most samples agree on.

    Returns
    -------
    elements : list of Element
        Base elements found on more than :data:`KEEP_SHARE` of the samples, at their median place.
    unstable : list of str
        Ids of kept elements not found on every sample.
    slack : dict
        Id -> largest offset seen on a good sample, in points.
    seen : dict
        Id -> number of samples the kept element was found on.
    """
    base = samples[0]
    els = list(base.elements)
    n = len(els)
    found = np.ones((len(samples), n), bool)
    centres = np.full((len(samples), n, 2), np.nan)
    sizes = np.full((len(samples), n, 2), np.nan)
    centres[0] = [e.center for e in els]
    sizes[0] = [e.size for e in els]
    for k, s in enumerate(samples[1:], start=1):
        m = solve(els, s.elements, settings=settings, position_tol=LEARN_GATE, size_tol=0.25)
        if m.pose is None:
            found[k] = False
            continue
        inv = m.pose.inverse()
        for j, r in enumerate(m.elements):
            if r.input_index is None or r.status not in ("ok",):
                found[k, j] = False
                continue
            e = s.elements[r.input_index]
            centres[k, j] = inv.apply(np.array([e.center]))[0]
            sizes[k, j] = np.array(e.size) / m.pose.scale
    share = found.mean(axis=0)
    kept, unstable, slack, seen = [], [], {}, {}
    for j, e in enumerate(els):
        if share[j] <= KEEP_SHARE:
            continue
        c = np.nanmedian(centres[found[:, j], j], axis=0)
        w, h = np.nanmedian(sizes[found[:, j], j], axis=0)
        spread = np.hypot(*(centres[found[:, j], j] - c).T)
        kept.append(e.replace(frame=frame_from_center(float(c[0]), float(c[1]), float(w), float(h))))
        seen[e.id] = int(found[:, j].sum())
        if share[j] < 1.0:
            unstable.append(e.id)
        if len(spread) > 1:
            slack[e.id] = float(spread.max())
    return kept, unstable, slack, seen


def learn_from_samples(per_sample: Sequence[Sequence[tuple]], paths: Sequence[str], name: str,
                       section_names: dict[str, str] | None = None) -> Template:
    """A template from several good samples of one form (see module docs).

    ``per_sample`` holds, for each sample file (named in ``paths``), one ``(vector elements or
    None, raster elements or None)`` pair per page, as read by
    :func:`layoutcheck.check.reference_pages`.
    """
    counts = {len(s) for s in per_sample}
    if len(counts) != 1:
        detail = ", ".join(f"{where(p, None)}: {len(s)}" for p, s in zip(paths, per_sample))
        raise LearnError(f"good samples differ in page count ({detail})")
    out_pages = []
    for k in range(counts.pop()):
        vec_sets = [s[k][0] for s in per_sample]
        ras_sets = [s[k][1] for s in per_sample if s[k][1] is not None]
        unstable: list[str] = []
        slack: dict = {}
        if all(v is not None for v in vec_sets):
            v_els, v_unstable, v_slack, seen = consensus_elements(vec_sets)
            base = vec_sets[0]
            raster_els: tuple[Element, ...] = ()
            if ras_sets:
                r_els, _, r_slack, _ = consensus_elements(ras_sets)
                raster_els = tuple(match_raster_to_vector(r_els, v_els))
                slack.update({e.id: r_slack.get(orig.id, 0.0) for e, orig in zip(raster_els, r_els) if orig.id in r_slack})
            elements = tuple(v_els)
            unstable, slack = v_unstable, {**slack, **v_slack}
        else:
            if len(ras_sets) != len(paths):
                raise LearnError("good samples mix born-digital and scanned pages; give one kind")
            r_els, unstable, slack, seen = consensus_elements(ras_sets)
            base = ras_sets[0]
            elements = tuple(r_els)
            raster_els = elements
        if len(elements) < 3:
            raise LearnError(f"page {k + 1}: the good samples agree on only {len(elements)} elements")
        sections = find_sections(elements, base.width, base.height, section_names)
        tp = TemplatePage(k + 1, base.width, base.height, elements, sections, raster_els,
                          slack=slack, unstable=tuple(unstable), seen=seen)
        out_pages.append(with_raster_sections(tp))
    return Template(name, tuple(out_pages), tuple(p.split("/")[-1] for p in paths))

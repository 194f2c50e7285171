"""Learning a template from several good samples of a form (clean or filled scans, or PDFs).

The first sample is the base. Every other sample is matched to it with the consensus solver;
an element of the base that is found in place on most samples becomes a template element, at the
median of where the samples put it (mapped back through each sample's pose). Elements seen on
some samples but not all are reported as *unstable*; each element's position tolerance is
widened by the largest offset the good samples show. Ink that only one sample has (its
handwriting, a stamp) is on too few samples to stay.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from typing import Sequence

import numpy as np

from .consensus import SolverSettings, solve
from .elements import Element, PageElements, frame_from_center
from .sources import ReadLimits, where
from .template import Template, TemplatePage, find_sections, match_raster_to_vector, with_raster_sections

#: Share of samples an element must be found on to be part of the template (a majority).
KEEP_SHARE = 0.5
#: Offsets up to this are "in place" while learning (points, 4 mm): good samples of one form
#: differ by print and scan tolerances, not by centimetres.
LEARN_GATE = 11.3


@dataclass(frozen=True)
class Consensus:
    """What good samples agree on (see :func:`consensus`)."""

    #: Base elements found on more than :data:`KEEP_SHARE` of the samples, at their median place.
    kept: list
    #: Ids of kept elements not found on every sample.
    unstable: list
    #: Id -> largest offset seen on a good sample, in points.
    slack: dict
    #: Id -> on how many samples each base element was found (the base counts).
    seen: dict
    #: Base elements found on too few samples (probable fill-in of the base sample).
    dropped: list


def consensus(samples: Sequence[PageElements], settings: SolverSettings = SolverSettings(),
              prior: dict | None = None, prior_samples: int = 0) -> Consensus:
    """Elements most samples agree on; the first sample is the base.

    ``prior`` (id -> count) and ``prior_samples`` carry the counts of samples learned earlier
    (when a template grows by more samples): the base is then the template itself, whose places
    are weighted by their counts, and its own row counts for ``prior`` rather than for one.
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
    weight = np.ones((len(samples), n))
    if prior is not None:
        weight[0] = [max(prior.get(e.id, 0), 0) for e in els]
        found[0] = weight[0] > 0
    count = (found * weight).sum(axis=0)
    total = (len(samples) - 1) + (prior_samples if prior is not None else 1)
    share = count / max(total, 1)
    kept, unstable, slack, dropped = [], [], {}, []
    for j, e in enumerate(els):
        if share[j] <= KEEP_SHARE:
            dropped.append(e)
            continue
        use = found[:, j]
        if prior is None:
            c = np.nanmedian(centres[use, j], axis=0)
            w, h = np.nanmedian(sizes[use, j], axis=0)
        else:  # the template's place stands for its earlier samples
            wt = weight[use, j][:, None]
            c = (centres[use, j] * wt).sum(0) / wt.sum()
            w, h = (sizes[use, j] * wt).sum(0) / wt.sum()
        spread = np.hypot(*(centres[use, j] - c).T)
        kept.append(e.replace(frame=frame_from_center(float(c[0]), float(c[1]), float(w), float(h))))
        if share[j] < 1.0:
            unstable.append(e.id)
        if len(spread) > 1:
            slack[e.id] = float(spread.max())
    return Consensus(kept, unstable, slack, {e.id: int(round(count[j])) for j, e in enumerate(els)}, dropped)


def consensus_elements(samples: Sequence[PageElements], settings: SolverSettings = SolverSettings()):
    """Elements most samples agree on: ``(kept, unstable, slack)`` of :func:`consensus`."""
    c = consensus(samples, settings)
    return c.kept, c.unstable, c.slack


def _sample_pages(path: str, limits: ReadLimits, pages: set[int] | None, with_raster: bool):
    """``(vector PageElements or None, raster PageElements or None, set aside, reasons)`` per
    page of one sample file. A scanned page keeps only what looks printed, its rules cut to their
    printed span (see :func:`layoutcheck.check.printed_sort`); ``reasons`` says, per element
    id, why an element looks like fill-in or was cut."""
    from .check import printed_sort, reference_pages

    out = []
    for page, vec, ras in reference_pages(path, limits, pages, with_raster):
        why: dict = {}
        aside: tuple = ()
        if vec is None and ras is not None:
            ras, aside, why = printed_sort(page, ras)
        out.append((vec, ras, aside, why))
    return out


def single_sample_warning(set_aside: int) -> str:
    """The plain warning a template learned from one scan carries."""
    found = f"{set_aside} element(s) were set aside as probable fill-in; " if set_aside else ""
    return (f"learned from one scanned sample: {found}a second sample (learn --update) or the blank form "
            "makes the template sturdier")


def _scan_page(k: int, base: PageElements, c: Consensus, n: int, section_names, reasons: dict,
               aside: tuple = ()) -> TemplatePage:
    """A template page from the consensus of ``n`` scanned samples; ``aside`` are the base
    sample's elements that looked like fill-in before any consensus (seen on it only)."""
    from .check import LearnError

    elements = tuple(c.kept)
    if len(elements) < 3:
        raise LearnError(f"page {k + 1}: the good samples agree on only {len(elements)} elements")
    dropped = tuple(c.dropped) + tuple(aside)
    why = {e.id: reasons.get(e.id) or f"found on {c.seen.get(e.id, 0)} of {n} samples" for e in c.dropped}
    kept = {e.id for e in elements}
    why.update({i: r for i, r in reasons.items() if i in kept or any(e.id == i for e in aside)})
    seen = {**{e.id: 1 for e in aside}, **c.seen}
    sections = find_sections(elements, base.width, base.height, section_names)
    tp = TemplatePage(k + 1, base.width, base.height, elements, sections, elements, slack=c.slack,
                      unstable=tuple(c.unstable), set_aside=dropped, set_aside_why=why, samples=n, seen=seen)
    return with_raster_sections(tp)


def learn_from_samples(paths: Sequence[str], name: str | None = None, pages: set[int] | None = None,
                       limits: ReadLimits = ReadLimits(), section_names: dict[str, str] | None = None,
                       with_raster: bool = True) -> Template:
    """A template from several good samples of one form (see module docs)."""
    from .check import LearnError, _default_name

    per_sample = [_sample_pages(p, limits, pages, with_raster) for p in paths]
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
            v_els, v_unstable, v_slack = consensus_elements(vec_sets)
            base = vec_sets[0]
            raster_els: tuple[Element, ...] = ()
            if ras_sets:
                r_els, _, r_slack = consensus_elements(ras_sets)
                raster_els = tuple(match_raster_to_vector(r_els, v_els))
                slack.update({e.id: r_slack.get(orig.id, 0.0) for e, orig in zip(raster_els, r_els) if orig.id in r_slack})
            elements = tuple(v_els)
            unstable, slack = v_unstable, {**slack, **v_slack}
        else:
            if len(ras_sets) != len(paths):
                raise LearnError("good samples mix born-digital and scanned pages; give one kind")
            out_pages.append(_scan_page(k, ras_sets[0], consensus(ras_sets), len(ras_sets), section_names,
                                        per_sample[0][k][3], per_sample[0][k][2]))
            continue
        if len(elements) < 3:
            raise LearnError(f"page {k + 1}: the good samples agree on only {len(elements)} elements")
        sections = find_sections(elements, base.width, base.height, section_names)
        tp = TemplatePage(k + 1, base.width, base.height, elements, sections, raster_els,
                          slack=slack, unstable=tuple(unstable))
        out_pages.append(with_raster_sections(tp))
    return Template(name or _default_name(paths[0]), tuple(out_pages), tuple(p.split("/")[-1] for p in paths))


def update_template(template: Template, paths: Sequence[str], limits: ReadLimits = ReadLimits()) -> Template:
    """The template grown by more scanned samples of its form (accepted pages, say).

    Each page of every new sample is matched to the template page; an element (kept or set
    aside) is kept when it was found on more than :data:`KEEP_SHARE` of all the samples so far,
    the template's own counting for the samples it was learned from, and set aside otherwise.
    So an element only the first sample had goes, and a set-aside element that the new samples
    show in place comes back. Places are averaged, weighted by how many samples saw them.
    """
    from .check import LearnError

    paths = [str(p) for p in paths]
    if not paths:
        raise LearnError(f"{template.name}: no samples given to add")
    per_sample = [_sample_pages(p, limits, None, False) for p in paths]
    for p, s in zip(paths, per_sample):
        if len(s) != len(template.pages):
            raise LearnError(f"{where(p, None)}: {len(s)} page(s), but template {template.name} has {len(template.pages)}")
        if any(vec is not None for vec, _, _, _ in s):
            raise LearnError(f"{where(p, None)}: a born-digital page; add scanned samples (or learn again from the blank PDF)")
    pages = []
    for k, tp in enumerate(template.pages):
        if not tp.samples:
            raise LearnError(f"template {template.name} page {tp.number}: learned from a blank PDF, not from samples; "
                             "there is nothing to add samples to")
        base = PageElements(tp.width, tp.height, tp.raster_elements + tp.set_aside, source="raster")
        prior = {e.id: tp.seen.get(e.id, 1) for e in base.elements}
        c = consensus([base] + [s[k][1] for s in per_sample], prior=prior, prior_samples=tp.samples)
        n = tp.samples + len(paths)
        reasons = {i: r for i, r in tp.set_aside_why.items() if not r.startswith("found on")}
        new = _scan_page(k, base, c, n, {s.id: s.name for s in tp.sections}, reasons)
        kept = {e.id for e in new.elements}
        zones = tuple(z for z in tp.zones if z.origin == "file" or all(i in kept for i in z.element_ids))
        pages.append(dataclasses.replace(new, zones=zones))
    refs = template.references + tuple(p.replace("\\", "/").split("/")[-1] for p in paths)
    warnings = tuple(w for w in template.warnings if not w.startswith("learned from one scanned sample"))
    from .zones import with_zones

    return with_zones(dataclasses.replace(template, pages=tuple(pages), references=refs, warnings=warnings))


def promote(template: Template, page: int, element_id: str) -> Template:
    """The template with a set-aside element of ``page`` taken into the form (a person's call).

    Raises :class:`~layoutcheck.check.LearnError` naming the template, page and element when the
    page has no such set-aside element.
    """
    from .check import LearnError
    from .zones import with_zones

    if not 1 <= page <= len(template.pages):
        raise LearnError(f"template {template.name}: no page {page}")
    tp = template.pages[page - 1]
    found = [e for e in tp.set_aside if e.id == element_id]
    if not found:
        raise LearnError(f"template {template.name} page {page}: no element {element_id!r} set aside")
    elements = tp.elements + tuple(found)
    raster = tp.raster_elements + tuple(found) if tp.raster_elements == tp.elements else tp.raster_elements
    why = {k: v for k, v in tp.set_aside_why.items() if k != element_id}
    new = dataclasses.replace(tp, elements=elements, raster_elements=raster,
                              set_aside=tuple(e for e in tp.set_aside if e.id != element_id), set_aside_why=why,
                              sections=find_sections(elements, tp.width, tp.height, {s.id: s.name for s in tp.sections}),
                              seen={**tp.seen, element_id: max(tp.seen.get(element_id, 1), tp.samples)}, zones=())
    pages = tuple(with_raster_sections(new) if p is tp else p for p in template.pages)
    return with_zones(dataclasses.replace(template, pages=pages))

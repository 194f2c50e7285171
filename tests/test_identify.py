"""Form identification: the layout-signature prefilter keeps the right form among many."""

from __future__ import annotations

import json
import sys
from pathlib import Path

import numpy as np
import pytest

from layoutcheck import check, identify
from layoutcheck.check import CheckSettings, best_match, extract, learn
from layoutcheck.sources import read_pages

SAMPLES = Path(__file__).resolve().parents[1] / "sample_forms"
MM = 72.0 / 25.4  # points per mm (1 pt = 1/72 in, ISO 32000-1; 1 in = 25.4 mm)


def synthetic_form(path: Path, seed: int) -> str:
    """A made-up harbour form: random rows of boxes, rules and labels on A4."""
    from reportlab.pdfgen import canvas

    rng = np.random.default_rng(seed)
    w, h = 210 * MM, 297 * MM  # A4 (ISO 216)
    c = canvas.Canvas(str(path), pagesize=(w, h), invariant=1)
    c.drawString(20 * MM, h - 15 * MM, f"KBH-9{seed:02d} TEST FORM")
    y = 30.0
    while y < 260:
        n = int(rng.integers(1, 5))
        bh = float(rng.choice([6, 10, 14, 30]))
        widths = rng.dirichlet(np.ones(n)) * 170
        x = 20.0
        for k, bw in enumerate(widths):
            c.rect(x * MM, h - (y + bh) * MM, (bw - 3) * MM, bh * MM)
            c.drawString(x * MM, h - (y - 1.5) * MM, f"item {seed}-{k}")
            x += bw
        y += bh + float(rng.uniform(6, 18))
        if rng.random() < 0.4:
            c.line(15 * MM, h - y * MM, 195 * MM, h - y * MM)
            y += 4
    c.showPage()
    c.save()
    return str(path)


@pytest.fixture(scope="module")
def templates(tmp_path_factory):
    d = tmp_path_factory.mktemp("forms")
    refs = sorted(str(p) for p in (SAMPLES / "references").glob("*.pdf"))
    out = [learn([r], with_raster=False) for r in refs]
    out += [learn([synthetic_form(d / f"s{k}.pdf", k)], name=f"KBH-9{k:02d}", with_raster=False) for k in range(14)]
    return out


def test_aspect_of_standard_sheets():
    # ISO 216: A4 is 210 x 297 mm; ANSI Letter is 8.5 x 11 in.
    assert identify.signature(210 * MM, 297 * MM, ()).aspect == pytest.approx(210 / 297)
    assert identify.signature(11 * 72, 8.5 * 72, ()).aspect == pytest.approx(8.5 / 11)


def test_sample_inputs_identified_with_at_most_three_solves(templates, monkeypatch):
    """Each sample input gets the template sample_forms/expected.json names, among 18 forms,
    with the solver run at most three times per page."""
    entries = json.loads((SAMPLES / "expected.json").read_text()) + json.loads((SAMPLES / "expected_scans.json").read_text())
    expected = {(e["input"].split("/")[-1], e["page"]): e for e in entries}
    calls = []
    real = check.match_page
    monkeypatch.setattr(check, "match_page", lambda tp, found, s: calls.append(tp) or real(tp, found, s))
    checked = 0
    for f in sorted((SAMPLES / "inputs").glob("*.pdf")):
        for page in read_pages(f):
            found = extract(page)
            calls.clear()
            t, tp, m = best_match(templates, found, CheckSettings())
            assert len(calls) == 3
            want = expected[(f.name, page.page)]
            full = max(((real(p, found, CheckSettings()), tt) for tt in templates for p in tt.pages),
                       key=lambda x: (x[0].pose is not None, x[0].support))
            if want["verdict"] != "unrecognised":
                assert t.name == want["template"] == full[1].name, f.name
                assert m.support == pytest.approx(full[0].support)
            checked += 1
    assert checked == 16  # 14 born-digital pages and the two pages of the scanner PDF


def test_unrelated_page_is_unrecognised(templates):
    """The crew list checked against every template but its own: no form reaches the threshold."""
    others = [t for t in templates if t.name != "KBH-412"]
    (page,) = list(read_pages(SAMPLES / "references" / "KBH-412_crew_list.pdf"))
    rec = check.record_for(page.source, 1, extract(page), others, CheckSettings())
    assert rec["verdict"] == "unrecognised" and rec["template"] is None


def test_few_templates_are_all_tried_in_order(templates):
    (found,) = [extract(p) for p in read_pages(SAMPLES / "inputs" / "101_exact.pdf")]
    two = templates[:2]
    index, ident = check.identify_page(two, found, CheckSettings())
    tried = [index.page(r) for r in ident.tried]
    assert [(t.name, p.number) for t, p in tried] == [(t.name, p.number) for t in two for p in t.pages]


# -- look-alike forms of one house style, with revisions --------------------------------------------
sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "bench"))
import lookalike  # noqa: E402


@pytest.fixture(scope="module")
def house(tmp_path_factory):
    """Twenty templates: KBH-100 and KBH-101 in revisions 1-4, and twelve single forms."""
    d = tmp_path_factory.mktemp("house")
    specs = lookalike.family(20, n_revised=2)
    return d, specs, [lookalike.template_of(s) for s in specs]


def page_of(spec, d: Path):
    """The born-digital page of a form spec, as the vector extractor reads it."""
    (page,) = list(read_pages(lookalike.draw_pdf(spec, d / f"{spec.name}.pdf")))
    return page, extract(page)


def test_look_alike_elements_are_what_the_vector_extractor_reads(house):
    """The family's templates are built from element sets; pdfplumber reads the same from its PDFs."""
    d, specs, _ = house
    for spec in (specs[0], specs[1], specs[13]):
        _, found = page_of(spec, d)
        made = lookalike.elements_of(spec)
        assert sorted(e.kind for e in found.elements) == sorted(e.kind for e in made)
        for e in made:
            near = min(max(abs(a - b) for a, b in zip(e.frame, f.frame)) for f in found.elements if f.kind == e.kind)
            assert near < 0.3, (spec.name, e)


def test_form_ranked_fourth_by_the_signature_is_still_found(house, monkeypatch):
    """Plant the fault: three other forms get the page's very signature, its own form comes
    fourth. The first shortlist (three) accepts nothing; the next template page is the form."""
    from layoutcheck.index import TemplateIndex

    d, specs, templates = house
    own = 13
    page, found = page_of(specs[own], d)
    index = TemplateIndex.from_templates(templates)
    q = identify.signature(found.width, found.height, found.elements).vector()
    decoys = [9, 15, 18]  # three single forms (ties keep index order)
    for r in decoys:
        index.signatures["vector"][r] = q
    index.signatures["vector"][own] = q + np.float32(0.002)
    assert list(index.ranked(found)[:4]) == decoys + [own]
    calls = []
    real = check.match_page
    monkeypatch.setattr(check, "match_page", lambda tp, f, s: calls.append(tp) or real(tp, f, s))
    rec = check.record_for(page.source, 1, found, index, CheckSettings())
    assert rec["template"] == specs[own].name and rec["verdict"] == "pass"
    assert len(calls) == 4  # accepted with a clear margin at once: nothing more is solved
    _, ident = check.identify_page(index, found, CheckSettings())
    first = [ident.tried[r] for r in decoys]
    assert all(not c.accepted for c in first)  # the old three-page shortlist would have lost the page


def test_unrecognised_page_names_the_closest_template_after_trying_all(house):
    d, specs, templates = house
    (page,) = list(read_pages(SAMPLES / "references" / "KBH-412_crew_list.pdf"))
    found = extract(page)
    index, ident = check.identify_page(templates, found, CheckSettings())
    assert len(ident.tried) == len(templates)  # nothing accepted: every template page was solved
    rec = check.record_for(page.source, 1, found, templates, CheckSettings())
    assert rec["verdict"] == "unrecognised" and rec["template"] is None
    best = max(ident.tried.values(), key=lambda c: (c.match.pose is not None, c.match.support))
    name = index.page(best.row)[0].name
    assert rec["closest"]["template"] == name and rec["closest"]["template_page"] == 1
    assert rec["closest"]["support"] == pytest.approx(best.match.support, abs=1e-4)
    assert f"(closest: {name} page 1)" in rec["findings"][0]["message"]


@pytest.mark.parametrize("k", range(8))
def test_each_revision_page_goes_to_its_own_revision(house, k):
    """KBH-100 and KBH-101 in four revisions each (box moved 8 mm, box removed, sections swapped)."""
    d, specs, templates = house
    page, found = page_of(specs[k], d)
    rec = check.record_for(page.source, 1, found, templates, CheckSettings())
    assert (rec["template"], rec["form"], rec["revision"]) == (specs[k].name, specs[k].code, specs[k].revision)
    assert rec["verdict"] == "pass" and "ambiguous" not in rec


@pytest.mark.slow
def test_scans_of_two_revisions_a_box_apart_go_to_their_own(house):
    """Scans (turned, shifted, filled in, stamped) of revisions 1 and 2 of KBH-100: box moved 8 mm."""
    from layoutcheck.simulate import simulate_scan
    from layoutcheck.sources import RasterPage

    d, specs, templates = house
    for k, (rot, shift) in ((0, (1.5, (3.0, -2.0))), (1, (-2.0, (-4.0, 3.0)))):
        pdf = lookalike.draw_pdf(specs[k], d / f"scan{k}.pdf")
        scan = simulate_scan(pdf, dpi=200, rotation_deg=rot, shift_mm=shift, noise_sigma=4.0, fill=True, stamp=True, seed=k)
        page = RasterPage(source=str(pdf), page=1, image=scan.image, dpi_x=scan.dpi, dpi_y=scan.dpi_y)
        rec = check.check_page(page, templates, CheckSettings())
        assert (rec["template"], rec["revision"]) == (specs[k].name, specs[k].revision), rec["findings"]


def test_expected_revision_gives_a_finding_naming_what_tells_them_apart(house):
    d, specs, templates = house
    page, found = page_of(specs[1], d)  # revision 2: one box moved 8 mm
    r1, r2 = templates[0].pages[0], templates[1].pages[0]
    only1, only2 = identify.told_apart(r1.elements, r2.elements, 2.0 / 0.3528)
    # The box and its caption moved together; nothing else differs.
    assert sorted(r1.elements[i].kind for i in only1) == sorted(r2.elements[i].kind for i in only2) == ["box", "label"]
    (moved,) = [r2.elements[i] for i in only2 if r2.elements[i].kind == "box"]
    rec = check.record_for(page.source, 1, found, templates, CheckSettings(expect_revision=((None, "1"),)))
    assert rec["verdict"] == "mismatched" and rec["revision"] == "2" and rec["expected_revision"] == "1"
    (f,) = [f for f in rec["findings"] if f["message"].startswith("Page is")]
    assert f["element"] == moved.id
    assert f["message"].startswith("Page is KBH-100 revision 2, not revision 1 as expected: ")
    assert f"{moved.label()} of revision 2 is in place" in f["message"]
    assert "of revision 1 is 8.0 mm off" in f["message"]
    same = check.record_for(page.source, 1, found, templates, CheckSettings(expect_revision=(("KBH-100", "2"),)))
    assert same["verdict"] == "pass" and same["expected_revision"] == "2"
    other_form = check.record_for(page.source, 1, found, templates, CheckSettings(expect_revision=(("KBH-101", "1"),)))
    assert other_form["verdict"] == "pass" and "expected_revision" not in other_form


def test_two_templates_of_one_layout_are_an_ambiguity_finding(house):
    """A copy of a form under another name: the record names both, and the page is flagged."""
    import dataclasses

    d, specs, templates = house
    copy = dataclasses.replace(templates[13], name="KBH-913")
    page, found = page_of(specs[13], d)
    rec = check.record_for(page.source, 1, found, templates + [copy], CheckSettings())
    assert rec["template"] == specs[13].name and rec["verdict"] == "mismatched"
    assert rec["ambiguous"] == {"template": "KBH-913", "template_page": 1, "support": 1.0, "margin": 0.0}
    assert rec["findings"][0]["message"].startswith(f"Ambiguous: KBH-913 page 1 explains this page almost as well as {specs[13].name} page 1")
    twin = dataclasses.replace(templates[0], name="KBH-100-r5", revision="5")
    (page0, found0) = page_of(specs[0], d)
    rec = check.record_for(page0.source, 1, found0, templates + [twin], CheckSettings())
    assert rec["ambiguous"]["revision"] in ("1", "5") and rec["verdict"] == "mismatched"
    assert "no element tells them apart" in rec["findings"][0]["message"]

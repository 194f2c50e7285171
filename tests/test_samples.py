"""Learning a template from several good samples."""

from __future__ import annotations

import pytest

from conftest import draw_form
from layoutcheck.check import check_file, learn
from layoutcheck.samples import consensus, consensus_elements


def test_extra_ink_of_one_sample_does_not_enter_the_template(tmp_path):
    a = draw_form(tmp_path / "a.pdf", fill=True)
    b = draw_form(tmp_path / "b.pdf", shift_mm=(1.0, 0.5))
    c = draw_form(tmp_path / "c.pdf", rotate_deg=0.3)
    single = learn([str(tmp_path / "a.pdf")], with_raster=False)
    multi = learn([str(a), str(b), str(c)], name="T-7", with_raster=False)
    texts = {e.text for e in single.pages[0].elements if e.kind == "label"}
    kept = {e.text for e in multi.pages[0].elements if e.kind == "label"}
    # The filled-in words are on sample a only: the single-reference template has them, the
    # learned one does not.
    assert {"MV Quiet Tern", "KX4Q"} <= texts
    assert not ({"MV Quiet Tern", "KX4Q"} & kept)
    assert len(multi.pages[0].elements) < len(single.pages[0].elements)
    assert multi.pages[0].unstable == ()


def test_element_missing_on_one_of_three_is_unstable_and_not_judged(tmp_path):
    a = draw_form(tmp_path / "a.pdf")
    b = draw_form(tmp_path / "b.pdf")
    c = draw_form(tmp_path / "c.pdf", omit={"Agent"})
    t = learn([str(a), str(b), str(c)], with_raster=False)
    by_id = {e.id: e for e in t.pages[0].elements}
    unstable = [by_id[i] for i in t.pages[0].unstable]
    assert [(e.kind, e.caption) for e in unstable if e.kind == "box"] == [("box", "Agent")]
    # A page without that box still passes: the samples showed it is not always there.
    rec = next(check_file(str(c), [t]))
    assert rec["verdict"] == "pass", rec["findings"]


def test_tolerance_widens_to_what_samples_show(tmp_path):
    a = draw_form(tmp_path / "a.pdf")
    b = draw_form(tmp_path / "b.pdf", move={"Tonnage": (1.5, 0.0)})
    c = draw_form(tmp_path / "c.pdf", move={"Tonnage": (-1.5, 0.0)})
    t = learn([str(a), str(b), str(c)], with_raster=False)
    page = t.pages[0]
    (box,) = [e for e in page.elements if e.kind == "box" and e.caption == "Tonnage"]
    # Median of the three places is the drawn one; the spread is 1.5 mm = 4.25 pt.
    assert page.slack[box.id] == pytest.approx(1.5 * 72 / 25.4, abs=0.1)
    # Moved 3 mm: beyond the 2 mm default, within 2 mm plus the learned 1.5 mm.
    d = draw_form(tmp_path / "d.pdf", move={"Tonnage": (3.0, 0.0)})
    assert next(check_file(str(d), [t]))["verdict"] == "pass"
    single = learn([str(a)], with_raster=False)
    assert next(check_file(str(d), [single]))["verdict"] == "mismatched"


def test_samples_with_different_page_counts_are_refused(tmp_path):
    from pypdf import PdfReader, PdfWriter

    from layoutcheck.check import LearnError

    a = draw_form(tmp_path / "a.pdf")
    w = PdfWriter()
    for _ in range(2):
        w.add_page(PdfReader(str(a)).pages[0])
    two = tmp_path / "two.pdf"
    with open(two, "wb") as fh:
        w.write(fh)
    with pytest.raises(LearnError, match=r"good samples differ in page count \(a\.pdf: 1, two\.pdf: 2\)"):
        learn([str(a), str(two)], with_raster=False)


def test_consensus_of_one_sample_is_itself(tmp_path):
    from layoutcheck.check import extract
    from layoutcheck.sources import read_pages

    path = draw_form(tmp_path / "a.pdf")
    (pe,) = [extract(p) for p in read_pages(path)]
    kept, unstable, slack = consensus_elements([pe])
    assert [e.id for e in kept] == [e.id for e in pe.elements]
    assert [e.frame for e in kept] == [pytest.approx(e.frame, abs=1e-9) for e in pe.elements]
    assert unstable == [] and slack == {}
    c = consensus([pe])
    assert c.seen == {e.id: 1 for e in pe.elements} and c.dropped == []

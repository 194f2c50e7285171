"""Templates from filled scans: printed elements told from fill-in, and templates grown by samples."""

from __future__ import annotations

import json

import cv2
import numpy as np
import pytest
from click.testing import CliRunner

from layoutcheck.check import learn
from layoutcheck.cli import main
from layoutcheck.elements import MM_PER_POINT, Element
from layoutcheck.extract.raster.printed import (alignment, lab_ab, measure_line, page_levels, sort_printed,
                                                trim_to_structure)
from layoutcheck.simulate import save_scan, simulate_scan
from layoutcheck.template import load_template

MM = 72.0 / 25.4  # points per mm (1 pt = 1/72 in, ISO 32000-1; 1 in = 25.4 mm)
DPI = 200.0
PX = DPI / 25.4  # pixels per mm at 200 dpi


def draw_ruled_form(path, extra_rule: bool = False):
    """A one-page form written on rules: marks, a title, two write-on rules, a signature rule,
    a box, two checkboxes and a footer rule (A4, ISO 216: 210 x 297 mm)."""
    from reportlab.pdfgen import canvas

    w, h = 210 * MM, 297 * MM
    c = canvas.Canvas(str(path), pagesize=(w, h), invariant=1)

    def y(v):
        return h - v * MM

    for mx, my in ((10, 10), (195, 10), (10, 282)):
        c.rect(mx * MM, y(my + 5), 5 * MM, 5 * MM, stroke=0, fill=1)
    c.setFont("Helvetica-Bold", 14)
    c.drawString(20 * MM, y(25), "KESTREL BAY HARBOUR BOARD")
    c.setLineWidth(1.0)
    c.line(20 * MM, y(32), 190 * MM, y(32))
    c.setFont("Helvetica", 8)
    c.setLineWidth(0.6)
    for top, cap, x0, x1 in ((50, "Vessel name", 45, 125), (65, "Agent", 45, 105)):
        c.drawString(20 * MM, y(top - 0.6), cap)
        c.line(x0 * MM, y(top), x1 * MM, y(top))
    c.setLineWidth(0.8)
    c.rect(130 * MM, y(70), 60 * MM, 25 * MM)
    for k, cap in enumerate(("Inbound", "Outbound")):
        c.rect((30 + 40 * k) * MM, y(90), 4 * MM, 4 * MM)
        c.drawString((36 + 40 * k) * MM, y(89), cap)
    c.setLineWidth(0.7)
    c.line(20 * MM, y(130), 90 * MM, y(130))
    c.drawString(20 * MM, y(134), "Signature")
    if extra_rule:
        # A rule drawn with a ruler on one copy only: printed-looking, but not the form's.
        c.setLineWidth(0.6)
        c.line(120 * MM, y(115), 170 * MM, y(115))
    c.setLineWidth(0.5)
    c.line(20 * MM, y(270), 190 * MM, y(270))
    c.showPage()
    c.save()
    return path


def _poly(img, pts_mm, thick_mm=0.5, ink=40):
    q = np.round(np.asarray(pts_mm) * PX * 16).astype(np.int32)
    cv2.polylines(img, [q], False, int(ink), max(1, int(round(thick_mm * PX))), lineType=cv2.LINE_AA, shift=4)


def fill_in(img, dx=0.0):
    """Handwriting across both write-on rules (a tail that touches the first one's end and runs on
    7 mm along it), a signature across the signature rule, a word crossed out in the box and a
    cross over the first checkbox;
    ``dx`` (mm) moves the writing along, as another person's would be."""
    out = img.copy()
    for (x0, x1, yy) in ((50 + dx, 118 - dx, 50), (48 + dx, 95, 65)):
        xs = np.linspace(x0, x1, 240)
        ys = yy - 2.0 - 1.6 * np.sin(xs * 2.4) + np.where(np.sin(xs * 0.9) > 0.9, 2.8, 0.0)  # loops, descenders across
        _poly(out, np.stack([xs, ys], 1))
    if not dx:
        _poly(out, [[124.8, 50.05], [128.0, 50.0], [132.0, 49.95]], 0.45, 30)  # touches the end (x = 125), runs on
    xs = np.linspace(28 + dx, 82, 300)
    _poly(out, np.stack([xs, 127.5 - 5.0 * np.sin(xs * 0.8) * np.cos(xs * 0.13)], 1), 0.45, 25)
    xs = np.linspace(136 + dx, 170 + dx, 60)
    _poly(out, np.stack([xs, 57.0 + 0.35 * np.sin((xs - xs[0]) * np.pi / 34) + 0.08 * np.sin(xs * 1.7)], 1),
          0.45, 35)  # a word crossed out in the box: long and nearly straight, bowed and trembling
    _poly(out, [[29, 85], [35, 91]], 0.5, 30)  # a cross whose arms run 1 mm over the box
    _poly(out, [[35, 85], [29, 91]], 0.5, 30)
    return out


def _structure(template):
    return [e for e in template.pages[0].raster_elements if e.kind_class in ("line", "box")]


def _same(a: Element, b: Element, tol_mm: float) -> bool:
    return a.kind == b.kind and max(abs(u - v) for u, v in zip(a.frame, b.frame)) * MM_PER_POINT <= tol_mm


def _filled_scan(tmp_path, pdf, name="filled.png", rotation=0.05, seed=3, dx=0.0):
    sc = simulate_scan(pdf, dpi=DPI, rotation_deg=rotation, blur_sigma_px=0.5, noise_sigma=2, seed=seed, oversample=2)
    sc = type(sc)(fill_in(sc.image, dx), sc.dpi, sc.pose, sc.settings, sc.page_size_pt)
    return save_scan(sc, tmp_path / name)


@pytest.fixture(scope="module")
def ruled(tmp_path_factory):
    d = tmp_path_factory.mktemp("ruled")
    pdf = draw_ruled_form(d / "form.pdf")
    return d, pdf, learn([str(pdf)]), learn([_filled_scan(d, pdf)])


def test_one_filled_scan_learns_exactly_the_blank_forms_rules_boxes_and_checkboxes(ruled):
    _, _, blank, filled = ruled
    ref, got = _structure(blank), _structure(filled)
    # Reference: the template learned from the blank PDF, as the raster extractor sees a rendering.
    assert sorted(e.kind for e in got) == sorted(e.kind for e in ref)
    unmatched = [e.label() for e in got if not any(_same(e, r, 0.5) for r in ref)]
    assert unmatched == []
    page = filled.pages[0]
    # The crossing-out that the extractor took for a rule is kept in the file, set aside.
    (aside,) = [e for e in page.set_aside if e.kind == "hline"]
    assert abs(aside.center[1] / MM - 57.0) < 1.0 and abs(aside.center[0] / MM - 153.0) < 3.0
    assert page.set_aside_why[aside.id].startswith("not straight")
    assert page.samples == 1


def test_without_sorting_the_same_scan_learns_fill_in(ruled):
    """The cues matter: the raw elements of the filled scan do not match the blank's."""
    from layoutcheck.check import extract
    from layoutcheck.sources import read_pages

    d, _, blank, _ = ruled
    page = next(iter(read_pages(str(d / "filled.png"))))
    raw = [e for e in extract(page).elements if e.kind_class in ("line", "box")]
    assert any(not any(_same(e, r, 0.5) for r in _structure(blank)) for e in raw)


def test_single_sample_warning_in_learn_output_and_in_the_file(ruled, tmp_path):
    d = ruled[0]
    out = tmp_path / "t.json"
    res = CliRunner().invoke(main, ["learn", str(d / "filled.png"), "-o", str(out)])
    assert res.exit_code == 0, res.output
    first = res.output.splitlines()[0]
    assert "from 1 scanned sample:" in first and "set aside as probable fill-in" in first
    assert "warning: learned from one scanned sample" in res.output
    data = json.loads(out.read_text())
    assert data["warnings"][0].startswith("learned from one scanned sample")
    assert data["pages"][0]["set_aside"] and data["pages"][0]["samples"] == 1
    t = load_template(out)
    assert t.warnings == tuple(data["warnings"])
    assert [e.id for e in t.pages[0].set_aside] == [e["id"] for e in data["pages"][0]["set_aside"]]


def test_a_blank_pdf_template_carries_no_sample_fields(ruled, tmp_path):
    from layoutcheck.template import save_template

    blank = ruled[2]
    save_template(blank, tmp_path / "b.json")
    data = json.loads((tmp_path / "b.json").read_text())
    assert not ({"samples", "seen", "set_aside", "set_aside_why"} & set(data["pages"][0])) and "warnings" not in data


def test_update_with_a_second_sample_removes_what_only_the_first_had(ruled, tmp_path):
    d, _, blank, _ = ruled
    extra = draw_ruled_form(tmp_path / "extra.pdf", extra_rule=True)
    first = _filled_scan(tmp_path, extra, "first.png")
    t1 = tmp_path / "t.json"
    assert CliRunner().invoke(main, ["learn", first, "-o", str(t1)]).exit_code == 0
    # The ruler-drawn rule is straight and even: one sample cannot tell it from the form.
    ruler = [e for e in load_template(t1).pages[0].elements
             if e.kind == "hline" and abs(e.center[1] / MM - 115) < 0.5 and abs(e.center[0] / MM - 145) < 0.5]
    assert len(ruler) == 1
    more = tmp_path / "more"
    more.mkdir()
    _filled_scan(more, ruled[1], "second.png", rotation=-0.3, seed=9, dx=6.0)
    res = CliRunner().invoke(main, ["learn", "--update", str(t1), str(more)])
    assert res.exit_code == 0, res.output
    assert "from 2 scanned samples" in res.output and "warning:" not in res.output
    t2 = load_template(t1)
    page = t2.pages[0]
    assert ruler[0].id not in {e.id for e in page.elements}
    assert ruler[0].id in {e.id for e in page.set_aside}
    assert page.set_aside_why[ruler[0].id] == "found on 1 of 2 samples"
    assert page.samples == 2 and t2.warnings == ()
    assert t2.references == ("first.png", "second.png")
    # What is left is the blank form's structure.
    assert sorted(e.kind for e in _structure(t2)) == sorted(e.kind for e in _structure(blank))


def test_update_refuses_a_template_learned_from_the_blank(ruled, tmp_path):
    from layoutcheck.template import save_template

    d, pdf, blank, _ = ruled
    save_template(blank, tmp_path / "b.json")
    res = CliRunner().invoke(main, ["learn", "--update", str(tmp_path / "b.json"), str(d / "filled.png")])
    assert res.exit_code == 1
    assert "learned from a blank PDF, not from samples" in res.output


# -- the cues, one at a time ----------------------------------------------------------------------
def _rule_image(curve_mm, thick_mm=0.25, size=(60, 400)):
    img = np.full(size, 255, np.uint8)
    _poly(img, curve_mm, thick_mm, 0)
    return img


def test_fit_residual_of_a_straight_rule_and_of_a_wave_of_known_amplitude():
    xs = np.linspace(5, 45, 400)
    flat = _rule_image(np.stack([xs, np.full_like(xs, 3.0)], 1))
    amp = 0.3
    wave = _rule_image(np.stack([xs, 3.0 + amp * np.sin(xs * 2 * np.pi / 4.0)], 1))
    e = Element("r", "hline", (8 * MM, 2.9 * MM, 42 * MM, 3.1 * MM), 0.0, source="raster")
    t, paper = page_levels(flat)
    assert measure_line(flat, DPI, e, t, paper).residual_mm < 0.02
    got = measure_line(wave, DPI, e, t, paper).residual_mm
    # A sine's median absolute value is A sin(pi/4) = A / sqrt(2) (mathematics), so the scaled
    # median absolute deviation 1.4826 A / sqrt(2) is 1.048 A (1.4826: normal consistency, from memory).
    assert got == pytest.approx(1.4826 * amp / np.sqrt(2), rel=0.2)


def test_stroke_spread_of_an_even_rule_and_of_one_that_thickens():
    xs = np.linspace(5, 45, 400)
    even = _rule_image(np.stack([xs, np.full_like(xs, 3.0)], 1), 0.25)
    uneven = even.copy()
    _poly(uneven, [[25, 3.0], [45, 3.0]], 0.6, 0)
    e = Element("r", "hline", (5 * MM, 2.9 * MM, 45 * MM, 3.1 * MM), 0.0, source="raster")
    t, paper = page_levels(even)
    assert measure_line(even, DPI, e, t, paper).spread < 0.2
    assert measure_line(uneven, DPI, e, t, paper).spread > 0.45


def test_a_tail_along_a_rule_is_cut_off_but_writing_across_it_is_not():
    xs = np.linspace(5, 35, 300)
    img = _rule_image(np.stack([xs, np.full_like(xs, 3.0)], 1), 0.22)
    _poly(img, [[34.0, 3.02], [44.0, 2.98]], 0.5, 30)  # touches the end at 35 mm, runs on to 44
    for x in (10.0, 16.0, 22.0):  # strokes crossing the rule
        _poly(img, [[x, 1.0], [x + 1.0, 5.0]], 0.5, 30)
    e = Element("r", "hline", (5 * MM, 2.9 * MM, 44 * MM, 3.1 * MM), 0.0, source="raster")
    t, paper = page_levels(img)
    lo, hi = measure_line(img, DPI, e, t, paper).span
    centre = 24.5 * MM
    assert (centre + lo) / MM == pytest.approx(5.0, abs=0.3)
    assert (centre + hi) / MM == pytest.approx(34.0, abs=1.0)  # the tail's first millimetre lies on the rule


def test_a_thick_stroke_must_be_straighter_than_print_to_count_as_printed():
    """A felt pen's line ruled nearly straight is set aside because it is twice as thick as the
    print; the same bow drawn print-thin, and a heavy bar drawn straight, stay."""
    xs = np.linspace(5, 45, 400)
    img = np.full((300, 400), 255, np.uint8)
    for yy in (3.0, 8.0, 13.0):  # the print: three rules in line with each other, 0.25 mm
        _poly(img, np.stack([xs, np.full_like(xs, yy)], 1), 0.25, 0)
    bow = np.linspace(8, 30, 300)
    wave = 0.02 * np.sin(bow * 2 * np.pi / 5)  # 0.02 mm: under the 0.022 mm a thin stroke is allowed
    _poly(img, np.stack([bow, 22.0 + wave], 1), 0.64, 30)  # the pen
    _poly(img, np.stack([bow, 26.0 + wave], 1), 0.25, 0)  # the same bow, print-thin
    _poly(img, [[12, 32.0], [40, 32.0]], 0.7, 0)  # a heavy printed bar
    rows = ((5, 45, 3.0), (5, 45, 8.0), (5, 45, 13.0), (8, 30, 22.0), (8, 30, 26.0), (12, 40, 32.0))
    els = [Element(f"r{k}", "hline", (x0 * MM, (yy - 0.1) * MM, x1 * MM, (yy + 0.1) * MM), 0.0, source="raster")
           for k, (x0, x1, yy) in enumerate(rows)]
    t, paper = page_levels(img)
    inks = [measure_line(img, DPI, e, t, paper) for e in els]
    assert inks[3].thickness_mm > 1.5 * inks[0].thickness_mm and inks[5].thickness_mm > 1.5 * inks[0].thickness_mm
    assert 0.011 < inks[3].residual_mm < 0.022 and 0.011 < inks[4].residual_mm < 0.022
    s = sort_printed(img, DPI, els)
    assert [e.id for e in s.set_aside] == ["r3"]
    assert s.reasons["r3"].startswith("not straight") and "for a stroke thicker than the print" in s.reasons["r3"]


def test_alignment_rescues_a_slightly_uneven_rule_but_not_a_lone_one():
    xs = np.linspace(5, 45, 400)
    img = np.full((200, 400), 255, np.uint8)
    for yy in (3.0, 13.0):
        _poly(img, np.stack([xs, np.full_like(xs, yy)], 1), 0.25, 0)
    _poly(img, [[25, 13.0], [45, 13.0]], 0.4, 0)  # the second rule thickens: uneven
    _poly(img, [[8, 20.0], [25, 20.0]], 0.25, 0)
    _poly(img, [[25, 20.0], [38, 20.0]], 0.4, 0)  # a lone, uneven rule
    els = [Element(f"r{k}", "hline", (x0 * MM, (yy - 0.1) * MM, x1 * MM, (yy + 0.1) * MM), 0.0, source="raster")
           for k, (x0, x1, yy) in enumerate(((5, 45, 3.0), (5, 45, 13.0), (8, 38, 20.0)))]
    s = sort_printed(img, DPI, els)
    assert [e.id for e in s.kept] == ["r0", "r1"]
    assert [e.id for e in s.set_aside] == ["r2"]
    assert s.reasons["r2"].startswith("uneven stroke")


def test_colour_sets_aside_blue_ink_on_a_colour_scan():
    xs = np.linspace(5, 45, 400)
    grey = np.full((120, 400), 255, np.uint8)
    rgb = np.full((120, 400, 3), 255, np.uint8)
    for k, (yy, colour) in enumerate(((3.0, (0, 0, 0)), (6.0, (0, 0, 0)), (9.0, (0, 0, 0)), (12.0, (20, 40, 200)))):
        q = np.round(np.stack([xs, np.full_like(xs, yy)], 1) * PX * 16).astype(np.int32)
        cv2.polylines(rgb, [q], False, colour, 2, lineType=cv2.LINE_AA, shift=4)
    grey = cv2.cvtColor(rgb, cv2.COLOR_RGB2GRAY)
    els = [Element(f"r{k}", "hline", (5 * MM, (yy - 0.1) * MM, 45 * MM, (yy + 0.1) * MM), 0.0, source="raster")
           for k, yy in enumerate((3.0, 6.0, 9.0, 12.0))]
    assert [e.id for e in sort_printed(grey, DPI, els).set_aside] == []
    s = sort_printed(grey, DPI, els, colour=rgb)
    assert [e.id for e in s.set_aside] == ["r3"] and "colour" in s.reasons["r3"]


def test_lab_ab_against_scikit_image():
    from skimage.color import rgb2lab

    rgb = np.array([[[0, 0, 255], [200, 30, 30], [128, 128, 128], [20, 40, 200]]], np.uint8)
    want = rgb2lab(rgb / 255.0)[..., 1:]
    assert np.allclose(lab_ab(rgb), want, atol=1.5)


def test_trim_to_structure_stops_a_rule_at_the_box_it_runs_into():
    box = Element("b", "box", (100.0, 50.0, 200.0, 80.0), 0.0, source="raster")
    # Runs on along the box's top edge from x = 100 to 150: the rule itself ends at the box's side.
    along = Element("h1", "hline", (20.0, 49.8, 150.0, 50.2), 0.0, source="raster")
    # Overshoots a crossing vertical rule at x = 300 by 1 mm (2.8 pt): a stroke's overrun.
    v = Element("v", "vline", (299.8, 100.0, 300.2, 200.0), 0.0, source="raster")
    over = Element("h2", "hline", (220.0, 149.8, 302.8, 150.2), 0.0, source="raster")
    # Runs 10 mm past the crossing: a rule that goes on, left alone.
    far = Element("h3", "hline", (220.0, 159.8, 328.3, 160.2), 0.0, source="raster")
    # The box's left side, run on 12 pt below the box by a stroke touching it: the box's side.
    side = Element("v2", "vline", (99.8, 50.0, 100.2, 92.0), 0.0, source="raster")
    s = trim_to_structure([box, along, v, over, far, side])
    got = {e.id: e.frame for e in s.kept}
    assert got["h1"] == (20.0, 49.8, 100.0, 50.2)
    assert got["h2"] == (220.0, 149.8, 300.0, 150.2)
    assert got["h3"] == far.frame and got["b"] == box.frame
    assert [e.id for e in s.set_aside] == ["v2"] and s.reasons["v2"].startswith("the side of box (b)")
    assert set(s.reasons) == {"h1", "h2", "v2"}


def test_a_person_promotes_a_set_aside_element(ruled):
    from layoutcheck.check import LearnError
    from layoutcheck.samples import promote

    filled = ruled[3]
    page = filled.pages[0]
    (aside,) = [e for e in page.set_aside if e.kind == "hline"]
    t = promote(filled, 1, aside.id)
    p = t.pages[0]
    assert aside.id in {e.id for e in p.elements} and aside.id in {e.id for e in p.raster_elements}
    assert aside.id not in {e.id for e in p.set_aside} and aside.id not in p.set_aside_why
    assert aside.id in {i for s in p.sections for i in s.element_ids}
    with pytest.raises(LearnError, match=r"page 1: no element 'hline-999' set aside"):
        promote(filled, 1, "hline-999")


def test_a_straight_blue_line_on_a_colour_scan_is_set_aside_by_its_colour(ruled, tmp_path):
    """A line ruled in blue ink is as straight as print: only its colour gives it away."""
    from PIL import Image

    pdf = ruled[1]
    sc = simulate_scan(pdf, dpi=DPI, blur_sigma_px=0.5, seed=5, oversample=2)
    rgb = np.repeat(sc.image[..., None], 3, axis=2)
    q = np.round(np.array([[120.0, 115.0], [170.0, 115.0]]) * PX * 16).astype(np.int32)
    cv2.polylines(rgb, [q], False, (30, 50, 190), max(1, int(round(0.3 * PX))), lineType=cv2.LINE_AA, shift=4)
    Image.fromarray(rgb, "RGB").save(tmp_path / "colour.png", dpi=(DPI, DPI))
    Image.fromarray(rgb, "RGB").convert("L").save(tmp_path / "grey.png", dpi=(DPI, DPI))

    def blue_rules(t, where):
        return [e for e in getattr(t.pages[0], where) if e.kind == "hline" and abs(e.center[1] / MM - 115) < 0.5]

    colour, grey = learn([str(tmp_path / "colour.png")]), learn([str(tmp_path / "grey.png")])
    assert len(blue_rules(grey, "elements")) == 1 and blue_rules(grey, "set_aside") == []
    (aside,) = blue_rules(colour, "set_aside")
    assert blue_rules(colour, "elements") == []
    assert colour.pages[0].set_aside_why[aside.id] == "its ink is not the colour of the print"


def test_alignment_counts_elements_sharing_an_edge():
    els = [Element("a", "hline", (0.0, 9.9, 50.0, 10.1), 0.0, source="raster"),
           Element("b", "box", (50.2, 30.0, 80.0, 40.0), 0.0, source="raster"),  # its left side meets a's end
           Element("c", "hline", (100.0, 10.0, 130.0, 10.2), 0.0, source="raster"),  # in line with a
           Element("d", "vline", (200.0, 100.0, 200.4, 150.0), 0.0, source="raster")]
    assert alignment(els, 0.5).tolist() == [2, 1, 1, 0]


def test_a_bitonal_turned_scan_of_the_blank_keeps_every_rule_and_box(ruled, tmp_path):
    """On a bitonal page a turned rule's centre steps by whole pixels: still printed."""
    _, pdf, blank, _ = ruled
    sc = simulate_scan(pdf, dpi=DPI, rotation_deg=0.4, blur_sigma_px=0.6, bitonal_threshold=150, seed=2, oversample=2)
    t = learn([save_scan(sc, tmp_path / "bitonal.png")])
    assert [e.label() for e in t.pages[0].set_aside if e.kind_class in ("line", "box")] == []
    assert sorted(e.kind for e in _structure(t)) == sorted(e.kind for e in _structure(blank))


# -- verifying a filled page: rules on their printed span -----------------------------------------
def _scan_with(tmp_path, pdf, name, draw):
    # Upright, so that what is drawn in page millimetres lands on the printed rules.
    sc = simulate_scan(pdf, dpi=DPI, rotation_deg=0.0, blur_sigma_px=0.5, noise_sigma=2, seed=5, oversample=2)
    img = sc.image.copy()
    draw(img)
    return save_scan(type(sc)(img, sc.dpi, sc.pose, sc.settings, sc.page_size_pt), tmp_path / name)


def test_a_filled_page_whose_writing_runs_on_along_a_rule_passes(ruled, tmp_path):
    """Writing whose tail touches the free end of the "Vessel name" rule (45-125 mm) and runs on
    along it for 12 mm makes the inked line 115 % of the rule: verified, the rule is put on its
    printed span (the mechanism learning uses) and the page passes."""
    from layoutcheck import check_page

    _, pdf, blank, _ = ruled

    def tail(img):
        xs = np.linspace(60, 110, 200)
        _poly(img, np.stack([xs, 46.0 - 1.2 * np.sin(xs * 2.4)], 1))  # writing above the rule
        _poly(img, [[124.6, 50.0], [137.0, 49.95]], 0.5, 30)  # a tail from the rule's end, along it

    result = check_page(_scan_with(tmp_path, pdf, "tail.png", tail), [blank])
    rec = result.to_record()
    assert rec["verdict"] == "pass", rec["findings"]
    # The rule was measured again: named among what the second look settled.
    vessel = next(e.id for e in blank.pages[0].raster_elements
                  if e.kind == "hline" and abs(e.center[1] / MM - 50) < 1 and abs(e.frame[0] / MM - 45) < 1)
    assert vessel in rec["second_look"]


def test_a_rule_printed_longer_is_still_resized(ruled, tmp_path):
    """Ink that continues a rule as its own stroke (same weight, on its line) is not cut: the
    rule printed 15 mm longer at its free end is reported resized."""
    from layoutcheck import check_page

    _, pdf, blank, _ = ruled

    def longer(img):
        # The printed rule is 0.6 pt (0.21 mm) black; the simulator blurs it the same way.
        _poly(img, [[124.5, 50.0], [140.0, 50.0]], 0.6 / MM, 0)

    rec = check_page(_scan_with(tmp_path, pdf, "longer.png", longer), [blank]).to_record()
    assert rec["verdict"] == "mismatched"
    (off,) = rec["offending"]
    assert off["kind"] == "hline" and off["status"] == "resized"
    # 95 mm over 80 mm: the rule is drawn from 45 to 125 mm in draw_ruled_form, now runs to 140 mm.
    assert off["size_ratio"] == pytest.approx(95 / 80, abs=0.02)

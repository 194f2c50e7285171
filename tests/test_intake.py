"""Imperfect scans from real intake: fax resolutions, faint print, paper not flat, cut-off pages,
bold headings, rules that run into boxes; and the nuisances that must keep working.

Outside references are named beside each check.
"""

from __future__ import annotations

import io
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from conftest import MM, draw_form
from layoutcheck.check import CheckSettings, check_file, check_page, learn
from layoutcheck.consensus import free_rule_ends, judge_rules, solve, FrameArrays
from layoutcheck.elements import Element
from layoutcheck.extract.raster import binarise, extract_raster, otsu_threshold
from layoutcheck.field import fit_field
from layoutcheck.pose import Pose
from layoutcheck.simulate import save_scan, simulate_scan
from layoutcheck.sources import RasterPage, read_pages, snap_dpi, square_pixels
from layoutcheck.verdict import SEVERITY, VERDICTS

# ISO 216: A4 is 210 x 297 mm; 1 in = 25.4 mm (exact). At 204 x 98 dpi (a standard-resolution
# fax, common practice): 210 / 25.4 * 204 = 1686.6 -> 1687 and 297 / 25.4 * 98 = 1145.9 -> 1146.
A4_FAX_PX = (1146, 1687)


@pytest.fixture(scope="module")
def reference(tmp_path_factory):
    return str(draw_form(tmp_path_factory.mktemp("intake") / "reference.pdf"))


@pytest.fixture(scope="module")
def template(reference):
    return learn([reference], name="T-7")


# -- resolution per axis --------------------------------------------------------------------------
def _fax_image() -> Image.Image:
    rng = np.random.default_rng(1)
    a = np.full(A4_FAX_PX, 255, np.uint8)
    a[rng.random(A4_FAX_PX) < 0.01] = 0
    return Image.fromarray(a)


@pytest.mark.parametrize("fmt", ["tiff-g4", "png", "jpeg-jfif", "jpeg-exif"])
def test_resolution_is_read_per_axis(tmp_path, fmt):
    im = _fax_image()
    path = tmp_path / f"fax.{fmt.split('-')[0]}"
    if fmt == "tiff-g4":
        im.convert("1").save(path, dpi=(204, 98), compression="group4")
    elif fmt == "png":
        im.save(path, dpi=(204, 98))  # written as pHYs in pixels per metre: 8031 x 3858
    elif fmt == "jpeg-jfif":
        im.save(path, dpi=(204, 98), quality=90)
    else:
        # EXIF only (no JFIF density): XResolution 0x011A, YResolution 0x011B, unit 0x0128 = 2
        # (inch), from the EXIF 2.3 standard's TIFF tags.
        exif = Image.Exif()
        exif[0x011A], exif[0x011B], exif[0x0128] = 204.0, 98.0, 2
        buf = io.BytesIO()
        im.save(buf, format="JPEG", quality=90, exif=exif.tobytes())
        data = bytearray(buf.getvalue())
        path.write_bytes(bytes(data))
    [page] = list(read_pages(path))
    assert isinstance(page, RasterPage), page
    assert page.dpi_xy == (204.0, 98.0)
    assert page.image.shape == A4_FAX_PX
    # The page is A4 in points (1/72 in): 595.28 x 841.89, to within one pixel on each axis.
    assert page.width == pytest.approx(210 * MM, abs=72 / 204)
    assert page.height == pytest.approx(297 * MM, abs=72 / 98)
    assert page.dpi == 204.0  # the finer axis, that of the square-pixel copy


def test_usual_resolutions_snap_per_axis():
    # Fax resolutions (ITU-T T.4, common practice): 204 x 98, 204 x 196 and the metric
    # 200 x 100 / 200 x 200; each axis snaps to its nearest usual value.
    assert [snap_dpi(v) for v in (97.9, 98.6, 100.4, 195.0, 203.2, 199.0, 299.5)] == [98, 98, 100, 196, 204, 200, 300]
    assert snap_dpi(60.0) is None


def test_square_pixels_keeps_the_page_size():
    page = RasterPage("fax.tif", 1, np.asarray(_fax_image()), 204.0, True, 98.0)
    sq = square_pixels(page)
    # ISO 216 height at 204 dpi: 297 / 25.4 * 204 = 2385.4 pixels.
    assert sq.square and sq.dpi == 204.0 and sq.image.shape[1] == 1687
    assert abs(sq.image.shape[0] - 297 / 25.4 * 204) < 1.0
    assert set(np.unique(sq.image).tolist()) <= {0, 255}  # a bitonal page stays bitonal
    assert square_pixels(sq) is sq


def test_standard_fax_is_checked_on_its_own_grid(tmp_path, reference, template):
    scan = simulate_scan(reference, dpi=(204, 98), rotation_deg=0.3, bitonal_threshold=128, seed=3)
    path = save_scan(scan, tmp_path / "fax.tif")
    [rec] = list(check_file(path, [template], CheckSettings(zones=True)))
    assert rec["verdict"] == "pass", rec["findings"]
    pose = rec["pose"]
    # Scale per axis within 0.3 % of the truth (the issue's target for faxes).
    assert abs(pose["scale_x"] / scan.pose.scale_x - 1) <= 0.003
    assert abs(pose["scale_y"] / scan.pose.scale_y - 1) <= 0.003
    # Zones are in the fax's own pixels: x at 204 / 72 px per point, y at 98 / 72.
    zone = next(z for z in rec["zones"] if z["name"].lower().startswith("call"))
    expect = scan.pose.apply(np.array([zone["frame_pt"][:2]], float))[0] * np.array([204, 98]) / 72.0
    assert zone["dpi"] == [204.0, 98.0]
    assert np.allclose(zone["quad"][0], expect, atol=1.5)


def test_too_thin_counts_pixels_per_axis():
    from layoutcheck.check import MIN_STROKE_PX, too_thin

    # PDF unit: 1/72 in (ISO 32000-1). A 0.5 pt rule is 0.5 * 98 / 72 = 0.68 px tall at a
    # standard fax's 98 dpi down, and 0.5 * 204 / 72 = 1.42 px wide at its 204 dpi across.
    assert MIN_STROKE_PX == 1.0
    hline = Element("hline-001", "hline", (0, 100, 200, 100.5), stroke=(None, 0.5))
    vline = Element("vline-001", "vline", (100, 0, 100.5, 200), stroke=(0.5, None))
    box = Element("box-001", "box", (0, 0, 100, 50), stroke=(0.8, 0.8))  # 0.8 * 98 / 72 = 1.09 px
    thin_box = Element("box-002", "box", (0, 0, 100, 50), stroke=(0.8, 0.6))  # 0.82 px down
    label = Element("label-001", "label", (0, 0, 50, 10), angle=None)  # no stroke: always judged
    els = [hline, vline, box, thin_box, label]
    assert too_thin(els, (204.0, 98.0)).tolist() == [True, False, False, True, False]
    assert too_thin(els, (204.0, 196.0)).tolist() == [False] * 5  # fine fax: 1.36 px and more
    assert too_thin(els, None).tolist() == [False] * 5  # a vector input shows every stroke


def test_elements_carry_the_stroke_they_are_drawn_with(tmp_path):
    from reportlab.lib.pagesizes import A4
    from reportlab.pdfgen import canvas

    path = tmp_path / "strokes.pdf"
    c = canvas.Canvas(str(path), pagesize=A4)
    c.setLineWidth(0.5)
    c.line(100, 700, 400, 700)
    c.setLineWidth(1.2)
    c.rect(100, 500, 200, 60)
    c.setFont("Helvetica", 10)
    c.drawString(100, 600, "Harbour dues")
    c.save()
    template = learn([str(path)], name="S")
    tp = template.pages[0]
    for els in (tp.elements, tp.elements_for("raster")):  # the scan's elements take the drawn width
        strokes = sorted((e.kind, e.stroke) for e in els if e.kind in ("hline", "box"))
        assert strokes == [("box", (1.2, 1.2)), ("hline", (None, 0.5))]
    # Kept through the template's own file.
    from layoutcheck.template import load_template, save_template

    save_template(template, tmp_path / "s.json")
    again = load_template(tmp_path / "s.json").pages[0]
    assert sorted((e.kind, e.stroke) for e in again.elements if e.stroke) == [("box", (1.2, 1.2)), ("hline", (None, 0.5))]


#: The crew list: a table of 0.5 pt rules (0.68 px at 98 dpi) under boxes of 0.8 pt (1.09 px).
CREW_LIST = Path(__file__).resolve().parents[1] / "sample_forms" / "references" / "KBH-412_crew_list.pdf"


def _fax(pdf, tmp_path, name, seed):
    # A fax thresholds at mid-grey and blurs by a fraction of its tall pixel (common practice).
    scan = simulate_scan(pdf, dpi=(204, 98), rotation_deg=0.45, shift_mm=(1.5, -2.0), bitonal_threshold=128,
                         blur_sigma_px=0.4, noise_sigma=3, seed=seed)
    return scan, save_scan(scan, tmp_path / f"{name}.tif")


def test_standard_fax_of_thin_rules_passes_and_names_what_it_cannot_show(tmp_path):
    template = learn([str(CREW_LIST)], name="KBH-412")
    scan, path = _fax(CREW_LIST, tmp_path, "crew", 4)
    [rec] = list(check_file(path, [template]))
    assert rec["template"] == "KBH-412" and rec["verdict"] == "pass", rec["findings"]
    assert rec["offending"] == []
    assert abs(rec["pose"]["scale_y"] / scan.pose.scale_y - 1) <= 0.003  # the issue's fax target
    [note] = [f for f in rec["findings"] if f["message"].startswith("Not judged at this resolution")]
    assert note["verdict"] == "pass" and "(204 x 98 dpi)" in note["message"]
    # Every rule and box of the table (0.5 pt) is named in the count; none of the 0.8 pt boxes.
    tp = template.pages[0]
    thin = {e.id for e in tp.elements_for("raster") if e.stroke and min(v for v in e.stroke if v) < 72 / 98}
    assert note["value"] == len(thin) > 100
    assert all(i in thin for i in note["message"].split("(")[-1].split(" and ")[0].rstrip(")").split(", "))


def test_standard_fax_still_names_a_moved_box(tmp_path):
    from pypdf import PdfReader, PdfWriter
    from reportlab.pdfgen import canvas

    # The 'Date' box (0.8 pt, 40 x 8 mm) moved 8 mm right: painted out in white, drawn again.
    wtr = PdfWriter(clone_from=str(CREW_LIST))
    page = wtr.pages[0]
    h = float(page.mediabox.height)
    buf = io.BytesIO()
    c = canvas.Canvas(buf, pagesize=(float(page.mediabox.width), h))
    x0, top, x1, bottom = 113.4, 153.1, 226.8, 175.7  # read with pdfplumber: top-left origin
    c.setStrokeColorRGB(1, 1, 1)
    c.setLineWidth(4)
    c.rect(x0, h - bottom, x1 - x0, bottom - top)
    c.setStrokeColorRGB(0, 0, 0)
    c.setLineWidth(0.8)
    c.rect(x0 + 8 * MM, h - bottom, x1 - x0, bottom - top)
    c.save()
    page.merge_page(PdfReader(io.BytesIO(buf.getvalue())).pages[0])
    moved = tmp_path / "moved.pdf"
    with open(moved, "wb") as fh:
        wtr.write(fh)
    template = learn([str(CREW_LIST)], name="KBH-412")
    _, path = _fax(moved, tmp_path, "moved", 5)
    [rec] = list(check_file(path, [template]))
    assert rec["verdict"] == "mismatched", rec["findings"]
    [o] = rec["offending"]
    assert o["status"] == "moved" and np.allclose(o["frame"], (x0, top, x1, bottom), atol=1.0)
    assert o["offset_mm"][0] == pytest.approx(8.0, abs=0.6)


def test_normalised_fax_page_is_square_and_in_place():
    from layoutcheck.normalise import normalise_image

    # A 20 x 20 pt black square at (100, 200) pt on a 204 x 98 dpi page (1 pt = 1/72 in).
    img = np.full(A4_FAX_PX, 255, np.uint8)
    c0, c1 = round(100 * 204 / 72), round(120 * 204 / 72)
    r0, r1 = round(200 * 98 / 72), round(220 * 98 / 72)
    img[r0:r1, c0:c1] = 0
    norm = normalise_image(img, (204.0, 98.0), Pose.identity(), (210 * MM, 297 * MM), bitonal=True)
    assert norm.dpi == 204.0 and norm.image.shape == (2385, 1687)  # ISO 216 A4 at 204 dpi
    rows, cols = np.nonzero(norm.image < 128)
    k = 204 / 72
    assert abs(cols.min() - 100 * k) <= 1.5 and abs(cols.max() + 1 - 120 * k) <= 1.5
    assert abs(rows.min() - 200 * k) <= 2.5 and abs(rows.max() + 1 - 220 * k) <= 2.5


# -- faint forms ----------------------------------------------------------------------------------
def test_otsu_on_a_faded_page_agrees_with_scikit_image(reference):
    from skimage.filters import threshold_otsu  # the reference implementation

    scan = simulate_scan(reference, dpi=100, fade=0.35, noise_sigma=6, seed=2)
    assert scan.image.min() > 120  # faint indeed: no pixel near black
    t = otsu_threshold(scan.image)
    assert abs(t - threshold_otsu(scan.image)) <= 1
    mask, method = binarise(scan.image, 100.0)
    assert method == "otsu" and 0.01 < mask.mean() < 0.2


def test_blank_faint_and_black_pages(reference, template):
    rng = np.random.default_rng(0)
    blank = np.clip(rng.normal(238, 6, (1169, 827)), 0, 255).astype(np.uint8)
    black = np.clip(rng.normal(20, 6, (1169, 827)), 0, 255).astype(np.uint8)
    faint = simulate_scan(reference, dpi=100, fade=0.35, noise_sigma=6, seed=2)
    out = {name: check_page(RasterPage(f"{name}.png", 1, img, 100.0), [template])
           for name, img in (("blank", blank), ("black", black), ("faint", faint.image))}
    assert out["blank"]["verdict"] == "unrecognised" and "blank page" in out["blank"]["findings"][0]["message"]
    assert out["black"]["verdict"] == "unrecognised" and "almost all black" in out["black"]["findings"][0]["message"]
    assert out["faint"]["verdict"] == "pass" and out["faint"]["template"] == "T-7"
    [note] = out["faint"]["findings"]
    assert note["message"].startswith("Faint print") and 60 < note["value"] < 110


def test_light_falling_off_across_the_page_is_neither_ink_nor_hides_it(reference):
    from layoutcheck.simulate import _light_falloff
    from layoutcheck.sources import page_content_problem, page_contrast

    rng = np.random.default_rng(4)
    light = _light_falloff((1169, 827), 0.4, np.random.default_rng(1))  # A4 at 100 dpi (ISO 216)
    noise = rng.normal(0, 6, light.shape)
    blank = np.clip(238 * light + noise, 0, 255).astype(np.uint8)
    c = page_contrast(blank)
    # The paper's noise is the noise planted, not the light's fall-off (numpy's own spread).
    assert c.noise == pytest.approx(float(np.std(noise)), rel=0.15)
    assert "blank page" in page_content_problem(blank)
    faint = simulate_scan(reference, dpi=100, fade=0.35, noise_sigma=6, light_gradient=0.4, seed=2)
    assert page_content_problem(faint.image) is None


# -- paper not flat -------------------------------------------------------------------------------
def _cubic_field(p: np.ndarray) -> np.ndarray:
    x, y = p[:, 0] / 600, p[:, 1] / 800
    return np.column_stack([1.5 * x - 2.0 * y * y + 1.2 * x ** 3, 2.0 * x * y - 1.0 * y + 0.8 * y ** 3])


def test_field_agrees_with_scipy_on_the_same_points():
    from scipy.interpolate import RBFInterpolator

    rng = np.random.default_rng(0)
    pts = rng.uniform([0, 0], [600, 800], (60, 2))
    field = fit_field(pts, _cubic_field(pts), np.ones((60, 2), bool))
    # A smoothing spline with an overwhelming smoothing term reduces to its cubic polynomial
    # part, the least-squares cubic through the points (scipy.interpolate.RBFInterpolator).
    ref = RBFInterpolator(pts, _cubic_field(pts), kernel="thin_plate_spline", smoothing=1e9, degree=3)
    grid = rng.uniform([0, 0], [600, 800], (200, 2))
    assert field.degree == 3
    assert np.abs(field.at(grid) - ref(grid)).max() < 1e-3
    assert np.abs(field.at(grid) - _cubic_field(grid)).max() < 1e-6


def test_a_moved_box_cannot_bend_the_field():
    rng = np.random.default_rng(4)
    pts = rng.uniform([0, 0], [600, 800], (60, 2))
    res = _cubic_field(pts)
    moved = res.copy()
    moved[7] += (8 * MM, 0.0)  # one box 8 mm to the right
    clean = fit_field(pts, res, np.ones((60, 2), bool))
    field = fit_field(pts, moved, np.ones((60, 2), bool))
    assert np.abs(field.at(pts) - clean.at(pts)).max() < 1e-6  # the moved box has no weight
    assert field.support == (59, 60)


def test_a_rule_measures_the_field_only_across_itself():
    rng = np.random.default_rng(5)
    pts = rng.uniform([0, 0], [600, 800], (40, 2))
    res = _cubic_field(pts)
    meas = np.ones((40, 2), bool)
    meas[:10, 0] = False  # ten horizontal rules: their x (along) is not a measurement
    res[:10, 0] += 30.0  # ... and is far off, as a rule run into a box side would be
    field = fit_field(pts, res, meas)
    assert np.abs(field.at(pts) - _cubic_field(pts)).max() < 1e-6


def test_moved_box_on_a_warped_page_is_still_named(tmp_path, template):
    moved = draw_form(tmp_path / "moved.pdf", move={"Call sign": (0.0, 8.0)})
    named = 0
    for seed in range(3):
        scan = simulate_scan(moved, dpi=150, warp_mm=1.5, rotation_deg=0.2, seed=seed)
        rec = check_page(RasterPage("warped.png", 1, scan.image, 150.0), [template])
        boxes = [o for o in rec["offending"] if o["caption"] == "Call sign"]
        assert rec["verdict"] == "mismatched", rec["findings"]
        assert [o["caption"] for o in rec["offending"]] == ["Call sign"]
        assert boxes[0]["status"] == "moved" and boxes[0]["offset_mm"][1] == pytest.approx(8.0, abs=0.6)
        assert rec["warp_mm"] is not None and rec["warp_mm"] < 2.5
        named += 1
    assert named == 3


def test_warped_intact_page_passes_with_its_bend_recorded(reference, template):
    scan = simulate_scan(reference, dpi=150, warp_mm=1.5, seed=11)
    rec = check_page(RasterPage("warped.png", 1, scan.image, 150.0), [template])
    assert rec["verdict"] == "pass" and rec["offending"] == [], rec["findings"]
    assert 0.1 < rec["warp_mm"] < 2.0


def test_a_warped_scan_that_states_its_dpi_stays_a_scan(reference, template):
    """Paper not flat can make the projective pose fit best, but a page that states its
    resolution is a camera capture only when its perspective is more than a bend could explain
    (here under 2 mm against the best affine pose): never `retake` for a 150 dpi scan."""
    models = []
    for seed in range(4):
        scan = simulate_scan(reference, dpi=150, warp_mm=1.5, rotation_deg=0.3, seed=20 + seed)
        rec = check_page(RasterPage("warped.png", 1, scan.image, 150.0), [template])
        assert rec["capture"] == "scan" and rec["effective_dpi"] is None
        assert rec["verdict"] == "pass" and rec["offending"] == [], rec["findings"]
        models.append(rec["pose"]["model"])
    assert "projective" in models  # the case this guards against was met


# -- rules judged as rules ------------------------------------------------------------------------
def _el(i, kind, frame):
    return Element(id=f"{kind}-{i:03d}", kind=kind, frame=tuple(float(v) for v in frame), angle=0.0, source="raster")


def _rule_form():
    """Four marks, two boxes; a rule running into the first box's side, a free rule."""
    els = [_el(k, "mark", (x, y, x + 14, y + 14)) for k, (x, y) in enumerate([(30, 30), (550, 30), (30, 800), (550, 800)])]
    els += [_el(1, "box", (300, 100, 500, 140)), _el(2, "box", (100, 400, 300, 450)), _el(3, "box", (320, 600, 520, 650))]
    els += [_el(1, "hline", (100, 119.5, 300, 120.5)),  # ends at the box's left side (x = 300)
            _el(2, "hline", (100, 299.5, 500, 300.5))]  # free at both ends
    return els


@pytest.mark.parametrize("change, status", [
    ({}, "ok"),
    ({"hline-001": (100, 119.5, 323, 120.5)}, "ok"),          # ran 23 pt on into the box: not judged
    ({"hline-001": (100, 126.0, 300, 127.0)}, "moved"),       # 6.5 pt (2.3 mm) down across itself
    ({"hline-002": (100, 299.5, 445, 300.5)}, "resized"),     # shortened by 14 %
    ({"hline-002": (100, 299.5, 560, 300.5)}, "resized"),     # lengthened by 15 % at a free end
    ({"hline-002": (96, 299.5, 530, 300.5)}, "ok"),           # 8.5 % longer: within 10 %
])
def test_rules_are_judged_across_and_by_span(change, status):
    tmpl = _rule_form()
    found = [e.replace(frame=change.get(e.id, e.frame)) for e in tmpl]
    m = solve(tmpl, found, position_tol=2 * MM, size_tol=0.10)
    got = {r.id: r.status for r in m.elements}
    changed = next(iter(change), "hline-001")
    assert got[changed] == status
    assert all(s == "ok" for k, s in got.items() if k != changed)


def test_free_rule_ends_from_the_template():
    tmpl = _rule_form()
    rules = np.array([7, 8])
    assert free_rule_ends(tmpl, rules, 4.25).tolist() == [[True, False], [True, True]]


def test_rule_offset_across_counts_at_its_worst_end():
    tmpl = _rule_form()
    # The free rule turned about its left end: 5 pt off at its right end, 400 pt along.
    found = [e for e in tmpl]
    found[8] = found[8].replace(angle=float(np.degrees(np.arctan2(5, 400))), frame=(100, 302.0, 500, 303.0))
    ta, ia = FrameArrays.of(tmpl), FrameArrays.of(found)
    across, ratio = judge_rules(ta, ia, np.array([8]), np.array([8]), Pose.identity(), np.zeros((1, 2)),
                                np.ones((1, 2), bool), 0.10)
    assert across[0, 0] == 0.0 and across[0, 1] == pytest.approx(5.0, abs=0.05)
    assert ratio[0] == pytest.approx(1.0, abs=0.01)


# -- text is not boxes ----------------------------------------------------------------------------
def test_bold_heading_yields_no_box_inside_its_letters(tmp_path):
    from reportlab.lib.pagesizes import A4
    from reportlab.pdfbase.pdfmetrics import stringWidth
    from reportlab.pdfgen import canvas

    path = tmp_path / "bold.pdf"
    c = canvas.Canvas(str(path), pagesize=A4)
    headings = []
    for k, size in enumerate((14, 20, 28, 36)):
        text = "BOARD OF KBH 80"
        x, base = 60.0, 120.0 + 70 * k
        c.setFont("Helvetica-Bold", size)
        c.drawString(x, A4[1] - base, text)
        # The heading's box from reportlab's own font metrics (cap height of Helvetica is
        # 0.718 em, from the font's AFM file): top-left origin, y down.
        headings.append((x, base - 0.75 * size, x + stringWidth(text, "Helvetica-Bold", size), base + 0.25 * size))
    c.setLineWidth(0.8)
    c.rect(60, A4[1] - 560, 200, 40)
    c.rect(300, A4[1] - 535, 12, 12)
    c.save()
    for dpi, blur, jpeg in ((150, 0.0, None), (200, 1.0, 60), (300, 0.8, 85)):
        scan = simulate_scan(path, dpi=dpi, blur_sigma_px=blur, jpeg_quality=jpeg, seed=1)
        found = extract_raster(RasterPage("bold.png", 1, scan.image, float(dpi))).elements
        boxes = [e for e in found if e.kind in ("box", "checkbox")]
        inside = [e for e in boxes for h in headings
                  if e.frame[0] >= h[0] - 3 and e.frame[2] <= h[2] + 3 and e.frame[1] >= h[1] - 3 and e.frame[3] <= h[3] + 3]
        assert inside == [], (dpi, [(e.kind, e.frame) for e in inside])
        # The real box and checkbox are still found.
        assert sorted(e.kind for e in boxes) == ["box", "checkbox"], (dpi, boxes)


def test_letters_in_a_line_of_text_are_not_boxes_even_when_drawn_light(tmp_path):
    """The test of the text line alone (the stroke-width test turned off): counters of a bold
    heading are dropped, every real box and checkbox is kept, beside text or in a row."""
    from reportlab.lib.pagesizes import A4
    from reportlab.pdfbase.pdfmetrics import stringWidth
    from reportlab.pdfgen import canvas

    from layoutcheck.extract.raster import RasterSettings

    path = tmp_path / "headings.pdf"
    H = A4[1]
    c = canvas.Canvas(str(path), pagesize=A4)
    headings = []
    for k, (size, text) in enumerate([(24, "BOARD"), (30, "ABDOPQR 8 0"), (36, "BOARD 808"), (36, "ABDOPQR 8 0")]):
        x, base = 60.0, 110.0 + 80 * k
        c.setFont("Helvetica-Bold", size)
        c.drawString(x, H - base, text)
        # The heading's box from reportlab's own font metrics, top-left origin, y down.
        headings.append((x, base - 0.75 * size, x + stringWidth(text, "Helvetica-Bold", size), base + 0.25 * size))
    c.setLineWidth(0.8)
    real = [(60, 520, 260, 560), (300, 523, 312, 535), (60, 609, 71, 620), (400, 668, 412, 680)]
    real += [(300 + 18 * i, 609, 311 + 18 * i, 620) for i in range(4)]  # a row: 7 pt apart, 11 pt tall
    for x0, top, x1, bottom in real:
        c.rect(x0, H - bottom, x1 - x0, bottom - top)
    c.setFont("Helvetica", 10)
    c.drawString(316, H - 533, "Dangerous goods on board")
    c.setFont("Helvetica-Bold", 12)  # capitals 8.6 pt tall beside an 11 pt checkbox
    c.drawString(75, H - 618, "BOARD DB 80")
    c.setLineWidth(1.8)  # a tick across the last checkbox, running past its side
    c.line(401, H - 674, 405, H - 679)
    c.line(405, H - 679, 414, H - 666)
    c.setFont("Helvetica", 8)
    c.drawString(416, H - 677, "Livestock")
    c.save()
    lines_only = RasterSettings(min_box_inside=0.0, min_box_mm=0.0)
    neither = RasterSettings(min_box_inside=0.0, min_box_mm=0.0, letter_off_outline=2.0, letter_stroke=100.0)

    def boxes(page, st):
        return [e for e in extract_raster(page, st).elements if e.kind in ("box", "checkbox")]

    def in_heading(e):
        return any(e.frame[0] >= h[0] - 3 and e.frame[2] <= h[2] + 3 and e.frame[1] >= h[1] - 3
                   and e.frame[3] <= h[3] + 3 for h in headings)

    for dpi, blur, jpeg in ((150, 0.0, None), (200, 1.0, 60), (300, 0.8, 85)):
        scan = simulate_scan(path, dpi=dpi, blur_sigma_px=blur, jpeg_quality=jpeg, seed=1)
        page = RasterPage("headings.png", 1, scan.image, float(dpi))
        # Without either test, letters' counters are taken for boxes: the test below can fail.
        assert any(in_heading(e) for e in boxes(page, neither)), dpi
        found = boxes(page, lines_only)
        assert [e for e in found if in_heading(e)] == [], dpi
        assert len(found) == len(real), (dpi, [e.frame for e in found])
        for f in real:
            assert any(np.allclose(e.frame, f, atol=1.5) for e in found), (dpi, f)


def test_crossed_checkboxes_in_rows_and_columns_are_kept(tmp_path):
    """Checkboxes of 4 mm drawn at 0.8 pt, crossed with a pen whose strokes run past their
    corners, two rows of three beside captions (9 mm apart, so each stands a little over its own
    height from the one below): every one is a checkbox, not a letter among letters."""
    from reportlab.lib.pagesizes import A4
    from reportlab.pdfgen import canvas

    mm = 72.0 / 25.4  # points per mm (1 pt = 1/72 in, ISO 32000-1; 1 in = 25.4 mm)
    path = tmp_path / "crossed.pdf"
    H = A4[1]
    c = canvas.Canvas(str(path), pagesize=A4)
    cells = [(22 + 55 * i, 113 + 9 * r) for r in range(2) for i in range(3)]
    for x, y in cells:
        c.setLineWidth(0.8)
        c.rect(x * mm, H - (y + 4) * mm, 4 * mm, 4 * mm)
        c.setFont("Helvetica", 10)
        c.drawString((x + 6) * mm, H - (y + 3.3) * mm, "North Quay (escorted)")
        c.setLineWidth(1.6)
        c.line((x - 0.5) * mm, H - (y - 0.5) * mm, (x + 4.5) * mm, H - (y + 4.5) * mm)
        c.line((x - 0.5) * mm, H - (y + 4.5) * mm, (x + 4.5) * mm, H - (y - 0.5) * mm)
    c.save()
    for dpi in (150, 200, 300):
        scan = simulate_scan(path, dpi=dpi, blur_sigma_px=0.6, seed=2)
        found = [e for e in extract_raster(RasterPage("crossed.png", 1, scan.image, float(dpi))).elements
                 if e.kind in ("box", "checkbox")]
        got = sorted((round(e.frame[0] / mm), round(e.frame[1] / mm)) for e in found)
        assert got == sorted(cells), dpi


# -- cut-off pages --------------------------------------------------------------------------------
def test_verdict_incomplete_ranks_just_below_mismatched():
    assert VERDICTS.index("incomplete") == VERDICTS.index("mismatched") + 1
    assert SEVERITY["incomplete"] < SEVERITY["shifted"]


@pytest.mark.parametrize("edge, share", [("bottom", 0.12), ("top", 0.08), ("left", 0.15)])
def test_cut_off_page_is_incomplete_and_names_what_is_missing(reference, template, edge, share):
    scan = simulate_scan(reference, dpi=100, cut=(edge, share), seed=5)
    rec = check_page(RasterPage("cut.png", 1, scan.image, 100.0), [template])
    assert rec["verdict"] == "incomplete", rec["findings"]
    assert not any(f["verdict"] == "shifted" for f in rec["findings"])
    [cut] = [f for f in rec["findings"] if f["verdict"] == "incomplete"]
    assert f"beyond the {edge} edge" in cut["message"] and cut["element"] == edge
    # What the truth pose puts more than 3 mm outside the image is named (zones by name).
    tp = template.pages[0]
    h, w = scan.image.shape
    size = (w * 72 / 100, h * 72 / 100)
    for z in tp.zones:
        x0, top, x1, bottom = z.frame
        c = scan.pose.apply(np.array([[x0, top], [x1, bottom]], float))
        out = max(-c[:, 0].min(), -c[:, 1].min(), c[:, 0].max() - size[0], c[:, 1].max() - size[1]) / MM
        if out > 3:
            assert f"'{z.name}'" in cut["message"], (z.name, cut["message"])
        elif out < 1:
            assert f"'{z.name}'" not in cut["message"], (z.name, cut["message"])


def test_form_cut_by_the_edge_is_kept_but_an_edge_shadow_is_not():
    from layoutcheck.extract.raster.binarise import _off_border

    mask = np.zeros((400, 300), bool)
    mask[:, :6] = True  # a dark band along the left edge (a scanner's shadow)
    mask[100:300:20, 50:300] = True  # a table's rules, cut by the right edge
    mask[100:281, 50:300:50] = True  # ... and its columns
    out = _off_border(mask, 2)
    assert not out[:, :6].any()  # the band is dropped
    assert np.array_equal(out[:, 40:], mask[:, 40:])  # the table is kept whole


# -- kept and to stay working ---------------------------------------------------------------------
@pytest.mark.parametrize("name, kw", [
    ("dropout red", {"colour": ((235, 140, 130), (255, 255, 255))}),
    ("dropout blue", {"colour": ((120, 150, 235), (255, 255, 255))}),
    ("dropout orange", {"colour": ((245, 170, 90), (255, 255, 255))}),
    ("edge shadow", {"edge_shadow": True}),
    ("light gradient", {"light_gradient": 0.4}),
    ("punch holes", {"punch_holes": True}),
    ("staple", {"staple": True}),
    ("tinted boxes", {"tint": True, "blur_sigma_px": 0.6}),
    ("colour on yellowish paper", {"colour": ((25, 25, 40), (250, 240, 200)), "jpeg_quality": 85}),
])
def test_kept_nuisances_still_pass(tmp_path, reference, template, name, kw):
    scan = simulate_scan(reference, dpi=150, rotation_deg=0.2, noise_sigma=3, seed=7, **kw)
    path = save_scan(scan, tmp_path / ("scan.jpg" if kw.get("jpeg_quality") else "scan.png"))
    [rec] = list(check_file(path, [template]))
    assert rec["template"] == "T-7" and rec["offending"] == [], (name, rec["findings"])
    assert rec["verdict"] == "pass", (name, rec["findings"])


def test_simulated_staple_and_light_gradient(reference):
    from layoutcheck.simulate import _light_falloff

    plain = simulate_scan(reference, dpi=150, seed=7).image.astype(int)
    stapled = simulate_scan(reference, dpi=150, seed=7, staple=True).image.astype(int)
    rows, cols = np.nonzero(stapled < plain - 40)
    px_mm = 150 / 25.4  # 1 in = 25.4 mm
    # In a top corner's margin, 12.7 mm long at 30-60 degrees: 6.4 to 11 mm along each axis.
    assert rows.max() < 15 * px_mm and (cols.max() < 15 * px_mm or cols.min() > plain.shape[1] - 15 * px_mm)
    for extent in (np.ptp(rows), np.ptp(cols)):
        assert 6.0 * px_mm < extent < 12.0 * px_mm
    assert stapled[rows, cols].min() < 60  # dark metal
    # The light falls off linearly by the share asked, corner to far corner (checked with numpy).
    f = _light_falloff((400, 300), 0.4, np.random.default_rng(3))
    assert f.max() == pytest.approx(1.0, abs=0.005) and f.min() == pytest.approx(0.6, abs=0.005)
    rows = np.polyfit(np.arange(400), f[:, 150], 1)
    assert np.allclose(np.polyval(rows, np.arange(400)), f[:, 150], atol=1e-4)  # a straight line


def test_max_cut_flag_sets_how_much_of_the_form_may_be_off_the_image(tmp_path, reference, template):
    """The bottom 12 % cut off: incomplete by default (2 mm). With ``--max-cut`` above what is
    missing, the page is judged on what is there: its content then sits off the centre of the
    short image, by half of what was cut."""
    import json

    from click.testing import CliRunner

    from layoutcheck.cli import main
    from layoutcheck.template import save_template

    path = tmp_path / "cut.png"
    save_scan(simulate_scan(reference, dpi=100, cut=("bottom", 0.12), seed=5), path)
    tpath = tmp_path / "t.json"
    save_template(template, tpath)
    recs = {}
    for flag in ([], ["--max-cut", "60"]):
        out = tmp_path / f"r{len(flag)}.jsonl"
        res = CliRunner().invoke(main, ["verify", str(tpath), str(path), "-q", "--json", str(out), *flag])
        assert res.exit_code == 1, res.output
        (recs[len(flag)],) = [json.loads(line) for line in out.read_text().splitlines()]
    assert recs[0]["verdict"] == "incomplete" and recs[2]["verdict"] == "shifted"
    # 12 % of an A4 page's 297 mm height (ISO 216) is 35.6 mm, well within 60 mm; half of it,
    # 17.8 mm, is how far the content's centre sits below the short image's.
    assert recs[2]["pose"]["shift_mm"][1] == pytest.approx(0.12 * 297 / 2, abs=1.0)
    assert not any(f["verdict"] == "incomplete" for f in recs[2]["findings"])

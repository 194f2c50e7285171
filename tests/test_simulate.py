"""The scan simulator: sizes, truth pose, degradations and files written.

Outside references are named beside each check.
"""

from __future__ import annotations

import cv2
import numpy as np
import pytest
from PIL import Image

from conftest_raster import make_form_pdf
from layoutcheck.elements import MM_PER_POINT
from layoutcheck.simulate import render_page, save_scan, simulate_scan
from layoutcheck.sources import RasterPage, read_pages


@pytest.fixture(scope="module")
def form(tmp_path_factory):
    path = tmp_path_factory.mktemp("sim") / "kbh210.pdf"
    truth = make_form_pdf(path)
    return str(path), truth


def test_a4_at_300_dpi_is_2480_by_3508(form):
    path, _ = form
    scan = simulate_scan(path, dpi=300, oversample=1)
    # ISO 216: A4 is 210 x 297 mm; 1 in = 25.4 mm (exact): 210 / 25.4 * 300 = 2480.3 and
    # 297 / 25.4 * 300 = 3507.9 pixels.
    assert scan.image.shape == (3508, 2480)
    assert scan.image.dtype == np.uint8
    assert scan.dpi == 300
    w, h = scan.size_pt
    # The 1/72 in PDF point (ISO 32000-1): 2480 px at 300 dpi are 595.2 points.
    assert abs(w - 2480 * 72 / 300) < 1e-9 and abs(h - 3508 * 72 / 300) < 1e-9


def test_truth_pose_puts_marks_where_opencv_finds_them(form):
    path, truth = form
    scan = simulate_scan(path, dpi=200, rotation_deg=2.5, scale=(1.01, 0.99), shift_mm=(3.0, -2.0))
    # Centroid of each solid mark by OpenCV's image moments on the scan, pixel centres at +0.5.
    k = 72.0 / scan.dpi
    for x0, top, x1, bottom in truth.marks:
        c = scan.pose.apply(np.array([[(x0 + x1) / 2, (top + bottom) / 2]]))[0] / k  # px
        r = 30
        cx, cy = int(c[0]), int(c[1])
        crop = (255 - scan.image[cy - r:cy + r, cx - r:cx + r]).astype(np.float32)
        m = cv2.moments(crop)
        found = np.array([m["m10"] / m["m00"] + cx - r + 0.5, m["m01"] / m["m00"] + cy - r + 0.5])
        assert np.hypot(*(found - c)) * k * MM_PER_POINT <= 0.02  # mm
    assert abs(scan.pose.rotation_deg - 2.5) < 1e-9
    assert abs(scan.pose.scale_x - 1.01) < 1e-9 and abs(scan.pose.scale_y - 0.99) < 1e-9


def test_fit_to_letter_paper_centres_the_page(form):
    path, _ = form
    # ANSI Letter is 8.5 x 11 in = 612 x 792 points (1/72 in); A4 fitted to it scales by
    # min(612 / 595.28, 792 / 841.89) = 0.9407 (height limits).
    scan = simulate_scan(path, dpi=100, paper_size_pt=(612.0, 792.0), oversample=1)
    assert scan.image.shape == (1100, 850)
    # (pdfium reports page sizes in single precision, hence the tolerances)
    assert abs(scan.pose.scale - 792.0 / 841.8897637795277) < 1e-6
    centre = scan.pose.apply(np.array([[595.2755905511812 / 2, 841.8897637795277 / 2]]))[0]
    assert np.allclose(centre, [306.0, 396.0], atol=1e-4)
    assert np.allclose(scan.pose.shift_mm(scan.page_size_pt, (612.0, 792.0)), 0.0, atol=1e-4)


def test_degradations(form):
    path, _ = form
    clean = simulate_scan(path, dpi=100, oversample=1)
    same = simulate_scan(path, dpi=100, oversample=1)
    assert np.array_equal(clean.image, same.image)
    bitonal = simulate_scan(path, dpi=100, bitonal_threshold=128, noise_sigma=10, seed=1)
    assert set(np.unique(bitonal.image).tolist()) <= {0, 255}
    a = simulate_scan(path, dpi=100, noise_sigma=10, seed=1)
    b = simulate_scan(path, dpi=100, noise_sigma=10, seed=2)
    assert not np.array_equal(a.image, b.image)
    # Noise of sigma 10 grey levels on white paper (clipped at 255): the standard deviation of a
    # blank stretch is about 10 * 0.58 (a normal halved by the clip at 255; numpy check below).
    blank = a.image[5:30, 5:60].astype(float)
    half_normal = np.clip(255 + np.random.default_rng(0).normal(0, 10, 100_000), 0, 255).std()
    assert abs(blank.std() - half_normal) < 1.0
    filled = simulate_scan(path, dpi=100, fill=True, stamp=True, punch_holes=True, edge_shadow=True, seed=1)
    assert (filled.image < 128).sum() > 1.3 * (clean.image < 128).sum()
    # The edge shadow darkens the left and top border.
    assert filled.image[:, :3].mean() < 120 and clean.image[:, :3].mean() > 250


def test_clean_scan_matches_a_direct_rendering(form):
    path, _ = form
    # At the rendering's own resolution and no turn, the simulated scan is the pypdfium2
    # rendering reduced by area averaging (cv2.resize INTER_AREA) of a 2x rendering.
    scan = simulate_scan(path, dpi=100, oversample=2)
    big, _ = render_page(path, 1, 200)
    h, w = scan.image.shape
    ref = cv2.resize(big[: 2 * h, : 2 * w], (w, h), interpolation=cv2.INTER_AREA)
    assert scan.image.shape == ref.shape
    assert np.abs(scan.image.astype(int) - ref.astype(int)).max() <= 1


def test_group4_tiff_round_trip(form, tmp_path):
    path, _ = form
    scan = simulate_scan(path, dpi=200, rotation_deg=1.0, bitonal_threshold=140)
    out = save_scan(scan, tmp_path / "scan.tif")
    with Image.open(out) as im:  # Pillow reads the TIFF tags back
        assert im.info["compression"] == "group4"
        assert im.mode == "1"
    pages = list(read_pages(out))
    assert len(pages) == 1 and isinstance(pages[0], RasterPage)
    assert pages[0].dpi == 200
    assert pages[0].bitonal
    assert np.array_equal(pages[0].image, scan.image)


def test_grey_tiff_png_jpeg_round_trip(form, tmp_path):
    path, _ = form
    scan = simulate_scan(path, dpi=150, noise_sigma=3)
    for name in ("scan.tif", "scan.png"):
        out = save_scan(scan, tmp_path / name)
        page = next(read_pages(out))
        assert page.dpi == 150 and np.array_equal(page.image, scan.image)
    with Image.open(tmp_path / "scan.tif") as im:
        assert im.info["compression"] == "tiff_lzw"
    out = save_scan(scan, tmp_path / "scan.jpg", jpeg_quality=90)
    page = next(read_pages(out))
    assert page.dpi == 150
    assert np.abs(page.image.astype(int) - scan.image.astype(int)).mean() < 2.0


def test_multipage_tiff_and_image_pdf(form, tmp_path):
    path, _ = form
    a = simulate_scan(path, dpi=150, rotation_deg=0.5)
    b = simulate_scan(path, dpi=150, rotation_deg=-1.5, noise_sigma=5, seed=3)
    pages = list(read_pages(save_scan([a, b], tmp_path / "two.tif")))
    assert [p.page for p in pages] == [1, 2]
    assert np.array_equal(pages[0].image, a.image) and np.array_equal(pages[1].image, b.image)
    # A scanner-style PDF: one image per page, no drawn rules; read back as raster pages.
    # (Pixel noise does not survive JPEG, so the PDF gets a second page without it.)
    c = simulate_scan(path, dpi=150, rotation_deg=-1.5, seed=3)
    pages = list(read_pages(save_scan([a, c], tmp_path / "two.pdf")))
    assert len(pages) == 2 and all(isinstance(p, RasterPage) for p in pages)
    for page, scan in zip(pages, (a, c)):
        assert page.dpi == 150
        # The PDF page is 1240 x 1754 px / 150 dpi in points; rendering it back may add one
        # pixel column or row (pdfium rounds the page size up), so compare the common part.
        h = min(page.image.shape[0], scan.image.shape[0])
        w = min(page.image.shape[1], scan.image.shape[1])
        assert abs(page.image.shape[0] - scan.image.shape[0]) <= 1 and abs(page.image.shape[1] - scan.image.shape[1]) <= 1
        # Grey pages are stored as JPEG (quality 90): a mean error of a grey level or two.
        assert np.abs(page.image[:h, :w].astype(int) - scan.image[:h, :w].astype(int)).mean() < 3.0


def test_bad_format_names_the_file(form, tmp_path):
    path, _ = form
    scan = simulate_scan(path, dpi=72, oversample=1)
    with pytest.raises(ValueError, match="scan.bmp"):
        save_scan(scan, tmp_path / "scan.bmp")
    with pytest.raises(ValueError, match="holds one page"):
        save_scan([scan, scan], tmp_path / "two.png")

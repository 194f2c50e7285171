"""Reading scans: resolution, orientation, frames."""

from __future__ import annotations

import numpy as np
import pytest
from PIL import Image

from layoutcheck.sources import RasterPage, ReadLimits, read_pages, snap_dpi


def page_image(w=400, h=600):
    img = np.full((h, w), 255, np.uint8)
    img[10:30, 10:60] = 0  # a dark block near the top-left corner
    return img


@pytest.mark.parametrize("stated, snapped", [
    (300.0, 300.0),  # 36 CFR 1236.50 asks at least 300 ppi for textual records
    (299.7, 300.0),  # a resolution stored as a rounded fraction
    (200.4, 200.0),  # 200 dpi: common practice for office scans
    (72.0, 72.0),
    (50.0, None),    # below 72: implausible for a page, treated as unknown
    (None, None),
    (333.0, 333.0),  # not a usual value: kept as it is
])
def test_resolution_snaps_to_usual_values(stated, snapped):
    assert snap_dpi(stated) == snapped


def test_image_without_resolution_is_read_with_a_working_one(tmp_path):
    path = tmp_path / "nodpi.png"
    img = page_image()
    Image.fromarray(img).save(path)  # PNG without a pHYs chunk
    (photo,) = list(read_pages(path))
    # No stated resolution and no sheet found yet: a camera capture, its long side taken as
    # 11.35 in (between A4's 11.69 in, ISO 216, and Letter's 11 in, ANSI).
    assert isinstance(photo, RasterPage) and not photo.dpi_stated
    assert photo.dpi == pytest.approx(max(img.shape) / 11.35)
    (page,) = list(read_pages(path, ReadLimits(dpi=200)))
    assert isinstance(page, RasterPage) and page.dpi == 200 and page.dpi_stated
    # Size in points from pixels and dpi: 400 px at 200 dpi are 2 in = 144 pt (1 pt = 1/72 in).
    assert page.width == pytest.approx(144.0)


def test_exif_orientation_is_applied(tmp_path):
    path = tmp_path / "turned.jpg"
    exif = Image.Exif()
    exif[0x0112] = 6  # EXIF Orientation 6: the stored image must be turned 90 degrees clockwise to view
    Image.fromarray(page_image()).save(path, dpi=(200, 200), exif=exif, quality=95)
    (page,) = list(read_pages(path))
    assert page.image.shape == (400, 600)  # width and height swap
    # The dark block, top-left when stored, is top-right once turned clockwise (Pillow's
    # ImageOps.exif_transpose is the reference for the rule).
    assert page.image[10:60, -30:-10].mean() < 60 and page.image[10:60, 10:30].mean() > 200


def test_multipage_tiff_frames_are_each_their_own(tmp_path):
    a, b = page_image(), page_image()[::-1].copy()
    path = tmp_path / "two.tif"
    Image.fromarray(a).save(path, dpi=(300, 300), save_all=True, append_images=[Image.fromarray(b)], compression="tiff_lzw")
    pages = list(read_pages(path))
    assert [p.page for p in pages] == [1, 2]
    assert np.array_equal(pages[0].image, a) and np.array_equal(pages[1].image, b)
    assert all(p.dpi == 300 for p in pages)


@pytest.mark.parametrize("short_mm, long_mm, want_in", [
    (210.0, 297.0, 297.0 / 25.4),  # A4, ISO 216
    (148.0, 210.0, 297.0 / 25.4),  # A5, ISO 216: the A ratio; forms are taken for A4 (common practice)
    (8.5 * 25.4, 11.0 * 25.4, 11.0),  # Letter, ANSI
    (8.5 * 25.4, 14.0 * 25.4, 14.0),  # Legal, ANSI
    (200.0, 200.0, 11.35),  # a square sheet names no paper size
])
def test_a_photographed_sheet_is_told_by_its_ratio(short_mm, long_mm, want_in):
    from layoutcheck.sources import sheet_long_side_in, working_dpi

    k = 7.5  # pixels per mm of the photo
    quad = np.array([[100, 80], [100 + short_mm * k, 80], [100 + short_mm * k, 80 + long_mm * k], [100, 80 + long_mm * k]])
    assert sheet_long_side_in(quad) == pytest.approx(want_in)
    # Seen in perspective (the top edge 3 % shorter): still the same paper size.
    keystone = quad + np.array([[0.015 * short_mm * k, 0], [-0.015 * short_mm * k, 0], [0, 0], [0, 0]])
    assert sheet_long_side_in(keystone) == pytest.approx(want_in)
    if want_in != 11.35:
        # The working resolution makes the sheet its paper size: A4's 297 mm are 11.69 in.
        assert working_dpi((4000, 3000), quad) == pytest.approx(long_mm * k / want_in)

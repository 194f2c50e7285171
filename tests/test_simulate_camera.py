"""The camera simulator: its truth, its harshness, and the file it writes.

Outside references: OpenCV (``perspectiveTransform`` of the truth matrix), Pillow (reading the
JPEG and its EXIF orientation, tag 0x0112, EXIF 2.3), ISO 216 (A4 210 x 297 mm).
"""

from __future__ import annotations

import io

import cv2
import numpy as np
import pytest
from PIL import Image, ImageOps

from conftest import A4
from layoutcheck.simulate_camera import CameraSettings, simulate_photo


@pytest.fixture(scope="module")
def photo(reference_pdf):
    return simulate_photo(reference_pdf, CameraSettings(size=(1600, 1200), seed=5, bend_mm=0.0, fill=False,
                                                        exif_turned=True, shadow=0.0, perspective=0.05))


def test_truth_homography_places_the_page_within_the_planted_perspective(photo):
    w, h = photo.page_size_pt
    assert (w, h) == pytest.approx(A4, abs=0.01)  # ISO 216 A4 in points
    corners = np.array([[[0, 0]], [[w, 0]], [[w, h]], [[0, h]]], float)
    quad = cv2.perspectiveTransform(corners, photo.homography.matrix).reshape(-1, 2)
    assert np.allclose(quad, photo.homography.apply(corners.reshape(-1, 2)))
    # Opposite sides differ in length (a tilt), by at most twice the largest corner displacement.
    top, bottom = np.hypot(*(quad[1] - quad[0])), np.hypot(*(quad[2] - quad[3]))
    left, right = np.hypot(*(quad[3] - quad[0])), np.hypot(*(quad[2] - quad[1]))
    width_px = (top + bottom) / 2
    assert max(abs(top - bottom), abs(left - right)) > 0.005 * width_px
    assert max(abs(top - bottom), abs(left - right)) <= 2 * 0.05 * width_px + 1


def test_light_falls_off_by_a_third_and_the_desk_is_darker_than_the_paper(photo):
    grey = cv2.cvtColor(photo.image, cv2.COLOR_RGB2GRAY).astype(float)
    w, h = photo.page_size_pt
    # Paper near the page's centre against paper near the photo's corner nearest a page corner.
    centre = photo.homography.apply([[w / 2, h * 0.55]])[0].astype(int)
    paper_centre = np.percentile(grey[centre[1] - 20:centre[1] + 20, centre[0] - 20:centre[0] + 20], 90)
    corner = photo.homography.apply([[15.0, 15.0]])[0].astype(int)
    paper_corner = np.percentile(grey[corner[1] - 5:corner[1] + 5, corner[0] - 5:corner[0] + 5], 90)
    assert paper_corner < 0.9 * paper_centre  # falling off towards the corners
    desk = np.percentile(grey[:, :30], 99)  # the photo's left strip is desk
    assert desk <= 0.62 * 255 + 8  # noise on top of the capped desk


def test_jpeg_states_no_usable_dpi_and_is_stored_turned(photo):
    with Image.open(io.BytesIO(photo.jpeg)) as im:
        assert im.format == "JPEG" and im.mode == "RGB"
        assert im.getexif().get(0x0112) == 6  # EXIF 2.3: turn 90 degrees clockwise to view
        assert im.size == (photo.image.shape[0], photo.image.shape[1])  # stored landscape
        upright = np.asarray(ImageOps.exif_transpose(im))
        assert upright.shape == photo.image.shape
        # Pillow's JFIF default, 72 dpi, or none at all: either way no usable resolution for a page.
        assert im.info.get("dpi", (72, 72))[0] == 72
    diff = np.abs(upright.astype(int) - photo.image.astype(int))
    assert np.median(diff) < 6  # the same picture, after JPEG


def test_tampered_box_is_reported_with_its_frame(reference_pdf):
    moved = simulate_photo(reference_pdf, CameraSettings(size=(1600, 1200), seed=6, tamper="moved"))
    assert moved.tamper.status == "moved"
    assert 8.0 <= np.hypot(*moved.tamper.offset_mm) <= 15.0
    shrunk = simulate_photo(reference_pdf, CameraSettings(size=(1600, 1200), seed=6, tamper="resized"))
    assert shrunk.tamper.status == "resized" and shrunk.tamper.size_ratio == 0.7
    with pytest.raises(ValueError, match="unknown tamper 'bent'"):
        simulate_photo(reference_pdf, CameraSettings(size=(1600, 1200), tamper="bent"))

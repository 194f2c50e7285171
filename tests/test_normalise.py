"""Normalised page images: resampling into the template's frame, files, and re-verification."""

from __future__ import annotations

import json
from pathlib import Path

import cv2
import numpy as np
import pytest
from PIL import Image

from layoutcheck.check import CheckSettings, check_file, check_page, learn
from layoutcheck.normalise import (normalise_image, normalise_page, output_size, output_to_input_px, resample,
                                   write_image)
from layoutcheck.pose import Pose
from layoutcheck.sources import RasterPage, read_pages, render_pdf_page, ReadLimits

ROOT = Path(__file__).resolve().parents[1]
REF101 = ROOT / "sample_forms" / "references" / "KBH-101_vessel_arrival.pdf"
INPUTS = ROOT / "sample_forms" / "inputs"
A4_PT = (210 * 72 / 25.4, 297 * 72 / 25.4)  # ISO 216: 210 x 297 mm; 72 pt per inch (ISO 32000-1)


@pytest.fixture(scope="module")
def t101():
    return learn([str(REF101)])


def _page_image() -> np.ndarray:
    from skimage import data

    return data.page()  # a scanned page of text, 191 x 384, uint8 (scikit-image sample data)


def _skimage_reference(image: np.ndarray, m: np.ndarray, size: tuple[int, int], order: int) -> np.ndarray:
    """The same continuous map sampled by scikit-image.

    scikit-image puts pixel centres at integer coordinates; the map is between continuous
    coordinates whose pixel centres are at +0.5, so centre c samples ``m(c + 0.5) - 0.5``.
    """
    from skimage.transform import warp

    def inverse_map(cr: np.ndarray) -> np.ndarray:
        return (cr + 0.5) @ m[:2, :2].T + m[:2, 2] - 0.5

    out = warp(image.astype(float) / 255.0, inverse_map, output_shape=(size[1], size[0]), order=order,
               mode="constant", cval=1.0)
    return out * 255.0


def _map() -> np.ndarray:
    # Output px -> input px: turned 4 degrees, 0.45 input px per output px (a finer output), shifted.
    return Pose.from_params(rotation_deg=4.0, scale=0.45, shift=(-7.3, 5.6), center=(0.0, 0.0)).matrix


def test_resample_matches_scikit_image_linear():
    img = _page_image()
    m = _map()
    size = (800, 400)
    ours = resample(img, m, size, interpolation="linear").astype(float)
    ref = _skimage_reference(img, m, size, order=1)  # scikit-image, bilinear
    mad = np.abs(ours - ref).mean()
    assert mad < 0.5, mad
    # The check can fail: the same map without the half-pixel convention is far off.
    naive = cv2.warpAffine(img, m[:2], size, flags=cv2.INTER_LINEAR | cv2.WARP_INVERSE_MAP,
                           borderMode=cv2.BORDER_CONSTANT, borderValue=255).astype(float)
    assert np.abs(naive - ref).mean() > 6 * mad + 1.0


def test_resample_matches_scikit_image_cubic():
    img = _page_image()
    m = _map()
    size = (800, 400)
    ours = resample(img, m, size).astype(float)
    ref = _skimage_reference(img, m, size, order=3)  # scikit-image, cubic spline (another kernel)
    inner = (slice(5, -5), slice(5, -5))
    assert np.abs(ours - ref)[inner].mean() < 3.0


def test_coarser_output_is_area_averaged_like_opencv_resize():
    img = _page_image()[:190, :384]
    out = normalise_image(img, 300.0, Pose.identity(), (384 * 72 / 300, 190 * 72 / 300), output_dpi=150.0)
    # OpenCV's area resize to half size (outside reference).
    ref = cv2.resize(img, (192, 95), interpolation=cv2.INTER_AREA).astype(float)
    assert out.image.shape == (95, 192) and out.dpi == 150.0
    assert np.abs(out.image.astype(float) - ref).mean() < 0.5


def test_identity_map_keeps_the_image():
    img = _page_image()
    out = resample(img, np.eye(3), (img.shape[1], img.shape[0]))
    assert np.array_equal(out, img)


def test_output_size_and_pixel_map():
    # ISO 216 A4 at 300 dpi is 2480 x 3508 pixels (common practice).
    assert output_size(A4_PT, 300) == (2480, 3508)
    m = output_to_input_px(Pose.identity(), 300.0, 150.0)
    # One output pixel at 150 dpi is two input pixels at 300 dpi; corners map to corners.
    assert np.allclose(m, np.diag([2.0, 2.0, 1.0]))


def test_bitonal_stays_bitonal_and_files_state_dpi(tmp_path):
    img = np.where(_page_image() > 128, 255, 0).astype(np.uint8)
    pose = Pose.from_params(rotation_deg=-1.5, shift=(2.0, 1.0))
    norm = normalise_image(img, 150.0, pose, (img.shape[1] * 72 / 150, img.shape[0] * 72 / 150), bitonal=True)
    assert set(np.unique(norm.image).tolist()) == {0, 255}
    png = write_image(norm, tmp_path / "b.png", "png")
    tif = write_image(norm, tmp_path / "b.tiff", "tiff")
    with Image.open(png) as im:
        assert im.mode == "1" and round(im.info["dpi"][0]) == 150
    with Image.open(tif) as im:
        assert im.mode == "1" and round(im.info["dpi"][0]) == 150
        assert im.info["compression"] == "group4"
    grey = normalise_image(_page_image(), 150.0, pose, (384 * 72 / 150, 191 * 72 / 150))
    assert len(np.unique(grey.image)) > 100
    with Image.open(write_image(grey, tmp_path / "g.tiff", "tiff")) as im:
        assert im.mode == "L" and im.info["compression"] == "tiff_lzw"
    with pytest.raises(ValueError, match="unknown image format 'bmp'"):
        write_image(grey, tmp_path / "g.bmp", "bmp")


def path_key(path) -> str:
    """First 8 hex digits of the SHA-256 (hashlib) of a file's absolute path: the name key."""
    import hashlib
    import os

    return hashlib.sha256(os.path.abspath(str(path)).encode()).hexdigest()[:8]


SCANS = [
    dict(dpi=300, rotation_deg=2.5, scale=(0.97, 0.97), shift_mm=(4.0, -3.0), noise_sigma=4.0, blur_sigma_px=0.6),
    dict(dpi=200, rotation_deg=-1.2, shift_mm=(-3.0, 2.0), bitonal_threshold=150, noise_sigma=3.0),
]


@pytest.mark.parametrize("scan_settings", SCANS, ids=["grey300", "bitonal200"])
def test_reverified_normalised_scan_has_no_pose_left(t101, scan_settings, tmp_path):
    from layoutcheck.simulate import save_scan, simulate_scan

    scan = simulate_scan(REF101, seed=1, **scan_settings)
    if scan.bitonal:  # through a file, as a scanner writes it
        page = next(read_pages(save_scan(scan, tmp_path / "scan.png")))
    else:
        page = RasterPage(str(tmp_path / "scan.png"), 1, scan.image, scan.dpi)
    rec = check_page(page, [t101])
    # The verdict (which decides whether `verify --normalise` writes the page) is not the point
    # here: the measured pose is normalised away directly.
    assert rec["template"] == "KBH-101" and rec["pose"] is not None
    tp = t101.pages[0]
    out = normalise_page(page, Pose(np.array(rec["pose"]["matrix"])), (tp.width, tp.height), tmp_path / "norm")
    assert out["path"] == str(tmp_path / "norm" / f"scan-{path_key(tmp_path / 'scan.png')}_p1.png") and out["dpi"] == scan.dpi
    page = next(read_pages(out["path"]))
    assert page.dpi == scan.dpi and page.bitonal == scan.bitonal
    # ISO 216 A4 is 2480 x 3508 px at 300 dpi and 1654 x 2339 px at 200 dpi (common practice).
    assert page.image.shape == {300.0: (3508, 2480), 200.0: (2339, 1654)}[scan.dpi]
    again = check_page(page, [t101])["pose"]
    assert abs(again["rotation_deg"]) <= 0.02
    assert abs(again["scale"] - 1.0) <= 0.0005
    assert np.hypot(*again["shift_mm"]) <= 0.2


def test_vector_page_is_rendered_and_unshifted(t101, tmp_path):
    # At 127 dpi (5 px per mm; 1 in = 25.4 mm) the 8 mm, 6 mm shift is a whole 40, 30 pixels, so
    # the normalised page can be compared with the reference pixel for pixel.
    settings = CheckSettings(normalise_dir=str(tmp_path), normalise_dpi=127.0)
    rec = next(check_file(str(INPUTS / "101_shifted.pdf"), [t101], settings))
    assert rec["verdict"] == "shifted" and rec["normalised"]["dpi"] == 127.0
    with Image.open(rec["normalised"]["path"]) as im:
        got = np.asarray(im.convert("L"), dtype=float)
    # The reference as pypdfium2 renders it at the same resolution is what the page should become.
    want = render_pdf_page(str(REF101), 1, ReadLimits(), 127.0).image.astype(float)
    # 841.89 pt at 127 dpi is 1485.0 px, 595.28 pt is 1050.0 px (ISO 216 A4).
    assert got.shape == (1485, 1050) and want.shape[0] - got.shape[0] in (0, 1)
    want = want[: got.shape[0], : got.shape[1]]
    mad = np.abs(got - want).mean()
    assert mad < 1.0, mad
    shifted = render_pdf_page(str(INPUTS / "101_shifted.pdf"), 1, ReadLimits(), 127.0).image.astype(float)
    shifted = shifted[: got.shape[0], : got.shape[1]]
    assert np.abs(shifted - want).mean() > 5 * mad + 2.0


def test_only_pages_in_a_known_pose_are_written(t101, tmp_path):
    settings = CheckSettings(normalise_dir=str(tmp_path))
    for name in ("101_old_revision.pdf", "412_crew_list_as_101.pdf", "missing.pdf"):
        rec = next(check_file(str(INPUTS / name), [t101], settings))
        assert rec["verdict"] in ("mismatched", "unrecognised", "error")
        assert rec["normalised"] is None
    assert list(tmp_path.iterdir()) == []


def test_normalise_page_reports_a_write_failure(tmp_path):
    blocker = tmp_path / "file"
    blocker.write_text("x")
    page = RasterPage("scan.png", 2, _page_image(), 150.0)
    out = normalise_page(page, Pose.identity(), (100.0, 50.0), blocker)
    assert out["path"] is None and out["error"].startswith("scan.png page 2: normalised image not written")


def test_cli_verify_zones_and_normalise(tmp_path):
    from click.testing import CliRunner

    from layoutcheck.cli import main
    from layoutcheck.template import save_template

    tpath = tmp_path / "t.json"
    save_template(learn([str(REF101)], with_raster=False), tpath)
    res = CliRunner().invoke(main, ["verify", str(tpath), str(INPUTS / "101_shifted.pdf"), "--zones",
                                    "--normalise", str(tmp_path / "n"), "--normalise-dpi", "72",
                                    "--normalise-format", "tiff", "--json", str(tmp_path / "r.jsonl"), "-q"])
    assert res.exit_code == 1, res.output  # shifted is not a pass
    rec = json.loads((tmp_path / "r.jsonl").read_text().splitlines()[0])
    assert [z["name"] for z in rec["zones"]][:2] == ["vessel_name", "call_sign"]
    assert rec["normalised"] == {"path": str(tmp_path / "n" / f"101_shifted-{path_key(INPUTS / '101_shifted.pdf')}_p1.tiff"), "dpi": 72.0}
    with Image.open(rec["normalised"]["path"]) as im:
        assert im.size == (595, 842)  # A4 at 72 dpi: 595.3 x 841.9 points (ISO 216, ISO 32000-1)
    res = CliRunner().invoke(main, ["verify", str(tpath), str(INPUTS / "101_shifted.pdf"), "--normalise-dpi", "10"])
    assert res.exit_code == 2 and "--normalise-dpi" in res.output

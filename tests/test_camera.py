"""Camera captures end to end: simulated phone photos (colour JPEG, no usable dpi) through the CLI,
and the photo-specific steps (sheet finding, light flattening, readability) on their own.

Outside references: the simulator's truth homography (built by OpenCV's
``getPerspectiveTransform``), OpenCV's ``perspectiveTransform`` for zone corners, Pillow for
the files written, ISO 216 (A4 210 x 297 mm) and the 1/72 in point (ISO 32000-1).
"""

from __future__ import annotations

import json
from pathlib import Path

import cv2
import numpy as np
import pytest
from click.testing import CliRunner
from PIL import Image

from conftest import A4, draw_form
from layoutcheck.capture import find_sheet, flatten_light, readability
from layoutcheck.cli import main
from layoutcheck.extract.raster import background_spread
from layoutcheck.pose import Pose
from layoutcheck.simulate_camera import CameraSettings, simulate_photo
from layoutcheck.sources import read_pages
from layoutcheck.template import load_template
from layoutcheck.verdict import VERDICTS

SAMPLES = Path(__file__).resolve().parent.parent / "sample_forms" / "references"


@pytest.fixture(scope="module")
def setup(tmp_path_factory):
    d = tmp_path_factory.mktemp("photos")
    ref = draw_form(d / "reference.pdf")
    res = CliRunner().invoke(main, ["learn", str(ref), "-o", str(d / "t.json"), "--name", "T-7"])
    assert res.exit_code == 0, res.output
    moved = draw_form(d / "moved.pdf", move={"Tonnage": (11.0, 0.0)})
    photo = simulate_photo(ref, CameraSettings(size=(2592, 1944), seed=21, bend_mm=0.4))
    photo.save(d / "photo.jpg")
    return d, ref, moved, photo


def verify(d, *args):
    res = CliRunner().invoke(main, ["verify", str(d / "t.json"), *map(str, args), "--json", "-"])
    assert res.exit_code in (0, 1), res.output
    return [json.loads(x) for x in res.stdout.splitlines() if x.strip()]


def photo_px_pose(rec, path) -> Pose:
    """The record's projective pose in photo pixels (its points are at the working dpi)."""
    (page,) = list(read_pages(path))
    k = page.dpi / 72.0
    return Pose(np.diag([k, k, 1.0]) @ np.array(rec["pose"]["projective"]))


@pytest.mark.slow
def test_photo_of_the_form_passes_as_a_camera_capture(setup):
    d, _, _, photo = setup
    path = d / "photo.jpg"
    with Image.open(path) as im:  # what the phone wrote: colour, and no dpi but JFIF's 72 default
        assert im.mode == "RGB" and im.info.get("dpi", (72, 72))[0] == 72
    (rec,) = verify(d, path)
    assert rec["verdict"] == "pass", rec["findings"]
    assert rec["capture"] == "camera"
    assert rec["pose"]["model"] == "projective"
    assert np.array(rec["pose"]["projective"]).shape == (3, 3)
    assert np.array(rec["pose"]["matrix"]).shape == (2, 3)
    # Against the simulator's truth homography: the template page's corners within 2 px.
    err = photo.corner_error_px(photo_px_pose(rec, path))
    assert err.max() < 2.0, err
    eff = rec["effective_dpi"]
    assert 150 < eff["worst"] <= eff["centre"]
    assert rec["offending"] == []


@pytest.mark.slow
def test_photo_with_a_moved_box_names_it(setup):
    d, _, moved, _ = setup
    photo = simulate_photo(moved, CameraSettings(size=(2592, 1944), seed=22, bend_mm=0.4))
    (rec,) = verify(d, photo.save(d / "moved.jpg"))
    assert rec["verdict"] == "mismatched"
    assert rec["capture"] == "camera"
    assert [(o["caption"], o["status"]) for o in rec["offending"]] == [("Tonnage", "moved")]
    (off,) = [o["offset_mm"] for o in rec["offending"]]
    assert off[0] == pytest.approx(11.0, abs=0.5) and abs(off[1]) < 0.5  # as drawn


@pytest.mark.slow
def test_photo_far_too_small_is_to_be_taken_again(setup):
    d, ref, _, _ = setup
    photo = simulate_photo(ref, CameraSettings(size=(1600, 1200), fill_frame=0.7, seed=23))
    (rec,) = verify(d, photo.save(d / "small.jpg"))
    assert rec["verdict"] == "retake"
    assert rec["capture"] == "camera"
    assert rec["effective_dpi"]["worst"] < 150
    assert any(f["verdict"] == "retake" and "too small to read" in f["message"] for f in rec["findings"])
    # The same photo passes when the office accepts 90 dpi.
    (again,) = verify(d, d / "small.jpg", "--min-dpi", "90")
    assert again["verdict"] != "retake"


@pytest.mark.slow
def test_normalised_photo_reverifies_as_a_flat_scan_and_zones_follow_the_perspective(setup):
    d, _, _, photo = setup
    out = d / "norm"
    (rec,) = verify(d, d / "photo.jpg", "--normalise", out, "--zones")
    norm = rec["normalised"]["path"]
    with Image.open(norm) as im:
        assert im.info["dpi"][0] == pytest.approx(rec["normalised"]["dpi"], abs=0.5)
    (flat,) = verify(d, norm)
    assert flat["capture"] == "scan"
    assert flat["verdict"] == "pass", flat["findings"]
    assert abs(flat["pose"]["rotation_deg"]) <= 0.05
    assert abs(flat["pose"]["scale"] - 1.0) <= 0.002
    # Each zone's corners on the photo, against OpenCV's perspectiveTransform of the truth.
    truth = photo.homography.matrix
    for z in rec["zones"]:
        x0, top, x1, bottom = z["frame_pt"]
        want = cv2.perspectiveTransform(np.array([[[x0, top]], [[x1, top]], [[x1, bottom]], [[x0, bottom]]], float), truth)
        assert np.abs(np.array(z["quad"]) - want.reshape(-1, 2)).max() < 3.0, z["name"]


@pytest.mark.slow
def test_learn_from_a_photo_and_refuse_a_small_one(setup, tmp_path):
    d, ref, _, _ = setup
    good = simulate_photo(ref, CameraSettings(size=(3264, 2448), seed=24, fill=False, bend_mm=0.0))
    res = CliRunner().invoke(main, ["learn", good.save(tmp_path / "blank.jpg"), "-o", str(tmp_path / "p.json")])
    assert res.exit_code == 0, res.output
    # The sheet's sides name A4, so the template is A4 long: 297 mm = 841.9 pt (ISO 216; 1 pt =
    # 1/72 in), within what the sheet's outline in a photo allows (a long side of 11.35 in,
    # assumed for a sheet of unknown size, would be 2.9 % short).
    learned = load_template(tmp_path / "p.json").pages[0]
    assert learned.height == pytest.approx(841.9, rel=0.01)
    other = simulate_photo(ref, CameraSettings(size=(2592, 1944), seed=25))
    res = CliRunner().invoke(main, ["verify", str(tmp_path / "p.json"), other.save(tmp_path / "o.jpg"), "--json", "-"])
    (rec,) = [json.loads(x) for x in res.stdout.splitlines() if x.strip()]
    assert rec["verdict"] == "pass", rec["findings"]
    small = simulate_photo(ref, CameraSettings(size=(1600, 1200), fill_frame=0.7, seed=26, fill=False))
    res = CliRunner().invoke(main, ["learn", small.save(tmp_path / "small.jpg"), "-o", str(tmp_path / "s.json")])
    assert res.exit_code == 1
    assert "small.jpg page 1: photo too small to learn from" in res.output
    assert "(at least 150 needed)" in res.output


@pytest.mark.slow
def test_sheet_is_found_where_the_truth_puts_its_corners(setup):
    d, _, _, photo = setup
    (page,) = list(read_pages(d / "photo.jpg"))
    quad = find_sheet(page.image)
    w, h = photo.page_size_pt
    want = photo.homography.apply(np.array([[0, 0], [w, 0], [w, h], [0, h]]))
    # Within 1 % of the sheet's size (the bend and the soft edge move the outline a little).
    assert np.abs(quad - want).max() < 0.01 * np.ptp(want[:, 1])
    # A sheet that fills the whole frame has no desk around it: none is claimed.
    crop = page.image[int(want[:, 1].min()) + 40:int(want[:, 1].max()) - 40, int(want[:, 0].max()) - 900:int(want[:, 0].max()) - 40]
    assert find_sheet(np.ascontiguousarray(crop)) is None


def test_light_falling_off_by_35_percent_is_flattened():
    # A page of grey 235 lit 35 % less towards the corners, with a 0.4 mm rule (common practice:
    # office forms rule at 0.1-0.5 mm).
    h, w = 1200, 900
    yy, xx = np.mgrid[0:h, 0:w]
    light = 1.0 - 0.35 * (((xx - w / 2) / (w / 2)) ** 2 + ((yy - h / 2) / (h / 2)) ** 2) / 2.0
    page = np.full((h, w), 235.0)
    page[600:603, 100:800] = 30.0
    img = np.clip(page * light, 0, 255).astype(np.uint8)
    assert background_spread(img, 100.0) > 40  # uneven before
    flat = flatten_light(img, 100.0)
    assert background_spread(flat, 100.0) < 15  # even after, as a flat-bed scan measures
    assert flat[601, 100:800].max() < 100 and flat[550, 100:800].min() > 200  # rule kept dark, paper light


def test_readability_is_the_local_scale_of_the_pose():
    # A homography made by OpenCV from four corner pairs: the page seen 10 % smaller at its
    # bottom edge (an A4 page, ISO 216).
    w, h = A4
    src = np.float32([[0, 0], [w, 0], [w, h], [0, h]])
    dst = np.float32([[0, 0], [w, 0], [0.95 * w, h], [0.05 * w, h]])
    pose = Pose(cv2.getPerspectiveTransform(src, dst))
    r = readability(pose, (w, h), 200.0)
    # At the top edge the page is seen at full size: 200 dpi along it; at the bottom at 90 %.
    assert r.worst_dpi == pytest.approx(pose.local_scales(np.array([[0.0, h]]))[0, 0] * 200.0, rel=1e-9)
    assert r.worst_at[1] == pytest.approx(h)
    assert r.worst_dpi < 0.9 * 200.0 + 1.0
    assert 1.0 < r.stretch < 1.3


def test_retake_ranks_between_mismatched_and_rescaled():
    assert VERDICTS.index("mismatched") < VERDICTS.index("retake") < VERDICTS.index("rescaled")


def test_a_form_with_too_oblique_a_view_is_to_be_taken_again():
    from layoutcheck.consensus import Match
    from layoutcheck.verdict import Tolerances, judge

    w, h = A4
    src = np.float32([[0, 0], [w, 0], [w, h], [0, h]])
    dst = np.float32([[0, 0], [w, 0], [0.7 * w, 0.5 * h], [0.3 * w, 0.5 * h]]) * 3.0
    pose = Pose(cv2.getPerspectiveTransform(src, dst))
    r = readability(pose, (w, h), 72.0)
    verdict, findings = judge(Match(pose, 1.0, (), ()), Tolerances(min_dpi=10.0), (w, h), (w, h), camera=True,
                              readability=r)
    assert verdict == "retake"
    assert r.stretch > 2.0
    assert "too obliquely" in findings[0].message and "bottom" in findings[0].message


@pytest.mark.slow
def test_a_plain_fault_settles_on_the_first_reading_as_a_second_would(tmp_path, monkeypatch):
    import layoutcheck.check as check
    from layoutcheck.check import CheckSettings, check_file, learn

    ref = SAMPLES / "KBH-101_vessel_arrival.pdf"
    template = learn([str(ref)])
    photo = simulate_photo(ref, CameraSettings(size=(2592, 1944), seed=23, tamper="moved"))
    path = str(photo.save(tmp_path / "moved.jpg"))
    calls = []
    real = check.read_again
    monkeypatch.setattr(check, "read_again", lambda *a, **k: calls.append(1) or real(*a, **k))
    (first,) = check_file(path, [template], CheckSettings())
    assert calls == []  # one box moved, found elsewhere: not read again
    monkeypatch.setattr(check, "settled", lambda *a, **k: False)
    (second,) = check_file(path, [template], CheckSettings())
    assert calls == [1]
    # Both name the box the simulator moved, by the offset it planted.
    for rec in (first, second):
        (off,) = rec["offending"]
        assert off["status"] == "moved"
        assert np.abs(np.array(off["frame"]) - np.array(photo.tamper.frame)).max() < 3.0
        assert np.abs(np.array(off["offset_mm"]) - photo.tamper.offset_mm).max() < 0.5
    # Both poses put the template page's corners where the simulator's truth does, within 2 px.
    for rec in (first, second):
        assert photo.corner_error_px(photo_px_pose(rec, path)).max() < 2.0


@pytest.mark.slow
def test_the_second_look_on_a_second_reading_matches_at_its_scales(setup, monkeypatch):
    import layoutcheck.check as check

    d, _, moved, _ = setup
    path = simulate_photo(moved, CameraSettings(size=(2592, 1944), seed=22, bend_mm=0.4)).save(d / "moved3.jpg")
    monkeypatch.setattr(check, "settled", lambda *a, **k: False)
    seen = []
    real_again, real_look = check.read_again, check.look_again

    def again(page, capture, found, tp, match, settings):
        out = real_again(page, capture, found, tp, match, settings)
        seen.append(("second", out[0] is not capture))
        return out

    def look(page, found, tp, match, settings):
        seen.append(("look", settings.solver.scale_range))
        return real_look(page, found, tp, match, settings)

    monkeypatch.setattr(check, "read_again", again)
    monkeypatch.setattr(check, "look_again", look)
    # In this process (the CLI checks in a worker process, out of the monkeypatch's reach).
    (rec,) = check.check_file(str(path), [load_template(d / "t.json")], check.CheckSettings())
    # The second reading was kept, and the second look matched on its page at the scales the
    # second reading matched at (a box shrunk by 30 % pairs there, not at the sheet's scales).
    assert seen == [("second", True), ("look", check.SECOND_READING_SCALES)]
    assert [(o["caption"], o["status"]) for o in rec["offending"]] == [("Tonnage", "moved")]

"""End to end through the CLI on simulated scans: PNG, JPEG, group-4 TIFF, multi-page TIFF and a
scanner-style image PDF, asserting the verdict, the pose against the simulator's truth and the
named element."""

from __future__ import annotations

import json

import numpy as np
import pytest
from click.testing import CliRunner

from conftest import A4, LETTER, draw_form
from layoutcheck.cli import main
from layoutcheck.simulate import save_scan, simulate_scan

# Fit to page of A4 on Letter, from ISO 216 and ANSI/ASME Y14.1 sizes (1 pt = 1/72 in).
A4_ON_LETTER = min(LETTER[0] / A4[0], LETTER[1] / A4[1])


@pytest.fixture(scope="module")
def setup(tmp_path_factory):
    d = tmp_path_factory.mktemp("scans")
    ref = draw_form(d / "reference.pdf")
    res = CliRunner().invoke(main, ["learn", str(ref), "-o", str(d / "t.json"), "--name", "T-7"])
    assert res.exit_code == 0, res.output
    moved = draw_form(d / "moved.pdf", move={"Tonnage": (10.0, 0.0)})
    removed = draw_form(d / "removed.pdf", omit={"Call sign"})
    return d, ref, moved, removed


def verify(d, *files):
    res = CliRunner().invoke(main, ["verify", str(d / "t.json"), *map(str, files), "--json", "-"])
    assert res.exit_code in (0, 1), res.output
    return [json.loads(x) for x in res.stdout.splitlines() if x.strip()]


def turn_error(rec, scan):
    return abs((rec["pose"]["rotation_deg"] - scan.pose.rotation_deg + 180) % 360 - 180)


def boxes(rec):
    return [(o["caption"], o["status"]) for o in rec["offending"] if o["kind"] in ("box", "checkbox")]


def test_png_turned_scan_is_skewed(setup):
    d, ref, _, _ = setup
    scan = simulate_scan(ref, dpi=200, rotation_deg=1.5, blur_sigma_px=0.6, noise_sigma=4, fill=True, seed=1)
    (rec,) = verify(d, save_scan(scan, d / "turned.png"))
    assert rec["verdict"] == "skewed"
    assert turn_error(rec, scan) < 0.05  # the simulator's truth pose
    assert rec["offending"] == []


def test_jpeg_fit_to_page_is_rescaled(setup):
    d, ref, _, _ = setup
    scan = simulate_scan(ref, dpi=200, scale=(A4_ON_LETTER, A4_ON_LETTER), blur_sigma_px=0.5, jpeg_quality=75, seed=2)
    (rec,) = verify(d, save_scan(scan, d / "fit.jpg"))
    assert rec["verdict"] == "rescaled"
    assert rec["pose"]["scale"] == pytest.approx(A4_ON_LETTER, rel=0.003)


def test_group4_tiff_shifted(setup):
    d, ref, _, _ = setup
    scan = simulate_scan(ref, dpi=300, shift_mm=(7.0, -2.0), blur_sigma_px=0.7, bitonal_threshold=140, seed=3)
    path = save_scan(scan, d / "shifted.tif")
    from PIL import Image

    with Image.open(path) as im:
        assert im.info.get("compression") == "group4"  # Pillow reports the TIFF's compression
    (rec,) = verify(d, path)
    assert rec["verdict"] == "shifted"
    assert rec["pose"]["shift_mm"] == pytest.approx([7.0, -2.0], abs=0.3)


def test_multipage_tiff_names_the_moved_box(setup):
    d, ref, moved, _ = setup
    good = simulate_scan(ref, dpi=200, rotation_deg=0.2, blur_sigma_px=0.5, fill=True, seed=4)
    bad = simulate_scan(moved, dpi=200, rotation_deg=-0.3, blur_sigma_px=0.5, seed=5)
    recs = verify(d, save_scan([good, bad], d / "two.tif"))
    assert [(r["page"], r["verdict"]) for r in recs] == [(1, "pass"), (2, "mismatched")]
    assert boxes(recs[1]) == [("Tonnage", "moved")]
    (off,) = [o for o in recs[1]["offending"] if o["kind"] == "box"]
    assert off["offset_mm"] == pytest.approx([10.0, 0.0], abs=0.3)
    assert turn_error(recs[1], bad) < 0.05


def test_scanner_pdf_pages_upside_down_and_removed_box(setup):
    d, ref, _, removed = setup
    flipped = simulate_scan(ref, dpi=200, rotation_deg=180.0, blur_sigma_px=0.5, seed=6)
    gone = simulate_scan(removed, dpi=200, rotation_deg=0.4, blur_sigma_px=0.5, seed=7)
    recs = verify(d, save_scan([flipped, gone], d / "scanner.pdf"))
    assert [r["verdict"] for r in recs] == ["skewed", "mismatched"]
    assert abs(recs[0]["pose"]["rotation_deg"]) == pytest.approx(180.0, abs=0.05)
    assert boxes(recs[1]) == [("Call sign", "missing")]


def test_quarter_turned_scan(setup):
    d, ref, _, _ = setup
    # Paper laid landscape in the scanner: the page appears turned a quarter counterclockwise.
    scan = simulate_scan(ref, dpi=200, rotation_deg=90.0, paper_size_pt=(A4[1], A4[0]), seed=8)
    (rec,) = verify(d, save_scan(scan, d / "quarter.png"))
    assert rec["verdict"] in ("skewed", "rescaled")
    assert rec["pose"]["rotation_deg"] == pytest.approx(90.0, abs=0.05)
    assert rec["pose"]["scale"] == pytest.approx(scan.pose.scale, rel=0.003)


def test_learn_from_a_clean_scan(setup, tmp_path):
    d, ref, moved, _ = setup
    clean = simulate_scan(ref, dpi=200, blur_sigma_px=0.5, seed=9)
    png = save_scan(clean, tmp_path / "clean.png")
    res = CliRunner().invoke(main, ["learn", png, "-o", str(tmp_path / "s.json")])
    assert res.exit_code == 0, res.output
    bad = simulate_scan(moved, dpi=200, rotation_deg=1.0, blur_sigma_px=0.5, seed=10)
    res = CliRunner().invoke(main, ["verify", str(tmp_path / "s.json"), save_scan(bad, tmp_path / "bad.png"), "--json", "-"])
    (rec,) = [json.loads(x) for x in res.stdout.splitlines() if x.strip()]
    assert rec["verdict"] == "mismatched"
    moved_boxes = [o for o in rec["offending"] if o["kind"] == "box" and o["status"] == "moved"]
    assert len(moved_boxes) == 1
    assert moved_boxes[0]["offset_mm"] == pytest.approx([10.0, 0.0], abs=0.4)
    assert np.hypot(*rec["pose"]["shift_mm"]) < 0.5


def test_learn_from_good_filled_scans_drops_their_ink(setup, tmp_path):
    d, ref, _, _ = setup
    paths = []
    for k in range(3):
        s = simulate_scan(ref, dpi=200, rotation_deg=0.3 * (k - 1), blur_sigma_px=0.5, fill=True, stamp=(k == 0), seed=20 + k)
        paths.append(save_scan(s, tmp_path / f"good{k}.png"))
    res = CliRunner().invoke(main, ["learn", *paths, "-o", str(tmp_path / "g.json")])
    assert res.exit_code == 0, res.output
    single = CliRunner().invoke(main, ["learn", paths[0], "-o", str(tmp_path / "one.json")])
    assert single.exit_code == 0
    n_multi = json.loads((tmp_path / "g.json").read_text())["pages"][0]["elements"]
    n_single = json.loads((tmp_path / "one.json").read_text())["pages"][0]["elements"]
    # The stamp and scribbles of one sample are not on the others: fewer elements survive.
    assert len(n_multi) < len(n_single)
    fresh = simulate_scan(ref, dpi=200, rotation_deg=0.1, blur_sigma_px=0.5, fill=True, seed=30)
    res = CliRunner().invoke(main, ["verify", str(tmp_path / "g.json"), save_scan(fresh, tmp_path / "fresh.png"), "--json", "-"])
    (rec,) = [json.loads(x) for x in res.stdout.splitlines() if x.strip()]
    assert rec["verdict"] == "pass", rec["findings"]

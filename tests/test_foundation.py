"""End to end on born-digital PDFs drawn in the test, with known planted faults."""

from __future__ import annotations

import numpy as np
import pytest

from conftest import A4, LETTER, MM, draw_form
from layoutcheck.check import check_file, learn

# Fit-to-page scales computed from the standard sizes: A4 is 210 x 297 mm (ISO 216), Letter is
# 8.5 x 11 in (ANSI/ASME Y14.1), 1 pt = 1/72 in (ISO 32000-1), 1 in = 25.4 mm.
A4_ON_LETTER = min(LETTER[0] / A4[0], LETTER[1] / A4[1])
LETTER_ON_A4 = min(A4[0] / LETTER[0], A4[1] / LETTER[1])


def only(records):
    assert len(records) == 1, records
    return records[0]


def check(path, template):
    return only(list(check_file(str(path), [template])))


def test_fit_to_page_scales_from_the_standards():
    # ISO 216 / ANSI Letter: the ratios the issue quotes, to four decimals.
    assert round(A4_ON_LETTER, 4) == 0.9407
    assert round(LETTER_ON_A4, 4) == 0.9727


def test_exact_copy_passes(tmp_path, vector_template):
    rec = check(draw_form(tmp_path / "copy.pdf"), vector_template)
    assert rec["verdict"] == "pass"
    assert rec["support"] == 1.0
    assert rec["offending"] == []
    assert abs(rec["pose"]["rotation_deg"]) < 1e-3
    assert rec["pose"]["scale"] == pytest.approx(1.0, abs=1e-5)


def test_filled_copy_passes(tmp_path, vector_template):
    rec = check(draw_form(tmp_path / "filled.pdf", fill=True), vector_template)
    assert rec["verdict"] == "pass", rec["findings"]
    assert rec["offending"] == []


def test_rotated_two_degrees_is_skewed(tmp_path, vector_template):
    rec = check(draw_form(tmp_path / "rot.pdf", rotate_deg=2.0), vector_template)
    assert rec["verdict"] == "skewed"
    # Counterclockwise as seen is positive (the record's documented sign).
    assert rec["pose"]["rotation_deg"] == pytest.approx(2.0, abs=0.01)
    assert rec["pose"]["scale"] == pytest.approx(1.0, abs=1e-4)
    assert np.hypot(*rec["pose"]["shift_mm"]) < 0.1  # turned about the page centre
    assert rec["offending"] == []


def test_clockwise_turn_has_negative_rotation(tmp_path, vector_template):
    rec = check(draw_form(tmp_path / "rotcw.pdf", rotate_deg=-1.2), vector_template)
    assert rec["verdict"] == "skewed"
    assert rec["pose"]["rotation_deg"] == pytest.approx(-1.2, abs=0.01)


def test_upside_down_is_180(tmp_path, vector_template):
    rec = check(draw_form(tmp_path / "flip.pdf", rotate_deg=180.0), vector_template)
    assert rec["verdict"] == "skewed"
    assert abs(rec["pose"]["rotation_deg"]) == pytest.approx(180.0, abs=0.01)


def test_a4_fit_to_letter_is_rescaled(tmp_path, vector_template):
    rec = check(draw_form(tmp_path / "fit.pdf", pagesize=LETTER, scale=A4_ON_LETTER), vector_template)
    assert rec["verdict"] == "rescaled"
    assert rec["pose"]["scale"] == pytest.approx(0.9407, abs=1e-4)
    assert rec["pose"]["scale_x"] == pytest.approx(rec["pose"]["scale_y"], abs=1e-4)
    assert np.hypot(*rec["pose"]["shift_mm"]) < 0.1  # centred on the sheet


def test_uneven_scale_is_measured_per_axis(tmp_path, vector_template):
    rec = check(draw_form(tmp_path / "aniso.pdf", scale=(0.97, 0.99)), vector_template)
    assert rec["verdict"] == "rescaled"
    assert rec["pose"]["scale_x"] == pytest.approx(0.97, abs=1e-4)
    assert rec["pose"]["scale_y"] == pytest.approx(0.99, abs=1e-4)


def test_shifted_page(tmp_path, vector_template):
    rec = check(draw_form(tmp_path / "shift.pdf", shift_mm=(8.0, 6.0)), vector_template)
    assert rec["verdict"] == "shifted"
    assert rec["pose"]["shift_mm"] == pytest.approx([8.0, 6.0], abs=0.05)
    assert rec["offending"] == []


def test_small_shift_passes(tmp_path, vector_template):
    rec = check(draw_form(tmp_path / "shift2.pdf", shift_mm=(2.0, -1.0)), vector_template)
    assert rec["verdict"] == "pass"
    assert rec["pose"]["shift_mm"] == pytest.approx([2.0, -1.0], abs=0.05)


def test_box_moved_10mm_is_named(tmp_path, vector_template):
    rec = check(draw_form(tmp_path / "moved.pdf", move={"Tonnage": (10.0, 0.0)}), vector_template)
    assert rec["verdict"] == "mismatched"
    boxes = [o for o in rec["offending"] if o["kind"] == "box"]
    assert [o["caption"] for o in boxes] == ["Tonnage"]
    assert boxes[0]["status"] == "moved"
    assert boxes[0]["offset_mm"] == pytest.approx([10.0, 0.0], abs=0.05)
    # The pose is not pulled by the moved box.
    assert abs(rec["pose"]["rotation_deg"]) < 1e-3 and np.hypot(*rec["pose"]["shift_mm"]) < 0.01


def test_box_removed_is_missing(tmp_path, vector_template):
    rec = check(draw_form(tmp_path / "removed.pdf", omit={"Call sign"}), vector_template)
    assert rec["verdict"] == "mismatched"
    boxes = [o for o in rec["offending"] if o["kind"] == "box"]
    assert [(o["caption"], o["status"]) for o in boxes] == [("Call sign", "missing")]
    assert boxes[0]["offset_mm"] is None


def test_different_form_is_unrecognised(tmp_path, vector_template):
    rec = check(draw_form(tmp_path / "other.pdf", variant="other"), vector_template)
    assert rec["verdict"] == "unrecognised"
    assert rec["template"] is None and rec["pose"] is None
    assert rec["support"] < 0.5


def test_rotated_and_moved_box_together(tmp_path, vector_template):
    rec = check(draw_form(tmp_path / "both.pdf", rotate_deg=1.5, move={"Agent": (0.0, 9.0)}), vector_template)
    assert rec["verdict"] == "mismatched"
    assert rec["pose"]["rotation_deg"] == pytest.approx(1.5, abs=0.01)
    boxes = [o for o in rec["offending"] if o["kind"] == "box"]
    assert [o["caption"] for o in boxes] == ["Agent"]
    # Offsets are in the template's axes, with the page pose removed.
    assert boxes[0]["offset_mm"] == pytest.approx([0.0, 9.0], abs=0.05)


def test_section_moved_as_one_is_reported_once(tmp_path, vector_template):
    section = {"Signature": (0, 12), "Date": (0, 12), "Stamp": (0, 12)}
    rec = check(draw_form(tmp_path / "sec.pdf", move=section), vector_template)
    assert rec["verdict"] == "mismatched"
    kinds = [o["kind"] for o in rec["offending"]]
    assert kinds == ["section"], rec["offending"]
    assert rec["offending"][0]["offset_mm"] == pytest.approx([0.0, 12.0], abs=0.1)
    moved = [s for s in rec["sections"] if s["status"] == "moved"]
    assert len(moved) == 1


def test_record_has_exactly_the_contract_fields(tmp_path, vector_template):
    rec = check(draw_form(tmp_path / "c.pdf"), vector_template)
    assert set(rec) == {"source", "page", "template", "template_page", "verdict", "findings", "pose", "support",
                        "offending", "sections", "elapsed_ms", "error", "capture", "effective_dpi", "warp_mm"}
    assert set(rec["pose"]) == {"rotation_deg", "scale", "scale_x", "scale_y", "shift_mm", "matrix", "model", "projective"}
    assert rec["page"] == 1 and rec["template"] == "T-7" and rec["error"] is None
    assert rec["capture"] == "scan" and rec["effective_dpi"] is None
    assert np.asarray(rec["pose"]["matrix"]).shape == (2, 3)
    # A flat page's full matrix is its affine one with the last row (0, 0, 1).
    assert np.allclose(np.asarray(rec["pose"]["projective"])[:2], rec["pose"]["matrix"], atol=1e-6)
    assert np.asarray(rec["pose"]["projective"])[2].tolist() == [0.0, 0.0, 1.0]


def test_matrix_maps_template_points_to_input_points(tmp_path, vector_template):
    rec = check(draw_form(tmp_path / "m.pdf", shift_mm=(10.0, 0.0)), vector_template)
    m = np.asarray(rec["pose"]["matrix"])
    # 10 mm right is 28.346 pt (1 in = 25.4 mm = 72 pt).
    assert m[0, 2] == pytest.approx(10 * MM, abs=0.02)
    assert m[1, 2] == pytest.approx(0.0, abs=0.02)


def test_multi_page_reference_makes_multi_page_template(tmp_path):
    from pypdf import PdfReader, PdfWriter

    a = draw_form(tmp_path / "a.pdf")
    b = draw_form(tmp_path / "b.pdf", variant="other")
    w = PdfWriter()
    for f in (a, b):
        w.add_page(PdfReader(str(f)).pages[0])
    two = tmp_path / "two.pdf"
    with open(two, "wb") as fh:
        w.write(fh)
    t = learn([str(two)], with_raster=False)
    assert len(t.pages) == 2
    recs = list(check_file(str(two), [t]))
    assert [(r["page"], r["template_page"], r["verdict"]) for r in recs] == [(1, 1, "pass"), (2, 2, "pass")]

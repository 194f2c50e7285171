"""The Python API: every kind of page gives the record the command line writes for it."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from PIL import Image

import layoutcheck as lc
from layoutcheck.cli import main

ROOT = Path(__file__).resolve().parent.parent
SAMPLES = ROOT / "sample_forms"
TEMPLATE = ROOT / "templates" / "KBH-101.json"
SCAN = SAMPLES / "inputs" / "scan_101_skewed.png"
PDF = SAMPLES / "inputs" / "101_shifted.pdf"


def without(rec: dict, *keys: str) -> dict:
    return {k: v for k, v in rec.items() if k not in ("elapsed_ms", *keys)}


@pytest.fixture(scope="module")
def cli_records(tmp_path_factory):
    out = tmp_path_factory.mktemp("api") / "out.jsonl"
    res = CliRunner().invoke(main, ["verify", str(TEMPLATE), str(SCAN), str(PDF), "--json", str(out), "-q"])
    assert res.exit_code == 1, res.output  # neither page passes: one is turned, one shifted
    recs = [json.loads(line) for line in out.read_text().splitlines()]
    return {Path(r["source"]).name: r for r in recs}


@pytest.fixture(scope="module")
def templates():
    return lc.load_templates(TEMPLATE)


def test_the_command_line_records_are_the_planted_faults(cli_records):
    # sample_forms/expected*.json: the scan is turned 1.4 degrees clockwise, the PDF shifted 8, 6 mm.
    assert cli_records[SCAN.name]["verdict"] == "skewed"
    assert cli_records[PDF.name]["verdict"] == "shifted"


def test_every_kind_of_scan_gives_the_command_line_record(cli_records, templates):
    want = cli_records[SCAN.name]
    with Image.open(SCAN) as im:
        im.load()
        # The file states its resolution in its pHYs chunk (PNG specification); Pillow reads it.
        assert im.info["dpi"][0] == pytest.approx(200, abs=0.01)
        as_pil = lc.check_page(im, templates)
        as_array = lc.check_page(np.asarray(im.convert("L")), templates, dpi=200)
    by_path = lc.check_page(SCAN, templates)
    assert without(by_path.to_record()) == without(want)
    as_bytes = lc.check_page(SCAN.read_bytes(), templates, source="scan")
    for got in (as_bytes, as_pil, as_array):
        assert without(got.to_record(), "source") == without(want, "source")
    assert as_bytes.source == "scan" and as_pil.source == "image"


def test_every_kind_of_pdf_gives_the_command_line_record(cli_records, templates):
    want = cli_records[PDF.name]
    assert without(lc.check_page(PDF, templates).to_record()) == without(want)
    assert without(lc.check_page(PDF.read_bytes(), templates).to_record(), "source") == without(want, "source")
    (only,) = lc.check_file(PDF, templates)
    assert without(only.to_record()) == without(want)


def test_result_properties_are_the_record(templates):
    r = lc.check_page(PDF, templates, settings=lc.CheckSettings(zones=True))
    rec = r.to_record()
    assert (r.verdict, r.template, r.template_page, r.page, r.passed) == ("shifted", "KBH-101", 1, 1, False)
    # sample_forms/expected.json plants a shift of 8 mm right and 6 mm down.
    assert r.pose.shift_mm == pytest.approx((8.0, 6.0), abs=0.05)
    assert r.pose.matrix == tuple(tuple(row) for row in rec["pose"]["matrix"])
    assert [f.message for f in r.findings] == [f["message"] for f in rec["findings"]]
    assert [s.name for s in r.sections] == [s["name"] for s in rec["sections"]]
    assert [z.name for z in r.zones] == [z["name"] for z in rec["zones"]] and len(r.zones) > 0
    assert all(z.in_place for z in r.zones)
    # to_record() is a copy: changing it changes nothing in the result.
    rec["verdict"] = "pass"
    rec["pose"]["shift_mm"][0] = 0.0
    assert r.verdict == "shifted" and r.to_record()["pose"]["shift_mm"][0] == pytest.approx(8.0, abs=0.05)


def test_offending_elements_are_named(templates):
    r = lc.check_page(SAMPLES / "inputs" / "101_box_removed.pdf", templates)
    # sample_forms/expected.json: the call sign box is removed, with its field and its label.
    assert r.verdict == "mismatched"
    assert {(o.kind, o.caption, o.status) for o in r.offending} == {
        ("box", "Call sign", "missing"), ("field", "Call sign", "missing"), ("label", "Call sign", "missing")}


def test_a_camera_capture_has_its_resolution_measured(cli_records, templates):
    with Image.open(SCAN) as im:
        pixels = np.asarray(im.convert("L"))
    r = lc.check_page(pixels, templates)  # no dpi: as a camera gives it
    want = cli_records[SCAN.name]
    rec = r.to_record()
    assert rec["capture"] == "camera" and want["capture"] == "scan"
    # The scan was written at 200 dpi (its pHYs chunk, read by Pillow above): the form, measured.
    assert rec["effective_dpi"]["centre"] == pytest.approx(200, rel=0.01)
    assert r.template == want["template"] and r.offending == ()
    assert r.pose.rotation_deg == pytest.approx(want["pose"]["rotation_deg"], abs=0.05)


def test_a_damaged_page_raises_naming_file_and_page(tmp_path, templates):
    damaged = tmp_path / "cut_short.png"
    damaged.write_bytes(SCAN.read_bytes()[:5000])
    with pytest.raises(lc.CheckError, match=r"^cut_short\.png page 1: image data is damaged") as info:
        lc.check_page(damaged, templates)
    rec = info.value.result.to_record()
    assert rec["verdict"] == "error" and rec["error"] == str(info.value) and rec["page"] == 1
    assert rec["pose"] is None and rec["findings"][0]["verdict"] == "error"
    with pytest.raises(lc.CheckError, match=r"^upload page 1: image data is damaged"):
        lc.check_page(SCAN.read_bytes()[:5000], templates, source="upload")


def test_check_file_raises_or_keeps_errors(tmp_path, templates):
    missing = tmp_path / "not_there.pdf"
    with pytest.raises(lc.CheckError, match=r"not_there\.pdf: no such file") as info:
        lc.check_file(missing, templates)
    assert [r.verdict for r in info.value.results] == ["error"]
    (kept,) = lc.check_file(missing, templates, errors="keep")
    assert kept.page is None and kept.to_record()["error"].endswith("not_there.pdf: no such file")


def test_bad_arguments_are_refused(templates):
    with pytest.raises(ValueError, match=r"image: a page array must be uint8 \(or bool\), not float64"):
        lc.check_page(np.zeros((100, 100)), templates)
    with pytest.raises(TypeError, match="not list"):
        lc.check_page([1, 2, 3], templates)
    with pytest.raises(lc.TemplateError, match="no_such.json: no such template file"):
        lc.load_templates("no_such.json")


def test_learning_from_python_gives_the_command_line_template(tmp_path, reference_pdf):
    out = tmp_path / "t.json"
    res = CliRunner().invoke(main, ["learn", str(reference_pdf), "-o", str(out), "--name", "T-7"])
    assert res.exit_code == 0, res.output
    t = lc.learn(reference_pdf, name="T-7")
    assert json.loads(out.read_text()) == json.loads(json.dumps(t.to_dict()))
    with pytest.raises(lc.LearnError, match="nothing.pdf: no such file"):
        lc.learn(tmp_path / "nothing.pdf")


def test_the_package_face_is_typed_and_listed():
    assert (Path(lc.__file__).parent / "py.typed").exists()  # PEP 561 marker
    assert set(lc.__all__) >= {"check_page", "check_file", "learn", "load_templates", "PageResult", "CheckError"}
    assert all(hasattr(lc, name) for name in lc.__all__)

"""Zones: learned from form fields or boxes, read from a zones file, mapped onto input pages."""

from __future__ import annotations

import dataclasses
import json
from pathlib import Path

import numpy as np
import pytest

from layoutcheck.check import CheckSettings, check_file, check_page, learn
from layoutcheck.sources import RasterPage
from layoutcheck.template import Template, load_template, save_template, template_from_dict
from layoutcheck.zones import (ZoneError, apply_zone_file, page_zones, slug, unique_names, zone_quad,
                               zone_records, zones_of)

ROOT = Path(__file__).resolve().parents[1]
REF101 = ROOT / "sample_forms" / "references" / "KBH-101_vessel_arrival.pdf"
INPUTS = ROOT / "sample_forms" / "inputs"
MM = 72.0 / 25.4  # points per mm: 1 pt = 1/72 in (ISO 32000-1), 1 in = 25.4 mm
FIELD_NAMES = ["vessel_name", "call_sign", "flag_state", "imo_number", "gross_tonnage", "master_name"]


@pytest.fixture(scope="module")
def t101_vector() -> Template:
    return learn([str(REF101)], with_raster=False)


@pytest.fixture(scope="module")
def t101() -> Template:
    return learn([str(REF101)])


def _acroform_rects(path: Path) -> dict[str, tuple[float, float, float, float]]:
    """Field name -> /Rect turned to top-left, y-down points, read with pypdf."""
    from pypdf import PdfReader

    page = PdfReader(str(path)).pages[0]
    height = float(page.mediabox.height)
    out = {}
    for annot in page.get("/Annots", []):
        a = annot.get_object()
        if a.get("/T") is None:
            continue
        x0, y0, x1, y1 = (float(v) for v in a["/Rect"])
        out[str(a["/T"])] = (min(x0, x1), height - max(y0, y1), max(x0, x1), height - min(y0, y1))
    return out


# -- learned zones --------------------------------------------------------------------------------
def test_zones_come_from_acroform_fields(t101_vector):
    zones = t101_vector.pages[0].zones
    truth = _acroform_rects(REF101)
    # Field names and /Rect as pypdf reads them (an outside PDF reader; /Rect is in the bottom-left
    # default user space, ISO 32000-1 12.5.2).
    assert sorted(z.name for z in zones) == sorted(truth) == sorted(FIELD_NAMES)
    for z in zones:
        assert z.origin == "field"
        assert np.allclose(z.frame, truth[z.name], atol=0.01), z.name
        assert z.element_ids[0].startswith("field-")
        # The box the field sits in is named too, so its place can be judged on a scan.
        assert len(z.element_ids) == 2 and z.element_ids[1].startswith("box-")


def test_zones_come_from_captioned_boxes_without_fields(t101_vector):
    tp = t101_vector.pages[0]
    no_fields = dataclasses.replace(tp, elements=tuple(e for e in tp.elements if e.kind != "field"), zones=())
    zones = page_zones(no_fields)
    names = [z.name for z in zones]
    assert len(set(names)) == len(names)
    # KBH-101 has three boxes captioned "Date" and two each of "Port" and "Agent".
    assert {"date", "date_2", "date_3", "port", "port_2", "agent", "agent_2"} <= set(names)
    assert {"vessel_name", "call_sign", "length_overall_m", "eta_date_time", "passengers"} <= set(names)
    # Uncaptioned table cells are named by their element id.
    assert "box_020" in names
    assert all(z.origin == "box" and len(z.element_ids) == 1 for z in zones)
    by_name = {z.name: z for z in zones}
    box = next(e for e in tp.elements if e.caption == "Vessel name" and e.kind == "box")
    assert by_name["vessel_name"].frame == box.frame and by_name["vessel_name"].element_ids == (box.id,)


def test_slug_and_unique_names():
    assert slug("Length overall (m)", "box-007") == "length_overall_m"
    assert slug("Owner / operator", "box-009") == "owner_operator"
    assert slug(None, "box-020") == "box_020"
    assert slug("2nd port", "box-1") == "z_2nd_port"
    assert slug("Ångström", "x") == "angstrom"
    assert unique_names(["a", "b", "a", "a_2", "a"]) == ["a", "b", "a_2", "a_2_2", "a_3"]


def test_zones_survive_save_and_load_and_old_templates_get_them(t101_vector, tmp_path):
    path = tmp_path / "t.json"
    save_template(t101_vector, path)
    back = load_template(path)
    for z, w in zip(back.pages[0].zones, t101_vector.pages[0].zones, strict=True):
        assert (z.name, z.element_ids, z.origin) == (w.name, w.element_ids, w.origin)
        assert np.allclose(z.frame, w.frame, atol=1e-3)  # frames are written to 0.001 pt
    data = json.loads(path.read_text())
    assert data["format_version"] == 1
    for p in data["pages"]:
        del p["zones"]  # a template written before zones existed
    old = template_from_dict(data)
    assert old.pages[0].zones == ()
    assert [z.name for z in zones_of(old.pages[0])] == [z.name for z in t101_vector.pages[0].zones]


# -- zones file -----------------------------------------------------------------------------------
def _zone_file(tmp_path, data) -> Path:
    p = tmp_path / "zones.json"
    p.write_text(data if isinstance(data, str) else json.dumps(data))
    return p


def test_zone_file_replaces_and_adds(t101_vector, tmp_path):
    f = _zone_file(tmp_path, {"zones": [
        {"name": "vessel_name", "page": 1, "frame": [60, 150, 300, 170]},
        {"name": "remarks_port", "frame": [52, 400, 254, 419]},  # inside box 'Port' (box-014)
        {"name": "declaration", "frame": [40, 570, 560, 690], "elements": ["box-026"]},
    ]})
    t = apply_zone_file(t101_vector, f)
    zones = {z.name: z for z in t.pages[0].zones}
    assert set(zones) == set(FIELD_NAMES) | {"remarks_port", "declaration"}
    assert zones["vessel_name"].frame == (60.0, 150.0, 300.0, 170.0)
    assert zones["vessel_name"].origin == "file"
    assert zones["vessel_name"].element_ids == ("field-001", "box-002")
    assert zones["remarks_port"].element_ids == ("box-014",)
    assert zones["declaration"].element_ids == ("box-026",)
    assert zones["call_sign"].origin == "field"


@pytest.mark.parametrize("content, message", [
    ("{not json", "zones.json: zones file is not valid JSON"),
    ({"zone": []}, "zones.json: a zones file is an object with a \"zones\" list"),
    ({"zones": [5]}, "zones.json: zone 1 is not an object"),
    ({"zones": [{"page": 1, "frame": [0, 0, 10, 10]}]}, "zones.json: zone 1: \"name\" must be a non-empty string"),
    ({"zones": [{"name": "a b", "frame": [0, 0, 10, 10]}]}, "zones.json: zone 1 ('a b'): name may hold only"),
    ({"zones": [{"name": "a", "page": 2, "frame": [0, 0, 10, 10]}]}, "zones.json: zone 1 ('a'): \"page\" must be a page number from 1 to 1, got 2"),
    ({"zones": [{"name": "a", "frame": [0, 0, 10]}]}, "zones.json: zone 1 ('a'): \"frame\" must be [x0, top, x1, bottom]"),
    ({"zones": [{"name": "a", "frame": [0, 0, "10", 10]}]}, "zones.json: zone 1 ('a'): \"frame\" must be [x0, top, x1, bottom]"),
    ({"zones": [{"name": "a", "frame": [20, 0, 10, 10]}]}, "zones.json: zone 1 ('a'): frame [20, 0, 10, 10] needs x0 < x1 and top < bottom"),
    ({"zones": [{"name": "a", "frame": [0, 0, 700, 10]}]}, "zones.json: zone 1 ('a'): frame [0, 0, 700, 10] lies outside page 1"),
    ({"zones": [{"name": "a", "frame": [0, 0, 10, 10]}, {"name": "a", "frame": [0, 0, 20, 20]}]}, "zones.json: zone 2 ('a'): name repeated on page 1"),
    ({"zones": [{"name": "a", "frame": [0, 0, 10, 10], "elements": ["box-999"]}]}, "zones.json: zone 1 ('a'): page 1 has no element 'box-999'"),
])
def test_zone_file_errors(t101_vector, tmp_path, content, message):
    with pytest.raises(ZoneError) as info:
        apply_zone_file(t101_vector, _zone_file(tmp_path, content))
    text = str(info.value)
    assert text.startswith(message) and "\n" not in text


def test_cli_learn_with_bad_zone_file(tmp_path):
    from click.testing import CliRunner

    from layoutcheck.cli import main

    bad = _zone_file(tmp_path, {"zones": [{"name": "a", "frame": [0, 0, 10]}]})
    res = CliRunner().invoke(main, ["learn", str(REF101), "-o", str(tmp_path / "t.json"), "--zones", str(bad)])
    assert res.exit_code != 0
    assert "zone 1 ('a'): \"frame\" must be [x0, top, x1, bottom]" in res.output
    assert "Traceback" not in res.output and not (tmp_path / "t.json").exists()
    good = _zone_file(tmp_path, {"zones": [{"name": "extra", "frame": [52, 400, 254, 419]}]})
    res = CliRunner().invoke(main, ["learn", str(REF101), "-o", str(tmp_path / "t.json"), "--zones", str(good)])
    assert res.exit_code == 0, res.output
    names = [z.name for z in load_template(tmp_path / "t.json").pages[0].zones]
    assert names == FIELD_NAMES + ["extra"]


# -- zones on inputs ------------------------------------------------------------------------------
def test_zone_records_map_corners_and_flag_elements():
    from layoutcheck.pose import Pose
    from layoutcheck.template import Zone

    z = Zone("a", (100.0, 200.0, 172.0, 236.0), ("box-001",), "box")
    pose = Pose.from_params(rotation_deg=90.0, shift=(0.0, 0.0))  # turned a quarter counterclockwise
    recs = zone_records([z], pose.matrix, {"box-001": "ok"}, {"box-001"}, dpi=300.0)
    r = recs[0]
    # Counterclockwise as seen in y-down coordinates: (x, y) -> (y, -x); 300 / 72 px per point.
    expected = np.array([[200, -100], [200, -172], [236, -172], [236, -100]]) * 300.0 / 72.0
    assert np.allclose(r["quad"], expected, atol=0.01)
    assert r["unit"] == "px" and r["bbox"] == [833, -717, 984, -416]
    assert r["in_place"] is True and r["status"] == "ok"
    moved = zone_records([z], np.eye(3), {"box-001": "moved"}, {"box-001"}, dpi=None)[0]
    assert moved["in_place"] is False and moved["status"] == "moved" and moved["unit"] == "pt"
    unjudged = zone_records([z], np.eye(3), {"box-001": "missing"}, set(), dpi=None)[0]
    assert unjudged["in_place"] is True and unjudged["status"] == "unchecked"
    outside = zone_records([z], np.eye(3), {"box-001": "ok"}, {"box-001"}, dpi=None, image_size=(150, 300))[0]
    assert outside["in_place"] is False and outside["status"] == "outside" and outside["bbox"] == [100, 200, 150, 236]


def test_moved_box_zone_is_not_in_place(t101_vector):
    rec = next(check_file(str(INPUTS / "101_old_revision.pdf"), [t101_vector], CheckSettings(zones=True)))
    assert rec["verdict"] == "mismatched"
    flags = {z["name"]: z["in_place"] for z in rec["zones"]}
    # sample_forms/README.md: Rev. A moves box gross_tonnage 12 mm to the right, nothing else.
    assert flags == {n: n != "gross_tonnage" for n in FIELD_NAMES}
    gross = next(z for z in rec["zones"] if z["name"] == "gross_tonnage")
    assert gross["status"] == "moved" and gross["unit"] == "pt"


def test_missing_box_zone_is_not_in_place(t101_vector):
    rec = next(check_file(str(INPUTS / "101_box_removed.pdf"), [t101_vector], CheckSettings(zones=True)))
    flags = {z["name"]: z["in_place"] for z in rec["zones"]}
    # sample_forms/README.md: box call_sign removed with its caption and field.
    assert flags == {n: n != "call_sign" for n in FIELD_NAMES}
    assert next(z for z in rec["zones"] if z["name"] == "call_sign")["status"] == "missing"


def test_vector_zones_follow_the_shift(t101_vector):
    rec = next(check_file(str(INPUTS / "101_shifted.pdf"), [t101_vector], CheckSettings(zones=True)))
    # sample_forms/expected.json: 8 mm right, 6 mm down; 72 / 25.4 points per mm (ISO 32000-1).
    d = np.array([8.0, 6.0]) * MM
    for z in rec["zones"]:
        x0, top, x1, bottom = z["frame_pt"]
        want = np.array([[x0, top], [x1, top], [x1, bottom], [x0, bottom]]) + d
        assert np.allclose(z["quad"], want, atol=0.2), z["name"]
        assert z["in_place"] and z["unit"] == "pt"


def test_no_zones_field_unless_asked_and_empty_when_unrecognised(t101_vector):
    rec = next(check_file(str(INPUTS / "101_shifted.pdf"), [t101_vector]))
    assert "zones" not in rec and "normalised" not in rec
    rec = next(check_file(str(INPUTS / "412_crew_list_as_101.pdf"), [t101_vector], CheckSettings(zones=True)))
    assert rec["verdict"] == "unrecognised" and rec["zones"] == []
    rec = next(check_file(str(INPUTS / "no_such_file.pdf"), [t101_vector], CheckSettings(zones=True)))
    assert rec["verdict"] == "error" and rec["zones"] == []


@pytest.mark.parametrize("rotation, scale, shift", [(1.5, 1.01, (3.0, -2.0)), (-2.5, 0.97, (-4.0, 5.0))])
def test_zone_corners_on_simulated_scans_match_the_truth(t101, rotation, scale, shift):
    from layoutcheck.simulate import simulate_scan

    scan = simulate_scan(REF101, dpi=300, rotation_deg=rotation, scale=(scale, scale), shift_mm=shift,
                         noise_sigma=4.0, blur_sigma_px=0.6, seed=3)
    rec = check_page(RasterPage("scan.png", 1, scan.image, 300.0), [t101], CheckSettings(zones=True))
    assert rec["template"] == "KBH-101" and len(rec["zones"]) == len(FIELD_NAMES)
    for z in rec["zones"]:
        # Truth: the pose the scan was made with; 300 / 72 pixels per point (ISO 32000-1 unit).
        want = zone_quad(z["frame_pt"], scan.pose.matrix) * 300.0 / 72.0
        err = np.hypot(*(np.array(z["quad"]) - want).T).max()
        assert err <= 1.0, (z["name"], err)
        assert z["unit"] == "px" and z["in_place"], z
        lo, hi = np.floor(want.min(0) - 1), np.ceil(want.max(0) + 1)
        assert lo[0] <= z["bbox"][0] and lo[1] <= z["bbox"][1] and z["bbox"][2] <= hi[0] and z["bbox"][3] <= hi[1]

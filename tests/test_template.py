"""The template: relation graph, sections, versioned JSON."""

from __future__ import annotations

import json

import pytest

from conftest import MM, draw_form
from layoutcheck.check import learn
from layoutcheck.template import FORMAT_VERSION, TemplateError, load_template, save_template


def test_round_trip(tmp_path, vector_template):
    path = tmp_path / "t.json"
    save_template(vector_template, path)
    again = load_template(path)
    assert again.to_dict() == vector_template.to_dict()
    assert len(again.pages[0].elements) == len(vector_template.pages[0].elements)
    data = json.loads(path.read_text())
    assert data["format_version"] == 1  # no form or revision: still a version 1 file


def test_newer_format_is_refused(tmp_path, vector_template):
    data = vector_template.to_dict()
    data["format_version"] = FORMAT_VERSION + 1
    path = tmp_path / "new.json"
    path.write_text(json.dumps(data))
    with pytest.raises(TemplateError, match=rf"^new\.json: template format_version {FORMAT_VERSION + 1} is newer than this "
                       rf"layoutcheck reads \({FORMAT_VERSION}\); upgrade layoutcheck$"):
        load_template(path)


@pytest.mark.parametrize("content, message", [
    ("{not json", r"^bad\.json: template is not valid JSON"),
    ('{"format": "something-else"}', r"^bad\.json: not a layoutcheck template"),
    ('{"format": "layoutcheck-template", "format_version": 1, "name": "x", "pages": [{"number": 1}]}', r"^bad\.json: template is damaged \(KeyError"),
    ('{"format": "layoutcheck-template", "format_version": 1, "name": "x", "pages": []}', r"^bad\.json: template has no pages$"),
])
def test_broken_files_are_refused_with_one_line(tmp_path, content, message):
    path = tmp_path / "bad.json"
    path.write_text(content)
    with pytest.raises(TemplateError, match=message) as info:
        load_template(path)
    assert "\n" not in str(info.value)


def test_graph_edges_carry_offsets_and_scales(vector_template):
    g = vector_template.graph
    page = vector_template.pages[0]
    box = next(e for e in page.elements if e.kind == "box" and e.caption == "Vessel name")
    node = f"page-1/{box.id}"
    (section,) = [u for u, _ in g.in_edges(node) if g.edges[u, node]["relation"] == "part"]
    sframe = g.nodes[section]["frame"]
    edge = g.edges[section, node]
    # Offset of the box centre from the section's top-left corner, in points (drawn at 20 mm, 40 mm).
    assert edge["offset"][0] == pytest.approx((20 + 40) * MM - sframe[0], abs=0.6)
    assert edge["scale"][0] == pytest.approx(80 * MM / (sframe[2] - sframe[0]), rel=0.01)
    assert g.has_edge("page-1", section)
    neighbours = [v for _, v, d in g.out_edges(node, data=True) if d["relation"] == "neighbour"]
    assert len(neighbours) == 4


def test_sections_split_by_full_width_rules(vector_template):
    page = vector_template.pages[0]
    by_id = {e.id: e for e in page.elements}
    captions = [sorted(by_id[i].caption or by_id[i].text or "" for i in s.element_ids if by_id[i].kind in ("box", "checkbox"))
                for s in page.sections]
    # The drawn form has rules at 26, 112 and 210 mm, and a 14 mm empty gap below the
    # checkbox row (127 mm) before the next caption (143.5 mm): four bands of boxes.
    boxed = [c for c in captions if c]
    assert boxed == [
        ["Agent", "Call sign", "Flag", "Master", "Tonnage", "Vessel name"],
        ["Cargo", "Fuel", "Passengers", "Waste"],
        ["Arrival date", "Departure date", "Port of call"],
        ["Date", "Official use", "Signature"],
    ]
    every = [i for s in page.sections for i in s.element_ids]
    assert sorted(every) == sorted(e.id for e in page.elements)  # each element in exactly one section


def test_sections_can_be_named(tmp_path):
    ref = draw_form(tmp_path / "r.pdf")
    t = learn([str(ref)], with_raster=False, section_names={"section-02": "Ship"})
    assert [s.name for s in t.pages[0].sections][1] == "Ship"


def test_element_ids_in_reading_order_with_captions(vector_template):
    boxes = [e for e in vector_template.pages[0].elements if e.kind == "box"]
    assert [e.id for e in boxes[:3]] == ["box-001", "box-002", "box-003"]
    assert [e.caption for e in boxes[:4]] == ["Vessel name", "Call sign", "Flag", "Tonnage"]
    assert boxes[0].label() == "box 'Vessel name' (box-001)"

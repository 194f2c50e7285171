"""The JSON Schemas shipped in the package, checked with the jsonschema package (draft 2020-12).

Every record the other tests produce is validated too: see the hooks at the end of conftest.py.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import jsonschema
import pytest

import layoutcheck as lc
from conftest import VALIDATED
from layoutcheck.batch import RecordSink
from layoutcheck.template import FORMAT_VERSION

ROOT = Path(__file__).resolve().parent.parent


def validator(name: str) -> jsonschema.Draft202012Validator:
    return jsonschema.Draft202012Validator(lc.schema(name))


@pytest.mark.parametrize("name", lc.api.SCHEMAS)
def test_schemas_are_valid_json_schema_with_our_version(name):
    s = lc.schema(name)
    jsonschema.Draft202012Validator.check_schema(s)  # against the draft 2020-12 meta-schema
    assert s["x-schema-version"] == lc.SCHEMA_VERSION
    assert s["$id"] == f"urn:layoutcheck:schema:{name}:{lc.SCHEMA_VERSION}"


def test_template_schema_follows_the_template_format_version():
    # Every version this layoutcheck reads, and no other.
    assert lc.schema("template")["properties"]["format_version"]["enum"] == list(range(1, FORMAT_VERSION + 1))


@pytest.mark.parametrize("path", sorted((ROOT / "templates").glob("*.json")), ids=lambda p: p.name)
def test_shipped_templates_match_the_schema(path):
    validator("template").validate(json.loads(path.read_text(encoding="utf-8")))


def test_a_template_learned_from_samples_matches_the_schema(tmp_path):
    from conftest import draw_form

    a, b = draw_form(tmp_path / "a.pdf"), draw_form(tmp_path / "b.pdf", shift_mm=(1.0, 0.5))
    t = lc.learn([a, b], name="T-7")
    data = json.loads(json.dumps(t.to_dict()))
    validator("template").validate(data)
    # Both samples have every element: each was seen on 2 of 2.
    assert set(data["pages"][0]["seen"].values()) == {2}


def test_planted_faults_in_a_template_are_caught():
    data = json.loads((ROOT / "templates" / "KBH-101.json").read_text(encoding="utf-8"))
    data["pages"][0]["elements"][0]["kind"] = "sticker"
    errors = list(validator("template").iter_errors(data))
    assert [e.json_path for e in errors] == ["$.pages[0].elements[0].kind"]
    data["pages"][0]["elements"][0]["kind"] = "box"
    data["format_version"] = FORMAT_VERSION + 1
    assert [e.json_path for e in validator("template").iter_errors(data)] == ["$.format_version"]


def test_the_readme_zones_example_matches_the_schema():
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    (example,) = re.findall(r'^\s+(\{"zones": .*\})$', readme, flags=re.M)
    data = json.loads(example)
    validator("zones").validate(data)
    data["zones"][0]["name"] = "berth number"  # a space: the zones reader refuses it, so does the schema
    assert [e.json_path for e in validator("zones").iter_errors(data)] == ["$.zones[0].name"]


def test_planted_faults_in_a_record_are_caught():
    rec = lc.check_page(ROOT / "sample_forms" / "inputs" / "101_shifted.pdf", lc.load_templates(ROOT / "templates")).to_record()
    v = validator("record")
    v.validate(rec)
    bad = dict(rec, verdict="fine")
    assert [e.json_path for e in v.iter_errors(bad)] == ["$.verdict"]
    bad = {k: x for k, x in rec.items() if k != "support"}
    assert [e.message for e in v.iter_errors(bad)] == ["'support' is a required property"]
    bad = dict(rec, pose=dict(rec["pose"], shift_mm=[1.0]))
    assert [e.json_path for e in v.iter_errors(bad)] == ["$.pose"]  # oneOf: null or a pose, neither fits
    bad = dict(rec, colour="red")  # no field outside the schema
    assert len(list(v.iter_errors(bad))) == 1


def test_the_hooks_validate_records_as_they_leave_the_library(tmp_path):
    before = VALIDATED["records"]
    lc.check_page(ROOT / "sample_forms" / "inputs" / "101_exact.pdf", lc.load_templates(ROOT / "templates"))
    assert VALIDATED["records"] > before
    sink = RecordSink(str(tmp_path / "x.jsonl"))
    try:
        with pytest.raises(jsonschema.ValidationError, match="'template' is a required property"):
            sink.write({"source": "x.pdf", "page": 1})
    finally:
        sink.close()
    assert (tmp_path / "x.jsonl").read_text() == ""  # refused before anything was written

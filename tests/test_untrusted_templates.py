"""Template and zones files of hostile size or content: refused with one line, in bounded time and memory."""

from __future__ import annotations

import json
import resource

import pytest

from layoutcheck.template import (MAX_ITEMS_PER_PAGE, MAX_JSON_BYTES, TemplateError, load_template, save_template,
                                  template_from_dict)
from layoutcheck.zones import ZoneError, read_zone_file


@pytest.fixture(scope="module")
def good(tmp_path_factory):
    from pathlib import Path

    from layoutcheck.check import learn

    ref = Path(__file__).resolve().parents[1] / "sample_forms" / "references" / "KBH-101_vessel_arrival.pdf"
    return learn([str(ref)], with_raster=False)


def one_line(exc) -> str:
    text = str(exc.value)
    assert "\n" not in text and len(text) < 400
    return text


def test_gigabytes_are_refused_before_they_are_read(tmp_path):
    big = tmp_path / "big.json"
    with open(big, "wb") as fh:
        fh.truncate(2 * 1024 ** 3)  # 2 GB, sparse: costs no disk
    before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    with pytest.raises(TemplateError) as info:
        load_template(big)
    assert one_line(info) == "big.json: template is larger than 32 MB; not read"
    # At most the limit was read: the process grew by well under the 2 GB of the file.
    assert (resource.getrusage(resource.RUSAGE_SELF).ru_maxrss - before) * 1024 < 4 * MAX_JSON_BYTES


def test_a_device_that_never_ends_is_refused(tmp_path):
    with pytest.raises(TemplateError) as info:
        load_template("/dev/zero")
    assert one_line(info) == "zero: template is larger than 32 MB; not read"


def test_deep_nesting(tmp_path):
    p = tmp_path / "deep.json"
    p.write_text("[" * 1_000_000 + "]" * 1_000_000)
    with pytest.raises(TemplateError) as info:
        load_template(p)
    assert one_line(info) == "deep.json: template is nested too deeply to be a template"


def test_ten_million_elements(tmp_path, good):
    d = good.to_dict()
    p = tmp_path / "many.json"
    # Ten million elements in 20 MB: the smallest JSON value, 0, each (under the size limit).
    text = json.dumps(d).replace('"elements": [', '"elements": [' + "0," * 10_000_000, 1)
    p.write_text(text)
    assert p.stat().st_size < MAX_JSON_BYTES
    with pytest.raises(TemplateError) as info:
        load_template(p)
    assert one_line(info) == f"many.json: template page 1 has 10,000,{len(good.pages[0].elements):03d} elements, more than {MAX_ITEMS_PER_PAGE:,}"


@pytest.mark.parametrize("value, literal, at", [("NaN", True, 2), ("Infinity", True, 2), ("-Infinity", True, 0),
                                               (1e308, False, 2), (-3e4, False, 0)])
def test_coordinates_that_are_not_finite_or_absurd(tmp_path, good, value, literal, at):
    d = good.to_dict()
    p = tmp_path / "bad.json"
    text = json.dumps(d)
    first = d["pages"][0]["elements"][0]
    shown = json.dumps(first["frame"])
    new = shown.replace(str(first["frame"][at]), value if literal else repr(value), 1)
    p.write_text(text.replace(shown, new, 1))
    with pytest.raises(TemplateError) as info:
        load_template(p)
    msg = one_line(info)
    if literal:  # NaN and Infinity are not JSON (RFC 8259, section 6)
        assert msg.startswith("bad.json: template is not valid JSON") and value.lstrip("-") in msg
    else:
        assert msg == f"bad.json: template page 1 element {first['id']} has an invalid frame"


@pytest.mark.parametrize("change, message", [
    (lambda d: d["pages"][0].update(width=1e308), "template page 1 has an invalid size (each side must be above 0 and at most 14400 points)"),
    (lambda d: d["pages"][0].update(number=float("inf")), "template is damaged (OverflowError"),
    (lambda d: d["pages"][0]["elements"][0].update(frame=[1, 2, 3]), "template is damaged (ValueError: not enough values"),
    (lambda d: d["pages"][0]["elements"][0].update(frame=[10, 10, 5, 20]), "frame (10.0, 10.0, 5.0, 20.0) has negative size"),
    (lambda d: d["pages"][0]["elements"][0].update(kind="dragon"), "unknown kind 'dragon'"),
    (lambda d: d["pages"][0]["sections"][0].update(frame=[0, 0, 1e9, 1]), "section section-01 has an invalid frame"),
    (lambda d: d["pages"][0]["elements"][0].update(text=["a", "list"]), "element mark-001 has text that is not a string"),
    (lambda d: d["pages"][0].update(elements={"not": "a list"}), "template is damaged"),
    (lambda d: d.update(pages=[d["pages"][0]] * 1001), "template has 1,001 pages, more than 1,000"),
])
def test_wrong_types_and_values(good, change, message):
    d = json.loads(json.dumps(good.to_dict()))
    change(d)
    with pytest.raises(TemplateError) as info:
        template_from_dict(d, "t.json")
    assert one_line(info).startswith("t.json: ") and message in str(info.value)


def test_the_demo_templates_still_load():
    from pathlib import Path

    for f in sorted((Path(__file__).resolve().parents[1] / "templates").glob("*.json")):
        assert load_template(f).pages


def test_hostile_zones_files(tmp_path, good):
    for name, text, message in (
        ("deep.json", '{"a": ' * 100_000, "zones file is nested too deeply"),
        ("nan.json", '{"zones": [{"name": "a", "page": 1, "frame": [NaN, 0, 10, 10]}]}', "zones file is not valid JSON"),
        ("huge.json", '{"zones": [{"name": "a", "page": 1, "frame": [0, 0, 1e308, 10]}]}', "lies outside page 1"),
    ):
        p = tmp_path / name
        p.write_text(text)
        with pytest.raises(ZoneError) as info:
            read_zone_file(p, good)
        assert one_line(info).startswith(name) and message in str(info.value)
    big = tmp_path / "big.json"
    with open(big, "wb") as fh:
        fh.truncate(MAX_JSON_BYTES + 1)
    with pytest.raises(ZoneError) as info:
        read_zone_file(big, good)
    assert one_line(info) == "big.json: zones file is larger than 32 MB; not read"


def test_save_template_leaves_no_temporary_file_on_failure(tmp_path, good, monkeypatch):
    import errno
    import os

    real = os.replace

    def full(src, dst):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(os, "replace", full)
    with pytest.raises(OSError):
        save_template(good, tmp_path / "t.json")
    monkeypatch.setattr(os, "replace", real)
    assert list(tmp_path.iterdir()) == []

"""Fuzzing the template loader and the readers: bad bytes give clean errors, never a crash."""

from __future__ import annotations

import io
import json
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings, strategies as st

from layoutcheck.check import check_page
from layoutcheck.sources import PageError, RasterPage, VectorPage, read_pages
from layoutcheck.template import Template, TemplateError, load_template, template_from_dict

SAMPLES = Path(__file__).resolve().parents[1] / "sample_forms"
FAST = settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])


@pytest.fixture(scope="module")
def template_dict():
    from layoutcheck.check import learn

    return learn([str(SAMPLES / "references" / "KBH-101_vessel_arrival.pdf")], with_raster=False).to_dict()


junk = st.one_of(st.none(), st.booleans(), st.integers(-10**12, 10**12), st.floats(allow_nan=True),
                 st.text(max_size=5), st.lists(st.integers(), max_size=5), st.dictionaries(st.text(max_size=3), st.integers(), max_size=3))


def _paths(d, prefix=()):
    if isinstance(d, dict):
        for k, v in d.items():
            yield prefix + (k,)
            yield from _paths(v, prefix + (k,))
    elif isinstance(d, list):
        for i, v in enumerate(d[:3]):
            yield prefix + (i,)
            yield from _paths(v, prefix + (i,))


@FAST
@given(data=st.data())
def test_template_loader_mutations(template_dict, data):
    d = json.loads(json.dumps(template_dict))
    for _ in range(data.draw(st.integers(1, 3))):
        # Paths are listed again after each change: an earlier one may have replaced a parent.
        path = data.draw(st.sampled_from(list(_paths(d))))
        node = d
        for k in path[:-1]:
            node = node[k]
        node[path[-1]] = data.draw(junk)
    try:
        t = template_from_dict(d, "fuzz.json")
    except TemplateError as exc:
        assert str(exc).startswith("fuzz.json: ") and "\n" not in str(exc)
    else:
        assert isinstance(t, Template)


@FAST
@given(raw=st.binary(max_size=400))
def test_template_file_of_random_bytes(tmp_path, raw):
    p = tmp_path / "t.json"
    p.write_bytes(raw)
    with pytest.raises(TemplateError):
        load_template(p)


def mutate(data: bytes, draw) -> bytes:
    buf = bytearray(data)
    for _ in range(draw(st.integers(1, 8))):
        at = draw(st.integers(0, len(buf) - 1))
        buf[at:at + draw(st.integers(1, 16))] = draw(st.binary(min_size=1, max_size=16))
    if draw(st.booleans()):
        buf = buf[: draw(st.integers(0, len(buf)))]
    return bytes(buf)


def read_all(path) -> list:
    out = []
    for page in read_pages(path):
        assert isinstance(page, (VectorPage, RasterPage, PageError))
        out.append(check_page(page, []))  # no template: reading and extracting only
    return out


@FAST
@given(data=st.data())
def test_pdf_reader_mutations(tmp_path, data):
    p = tmp_path / "m.pdf"
    p.write_bytes(mutate((SAMPLES / "inputs" / "101_exact.pdf").read_bytes(), data.draw))
    for rec in read_all(p):
        assert rec["verdict"] in ("error", "unrecognised")
        if rec["verdict"] == "error":
            assert "m.pdf" in rec["error"] and "\n" not in rec["error"]


@pytest.fixture(scope="module")
def small_images():
    from PIL import Image

    rng = np.random.default_rng(0)
    arr = np.full((120, 90), 255, np.uint8)
    arr[20:22, 10:80] = 0
    arr[40:70, 10:12] = 0
    arr[rng.random(arr.shape) < 0.01] = 0
    out = {}
    for fmt, ext in (("PNG", "png"), ("JPEG", "jpg"), ("TIFF", "tif")):
        buf = io.BytesIO()
        Image.fromarray(arr).save(buf, format=fmt, dpi=(72, 72))
        out[ext] = buf.getvalue()
    return out


@FAST
@given(data=st.data())
def test_image_reader_mutations(tmp_path, small_images, data):
    ext = data.draw(st.sampled_from(sorted(small_images)))
    p = tmp_path / f"m.{ext}"
    p.write_bytes(mutate(small_images[ext], data.draw))
    for rec in read_all(p):
        assert rec["verdict"] in ("error", "unrecognised")
        if rec["verdict"] == "error":
            assert f"m.{ext}" in rec["error"] and "\n" not in rec["error"]

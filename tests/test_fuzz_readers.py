"""Every reader, 2,000 mutated files each: each file gives pages or one-line errors naming it.

Slow-marked (CI runs it). The seeds are small so each reader's run stays well under a minute:
a one-page PDF of drawn rules and text, a one-page PDF wrapping a scanned image, and small PNG,
JPEG and TIFF images. A PDF's vector page is parsed (its objects listed), so pdfminer's content
parser is fuzzed too, not only the file structure.
"""

from __future__ import annotations

import io
import os
import tempfile

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings, strategies as st

import hostile_corpus as H
from layoutcheck.sources import PageError, RasterPage, ReadLimits, VectorPage, read_pages
from test_fuzz import mutate  # one way of damaging a file, shared with the quick fuzz tests

RUNS = settings(max_examples=2000, deadline=None, database=None,
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
# Small limits keep a mutation that states a huge page or content cheap to refuse.
LIMITS = ReadLimits(max_pixels=4_000_000, max_pages=4, dpi=72.0, max_content_bytes=1 << 20, max_drawing_ops=20_000)


def _seed_image(fmt: str) -> bytes:
    from PIL import Image

    rng = np.random.default_rng(0)
    arr = np.full((60, 48), 255, np.uint8)
    arr[10:12, 5:40] = 0
    arr[20:50, 5:7] = 0
    arr[rng.random(arr.shape) < 0.01] = 0
    buf = io.BytesIO()
    Image.fromarray(arr).save(buf, format=fmt, dpi=(72, 72))
    return buf.getvalue()


def _seed_pdf(kind: str) -> bytes:
    with tempfile.TemporaryDirectory() as d:
        path = os.path.join(d, "seed.pdf")
        if kind == "vector":
            content = (b"0.8 w 40 700 m 550 700 l S 40 600 200 40 re S 300 600 200 40 re S "
                       b"BT /F1 10 Tf 42 645 Td (Vessel name) Tj ET\n")
            H.one_page_pdf(path, content, b"/Font << /F1 << /Type /Font /Subtype /Type1 /BaseFont /Helvetica >> >>")
        else:
            H.image_pdf(path, 48, 60, bytes(range(256)) * 12)
        with open(path, "rb") as fh:
            return fh.read()


SEEDS = {"pdf-vector": _seed_pdf("vector"), "pdf-scan": _seed_pdf("scan"),
         "png": _seed_image("PNG"), "jpeg": _seed_image("JPEG"), "tiff": _seed_image("TIFF")}
EXT = {"pdf-vector": "pdf", "pdf-scan": "pdf", "png": "png", "jpeg": "jpg", "tiff": "tif"}


def read_once(path: str) -> int:
    """Read every page; a vector page also goes through extraction, as in a batch."""
    from layoutcheck.check import check_page

    n = 0
    name = os.path.basename(path)
    for page in read_pages(path, LIMITS):
        n += 1
        assert isinstance(page, (VectorPage, RasterPage, PageError))
        if isinstance(page, PageError):
            assert page.message.startswith(name) and "\n" not in page.message
        elif isinstance(page, VectorPage):
            rec = check_page(page, [])  # no template: reading and extracting only
            assert rec["verdict"] in ("error", "unrecognised")
            assert rec["error"] is None or (rec["error"].startswith(name) and "\n" not in rec["error"])
        else:
            assert page.image.dtype == np.uint8 and page.image.ndim == 2 and min(page.image.shape) >= 16
    return n


@pytest.mark.slow
@pytest.mark.parametrize("reader", sorted(SEEDS))
def test_two_thousand_mutations_per_reader(reader, tmp_path):
    path = str(tmp_path / f"m.{EXT[reader]}")
    assert read_once(_write(path, SEEDS[reader])) >= 1  # the seed itself reads

    @RUNS
    @given(data=st.data())
    def run(data):
        with H.at_most(20):
            read_once(_write(path, mutate(SEEDS[reader], data.draw)))

    run()


def _write(path: str, data: bytes) -> str:
    with open(path, "wb") as fh:
        fh.write(data)
    return path

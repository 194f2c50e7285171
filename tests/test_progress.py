"""Progress of a batch: the total is known before the first page and grows as files are opened."""

from __future__ import annotations

import io
from pathlib import Path

from layoutcheck.batch import run_batch
from layoutcheck.cli import ProgressBar

ROOT = Path(__file__).resolve().parent.parent
INPUTS = ROOT / "sample_forms" / "inputs"


def two_pages(path: Path) -> Path:
    from pypdf import PdfReader, PdfWriter  # joins pages its own way

    w = PdfWriter()
    for name in ("101_exact.pdf", "101_shifted.pdf"):
        w.add_page(PdfReader(INPUTS / name).pages[0])
    with open(path, "wb") as fh:
        w.write(fh)
    return path


def test_totals_start_at_the_file_count_and_grow(tmp_path, vector_template):
    files = [str(INPUTS / "101_exact.pdf"), str(two_pages(tmp_path / "two.pdf")), str(INPUTS / "101_rotated.pdf")]
    seen = []
    run_batch(files, [vector_template], progress=lambda done, total: seen.append((done, total)))
    # Three files, taken as a page each until opened; the second has two pages.
    assert seen == [(1, 3), (2, 4), (3, 4), (4, 4)]


def test_the_bar_shows_pages_rate_and_time_left():
    out = io.StringIO()
    bar = ProgressBar(3, stream=out)
    bar.update_to(1, 3)
    bar.update_to(3, 5)
    assert bar.bar.total == 5 and bar.bar.n == 3
    bar.close()
    text = out.getvalue()
    last = text.split("\r")[-1]
    assert "3 file(s)" in last and "3/5" in last and "page/s" in last and "<" in last  # elapsed<left

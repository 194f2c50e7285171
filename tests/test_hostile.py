"""Hostile and broken input: each bad file yields a clean record naming it, and the batch goes on."""

from __future__ import annotations

import json
import os
import shutil
import struct
import time
import zlib
from pathlib import Path

import numpy as np
import pytest

import hostile_corpus as H
from layoutcheck.batch import BatchOptions, run_batch
from layoutcheck.check import check_page, learn
from layoutcheck.sources import ReadLimits, read_pages

SAMPLES = Path(__file__).resolve().parents[1] / "sample_forms"
EXACT = SAMPLES / "inputs" / "101_exact.pdf"


@pytest.fixture(scope="module")
def templates():
    return [learn([str(SAMPLES / "references" / "KBH-101_vessel_arrival.pdf")])]


def records(path, templates, limits=ReadLimits()):
    return [check_page(p, templates) for p in read_pages(path, limits)]


def only_error(path, templates, limits=ReadLimits()):
    (rec,) = records(path, templates, limits)
    assert rec["verdict"] == "error" and rec["error"] == rec["findings"][0]["message"]
    assert "\n" not in rec["error"] and Path(path).name in rec["error"]
    return rec


# -- makers ---------------------------------------------------------------------------------------
def png_chunk(kind: bytes, data: bytes) -> bytes:
    # PNG chunk layout: length, type, data, CRC-32 over type and data (PNG specification, ISO/IEC 15948).
    return struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data) & 0xFFFFFFFF)


def png_header_only(path: Path, width: int, height: int) -> Path:
    """A PNG that declares width x height (8-bit grey) but carries one tiny IDAT."""
    sig = b"\x89PNG\r\n\x1a\n"  # the PNG signature (ISO/IEC 15948)
    ihdr = struct.pack(">IIBBBBB", width, height, 8, 0, 0, 0, 0)
    path.write_bytes(sig + png_chunk(b"IHDR", ihdr) + png_chunk(b"IDAT", zlib.compress(b"\x00" * 16)) + png_chunk(b"IEND", b""))
    return path


def rendered_101(dpi=100) -> np.ndarray:
    from layoutcheck.sources import render_page_image

    return render_page_image(str(EXACT), 1, dpi)


def save_image(path: Path, arr: np.ndarray, dpi=100, **kw) -> Path:
    from PIL import Image

    Image.fromarray(arr).save(path, dpi=(dpi, dpi), **kw)
    return path


def corrupt_tiff(path: Path) -> Path:
    """Three frames of a 100 dpi scan; the second frame's compressed strips are overwritten."""
    from PIL import Image

    img = Image.fromarray(rendered_101())
    img.save(path, save_all=True, append_images=[img.copy(), img.copy()], compression="tiff_deflate", dpi=(100, 100))
    with Image.open(path) as im:
        im.seek(1)
        # TIFF 6.0 tags 273 StripOffsets and 279 StripByteCounts locate the frame's data.
        strips = list(zip(im.tag_v2[273], im.tag_v2[279]))
    data = bytearray(path.read_bytes())
    for off, n in strips:
        data[off + n // 4: off + n // 2] = b"\xa5" * (n // 2 - n // 4)  # garbage inside the deflate stream
    path.write_bytes(bytes(data))
    return path


def blank_pdf(path: Path, pages: int) -> Path:
    from pypdf import PdfWriter

    w = PdfWriter()
    for _ in range(pages):
        w.add_blank_page(595.276, 841.89)  # A4 in points (ISO 216: 210 x 297 mm; 1 pt = 1/72 in)
    with open(path, "wb") as fh:
        w.write(fh)
    return path


def encrypted(path: Path, password="harbour") -> Path:
    from pypdf import PdfWriter

    w = PdfWriter(clone_from=str(EXACT))
    w.encrypt(password)
    with open(path, "wb") as fh:
        w.write(fh)
    return path


def slow_pdf(path: Path, lines=40000) -> Path:
    """A page of tens of thousands of drawn strokes: seconds to read, however fast the machine."""
    from reportlab.pdfgen import canvas

    rng = np.random.default_rng(1)
    c = canvas.Canvas(str(path), pagesize=(595, 842))
    for x, y, d in zip(rng.uniform(0, 590, lines), rng.uniform(0, 840, lines), rng.uniform(1, 5, lines)):
        c.line(float(x), float(y), float(x + d), float(y))
    c.showPage()
    c.save()
    return path


# -- one case at a time ---------------------------------------------------------------------------
def test_zero_byte_file(tmp_path, templates):
    p = tmp_path / "empty.pdf"
    p.write_bytes(b"")
    assert "empty file (0 bytes)" in only_error(p, templates)["error"]


def test_text_named_pdf(tmp_path, templates):
    p = tmp_path / "notes.pdf"
    p.write_text("Kestrel Bay Harbour Board: berth list for Tuesday\n")
    assert "not a PDF" in only_error(p, templates)["error"]


def test_truncated_pdf(tmp_path, templates):
    p = tmp_path / "cut.pdf"
    data = EXACT.read_bytes()
    p.write_bytes(data[: len(data) // 3])
    recs = records(p, templates)
    assert recs and all(r["verdict"] == "error" and "cut.pdf" in r["error"] for r in recs)


def test_broken_page_tree_zero_pages(tmp_path, templates):
    rec = only_error(blank_pdf(tmp_path / "nopages.pdf", 0), templates)
    assert rec["page"] is None and "no pages" in rec["error"]


def test_encrypted_pdf_needs_password(tmp_path, templates):
    p = encrypted(tmp_path / "locked.pdf")
    assert "encrypted; give --password" in only_error(p, templates)["error"]
    assert "password is wrong" in only_error(p, templates, ReadLimits(password="nope"))["error"]
    (rec,) = records(p, templates, ReadLimits(password="harbour"))
    assert rec["verdict"] == "pass" and rec["template"] == "KBH-101"


def test_truncated_png_and_jpeg(tmp_path, templates):
    img = rendered_101()
    for name in ("cut.png", "cut.jpg"):
        full = save_image(tmp_path / name, img)
        data = full.read_bytes()
        full.write_bytes(data[: len(data) // 2])
        rec = only_error(full, templates)
        assert rec["page"] == 1 and "damaged" in rec["error"]


def test_tiff_with_corrupt_frame_keeps_the_good_ones(tmp_path, templates):
    recs = records(corrupt_tiff(tmp_path / "three.tif"), templates)
    assert [r["page"] for r in recs] == [1, 2, 3]
    assert recs[1]["verdict"] == "error" and "three.tif page 2" in recs[1]["error"]
    for r in (recs[0], recs[2]):
        assert r["verdict"] != "error" and r["template"] == "KBH-101"


def test_one_pixel_image(tmp_path, templates):
    p = save_image(tmp_path / "dot.png", np.zeros((1, 1), np.uint8))
    assert "1 x 1 pixels is too small" in only_error(p, templates)["error"]


def test_huge_declared_image_is_refused_before_decoding(tmp_path, templates):
    # 100000 x 100000 is 10 billion pixels: refused from the header alone.
    rec = only_error(png_header_only(tmp_path / "huge.png", 100_000, 100_000), templates)
    assert "pixel limit" in rec["error"]
    # Under Pillow's own guard but over ours: our limit refuses it, by its number.
    rec = only_error(png_header_only(tmp_path / "big.png", 5000, 5000), templates, ReadLimits(max_pixels=1_000_000))
    assert "5000 x 5000 pixels is over the limit of 1,000,000 pixels" in rec["error"]


def test_black_blank_and_photo_pages_are_unrecognised(tmp_path, templates):
    """Decision: a page that was read but holds no form is "unrecognised", with one finding saying
    why; "error" is kept for input that could not be read."""
    shape = (1169, 827)  # A4 at 100 dpi: 297 x 210 mm / 25.4 mm per inch * 100 (ISO 216)
    (black,) = records(save_image(tmp_path / "black.png", np.zeros(shape, np.uint8)), templates)
    assert black["verdict"] == "unrecognised" and "almost all black" in black["findings"][0]["message"]
    (white,) = records(save_image(tmp_path / "white.png", np.full(shape, 255, np.uint8)), templates)
    assert white["verdict"] == "unrecognised" and "blank page" in white["findings"][0]["message"]
    (vec,) = records(blank_pdf(tmp_path / "blank.pdf", 1), templates)
    assert vec["verdict"] == "unrecognised" and "no lines, boxes or text" in vec["findings"][0]["message"]
    from skimage import color, data  # scikit-image's bundled test photograph

    photo = (color.rgb2gray(data.astronaut()) * 255).astype(np.uint8)
    (ph,) = records(save_image(tmp_path / "photo.png", photo, dpi=72), templates)
    assert ph["verdict"] == "unrecognised" and ph["support"] < 0.5 and ph["template"] is None
    for r in (black, white, vec, ph):
        assert r["error"] is None and r["pose"] is None


def test_ten_thousand_pages_bounded_by_max_pages(tmp_path, templates):
    p = blank_pdf(tmp_path / "long.pdf", 10_000)
    recs = records(p, templates, ReadLimits(max_pages=3))
    assert [r["page"] for r in recs] == [1, 2, 3, 4]
    assert [r["verdict"] for r in recs] == ["unrecognised"] * 3 + ["error"]
    assert "long.pdf page 4: file has 10000 pages, more than 3" in recs[3]["error"]


def test_page_timeout_replaces_the_worker(tmp_path, templates):
    slow = slow_pdf(tmp_path / "slow.pdf")
    good = tmp_path / "good.pdf"
    shutil.copy(EXACT, good)
    out = tmp_path / "out.jsonl"
    res = run_batch([str(good), str(slow), str(good)], templates, output=str(out),
                    options=BatchOptions(jobs=1, page_timeout=1.5, keep_records=True))
    verdicts = [r["verdict"] for r in res.records]
    assert verdicts == ["pass", "error", "pass"]  # the third page ran on a fresh worker
    assert "slow.pdf page 1: took longer than the page time limit of 1.5 s (--page-timeout)" in res.records[1]["error"]


# -- all in one batch -----------------------------------------------------------------------------
def test_all_hostile_inputs_in_one_batch(tmp_path, templates):
    d = tmp_path / "in"
    d.mkdir()
    (d / "a_empty.pdf").write_bytes(b"")
    (d / "b_text.pdf").write_text("not a form\n")
    cut = EXACT.read_bytes()
    (d / "c_cut.pdf").write_bytes(cut[: len(cut) // 3])
    blank_pdf(d / "d_nopages.pdf", 0)
    encrypted(d / "e_locked.pdf")
    png = save_image(d / "f_cut.png", rendered_101())
    png.write_bytes(png.read_bytes()[:5000])
    corrupt_tiff(d / "g_three.tif")
    save_image(d / "h_dot.png", np.zeros((1, 1), np.uint8))
    png_header_only(d / "i_huge.png", 100_000, 100_000)
    save_image(d / "j_black.png", np.zeros((600, 400), np.uint8))
    blank_pdf(d / "k_long.pdf", 10_000)
    shutil.copy(EXACT, d / "z_good.pdf")
    out = tmp_path / "out.jsonl"
    files = sorted(str(p) for p in d.iterdir())
    res = run_batch(files, templates, limits=ReadLimits(max_pages=2), output=str(out),
                    options=BatchOptions(jobs=2, keep_records=True))
    got = [(Path(r["source"]).name, r["page"], r["verdict"]) for r in res.records]
    assert got == [
        ("a_empty.pdf", None, "error"), ("b_text.pdf", None, "error"),
        *[g for g in got if g[0] == "c_cut.pdf"],
        ("d_nopages.pdf", None, "error"), ("e_locked.pdf", None, "error"), ("f_cut.png", 1, "error"),
        ("g_three.tif", 1, got[[g[:2] for g in got].index(("g_three.tif", 1))][2]), ("g_three.tif", 2, "error"),
        ("g_three.tif", 3, "error"),
        ("h_dot.png", 1, "error"), ("i_huge.png", None, "error"), ("j_black.png", 1, "unrecognised"),
        ("k_long.pdf", 1, "unrecognised"), ("k_long.pdf", 2, "unrecognised"), ("k_long.pdf", 3, "error"),
        ("z_good.pdf", 1, "pass"),
    ]
    assert [g for g in got if g[0] == "c_cut.pdf"] and all(g[2] == "error" for g in got if g[0] == "c_cut.pdf")
    # max_pages=2 stops the TIFF after its second frame, with a record saying so.
    assert got[[g[:2] for g in got].index(("g_three.tif", 1))][2] != "error"
    assert len(out.read_text().splitlines()) == len(res.records)
    for r in res.records:
        if r["verdict"] == "error":
            assert Path(r["source"]).name in r["error"]


# -- the hostile corpus (tests/hostile_corpus.py): one kind each ----------------------------------
def error_of(path, templates, limits=ReadLimits()) -> str:
    rec = only_error(path, templates, limits)
    return rec["error"]


def test_flate_bomb_in_a_content_stream(tmp_path, templates):
    bomb = H.content_bomb(tmp_path / "bomb.pdf", mb=120)  # the size of the bomb that took minutes
    assert error_of(bomb, templates) == "bomb.pdf page 1: content is over the limit of 8 MB decoded (--max-content-mb); not read"


def test_forms_that_multiply_and_forms_that_loop(tmp_path, templates):
    # 100 lines of 3 operations in a form drawn 100 times by a form the page draws 100 times:
    # 3 million operations from 1.5 KB of file.
    many = H.form_multiplier(tmp_path / "many.pdf", lines=100, uses=100, depth=2)
    assert error_of(many, templates) == "many.pdf page 1: draws over the limit of 250,000 path operations (--max-drawing-ops); not read"
    assert "form XObjects draw each other in a loop" in error_of(H.form_loop(tmp_path / "loop.pdf"), templates)


def test_flate_bomb_in_an_image_stream_is_decoded_only_as_far_as_its_size(tmp_path, templates):
    # 2000 x 2000 pixels stated; the stream would inflate to 100 MB. The page is read as a scan
    # of 4 million pixels (a blank one), not 100 MB.
    data = zlib.compress(b"\xff" * (100 << 20), 1)
    (rec,) = records(H.image_pdf(tmp_path / "ibomb.pdf", 2000, 2000, data), templates)
    assert rec["verdict"] == "unrecognised" and "blank page" in rec["findings"][0]["message"]


@pytest.mark.parametrize("filter_", [b"/JBIG2Decode", b"/JPXDecode"], ids=["jbig2", "jpx"])
def test_image_of_absurd_stated_size(tmp_path, templates, filter_):
    p = H.absurd_image(tmp_path / "absurd.pdf", filter_)
    assert error_of(p, templates) == ("absurd.pdf page 1: an image of 1000000 x 1000000 pixels is over the limit "
                                      "of 300,000,000 pixels; not decoded")


def test_hundred_thousand_empty_pages(tmp_path, templates):
    recs = records(H.many_pages(tmp_path / "long.pdf"), templates, ReadLimits(max_pages=2))
    assert [r["verdict"] for r in recs] == ["unrecognised", "unrecognised", "error"]
    assert "long.pdf page 3: file has 100000 pages, more than 2" in recs[2]["error"]


LOOPS = [H.page_tree_loop, H.xref_loop, H.self_reference, H.reference_cycle, H.root_self_reference,
         H.resources_self_reference]


@pytest.mark.parametrize("maker", LOOPS, ids=[m.__name__ for m in LOOPS])
def test_loops_in_a_pdf(tmp_path, templates, maker):
    # pdfminer follows a reference that names itself forever; the page time limit of a batch
    # would stop it after a minute, but reading must say so at once (within 10 s here, or fail).
    with H.at_most(10, f"reading {maker.__name__}"):
        recs = records(maker(tmp_path / "loop.pdf"), templates)
    assert recs and all(r["verdict"] == "error" and r["error"].startswith("loop.pdf") for r in recs)
    assert all("\n" not in r["error"] for r in recs)
    if maker not in (H.page_tree_loop, H.xref_loop):
        assert all("a chain of references back to itself" in r["error"] for r in recs), recs


def test_png_with_huge_ztxt_chunk(tmp_path, templates):
    assert "ztxt.png" in error_of(H.png_ztxt_bomb(tmp_path / "ztxt.png"), templates)


def test_jpeg_with_truncated_scan(tmp_path, templates):
    assert error_of(H.jpeg_truncated_scan(tmp_path / "cut.jpg"), templates).startswith("cut.jpg page 1: image data is damaged")


def test_tiff_of_ten_thousand_tiny_frames(tmp_path, templates):
    recs = records(H.tiff_many_frames(tmp_path / "frames.tif"), templates, ReadLimits(max_pages=3))
    assert [r["error"] for r in recs] == [f"frames.tif page {n}: 8 x 8 pixels is too small to be a page" for n in (1, 2, 3)] + [
        "frames.tif page 4: file has 10000 pages, more than 3; pages 4-10000 are not read (raise --max-pages)"]


def test_one_by_hundred_thousand_strip(tmp_path, templates):
    assert error_of(H.strip_image(tmp_path / "strip.png"), templates) == "strip.png page 1: 100000 x 1 pixels is too small to be a page"


def test_tiff_with_wrong_strip_byte_counts(tmp_path, templates):
    assert error_of(H.tiff_wrong_strip_counts(tmp_path / "strips.tif"), templates).startswith("strips.tif page 1: image data is damaged")


def test_symlink_loop_and_pipe(tmp_path, templates):
    assert error_of(H.symlink_loop(tmp_path / "loop.pdf"), templates) == \
        "loop.pdf: a symbolic link that leads nowhere (a loop, or its target is missing)"
    os.mkfifo(tmp_path / "pipe.pdf")  # opening it to read would wait for a writer forever
    assert error_of(tmp_path / "pipe.pdf", templates) == "pipe.pdf: not a regular file (a pipe or a device?)"


def without_file_override() -> list[str]:
    """A command prefix under which even root obeys file permissions (no CAP_DAC_OVERRIDE)."""
    if os.geteuid() != 0:
        return []
    if not shutil.which("setpriv"):
        pytest.skip("running as root, and no setpriv to drop the capability that lets root read any file")
    return ["setpriv", "--inh-caps=-all", "--bounding-set=-dac_override,-dac_read_search", "--"]


def test_folder_with_a_permission_denied_file(tmp_path):
    import subprocess
    import sys

    d = tmp_path / "in"
    d.mkdir()
    H.unreadable(d / "a_locked.pdf")
    shutil.copy(EXACT, d / "b_good.pdf")
    out = tmp_path / "out.jsonl"
    root = Path(__file__).resolve().parents[1]
    cmd = without_file_override() + [sys.executable, "-m", "layoutcheck.cli", "verify", str(root / "templates" / "KBH-101.json"),
                                     str(d), "--json", str(out), "-q", "--page-timeout", "0", "--max-memory", "0"]
    res = subprocess.run(cmd, cwd=root, capture_output=True, text=True, timeout=120, env=dict(os.environ, PYTHONPATH=str(root)))
    assert res.returncode == 1, res.stderr
    recs = [json.loads(x) for x in out.read_text().splitlines()]
    assert [(Path(r["source"]).name, r["verdict"]) for r in recs] == [("a_locked.pdf", "error"), ("b_good.pdf", "pass")]
    assert recs[0]["page"] is None and recs[0]["error"] == "a_locked.pdf: cannot be opened (Permission denied)"


def test_file_that_grows_while_it_is_read(tmp_path, templates):
    import threading

    p = tmp_path / "growing.pdf"
    shutil.copy(EXACT, p)
    stop = threading.Event()

    def grow():
        with open(p, "ab") as fh:
            while not stop.is_set():
                fh.write(b"%% more bytes arriving\n" * 2000)
                fh.flush()
                time.sleep(0.005)

    t = threading.Thread(target=grow)
    t.start()
    try:
        recs = records(p, templates)
    finally:
        stop.set()
        t.join()
    # Bytes appended after the end of the file change nothing a reader uses (ISO 32000-1, 7.5.5:
    # readers look for the last startxref near the end, then follow it).
    assert [r["verdict"] for r in recs] == ["pass"] or all(r["verdict"] == "error" and "growing.pdf" in r["error"] for r in recs)


def test_names_with_a_newline_and_bytes_that_are_not_utf8(tmp_path, templates):
    d = tmp_path / "in"
    d.mkdir()
    odd = [H.odd_name(d, b"line\nbreak.pdf"), H.odd_name(d, b"caf\xe9.pdf")]
    (d / "z\nbad.pdf").write_bytes(b"not a pdf")
    out = tmp_path / "out.jsonl"
    here = dict(page_timeout=None, memory_mb=None)  # in this process: what matters is the writing
    res = run_batch(sorted(str(p) for p in d.iterdir()), templates, output=str(out),
                    options=BatchOptions(keep_records=True, **here))
    assert [r["verdict"] for r in res.records] == ["pass", "pass", "error"]
    assert res.records[2]["error"] == "z\\nbad.pdf: not a PDF (no %PDF header)"
    back = [json.loads(x) for x in out.read_bytes().splitlines()]  # every line is valid JSON
    assert [r["source"] for r in back] == [str(p) for p in sorted(odd)] + [str(d / "z\nbad.pdf")]
    # A resumed run finds every page done: the names read back equal the names given.
    again = run_batch(sorted(str(p) for p in d.iterdir()), templates, output=str(out), options=BatchOptions(resume=True, **here))
    assert again.skipped == 3 and again.written == 0

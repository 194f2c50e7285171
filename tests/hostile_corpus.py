"""Makers of hostile input files, one per kind, for the tests and ``bench/bench_hostile.py``.

Each maker writes one file (or link) into a folder and returns its path. PDFs are written byte by
byte from the object syntax of the PDF format (ISO 32000-1, section 7), so each can hold exactly
the fault it plants. ``CORPUS`` lists every kind with its maker.
"""

from __future__ import annotations

import contextlib
import io
import os
import shutil
import signal
import struct
import zlib
from pathlib import Path

import numpy as np

SAMPLES = Path(__file__).resolve().parents[1] / "sample_forms"
EXACT = SAMPLES / "inputs" / "101_exact.pdf"
A4_PT = (595, 842)  # ISO 216 A4, 210 x 297 mm, in points of 1/72 in (rounded)


class Hung(BaseException):
    """Raised by :func:`at_most`: not an ``Exception``, so no reader turns it into an error record."""


@contextlib.contextmanager
def at_most(seconds: int, what: str = "reading"):
    """Fail a read that does not end within ``seconds``: a reader caught in a loop would hang the
    suite, and the batch's page time limit is not there to stop it in the test's process."""
    def hung(*_):
        raise Hung(f"{what} did not end within {seconds} s")

    old = signal.signal(signal.SIGALRM, hung)
    signal.alarm(seconds)
    try:
        yield
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, old)


# -- PDF bytes ------------------------------------------------------------------------------------
def stream(attrs: bytes, data: bytes, flate: bool = True) -> bytes:
    """A stream object's body: dictionary, ``stream``, data, ``endstream`` (ISO 32000-1, 7.3.8)."""
    if flate:
        data = zlib.compress(data, 9)
        attrs += b" /Filter /FlateDecode"
    return b"<< " + attrs + b" /Length %d >>\nstream\n" % len(data) + data + b"\nendstream"


def raw_pdf(path: Path, objects: list[bytes], root: int = 1, trailer: bytes = b"", xref_prev: int | None = None) -> Path:
    """A PDF of numbered objects 1..n with a classic cross-reference table (ISO 32000-1, 7.5.4)."""
    out = bytearray(b"%PDF-1.7\n%\xe2\xe3\xcf\xd3\n")
    offsets = []
    for i, body in enumerate(objects, 1):
        offsets.append(len(out))
        out += b"%d 0 obj\n" % i + body + b"\nendobj\n"
    xref = len(out)
    out += b"xref\n0 %d\n0000000000 65535 f \n" % (len(objects) + 1)
    out += b"".join(b"%010d 00000 n \n" % o for o in offsets)
    prev = b" /Prev %d" % (xref if xref_prev == -1 else xref_prev) if xref_prev is not None else b""
    out += b"trailer\n<< /Size %d /Root %d 0 R%s %s>>\nstartxref\n%d\n%%%%EOF\n" % (len(objects) + 1, root, prev, trailer, xref)
    Path(path).write_bytes(bytes(out))
    return Path(path)


def one_page_pdf(path: Path, content: bytes, resources: bytes = b"", extra: list[bytes] = ()) -> Path:
    """Catalog (1), Pages (2), one A4 Page (3), its content (4), then ``extra`` objects (5, ...)."""
    objs = [b"<< /Type /Catalog /Pages 2 0 R >>", b"<< /Type /Pages /Kids [3 0 R] /Count 1 >>",
            b"<< /Type /Page /Parent 2 0 R /MediaBox [0 0 %d %d] /Contents 4 0 R /Resources << %s >> >>" % (*A4_PT, resources),
            stream(b"", content), *extra]
    return raw_pdf(path, objs)


def content_bomb(path: Path, mb: int = 120) -> Path:
    """A page whose content stream is a few hundred KB compressed and ``mb`` MB inflated."""
    return one_page_pdf(path, b"0 0 m 1 1 l S\n" * (mb * 1024 * 1024 // 14))


def form_multiplier(path: Path, lines: int = 100, uses: int = 400, depth: int = 2) -> Path:
    """Small content, many operations: form XObjects each drawing the one below ``uses`` times."""
    base = b"".join(b"%d 10 m %d 20 l S\n" % (k, k) for k in range(lines))
    extra, first = [], 5
    for level in range(depth):
        n = first + level
        if level == 0:
            body = base
            res = b""
        else:
            body = b"q /F%d Do Q\n" % (level - 1) * uses
            res = b"/Resources << /XObject << /F%d %d 0 R >> >>" % (level - 1, n - 1)
        extra.append(stream(b"/Type /XObject /Subtype /Form /BBox [0 0 595 842] " + res, body))
    top = depth - 1
    content = b"q /F%d Do Q\n" % top * uses
    return one_page_pdf(path, content, b"/XObject << /F%d %d 0 R >>" % (top, first + top), extra)


def form_loop(path: Path) -> Path:
    """A form XObject that draws itself."""
    form = stream(b"/Type /XObject /Subtype /Form /BBox [0 0 595 842] /Resources << /XObject << /Me 5 0 R >> >>",
                  b"0 0 m 5 5 l S /Me Do\n")
    return one_page_pdf(path, b"/Me Do\n", b"/XObject << /Me 5 0 R >>", [form])


def image_pdf(path: Path, width: int, height: int, data: bytes, filter_: bytes = b"/FlateDecode") -> Path:
    """One page covered by one image XObject stating ``width`` x ``height`` pixels."""
    img = (b"<< /Type /XObject /Subtype /Image /Width %d /Height %d /ColorSpace /DeviceGray /BitsPerComponent %d "
           b"/Filter %s /Length %d >>\nstream\n" % (width, height, 1 if b"JBIG2" in filter_ else 8, filter_, len(data))
           + data + b"\nendstream")
    return one_page_pdf(path, b"q %d 0 0 %d 0 0 cm /Im Do Q\n" % A4_PT, b"/XObject << /Im 5 0 R >>", [img])


def image_stream_bomb(path: Path, mb: int = 400) -> Path:
    """A 10,000 x 10,000 image (under the pixel limit) whose stream inflates to ``mb`` MB."""
    comp = zlib.compressobj(9)
    chunk = b"\xff" * (1 << 20)
    data = b"".join(comp.compress(chunk) for _ in range(mb)) + comp.flush()
    return image_pdf(path, 10_000, 10_000, data)


def absurd_image(path: Path, filter_: bytes) -> Path:
    """A JBIG2 or JPX image stating 1,000,000 x 1,000,000 pixels, with a few bytes of data."""
    return image_pdf(path, 1_000_000, 1_000_000, b"\x00" * 64, filter_)


def many_pages(path: Path, n: int = 100_000) -> Path:
    """``n`` empty A4 pages sharing one empty content stream."""
    kids = b" ".join(b"%d 0 R" % (4 + k) for k in range(n))
    objs = [b"<< /Type /Catalog /Pages 2 0 R >>", b"<< /Type /Pages /Kids [" + kids + b"] /Count %d >>" % n, stream(b"", b"")]
    page = b"<< /Type /Page /Parent 2 0 R /MediaBox [0 0 %d %d] /Contents 3 0 R >>" % A4_PT
    return raw_pdf(path, objs + [page] * n)


def page_tree_loop(path: Path) -> Path:
    """A Pages node whose kid is a Pages node whose kid is the first again."""
    objs = [b"<< /Type /Catalog /Pages 2 0 R >>", b"<< /Type /Pages /Kids [3 0 R] /Count 1 >>",
            b"<< /Type /Pages /Parent 2 0 R /Kids [2 0 R] /Count 1 >>"]
    return raw_pdf(path, objs)


def self_reference(path: Path) -> Path:
    """A page tree whose Pages object is a reference to itself (``2 0 obj 2 0 R``): a damaged
    cross-reference table makes one out of any file (found by the fuzz test)."""
    objs = [b"<< /Type /Catalog /Pages 2 0 R >>", b"2 0 R",
            b"<< /Type /Page /Parent 2 0 R /MediaBox [0 0 595 842] >>"]
    return raw_pdf(path, objs)


def reference_cycle(path: Path) -> Path:
    """A catalog whose Pages is object 2, whose value is object 3, whose value is object 2."""
    objs = [b"<< /Type /Catalog /Pages 2 0 R >>", b"3 0 R", b"2 0 R"]
    return raw_pdf(path, objs)


def root_self_reference(path: Path) -> Path:
    """A trailer whose Root is an object that is a reference to itself."""
    return raw_pdf(path, [b"1 0 R"])


def resources_self_reference(path: Path) -> Path:
    """A drawn page whose Resources is an object that is a reference to itself."""
    objs = [b"<< /Type /Catalog /Pages 2 0 R >>", b"<< /Type /Pages /Kids [3 0 R] /Count 1 >>",
            b"<< /Type /Page /Parent 2 0 R /MediaBox [0 0 %d %d] /Contents 4 0 R /Resources 5 0 R >>" % A4_PT,
            stream(b"", b"0.8 w 40 700 m 550 700 l S 40 600 200 40 re S"), b"5 0 R"]
    return raw_pdf(path, objs)


def xref_loop(path: Path) -> Path:
    """A cross-reference table whose /Prev points at itself."""
    objs = [b"<< /Type /Catalog /Pages 2 0 R >>", b"<< /Type /Pages /Kids [3 0 R] /Count 1 >>",
            b"<< /Type /Page /Parent 2 0 R /MediaBox [0 0 595 842] >>"]
    return raw_pdf(path, objs, xref_prev=-1)


# -- images ---------------------------------------------------------------------------------------
def png_chunk(kind: bytes, data: bytes) -> bytes:
    # PNG chunk layout: length, type, data, CRC-32 over type and data (PNG specification, ISO/IEC 15948).
    return struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data) & 0xFFFFFFFF)


def rendered_101(dpi: int = 100) -> np.ndarray:
    from layoutcheck.sources import render_page_image

    return render_page_image(str(EXACT), 1, dpi)


def save_image(path: Path, arr: np.ndarray, dpi: int = 100, **kw) -> Path:
    from PIL import Image

    Image.fromarray(arr).save(path, dpi=(dpi, dpi), **kw)
    return Path(path)


def png_ztxt_bomb(path: Path, mb: int = 200) -> Path:
    """A good page as PNG, with a zTXt chunk that inflates to ``mb`` MB before its IDAT."""
    buf = io.BytesIO()
    from PIL import Image

    Image.fromarray(rendered_101()).save(buf, format="PNG", dpi=(100, 100))
    data = buf.getvalue()
    comp = zlib.compressobj(9)
    text = b"".join(comp.compress(b"A" * (1 << 20)) for _ in range(mb)) + comp.flush()
    chunk = png_chunk(b"zTXt", b"Comment\x00\x00" + text)
    at = data.index(b"IDAT") - 4
    Path(path).write_bytes(data[:at] + chunk + data[at:])
    return Path(path)


def jpeg_truncated_scan(path: Path) -> Path:
    """A JPEG cut a little after its start-of-scan marker (0xFFDA, ITU-T T.81)."""
    save_image(path, rendered_101(), quality=90)
    data = Path(path).read_bytes()
    Path(path).write_bytes(data[: data.index(b"\xff\xda") + 200])
    return Path(path)


def tiff_many_frames(path: Path, n: int = 10_000) -> Path:
    """A multi-page TIFF of ``n`` frames of 8 x 8 white pixels, all sharing one strip.

    Written by hand (TIFF 6.0: little-endian header, one IFD of 12-byte entries per frame, each
    linking to the next), since writing 10,000 frames through an image library takes minutes.
    """
    strip_at, res_at, first = 8, 8 + 64, 8 + 64 + 8
    entries = [(256, 3, 1, 8), (257, 3, 1, 8), (258, 3, 1, 8), (259, 3, 1, 1), (262, 3, 1, 1),
               (273, 4, 1, strip_at), (278, 3, 1, 8), (279, 4, 1, 64), (282, 5, 1, res_at), (283, 5, 1, res_at),
               (296, 3, 1, 2)]
    size = 2 + 12 * len(entries) + 4
    out = bytearray(b"II*\x00" + struct.pack("<I", first) + b"\xff" * 64 + struct.pack("<II", 100, 1))
    for k in range(n):
        nxt = first + (k + 1) * size if k + 1 < n else 0
        out += struct.pack("<H", len(entries))
        for tag, typ, count, value in entries:
            out += struct.pack("<HHII", tag, typ, count, value) if typ in (4, 5) else struct.pack("<HHIHH", tag, typ, count, value, 0)
        out += struct.pack("<I", nxt)
    Path(path).write_bytes(bytes(out))
    return Path(path)


def strip_image(path: Path) -> Path:
    """A 1 x 100,000 pixel PNG."""
    return save_image(path, np.full((1, 100_000), 255, np.uint8))


def tiff_wrong_strip_counts(path: Path) -> Path:
    """A good page as TIFF whose StripByteCounts (tag 279, TIFF 6.0) say 2 GB."""
    from PIL import Image

    save_image(path, rendered_101(), compression="tiff_deflate")
    with Image.open(path) as im:
        counts = im.tag_v2[279]
    data = bytearray(Path(path).read_bytes())
    # Find the tag's entry in the first IFD and point its value (or first value) at 0x7FFFFFFF.
    ifd = struct.unpack("<I", data[4:8])[0]
    n = struct.unpack("<H", data[ifd:ifd + 2])[0]
    for k in range(n):
        e = ifd + 2 + 12 * k
        tag, typ, count = struct.unpack("<HHI", data[e:e + 8])
        if tag == 279:
            if count == 1:
                data[e + 8:e + 12] = struct.pack("<I", 0x7FFFFFFF)
            else:
                at = struct.unpack("<I", data[e + 8:e + 12])[0]
                data[at:at + 4] = struct.pack("<I", 0x7FFFFFFF)
    assert counts  # the tag was there to change
    Path(path).write_bytes(bytes(data))
    return Path(path)


# -- the file system ------------------------------------------------------------------------------
def symlink_loop(path: Path) -> Path:
    other = path.with_name(path.name + ".other.pdf")
    os.symlink(other.name, path)
    os.symlink(path.name, other)
    return Path(path)


def unreadable(path: Path) -> Path:
    shutil.copy(EXACT, path)
    os.chmod(path, 0)
    return Path(path)


def odd_name(folder: Path, raw: bytes) -> Path:
    """A copy of a good page under a name given as bytes (a newline, bytes that are not UTF-8)."""
    p = os.path.join(os.fsencode(folder), raw)
    shutil.copy(EXACT, p)
    return Path(os.fsdecode(p))

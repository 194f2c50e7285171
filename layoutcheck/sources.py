"""Read input files into pages: the only module that opens files.

A file becomes an iterator of pages, each one of

- :class:`VectorPage` — a born-digital PDF page (pdfplumber), with its size in points after
  ``/Rotate`` and the CropBox are applied;
- :class:`RasterPage` — a grey ``uint8`` image (0 black, 255 white) with its resolution, from PNG,
  JPEG, TIFF (every frame) or from a PDF page that only wraps a scanned image;
- :class:`PageError` — a page (or a whole file) that could not be read, with a one-line message
  naming the file and page. Reading never raises for bad input: the batch carries on.

Limits (pixels, pages, password) are enforced here, before anything large is decoded.
"""

from __future__ import annotations

import contextlib
import io
import os
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterator, Union

import numpy as np

from .elements import POINTS_PER_INCH

IMAGE_EXTENSIONS = {".png", ".jpg", ".jpeg", ".tif", ".tiff"}
PDF_EXTENSIONS = {".pdf"}
KNOWN_EXTENSIONS = IMAGE_EXTENSIONS | PDF_EXTENSIONS

#: Resolutions scanners are set to (common practice); a measured dpi within 2 % snaps to one.
USUAL_DPI = (72, 75, 96, 100, 120, 150, 200, 240, 250, 300, 400, 500, 600, 800, 1200)


@dataclass(frozen=True)
class ReadLimits:
    """Bounds on what a reader will decode."""

    #: Largest image decoded, in pixels: an A3 page at 1200 dpi is about 278 million (ISO 216,
    #: 297 x 420 mm), so 300 million admits any real office scan and refuses decompression bombs.
    max_pixels: int = 300_000_000
    #: Most pages read from one file.
    max_pages: int = 2000
    #: Resolution to assume for images that do not state one; None means refuse them.
    dpi: float | None = None
    #: Password for encrypted PDFs.
    password: str | None = None


@dataclass
class VectorPage:
    """A born-digital PDF page; ``plumber`` is the open pdfplumber page (valid while iterating)."""

    source: str
    page: int
    width: float
    height: float
    plumber: object = field(repr=False)
    rotation: int = 0
    path: str = ""

    kind = "vector"


@dataclass
class RasterPage:
    """A scanned page: grey image (0 black .. 255 white) and its resolution."""

    source: str
    page: int
    image: np.ndarray = field(repr=False)
    dpi: float
    bitonal: bool = False

    kind = "raster"

    @property
    def width(self) -> float:
        """Width in points."""
        return self.image.shape[1] * POINTS_PER_INCH / self.dpi

    @property
    def height(self) -> float:
        """Height in points."""
        return self.image.shape[0] * POINTS_PER_INCH / self.dpi


@dataclass
class PageError:
    """A page, or a whole file (``page`` None), that could not be read."""

    source: str
    page: int | None
    message: str

    kind = "error"


Page = Union[VectorPage, RasterPage, PageError]


class InputError(Exception):
    """Bad input: the message is one line naming the file and page."""


def where(source: str, page: int | None) -> str:
    """``scan.tif page 3`` or ``scan.tif`` for messages."""
    name = os.path.basename(source) or source
    return f"{name} page {page}" if page is not None else name


def snap_dpi(dpi: float | None) -> float | None:
    """Round a stated resolution to the usual value within 2 %; None when absent or below 72."""
    if dpi is None or not np.isfinite(dpi) or dpi < 72:
        return None
    for usual in USUAL_DPI:
        if abs(dpi - usual) <= 0.02 * usual:
            return float(usual)
    return float(round(dpi))


def read_pages(path: str | os.PathLike, limits: ReadLimits = ReadLimits(), pages: set[int] | None = None) -> Iterator[Page]:
    """Pages of one input file, in order; bad input comes back as :class:`PageError`.

    ``pages`` limits the 1-based page numbers read (default: all, up to ``limits.max_pages``).
    """
    source = str(path)
    p = Path(source)
    try:
        if not p.exists():
            yield PageError(source, None, f"{where(source, None)}: no such file")
            return
        if p.is_dir():
            yield PageError(source, None, f"{where(source, None)}: is a folder, not a file")
            return
        if p.stat().st_size == 0:
            yield PageError(source, None, f"{where(source, None)}: empty file (0 bytes)")
            return
        with open(p, "rb") as fh:
            head = fh.read(8)
        if head.startswith(b"%PDF") or (p.suffix.lower() in PDF_EXTENSIONS and b"%PDF" in _head(p, 1024)):
            yield from _read_pdf(source, limits, pages)
        elif p.suffix.lower() in PDF_EXTENSIONS:
            yield PageError(source, None, f"{where(source, None)}: not a PDF (no %PDF header)")
        else:
            yield from _read_image(source, limits, pages)
    except Exception as exc:  # last line of defence: a reader bug must not end the batch
        yield PageError(source, None, f"{where(source, None)}: could not be read ({type(exc).__name__}: {_one_line(exc)})")


def _head(p: Path, n: int) -> bytes:
    with open(p, "rb") as fh:
        return fh.read(n)


def _one_line(exc: BaseException) -> str:
    text = " ".join(str(exc).split())
    return text[:200] if text else type(exc).__name__


# -- images ---------------------------------------------------------------------------------------
def _read_image(source: str, limits: ReadLimits, pages: set[int] | None) -> Iterator[Page]:
    from PIL import Image, ImageOps, ImageSequence, UnidentifiedImageError

    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", Image.DecompressionBombWarning)
            img = Image.open(source)
    except Image.DecompressionBombError as exc:
        yield PageError(source, None, f"{where(source, None)}: image too large to decode safely ({_one_line(exc)})")
        return
    except UnidentifiedImageError:
        yield PageError(source, None, f"{where(source, None)}: not an image this tool reads (PNG, JPEG, TIFF or PDF)")
        return
    with img:
        n = 0
        frames = ImageSequence.Iterator(img)
        while True:
            n += 1
            try:
                frame = next(frames)
            except StopIteration:
                break
            except Exception as exc:
                yield PageError(source, n, f"{where(source, n)}: frame could not be read ({_one_line(exc)})")
                break
            if n > limits.max_pages:
                yield PageError(source, n, f"{where(source, n)}: more than {limits.max_pages} pages; the rest is not read (raise --max-pages)")
                break
            if pages is not None and n not in pages:
                continue
            yield _image_page(source, n, frame, limits, ImageOps)


def _image_page(source: str, n: int, frame, limits: ReadLimits, ImageOps) -> Page:
    from PIL import Image

    w, h = frame.size
    if w * h > limits.max_pixels:
        return PageError(source, n, f"{where(source, n)}: {w} x {h} pixels is over the limit of {limits.max_pixels:,} pixels; not decoded")
    if w < 16 or h < 16:
        return PageError(source, n, f"{where(source, n)}: {w} x {h} pixels is too small to be a page")
    info_dpi = frame.info.get("dpi")
    dpi = None
    if info_dpi:
        try:
            dpi = snap_dpi(float(info_dpi[0]))
        except (TypeError, ValueError, IndexError):
            dpi = None
    if dpi is None:
        dpi = limits.dpi
    if dpi is None:
        return PageError(source, n, f"{where(source, n)}: resolution unknown (the file states no dpi, or one below 72); give --dpi N")
    try:
        # A frame of a multi-page file is copied as it is read: seeking on reuses the buffer.
        frame.load()
        bitonal = frame.mode == "1"
        im = ImageOps.exif_transpose(frame.copy())
        if im.mode not in ("L", "1"):
            if im.mode in ("RGBA", "LA", "P", "PA"):
                # Transparent parts of a page are paper: composite on white before going grey.
                im = im.convert("RGBA")
                bg = Image.new("RGBA", im.size, (255, 255, 255, 255))
                bg.alpha_composite(im)
                im = bg
            im = im.convert("L")
        elif im.mode == "1":
            im = im.convert("L")
        arr = np.asarray(im, dtype=np.uint8).copy()
    except Exception as exc:
        return PageError(source, n, f"{where(source, n)}: image data is damaged ({_one_line(exc)})")
    return RasterPage(source, n, arr, float(dpi), bitonal)


# -- PDFs -----------------------------------------------------------------------------------------
def _read_pdf(source: str, limits: ReadLimits, pages: set[int] | None) -> Iterator[Page]:
    import pdfplumber
    from pdfminer.pdfdocument import PDFPasswordIncorrect

    try:
        pdf = pdfplumber.open(source, password=limits.password or "")
    except PDFPasswordIncorrect:
        hint = "wrong password" if limits.password else "encrypted; give --password"
        yield PageError(source, None, f"{where(source, None)}: PDF is {hint}")
        return
    except Exception as exc:
        yield PageError(source, None, f"{where(source, None)}: damaged PDF ({_one_line(exc)})")
        return
    with pdf:
        try:
            count = len(pdf.pages)
        except Exception as exc:
            yield PageError(source, None, f"{where(source, None)}: damaged PDF page tree ({_one_line(exc)})")
            return
        if count == 0:
            yield PageError(source, None, f"{where(source, None)}: PDF has no pages (empty or broken page tree)")
            return
        for n in range(1, count + 1):
            if n > limits.max_pages:
                yield PageError(source, n, f"{where(source, n)}: more than {limits.max_pages} pages; pages {n}-{count} are not read (raise --max-pages)")
                return
            if pages is not None and n not in pages:
                continue
            try:
                pl = pdf.pages[n - 1]
                page = _pdf_page(source, n, pl, limits)
            except Exception as exc:
                yield PageError(source, n, f"{where(source, n)}: damaged page ({_one_line(exc)})")
                continue
            yield page
            with contextlib.suppress(Exception):
                pl.close()


def _display_size(pl) -> tuple[float, float, int]:
    """Page size in points as displayed (after /Rotate), and the rotation."""
    rot = int(pl.rotation or 0) % 360
    x0, top, x1, bottom = pl.bbox
    w, h = float(x1 - x0), float(bottom - top)
    return (h, w, rot) if rot in (90, 270) else (w, h, rot)


def _pdf_page(source: str, n: int, pl, limits: ReadLimits) -> Page:
    width, height, rot = _display_size(pl)
    if is_scanned_page(pl):
        return render_pdf_page(source, n, limits, dpi=_image_dpi(pl, width))
    return VectorPage(source, n, width, height, pl, rot, source)


def is_scanned_page(pl) -> bool:
    """A page that only wraps a scanned image: one image over most of it and no drawn rules.

    An invisible text layer (from an earlier OCR) does not make it born-digital.
    """
    images = pl.images
    if not images:
        return False
    area = float(pl.width * pl.height)
    big = max((float(i["x1"] - i["x0"]) * float(i["bottom"] - i["top"]) for i in images), default=0.0)
    drawn = len(pl.lines) + len(pl.rects) + len(pl.curves)
    return big >= 0.7 * area and drawn < 5


def _image_dpi(pl, page_width: float) -> float:
    """Resolution of the page's largest image: its pixel width over its width in inches."""
    img = max(pl.images, key=lambda i: float(i["x1"] - i["x0"]) * float(i["bottom"] - i["top"]))
    px_w, px_h = img.get("srcsize", (0, 0))
    w_in = float(img["x1"] - img["x0"]) / POINTS_PER_INCH
    h_in = float(img["bottom"] - img["top"]) / POINTS_PER_INCH
    rot = int(pl.rotation or 0) % 360
    # On a page turned by /Rotate the image's pixel rows may run along the page's other side.
    if rot in (90, 270):
        w_in, h_in = h_in, w_in
    dpi = max(px_w / w_in if w_in else 0, px_h / h_in if h_in else 0)
    return snap_dpi(dpi) or 200.0


def render_pdf_page(source: str, n: int, limits: ReadLimits, dpi: float) -> Page:
    """Render one PDF page to a grey :class:`RasterPage` with pypdfium2 (``/Rotate`` applied)."""
    import pypdfium2 as pdfium

    try:
        doc = pdfium.PdfDocument(source, password=limits.password)
    except pdfium.PdfiumError as exc:
        return PageError(source, n, f"{where(source, n)}: could not be rendered ({_one_line(exc)})")
    try:
        page = doc[n - 1]
        w_pt, h_pt = page.get_size()
        if (page.get_rotation() % 180) == 90:
            w_pt, h_pt = h_pt, w_pt
        pixels = (w_pt * dpi / POINTS_PER_INCH) * (h_pt * dpi / POINTS_PER_INCH)
        if pixels > limits.max_pixels:
            return PageError(source, n, f"{where(source, n)}: rendering at {dpi:g} dpi would exceed {limits.max_pixels:,} pixels")
        bitmap = page.render(scale=dpi / POINTS_PER_INCH, grayscale=True)
        arr = np.array(bitmap.to_numpy(), dtype=np.uint8)
        if arr.ndim == 3:
            arr = arr[..., 0]
        page.close()
        return RasterPage(source, n, arr, float(dpi), False)
    finally:
        doc.close()


def render_page_image(source: str, page: int, dpi: float, limits: ReadLimits = ReadLimits()) -> np.ndarray:
    """Grey image of any page of a PDF or image file, for reports and for learning scans.

    Raises :class:`InputError` when the page cannot be read.
    """
    if _head(Path(source), 5).startswith(b"%PDF"):
        out = render_pdf_page(source, page, limits, dpi)
    else:
        out = next((pg for pg in read_pages(source, limits, {page})), PageError(source, page, f"{where(source, page)}: no such page"))
    if isinstance(out, PageError):
        raise InputError(out.message)
    return out.image


def image_to_png_bytes(image: np.ndarray) -> bytes:
    """Compressed PNG of a grey image."""
    from PIL import Image

    buf = io.BytesIO()
    Image.fromarray(image).save(buf, format="PNG", optimize=True)
    return buf.getvalue()

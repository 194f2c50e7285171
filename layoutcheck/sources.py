"""Read input files into pages: the only module that opens files.

A file becomes an iterator of pages, each one of

- :class:`VectorPage` — a born-digital PDF page (pdfplumber), with its size in points after
  ``/Rotate`` and the CropBox are applied;
- :class:`RasterPage` — a grey ``uint8`` image (0 black, 255 white) with its resolution, from PNG,
  JPEG, TIFF (every frame) or from a PDF page that only wraps a scanned image;
- :class:`PageError` — a page (or a whole file) that could not be read, with a one-line message
  naming the file and page. Reading never raises for bad input: the batch carries on. (A
  :class:`MemoryError` is passed on, so a worker under a memory limit can answer for it.)

Limits (pixels, pages, password, decoded content and drawing operations of a PDF page) are
enforced here, before anything large is decoded or parsed. A PDF page's content is checked
against its limits first, by inflating its streams no further than the limit; then pypdfium2
alone tells an image-only page (a scan) and renders it, so pdfminer parses the content of
born-digital pages only.
"""

from __future__ import annotations

import contextlib
import io
import os
import re
import warnings
import zlib
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterator, Union

import numpy as np

from .elements import POINTS_PER_INCH

IMAGE_EXTENSIONS = {".png", ".jpg", ".jpeg", ".tif", ".tiff"}
PDF_EXTENSIONS = {".pdf"}
KNOWN_EXTENSIONS = IMAGE_EXTENSIONS | PDF_EXTENSIONS

#: Resolutions scanners and fax machines are set to, per axis (common practice; fax: 204 x 98
#: "standard", 204 x 196 "fine", and the metric 200 x 100 / 200 x 200); a stated dpi within 2 %
#: snaps to the nearest one.
USUAL_DPI = (72, 75, 96, 98, 100, 120, 150, 196, 200, 204, 240, 250, 300, 400, 500, 600, 800, 1200)


@dataclass(frozen=True)
class ReadLimits:
    """Bounds on what a reader will decode."""

    #: Largest image decoded, in pixels: an A3 page at 1200 dpi is about 278 million (ISO 216,
    #: 297 x 420 mm), so 300 million admits any real office scan and refuses decompression bombs.
    max_pixels: int = 300_000_000
    #: Most pages read from one file.
    max_pages: int = 2000
    #: Largest decoded content of one PDF page (its content streams and the form XObjects it
    #: draws), in bytes. A form page holds tens of KB. 8 MB refuses a compressed "bomb" (a small
    #: file whose content inflates to hundreds of MB) before anything parses it; it is inflated
    #: only as far as the limit.
    max_content_bytes: int = 8 * 1024 * 1024
    #: Most path operations (move, line, curve, rectangle, paint) drawn on one PDF page, counting
    #: a form XObject once per use. A ruled form has a few thousand. Reading them runs at about
    #: 8,000 a second on a shared 2-core machine and takes 1.2 to 1.5 KB of memory each
    #: (``bench/bench_hostile.py``), so 250,000 stays near half the default page time limit and
    #: a quarter of the memory limit.
    max_drawing_ops: int = 250_000
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
    #: The PDF's content when it was read from memory (``path`` is then only its name).
    data: bytes | None = field(default=None, repr=False)

    kind = "vector"


@dataclass
class RasterPage:
    """A scanned page: grey image (0 black .. 255 white) and its resolution per axis.

    ``dpi_x`` is the resolution across (along a pixel row), ``dpi_y`` down; ``dpi_y`` None means
    square pixels. The image stays on the input's own pixel grid (zones and normalised pages are
    given on it); :func:`square_pixels` makes the square-pixel copy the extractor reads.
    """

    source: str
    page: int
    image: np.ndarray = field(repr=False)
    dpi_x: float
    bitonal: bool = False
    dpi_y: float | None = None
    #: False when the file states no usable resolution (none, or one that makes the image a
    #: sheet of many feet, as phones write 72 dpi): ``dpi`` is then a working value taken from
    #: the image's size, and the page is read as a camera capture (see :mod:`layoutcheck.capture`).
    dpi_stated: bool = True

    kind = "raster"

    def __post_init__(self) -> None:
        if self.dpi_y is None:
            self.dpi_y = self.dpi_x

    @property
    def square(self) -> bool:
        """Whether the pixels are square (the same resolution on both axes)."""
        return self.dpi_x == self.dpi_y

    @property
    def dpi(self) -> float:
        """One resolution for the page: the finer axis' (that of :func:`square_pixels`' image)."""
        return float(max(self.dpi_x, self.dpi_y))

    @property
    def dpi_xy(self) -> tuple[float, float]:
        """``(dpi_x, dpi_y)``."""
        return float(self.dpi_x), float(self.dpi_y)

    @property
    def width(self) -> float:
        """Width in points."""
        return self.image.shape[1] * POINTS_PER_INCH / self.dpi_x

    @property
    def height(self) -> float:
        """Height in points."""
        return self.image.shape[0] * POINTS_PER_INCH / self.dpi_y


def square_pixels(page: RasterPage) -> RasterPage:
    """The page resampled to square pixels at its finer resolution (itself when already square).

    A fax at 204 x 98 dpi becomes 204 x 204 dpi: each row is stretched down by area-aware
    interpolation (OpenCV ``INTER_LINEAR`` when enlarging, ``INTER_AREA`` when reducing), so
    the page's size in points is kept to a fraction of a pixel. A bitonal page stays bitonal
    (thresholded at mid-grey after resampling).
    """
    import cv2

    if page.square:
        return page
    dpi = page.dpi
    h, w = page.image.shape[:2]
    size = (max(1, int(round(w * dpi / page.dpi_x))), max(1, int(round(h * dpi / page.dpi_y))))
    interp = cv2.INTER_LINEAR if size[0] * size[1] >= w * h else cv2.INTER_AREA
    image = cv2.resize(page.image, size, interpolation=interp)
    if page.bitonal:
        image = np.where(image >= 128, 255, 0).astype(np.uint8)
        if page.dpi_y < page.dpi_x:
            # A thin rule crossing from one of the fax's tall rows to the next lies half in each
            # over a long stretch, and the fax's threshold keeps a random half of its pixels:
            # ink is closed along the rows over as many pixels as a row is taller than wide.
            k = 2 * int(round(page.dpi_x / page.dpi_y)) + 1
            image = cv2.erode(image, np.ones((1, k), np.uint8))
            image = cv2.dilate(image, np.ones((1, k), np.uint8))
    return RasterPage(page.source, page.page, image, dpi, page.bitonal, dpi_stated=page.dpi_stated)


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


def printable(name: str) -> str:
    """A file name as one printable line: control characters (a newline in a name) and bytes
    that are not UTF-8 are written as escapes."""
    return "".join(c if c.isprintable() else repr(c)[1:-1] for c in name)


def where(source: str, page: int | None) -> str:
    """``scan.tif page 3`` or ``scan.tif`` for messages."""
    name = printable(os.path.basename(source) or source)
    return f"{name} page {page}" if page is not None else name


def snap_dpi(dpi: float | None) -> float | None:
    """Round a stated resolution to the nearest usual value within 2 %; None when absent or
    below 72. Each axis is snapped on its own (a fax's 98 dpi stays 98, not 100)."""
    if dpi is None or not np.isfinite(dpi) or dpi < 72:
        return None
    usual = min(USUAL_DPI, key=lambda u: abs(dpi - u))
    if abs(dpi - usual) <= 0.02 * usual:
        return float(usual)
    return float(round(dpi))


def read_pages(path: str | os.PathLike, limits: ReadLimits = ReadLimits(), pages: set[int] | None = None) -> Iterator[Page]:
    """Pages of one input file, in order; bad input comes back as :class:`PageError`.

    ``pages`` limits the 1-based page numbers read (default: all, up to ``limits.max_pages``).
    A :class:`VectorPage` is valid until the next page is taken from the iterator.
    """
    with open_document(path, limits, pages) as doc:
        for entry in doc.plan:
            yield entry if isinstance(entry, PageError) else doc.page(entry)


# -- open documents -------------------------------------------------------------------------------
class Document:
    """An input file, open for reading one page at a time; never raises for bad input.

    :attr:`plan` lists, in order, what the file yields: 1-based page numbers to read with
    :meth:`page`, and :class:`PageError` entries that stand for themselves (the whole file
    unreadable, page None; or the pages beyond ``max_pages``). Only one page is held open at a
    time: taking a page closes the previous one, so memory stays bounded on long files.
    """

    def __init__(self, source: str, plan: list | None = None):
        self.source = source
        self.plan: list[int | PageError] = plan or []

    def page(self, n: int) -> Page:  # pragma: no cover - overridden
        return PageError(self.source, n, f"{where(self.source, n)}: no such page")

    def release(self) -> None:
        """Let go of the page last taken (its caches); the next :meth:`page` does it anyway."""

    def close(self) -> None:
        """Release the file; safe to call twice."""

    def __enter__(self) -> "Document":
        return self

    def __exit__(self, *exc) -> None:
        self.close()


def open_document(path: str | os.PathLike, limits: ReadLimits = ReadLimits(), pages: set[int] | None = None,
                  data: bytes | None = None) -> Document:
    """Open one input file (PDF, PNG, JPEG, TIFF) and plan what it yields; never raises.

    The document's ``source`` (and so every record's) is the absolute path of the file, so that
    any reader of a record finds the file again whatever its own working folder. With ``data``,
    the file's content is read from memory and ``path`` only names it, as given.
    """
    source = record_path(path) if data is None else str(path)
    p = Path(source)
    try:
        if data is not None:
            if not data:
                return _failed(source, "empty file (0 bytes)")
            if data[:1024].startswith(b"%PDF"):
                return _PdfDocument.open(source, limits, pages, data)
            return _ImageDocument.open(source, limits, pages, data)
        if not p.exists():
            if os.path.islink(source):
                return _failed(source, "a symbolic link that leads nowhere (a loop, or its target is missing)")
            return _failed(source, "no such file")
        if p.is_dir():
            return _failed(source, "is a folder, not a file")
        if not p.is_file():  # a pipe or a device may never end
            return _failed(source, "not a regular file (a pipe or a device?)")
        if p.stat().st_size == 0:
            return _failed(source, "empty file (0 bytes)")
        head = _head(p, 1024)
        if head.startswith(b"%PDF") or (p.suffix.lower() in PDF_EXTENSIONS and b"%PDF" in head):
            return _PdfDocument.open(source, limits, pages)
        if p.suffix.lower() in PDF_EXTENSIONS:
            return _failed(source, "not a PDF (no %PDF header)")
        return _ImageDocument.open(source, limits, pages)
    except MemoryError:  # the worker answers for its memory limit
        raise
    except OSError as exc:  # no permission, an I/O error: the system's words, without the path
        return _failed(source, f"cannot be opened ({exc.strerror or type(exc).__name__})")
    except Exception as exc:  # last line of defence: a reader bug must not end the batch
        return _failed(source, f"could not be read ({type(exc).__name__}: {_one_line(exc)})")


def record_path(path: str | os.PathLike) -> str:
    """The form in which a file's path is written into records: absolute, links not resolved."""
    return os.path.abspath(os.fspath(path))


def _failed(source: str, what: str) -> Document:
    return Document(source, [PageError(source, None, f"{where(source, None)}: {what}")])


def _numbers(source: str, count: int, limits: ReadLimits, pages: set[int] | None) -> list:
    """Page numbers to read, then one entry for the pages beyond the limit."""
    shown = min(count, limits.max_pages)
    plan: list = [n for n in range(1, shown + 1) if pages is None or n in pages]
    if count > limits.max_pages and (pages is None or any(n > limits.max_pages for n in pages)):
        n = limits.max_pages + 1
        plan.append(PageError(source, n, f"{where(source, n)}: file has {count} pages, more than {limits.max_pages}; "
                                         f"pages {n}-{count} are not read (raise --max-pages)"))
    return plan


def _head(p: Path, n: int) -> bytes:
    with open(p, "rb") as fh:
        return fh.read(n)


def _one_line(exc: BaseException) -> str:
    text = " ".join(str(exc).split())
    if not text and exc.args and isinstance(exc.args[0], BaseException):
        return _one_line(exc.args[0])
    return text[:200] if text else type(exc).__name__


# -- images ---------------------------------------------------------------------------------------
class _ImageDocument(Document):
    def __init__(self, source: str, plan: list, img, limits: ReadLimits):
        super().__init__(source, plan)
        self._img = img
        self._limits = limits

    @classmethod
    def open(cls, source: str, limits: ReadLimits, pages: set[int] | None, data: bytes | None = None) -> Document:
        from PIL import Image, UnidentifiedImageError

        try:
            with warnings.catch_warnings():
                # Our own pixel limit is checked before anything is decoded; Pillow's bomb
                # check stays on as a second guard (it refuses beyond twice its own limit).
                warnings.simplefilter("ignore", Image.DecompressionBombWarning)
                img = Image.open(io.BytesIO(data) if data is not None else source)
        except Image.DecompressionBombError as exc:
            return _failed(source, f"image is over the pixel limit; not decoded ({_one_line(exc)})")
        except UnidentifiedImageError:
            return _failed(source, "not an image this tool reads (PNG, JPEG, TIFF or PDF)")
        except MemoryError:  # the worker answers for its memory limit
            raise
        except Exception as exc:
            return _failed(source, f"image header is damaged ({_one_line(exc)})")
        try:
            count = int(getattr(img, "n_frames", 1) or 1)
        except Exception:
            count = 1  # a broken frame chain: read what the first frame gives
        return cls(source, _numbers(source, count, limits, pages), img, limits)

    def page(self, n: int) -> Page:
        try:
            self._img.seek(n - 1)
        except MemoryError:  # the worker answers for its memory limit
            raise
        except Exception as exc:
            return PageError(self.source, n, f"{where(self.source, n)}: frame could not be reached ({_one_line(exc)})")
        return image_page(self.source, n, self._img, self._limits)

    def close(self) -> None:
        with contextlib.suppress(Exception):
            self._img.close()


def image_page(source: str, n: int, frame, limits: ReadLimits) -> Page:
    """One decoded frame (a Pillow image) as a grey :class:`RasterPage`, or a :class:`PageError`."""
    from PIL import Image, ImageOps

    w, h = frame.size
    if w * h > limits.max_pixels:
        return PageError(source, n, f"{where(source, n)}: {w} x {h} pixels is over the limit of {limits.max_pixels:,} pixels; not decoded")
    if w < 16 or h < 16:
        return PageError(source, n, f"{where(source, n)}: {w} x {h} pixels is too small to be a page")
    stated = stated_dpi(frame)
    dpi_x, dpi_y = (snap_dpi(v) for v in stated) if stated else (None, None)
    if dpi_x is not None and dpi_y is not None and max(w / dpi_x, h / dpi_y) > MAX_SHEET_IN:
        dpi_x = dpi_y = None  # a stated resolution that makes the image a sheet of many feet is no resolution
    if dpi_x is None or dpi_y is None:
        dpi_x = dpi_y = limits.dpi
    known = dpi_x is not None
    try:
        # A frame of a multi-page file is copied as it is read (seeking on reuses the buffer):
        # the array below is that copy. EXIF orientation is applied only when the file has one.
        frame.load()
        bitonal = frame.mode == "1"
        im = frame
        if _exif_orientation(frame) not in (None, 1):
            im = ImageOps.exif_transpose(frame)
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
        # Pillow hands the pixels over as a bytes copy of its buffer: the array is the page's own
        # (read-only: nothing downstream writes into a page).
        arr = np.asarray(im, dtype=np.uint8)
    except MemoryError:  # the worker answers for its memory limit
        raise
    except Exception as exc:
        return PageError(source, n, f"{where(source, n)}: image data is damaged ({_one_line(exc)})")
    if not known:
        # No usable resolution: a camera capture, read at a working one (see :mod:`layoutcheck.capture`).
        dpi_x = dpi_y = working_dpi(arr.shape)
    if _exif_orientation(frame) in (5, 6, 7, 8):
        dpi_x, dpi_y = dpi_y, dpi_x  # the image was turned a quarter: its rows were its columns
    return RasterPage(source, n, arr, float(dpi_x), bitonal, float(dpi_y), dpi_stated=known)


def stated_dpi(frame) -> tuple[float, float] | None:
    """``(x, y)`` resolution an image file states, in dpi, or None.

    Pillow gives both axes for TIFF (XResolution, YResolution, ResolutionUnit), PNG (pHYs) and
    JPEG's JFIF header; for a JPEG whose JFIF header states only an aspect ratio, Pillow reads
    the EXIF resolution of the x axis alone, so both EXIF tags (0x011A, 0x011B, unit 0x0128:
    2 inch, 3 cm) are read here.
    """
    info = frame.info
    exif_first = getattr(frame, "format", None) == "JPEG" and info.get("jfif_unit", 0) not in (1, 2)
    if exif_first:
        try:
            tags = frame.getexif()
            xr, yr = tags.get(0x011A), tags.get(0x011B)
            if xr and yr:
                k = 2.54 if tags.get(0x0128, 2) == 3 else 1.0
                return float(xr) * k, float(yr) * k
        except Exception:
            pass
        if "exif" in info:
            return None  # Pillow's value would be its 72 dpi stand-in or one axis only
    d = info.get("dpi")
    try:
        x, y = float(d[0]), float(d[1])
    except (TypeError, ValueError, IndexError):
        return None
    return (x, y) if x > 0 and y > 0 else None


#: Longest side, inches, of a sheet a usable stated resolution may describe (A3 is 16.5 in,
#: ISO 216; a little room above it).
MAX_SHEET_IN = 20.0
#: Long side assumed for a sheet of unknown size, inches: between A4 (11.69 in, ISO 216) and
#: Letter (11 in, ANSI): off by at most 4 % for either, well inside what the vote's scale range
#: and the extractor's sizes in mm allow.
ASSUMED_LONG_SIDE_IN = 11.35
#: Sheets a photographed page is told by the ratio of its sides: (long / short, long side in
#: inches). ISO 216 A4 (210 x 297 mm; A3 and A5 share its ratio, and forms are A4: common
#: practice), ANSI Letter (8.5 x 11 in) and Legal (8.5 x 14 in).
SHEETS = ((297.0 / 210.0, 297.0 / 25.4), (11.0 / 8.5, 11.0), (14.0 / 8.5, 14.0))
#: Largest difference of log ratios at which a found sheet is taken for one of :data:`SHEETS`: a
#: photo's perspective changes the ratio of the sheet's mean sides by a few percent, and A4 and
#: Letter lie 9 % apart.
SHEET_RATIO_TOLERANCE = 0.035


def _mean_sides(sheet_px: np.ndarray) -> tuple[float, float]:
    """Means of a quadrilateral's opposite sides (its corners in order around it), pixels."""
    q = np.asarray(sheet_px, float)
    sides = np.hypot(*(q - np.roll(q, -1, axis=0)).T)
    return float(sides[0] + sides[2]) / 2.0, float(sides[1] + sides[3]) / 2.0


def sheet_long_side_in(sheet_px: np.ndarray) -> float:
    """Long side of a sheet found in a photo, inches: that of the paper size its sides' ratio
    names (:data:`SHEETS`), or :data:`ASSUMED_LONG_SIDE_IN` when it names none.

    ``sheet_px`` are the sheet's four corners in order around it (pixels); the ratio is that of
    the means of its opposite sides.
    """
    a, b = _mean_sides(sheet_px)
    ratio = max(a, b) / max(min(a, b), 1e-9)
    off = [abs(np.log(ratio / r)) for r, _ in SHEETS]
    k = int(np.argmin(off))
    return float(SHEETS[k][1]) if off[k] <= SHEET_RATIO_TOLERANCE else ASSUMED_LONG_SIDE_IN


def working_dpi(shape: tuple[int, int], sheet_px: np.ndarray | None = None) -> float:
    """Resolution to work at for a page without a usable one: the long side of the sheet found
    on it taken as its paper size's (:func:`sheet_long_side_in`), or the image's long side as
    :data:`ASSUMED_LONG_SIDE_IN`."""
    if sheet_px is not None:
        return float(max(_mean_sides(sheet_px)) / sheet_long_side_in(sheet_px))
    return float(max(shape) / ASSUMED_LONG_SIDE_IN)


def _exif_orientation(frame) -> int | None:
    """The EXIF orientation tag (0x0112) of an image, or None when it has none."""
    try:
        return frame.getexif().get(0x0112)
    except Exception:
        return None


# -- PDFs -----------------------------------------------------------------------------------------
def _is_password_error(exc: BaseException) -> bool:
    from pdfminer.pdfdocument import PDFPasswordIncorrect

    seen = 0
    while exc is not None and seen < 5:
        if isinstance(exc, PDFPasswordIncorrect) or any(isinstance(a, PDFPasswordIncorrect) for a in exc.args):
            return True
        exc = exc.__cause__ or exc.__context__
        seen += 1
    return False


#: Most references followed from one indirect object before it is taken as damaged.
MOST_REFERENCES = 64


def _guard_self_references() -> None:
    """Make pdfminer refuse an indirect object whose value is a chain of references back to
    itself (``2 0 obj 2 0 R endobj``, or 2 naming 3 naming 2): its ``resolve1`` follows such a
    chain forever, and a damaged cross-reference table can make one out of any file. Each
    object is resolved as it is read (the value it would resolve to anyway) and a chain that
    comes back, or runs past :data:`MOST_REFERENCES`, raises pdfminer's ``PDFSyntaxError``,
    which the reader reports as a damaged file or page. Installed once, on the class (pdfplumber
    makes the document inside ``pdfplumber.open``, where the catalog is resolved first)."""
    from pdfminer.pdfdocument import PDFDocument
    from pdfminer.pdfparser import PDFSyntaxError
    from pdfminer.pdftypes import PDFObjRef

    plain = PDFDocument.getobj
    if getattr(plain, "guards_self_references", False):
        return

    def getobj(self, objid):
        obj = plain(self, objid)
        seen = [objid]
        while isinstance(obj, PDFObjRef):
            if obj.objid in seen or len(seen) >= MOST_REFERENCES:
                chain = " -> ".join(str(o) for o in [*seen, obj.objid][:6])
                raise PDFSyntaxError(f"object {objid} is a chain of references back to itself ({chain})")
            seen.append(obj.objid)
            obj = plain(self, obj.objid)
        return obj

    getobj.guards_self_references = True
    getobj.__doc__ = plain.__doc__
    PDFDocument.getobj = getobj


class _PdfDocument(Document):
    def __init__(self, source: str, plan: list, pdf, limits: ReadLimits, data: bytes | None = None):
        super().__init__(source, plan)
        self._pdf = pdf
        self._limits = limits
        self._data = data
        self._open_page = None
        self._pdfium = None
        self._walker = None
        self._seen: list = []  # pdfminer page objects walked so far (small)
        self._fh = None

    @classmethod
    def open(cls, source: str, limits: ReadLimits, pages: set[int] | None, data: bytes | None = None) -> Document:
        import pdfplumber

        # The file is opened here and closed by us on every path: pdfplumber closes a file it
        # opened itself only for some of the errors a damaged file can raise.
        _guard_self_references()
        fh = io.BytesIO(data) if data is not None else open(source, "rb")
        try:
            pdf = pdfplumber.open(fh, password=limits.password or "")
        except MemoryError:  # the worker answers for its memory limit
            fh.close()
            raise
        except Exception as exc:
            fh.close()
            if _is_password_error(exc):
                return _failed(source, "PDF is " + ("encrypted and the password is wrong" if limits.password
                                                    else "encrypted; give --password"))
            return _failed(source, f"damaged PDF ({_one_line(exc)})")
        try:
            count = _pdfium_count(data if data is not None else source, limits)
            if count is None:
                count = len(pdf.pages)
        except MemoryError:  # the worker answers for its memory limit
            fh.close()
            raise
        except Exception as exc:
            fh.close()
            if _is_password_error(exc):
                return _failed(source, "PDF is encrypted; give --password")
            return _failed(source, f"damaged PDF page tree ({_one_line(exc)})")
        if count == 0:
            fh.close()
            return _failed(source, "PDF has no pages (empty or broken page tree)")
        doc = cls(source, _numbers(source, count, limits, pages), pdf, limits, data)
        doc._fh = fh
        return doc

    def release(self) -> None:
        if self._open_page is not None:
            with contextlib.suppress(Exception):
                self._open_page.close()
            self._open_page = None

    def page(self, n: int) -> Page:
        """Page ``n``: content limits first, then an image-only page is rendered by pypdfium2
        alone; only a born-digital page has its content parsed by pdfplumber."""
        self.release()
        try:
            obj = self._page_object(n)
            problem = content_problem(obj, self._pdf.doc, self._limits)
            if problem:
                return PageError(self.source, n, f"{where(self.source, n)}: {problem}")
            scan = self._scan_check(n)
            if isinstance(scan, PageError):
                return scan
            if scan is not None:
                return self._render(n, scan)
            import pdfplumber.page

            pl = pdfplumber.page.Page(self._pdf, obj, page_number=n)
            self._open_page = pl
            # Parsed here, while the file is open: a caller may keep the page after the
            # document is closed (the last page of ``read_pages``), and extraction needs it all.
            pl.layout
            width, height, rot = _display_size(pl)
            return VectorPage(self.source, n, width, height, pl, rot, self.source, self._data)
        except MemoryError:  # the worker answers for its memory limit
            raise
        except Exception as exc:
            self.release()
            return PageError(self.source, n, f"{where(self.source, n)}: damaged page ({_one_line(exc)})")

    def _pdfium_doc(self):
        import pypdfium2 as pdfium

        if self._pdfium is None:
            self._pdfium = pdfium.PdfDocument(self._data if self._data is not None else self.source,
                                              password=self._limits.password)
        return self._pdfium

    def _scan_check(self, n: int) -> float | PageError | None:
        """The dpi to render page ``n`` at when it only wraps a scanned image, else None; a
        :class:`PageError` when one of its images is over the pixel limit."""
        page = self._pdfium_doc()[n - 1]
        try:
            return scanned_page_dpi(page, self.source, n, self._limits)
        finally:
            page.close()

    def _page_object(self, n: int):
        """pdfminer's page ``n``, walking the page tree only as far as needed (a long file costs
        no more than its pages read)."""
        from pdfminer.pdfpage import PDFPage

        if self._walker is None:
            self._walker = PDFPage.create_pages(self._pdf.doc)
        while len(self._seen) < n:
            obj = next(self._walker, None)
            if obj is None:
                raise IndexError(f"the page tree holds {len(self._seen)} pages")
            self._seen.append(obj)
        return self._seen[n - 1]

    def _render(self, n: int, dpi: float) -> Page:
        import pypdfium2 as pdfium

        try:
            doc = self._pdfium_doc()
        except pdfium.PdfiumError as exc:
            return PageError(self.source, n, f"{where(self.source, n)}: could not be rendered ({_one_line(exc)})")
        return _render_page(doc, self.source, n, self._limits, dpi)

    def close(self) -> None:
        self.release()
        if self._pdfium is not None:
            with contextlib.suppress(Exception):
                self._pdfium.close()
        # Not pdfplumber's close(): it walks every page of the file first, to flush caches of
        # pages this document never built. Closing the file is all there is to do.
        if self._fh is not None:
            self._fh.close()
        self._pdfium = self._pdf = self._fh = None


def _pdfium_count(source: str | bytes, limits: ReadLimits) -> int | None:
    """Page count from pypdfium2, which reads it without walking the page tree; None if it cannot."""
    import pypdfium2 as pdfium

    try:
        doc = pdfium.PdfDocument(source, password=limits.password)
    except Exception:
        return None
    try:
        return len(doc)
    finally:
        doc.close()


def _display_size(pl) -> tuple[float, float, int]:
    """Page size in points as displayed (the CropBox after /Rotate), and the rotation.

    pdfplumber gives the CropBox already turned by /Rotate, in top-left coordinates.
    """
    rot = int(pl.rotation or 0) % 360
    x0, top, x1, bottom = getattr(pl, "cropbox", None) or pl.bbox
    return float(x1 - x0), float(bottom - top), rot


def scanned_page_dpi(page, source: str, n: int, limits: ReadLimits) -> float | PageError | None:
    """Resolution of a pypdfium2 page that only wraps a scanned image, else None.

    Such a page holds one image over most of it (70 %) and few drawn paths (under 5); an
    invisible text layer (from an earlier OCR) does not make it born-digital. Its resolution is
    the one pdfium reads off the largest image's pixel size and placement. An image whose
    stated size is over ``limits.max_pixels`` gives a :class:`PageError` before anything
    decodes it, on any page.
    """
    import pypdfium2 as pdfium

    w, h = page.get_size()
    area = float(w * h)
    paths, big, dpi = 0, 0.0, None
    for obj in page.get_objects(max_depth=4):
        if obj.type == pdfium.raw.FPDF_PAGEOBJ_PATH:
            paths += 1
        elif obj.type == pdfium.raw.FPDF_PAGEOBJ_IMAGE:
            meta = obj.get_metadata()
            if int(meta.width) * int(meta.height) > limits.max_pixels:
                return PageError(source, n, f"{where(source, n)}: an image of {meta.width} x {meta.height} pixels is over the "
                                            f"limit of {limits.max_pixels:,} pixels; not decoded")
            x0, y0, x1, y1 = obj.get_bounds()
            size = float(x1 - x0) * float(y1 - y0)
            if size > big:
                big, dpi = size, max(float(meta.horizontal_dpi), float(meta.vertical_dpi))
    if big >= 0.7 * area and paths < 5:
        return snap_dpi(dpi) or 200.0
    return None


#: Path construction and painting operators of a PDF content stream (ISO 32000-1, 8.5.2, 8.5.3),
#: as whole tokens: a delimiter or white space before and after.
_DRAW_OPS = re.compile(rb"(?<![^\s\])>])(?:re|[mlcvyhSsFn]|[fBb]\*?)(?=[\s\[(/<%]|$)")
#: ``/Name Do``: draw the XObject ``Name`` (ISO 32000-1, 8.8).
_DO = re.compile(rb"/([^\s/\[\]()<>{}%]+)\s*Do(?=[\s\[(/<%]|$)")


class _OverLimit(Exception):
    pass


def content_problem(page_obj, doc, limits: ReadLimits) -> str | None:
    """Why a PDF page's content is over a limit, or None, found before anything parses it.

    The page's content streams, and those of the form XObjects it draws (recursively), are
    inflated with a bounded decoder (never more than ``limits.max_content_bytes`` in all), and
    their path operators counted, a form once per use (so nested forms that multiply cannot
    hide their cost).
    """
    from pdfminer.pdftypes import PDFStream, resolve1

    budget = [limits.max_content_bytes]
    memo: dict[int, int] = {}

    def decoded(stream) -> bytes:
        data = _bounded_data(stream, budget[0])
        if data is None:
            raise _OverLimit(f"content is over the limit of {_mb(limits.max_content_bytes)} decoded (--max-content-mb); not read")
        budget[0] -= len(data)
        return data

    def ops_of(data: bytes, resources, path: tuple) -> int:
        count = len(_DRAW_OPS.findall(data))
        resources = resolve1(resources)
        xobjects = resolve1(resources.get("XObject")) if isinstance(resources, dict) else None
        if not isinstance(xobjects, dict):
            return count
        for name, uses in Counter(_DO.findall(data)).items():
            ref = xobjects.get(name.decode("latin-1"))
            form = resolve1(ref)
            if not (isinstance(form, PDFStream) and getattr(resolve1(form.attrs.get("Subtype")), "name", None) == "Form"):
                continue
            key = getattr(ref, "objid", id(form))
            if key in path or len(path) > 12:
                raise _OverLimit("form XObjects draw each other in a loop; not read")
            if key not in memo:
                memo[key] = ops_of(decoded(form), form.attrs.get("Resources") or resources, path + (key,))
            count += uses * memo[key]
            if count > limits.max_drawing_ops:
                break
        return count

    try:
        contents = page_obj.contents or []
        data = b"\n".join(decoded(resolve1(s)) for s in contents if isinstance(resolve1(s), PDFStream))
        ops = ops_of(data, page_obj.resources, ())
    except _OverLimit as exc:
        return str(exc)
    if ops > limits.max_drawing_ops:
        return f"draws over the limit of {limits.max_drawing_ops:,} path operations (--max-drawing-ops); not read"
    return None


def _inflate(raw: bytes, limit: int) -> bytes | None:
    """Flate-decoded ``raw``, or None when that is more than ``limit`` bytes.

    Fed in steps, each allowed only what is left of the limit. Damaged data yields what comes
    before the damage (as pdfminer's own decoder does).
    """
    d = zlib.decompressobj()
    out = bytearray()
    step = 1 << 16
    try:
        for pos in range(0, len(raw), step):
            out += d.decompress(raw[pos:pos + step], limit + 1 - len(out))
            while d.unconsumed_tail and len(out) <= limit:
                out += d.decompress(d.unconsumed_tail, limit + 1 - len(out))
            if len(out) > limit:
                return None
            if d.eof:
                break
    except zlib.error:
        pass
    return bytes(out)


def _mb(nbytes: int) -> str:
    return f"{nbytes / (1024 * 1024):g} MB"


def _bounded_data(stream, limit: int) -> bytes | None:
    """A stream's decoded bytes, or None when they would be more than ``limit``.

    Flate (the filter content streams use in practice) is inflated in steps that stop at the
    limit, so a small stream that would inflate to gigabytes costs no more than ``limit``. Other
    filters go through pdfminer's decoder, refused beforehand when even their input is over.
    """
    filters = [getattr(f, "name", f) for f, _ in stream.get_filters()]
    if stream.data is not None:  # decoded already
        return stream.data if len(stream.data) <= limit else None
    raw = stream.rawdata
    if raw is None:
        return b""
    if stream.decipher:  # an encrypted file: its streams are deciphered before decoding
        raw = stream.decipher(stream.objid, stream.genno, raw, stream.attrs)
    if all(f in ("FlateDecode", "Fl") for f in filters):
        data = raw
        for _ in filters:
            data = _inflate(data, limit)
            if data is None:
                return None
        return data
    if len(raw) > limit:
        return None
    data = stream.get_data()
    return None if len(data) > limit else data


def render_pdf_page(source: str, n: int, limits: ReadLimits, dpi: float, oversample: int = 1,
                    data: bytes | None = None) -> Page:
    """Render one PDF page to a grey :class:`RasterPage` with pypdfium2 (``/Rotate`` applied).

    With ``oversample`` k > 1 the page is rendered at k times ``dpi`` and each k x k block of
    pixels averaged: edges come out anti-aliased at their true places instead of snapped to the
    pixel grid, as in a scanner's optics. ``data``, when given, is the PDF's content (``source``
    then only names it).
    """
    import pypdfium2 as pdfium

    try:
        doc = pdfium.PdfDocument(data if data is not None else source, password=limits.password)
    except pdfium.PdfiumError as exc:
        return PageError(source, n, f"{where(source, n)}: could not be rendered ({_one_line(exc)})")
    try:
        page = _render_page(doc, source, n, limits, dpi * oversample)
    finally:
        doc.close()
    if oversample > 1 and isinstance(page, RasterPage):
        k = int(oversample)
        h, w = page.image.shape[0] // k, page.image.shape[1] // k
        block = page.image[: h * k, : w * k].reshape(h, k, w, k).astype(np.float32)
        image = np.round(block.mean(axis=(1, 3))).astype(np.uint8)
        return RasterPage(source, n, image, float(dpi), False)
    return page


def _render_page(doc, source: str, n: int, limits: ReadLimits, dpi: float) -> Page:
    page = None
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
        with contextlib.suppress(Exception):
            bitmap.close()
        if arr.ndim == 3:
            arr = arr[..., 0]
        return RasterPage(source, n, arr, float(dpi), False)
    except MemoryError:  # the worker answers for its memory limit
        raise
    except Exception as exc:
        return PageError(source, n, f"{where(source, n)}: could not be rendered ({_one_line(exc)})")
    finally:
        if page is not None:
            with contextlib.suppress(Exception):
                page.close()


#: Ink less than this many grey levels darker than the paper is faint print (a copy of a copy,
#: dropout colours): still read, but said in a finding. Measured in bench/bench_intake.py: black
#: print scanned, blurred and JPEG-compressed keeps over 150 levels; faded print about 90.
FAINT_CONTRAST = 110.0
#: Least darkness, in grey levels below the paper, that can be ink (whatever the noise).
MIN_INK_CONTRAST = 20.0


@dataclass(frozen=True)
class PageContrast:
    """How a grey page's ink stands out from its paper (grey levels, 0 black .. 255 white)."""

    #: Grey of the paper (the median pixel: a form inks a few percent of the sheet).
    paper: float
    #: Grey of the ink's dark core: the paper's grey less the 90th percentile of how much darker
    #: than the paper around it the pixels counted as ink are.
    ink: float
    #: Spread of the paper's grey about its level where it lies (1.4826 x the median absolute
    #: deviation: a Gaussian's sigma).
    noise: float
    #: Share of the sheet darker than the paper around it by more than ``max(20, 5 x noise)`` levels.
    ink_share: float
    #: Share of the sheet below mid-grey (128).
    dark_share: float

    @property
    def contrast(self) -> float:
        """Paper minus ink, grey levels."""
        return self.paper - self.ink


def page_contrast(image: np.ndarray) -> PageContrast:
    """The contrast structure of a grey page, from an even sample of about 250,000 pixels (the
    paper's level and noise from a quarter of it).

    Ink is what is darker than the paper by more than the paper's own noise can explain (five
    sigmas, at least :data:`MIN_INK_CONTRAST` levels), whatever the absolute grey: faded print
    and light dropout colours count as ink, a blank sheet with noise does not.
    """
    import cv2

    step = max(1, int(np.sqrt(image.size / 250_000)))
    grid = image[::step, ::step].astype(np.float32)
    sample = grid.ravel()
    # The paper's levels, smooth over a sixteenth of the page, need only a quarter of the sample.
    coarse = grid[::2, ::2]
    paper = float(np.median(coarse))
    # Ink is measured against the paper where it lies: light falling off across the sheet (or a
    # shadow) spreads the paper's grey far more than its noise does.
    level = cv2.resize(paper_level(coarse), (grid.shape[1], grid.shape[0]), interpolation=cv2.INTER_LINEAR)
    below = (level - grid).ravel()
    some = below[::4]
    noise = 1.4826 * float(np.median(np.abs(some - np.median(some))))
    ink_mask = below > max(MIN_INK_CONTRAST, 5.0 * noise)
    ink_share = float(ink_mask.mean())
    ink = paper - float(np.percentile(below[ink_mask], 90)) if ink_mask.any() else paper
    return PageContrast(paper, ink, noise, ink_share, float((sample < 128).mean()))


#: Side of the blocks over which :func:`paper_level` takes the paper's grey, as a share of the
#: page's longer side: large enough that a dense table leaves most of a block paper.
PAPER_BLOCK_SHARE = 1.0 / 16.0


def paper_level(grey: np.ndarray) -> np.ndarray:
    """The paper's grey under every pixel: the median of each block (:data:`PAPER_BLOCK_SHARE`
    of the page), interpolated between block centres (bilinear, OpenCV)."""
    import cv2

    h, w = grey.shape
    b = max(8, int(round(max(h, w) * PAPER_BLOCK_SHARE)))
    ny, nx = max(1, int(np.ceil(h / b))), max(1, int(np.ceil(w / b)))
    pad = np.pad(grey, ((0, ny * b - h), (0, nx * b - w)), mode="edge")
    med = np.median(pad.reshape(ny, b, nx, b).transpose(0, 2, 1, 3).reshape(ny, nx, b * b), axis=2)
    full = cv2.resize(med.astype(np.float32), (nx * b, ny * b), interpolation=cv2.INTER_LINEAR)
    return full[:h, :w]


def page_content_problem(image: np.ndarray, contrast: PageContrast | None = None) -> str | None:
    """Why a grey page image cannot hold a form, or None: blank paper or solid black.

    Blank is judged from the page's contrast (:func:`page_contrast`), not from a fixed grey: a
    printed form inks a few percent of the sheet (common practice: office forms run at 2-15 %
    coverage), so a sheet with ink over under 0.05 % of it is blank paper with specks, however
    light or dark its print. Over 85 % below mid-grey is a black page (a scan with the lid open,
    or an inverted image).
    """
    if image.size == 0:
        return "page image is empty"
    c = page_contrast(image) if contrast is None else contrast
    if c.dark_share > 0.85:
        return f"page is almost all black ({c.dark_share:.0%} of the sheet is dark); no form can be seen"
    if c.ink_share < 0.0005:
        return (f"blank page ({c.ink_share:.2%} of the sheet is darker than the paper by more than "
                f"{max(MIN_INK_CONTRAST, 5.0 * c.noise):.0f} grey levels); no form on it")
    return None


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
    return square_pixels(out).image


def read_colour(path: str | os.PathLike, page: int) -> np.ndarray | None:
    """The RGB pixels of a page of a colour image file (PNG, JPEG, TIFF), or None.

    None for a grey or bitonal page, a PDF, or a file that cannot be read: colour is a cue for
    telling fill-in from print when learning, never needed. Pixels match :func:`read_pages`'
    grey image (EXIF orientation applied, transparency on white).
    """
    from PIL import Image, ImageOps

    try:
        with Image.open(path) as im:
            im.seek(page - 1)
            if im.mode not in ("RGB", "RGBA", "P", "PA", "CMYK", "YCbCr"):
                return None
            frame = ImageOps.exif_transpose(im) if _exif_orientation(im) not in (None, 1) else im
            if frame.mode in ("RGBA", "P", "PA"):
                rgba = frame.convert("RGBA")
                frame = Image.new("RGBA", rgba.size, (255, 255, 255, 255))
                frame.alpha_composite(rgba)
            return np.asarray(frame.convert("RGB"), dtype=np.uint8)
    except Exception:
        return None

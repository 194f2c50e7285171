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
    return RasterPage(page.source, page.page, image, dpi, page.bitonal)


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


def open_document(path: str | os.PathLike, limits: ReadLimits = ReadLimits(), pages: set[int] | None = None) -> Document:
    """Open one input file (PDF, PNG, JPEG, TIFF) and plan what it yields; never raises.

    The document's ``source`` (and so every record's) is the absolute path of the file, so that
    any reader of a record finds the file again whatever its own working folder.
    """
    source = record_path(path)
    p = Path(source)
    try:
        if not p.exists():
            return _failed(source, "no such file")
        if p.is_dir():
            return _failed(source, "is a folder, not a file")
        if p.stat().st_size == 0:
            return _failed(source, "empty file (0 bytes)")
        head = _head(p, 1024)
        if head.startswith(b"%PDF") or (p.suffix.lower() in PDF_EXTENSIONS and b"%PDF" in head):
            return _PdfDocument.open(source, limits, pages)
        if p.suffix.lower() in PDF_EXTENSIONS:
            return _failed(source, "not a PDF (no %PDF header)")
        return _ImageDocument.open(source, limits, pages)
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
    def open(cls, source: str, limits: ReadLimits, pages: set[int] | None) -> Document:
        from PIL import Image, UnidentifiedImageError

        try:
            with warnings.catch_warnings():
                # Our own pixel limit is checked before anything is decoded; Pillow's bomb
                # check stays on as a second guard (it refuses beyond twice its own limit).
                warnings.simplefilter("ignore", Image.DecompressionBombWarning)
                img = Image.open(source)
        except Image.DecompressionBombError as exc:
            return _failed(source, f"image is over the pixel limit; not decoded ({_one_line(exc)})")
        except UnidentifiedImageError:
            return _failed(source, "not an image this tool reads (PNG, JPEG, TIFF or PDF)")
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
        except Exception as exc:
            return PageError(self.source, n, f"{where(self.source, n)}: frame could not be reached ({_one_line(exc)})")
        return _image_page(self.source, n, self._img, self._limits)

    def close(self) -> None:
        with contextlib.suppress(Exception):
            self._img.close()


def _image_page(source: str, n: int, frame, limits: ReadLimits) -> Page:
    from PIL import Image, ImageOps

    w, h = frame.size
    if w * h > limits.max_pixels:
        return PageError(source, n, f"{where(source, n)}: {w} x {h} pixels is over the limit of {limits.max_pixels:,} pixels; not decoded")
    if w < 16 or h < 16:
        return PageError(source, n, f"{where(source, n)}: {w} x {h} pixels is too small to be a page")
    stated = stated_dpi(frame)
    dpi_x, dpi_y = (snap_dpi(v) for v in stated) if stated else (None, None)
    if dpi_x is None or dpi_y is None:
        dpi_x = dpi_y = limits.dpi
    if dpi_x is None:
        return PageError(source, n, f"{where(source, n)}: resolution unknown (the file states no dpi, or one below 72); give --dpi N")
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
    except Exception as exc:
        return PageError(source, n, f"{where(source, n)}: image data is damaged ({_one_line(exc)})")
    if _exif_orientation(frame) in (5, 6, 7, 8):
        dpi_x, dpi_y = dpi_y, dpi_x  # the image was turned a quarter: its rows were its columns
    return RasterPage(source, n, arr, float(dpi_x), bitonal, float(dpi_y))


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


class _PdfDocument(Document):
    def __init__(self, source: str, plan: list, pdf, limits: ReadLimits):
        super().__init__(source, plan)
        self._pdf = pdf
        self._limits = limits
        self._open_page = None
        self._pdfium = None
        self._walker = None
        self._seen: list = []  # pdfminer page objects walked so far (small)

    @classmethod
    def open(cls, source: str, limits: ReadLimits, pages: set[int] | None) -> Document:
        import pdfplumber

        try:
            pdf = pdfplumber.open(source, password=limits.password or "")
        except Exception as exc:
            if _is_password_error(exc):
                return _failed(source, "PDF is " + ("encrypted and the password is wrong" if limits.password
                                                    else "encrypted; give --password"))
            return _failed(source, f"damaged PDF ({_one_line(exc)})")
        try:
            count = _pdfium_count(source, limits)
            if count is None:
                count = len(pdf.pages)
        except Exception as exc:
            with contextlib.suppress(Exception):
                pdf.close()
            if _is_password_error(exc):
                return _failed(source, "PDF is encrypted; give --password")
            return _failed(source, f"damaged PDF page tree ({_one_line(exc)})")
        if count == 0:
            with contextlib.suppress(Exception):
                pdf.close()
            return _failed(source, "PDF has no pages (empty or broken page tree)")
        return cls(source, _numbers(source, count, limits, pages), pdf, limits)

    def release(self) -> None:
        if self._open_page is not None:
            with contextlib.suppress(Exception):
                self._open_page.close()
            self._open_page = None

    def page(self, n: int) -> Page:
        self.release()
        try:
            pl = self._plumber_page(n)
            self._open_page = pl
            width, height, rot = _display_size(pl)
            if is_scanned_page(pl):
                dpi = _image_dpi(pl, width)
                self.release()
                return self._render(n, dpi)
            return VectorPage(self.source, n, width, height, pl, rot, self.source)
        except Exception as exc:
            self.release()
            return PageError(self.source, n, f"{where(self.source, n)}: damaged page ({_one_line(exc)})")

    def _plumber_page(self, n: int):
        """Page ``n``, walking the page tree only as far as needed (a long file costs no more
        than its pages read)."""
        import pdfplumber.page
        from pdfminer.pdfpage import PDFPage

        if self._walker is None:
            self._walker = PDFPage.create_pages(self._pdf.doc)
        while len(self._seen) < n:
            obj = next(self._walker, None)
            if obj is None:
                raise IndexError(f"the page tree holds {len(self._seen)} pages")
            self._seen.append(obj)
        return pdfplumber.page.Page(self._pdf, self._seen[n - 1], page_number=n)

    def _render(self, n: int, dpi: float) -> Page:
        import pypdfium2 as pdfium

        if self._pdfium is None:
            try:
                self._pdfium = pdfium.PdfDocument(self.source, password=self._limits.password)
            except pdfium.PdfiumError as exc:
                return PageError(self.source, n, f"{where(self.source, n)}: could not be rendered ({_one_line(exc)})")
        return _render_page(self._pdfium, self.source, n, self._limits, dpi)

    def close(self) -> None:
        self.release()
        pdf = self._pdf
        if self._pdfium is not None:
            with contextlib.suppress(Exception):
                self._pdfium.close()
        if pdf is not None:
            with contextlib.suppress(Exception):
                # pdfplumber's own close() walks every page first; we never built its page list.
                if not hasattr(pdf, "_pages") and getattr(pdf, "stream_is_external", True) is False:
                    pdf.stream.close()
                else:
                    pdf.close()
        self._pdfium = self._pdf = None


def _pdfium_count(source: str, limits: ReadLimits) -> int | None:
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
    # Each axis is snapped on its own (an image of a 204 x 98 dpi fax wrapped in a PDF); the page
    # is rendered, with square pixels, at the finer of the two, so no detail is lost.
    per_axis = [snap_dpi(px_w / w_in) if w_in else None, snap_dpi(px_h / h_in) if h_in else None]
    return max((d for d in per_axis if d), default=200.0)


def render_pdf_page(source: str, n: int, limits: ReadLimits, dpi: float, oversample: int = 1) -> Page:
    """Render one PDF page to a grey :class:`RasterPage` with pypdfium2 (``/Rotate`` applied).

    With ``oversample`` k > 1 the page is rendered at k times ``dpi`` and each k x k block of
    pixels averaged: edges come out anti-aliased at their true places instead of snapped to the
    pixel grid, as in a scanner's optics.
    """
    import pypdfium2 as pdfium

    try:
        doc = pdfium.PdfDocument(source, password=limits.password)
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
    #: Grey of the ink's dark core (10th percentile of the pixels counted as ink).
    ink: float
    #: Spread of the paper's grey (1.4826 x its median absolute deviation: a Gaussian's sigma).
    noise: float
    #: Share of the sheet darker than the paper by more than ``max(20, 5 x noise)`` levels.
    ink_share: float
    #: Share of the sheet below mid-grey (128).
    dark_share: float

    @property
    def contrast(self) -> float:
        """Paper minus ink, grey levels."""
        return self.paper - self.ink


def page_contrast(image: np.ndarray) -> PageContrast:
    """The contrast structure of a grey page, from an even sample of about 250,000 pixels.

    Ink is what is darker than the paper by more than the paper's own noise can explain (five
    sigmas, at least :data:`MIN_INK_CONTRAST` levels), whatever the absolute grey: faded print
    and light dropout colours count as ink, a blank sheet with noise does not.
    """
    step = max(1, int(np.sqrt(image.size / 250_000)))
    sample = image[::step, ::step].astype(np.float32).ravel()
    paper = float(np.median(sample))
    noise = 1.4826 * float(np.median(np.abs(sample - paper)))
    ink_mask = sample < paper - max(MIN_INK_CONTRAST, 5.0 * noise)
    ink_share = float(ink_mask.mean())
    ink = float(np.percentile(sample[ink_mask], 10)) if ink_mask.any() else paper
    return PageContrast(paper, ink, noise, ink_share, float((sample < 128).mean()))


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

"""The hostile corpus under the default limits, and the measurements the limits' defaults rest on.

Run: ``python bench/bench_hostile.py`` (about 10 minutes on 2 cores); prints markdown tables and
writes ``bench/results/hostile.md``. Parts (``--part``): ``corpus``, ``memory``, ``parse``,
``scanner``.

- **corpus**: every kind of hostile input (``tests/hostile_corpus.py`` and the makers in
  ``tests/test_hostile.py``), each in a batch of its own beside a good page, with ``-j 2`` and
  the default limits, in a fresh process: per kind the verdicts, the wall time of the batch, the
  longest page (``elapsed_ms``), the peak RSS of its worker processes, and whether the good page
  still passed. Then the whole corpus in one batch, with ``-j 2``.
- **memory**: the memory a worker needs for a born-digital page, an A4 scan at 300 dpi and an A3
  scan at 600 dpi (the smallest of a ladder of ``--max-memory`` values under which the page
  passes), and the address space against the data segment of an idle worker (why the limit is
  ``RLIMIT_DATA``).
- **parse**: how fast pdfplumber reads drawn paths, and the memory they take (for the default
  limit on drawing operations).
- **scanner**: reading the pages of the scanner PDF (image-only pages) through pypdfium2 alone,
  as now, against parsing each page's content with pdfplumber first to find its image, as
  before; median of 7 interleaved runs.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import shutil
import statistics
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))

import numpy as np  # noqa: E402

import hostile_corpus as H  # noqa: E402

SAMPLES = ROOT / "sample_forms"
EXACT = SAMPLES / "inputs" / "101_exact.pdf"
TEMPLATE = ROOT / "templates" / "KBH-101.json"
OUT = ROOT / "bench" / "results" / "hostile.md"


# -- the corpus -----------------------------------------------------------------------------------
def _black(p):
    return H.save_image(p, np.zeros((600, 400), np.uint8))


def _white(p):
    return H.save_image(p, np.full((1169, 827), 255, np.uint8))


def _photo(p):
    from skimage import color, data

    return H.save_image(p, (color.rgb2gray(data.astronaut()) * 255).astype(np.uint8), dpi=72)


def _cut(p, keep=3):
    data = EXACT.read_bytes()
    p.write_bytes(data[: len(data) // keep])
    return p


def _cut_image(p):
    H.save_image(p, H.rendered_101())
    p.write_bytes(p.read_bytes()[:5000])
    return p


def _memory_hog(p):
    """An image-only A2 page (ISO 216: 420 x 594 mm) holding a 14,000 x 19,800 image of a grid:
    277 million pixels, under the pixel limit (300 million), far over what a worker can check
    within 1536 MB."""
    import zlib

    w, h = 14_000, 19_800
    comp = zlib.compressobj(6)
    # A grid of boxes: rules 12 px wide every 400 px, across and down.
    row = bytes(0 if x % 400 < 12 else 255 for x in range(w))
    rule = b"\x00" * w
    parts = [comp.compress(rule if y % 400 < 12 else row) for y in range(h)]
    data = b"".join(parts) + comp.flush()
    img = (b"<< /Type /XObject /Subtype /Image /Width %d /Height %d /ColorSpace /DeviceGray /BitsPerComponent 8 "
           b"/Filter /FlateDecode /Length %d >>\nstream\n" % (w, h, len(data)) + data + b"\nendstream")
    a2 = (1191, 1684)  # A2 in points
    objs = [b"<< /Type /Catalog /Pages 2 0 R >>", b"<< /Type /Pages /Kids [3 0 R] /Count 1 >>",
            b"<< /Type /Page /Parent 2 0 R /MediaBox [0 0 %d %d] /Contents 4 0 R /Resources << /XObject << /Im 5 0 R >> >> >>" % a2,
            H.stream(b"", b"q %d 0 0 %d 0 0 cm /Im Do Q\n" % a2), img]
    return H.raw_pdf(p, objs)


def _growing(p):
    shutil.copy(EXACT, p)
    return p


def kinds() -> dict:
    """Kind -> (file name, maker). The first sixteen were the hostile tests before the corpus grew."""
    from test_hostile import blank_pdf, corrupt_tiff, encrypted, png_header_only, slow_pdf

    return {
        "zero-byte file": ("empty.pdf", lambda p: (p.write_bytes(b""), p)[1]),
        "text named .pdf": ("notes.pdf", lambda p: (p.write_text("not a form\n"), p)[1]),
        "truncated PDF": ("cut.pdf", _cut),
        "PDF with no pages": ("nopages.pdf", lambda p: blank_pdf(p, 0)),
        "encrypted PDF": ("locked.pdf", encrypted),
        "truncated PNG": ("cut.png", _cut_image),
        "truncated JPEG": ("cut.jpg", _cut_image),
        "TIFF with a corrupt frame": ("three.tif", corrupt_tiff),
        "1 x 1 pixel image": ("dot.png", lambda p: H.save_image(p, np.zeros((1, 1), np.uint8))),
        "PNG stating 100,000 x 100,000": ("huge.png", lambda p: png_header_only(p, 100_000, 100_000)),
        "black page": ("black.png", _black),
        "blank page": ("white.png", _white),
        "blank PDF page": ("blank.pdf", lambda p: blank_pdf(p, 1)),
        "photograph": ("photo.png", _photo),
        "10,000 blank PDF pages": ("long.pdf", lambda p: blank_pdf(p, 10_000)),
        "40,000 drawn strokes (slow page)": ("slow.pdf", slow_pdf),
        "Flate bomb in a content stream (120 MB)": ("bomb.pdf", lambda p: H.content_bomb(p, 120)),
        "forms drawing forms (3 million operations)": ("forms.pdf", lambda p: H.form_multiplier(p, 100, 100, 2)),
        "form drawing itself": ("formloop.pdf", H.form_loop),
        "Flate bomb in an image stream (400 MB)": ("ibomb.pdf", lambda p: H.image_stream_bomb(p, 400)),
        "JBIG2 image of absurd size": ("jbig2.pdf", lambda p: H.absurd_image(p, b"/JBIG2Decode")),
        "JPX image of absurd size": ("jpx.pdf", lambda p: H.absurd_image(p, b"/JPXDecode")),
        "100,000 empty PDF pages": ("many.pdf", H.many_pages),
        "page tree loop": ("treeloop.pdf", H.page_tree_loop),
        "xref loop": ("xrefloop.pdf", H.xref_loop),
        "PNG with a 200 MB zTXt chunk": ("ztxt.png", H.png_ztxt_bomb),
        "JPEG with a truncated scan": ("scan.jpg", H.jpeg_truncated_scan),
        "TIFF of 10,000 tiny frames": ("frames.tif", H.tiff_many_frames),
        "1 x 100,000 pixel strip": ("strip.png", H.strip_image),
        "TIFF with wrong StripByteCounts": ("strips.tif", H.tiff_wrong_strip_counts),
        "symlink loop": ("symloop.pdf", H.symlink_loop),
        "permission denied": ("locked_out.pdf", H.unreadable),
        "file growing while read": ("growing.pdf", _growing),
        "name with a newline": (None, lambda d: H.odd_name(d, b"line\nbreak.pdf")),
        "name not UTF-8": (None, lambda d: H.odd_name(d, b"caf\xe9.pdf")),
        "named pipe": ("pipe.pdf", lambda p: (os.mkfifo(p), p)[1]),
        "scanned A2 page of 277 Mpx (the heaviest the other limits admit)": ("hog.pdf", _memory_hog),
        "the same page with --max-memory 512": ("hog.pdf", _memory_hog),
    }


def make_kind(folder: Path, kind: str) -> Path:
    name, maker = kinds()[kind]
    return maker(folder) if name is None else maker(folder / name)


def without_file_override() -> list[str]:
    """Under root, drop the capability that reads any file, so "permission denied" is real."""
    if os.geteuid() == 0 and shutil.which("setpriv"):
        return ["setpriv", "--inh-caps=-all", "--bounding-set=-dac_override,-dac_read_search", "--"]
    return []


def run_one(files: list[str], out: Path, grow: bool, memory_mb: int | None = None) -> dict:
    """One batch (``-j 2``, default limits unless ``memory_mb``) over ``files``: what the table needs."""
    from layoutcheck.batch import BatchOptions, run_batch
    from layoutcheck.sources import printable
    from layoutcheck.template import load_template

    stop = threading.Event()

    def grower(path):
        with open(path, "ab") as fh:
            while not stop.is_set():
                fh.write(b"%% more bytes arriving\n" * 200)  # 4.6 KB every 10 ms, as a slow copy would
                fh.flush()
                time.sleep(0.01)

    threads = [threading.Thread(target=grower, args=(f,)) for f in files if grow and "growing" in f]
    for t in threads:
        t.start()
    t0 = time.perf_counter()
    try:
        res = run_batch(files, [load_template(TEMPLATE)], output=str(out),
                        options=BatchOptions(jobs=2, keep_records=True, **({"memory_mb": memory_mb} if memory_mb else {})))
    finally:
        stop.set()
        for t in threads:
            t.join()
    wall = time.perf_counter() - t0
    good = [r for r in res.records if os.path.basename(r["source"]) == "zz_good.pdf"]
    bad = [r for r in res.records if os.path.basename(r["source"]) != "zz_good.pdf"]
    verdicts: dict = {}
    for r in bad:
        verdicts[r["verdict"]] = verdicts.get(r["verdict"], 0) + 1
    # What each record says: the error, or the first finding (an unrecognised page says why).
    errors = sorted({(r["error"] or r["findings"][0]["message"]).split(": ", 1)[-1][:90] for r in bad if r["findings"]})
    over = sorted({printable(os.path.basename(r["source"])) for r in res.records if r["error"] and "(--page-timeout)" in r["error"]})
    return {"wall_s": wall, "verdicts": verdicts, "timed_out": over, "longest_ms": max((r["elapsed_ms"] for r in res.records), default=0.0),
            "worker_rss_mb": resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024,
            "good_pass": [r["verdict"] for r in good] == ["pass"] * len(good) and bool(good),
            "records": len(res.records), "errors": errors[:2]}


def corpus_part(rows: list, tmp: Path) -> None:
    names = list(kinds())
    results = {}
    for kind in names:
        d = tmp / f"k{names.index(kind):02d}"
        d.mkdir()
        make_kind(d, kind)
        shutil.copy(EXACT, d / "zz_good.pdf")
        cmd = without_file_override() + [sys.executable, __file__, "--one", str(d)] + (["--grow"] if "growing" in kind else [])
        cmd += ["--memory", "512"] if "--max-memory 512" in kind else []
        res = subprocess.run(cmd, capture_output=True, text=True, timeout=900)
        if res.returncode != 0:
            raise SystemExit(f"{kind}: the batch failed:\n{res.stderr[-2000:]}")
        results[kind] = json.loads(res.stdout.strip().splitlines()[-1])
        r = results[kind]
        print(f"{kind}: {r['verdicts']} {r['wall_s']:.1f} s, worker {r['worker_rss_mb']:.0f} MB, "
              f"good {'pass' if r['good_pass'] else 'NOT PASS'}; {r['errors'][:1]}", flush=True)
    rows.append(("### Hostile corpus, one kind per batch beside a good page (-j 2, default limits)", None))
    rows.append(("| kind | records | verdicts | what the record says | batch wall s | longest page s | worker peak RSS MB | good page |", None))
    rows.append(("|---|---|---|---|---|---|---|---|", None))
    for kind, r in results.items():
        v = ", ".join(f"{n} {k}" for k, n in sorted(r["verdicts"].items()))
        what = "; ".join(r["errors"]).replace("|", "/").replace("\n", " ") or "-"
        rows.append((f"| {kind} | {r['records'] - 1} | {v} | {what} | {r['wall_s']:.1f} | {r['longest_ms'] / 1000:.1f} | "
                     f"{r['worker_rss_mb']:.0f} | {'pass' if r['good_pass'] else 'NOT PASS'} |", None))
    worst_page = max(r["longest_ms"] for r in results.values()) / 1000
    worst_rss = max(r["worker_rss_mb"] for r in results.values())
    rows.append(("", None))
    rows.append((f"{len(results)} kinds. Longest page {worst_page:.1f} s (limit 60 s); highest worker peak RSS "
                 f"{worst_rss:.0f} MB (limit 1536 MB of data); good page passed beside "
                 f"{sum(r['good_pass'] for r in results.values())} of {len(results)} kinds.", None))

    # Everything in one batch.
    d = tmp / "all"
    d.mkdir()
    for k, kind in enumerate(names):
        if "--max-memory" in kind:
            continue  # the whole corpus runs under the default limits only
        sub = d / f"k{k:02d}"
        sub.mkdir()
        make_kind(sub, kind)
    shutil.copy(EXACT, d / "zz_good.pdf")
    cmd = without_file_override() + [sys.executable, __file__, "--one", str(d), "--grow"]
    res = subprocess.run(cmd, capture_output=True, text=True, timeout=1800)
    if res.returncode != 0:
        raise SystemExit(f"the whole corpus batch failed:\n{res.stderr[-2000:]}")
    r = json.loads(res.stdout.strip().splitlines()[-1])
    v = ", ".join(f"{n} {k}" for k, n in sorted(r["verdicts"].items()))
    rows.append(("", None))
    rows.append((f"The whole corpus in one batch (-j 2): {r['records']} records ({v}, and the good page "
                 f"{'passed' if r['good_pass'] else 'DID NOT PASS'}) in {r['wall_s']:.0f} s; longest page "
                 f"{r['longest_ms'] / 1000:.1f} s; worker peak RSS {r['worker_rss_mb']:.0f} MB; over the page time limit: "
                 f"{', '.join(r['timed_out']) or 'none'}.", None))


# -- memory a page needs --------------------------------------------------------------------------
def memory_part(rows: list, tmp: Path) -> None:
    from PIL import Image

    from layoutcheck.batch import _Worker
    from layoutcheck.check import CheckSettings
    from layoutcheck.simulate import save_scan, simulate_scan
    from layoutcheck.sources import ReadLimits
    from layoutcheck.template import load_template

    ref = SAMPLES / "references" / "KBH-101_vessel_arrival.pdf"
    save_scan(simulate_scan(str(ref), seed=1, dpi=300, rotation_deg=1.0), tmp / "a4_300.png")
    s = simulate_scan(str(ref), seed=1, dpi=600, rotation_deg=1.0)
    a3 = np.full((9921, 7016), 255, np.uint8)  # A3 at 600 dpi: 297 x 420 mm (ISO 216)
    a3[: s.image.shape[0], : s.image.shape[1]] = s.image
    Image.fromarray(a3).save(tmp / "a3_600.png", dpi=(600, 600))
    pages = {"born-digital PDF page": str(SAMPLES / "inputs" / "101_filled.pdf"),
             "A4 scan, 300 dpi (8.7 Mpx)": str(tmp / "a4_300.png"), "A3 scan, 600 dpi (70 Mpx)": str(tmp / "a3_600.png")}
    templates = [load_template(TEMPLATE)]
    ladder = (128, 192, 256, 320, 384, 448, 512, 640, 768, 1024)

    def status(pid):
        out = {}
        for line in open(f"/proc/{pid}/status"):
            k, v = line.split(":", 1)
            out[k] = int(v.split()[0]) / 1024 if v.strip().endswith("kB") else v.strip()
        return out

    def idle_worker() -> dict:
        w = _Worker(templates, CheckSettings(), ReadLimits(), None)
        w.conn.recv()
        out = status(w.proc.pid)
        w.close()
        return out

    idle = idle_worker()
    os.environ["OPENBLAS_NUM_THREADS"] = str(os.cpu_count())  # as a worker would have it by default
    pooled = idle_worker()
    del os.environ["OPENBLAS_NUM_THREADS"]
    rows.append(("### Memory of a worker", None))
    rows.append(("| idle worker (readers imported) | address space MB | data segment MB | resident MB |", None))
    rows.append(("|---|---|---|---|", None))
    rows.append((f"| one BLAS thread (as workers run) | {idle['VmSize']:.0f} | {idle['VmData']:.0f} | {idle['VmRSS']:.0f} |", None))
    rows.append((f"| BLAS pool of {os.cpu_count()} threads (the library's default) | {pooled['VmSize']:.0f} | {pooled['VmData']:.0f} | "
                 f"{pooled['VmRSS']:.0f} |", None))
    rows.append(("", None))
    rows.append(("The limit is on the data segment (RLIMIT_DATA): a limit on the address space (RLIMIT_AS) would also "
                 "count what is reserved and never used.", None))
    rows.append(("", None))
    rows.append(("| page | passes under --max-memory (MB) | refused under (MB) |", None))
    rows.append(("|---|---|---|", None))
    for label, path in pages.items():
        passed, refused = None, None
        for mb in ladder:
            w = _Worker(templates, CheckSettings(), ReadLimits(), mb)
            try:
                w.conn.recv()
            except EOFError:
                refused = mb
                w.kill()
                continue
            w.send(("page", 0, path, 1))
            try:
                got = w.conn.recv()
                ok = got[3]["error"] is None
            except EOFError:
                ok = False
            w.kill()
            if ok:
                passed = mb
                break
            refused = mb
        rows.append((f"| {label} | {passed} | {refused if refused else '-'} |", None))
        print(label, passed, refused, flush=True)


# -- parse rate -----------------------------------------------------------------------------------
PARSE_CHILD = r"""
import sys, time, resource
sys.path.insert(0, {root!r}); sys.path.insert(0, {tests!r})
import numpy as np
import hostile_corpus as H
from layoutcheck.check import extract
from layoutcheck.sources import ReadLimits, read_pages
n = {n}
rng = np.random.default_rng(0)
xs, ys = rng.uniform(0, 590, n), rng.uniform(0, 840, n)
content = b"".join(b"%.1f %.1f m %.1f %.1f l S\n" % (x, y, x + 3, y) for x, y in zip(xs, ys))
H.one_page_pdf({path!r}, content)
del xs, ys
def status(key):
    return next(int(l.split()[1]) for l in open("/proc/self/status") if l.startswith(key + ":")) / 1024
base = status("VmRSS")
with open("/proc/self/clear_refs", "w") as fh:
    fh.write("5")  # reset the peak resident size to the current one (Linux, proc(5))
t0 = time.perf_counter()
page = next(read_pages({path!r}, ReadLimits(max_drawing_ops=10 ** 9, max_content_bytes=1 << 40)))
found = extract(page)
dt = time.perf_counter() - t0
print(3 * n, len(content), dt, status("VmHWM") - base)
"""


def parse_part(rows: list, tmp: Path) -> None:
    rows.append(("### Reading drawn paths (pdfplumber, then extraction), one page", None))
    rows.append(("| path operations | content KB | seconds | operations per second | memory MB | KB per operation |", None))
    rows.append(("|---|---|---|---|---|---|", None))
    for n in (20_000, 80_000):
        code = PARSE_CHILD.format(root=str(ROOT), tests=str(ROOT / "tests"), n=n, path=str(tmp / f"ops{n}.pdf"))
        out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=600)
        ops, size, dt, mem = out.stdout.split()
        ops, size, dt, mem = int(ops), int(size), float(dt), float(mem)
        rows.append((f"| {ops:,} | {size / 1024:.0f} | {dt:.1f} | {ops / dt:,.0f} | {mem:.0f} | {mem * 1024 / ops:.2f} |", None))
        print(ops, dt, mem, flush=True)


# -- scanner PDF: pdfium alone against parsing the content first ----------------------------------
def _read_before(path: str) -> list:
    """Image-only pages as read before: pdfplumber parses each page to list its images."""
    import pdfplumber
    import pypdfium2 as pdfium

    from layoutcheck.sources import ReadLimits, _render_page, snap_dpi

    out = []
    with pdfplumber.open(path) as pdf:
        doc = pdfium.PdfDocument(path)
        for n, pl in enumerate(pdf.pages, 1):
            images = pl.images
            big = max(images, key=lambda i: float(i["x1"] - i["x0"]) * float(i["bottom"] - i["top"]))
            drawn = len(pl.lines) + len(pl.rects) + len(pl.curves)
            assert drawn < 5
            dpi = snap_dpi(big["srcsize"][0] / (float(big["x1"] - big["x0"]) / 72.0)) or 200.0
            out.append(_render_page(doc, path, n, ReadLimits(), dpi))
        doc.close()
    return out


def _read_now(path: str) -> list:
    from layoutcheck.sources import read_pages

    return list(read_pages(path))


def with_text_layer(src: str, path: Path, words: int = 3000) -> str:
    """The first page of a scanner PDF again, with an invisible text layer of ``words`` words
    (text render mode 3, ISO 32000-1, 9.3.6), as a scanner's "searchable PDF" carries."""
    import zlib

    import pypdfium2 as pdfium

    doc = pdfium.PdfDocument(src)
    page = doc[0]
    img = next(o for o in page.get_objects() if o.type == pdfium.raw.FPDF_PAGEOBJ_IMAGE)
    bitmap = img.get_bitmap()
    arr = bitmap.to_numpy()
    grey = np.ascontiguousarray(arr if arr.ndim == 2 else arr[..., 0])
    w_pt, h_pt = page.get_size()
    doc.close()
    h, w = grey.shape
    data = zlib.compress(grey.tobytes(), 6)
    image = (b"<< /Type /XObject /Subtype /Image /Width %d /Height %d /ColorSpace /DeviceGray /BitsPerComponent 8 "
             b"/Filter /FlateDecode /Length %d >>\nstream\n" % (w, h, len(data)) + data + b"\nendstream")
    lines = [b"q %.2f 0 0 %.2f 0 0 cm /Im Do Q" % (w_pt, h_pt), b"BT 3 Tr /F1 9 Tf"]
    for k in range(words):
        x, y = 40 + (k % 10) * 52, h_pt - 40 - (k // 10) % 70 * 11
        lines.append(b"1 0 0 1 %.1f %.1f Tm (harbour%d) Tj" % (x, y, k))
    lines.append(b"ET")
    objs = [b"<< /Type /Catalog /Pages 2 0 R >>", b"<< /Type /Pages /Kids [3 0 R] /Count 1 >>",
            b"<< /Type /Page /Parent 2 0 R /MediaBox [0 0 %.2f %.2f] /Contents 4 0 R /Resources << /XObject << /Im 5 0 R >> "
            b"/Font << /F1 6 0 R >> >> >>" % (w_pt, h_pt),
            H.stream(b"", b"\n".join(lines)), image, b"<< /Type /Font /Subtype /Type1 /BaseFont /Helvetica >>"]
    return str(H.raw_pdf(path, objs))


def scanner_part(rows: list, tmp: Path) -> None:
    plain = str(SAMPLES / "inputs" / "scan_310_scanner.pdf")
    layered = with_text_layer(plain, tmp / "searchable.pdf")
    rows.append(("### Scanner PDF (image-only pages): reading each page", None))
    rows.append(("| file | pdfplumber parses the page to find its image, then pypdfium2 renders (before), ms per page "
                 "| pypdfium2 alone: page objects, then render (now), ms per page | now as fast by |", None))
    rows.append(("|---|---|---|---|", None))
    for label, path in (("`scan_310_scanner.pdf` (2 pages, image only)", plain),
                        ("its page 1 with an invisible OCR text layer of 3,000 words", layered)):
        a, b = _read_before(path), _read_now(path)
        assert all(np.array_equal(x.image, y.image) for x, y in zip(a, b)) and len(a) == len(b)
        before, now = [], []
        for _ in range(7):
            for fn, acc in ((_read_before, before), (_read_now, now)):
                t0 = time.perf_counter()
                fn(path)
                acc.append(time.perf_counter() - t0)
        mb, mn = statistics.median(before) / len(b), statistics.median(now) / len(b)
        rows.append((f"| {label} | {mb * 1000:.1f} | {mn * 1000:.1f} | {mb / mn:.2f} x |", None))
    rows.append(("", None))
    rows.append(("Median of 7 interleaved runs; the same images either way (checked pixel for pixel). The content "
                 "stream of an image-only page is no longer parsed by pdfminer: with a text layer, that parse was "
                 "most of the cost of reading the page.", None))


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--part", choices=["corpus", "memory", "parse", "scanner"], action="append")
    ap.add_argument("--one", help=argparse.SUPPRESS)
    ap.add_argument("--grow", action="store_true", help=argparse.SUPPRESS)
    ap.add_argument("--memory", type=int, help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.one:
        # Every entry of the folder and of its sub-folders (links, pipes and odd names as they are).
        folder = Path(args.one)
        files = sorted(str(p) for p in folder.rglob("*") if p.name != "out.jsonl" and (p.is_symlink() or not p.is_dir()))
        print(json.dumps(run_one(files, folder / "out.jsonl", args.grow, args.memory)))
        return
    parts = args.part or list(PARTS)
    done = _read_parts()
    with tempfile.TemporaryDirectory(prefix="bench-hostile-") as t:
        tmp = Path(t)
        for part in parts:
            sub = tmp / part
            sub.mkdir()
            rows: list = []
            PARTS[part](rows, sub)
            done[part] = "\n".join(r for r, _ in rows)
            print(done[part], flush=True)
    # Parts run alone replace their own section and keep the others'.
    text = "\n\n".join(f"<!-- part: {p} -->\n{done[p]}" for p in PARTS if p in done)
    OUT.parent.mkdir(exist_ok=True)
    OUT.write_text(text + "\n")


PARTS = {"corpus": corpus_part, "memory": memory_part, "parse": parse_part, "scanner": scanner_part}


def _read_parts() -> dict:
    """The sections of the results file, by part."""
    if not OUT.exists():
        return {}
    out, name = {}, None
    for line in OUT.read_text().splitlines():
        if line.startswith("<!-- part: "):
            name = line[len("<!-- part: "):].split()[0]
            out[name] = []
        elif name:
            out[name].append(line)
    return {k: "\n".join(v).strip() for k, v in out.items()}


if __name__ == "__main__":
    main()

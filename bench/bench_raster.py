"""Speed and precision of the raster extractor on simulated A4 scans.

Run from the repository root::

    python bench/bench_raster.py            # speed (A4, 300 dpi) and precision (24 scans)
    python bench/bench_raster.py --quick    # fewer repeats and scans

Speed is measured on one thread (``cv2.setNumThreads(1)``), as the median of repeated runs, on a
simulated 300 dpi scan of form KBH-210 turned by 1.7 degrees with light noise and blur. It
compares, side by side:

- separable 1-D openings (``1 x k`` then ``k x 1``) against a 2-D opening (a ``k x 3``
  rectangle and its transpose, which also demands a rule 3 pixels thick) for finding rules, at
  the full 300 dpi and at the 150 dpi detection resolution the extractor uses;
- the "floor" (decode a PNG or TIFF, binarise, ``cv2.connectedComponentsWithStats``) against
  the full :func:`layoutcheck.extract.raster.extract_raster`.

Precision: elements of a clean 300 dpi rendering (the template side) are paired with those of
each simulated scan through the truth pose, and a similarity pose is fitted to the paired
corners of boxes, checkboxes and marks (``Pose.from_pairs``); the table gives its rotation and
scale errors against the truth. This isolates the extractor from the pose solver.
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import tempfile
import time

import cv2
import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.join(HERE, ".."))
sys.path.insert(0, os.path.join(HERE, "..", "tests"))

from conftest_raster import make_form_pdf  # noqa: E402

from layoutcheck.elements import outline  # noqa: E402
from layoutcheck.extract import raster as R  # noqa: E402
from layoutcheck.pose import Pose  # noqa: E402
from layoutcheck.simulate import render_page, save_scan, simulate_scan  # noqa: E402
from layoutcheck.sources import RasterPage  # noqa: E402

OUT = os.path.join(HERE, "results", "raster.md")


def timed(fn, repeats: int) -> float:
    """Median wall time of ``fn()`` in milliseconds (one warm-up run first)."""
    fn()
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append((time.perf_counter() - t0) * 1000.0)
    return statistics.median(times)


def speed(pdf: str, repeats: int, tmp: str) -> list[tuple[str, float]]:
    scan = simulate_scan(pdf, dpi=300, rotation_deg=1.7, noise_sigma=4, blur_sigma_px=0.6, seed=1)
    img = scan.image
    png = save_scan(scan, os.path.join(tmp, "a4.png"))
    tif = save_scan(scan, os.path.join(tmp, "a4.tif"))
    settings = R.RasterSettings()
    mask, _ = R.binarise(img, 300)
    k300 = int(round(R.px(settings.min_rule_mm, 300)))
    small = R._reduce(mask, 2)
    up, _ = R._upright(small, R.estimate_skew(small >= 64))
    up_bin = (up >= 64).view(np.uint8)
    k150 = int(round(R.px(settings.min_rule_mm, 150)))
    full = mask.view(np.uint8)

    def open_1d(m, k):
        cv2.morphologyEx(m, cv2.MORPH_OPEN, cv2.getStructuringElement(cv2.MORPH_RECT, (k, 1)))
        cv2.morphologyEx(m, cv2.MORPH_OPEN, cv2.getStructuringElement(cv2.MORPH_RECT, (1, k)))

    def open_2d(m, k):
        cv2.morphologyEx(m, cv2.MORPH_OPEN, cv2.getStructuringElement(cv2.MORPH_RECT, (k, 3)))
        cv2.morphologyEx(m, cv2.MORPH_OPEN, cv2.getStructuringElement(cv2.MORPH_RECT, (3, k)))

    def floor(path):
        g = cv2.imread(path, cv2.IMREAD_GRAYSCALE)
        m, _ = R.binarise(g, 300)
        cv2.connectedComponentsWithStats(m.view(np.uint8), connectivity=8)

    page = RasterPage("a4", 1, img, 300.0)

    def full_from_file(path):
        g = cv2.imread(path, cv2.IMREAD_GRAYSCALE)
        R.extract_raster(RasterPage(path, 1, g, 300.0))

    rows = [
        (f"1-D openings 1x{k300} + {k300}x1, 300 dpi mask (2480 x 3508)", timed(lambda: open_1d(full, k300), repeats)),
        (f"2-D openings {k300}x3 + 3x{k300}, 300 dpi mask", timed(lambda: open_2d(full, k300), repeats)),
        (f"1-D openings 1x{k150} + {k150}x1, 150 dpi detection mask (as used)", timed(lambda: open_1d(up_bin, k150), repeats)),
        (f"2-D openings {k150}x3 + 3x{k150}, 150 dpi detection mask", timed(lambda: open_2d(up_bin, k150), repeats)),
        ("floor: decode PNG + binarise + connectedComponentsWithStats", timed(lambda: floor(png), repeats)),
        ("floor: decode TIFF (LZW) + binarise + connectedComponentsWithStats", timed(lambda: floor(tif), repeats)),
        ("binarise only (Otsu), 300 dpi", timed(lambda: R.binarise(img, 300), repeats)),
        ("binarise only (Sauvola), 300 dpi", timed(lambda: R.sauvola_mask(img, int(R.px(8.0, 300))), repeats)),
        ("extract_raster, from the decoded image", timed(lambda: R.extract_raster(page), repeats)),
        ("decode PNG + extract_raster", timed(lambda: full_from_file(png), repeats)),
    ]
    return rows


def precision(pdf: str, quick: bool) -> list[tuple]:
    clean, _ = render_page(pdf, 1, 300)
    template = R.extract_raster(RasterPage("clean", 1, clean, 300.0))
    kinds = ("box", "checkbox", "mark")
    t_el = [e for e in template.elements if e.kind in kinds]
    cases = []
    rng = np.random.default_rng(7)
    for dpi in (200, 300):
        for rot in (-5.0, -3.3, -1.7, -0.4, 0.6, 1.9, 2.9, 5.0) if not quick else (-5.0, 1.9, 5.0):
            cases.append((dpi, rot, dict(noise_sigma=float(rng.uniform(2, 10)), blur_sigma_px=float(rng.uniform(0.3, 1.0)),
                                         jpeg_quality=int(rng.choice([50, 75, 95])),
                                         scale=(float(rng.uniform(0.97, 1.03)),) * 2)))
    out = []
    for dpi, rot, kw in cases:
        scan = simulate_scan(pdf, dpi=dpi, rotation_deg=rot, seed=int(dpi + rot * 10), **kw)
        found = R.extract_raster(RasterPage("scan", 1, scan.image, float(dpi)))
        src, dst = [], []
        for e in t_el:
            cands = [f for f in found.elements if f.kind == e.kind]
            if not cands:
                continue
            want = scan.pose.apply(np.array([e.center]))[0]
            d = [np.hypot(*(np.array(f.center) - want)) for f in cands]
            i = int(np.argmin(d))
            if d[i] > 3.0:  # about 1 mm
                continue
            # Corners in matching order: the template frame's corners mapped by the truth pose
            # are compared with the scan element's corners nearest to them.
            tc = outline(e)
            fc = outline(cands[i])
            mapped = scan.pose.apply(tc)
            order = [int(np.argmin(np.hypot(*(fc - m).T))) for m in mapped]
            src.append(tc)
            dst.append(fc[order])
        fit = Pose.from_pairs(np.vstack(src), np.vstack(dst))
        rot_err = abs(fit.rotation_deg - scan.pose.rotation_deg)
        scale_err = abs(fit.scale / scan.pose.scale - 1.0) * 100.0
        out.append((dpi, rot, kw["scale"][0], kw["noise_sigma"], kw["jpeg_quality"], len(src), rot_err, scale_err))
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true")
    args = ap.parse_args()
    cv2.setNumThreads(1)
    lines: list[str] = []

    def emit(text: str = "") -> None:
        print(text)
        lines.append(text)

    with tempfile.TemporaryDirectory(prefix="bench_raster_") as tmp:
        pdf = os.path.join(tmp, "kbh210.pdf")
        make_form_pdf(pdf)
        repeats = 5 if args.quick else 15
        emit(f"## Raster extraction speed (A4 at 300 dpi, one thread, median of {repeats})\n")
        emit("| step | ms |")
        emit("|---|---:|")
        for name, ms in speed(pdf, repeats, tmp):
            emit(f"| {name} | {ms:.1f} |")
        rows = precision(pdf, args.quick)
    emit("\n## Raster extraction precision (similarity fit to paired corners, truth pairing)\n")
    emit("| dpi | turn (deg) | scale | noise | JPEG q | elements | rotation error (deg) | scale error (%) |")
    emit("|---:|---:|---:|---:|---:|---:|---:|---:|")
    for dpi, rot, sc, noise, q, n, re, se in rows:
        emit(f"| {dpi} | {rot:+.1f} | {sc:.4f} | {noise:.1f} | {q} | {n} | {re:.4f} | {se:.4f} |")
    re = np.array([r[6] for r in rows])
    se = np.array([r[7] for r in rows])
    emit(f"\nrotation error: median {np.median(re):.4f} deg, max {re.max():.4f} deg; "
          f"scale error: median {np.median(se):.4f} %, max {se.max():.4f} % over {len(rows)} scans")
    if not args.quick:
        os.makedirs(os.path.dirname(OUT), exist_ok=True)
        with open(OUT, "w", encoding="utf-8") as fh:
            fh.write("\n".join(lines) + "\n")


if __name__ == "__main__":
    main()

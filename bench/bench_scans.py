"""Accuracy and speed on simulated scans (the targets of the scanned-pages work).

Run: ``python bench/bench_scans.py [--n 100]``. Writes ``bench/results/scans.md``.

Accuracy: ``--n`` simulated scans of the five sample form pages at 200 and 300 dpi, turned up to
±5°, shifted up to ±6 mm, some printed "fit to page", with noise, blur, JPEG, bitonal
thresholding, fill-in scribbles and a stamp; every fourth scan has a planted fault (a standalone
box moved 8-12 mm, removed, or shrunk by 30 %). Speed: one A4 page at 300 dpi read from a PNG
file, end to end (decode to verdict) against the floor measured in the same run (decode +
Otsu + connected components, the fastest OpenCV calls), both on one core; the same page is also
timed as a grey JPEG and as a bitonal group-4 TIFF.
"""

from __future__ import annotations

import argparse
import json
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from scan_suite import REFS, make_cases, scan  # noqa: E402

OUT = Path(__file__).resolve().parent / "results" / "scans.md"
MARGIN = {"rot": 0.1, "scale_pct": 0.2, "shift_mm": 0.5, "cut_mm": 0.5}


def truth_verdict(case, pose, tol, tp, isize):
    """The verdict the truth calls for, and whether it is clear of every tolerance by a margin.

    A page turned a few degrees within a sheet-sized image can put a corner of the form off the
    image: by the truth's pose, a page with an element more than ``max_cut_mm`` beyond an edge is
    *incomplete*.
    """
    from layoutcheck.elements import MM_PER_POINT
    from layoutcheck.verdict import beyond_edges

    tsize = (tp.width, tp.height)
    frames = np.array([e.frame for e in tp.elements_for("raster")], float)
    cut = float(beyond_edges(frames, pose, isize).max()) * MM_PER_POINT
    rot = pose.rotation_deg
    serr = max(abs(pose.scale_x - 1), abs(pose.scale_y - 1)) * 100
    shift = float(np.hypot(*pose.shift_mm(tsize, isize)))
    clear = (abs(abs(rot) - tol.max_skew_deg) > MARGIN["rot"] and abs(serr - tol.max_scale_error_pct) > MARGIN["scale_pct"]
             and abs(shift - tol.max_shift_mm) > MARGIN["shift_mm"] and abs(cut - tol.max_cut_mm) > MARGIN["cut_mm"])
    if case.fault:
        return "mismatched", clear
    if cut > tol.max_cut_mm:
        return "incomplete", clear
    if serr > tol.max_scale_error_pct:
        return "rescaled", clear
    if abs(rot) > tol.max_skew_deg:
        return "skewed", clear
    if shift > tol.max_shift_mm:
        return "shifted", clear
    return "pass", clear


def accuracy(n: int, workdir: Path, seed: int = 7):
    from layoutcheck.check import CheckSettings, extract, learn, record_for
    from layoutcheck.sources import RasterPage

    templates = {p.name: learn([str(p)]) for p in sorted(REFS.glob("*.pdf"))}
    settings = CheckSettings()
    tol = settings.tolerances
    rows = []
    for case in make_cases(templates, n, seed):
        t = templates[case.form]
        sc = scan(case, t, workdir)
        page = RasterPage(f"case{case.index}", 1, sc.image, sc.dpi, sc.bitonal)
        found = extract(page)
        rec = record_for(page.source, 1, found, [t], settings, page=page)
        # The same page without the second look (no image given), side by side.
        first = record_for(page.source, 1, found, [t], settings)
        tp = t.pages[case.page - 1]
        want, clear = truth_verdict(case, sc.pose, tol, tp, sc.size_pt)
        row = {"case": case, "verdict": rec["verdict"], "want": want, "clear": clear, "rec": rec, "first": first}
        p = rec["pose"]
        if p is not None:
            row["rot_err"] = abs((p["rotation_deg"] - sc.pose.rotation_deg + 180) % 360 - 180)
            row["scale_err"] = max(abs(p["scale_x"] / sc.pose.scale_x - 1), abs(p["scale_y"] / sc.pose.scale_y - 1)) * 100
        rows.append(row)
    return rows


def speed(workdir: Path, repeats: int = 9):
    """End to end against the floor, side by side, for one A4 300 dpi page in three formats.

    The same simulated scan is written as a grey PNG and a grey JPEG (quality 85), and scanned
    again as bitonal and written as group-4 TIFF: the formats scanners write. Each file's floor
    (decode + Otsu + connected components) is measured interleaved with its end-to-end run.
    Returns ``(rows, shape, png path, template)``, rows ``(format, full ms, floor ms)``.
    """
    import cv2
    from PIL import Image

    from layoutcheck.check import CheckSettings, check_file, learn
    from layoutcheck.simulate import save_scan, simulate_scan

    cv2.setNumThreads(1)
    ref = REFS / "KBH-101_vessel_arrival.pdf"
    t = learn([str(ref)])
    kw = dict(dpi=300, rotation_deg=1.3, noise_sigma=6, blur_sigma_px=0.6, fill=True, stamp=True, seed=3)
    sc = simulate_scan(ref, **kw)
    png, jpg, tif = workdir / "a4_300.png", workdir / "a4_300.jpg", workdir / "a4_300_g4.tif"
    save_scan(sc, png)
    save_scan(sc, jpg, jpeg_quality=85)
    save_scan(simulate_scan(ref, bitonal_threshold=128, **kw), tif)
    settings = CheckSettings()
    rows = []
    for name, path in (("PNG, grey", png), ("JPEG q85, grey", jpg), ("TIFF group 4, bitonal", tif)):
        def full():
            return list(check_file(str(path), [t], settings))

        def floor():
            img = np.asarray(Image.open(path).convert("L"))
            _, mask = cv2.threshold(img, 0, 255, cv2.THRESH_BINARY_INV | cv2.THRESH_OTSU)
            cv2.connectedComponentsWithStats(mask, connectivity=8)

        full()
        floor()
        tf, tl = [], []
        for _ in range(repeats):  # side by side, interleaved
            a = time.perf_counter()
            rec = full()
            tf.append(time.perf_counter() - a)
            a = time.perf_counter()
            floor()
            tl.append(time.perf_counter() - a)
        assert rec[0]["error"] is None, rec[0]["error"]
        rows.append((name, statistics.median(tf) * 1000, statistics.median(tl) * 1000))
    return rows, sc.image.shape, png, t


def peak_memory(png: Path, template_path: Path) -> tuple[float, float]:
    """Peak RSS (MB) of a process that verifies one page, and of one that only imports."""
    # VmHWM, not ru_maxrss: Linux carries ru_maxrss over from the parent across exec.
    hwm = "print(next(int(l.split()[1]) for l in open('/proc/self/status') if l.startswith('VmHWM')))"
    code_base = "import layoutcheck.check, layoutcheck.extract.raster, cv2, pdfplumber, pypdfium2; " + hwm
    code_page = (f"from layoutcheck.check import check_file; from layoutcheck.template import load_template; "
                 f"t = load_template({str(template_path)!r}); list(check_file({str(png)!r}, [t])); " + hwm)
    base = int(subprocess.run([sys.executable, "-c", code_base], capture_output=True, text=True, check=True).stdout)
    page = int(subprocess.run([sys.executable, "-c", code_page], capture_output=True, text=True, check=True).stdout)
    return page / 1024, base / 1024


def summarise(rows, sp, mem) -> str:
    rot = [r["rot_err"] for r in rows if "rot_err" in r]
    sca = [r["scale_err"] for r in rows if "scale_err" in r]
    clear = [r for r in rows if r["clear"]]
    right = [r for r in clear if r["verdict"] == r["want"]]
    faults = [r for r in rows if r["case"].fault]
    named = [r for r in faults if any(o["id"] == r["case"].fault_box and o["status"] == r["case"].fault
                                      for o in r["rec"]["offending"])]
    clean = [r for r in rows if not r["case"].fault]
    no_off = [r for r in clean if not r["rec"]["offending"]]
    forms = sorted({(r["case"].form, r["case"].page) for r in rows})
    lines = [
        "## Simulated scans: accuracy",
        "",
        f"{len(rows)} scans of {len(forms)} form pages at 200 and 300 dpi (see `bench/bench_scans.py`).",
        "",
        "| measure | result | target |",
        "|---|---|---|",
        f"| rotation error, median | {statistics.median(rot):.4f}° | ≤ 0.02° |",
        f"| rotation error, max | {max(rot):.4f}° | ≤ 0.1° |",
        f"| scale error, median | {statistics.median(sca):.4f} % | ≤ 0.05 % |",
        f"| scale error, max | {max(sca):.4f} % | ≤ 0.3 % |",
        f"| verdict right, pages clear of tolerances by a margin | {len(right)} of {len(clear)} | all |",
        f"| planted fault named with its status | {len(named)} of {len(faults)} ({100 * len(named) / max(len(faults), 1):.0f} %) | ≥ 98 % |",
        f"| clean pages with no offending element | {len(no_off)} of {len(clean)} ({100 * len(no_off) / max(len(clean), 1):.0f} %) | ≥ 98 % |",
        "",
    ]
    if sp is not None:
        speed_rows, shape, _, _ = sp
        lines += [
            "## Simulated scans: speed and memory (one core)",
            "",
            f"One A4 page at 300 dpi ({shape[1]} x {shape[0]} px), end to end (decode, binarise, extract, solve,",
            "judge) against the floor measured side by side in the same run (decode + Otsu + connected",
            "components, OpenCV), median of 9 interleaved runs each, in the three formats scanners write.",
            "",
            "| file | end to end | floor | ratio | target |",
            "|---|---|---|---|---|",
        ]
        for name, full_ms, floor_ms in speed_rows:
            lines.append(f"| {name} | {full_ms:.0f} ms | {floor_ms:.0f} ms | {full_ms / floor_ms:.2f}x "
                         f"| ≤ 150 ms, ≤ 2.5x |")
        lines += [
            "",
            f"Peak RSS of a process verifying the PNG page: {mem[0]:.0f} MB (imports alone {mem[1]:.0f} MB; "
            "target ≤ 300 MB per page).",
            "",
        ]

    def listing(title, rows, line):
        if rows:
            lines.extend([title, ""] + [line(r["case"], r) for r in rows] + [""])

    listing("Pages whose verdict differed from the truth:", [r for r in clear if r["verdict"] != r["want"]],
            lambda c, r: f"- case {c.index} ({c.form} p{c.page}, {c.dpi} dpi, turn {c.rotation_deg:+.2f}°, fault {c.fault}): "
                         f"{r['verdict']} instead of {r['want']}; " + "; ".join(f["message"] for f in r["rec"]["findings"][:2]))
    listing("Planted faults not named as planted:", [r for r in faults if r not in named],
            lambda c, r: f"- case {c.index}: {c.fault} {c.fault_box} on {c.form} p{c.page}; found "
                         + json.dumps([(o["id"], o["status"]) for o in r["rec"]["offending"]][:6]))
    return "\n".join(lines)


def counts(rows) -> dict:
    """The accuracy measures of a list of rows, as numbers."""
    clear = [r for r in rows if r["clear"]]
    faults = [r for r in rows if r["case"].fault]
    clean = [r for r in rows if not r["case"].fault]

    def named(r, key):
        return any(o["id"] == r["case"].fault_box and o["status"] == r["case"].fault for o in r[key]["offending"])

    return {
        "n": len(rows),
        "rot_max": max(r["rot_err"] for r in rows if "rot_err" in r),
        "scale_max": max(r["scale_err"] for r in rows if "scale_err" in r),
        "right": sum(r["verdict"] == r["want"] for r in clear), "clear": len(clear),
        "right_first": sum(r["first"]["verdict"] == r["want"] for r in clear),
        "named": sum(named(r, "rec") for r in faults), "faults": len(faults),
        "named_first": sum(named(r, "first") for r in faults),
        "no_off": sum(not r["rec"]["offending"] for r in clean), "clean": len(clean),
        "no_off_first": sum(not r["first"]["offending"] for r in clean),
    }


def robustness(draws: list[tuple[int, list]]) -> str:
    """One row per draw of cases, with and without the second look."""
    lines = [
        "## Simulated scans: other draws, and what the second look adds",
        "",
        "The same suite drawn with other seeds (the cases above are seed 7). Each cell gives the result, then",
        "in brackets the same pages matched without the second look at the predicted place (measured in the",
        "same run, on the same extracted elements).",
        "",
        "| seed | scans | rotation error max | scale error max | verdict right (clear pages) | planted faults named | clean pages, nothing offending |",
        "|---|---|---|---|---|---|---|",
    ]
    for seed, rows in draws:
        c = counts(rows)
        lines.append(f"| {seed} | {c['n']} | {c['rot_max']:.4f}° | {c['scale_max']:.4f} % "
                     f"| {c['right']} of {c['clear']} ({c['right_first']}) | {c['named']} of {c['faults']} ({c['named_first']}) "
                     f"| {c['no_off']} of {c['clean']} ({c['no_off_first']}) |")
    lines.append("")
    return "\n".join(lines)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--n", type=int, default=100)
    ap.add_argument("--seed", type=int, default=7, help="draw of the cases (7 is the one reported)")
    ap.add_argument("--accuracy-only", action="store_true", help="skip speed and memory; print, do not write")
    ap.add_argument("--draws", default="7:100,8:100,9:200",
                    help="seed:count draws for the robustness table (the first is also the main table's)")
    args = ap.parse_args()
    from layoutcheck.template import save_template

    with tempfile.TemporaryDirectory() as d:
        work = Path(d)
        rows = accuracy(args.n, work, args.seed)
        if args.accuracy_only:
            print(summarise(rows, None, None))
            return
        sp = speed(work)
        tpath = work / "t.json"
        save_template(sp[3], tpath)
        mem = peak_memory(sp[2], tpath)
        text = summarise(rows, sp, mem)
        draws = []
        for item in args.draws.split(","):
            seed, count = (int(v) for v in item.split(":"))
            draws.append((seed, rows if (seed, count) == (args.seed, args.n) else accuracy(count, work, seed)))
        text += "\n" + robustness(draws)
    OUT.parent.mkdir(exist_ok=True)
    OUT.write_text(text + "\n", encoding="utf-8")
    print(text)


if __name__ == "__main__":
    main()

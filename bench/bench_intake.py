"""Imperfect scans from real intake, today's code and the new code side by side.

Run: ``python bench/bench_intake.py --part nuisances|flatbed [--n 30] [--flatbed-n 100]
[--before PATH] [--main PATH]``. Writes ``bench/results/intake_<part>.md``; ``bench/collect.py``
puts them in ``docs/benchmarks.md``.

Today's code is a checkout of the commit before the work on imperfect scans began, made with
``git worktree add /tmp/base12 3faa966`` (the default of ``--before``); ``--main`` adds a middle
column for a later checkout (``git worktree add /tmp/base_main 407dadb``: the first round of that
work, before coarse faxes, staples and light gradients were taken on). Each column names its commit.

Every scan is simulated once (with the new simulator) and written to a file; the files are then
checked by one process per column, each with its code first on ``PYTHONPATH`` and learning its
own templates from the same reference PDFs (``bench/intake_worker.py``). Truth comes from the
simulation.

Part ``nuisances``: ``--n`` pages per nuisance over the five sample form pages, each page turned
up to 1.5 degrees and shifted up to 3 mm, with one nuisance: standard and fine fax (204 x 98 and
204 x 196 dpi, group-4 TIFF, resolution written per axis), faded print, a smooth warp up to
1.5 mm, bold headings (a 16-28 pt Helvetica-Bold heading added to the form, blurred and JPEG),
rules that run into box sides (added to the form), a cut-off edge (5-20 % of the page at any
edge), dropout colours, an edge shadow, punch holes, halftone tints in boxes, colour scans on
yellowish paper; a box moved 8 mm on a page warped by 1.5 mm; a standard fax (204 x 98) with a
planted fault (a box moved 8 mm, removed or shrunk to 70 %; the box drawn with lines the fax can
keep); a staple in a top corner; light falling off by 35-45 % across the page.

Part ``flatbed``: the flatbed suite of ``bench/bench_scans.py`` (``bench/scan_suite.py``), the
same cases for both sides, with accuracy of turn and scale.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(HERE))
from scan_suite import FORMS, MM, REFS, Case, make_cases, overlay_pdf, planted_pdf, scan  # noqa: E402

RESULTS = HERE / "results"
NUISANCES = ("fax 204x98", "fax 204x196", "faded print", "warp 1.5 mm", "bold headings", "rules into box sides",
             "cut-off edge", "dropout colours", "edge shadow", "punch holes", "tinted boxes",
             "colour, yellowish paper", "box moved 8 mm, warp 1.5 mm", "fax 204x98, planted fault", "staple",
             "light gradient 35-45 %")
FAULTS = ("moved", "missing", "resized")
DROPOUT = ((235, 140, 130), (120, 150, 235), (245, 170, 90))  # light red, blue, orange ink


# -- forms ----------------------------------------------------------------------------------------
def single_page(src: Path, page: int, out: Path) -> Path:
    from pypdf import PdfReader, PdfWriter

    wtr = PdfWriter()
    wtr.add_page(PdfReader(str(src)).pages[page - 1])
    with open(out, "wb") as fh:
        wtr.write(fh)
    return out


def _ink_mm(pdf: Path) -> np.ndarray:
    """Ink of the page at 1 px per mm, dilated by 2 mm (room kept around anything added)."""
    import cv2

    from layoutcheck.simulate import render_page

    img, _ = render_page(pdf, 1, 25.4)
    ink = (img < 200).astype(np.uint8)
    return cv2.dilate(ink, np.ones((5, 5), np.uint8)).astype(bool)


def _free(ink: np.ndarray, x0: float, y0: float, x1: float, y1: float) -> bool:
    h, w = ink.shape
    a0, a1, b0, b1 = int(np.floor(x0)), int(np.ceil(x1)), int(np.floor(y0)), int(np.ceil(y1))
    if a0 < 10 or b0 < 10 or a1 > w - 10 or b1 > h - 10:
        return False
    return not ink[b0:b1, a0:a1].any()


def bold_variant(src: Path, out: Path) -> Path:
    """The form with a bold heading in its largest free space (28 pt if it fits, down to 16)."""
    from reportlab.pdfbase.pdfmetrics import stringWidth

    ink = _ink_mm(src)
    text = "HARBOUR BOARD 808"
    for size in (28, 24, 20, 16):
        w_mm = stringWidth(text, "Helvetica-Bold", size) / MM
        h_mm = size * 0.75 / MM
        for y in range(15, ink.shape[0] - 15, 2):
            for x in range(15, ink.shape[1] - int(w_mm) - 15, 2):
                if _free(ink, x, y, x + w_mm, y + h_mm):
                    def draw(c, w, h, x=x, y=y, size=size):
                        c.setFont("Helvetica-Bold", size)
                        c.drawString(x * MM, h - (y + h_mm) * MM, text)
                    return overlay_pdf(src, out, draw)
    raise RuntimeError(f"{src}: no room for a heading")


def touch_variant(src: Path, out: Path) -> Path:
    """The form with rules (10-25 mm) running from the sides of up to three boxes into free space:
    across from a left or right side, or down from a bottom side."""
    from layoutcheck.simulate import _page_boxes

    ink = _ink_mm(src)
    rules = []  # (x0, y0, x1, y1) mm
    for x0, top, x1, bottom, kind in _page_boxes(src, 1):
        if kind != "box" or (x1 - x0) < 15 * MM:
            continue
        x0, top, x1, bottom = (v / MM for v in (x0, top, x1, bottom))
        y, xm = (top + bottom) / 2, (x0 + x1) / 2
        # The box's own side is within the ink's 2 mm of room: the free corridor starts past it.
        for length in (25, 15, 10):
            tries = [((x1, y, x1 + length, y), (x1 + 3.5, y - 2, x1 + length + 1, y + 2)),
                     ((x0, y, x0 - length, y), (x0 - length - 1, y - 2, x0 - 3.5, y + 2)),
                     ((xm, bottom, xm, bottom + length), (xm - 2, bottom + 3.5, xm + 2, bottom + length + 1))]
            hit = next((r for r, c in tries if _free(ink, *c)), None)
            if hit:
                rules.append(hit)
                a0, b0, a1, b1 = hit
                ink[int(min(b0, b1) - 4):int(max(b0, b1) + 4), int(min(a0, a1) - 4):int(max(a0, a1) + 4)] = True
                break
        if len(rules) == 3:
            break
    if not rules:
        raise RuntimeError(f"{src}: no box with room for a rule")

    def draw(c, w, h):
        c.setLineWidth(0.8)
        for a0, b0, a1, b1 in rules:
            c.line(a0 * MM, h - b0 * MM, a1 * MM, h - b1 * MM)
    return overlay_pdf(src, out, draw)


# -- cases ----------------------------------------------------------------------------------------
def nuisance_cases(n: int, work: Path, templates: dict, names=NUISANCES, seed: int = 12):
    """Simulate ``n`` pages per nuisance; returns (job cases, truth per case id)."""
    from layoutcheck.simulate import save_scan, simulate_scan

    cases, truth = [], {}
    for name in names:
        # One generator per nuisance: a part run alone makes the same pages as in the whole run.
        rng = np.random.default_rng([seed, NUISANCES.index(name)])
        for k in range(n):
            form = k % len(FORMS)
            key = f"form{form}"
            pdf = work / f"{key}.pdf"
            if name == "bold headings":
                key, pdf = f"bold{form}", work / f"bold{form}.pdf"
            elif name == "rules into box sides":
                key, pdf = f"touch{form}", work / f"touch{form}.pdf"
            kw = dict(rotation_deg=float(rng.uniform(-1.5, 1.5)), shift_mm=tuple(rng.uniform(-3, 3, 2)),
                      noise_sigma=float(rng.uniform(2, 6)), seed=int(rng.integers(1 << 30)), dpi=150)
            ext = "png"
            moved = None
            fault = None
            if name.startswith("fax"):
                # A fax machine thresholds at mid-grey (common practice); its optics blur by a
                # fraction of its own pixel, which is twice as tall as wide at 204 x 98.
                kw.update(dpi=(204, 98) if "98" in name else (204, 196), bitonal_threshold=128,
                          blur_sigma_px=float(rng.uniform(0.2, 0.5)))
                ext = "tif"
            elif name == "faded print":
                kw.update(fade=float(rng.uniform(0.28, 0.42)), noise_sigma=float(rng.uniform(4, 8)),
                          blur_sigma_px=float(rng.uniform(0.3, 0.9)))
            elif name == "warp 1.5 mm":
                kw.update(warp_mm=float(rng.uniform(0.8, 1.5)))
            elif name in ("bold headings", "rules into box sides"):
                kw.update(dpi=(150, 200)[k % 2], blur_sigma_px=float(rng.uniform(0.5, 1.2)))
                ext = "jpg"
            elif name == "cut-off edge":
                kw.update(cut=(("top", "bottom", "left", "right")[k % 4], float(rng.uniform(0.05, 0.20))))
            elif name == "dropout colours":
                kw.update(colour=(DROPOUT[k % 3], (255, 255, 255)))
            elif name == "edge shadow":
                kw.update(edge_shadow=True)
            elif name == "punch holes":
                kw.update(punch_holes=True)
            elif name == "tinted boxes":
                kw.update(tint=True, blur_sigma_px=0.6)
            elif name == "colour, yellowish paper":
                paper = (int(rng.integers(240, 252)), int(rng.integers(228, 242)), int(rng.integers(180, 205)))
                kw.update(colour=((25, 25, 40), paper))
                ext = "jpg"
            elif name.startswith("box moved"):
                tp = templates[key].pages[0]
                from scan_suite import standalone_boxes

                boxes = standalone_boxes(tp)
                box = boxes[int(rng.integers(len(boxes)))]
                c = Case(len(cases), f"{key}.pdf", 1, 150, 0.0, (1.0, 1.0), (0.0, 0.0), 0.0, 0.0, None, False, False,
                         "moved", box.id, 8.0)
                pdf = planted_pdf_in(c, templates[key], work)
                kw.update(warp_mm=1.5)
                moved = list(box.frame)
            elif name == "staple":
                kw.update(staple=True)
            elif name.startswith("light gradient"):
                kw.update(light_gradient=float(rng.uniform(0.35, 0.45)))
            if name == "fax 204x98, planted fault":
                from layoutcheck.check import too_thin
                from scan_suite import standalone_boxes

                tp = templates[key].pages[0]
                boxes = [b for b in standalone_boxes(tp) if not too_thin([b], kw["dpi"])[0]]
                box = boxes[int(rng.integers(len(boxes)))]
                kind = FAULTS[k % 3]
                c = Case(len(cases), f"{key}.pdf", 1, 150, 0.0, (1.0, 1.0), (0.0, 0.0), 0.0, 0.0, None, False, False,
                         kind, box.id, 8.0)
                pdf = planted_pdf_in(c, templates[key], work)
                fault = (kind, list(box.frame))
            sc = simulate_scan(pdf, **kw)
            cid = f"{name}|{k}"
            path = work / "scans" / f"{len(cases):04d}.{ext}"
            save_scan(sc, path, jpeg_quality=int(rng.integers(60, 86)) if ext == "jpg" else 90)
            cases.append({"id": cid, "file": str(path), "template": key})
            truth[cid] = {"nuisance": name, "key": key, "pose": sc.pose, "size": sc.size_pt, "moved": moved,
                          "dpi": sc.dpi_xy, "fault": fault and fault[0], "fault_frame": fault and fault[1]}
    return cases, truth


def planted_pdf_in(case: Case, template, work: Path) -> Path:
    """:func:`scan_suite.planted_pdf` for a form kept in the work folder."""
    import scan_suite

    old = scan_suite.REFS
    scan_suite.REFS = work
    try:
        return planted_pdf(case, template, work)
    finally:
        scan_suite.REFS = old


def flatbed_cases(n: int, work: Path, templates_by_pdf: dict, key_of: dict, seed: int = 7):
    from layoutcheck.simulate import save_scan

    cases, truth = [], {}
    for case in make_cases(templates_by_pdf, n, seed):
        t = templates_by_pdf[case.form]
        sc = scan(case, t, work)
        path = work / "scans" / f"flat{case.index:04d}.png"
        save_scan(sc, path)
        key = key_of[(case.form, case.page)]
        cid = f"flatbed|{case.index}"
        frame = None
        if case.fault:
            frame = list(next(e for e in t.pages[case.page - 1].elements if e.id == case.fault_box).frame)
        cases.append({"id": cid, "file": str(path), "template": key})
        truth[cid] = {"nuisance": "flatbed", "key": key, "pose": sc.pose, "size": sc.size_pt, "fault": case.fault,
                      "fault_frame": frame, "dpi": sc.dpi_xy}
    return cases, truth


# -- truth ----------------------------------------------------------------------------------------
def truth_verdict(t: dict, tp, tol) -> tuple[str, bool, list[str]]:
    """The verdict the truth calls for, whether it is clear of every limit by a margin, and the
    sections that lie clearly (over 3 mm) outside the image."""
    from layoutcheck.verdict import beyond_edges

    pose, size = t["pose"], t["size"]
    frames = np.array([e.frame for e in tp.elements_for("raster")], float)
    cut = float(beyond_edges(frames, pose, size).max()) / MM
    sec_frames = [(s.name, s.frame) for s in tp.sections]
    out = [name for name, f in sec_frames if beyond_edges(np.array([f], float), pose, size).max() / MM > 3.0]
    rot = pose.rotation_deg
    serr = max(abs(pose.scale_x - 1), abs(pose.scale_y - 1)) * 100
    shift = float(np.hypot(*pose.shift_mm((tp.width, tp.height), size)))
    clear = (abs(abs(rot) - tol.max_skew_deg) > 0.1 and abs(serr - tol.max_scale_error_pct) > 0.2
             and abs(shift - tol.max_shift_mm) > 0.5 and abs(cut - tol.max_cut_mm) > 0.5)
    if t.get("fault") or t.get("moved"):
        return "mismatched", clear, out
    if cut > tol.max_cut_mm:
        return "incomplete", clear, out
    if serr > tol.max_scale_error_pct:
        return "rescaled", clear, out
    if abs(rot) > tol.max_skew_deg:
        return "skewed", clear, out
    if shift > tol.max_shift_mm:
        return "shifted", clear, out
    return "pass", clear, out


def _named(rec: dict, frame, status: str | None = None) -> bool:
    return any(o.get("frame") and np.allclose(o["frame"], frame, atol=3.0) and (status is None or o["status"] == status)
               for o in rec["offending"] or [])


def evaluate(records: dict, truth: dict, templates: dict, tol) -> dict:
    """Per nuisance: the measures of one side."""
    rows: dict = {}
    for cid, t in truth.items():
        rec = records[cid]
        tp = templates[t["key"]].pages[0]
        want, clear, outside = truth_verdict(t, tp, tol)
        r = rows.setdefault(t["nuisance"], {"n": 0, "intact": [], "verdict": [], "ms": [], "sx": [], "sy": [],
                                            "rot": [], "incomplete": [], "sections": [], "named": [], "only": [],
                                            "clean": [], "faults": []})
        r["n"] += 1
        r["ms"].append(rec["ms"])
        right = rec["template"] == t["key"]
        if clear:
            r["verdict"].append(rec["verdict"] == want)
        if want not in ("mismatched", "incomplete"):
            r["intact"].append(right and not rec["offending"])
        if t["nuisance"] == "cut-off edge":
            r["incomplete"].append(rec["verdict"] == "incomplete")
            msg = " ".join(f["message"] for f in rec["findings"] if f["verdict"] == "incomplete")
            r["sections"].append(rec["verdict"] == "incomplete" and all(f"'{s}'" in msg for s in outside))
        if t.get("moved"):
            r["named"].append(_named(rec, t["moved"], "moved"))
            r["only"].append(_named(rec, t["moved"], "moved") and len(rec["offending"]) == 1)
        elif t.get("fault") and t["nuisance"] != "flatbed":
            r["named"].append(_named(rec, t["fault_frame"], t["fault"]))
            r["only"].append(_named(rec, t["fault_frame"], t["fault"]) and len(rec["offending"]) == 1)
        if t["nuisance"] == "flatbed":
            if t["fault"]:
                r["faults"].append(_named(rec, t["fault_frame"], t["fault"]))
            elif want != "incomplete":
                r["clean"].append(right and not rec["offending"])
        p = rec["pose"]
        if p is not None and right:
            r["sx"].append(abs(p["scale_x"] / t["pose"].scale_x - 1) * 100)
            r["sy"].append(abs(p["scale_y"] / t["pose"].scale_y - 1) * 100)
            r["rot"].append(abs((p["rotation_deg"] - t["pose"].rotation_deg + 180) % 360 - 180))
        else:
            r["sx"].append(np.inf)
            r["sy"].append(np.inf)
            r["rot"].append(np.inf)
    return rows


# -- running --------------------------------------------------------------------------------------
def run_side(tree: Path, job: dict, work: Path, label: str) -> tuple[dict, float]:
    jp, op = work / f"job_{label}.json", work / f"out_{label}.jsonl"
    jp.write_text(json.dumps(job))
    env = dict(os.environ, PYTHONPATH=str(tree), OMP_NUM_THREADS="1")
    t0 = time.perf_counter()
    subprocess.run([sys.executable, str(HERE / "intake_worker.py"), str(jp), str(op)], env=env, check=True)
    wall = time.perf_counter() - t0
    return {r["id"]: r for r in map(json.loads, open(op))}, wall


def share(v: list) -> str:
    return f"{np.mean(v):.1%} ({sum(v)}/{len(v)})" if v else "-"


def worst(v: list, q: float | None = None) -> str:
    v = [x for x in v if np.isfinite(x)] if v else []
    if not v:
        return "-"
    return f"{(np.percentile(v, q) if q else max(v)):.3f}"


def report_nuisances(sides: list, rows: list, n: int, walls, elapsed: float, only: str = "") -> str:
    """``sides``: column names, today's first and the code under test last; ``rows``: per side,
    :func:`evaluate`'s measures."""
    a = rows[-1]
    cols = " | ".join(f"intact, {s}" for s in sides) + " | " + " | ".join(f"verdict, {s}" for s in sides)
    ms = " | ".join(f"ms/page {s}" for s in sides)
    lines = [f"Written by `python bench/bench_intake.py --part nuisances --n {n}{only}` ({elapsed:.0f} s in all; "
             "checking: " + ", ".join(f"{s} {w:.0f} s" for s, w in zip(sides, walls)) + f"), on {platform.machine()} "
             f"with 2 shared cores, Python {platform.python_version()}. {SIDES_NOTE}",
             "",
             f"{n} pages per nuisance over the five sample form pages (each also turned up to 1.5 deg and shifted up "
             "to 3 mm, noise 2-6 grey levels, 150 dpi unless said). *Intact* = right template and nothing offending "
             "(target >= 98 %); *verdict* = the verdict the truth calls for, on pages clear of every limit by a margin.",
             "",
             f"| nuisance | {cols} | {ms} |",
             "|---|" + "---|" * (3 * len(sides))]
    for name in NUISANCES:
        if not a.get(name):
            continue
        per = [r[name] for r in rows]
        lines.append(f"| {name} | " + " | ".join(share(r["intact"]) for r in per) + " | "
                     + " | ".join(share(r["verdict"]) for r in per) + " | "
                     + " | ".join(median_ms(r) for r in per) + " |")
    lines += ["", "Targets of their own:", "",
              "| measure | " + " | ".join(sides) + " | target |", "|---|" + "---|" * (len(sides) + 1)]

    def row(text, name, key, fmt, target):
        if name in a:
            lines.append(f"| {text} | " + " | ".join(fmt(r[name][key]) for r in rows) + f" | {target} |")

    for name in ("fax 204x98", "fax 204x196"):
        row(f"{name}: largest scale error across, %", name, "sx", worst, "<= 0.3")
        row(f"{name}: largest scale error down, %", name, "sy", worst, "<= 0.3")
    row("cut-off edge: verdict incomplete", "cut-off edge", "incomplete", share, "100 %")
    row("cut-off edge: incomplete and every section more than 3 mm outside named", "cut-off edge", "sections", share,
        "100 %")
    row("box moved 8 mm on a 1.5 mm warp: named moved", "box moved 8 mm, warp 1.5 mm", "named", share, ">= 98 %")
    row("... and the only element offending", "box moved 8 mm, warp 1.5 mm", "only", share, "-")
    row("fax 204x98, box moved 8 mm, removed or shrunk to 70 %: named (element and status)",
        "fax 204x98, planted fault", "named", share, ">= 98 %")
    row("... and the only element offending", "fax 204x98, planted fault", "only", share, "-")
    row("fax 204x98 with a planted fault: largest scale error (worse axis), %", "fax 204x98, planted fault", "sy",
        worst, "<= 0.3")
    return "\n".join(lines)


def median_ms(r: dict) -> str:
    return f"{statistics.median(r['ms']):.0f}"


def report_flatbed(sides: list, rows: list, n: int, walls, elapsed: float, more: str = "") -> str:
    per = [r["flatbed"] for r in rows]

    def cells(f):
        return " | ".join(f(r) for r in per)

    def spread(v, scale=False):
        v = np.maximum(v["sx"], v["sy"]).tolist() if scale else v["rot"]
        return f"{worst(v, 50)} / {worst(v, 95)} / {worst(v)}"

    lines = [f"Written by `python bench/bench_intake.py --part flatbed --flatbed-n {n}{more}` ({elapsed:.0f} s in all; "
             "checking: " + ", ".join(f"{s} {w:.0f} s" for s, w in zip(sides, walls)) + "). The cases of "
             "`bench/scan_suite.py` (seed 7): 200 and 300 dpi, turned up to 5 deg, shifted up to 6 mm, some printed "
             "fit to page, noise, blur, JPEG, bitonal, fill-in and stamps; every fourth with a planted fault. Scans "
             "written as PNG and checked from the file by every side. A page whose truth puts part of the form more "
             "than 2 mm off the image (a 5 deg turn with a 6 mm shift can) is *incomplete* by the truth, and is "
             f"left out of the clean pages. {SIDES_NOTE}",
             "",
             "| measure | " + " | ".join(sides) + " | target |", "|---|" + "---|" * (len(sides) + 1),
             f"| clean pages, nothing offending | {cells(lambda r: share(r['clean']))} | >= 99.5 % |",
             f"| planted faults named (element and status) | {cells(lambda r: share(r['faults']))} | >= 99 % |",
             f"| verdict as the truth (clear pages) | {cells(lambda r: share(r['verdict']))} | - |",
             f"| turn error, median / 95th pct / largest, deg | {cells(spread)} | no worse |",
             f"| scale error (worse axis), median / 95th pct / largest, % | {cells(lambda r: spread(r, True))} | "
             "no worse |",
             f"| time per page, median, ms | {cells(median_ms)} | - |"]
    return "\n".join(lines)


SIDES_NOTE = ""


def commit_of(tree: Path) -> str:
    out = subprocess.run(["git", "-C", str(tree), "rev-parse", "--short", "HEAD"], capture_output=True, text=True)
    return out.stdout.strip() or "?"


def main() -> None:
    global SIDES_NOTE
    ap = argparse.ArgumentParser()
    ap.add_argument("--part", choices=("nuisances", "flatbed"), required=True)
    ap.add_argument("--n", type=int, default=30)
    ap.add_argument("--flatbed-n", type=int, default=100)
    ap.add_argument("--before", default="/tmp/base12", help="checkout of today's code")
    ap.add_argument("--main", default=None, help="checkout of a later commit, for a middle column")
    ap.add_argument("--only", default=None, help="nuisances to run, by number in the list (e.g. 0-6)")
    ap.add_argument("--show", action="store_true", help="print the new code's pages that miss the truth")
    ap.add_argument("--new-only", action="store_true", help="(debugging) run the new code on both sides")
    args = ap.parse_args()
    sys.path.insert(0, str(ROOT))
    from layoutcheck.check import learn
    from layoutcheck.verdict import Tolerances

    trees = [ROOT if args.new_only else Path(args.before)] + ([Path(args.main)] if args.main else []) + [ROOT]
    sides = [f"today ({commit_of(trees[0])})"] + ([f"then ({commit_of(trees[1])})"] if args.main else []) + ["new"]
    SIDES_NOTE = (f"*Today* is commit {commit_of(trees[0])}, before the work on imperfect scans; "
                  + (f"*then* is commit {commit_of(trees[1])}, its first round; " if args.main else "")
                  + "*new* is the code under test. Every side checks the same files and learns its own templates "
                    "from the same PDFs.")
    t_start = time.perf_counter()
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)
        (work / "scans").mkdir()
        pdfs, key_of = {}, {}
        for k, (name, page) in enumerate(FORMS):
            pdfs[f"form{k}"] = single_page(REFS / name, page, work / f"form{k}.pdf")
            key_of[(name, page)] = f"form{k}"
        if args.part == "nuisances":
            for k in range(len(FORMS)):
                pdfs[f"bold{k}"] = bold_variant(pdfs[f"form{k}"], work / f"bold{k}.pdf")
                pdfs[f"touch{k}"] = touch_variant(pdfs[f"form{k}"], work / f"touch{k}.pdf")
        templates = {key: learn([str(p)], name=key) for key, p in pdfs.items()}
        if args.part == "nuisances":
            names = NUISANCES
            if args.only:
                a, _, b = args.only.partition("-")
                names = NUISANCES[int(a):int(b or a) + 1]
            cases, truth = nuisance_cases(args.n, work, templates, names)
        else:
            by_pdf = {name: learn([str(REFS / name)]) for name, _ in FORMS}
            cases, truth = flatbed_cases(args.flatbed_n, work, by_pdf, key_of)
        job = {"templates": {k: str(p) for k, p in pdfs.items()}, "cases": cases}
        runs = [run_side(tree, job, work, f"side{k}") for k, tree in enumerate(trees)]
        tol = Tolerances()
        rows = [evaluate(rec, truth, templates, tol) for rec, _ in runs]
        if args.show:
            rec_a = runs[-1][0]
            for cid, t in truth.items():
                r = rec_a[cid]
                want = truth_verdict(t, templates[t["key"]].pages[0], tol)[0]
                if r["verdict"] != want or (r["offending"] and not ((t.get("moved") or t.get("fault"))
                                                                    and len(r["offending"]) == 1)):
                    print(cid, want, r["verdict"], [f["message"][:100] for f in r["findings"]])
    elapsed = time.perf_counter() - t_start
    walls = [w for _, w in runs]
    if args.part == "nuisances":
        text = report_nuisances(sides, rows, args.n, walls, elapsed, (f" --only {args.only}" if args.only else "")
                                + (f" --main {args.main}" if args.main else ""))
    else:
        text = report_flatbed(sides, rows, args.flatbed_n, walls, elapsed,
                              f" --main {args.main}" if args.main else "")
    RESULTS.mkdir(exist_ok=True)
    part = args.part + (f"_{args.only}" if args.only else "")
    out = RESULTS / f"intake_{part}.md"
    out.write_text(f"### Imperfect scans: {args.part}{' ' + args.only if args.only else ''}\n\n{text}\n",
                   encoding="utf-8")
    print(text)
    print(f"wrote {out}")


if __name__ == "__main__":
    main()

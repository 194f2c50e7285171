"""Templates learned from filled scans: one filled scan, three, and what the template keeps.

Run from the repository root::

    python bench/bench_fillin.py                 # writes bench/results/fillin.md
    python bench/bench_fillin.py --baseline REV  # today's learning from another commit

Nine form pages (the five of the bundled sample forms and the four ruled forms of
``bench/lined_forms.py``). Per form, three filled scans to learn from (200 dpi, upright within
0.3 degrees, light blur and noise, with every kind of fill-in the simulator has: writing in boxes
and on rules that runs past their ends, ticks across checkboxes, a stamp, a signature across the
signature rule), and nine scans to verify: four clean at other poses (a pass, turned 2 degrees,
printed fit to page, shifted 8 mm), one more filled scan, a box or rule moved, removed and
shrunk, and a scan of another form. Every scan is written once as PNG; the same files are then
learned and verified by the code of this tree and, in a separate process, by today's code (the
commit given by ``--baseline``), side by side.

Element precision and recall compare the rules, boxes, checkboxes and marks of the template learned
from one filled scan with those of the template learned from the blank PDF (as seen in a
rendering of it): an element counts as the same when its kind class agrees and every side of its
frame is within 1 mm.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(HERE))
OUT = HERE / "results" / "fillin.md"
#: Today's code: the commit this work started from (main before rules were put on their printed span in verification).
BASELINE = "407dadb"
DPI = 200
#: Rendering at twice the scan resolution (400 dpi) before area averaging: enough for verdicts,
#: and half the time of the simulator's default (600 dpi).
OVERSAMPLE = 2
STRUCTURE = ("line", "box", "mark")
SAME_MM = 1.0


def forms(workdir: Path) -> list[tuple[str, int]]:
    """(pdf path, page) of the nine form pages."""
    from lined_forms import make_forms

    refs = ROOT / "sample_forms" / "references"
    base = [(str(refs / f), p) for f, p in (("KBH-101_vessel_arrival.pdf", 1), ("KBH-205_cargo_manifest.pdf", 1),
                                             ("KBH-310_berth_application.pdf", 1), ("KBH-310_berth_application.pdf", 2),
                                             ("KBH-412_crew_list.pdf", 1))]
    return base + [(str(p), 1) for p in make_forms(workdir)]


def _single_page_pdf(pdf: str, page: int, out: Path) -> Path:
    from pypdf import PdfReader, PdfWriter

    w = PdfWriter()
    w.add_page(PdfReader(pdf).pages[page - 1])
    with open(out, "wb") as fh:
        w.write(fh)
    return out


def fault_target(tp) -> tuple[str, object] | None:
    """A standalone box of the blank template page, else a free rule well clear of others."""
    from scan_suite import standalone_boxes

    boxes = standalone_boxes(tp)
    if boxes:
        return "box", boxes[0]
    rules = [e for e in tp.elements if e.kind == "hline" and 60 < e.size[0] < 0.6 * tp.width]
    return ("rule", rules[len(rules) // 2]) if rules else None


def planted(pdf: Path, kind: str, el, fault: str, out: Path) -> Path:
    """The one-page PDF with ``el`` moved (10 mm), removed or shrunk (70 %)."""
    from scan_suite import overlay_pdf

    mm = 72 / 25.4

    def draw(c, w, h):
        x0, top, x1, bottom = el.frame
        c.setStrokeColorRGB(1, 1, 1)
        c.setFillColorRGB(1, 1, 1)
        if kind == "box":
            c.setLineWidth(4)
            c.rect(x0, h - bottom, x1 - x0, bottom - top, stroke=1, fill=0)
        else:
            c.rect(x0 - 2, h - bottom - 2, x1 - x0 + 4, bottom - top + 4, stroke=0, fill=1)
        c.setStrokeColorRGB(0, 0, 0)
        c.setLineWidth(0.8)
        cx, cy = (x0 + x1) / 2, (top + bottom) / 2
        if fault == "moved":
            if kind == "box":
                d = 10 * mm if x1 + 10 * mm <= w - 15 * mm else -10 * mm
                c.rect(x0 + d, h - bottom, x1 - x0, bottom - top)
            else:
                c.line(x0, h - cy - 4.5 * mm, x1, h - cy - 4.5 * mm)  # 4.5 mm lower, clear of its caption
        elif fault == "resized":
            bw, bh = (x1 - x0) * 0.7, (bottom - top) * 0.7
            if kind == "box":
                c.rect(cx - bw / 2, h - cy - bh / 2, bw, bh)
            else:
                c.line(x0, h - cy, x0 + bw, h - cy)

    return overlay_pdf(pdf, out, draw)


def make_suite(workdir: Path) -> list[dict]:
    """Write every scan of the suite; one entry per form with its files and truth."""
    from bench_scans import truth_verdict
    from layoutcheck.check import learn
    from layoutcheck.simulate import save_scan, simulate_scan
    from layoutcheck.verdict import Tolerances

    tol = Tolerances()
    pages = forms(workdir)
    out = []
    for i, (pdf, page) in enumerate(pages):
        one = _single_page_pdf(pdf, page, workdir / f"form{i}.pdf")
        blank = learn([str(one)], name=f"form{i}")
        tp = blank.pages[0]
        d = workdir / f"form{i}"
        d.mkdir(exist_ok=True)
        entry = {"form": f"{Path(pdf).stem} p{page}", "pdf": str(one), "learn": [], "verify": []}
        for k in range(3):
            sc = simulate_scan(one, dpi=DPI, rotation_deg=float(np.random.default_rng(100 * i + k).uniform(-0.3, 0.3)),
                               noise_sigma=3, blur_sigma_px=0.5, fill=True, stamp=True, hand=True, seed=100 * i + k,
                               oversample=OVERSAMPLE)
            entry["learn"].append(save_scan(sc, d / f"learn{k}.png"))
        poses = (("pass", dict(rotation_deg=0.2, shift_mm=(1.0, -1.5))), ("turned", dict(rotation_deg=2.0)),
                 ("fit to page", dict(scale=0.9407)), ("shifted", dict(shift_mm=(8.0, 3.0))),
                 ("filled", dict(rotation_deg=-0.25, fill=True, stamp=True, hand=True)))
        cases = [(name, one, kw, None) for name, kw in poses]
        target = fault_target(tp)
        if target:
            for fault in ("moved", "missing", "resized"):
                cases.append((fault, planted(one, target[0], target[1], fault, d / f"{fault}.pdf"), dict(rotation_deg=0.3),
                              (fault, target[1].id)))
        other = workdir / f"form{(i + 1) % len(pages)}.pdf"
        if not other.exists():
            _single_page_pdf(*pages[(i + 1) % len(pages)], other)
        cases.append(("another form", other, dict(rotation_deg=0.2), ("other", None)))
        for k, (name, src, kw, fault) in enumerate(cases):
            sc = simulate_scan(src, dpi=DPI, noise_sigma=3, blur_sigma_px=0.5, seed=1000 * i + k, oversample=OVERSAMPLE,
                               **kw)
            path = save_scan(sc, d / f"verify{k}.png")
            if fault and fault[0] == "other":
                want = "unrecognised"
            elif fault:
                want = "mismatched"
            else:
                want, _ = truth_verdict(type("C", (), {"fault": None})(), sc.pose, tol, tp, sc.size_pt)
            entry["verify"].append({"case": name, "path": path, "want": want, "fault": fault})
        out.append(entry)
    return out


def _same(a, b) -> bool:
    from layoutcheck.elements import MM_PER_POINT

    return a.kind_class == b.kind_class and max(abs(x - y) for x, y in zip(a.frame, b.frame)) * MM_PER_POINT <= SAME_MM


def evaluate(suite: list[dict]) -> dict:
    """Learn and verify the suite with the code on the path; plain numbers per form."""
    from layoutcheck.check import CheckSettings, extract, learn, record_for
    from layoutcheck.sources import RasterPage, read_pages

    settings = CheckSettings()
    res = []
    for entry in suite:
        blank = learn([entry["pdf"]])
        ref = [e for e in blank.pages[0].raster_elements if e.kind_class in STRUCTURE]
        t0 = time.perf_counter()
        one = learn(entry["learn"][:1], name="one")
        t_one = time.perf_counter() - t0
        three = learn(entry["learn"], name="three")
        got = [e for e in one.pages[0].raster_elements if e.kind_class in STRUCTURE]
        kept_right = sum(any(_same(g, r) for r in ref) for g in got)
        found = sum(any(_same(r, g) for g in got) for r in ref)
        row = {"form": entry["form"], "ref": len(ref), "learned": len(got), "kept_right": kept_right,
               "found": found, "learn_s": t_one, "extra": [f"{g.kind} {g.id}" for g in got if not any(_same(g, r) for r in ref)],
               "lost": [f"{r.kind} {r.id}" for r in ref if not any(_same(r, g) for g in got)], "cases": []}
        for case in entry["verify"]:
            page = next(iter(read_pages(case["path"])))
            assert isinstance(page, RasterPage), case["path"]
            found_els = extract(page)
            verdicts = {}
            for mode, t in (("one", one), ("three", three)):
                rec = record_for(page.source, 1, found_els, [t], settings, page=page)
                verdicts[mode] = rec["verdict"]
                verdicts[mode + "_why"] = "; ".join(f["message"] for f in rec["findings"][:2])
            row["cases"].append({"case": case["case"], "want": case["want"], **verdicts})
        res.append(row)
    return {"forms": res}


def run_baseline(rev: str, suite_file: Path, workdir: Path) -> dict:
    """:func:`evaluate` by today's code: the tree at ``rev`` exported and run in its own process."""
    tree = workdir / "baseline"
    tree.mkdir(exist_ok=True)
    archive = subprocess.run(["git", "-C", str(ROOT), "archive", rev], capture_output=True, check=True).stdout
    subprocess.run(["tar", "-x", "-C", str(tree)], input=archive, check=True)
    out = workdir / "baseline.json"
    env = {**os.environ, "PYTHONPATH": str(tree)}
    subprocess.run([sys.executable, str(Path(__file__).resolve()), "--evaluate", str(suite_file), "--json", str(out)],
                   env=env, check=True, cwd=str(tree))
    return json.loads(out.read_text())


def summarise(new: dict, old: dict, rev: str, seconds: float) -> str:
    def totals(r, filled: bool):
        ref = sum(f["ref"] for f in r["forms"])
        learned = sum(f["learned"] for f in r["forms"])
        kept = sum(f["kept_right"] for f in r["forms"])
        found = sum(f["found"] for f in r["forms"])
        cases = [c for f in r["forms"] for c in f["cases"] if (c["case"] == "filled") == filled]
        one = sum(c["one"] == c["want"] for c in cases)
        three = sum(c["three"] == c["want"] for c in cases)
        return ref, learned, kept, found, len(cases), one, three

    o, n = totals(old, False), totals(new, False)
    of, nf = totals(old, True), totals(new, True)

    def pct(a, b):
        return f"{a} of {b} ({100.0 * a / max(b, 1):.1f} %)"

    per_form = len(new["forms"][0]["cases"]) if new["forms"] else 0
    lines = [
        "## Templates from filled scans",
        "",
        f"{len(new['forms'])} form pages; per form 3 filled scans to learn from and {per_form} scans to verify,"
        f" all at {DPI} dpi (see `bench/bench_fillin.py`).",
        f"Today's code is commit `{rev}`, run on the same files in the same run. Whole run: {seconds:.0f} s.",
        "",
        "| measure | today | now | target |",
        "|---|---|---|---|",
        f"| right verdicts, template from one filled scan (clean poses, moved, removed, resized, another form) "
        f"| {pct(o[5], o[4])} | {pct(n[5], n[4])} | ≥ 95 % |",
        f"| right verdicts, template from three filled scans (the same pages) | {pct(o[6], o[4])} | {pct(n[6], n[4])} | 100 % |",
        f"| element precision, one filled scan (kept that the blank has) | {pct(o[2], o[1])} | {pct(n[2], n[1])} | ≥ 98 % |",
        f"| element recall, one filled scan (of the blank's, kept) | {pct(o[3], o[0])} | {pct(n[3], n[0])} | ≥ 95 % |",
        f"| beyond the targets: another filled page passes, template from one / three | {pct(of[5], of[4])} / "
        f"{pct(of[6], of[4])} | {pct(nf[5], nf[4])} / {pct(nf[6], nf[4])} | - |",
        "",
        "Per form (one filled scan): elements kept that the blank has / kept; blank's found / blank's;"
        " right verdicts (all nine pages).",
        "",
        "| form | today: precision | today: recall | now: precision | now: recall | verdicts today | verdicts now |",
        "|---|---|---|---|---|---|---|",
    ]
    for fo, fn in zip(old["forms"], new["forms"]):
        vo = sum(c["one"] == c["want"] for c in fo["cases"])
        vn = sum(c["one"] == c["want"] for c in fn["cases"])
        lines.append(f"| {fn['form']} | {fo['kept_right']}/{fo['learned']} | {fo['found']}/{fo['ref']} "
                     f"| {fn['kept_right']}/{fn['learned']} | {fn['found']}/{fn['ref']} | {vo}/{len(fo['cases'])} | {vn}/{len(fn['cases'])} |")
    lines.append("")
    lines += [
        "A filled page being verified (the last row of the first table) is judged by the verifying side. A rule",
        "found moved or resized there is measured again along its ink and put on its printed span, by the same",
        "function learning uses (`printed.printed_rules` / `on_printed_span`), before the page is matched again.",
        "What still fails there is a rule crossed along its whole length by a signature whose stroke also lies",
        "along it: the first reading finds only a piece of the rule.",
        "",
    ]
    wrong = [(f["form"], c, m) for f in new["forms"] for c in f["cases"] for m in ("one", "three") if c[m] != c["want"]]
    if wrong:
        lines += ["Verdicts still wrong now:", ""]
        lines += [f"- {form}, {c['case']}, learned from {m}: {c[m]} instead of {c['want']}; {c[m + '_why'][:160]}"
                  for form, c, m in wrong]
        lines.append("")
    extra = [(f["form"], f["extra"], f["lost"]) for f in new["forms"] if f["extra"] or f["lost"]]
    if extra:
        lines += ["Elements now kept that the blank does not have, and the blank's not kept (one filled scan):", ""]
        lines += [f"- {form}: extra {', '.join(e) or '-'}; lost {', '.join(l_) or '-'}" for form, e, l_ in extra]
        lines.append("")
    return "\n".join(lines)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--baseline", default=BASELINE, help="commit of today's code")
    ap.add_argument("--evaluate", help=argparse.SUPPRESS)
    ap.add_argument("--json", help=argparse.SUPPRESS)
    ap.add_argument("--keep", help="folder to keep the scans in (default: a temporary one)")
    args = ap.parse_args()
    if args.evaluate:
        suite = json.loads(Path(args.evaluate).read_text())
        Path(args.json).write_text(json.dumps(evaluate(suite)))
        return
    t0 = time.perf_counter()
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(args.keep or tmp)
        work.mkdir(parents=True, exist_ok=True)
        suite = make_suite(work)
        suite_file = work / "suite.json"
        suite_file.write_text(json.dumps(suite, default=str))
        old = run_baseline(args.baseline, suite_file, work)
        new = evaluate(suite)
        (work / "new.json").write_text(json.dumps(new))
    text = summarise(new, old, args.baseline, time.perf_counter() - t0)
    OUT.parent.mkdir(exist_ok=True)
    OUT.write_text(text + "\n", encoding="utf-8")
    print(text)


if __name__ == "__main__":
    main()

"""Throughput of ``watch --once`` against ``verify`` on the same 200 pages, side by side.

Two folders of 200 pages, made of the bundled born-digital sample inputs copied over: the demo
mix (about half the pages carry a planted fault) and an office mix (one page in twenty flagged,
the rest clean or filled copies). Each command runs as a user runs it (a fresh process, one
job): ``verify`` with records only, ``watch --once``, and ``verify --report``, whose output is
of the same kind as watch's (records, and pages for a person to look at). ``watch`` also hashes, journals, syncs and moves every file and draws
``review.html`` of the flagged pages; the time it spent drawing that page is read from its log,
so the table splits what filing costs from what the review page costs.

Run: ``python bench/bench_watch.py``; prints a markdown table and writes bench/results/watch.md.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
SAMPLES = ROOT / "sample_forms" / "inputs"
PAGES = 200
#: Clean and filled copies (planted verdict pass, sample_forms/expected.json) and flagged ones.
CLEAN = ("101_exact.pdf", "101_filled.pdf", "205_exact.pdf", "205_filled.pdf", "310_filled.pdf")
FLAGGED = ("101_shifted.pdf", "101_rotated.pdf", "101_box_removed.pdf", "101_section_moved.pdf")


def page_count(path: Path) -> int:
    import pypdfium2 as pdfium

    doc = pdfium.PdfDocument(str(path))
    try:
        return len(doc)
    finally:
        doc.close()


def fill(folder: Path, sources: list[Path]) -> int:
    """Copies of ``sources`` in turn into ``folder`` until it holds PAGES pages; returns the count."""
    folder.mkdir(parents=True)
    pages, k = 0, 0
    while pages < PAGES:
        src = sources[k % len(sources)]
        n = page_count(src)
        if pages + n <= PAGES:
            shutil.copyfile(src, folder / f"{k:04d}_{src.name}")
            pages += n
        k += 1
    return pages


def run(cmd: list[str]) -> tuple[float, float, str]:
    """Wall seconds, CPU seconds (user + system, the command and its children) and its log."""
    import resource

    env = dict(os.environ, PYTHONPATH=str(ROOT))
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.perf_counter()
    res = subprocess.run(cmd, env=env, capture_output=True, text=True)
    dt = time.perf_counter() - t0
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    if res.returncode not in (0, 1):
        raise RuntimeError(f"{' '.join(cmd)} failed: {res.stderr[-2000:]}")
    return dt, cpu, res.stderr


def mixes() -> dict[str, list[Path]]:
    demo = sorted(SAMPLES.glob("*.pdf"))
    office = [SAMPLES / n for n in CLEAN] * 4  # 20 files: 19 clean, 1 flagged
    office[7] = SAMPLES / FLAGGED[0]
    return {"demo mix": demo, "office mix": office}


def main() -> None:
    tmp = Path(tempfile.mkdtemp(prefix="bench-watch-"))
    cli = [sys.executable, "-m", "layoutcheck.cli"]
    templates = str(ROOT / "templates")
    lines = [
        "### Watch against verify (200 pages, one job, fresh process each)",
        "",
        "Born-digital sample inputs copied over into 200 pages; per mix, in one run: `verify` (records",
        "only), `watch --once` (records, filing and `review.html` of the flagged pages), and `verify",
        "--report` (records and a report of every page), each as a user runs it (a fresh process, one",
        "job, the default limits). `review.html` is the time `watch` spent drawing its review page (from",
        "its log); filing is the rest of what `watch` costs beyond `verify` (hashing, journal, fsync,",
        "moves). CPU is user + system time of the command and its worker, which the load of other work",
        "on the shared machine disturbs far less than wall time.",
        "",
        "| mix | flagged pages | wall, s: `verify`, `watch`, `verify --report` | CPU, s: `verify`, `watch`, "
        "`verify --report` | of which review.html, CPU s | watch / verify, CPU | watch / verify without "
        "review.html, CPU | watch / verify --report, CPU |",
        "|---|---|---|---|---|---|---|---|",
    ]
    for label, sources in mixes().items():
        master = tmp / label.replace(" ", "_")
        n = fill(master, sources)
        wall: dict[str, float] = {}
        cpu: dict[str, float] = {}
        review_cpu = 0.0
        flagged = 0
        for k, which in enumerate(("verify", "watch", "report")):
            out = tmp / f"{master.name}_out{k}"
            if which == "watch":
                inbox = tmp / f"{master.name}_inbox{k}"
                shutil.copytree(master, inbox)
                dt, c, log = run(cli + ["watch", templates, str(inbox), "--out", str(out), "--once", "--settle", "0", "-q"])
                recs = [json.loads(line) for line in (out / "records.jsonl").read_text().splitlines()]
                assert len(recs) == n and not any(inbox.rglob("*.pdf"))
                flagged = sum(r["verdict"] != "pass" for r in recs)
                drawn = re.findall(r"review\.html: .* \(drawn in ([\d.]+) s, ([\d.]+) s CPU\)", log)
                review_cpu = sum(float(c) for _, c in drawn)
            else:
                out.mkdir()
                extra = ["--report", str(out / "report.html")] if which == "report" else []
                dt, c, _ = run(cli + ["verify", templates, str(master), "--json", str(out / "r.jsonl"), "-q", *extra])
            wall[which], cpu[which] = dt, c
        cv, cw, cr = cpu["verify"], cpu["watch"], cpu["report"]
        lines.append(f"| {label} | {flagged} of {n} | {wall['verify']:.1f}, {wall['watch']:.1f}, {wall['report']:.1f} | "
                     f"{cv:.1f}, {cw:.1f}, {cr:.1f} | {review_cpu:.1f} | {cv / cw:.2f} | {cv / (cw - review_cpu):.2f} | "
                     f"{cr / cw:.2f} |")
    lines += ["", "A ratio is throughput: 1.00 is as fast as the command compared with, above 1 faster; the",
              "target is 0.90 or more against `verify` doing the same work (records, and a report for a",
              "person: `verify --report`).", ""]
    text = "\n".join(lines)
    print(text)
    (ROOT / "bench" / "results").mkdir(exist_ok=True)
    (ROOT / "bench" / "results" / "watch.md").write_text(text, encoding="utf-8")
    shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()

"""Throughput of ``watch --once`` against ``verify`` on the same 200 pages, side by side.

Two folders of 200 pages, made of the bundled born-digital sample inputs copied over: the demo
mix (about half the pages carry a planted fault) and an office mix (one page in twenty flagged,
the rest clean or filled copies). Each command runs as a user runs it (a fresh process, one
job), in the order verify, watch, watch, verify for each mix, so drift on a shared machine falls
on both alike. ``watch`` also hashes, journals, syncs and moves every file and draws
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
        "Born-digital sample inputs copied over into 200 pages; runs in the order verify, watch, watch,",
        "verify per mix. `review.html` is the time `watch` spent drawing its review page (from its log);",
        "filing is the rest of what `watch` costs beyond `verify` (hashing, journal, fsync, moves).",
        "Wall times are two runs each; CPU is user + system time of the command, summed over both runs,",
        "which the load of other work on the shared machine disturbs far less than wall time.",
        "",
        "| mix | flagged pages | `verify` wall, s | `watch --once` wall, s | of which review.html, s (mean) "
        "| watch / verify throughput, wall | CPU: verify, watch, s | watch / verify, CPU | without review.html, CPU |",
        "|---|---|---|---|---|---|---|---|---|",
    ]
    for label, sources in mixes().items():
        master = tmp / label.replace(" ", "_")
        n = fill(master, sources)
        times: dict[str, list[float]] = {"verify": [], "watch": [], "review": [], "review_cpu": []}
        cpu = {"verify": 0.0, "watch": 0.0}
        flagged = 0
        for k, which in enumerate(("verify", "watch", "watch", "verify")):
            out = tmp / f"{master.name}_out{k}"
            if which == "watch":
                inbox = tmp / f"{master.name}_inbox{k}"
                shutil.copytree(master, inbox)
                dt, c, log = run(cli + ["watch", templates, str(inbox), "--out", str(out), "--once", "--settle", "0", "-q"])
                recs = [json.loads(line) for line in (out / "records.jsonl").read_text().splitlines()]
                assert len(recs) == n and not any(inbox.rglob("*.pdf"))
                flagged = sum(r["verdict"] != "pass" for r in recs)
                drawn = re.findall(r"review\.html: .* \(drawn in ([\d.]+) s, ([\d.]+) s CPU\)", log)
                times["review"].append(sum(float(w) for w, _ in drawn))
                times["review_cpu"].append(sum(float(c) for _, c in drawn))
            else:
                out.mkdir()
                dt, c, _ = run(cli + ["verify", templates, str(master), "--json", str(out / "r.jsonl"), "-q"])
            times[which].append(dt)
            cpu[which] += c
        v = sum(times["verify"]) / 2
        w = sum(times["watch"]) / 2
        r = sum(times["review"]) / 2
        cv, cw = cpu["verify"], cpu["watch"]
        lines.append(f"| {label} | {flagged} of {n} | {', '.join(f'{t:.1f}' for t in times['verify'])} | "
                     f"{', '.join(f'{t:.1f}' for t in times['watch'])} | {r:.1f} | {v / w:.2f} | {cv:.1f}, {cw:.1f} | "
                     f"{cv / cw:.2f} | {cv / (cw - sum(times['review_cpu'])):.2f} |")
    lines += ["", "Throughput ratio 1.00 is as fast as `verify`; the target is 0.90 or more.", ""]
    text = "\n".join(lines)
    print(text)
    (ROOT / "bench" / "results").mkdir(exist_ok=True)
    (ROOT / "bench" / "results" / "watch.md").write_text(text, encoding="utf-8")
    shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()

"""Batch throughput, identification cost among 50 templates, and peak memory on 500 pages.

Run: ``python bench/bench_batch.py``; prints a markdown table and writes bench/results/batch.md.
"""

from __future__ import annotations

import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))

from layoutcheck.batch import BatchOptions, run_batch  # noqa: E402
from layoutcheck.check import CheckSettings, learn, record_for, extract  # noqa: E402
from layoutcheck.sources import read_pages  # noqa: E402
from layoutcheck.template import save_template  # noqa: E402

SAMPLES = ROOT / "sample_forms"
INPUTS = sorted(str(p) for p in (SAMPLES / "inputs").glob("*.pdf"))


def pdf_of(pages, path):
    from pypdf import PdfReader, PdfWriter

    readers = {}
    w = PdfWriter()
    for f, n in pages:
        readers.setdefault(f, PdfReader(f))
        w.add_page(readers[f].pages[n - 1])
    with open(path, "wb") as fh:
        w.write(fh)
    return str(path)


def main() -> None:
    from test_identify import synthetic_form

    tmp = Path(tempfile.mkdtemp(prefix="bench-batch-"))
    refs = sorted(str(p) for p in (SAMPLES / "references").glob("*.pdf"))
    base = [learn([r], with_raster=False) for r in refs]
    rows = []

    # Throughput: 56 pages (the sample inputs four times over).
    files = INPUTS * 4
    n_pages = sum(1 for f in files for _ in read_pages(f))
    for label, opts in (("local, 1 job", BatchOptions(jobs=1)), ("local, 2 jobs", BatchOptions(jobs=2)),
                        ("dask local cluster, 2 workers", BatchOptions(engine="dask", jobs=2))):
        t0 = time.perf_counter()
        run_batch(files, base, output=str(tmp / "o.jsonl"), options=opts)
        dt = time.perf_counter() - t0
        rows.append((f"throughput, {label}", f"{n_pages / dt:.1f} pages/s", f"{n_pages} pages in {dt:.1f} s (incl. start-up)"))

    # Identification: one template vs 50 (4 sample forms + 46 synthetic), prefilter keeps 3.
    many = base + [learn([synthetic_form(tmp / f"s{k}.pdf", k)], name=f"KBH-9{k:02d}", with_raster=False) for k in range(46)]
    found = [(p.source, p.page, extract(p)) for f in INPUTS for p in read_pages(f)]

    def per_page(ts):
        t0 = time.perf_counter()
        recs = [record_for(s, n, fe, ts(s), CheckSettings()) for s, n, fe in found]
        return (time.perf_counter() - t0) / len(found), recs

    def own(s):  # the form an input was drawn from: "101_..." and "scan_310_..." name it
        code = Path(s).name.removeprefix("scan_")[:3]
        return [t for t in base if t.name[4:7] == code] or base[:1]

    one, r1 = per_page(own)
    fifty, r50 = per_page(lambda s: many)
    agree = sum(a["template"] == b["template"] for a, b in zip(r1, r50))
    rows.append(("check one page, its own template", f"{one * 1000:.0f} ms", "solver on 1 template page"))
    rows.append(("check one page, 50 templates (51 pages)", f"{fifty * 1000:.0f} ms", f"ratio {fifty / one:.2f}x; same template chosen on {agree}/{len(found)} pages"))

    # Memory: 500 pages in one file, one worker process; peak RSS of the child.
    big = pdf_of([(f, 1) for f in INPUTS] * 39 + [(INPUTS[0], 1)] * 8, tmp / "big.pdf")
    tpl = tmp / "t.json"
    save_template(base[0], tpl)
    for n in (50, 500):
        part = pdf_of([(big, k) for k in range(1, n + 1)], tmp / f"big{n}.pdf")
        code = (f"import resource,sys; from layoutcheck.cli import main; sys.argv=['layoutcheck','verify','{tpl}','{part}','-q','--json','{tmp}/m.jsonl'];\n"
                "try: main()\nexcept SystemExit: pass\nprint(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss)")
        t0 = time.perf_counter()
        out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=ROOT).stdout.split()
        dt = time.perf_counter() - t0
        rows.append((f"peak RSS, {n}-page file, 1 job", f"{int(out[-1]) / 1024:.0f} MB", f"{dt:.1f} s"))

    table = ["| measure | value | note |", "|---|---|---|"] + [f"| {a} | {b} | {c} |" for a, b, c in rows]
    text = "\n".join(table)
    print(text)
    (ROOT / "bench" / "results").mkdir(parents=True, exist_ok=True)
    (ROOT / "bench" / "results" / "batch.md").write_text(text + "\n")


if __name__ == "__main__":
    main()

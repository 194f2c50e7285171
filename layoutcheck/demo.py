"""The demo: learn the bundled sample forms, verify the bundled inputs, compare with the truth.

The sample forms belong to an invented organisation (see ``sample_forms/README.md``); each demo
input plants one known fault, listed in ``sample_forms/expected.json``.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Callable

#: The inputs the demo also writes normalised (turned, scaled and shifted into the form's frame;
#: the photo's perspective removed).
NORMALISE_DEMO = ("inputs/scan_101_skewed.png", "inputs/photo_101_filled.jpg")
#: The forms the demo learns; KBH-412 is drawn only to be the "different form" input.
DEMO_FORMS = ("KBH-101_vessel_arrival", "KBH-205_cargo_manifest", "KBH-310_berth_application")


def sample_dir() -> Path:
    """The bundled ``sample_forms`` folder (next to the package in a checkout)."""
    here = Path(__file__).resolve().parent
    for cand in (here.parent / "sample_forms", here / "sample_forms"):
        if (cand / "expected.json").exists():
            return cand
    raise FileNotFoundError("sample_forms/ not found: run the demo from a checkout (pip install -e .)")


def run_demo(out_dir: Path, echo: Callable[[str], None] = print) -> int:
    """Run the demo into ``out_dir``; returns 0 when every verdict is the planted one."""
    from .api import CheckSettings, Tolerances, check_file, learn, save_template, summary_table, write_report

    samples = sample_dir()
    out_dir.mkdir(parents=True, exist_ok=True)
    tdir = out_dir / "templates"
    tdir.mkdir(exist_ok=True)
    templates = []
    for stem in DEMO_FORMS:
        t = learn([str(samples / "references" / f"{stem}.pdf")])
        save_template(t, tdir / f"{t.name}.json")
        templates.append(t)
        echo(f"learned {t.name}: " + ", ".join(f"page {p.number} {len(p.elements)} elements" for p in t.pages))
    expected = json.loads((samples / "expected.json").read_text(encoding="utf-8"))
    # Scanned inputs (simulated scans of the same forms), drawn by sample_forms/make_scans.py.
    expected += json.loads((samples / "expected_scans.json").read_text(encoding="utf-8"))
    inputs = sorted({e["input"] for e in expected})
    records = []
    # Every record carries its zones; one scan and the photo are also handed over normalised, to show how.
    settings = CheckSettings(zones=True)
    normalised = CheckSettings(zones=True, normalise_dir=str(out_dir / "normalised"))
    for rel in inputs:
        results = check_file(str(samples / rel), templates, settings=normalised if rel in NORMALISE_DEMO else settings,
                             errors="keep")
        records.extend(r.to_record() for r in results)
    jsonl = out_dir / "results.jsonl"
    with open(jsonl, "w", encoding="utf-8") as fh:
        for r in records:
            fh.write(json.dumps(r, ensure_ascii=False) + "\n")
    echo("")
    echo(summary_table(records))
    truth = {(e["input"], e["page"]): e["verdict"] for e in expected}
    got = {(Path(r["source"]).relative_to(samples).as_posix(), r["page"]): r["verdict"] for r in records}
    wrong = [(k, v, got.get(k)) for k, v in truth.items() if got.get(k) != v]
    echo("")
    echo(f"records: {jsonl}")
    report = out_dir / "report.html"
    write_report(report, records, templates, Tolerances())
    echo(f"report:  {report}")
    echo(f"verdicts as planted: {len(truth) - len(wrong)} of {len(truth)}")
    for (src, page), want, have in wrong:
        echo(f"  {src} page {page}: planted {want}, got {have}")
    return 0 if not wrong else 1

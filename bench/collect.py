"""Gather the benchmark results into ``docs/benchmarks.md``.

Each benchmark writes its own tables to ``bench/results/<name>.md`` (every ratio in them is
measured side by side in one run of that benchmark); this script puts them in one document, in a
fixed order, under a short preface. Run it after the benchmarks:

    python bench/bench_consensus.py && python bench/bench_raster.py && python bench/bench_scans.py \\
      && python bench/bench_fillin.py && python bench/bench_normalise.py && python bench/bench_batch.py \\
      && python bench/bench_watch.py && python bench/bench_hostile.py \\
      && python bench/bench_identify.py --part 1/3 && python bench/bench_identify.py --part 2/3 \\
      && python bench/bench_identify.py --part 3/3 && python bench/bench_identify.py --report \\
      && python bench/bench_intake.py --part nuisances --only 0-6 --main /tmp/base_main \\
      && python bench/bench_intake.py --part nuisances --only 7-9 --main /tmp/base_main \\
      && python bench/bench_intake.py --part nuisances --only 10-12 --main /tmp/base_main \\
      && python bench/bench_intake.py --part nuisances --only 13-15 --main /tmp/base_main \\
      && python bench/bench_intake.py --part flatbed --main /tmp/base_main && python bench/collect.py

The camera benchmark runs in parts (see ``bench/bench_camera.py``) before ``collect.py``.
"""

from __future__ import annotations

import platform
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
ORDER = (
    ("consensus", "Consensus solver: frame voting against RANSAC, and time against size"),
    ("raster", "Raster extraction: openings, floor, precision"),
    ("scans", "Simulated scans: accuracy, speed and memory end to end"),
    ("fillin", "Templates from filled scans: one, three, and what they keep"),
    ("normalise", "Normalised pages and zones"),
    ("batch", "Batches: throughput, choosing among 50 templates, memory"),
    ("watch", "Watched inbox: throughput against verify"),
    ("identify", "Identification among look-alike forms: 100 and 1,000 templates, revisions, start-up, memory"),
    ("camera", "Camera captures: photos end to end, homography against findHomography"),
    ("hostile", "Hostile input under the default limits"),
    ("intake_nuisances_0-6", "Imperfect scans from real intake, part 1: faxes, faded print, warps, headings, rules"),
    ("intake_nuisances_7-9", "Imperfect scans from real intake, part 2: colours, shadows, holes"),
    ("intake_nuisances_10-12", "Imperfect scans from real intake, part 3: tints, colour scans, a moved box on a warp"),
    ("intake_nuisances_13-15", "Imperfect scans from real intake, part 4: faults on a standard fax, staples, light "
                               "gradients"),
    ("intake_flatbed", "Imperfect scans from real intake: the flatbed suite, today's code and the new side by side"),
)
PREFACE = """# Benchmarks

Speed, memory and accuracy targets are met here, never in timed unit tests. Each section below is
written by one script in `bench/`; every ratio in a section was measured side by side in one run
of that script, on the project's usual machine: 2 cores and 24 GiB, no GPU, shared with other
work while these runs were made, so absolute times carry that noise. Regenerate with the commands
in `bench/collect.py`.

Machine of the last collection: {machine}, Python {python}.
"""


def main() -> None:
    parts = [PREFACE.format(machine=platform.machine(), python=platform.python_version())]
    results = ROOT / "bench" / "results"
    for name, title in ORDER:
        f = results / f"{name}.md"
        if f.exists():
            text = f.read_text(encoding="utf-8").strip()
            # One level-2 heading per benchmark; its own headings, whatever their level, below it.
            lines = [("### " + ln.lstrip("#").strip() if ln.startswith("#") else ln) for ln in text.splitlines()]
            parts.append(f"## {title}\n\nFrom `bench/results/{name}.md`.\n\n" + "\n".join(lines))
    out = ROOT / "docs" / "benchmarks.md"
    out.write_text("\n\n".join(parts) + "\n", encoding="utf-8")
    print(f"wrote {out}")


if __name__ == "__main__":
    main()

"""Check a list of scan files with whichever layoutcheck is first on the path (for side by side runs).

Run by ``bench/bench_intake.py``, once with today's code and once with the code under test on
``PYTHONPATH``: ``python bench/intake_worker.py JOB.json OUT.jsonl``. The job names templates to
learn (key -> reference PDF) and cases (id, file, template key); one JSON line per case comes
out: the verdict, template, pose, offending elements and findings of the record, and the time.
Only the library's long-standing calls are used (``learn``, ``check_file``), so both sides run it.
"""

from __future__ import annotations

import json
import sys
import time


def main(job_path: str, out_path: str) -> None:
    import cv2

    from layoutcheck.check import CheckSettings, check_file, learn

    cv2.setNumThreads(1)
    job = json.load(open(job_path))
    templates = {key: learn([pdf], name=key) for key, pdf in job["templates"].items()}
    settings = CheckSettings()
    with open(out_path, "w") as out:
        for case in job["cases"]:
            t0 = time.perf_counter()
            [rec] = list(check_file(case["file"], [templates[case["template"]]], settings))
            ms = (time.perf_counter() - t0) * 1000
            keep = {k: rec.get(k) for k in ("verdict", "template", "template_page", "pose", "offending", "findings",
                                             "warp_mm")}
            out.write(json.dumps({"id": case["id"], "ms": round(ms, 1), **keep}) + "\n")


if __name__ == "__main__":
    main(sys.argv[1], sys.argv[2])

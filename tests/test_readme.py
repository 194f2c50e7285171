"""The README's Python example runs as written, from the repository root."""

from __future__ import annotations

import os
import re
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent


@pytest.mark.slow
def test_the_python_example_runs_as_written():
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    blocks = re.findall(r"^```python\n(.*?)^```$", readme, flags=re.S | re.M)
    assert len(blocks) == 1
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    res = subprocess.run([sys.executable, "-W", "error", "-c", blocks[0]], cwd=ROOT, env=env,
                         capture_output=True, text=True, timeout=300)
    assert res.returncode == 0, res.stderr
    lines = res.stdout.splitlines()
    # What the example prints is what its comments say: the planted shift of 8 mm right and 6 mm
    # down and the planted turn (sample_forms/expected*.json), and the damaged upload named.
    assert lines[0] == "(8.0, 6.0)"
    assert lines[1] == "skewed -1.4"
    assert lines[-2].startswith("upload.pdf: damaged PDF")
    assert lines[-1].endswith(" elements")

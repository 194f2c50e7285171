"""Limits on by default, full disks, signals and never overwriting: each planted on purpose.

Each limit is hit on purpose: the page's record names the limit and its value, and the page
after it is fine. A full disk ends the run with exit code 3 and one line, the JSON Lines file
ends on a whole record and ``--resume`` completes it. SIGTERM mid-batch, then ``--resume``,
gives every page exactly once.
"""

from __future__ import annotations

import errno
import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

import hostile_corpus as H
from layoutcheck.batch import BatchOptions, OutputError, RecordSink, run_batch
from layoutcheck.check import CheckSettings, learn
from layoutcheck.cli import main
from layoutcheck.exitcodes import EXIT_FLAGGED, EXIT_INCOMPLETE, EXIT_PASS, EXIT_USAGE
from layoutcheck.sources import ReadLimits
from layoutcheck.template import save_template

ROOT = Path(__file__).resolve().parents[1]
SAMPLES = ROOT / "sample_forms"
EXACT = SAMPLES / "inputs" / "101_exact.pdf"
# The born-digital demo inputs: 14 pages in 13 files.
INPUTS = sorted(str(p) for p in (SAMPLES / "inputs").glob("*.pdf") if not p.name.startswith("scan_"))


@pytest.fixture(scope="module")
def templates():
    return [learn([str(SAMPLES / "references" / "KBH-101_vessel_arrival.pdf")], with_raster=False)]


@pytest.fixture(scope="module")
def template_file(templates, tmp_path_factory):
    path = tmp_path_factory.mktemp("tpl") / "KBH-101.json"
    save_template(templates[0], path)
    return path


def lines(path):
    return [json.loads(x) for x in Path(path).read_text().splitlines()]


def good_copy(folder: Path, name="good.pdf") -> str:
    shutil.copy(EXACT, folder / name)
    return str(folder / name)


# -- limits, each hit on purpose --------------------------------------------------------------------
def test_defaults_are_on_and_documented():
    opts, limits = BatchOptions(), ReadLimits()
    assert (opts.page_timeout, opts.memory_mb) == (60.0, 1536) and not opts.in_process
    assert (limits.max_content_bytes, limits.max_drawing_ops, limits.max_pixels) == (8 * 1024 * 1024, 250_000, 300_000_000)
    text = " ".join(CliRunner().invoke(main, ["verify", "--help"]).output.split())
    for flag, default in (("--page-timeout", "60.0"), ("--max-memory", "1536"), ("--max-content-mb", "8.0"),
                          ("--max-drawing-ops", "250000"), ("--max-pixels", "300000000")):
        at = text.index(flag + " ")
        assert f"[default: {default}" in text[at:at + 300], flag
    assert "Exit codes: 0 every page passed; 1 some page did not; 2 usage error" in text
    assert "3 records or report incomplete" in text


def test_content_bomb_is_refused_and_the_next_page_is_fine(tmp_path, templates):
    bomb = H.content_bomb(tmp_path / "bomb.pdf", mb=40)
    assert bomb.stat().st_size < 200_000  # 40 MB of drawing, inflated from under 200 KB
    res = run_batch([str(bomb), good_copy(tmp_path)], templates, options=BatchOptions(keep_records=True))
    bad, good = res.records
    assert bad["verdict"] == "error"
    assert bad["error"] == "bomb.pdf page 1: content is over the limit of 8 MB decoded (--max-content-mb); not read"
    assert good["verdict"] == "pass"


def test_drawing_operations_are_counted_once_per_use_of_a_form(tmp_path, templates):
    # 20 lines (3 operations each: m, l, S; ISO 32000-1, 8.5.2) in a form drawn 10 times by a
    # form the page draws 10 times: 6,000 operations from a page of 10 lines of content.
    many = H.form_multiplier(tmp_path / "forms.pdf", lines=20, uses=10, depth=2)
    loop = H.form_loop(tmp_path / "loop.pdf")
    limits = ReadLimits(max_drawing_ops=5_999)
    res = run_batch([str(many), str(loop), good_copy(tmp_path)], templates, limits=limits,
                    options=BatchOptions(keep_records=True))
    assert [r["verdict"] for r in res.records] == ["error", "error", "pass"]
    assert res.records[0]["error"] == "forms.pdf page 1: draws over the limit of 5,999 path operations (--max-drawing-ops); not read"
    assert res.records[1]["error"] == "loop.pdf page 1: form XObjects draw each other in a loop; not read"
    # One more allowed and the page is read (it is drawn, not refused).
    (rec,) = run_batch([str(many)], templates, limits=ReadLimits(max_drawing_ops=6_000),
                       options=BatchOptions(page_timeout=None, memory_mb=None, keep_records=True)).records
    assert rec["error"] is None


def test_memory_limit_names_itself_and_the_worker_is_replaced(tmp_path, templates):
    # A 7000 x 7000 page (49 million pixels) needs far more than the 48 MB left above an idle
    # worker (about 150 MB, bench/bench_hostile.py) under a 200 MB limit.
    big = np.full((7000, 7000), 255, np.uint8)
    big[::50, :] = 0
    H.save_image(tmp_path / "big.png", big, dpi=600)
    res = run_batch([str(tmp_path / "big.png"), good_copy(tmp_path)], templates,
                    options=BatchOptions(memory_mb=200, keep_records=True))
    bad, good = res.records
    assert bad["verdict"] == "error" and bad["page"] == 1
    assert bad["error"].startswith("big.png page 1: ")
    assert "memory limit of 200 MB per worker (--max-memory)" in bad["error"]
    assert good["verdict"] == "pass"


def test_elapsed_covers_reading_the_page(tmp_path, templates, monkeypatch):
    """Planted: reading the page takes 0.3 s; the record's time includes it."""
    from layoutcheck import sources

    real = sources._PdfDocument.page

    def slow_page(self, n):
        time.sleep(0.3)
        return real(self, n)

    monkeypatch.setattr(sources._PdfDocument, "page", slow_page)
    res = run_batch([good_copy(tmp_path)], templates,
                    options=BatchOptions(page_timeout=None, memory_mb=None, keep_records=True))
    assert res.records[0]["verdict"] == "pass" and res.records[0]["elapsed_ms"] >= 300


# -- outputs that cannot be written ---------------------------------------------------------------
class FullDisk:
    """ENOSPC on the output file after ``room`` bytes, with the part that fits written first
    (as the kernel does), through a patched ``os.write`` (works without root, unlike a tmpfs)."""

    def __init__(self, monkeypatch, path: Path, room: int):
        self.path, self.room, self.real = os.fspath(path), room, os.write
        monkeypatch.setattr(os, "write", self)

    def __call__(self, fd, data):
        try:
            target = os.readlink(f"/proc/self/fd/{fd}")
        except OSError:
            target = None
        if target != self.path:
            return self.real(fd, data)
        left = self.room - os.fstat(fd).st_size
        if left <= 0:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        return self.real(fd, bytes(data)[:left])


@pytest.mark.skipif(not Path("/proc/self/fd").is_dir(), reason="the patched write finds its file through /proc")
def test_full_disk_exit_3_whole_records_then_resume(tmp_path, template_file, monkeypatch):
    out = tmp_path / "out.jsonl"
    # Records are written by the batch itself, whatever runs the pages: here this process.
    args = ["verify", str(template_file), *INPUTS, "--json", str(out), "-q", "--page-timeout", "0", "--max-memory", "0"]
    disk = FullDisk(monkeypatch, out, room=9000)
    res = CliRunner().invoke(main, args)
    assert res.exit_code == EXIT_INCOMPLETE
    assert res.output.strip() == f"Error: {out}: records could not be written (No space left on device)"
    assert "Traceback" not in res.output
    data = out.read_bytes()
    assert 0 < len(data) <= 9000 and data.endswith(b"\n")  # the torn last record was cut back off
    first = lines(out)
    assert 0 < len(first) < 14
    monkeypatch.setattr(os, "write", disk.real)  # space freed
    res = CliRunner().invoke(main, args + ["--resume"])
    assert res.exit_code == EXIT_FLAGGED, res.output
    got = lines(out)
    assert got[: len(first)] == first and len(got) == 14
    assert len({(r["source"], r["page"]) for r in got}) == 14


def test_record_sink_cuts_a_partial_write_back(tmp_path, monkeypatch):
    out = tmp_path / "o.jsonl"
    from layoutcheck.check import error_record

    sink = RecordSink(str(out))
    # Whole records, as a batch writes them (the tests' hooks check each against the schema).
    sink.write(error_record("/in/a.pdf", 1, "a.pdf page 1: damaged page"))
    size = out.stat().st_size
    FullDisk(monkeypatch, out, room=size + 10)
    with pytest.raises(OutputError, match=r"o\.jsonl: records could not be written \(No space left on device\)"):
        sink.write(error_record("/in/a.pdf", 2, "a.pdf page 2: damaged page"))
    assert out.stat().st_size == size
    sink.close()


def test_report_that_cannot_be_written_exit_3_and_no_temporary_file(tmp_path, template_file, monkeypatch):
    from layoutcheck import report

    def no_space(self, *a, **k):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(self))

    real = Path.write_text

    def half_then_full(self, text, *a, **k):
        if self.name.endswith(".tmp"):
            real(self, text[: len(text) // 2], *a, **k)  # part of the report reached the disk
            no_space(self)
        return real(self, text, *a, **k)

    monkeypatch.setattr(report.Path, "write_text", half_then_full)
    res = CliRunner().invoke(main, ["verify", str(template_file), str(EXACT), "-q", "--report", str(tmp_path / "r.html")])
    assert res.exit_code == EXIT_INCOMPLETE
    assert res.output.strip().startswith("Error: ") and "report could not be written (No space left on device)" in res.output
    assert "\n" not in res.output.strip() and list(tmp_path.iterdir()) == []


def test_signal_while_the_report_is_written_exit_3(tmp_path, template_file, monkeypatch):
    """Ctrl-C (or SIGTERM, which the command turns into the same) after the batch, while the
    report is drawn: one line, exit code 3, the records already whole."""
    from layoutcheck import cli

    def stopped(*a, **k):
        os.kill(os.getpid(), signal.SIGTERM)  # as a service manager stopping the run would
        raise AssertionError("SIGTERM did not stop the command")

    monkeypatch.setattr(cli, "write_report", stopped)
    out = tmp_path / "o.jsonl"
    res = CliRunner().invoke(main, ["verify", str(template_file), str(EXACT), "-q", "--json", str(out),
                                    "--report", str(tmp_path / "r.html")])
    assert res.exit_code == EXIT_INCOMPLETE, res.output
    assert res.output.strip() == ("Error: interrupted: the records or the report may be incomplete; "
                                  "repeat the same command with --resume to finish")
    assert [json.loads(line)["verdict"] for line in out.read_text().splitlines()] == ["pass"]
    assert signal.getsignal(signal.SIGTERM) is signal.SIG_DFL  # the command's handler is gone again


def test_output_in_a_missing_folder_exit_3(tmp_path, template_file):
    res = CliRunner().invoke(main, ["verify", str(template_file), str(EXACT), "-q", "--json", str(tmp_path / "no" / "o.jsonl")])
    assert res.exit_code == EXIT_INCOMPLETE
    assert res.output.strip() == f"Error: {tmp_path / 'no' / 'o.jsonl'}: records could not be written (No such file or directory)"


def test_exit_codes_0_1_2(tmp_path, template_file):
    runner = CliRunner()
    assert runner.invoke(main, ["verify", str(template_file), str(EXACT), "-q"]).exit_code == EXIT_PASS
    assert runner.invoke(main, ["verify", str(template_file), str(SAMPLES / "inputs" / "101_shifted.pdf"), "-q"]).exit_code == EXIT_FLAGGED
    assert runner.invoke(main, ["verify", str(template_file), str(EXACT), "--max-memory", "10"]).exit_code == EXIT_USAGE


# -- signals --------------------------------------------------------------------------------------
@pytest.mark.slow
def test_sigterm_mid_batch_exit_3_then_resume_gives_every_page_once(tmp_path, template_file):
    from test_batch import pdf_of

    pages = [(f, 1) for f in INPUTS] + [(SAMPLES / "inputs" / "310_filled.pdf", 2)]
    files = [pdf_of((pages * 3)[k * 10:(k + 1) * 10], tmp_path / f"part{k}.pdf") for k in range(3)]
    out = tmp_path / "out.jsonl"
    cmd = [sys.executable, "-m", "layoutcheck.cli", "verify", str(template_file), *files, "--json", str(out), "-q", "-j", "2"]
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    proc = subprocess.Popen(cmd, cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline and proc.poll() is None:
        if out.exists() and out.read_bytes().count(b"\n") >= 4:
            break
        time.sleep(0.02)
    assert proc.poll() is None, "the batch ended before it could be interrupted"
    proc.send_signal(signal.SIGTERM)
    stdout, stderr = proc.communicate(timeout=60)
    assert proc.returncode == EXIT_INCOMPLETE, stderr
    assert "interrupted: repeat the command with --resume" in stdout and "Traceback" not in stderr
    first = lines(out)
    assert 4 <= len(first) < 30 and out.read_bytes().endswith(b"\n")
    res = subprocess.run(cmd + ["--resume"], cwd=ROOT, capture_output=True, text=True, timeout=300, env=env)
    assert res.returncode == EXIT_FLAGGED, res.stderr
    keys = [(r["source"], r["page"]) for r in lines(out)]
    assert len(keys) == 30 and set(keys) == {(f, n) for f in files for n in range(1, 11)}
    assert f"({len(first)} already done)" in res.stdout


# -- never overwritten ----------------------------------------------------------------------------
def test_same_named_inputs_in_two_folders_keep_two_images(tmp_path, templates):
    for d in ("north", "south"):
        (tmp_path / d).mkdir()
        shutil.copy(SAMPLES / "inputs" / "101_shifted.pdf", tmp_path / d / "scan.pdf")
    files = [str(tmp_path / "north" / "scan.pdf"), str(tmp_path / "south" / "scan.pdf")]
    settings = CheckSettings(normalise_dir=str(tmp_path / "norm"), normalise_dpi=50)
    here = BatchOptions(page_timeout=None, memory_mb=None, keep_records=True)  # in this process: faster
    res = run_batch(files, templates, settings, options=here)
    paths = [r["normalised"]["path"] for r in res.records]
    assert len(set(paths)) == 2 and all(Path(p).exists() for p in paths)
    assert sorted(os.listdir(tmp_path / "norm")) == sorted(Path(p).name for p in paths)
    # A second, fresh run over the same inputs does not replace them: its images get new names.
    before = {p: Path(p).stat().st_mtime_ns for p in paths}
    again = run_batch(files, templates, settings, options=here)
    new = [r["normalised"]["path"] for r in again.records]
    assert [Path(p).name for p in new] == [Path(p).name.replace("_p1.png", "_p1-2.png") for p in paths]
    assert {p: Path(p).stat().st_mtime_ns for p in paths} == before
    # A resumed run that redoes a page writes over the image of its own first try.
    out = tmp_path / "o.jsonl"
    out.write_text("")
    resumed = run_batch(files[:1], templates, settings, output=str(out),
                        options=BatchOptions(page_timeout=None, memory_mb=None, resume=True, keep_records=True))
    assert resumed.records[0]["normalised"]["path"] == paths[0]
    assert len(os.listdir(tmp_path / "norm")) == 4

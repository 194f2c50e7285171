"""Batches: input expansion, stable order whatever the job count, atomic append and resume."""

from __future__ import annotations

import io
import json
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from click.testing import CliRunner

from layoutcheck.batch import BatchOptions, expand_inputs, read_done, run_batch
from layoutcheck.check import learn
from layoutcheck.cli import main
from layoutcheck.template import save_template

ROOT = Path(__file__).resolve().parents[1]
SAMPLES = ROOT / "sample_forms"
# The born-digital demo inputs (the scanned ones are slower and add nothing to ordering).
INPUTS = sorted(str(p) for p in (SAMPLES / "inputs").glob("*.pdf") if not p.name.startswith("scan_"))


@pytest.fixture(scope="module")
def templates():
    return [learn([str(SAMPLES / "references" / n)], with_raster=False)
            for n in ("KBH-101_vessel_arrival.pdf", "KBH-310_berth_application.pdf")]


@pytest.fixture(scope="module")
def template_file(templates, tmp_path_factory):
    path = tmp_path_factory.mktemp("tpl") / "KBH-101.json"
    save_template(templates[0], path)
    return path


def strip(recs):
    return [{k: v for k, v in r.items() if k != "elapsed_ms"} for r in recs]


def lines(path):
    return [json.loads(x) for x in Path(path).read_text().splitlines()]


def pdf_of(pages, path):
    """A PDF made of (file, page) pages of the sample inputs, in the order given."""
    from pypdf import PdfReader, PdfWriter

    w = PdfWriter()
    for f, n in pages:
        w.add_page(PdfReader(str(f)).pages[n - 1])
    with open(path, "wb") as fh:
        w.write(fh)
    return str(path)


def test_expand_files_folders_globs_and_stdin(tmp_path):
    (tmp_path / "sub" / "deep").mkdir(parents=True)
    for name in ("b.pdf", "a.PNG", "notes.txt", "sub/c.tif", "sub/deep/d.jpeg", "sub/e.json"):
        (tmp_path / name).write_bytes(b"x")
    t = str(tmp_path)
    assert expand_inputs([t]) == [f"{t}/a.PNG", f"{t}/b.pdf", f"{t}/sub/c.tif", f"{t}/sub/deep/d.jpeg"]
    assert expand_inputs([f"{t}/*.pdf", f"{t}/*.PNG"]) == [f"{t}/b.pdf", f"{t}/a.PNG"]
    assert expand_inputs([f"{t}/missing.pdf", f"{t}/*.gif"]) == [f"{t}/missing.pdf", f"{t}/*.gif"]
    stdin = io.StringIO(f"{t}/b.pdf\n\n{t}/sub\n")
    assert expand_inputs(["-"], stdin=stdin) == [f"{t}/b.pdf", f"{t}/sub/c.tif", f"{t}/sub/deep/d.jpeg"]


def test_order_and_records_do_not_depend_on_jobs(tmp_path, templates):
    files = list(reversed(INPUTS))  # input order, not name order
    one = run_batch(files, templates, output=str(tmp_path / "one.jsonl"), options=BatchOptions(jobs=1, keep_records=True))
    two = run_batch(files, templates, output=str(tmp_path / "two.jsonl"), options=BatchOptions(jobs=2, keep_records=True))
    keys = [(r["source"], r["page"]) for r in one.records]
    expect = [(f, 1) for f in files]
    expect.insert(files.index(str(SAMPLES / "inputs" / "310_filled.pdf")) + 1, (str(SAMPLES / "inputs" / "310_filled.pdf"), 2))
    assert keys == expect
    assert strip(lines(tmp_path / "one.jsonl")) == strip(lines(tmp_path / "two.jsonl")) == strip(one.records)
    assert one.counts == two.counts and one.total == len(expect)


def test_torn_last_line_is_dropped(tmp_path, monkeypatch):
    out = tmp_path / "out.jsonl"
    out.write_bytes(b'{"source": "a.pdf", "page": 1, "verdict": "pass"}\n{"source": "a.pdf", "page": 2, "verd')
    # A record written with a relative path (older runs) names a file of the run's folder.
    monkeypatch.chdir(tmp_path)
    assert read_done(str(out)) == {(str(tmp_path / "a.pdf"), 1): {"verdict": "pass", "template": None, "template_page": None}}
    assert out.read_bytes().endswith(b'"pass"}\n')


def test_sigkill_mid_batch_then_resume_gives_every_page_once(tmp_path, templates, template_file):
    # 30 pages in 3 files of 10, made from the sample inputs.
    pages = [(f, 1) for f in INPUTS] + [(SAMPLES / "inputs" / "310_filled.pdf", 2)]
    files = [pdf_of((pages * 3)[k * 10:(k + 1) * 10], tmp_path / f"part{k}.pdf") for k in range(3)]
    clean = tmp_path / "clean.jsonl"
    from layoutcheck.template import load_template

    run_batch(files, [load_template(template_file)], output=str(clean))  # the template as the CLI reads it
    out = tmp_path / "out.jsonl"
    cmd = [sys.executable, "-m", "layoutcheck.cli", "verify", str(template_file), *files, "--json", str(out), "-q", "--jobs", "2"]
    proc = subprocess.Popen(cmd, cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline and proc.poll() is None:
        if out.exists() and out.read_bytes().count(b"\n") >= 6:
            break
        time.sleep(0.02)
    assert proc.poll() is None, "the batch ended before it could be interrupted"
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    written = out.read_bytes().count(b"\n")
    assert 6 <= written < 30
    with open(out, "ab") as fh:  # as if the kill had cut a line in half
        fh.write(b'{"source": "' + files[2].encode() + b'", "page": 9, "verdict": "pa')
    res = subprocess.run(cmd + ["--resume"], cwd=ROOT, capture_output=True, text=True, timeout=300)
    assert res.returncode == 1, res.stderr
    got = lines(out)
    keys = [(r["source"], r["page"]) for r in got]
    assert sorted(keys) == sorted({(f, n) for f in files for n in range(1, 11)}) and len(keys) == 30
    assert strip(got) == strip(lines(clean))  # same records, same order
    assert "(%d already done)" % written in res.stdout


def test_multi_page_form_missing_and_repeated_pages(tmp_path, templates):
    two = SAMPLES / "inputs" / "310_filled.pdf"
    swapped = pdf_of([(two, 2), (two, 1)], tmp_path / "swapped.pdf")
    short = pdf_of([(two, 1)], tmp_path / "short.pdf")
    extra = pdf_of([(two, 1), (two, 2), (two, 1)], tmp_path / "extra.pdf")
    res = run_batch([swapped, short, extra], templates, options=BatchOptions(keep_records=True))
    r = res.records
    # Pages of a multi-page form may come in any order.
    assert [(x["template_page"], x["verdict"]) for x in r[:2]] == [(2, "pass"), (1, "pass")]
    assert r[2]["verdict"] == "mismatched"
    assert r[2]["findings"][0]["message"].startswith("File lacks page 2 of form KBH-310 (2 pages")
    assert [x["verdict"] for x in r[3:]] == ["mismatched", "pass", "mismatched"]
    assert "Page 1 repeats page 1 of form KBH-310, as file page 3 does" in r[3]["findings"][0]["message"]
    assert "Page 3 repeats page 1 of form KBH-310, as file page 1 does" in r[5]["findings"][0]["message"]


def test_cli_exit_codes_and_summary(tmp_path, template_file):
    runner = CliRunner()
    exact = str(SAMPLES / "inputs" / "101_exact.pdf")
    shifted = str(SAMPLES / "inputs" / "101_shifted.pdf")
    ok = runner.invoke(main, ["verify", str(template_file), exact, "-q"])
    assert ok.exit_code == 0 and ok.output.strip() == "1 page(s): 1 pass"
    mixed = runner.invoke(main, ["verify", str(template_file), exact, shifted, "-q"])
    assert mixed.exit_code == 1 and mixed.output.strip() == "2 page(s): 1 pass, 1 shifted"
    bad = tmp_path / "bad.json"
    bad.write_text("{}")
    assert runner.invoke(main, ["verify", str(bad), exact]).exit_code == 2
    assert runner.invoke(main, ["verify", str(template_file), exact, "--resume"]).exit_code == 2
    stdin = runner.invoke(main, ["verify", str(template_file), "-", "-q", "--json", str(tmp_path / "o.jsonl")], input=f"{exact}\n{shifted}\n")
    assert stdin.exit_code == 1 and [r["verdict"] for r in lines(tmp_path / "o.jsonl")] == ["pass", "shifted"]


def test_error_records_carry_the_handoff_fields_when_asked(tmp_path):
    """With --zones / --normalise, every record has the fields, error records included."""
    from layoutcheck.batch import BatchOptions, run_batch
    from layoutcheck.check import CheckSettings, learn

    ref = Path(__file__).resolve().parent.parent / "sample_forms" / "references" / "KBH-101_vessel_arrival.pdf"
    t = learn([str(ref)], with_raster=False)
    junk = tmp_path / "junk.pdf"
    junk.write_bytes(b"not a pdf at all")
    out = tmp_path / "r.jsonl"
    settings = CheckSettings(zones=True, normalise_dir=str(tmp_path / "norm"))
    run_batch([str(junk), str(ref)], [t], settings, output=str(out), options=BatchOptions())
    recs = [json.loads(x) for x in out.read_text().splitlines()]
    assert [r["verdict"] for r in recs] == ["error", "pass"]
    assert recs[0]["zones"] == [] and recs[0]["normalised"] is None
    assert len(recs[1]["zones"]) > 0 and recs[1]["normalised"]["path"].endswith(".png")

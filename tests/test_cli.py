"""The command line, driven through click's CliRunner: exit codes, JSON fields, what a person sees."""

from __future__ import annotations

import json

import pytest
from click.testing import CliRunner

from conftest import draw_form
from layoutcheck.cli import main


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    d = tmp_path_factory.mktemp("cli")
    ref = draw_form(d / "reference.pdf")
    good = draw_form(d / "good.pdf", fill=True)
    moved = draw_form(d / "moved.pdf", move={"Tonnage": (10.0, 0.0)})
    runner = CliRunner()
    res = runner.invoke(main, ["learn", str(ref), "-o", str(d / "t.json"), "--name", "T-7"])
    assert res.exit_code == 0, res.output
    return d, good, moved


def test_learn_says_what_it_learned(files):
    d, _, _ = files
    res = CliRunner().invoke(main, ["learn", str(d / "reference.pdf"), "-o", str(d / "t2.json")])
    assert res.exit_code == 0
    assert res.output.splitlines()[0].startswith("reference page 1: ")
    assert " elements in " in res.output and res.output.rstrip().endswith(f"wrote {d / 't2.json'}")


def test_verify_pass_exits_0_with_summary(files):
    d, good, _ = files
    res = CliRunner().invoke(main, ["verify", str(d / "t.json"), str(good)])
    assert res.exit_code == 0, res.output
    lines = res.output.splitlines()
    assert lines[0].split()[:4] == ["file", "page", "verdict", "template"]
    assert lines[2].split()[:4] == ["good.pdf", "1", "pass", "T-7"]
    assert lines[-1] == "1 page(s): 1 pass"


def test_verify_flagged_exits_1_and_writes_records(files, tmp_path):
    d, good, moved = files
    out = tmp_path / "r.jsonl"
    res = CliRunner().invoke(main, ["verify", str(d / "t.json"), str(good), str(moved), "--json", str(out)])
    assert res.exit_code == 1
    recs = [json.loads(line) for line in out.read_text().splitlines()]
    assert [(r["source"].split("/")[-1], r["verdict"]) for r in recs] == [("good.pdf", "pass"), ("moved.pdf", "mismatched")]
    box = [o for o in recs[1]["offending"] if o["kind"] == "box"]
    assert [(o["caption"], o["status"]) for o in box] == [("Tonnage", "moved")]
    assert "Box 'Tonnage' (box-004) is 10.0 mm from where this form has it (10.0 mm right)" in res.output


def test_json_to_stdout_keeps_the_table_off_it(files):
    d, good, _ = files
    res = CliRunner().invoke(main, ["verify", str(d / "t.json"), str(good), "--json", "-"])
    assert res.exit_code == 0
    (line,) = [ln for ln in res.stdout.splitlines() if ln.strip()]
    assert json.loads(line)["verdict"] == "pass"


def test_tolerance_flags_change_the_verdict(files):
    d, _, _ = files
    shifted = draw_form(d / "shift3.pdf", shift_mm=(3.0, 0.0))
    strict = CliRunner().invoke(main, ["verify", str(d / "t.json"), str(shifted), "--max-shift", "2", "--json", "-"])
    loose = CliRunner().invoke(main, ["verify", str(d / "t.json"), str(shifted), "--json", "-"])
    assert json.loads(strict.stdout.splitlines()[0])["verdict"] == "shifted" and strict.exit_code == 1
    assert json.loads(loose.stdout.splitlines()[0])["verdict"] == "pass" and loose.exit_code == 0


def test_unreadable_template_exits_2_with_one_line(tmp_path, files):
    _, good, _ = files
    bad = tmp_path / "broken.json"
    bad.write_text("{ nope")
    res = CliRunner().invoke(main, ["verify", str(bad), str(good)])
    assert res.exit_code == 2
    assert res.output.startswith("Error: broken.json: template is not valid JSON")
    assert len(res.output.strip().splitlines()) == 1


def test_usage_error_exits_2(files):
    d, good, _ = files
    res = CliRunner().invoke(main, ["verify", str(d / "t.json"), str(good), "--max-skew", "-1"])
    assert res.exit_code == 2
    assert "max_skew_deg must be a non-negative number" in res.output


def test_bad_input_file_gives_error_record_and_batch_goes_on(files, tmp_path):
    d, good, _ = files
    junk = tmp_path / "junk.pdf"
    junk.write_text("this is not a pdf")
    res = CliRunner().invoke(main, ["verify", str(d / "t.json"), str(junk), str(good), "--json", "-"])
    recs = [json.loads(x) for x in res.stdout.splitlines() if x.strip()]
    assert [r["verdict"] for r in recs] == ["error", "pass"]
    assert recs[0]["error"] == "junk.pdf: not a PDF (no %PDF header)"
    assert res.exit_code == 1


def test_learn_from_samples_names_the_unstable_elements(tmp_path):
    a = draw_form(tmp_path / "a.pdf")
    b = draw_form(tmp_path / "b.pdf")
    c = draw_form(tmp_path / "c.pdf", omit={"Agent"})
    res = CliRunner().invoke(main, ["learn", str(a), str(b), str(c), "-o", str(tmp_path / "t.json")])
    assert res.exit_code == 0, res.output
    line = next(x for x in res.output.splitlines() if x.startswith("  not on every sample"))
    assert "box 'Agent' (box-" in line


def test_demo_with_relative_out_from_another_folder(tmp_path, monkeypatch):
    """The README's first command, as a new user runs it: from any folder, default relative
    output folder. Every verdict as planted, a report written, record paths absolute."""
    import os
    import re

    monkeypatch.chdir(tmp_path)
    res = CliRunner().invoke(main, ["demo", "--out", "sub/out"])
    assert res.exit_code == 0, res.output
    got, total = map(int, re.search(r"verdicts as planted: (\d+) of (\d+)", res.output).groups())
    assert got == total >= 21
    out = tmp_path / "sub" / "out"
    assert (out / "report.html").stat().st_size > 100_000  # pictures embedded
    recs = [json.loads(line) for line in (out / "results.jsonl").read_text().splitlines()]
    assert all(os.path.isabs(r["source"]) and os.path.exists(r["source"]) for r in recs)
    norm = [r["normalised"]["path"] for r in recs if r.get("normalised")]
    assert norm and all(os.path.isabs(p) and os.path.exists(p) for p in norm)

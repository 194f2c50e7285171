"""The watched inbox: every file ends in exactly one folder with exactly one set of records,
whatever happens to the watcher (planted crash points, and SIGKILL at random moments)."""

from __future__ import annotations

import collections
import hashlib
import json
import os
import shutil
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest
from click.testing import CliRunner

from layoutcheck import watch as watch_mod
from layoutcheck.cli import main

ROOT = Path(__file__).resolve().parent.parent
INPUTS = ROOT / "sample_forms" / "inputs"
TEMPLATES = ROOT / "templates"
#: Born-digital inputs (quick to check) and their planted verdicts (sample_forms/expected.json).
PLANTED = {"101_exact.pdf": "pass", "101_shifted.pdf": "shifted", "101_rotated.pdf": "skewed",
           "205_exact.pdf": "pass", "310_filled.pdf": "pass", "101_box_removed.pdf": "mismatched"}


def sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def page_count(path: Path) -> int:
    import pypdfium2 as pdfium  # counts pages its own way, independent of our reader

    doc = pdfium.PdfDocument(str(path))
    try:
        return len(doc)
    finally:
        doc.close()


def write_slowly(path: Path, data: bytes, seconds: float, parts: int = 6) -> threading.Thread:
    """Write ``data`` to ``path`` in parts over ``seconds``, as a slow network copy does."""
    def run():
        with open(path, "wb") as fh:
            for k in range(parts):
                fh.write(data[k * len(data) // parts:(k + 1) * len(data) // parts])
                fh.flush()
                time.sleep(seconds / parts)
    t = threading.Thread(target=run)
    t.start()
    return t


def rename_in(src: Path, inbox: Path, rel: str, staging: Path) -> None:
    """Copy to a staging folder on the same filesystem, then rename into the inbox."""
    staging.mkdir(exist_ok=True)
    tmp = staging / Path(rel).name
    shutil.copyfile(src, tmp)
    (inbox / rel).parent.mkdir(parents=True, exist_ok=True)
    os.rename(tmp, inbox / rel)


def check_filed(out: Path, dropped: dict[str, bytes], inbox: Path) -> dict[str, list[dict]]:
    """Every dropped file in exactly one folder, once, with exactly one set of records."""
    assert [p for p in inbox.rglob("*") if p.is_file()] == []
    filed = {}
    for folder in watch_mod.FOLDERS:
        for p in (out / folder).rglob("*"):
            if p.is_file():
                filed.setdefault(hashlib.sha256(p.read_bytes()).hexdigest() + ":" + p.name, []).append(p)
    want = collections.Counter(hashlib.sha256(d).hexdigest() + ":" + Path(rel).name for rel, d in dropped.items())
    assert collections.Counter({k: len(v) for k, v in filed.items()}) == want
    records = [json.loads(line) for line in (out / "records.jsonl").read_text().splitlines()]
    by_dest: dict[str, list[dict]] = collections.defaultdict(list)
    for r in records:
        by_dest[r["moved_to"]].append(r)
    on_disk = {str(p) for ps in filed.values() for p in ps}
    assert set(by_dest) == on_disk
    for dest, recs in by_dest.items():
        pages = [r["page"] for r in recs]
        if dest.endswith(".pdf") and recs[0]["verdict"] != "error":
            assert pages == list(range(1, page_count(Path(dest)) + 1)), dest  # one record per page, once
        else:
            assert len(pages) == 1
        folder = Path(dest).relative_to(out).parts[0]
        assert folder == watch_mod.folder_for(recs)
    return by_dest


def test_folder_for_is_the_worst_verdict():
    assert watch_mod.folder_for([{"verdict": "pass"}, {"verdict": "pass"}]) == "pass"
    assert watch_mod.folder_for([{"verdict": "pass"}, {"verdict": "shifted"}]) == "review"
    assert watch_mod.folder_for([{"verdict": "mismatched"}, {"verdict": "error"}]) == "error"
    assert watch_mod.folder_for([{"verdict": "unrecognised"}]) == "review"


def test_once_files_slow_renamed_and_damaged_files(tmp_path):
    inbox, out = tmp_path / "inbox", tmp_path / "out"
    inbox.mkdir()
    dropped = {}
    for name in ("101_exact.pdf", "101_shifted.pdf"):
        shutil.copyfile(INPUTS / name, inbox / name)
        dropped[name] = (INPUTS / name).read_bytes()
    rename_in(INPUTS / "101_rotated.pdf", inbox, "night/101_rotated.pdf", tmp_path / "staging")
    dropped["night/101_rotated.pdf"] = (INPUTS / "101_rotated.pdf").read_bytes()
    (inbox / "damaged.pdf").write_bytes(b"%PDF-1.7\n" + b"\x00garbage" * 100)
    dropped["damaged.pdf"] = (inbox / "damaged.pdf").read_bytes()
    (inbox / ".hidden.pdf").write_bytes(b"not ours")
    (inbox / "arriving.pdf.part").write_bytes(b"half")
    slow = INPUTS / "205_exact.pdf"
    (inbox / "slow").mkdir()
    writer = write_slowly(inbox / "slow" / "205_exact.pdf", slow.read_bytes(), seconds=1.5)
    dropped["slow/205_exact.pdf"] = slow.read_bytes()
    res = CliRunner().invoke(main, ["watch", str(TEMPLATES), str(inbox), "--out", str(out), "--once", "--settle", "0.8"])
    writer.join()
    assert res.exit_code == 1, res.output  # some pages were flagged
    (inbox / ".hidden.pdf").unlink()
    (inbox / "arriving.pdf.part").unlink()
    by_dest = check_filed(out, dropped, inbox)
    where = {Path(d).relative_to(out).as_posix(): recs for d, recs in by_dest.items()}
    assert set(where) == {"pass/101_exact.pdf", "review/101_shifted.pdf", "review/night/101_rotated.pdf",
                          "error/damaged.pdf", "pass/slow/205_exact.pdf"}
    # The slow file was taken whole: every page passed, none read half-written.
    assert [r["verdict"] for r in where["pass/slow/205_exact.pdf"]] == ["pass"] * page_count(slow)
    assert where["error/damaged.pdf"][0]["error"].startswith("damaged.pdf")
    assert "5 file(s) filed: 2 pass, 2 review, 1 error" in res.output
    # The flagged pages are in the review page; the passed ones are not.
    html = (out / "review.html").read_text()
    assert "101_shifted.pdf" in html and "101_rotated.pdf" in html and "101_exact.pdf" not in html

    # The same file dropped again is new work: filed beside the first under a new name.
    shutil.copyfile(INPUTS / "101_exact.pdf", inbox / "101_exact.pdf")
    dropped["101_exact_again"] = (INPUTS / "101_exact.pdf").read_bytes()
    res = CliRunner().invoke(main, ["watch", str(TEMPLATES), str(inbox), "--out", str(out), "--once", "--settle", "0"])
    assert res.exit_code == 0, res.output
    assert sha(out / "pass" / "101_exact_2.pdf") == sha(INPUTS / "101_exact.pdf")
    dropped = {("101_exact_2.pdf" if k == "101_exact_again" else k): v for k, v in dropped.items()}
    check_filed(out, dropped, inbox)


def test_json_dash_is_refused(tmp_path):
    (tmp_path / "in").mkdir()
    res = CliRunner().invoke(main, ["watch", str(TEMPLATES), str(tmp_path / "in"), "--out", str(tmp_path / "o"), "--json", "-"])
    assert res.exit_code == 2 and "--json - is refused" in res.output


class Crash(Exception):
    """Stands for the process dying at a planted point."""


@pytest.mark.parametrize("point", ["after records", "after journal", "after link"])
def test_a_crash_at_each_step_is_finished_on_restart(tmp_path, monkeypatch, point):
    inbox, out = tmp_path / "inbox", tmp_path / "out"
    inbox.mkdir()
    dropped = {}
    for name in ("101_exact.pdf", "101_shifted.pdf", "205_exact.pdf"):
        shutil.copyfile(INPUTS / name, inbox / name)
        dropped[name] = (INPUTS / name).read_bytes()
    calls = {"n": 0}
    if point == "after records":
        real = watch_mod.Journal.write

        def write(self, entry, sync=True):
            if entry.get("state") == "recorded" and entry["rel"] == "101_shifted.pdf":
                raise Crash(point)
            real(self, entry, sync)
        monkeypatch.setattr(watch_mod.Journal, "write", write)
    elif point == "after journal":
        real_move = watch_mod.move

        def move(src, dest):
            if src.name == "101_shifted.pdf":
                raise Crash(point)
            real_move(src, dest)
        monkeypatch.setattr(watch_mod, "move", move)
    else:
        real_unlink = os.unlink

        def unlink(path, *a, **k):
            if str(path).endswith("inbox/101_shifted.pdf") and calls["n"] == 0:
                calls["n"] += 1
                raise Crash(point)
            real_unlink(path, *a, **k)
        monkeypatch.setattr(watch_mod.os, "unlink", unlink)
    templates = __import__("layoutcheck").load_templates(TEMPLATES)
    with pytest.raises(Crash):
        watch_mod.watch(inbox, out, templates, watch_settings=watch_mod.WatchSettings(settle=0, once=True), log=lambda m: None)
    monkeypatch.undo()
    lines = (out / "records.jsonl").read_text().splitlines()
    # The planted state: the first file is done; the second has records (and more) but is not done.
    assert json.loads(lines[0])["source"].endswith("101_exact.pdf")
    assert json.loads(lines[-1])["source"].endswith("101_shifted.pdf")
    logged = []
    watch_mod.watch(inbox, out, templates, watch_settings=watch_mod.WatchSettings(settle=0, once=True), log=logged.append)
    by_dest = check_filed(out, dropped, inbox)
    assert sorted(Path(d).name for d in by_dest) == ["101_exact.pdf", "101_shifted.pdf", "205_exact.pdf"]
    if point == "after records":
        assert any("records.jsonl: cut" in m for m in logged)


@pytest.mark.slow
def test_sigkill_at_random_moments_then_restart(tmp_path):
    inbox, out = tmp_path / "inbox", tmp_path / "out"
    inbox.mkdir()
    dropped = {}
    k = 0
    for rnd in range(2):
        for name in PLANTED:
            rel = f"batch{rnd}/{k:02d}_{name}"
            if k % 3 == 0:
                rename_in(INPUTS / name, inbox, rel, tmp_path / "staging")
            else:
                (inbox / rel).parent.mkdir(parents=True, exist_ok=True)
                shutil.copyfile(INPUTS / name, inbox / rel)
            dropped[rel] = (INPUTS / name).read_bytes()
            k += 1
    (inbox / "batch0" / "broken.png").write_bytes(b"\x89PNG\r\n\x1a\n" + b"\x00" * 50)
    dropped["batch0/broken.png"] = (inbox / "batch0" / "broken.png").read_bytes()
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    cmd = [sys.executable, "-m", "layoutcheck.cli", "watch", str(TEMPLATES), str(inbox), "--out", str(out), "--settle", "0.3", "-q"]
    records = out / "records.jsonl"
    journal = out / ".journal.jsonl"
    rng = __import__("random").Random(7)
    slow_writer = None
    # Checking takes far longer than filing, so a kill at a random moment mostly lands in checking;
    # the kills that land in filing are aimed: the moment records.jsonl grows (records written,
    # not yet journaled), a few milliseconds later (journaled or being moved), and one at random.
    for kill, delay in enumerate((0.0, 0.004, 0.0, None, 0.002)):
        log = open(tmp_path / f"log{kill}", "w")
        proc = subprocess.Popen(cmd, env=env, stdout=subprocess.DEVNULL, stderr=log)
        if kill == 1:  # a file written slowly while the watcher runs
            (inbox / "late").mkdir(exist_ok=True)
            slow_writer = write_slowly(inbox / "late" / "310_filled.pdf", (INPUTS / "310_filled.pdf").read_bytes(), 1.0)
            dropped["late/310_filled.pdf"] = (INPUTS / "310_filled.pdf").read_bytes()
        deadline = time.monotonic() + 60
        if delay is None:  # wait for one more file to be filed, then a random moment
            moved = journal.read_text().count('"moved"') if journal.exists() else 0
            while time.monotonic() < deadline and not (journal.exists() and journal.read_text().count('"moved"') > moved):
                time.sleep(0.05)
            time.sleep(rng.uniform(0.0, 0.4))
        else:
            size = records.stat().st_size if records.exists() else 0
            while time.monotonic() < deadline and (records.stat().st_size if records.exists() else 0) == size:
                pass  # no sleep: the window between records and journal is a few milliseconds
            time.sleep(delay)
        proc.send_signal(signal.SIGKILL)
        proc.wait()
        log.close()
    slow_writer.join()
    res = subprocess.run(cmd[:-1] + ["--once"], env=env, capture_output=True, text=True, timeout=300)
    assert res.returncode == 1, res.stderr  # some pages were flagged
    check_filed(out, dropped, inbox)

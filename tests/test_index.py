"""A folder of templates as an index: stored signatures, refresh on change, damaged files, the CLI."""

from __future__ import annotations

import json
import os
import pickle
import sys
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from layoutcheck import index as index_mod
from layoutcheck.check import CheckSettings, extract, record_for
from layoutcheck.cli import main
from layoutcheck.index import INDEX_FILE, TemplateIndex
from layoutcheck.sources import read_pages
from layoutcheck.template import TemplateError, load_template, save_template

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "bench"))
import lookalike  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def specs():
    return lookalike.family(6, n_revised=0)


@pytest.fixture
def folder(tmp_path, specs):
    d = tmp_path / "templates"
    d.mkdir()
    for s in specs[:4]:
        save_template(lookalike.template_of(s), d / f"{s.name}.json")
    return d


def found_of(spec, tmp_path):
    (page,) = list(read_pages(lookalike.draw_pdf(spec, tmp_path / f"{spec.name}.pdf")))
    return page, extract(page)


@pytest.fixture
def loads(monkeypatch):
    """Counts the template files parsed."""
    calls = []
    real = index_mod.load_template
    monkeypatch.setattr(index_mod, "load_template", lambda p: calls.append(Path(p).name) or real(p))
    return calls


def test_stored_index_is_used_while_the_files_are_unchanged(folder, loads):
    first = TemplateIndex.open([folder])
    assert (folder / INDEX_FILE).exists() and len(loads) == 4
    loads.clear()
    again = TemplateIndex.open([folder])
    assert loads == []  # nothing parsed: signatures and infos come from the stored index
    assert [i.name for i in again] == [i.name for i in first] == ["KBH-100", "KBH-101", "KBH-102", "KBH-103"]
    for src in ("vector", "raster"):
        np.testing.assert_array_equal(again.signatures[src], first.signatures[src])


def test_index_is_refreshed_when_a_template_changes(folder, specs, loads, tmp_path):
    index = TemplateIndex.open([folder])
    loads.clear()
    target = folder / "KBH-102.json"
    # Touched, same content: a new modification time, the same hash, nothing parsed again.
    st = target.stat()
    os.utime(target, ns=(st.st_atime_ns, st.st_mtime_ns + 10_000_000_000))
    assert index.refresh() is False and loads == []
    assert index.infos[2].mtime_ns == st.st_mtime_ns + 10_000_000_000
    # New content under the same file name: parsed again, its signature and elements replaced.
    before = index.signatures["raster"][2].copy()
    save_template(lookalike.template_of(specs[5]), target)
    os.utime(target, ns=(st.st_atime_ns, st.st_mtime_ns + 20_000_000_000))
    assert index.refresh() is True and loads == ["KBH-102.json"]
    assert index.infos[2].name == "KBH-105"
    assert not np.array_equal(before, index.signatures["raster"][2])
    page, found = found_of(specs[5], tmp_path)
    assert record_for(page.source, 1, found, index, CheckSettings())["template"] == "KBH-105"
    # The stored index followed: a new process would parse nothing.
    loads.clear()
    TemplateIndex.open([folder])
    assert loads == []


def test_edited_template_is_read_again_on_refresh(folder, specs, loads):
    """An edit in place (a mark moved by 1 pt): new time, new hash, read again."""
    index = TemplateIndex.open([folder])
    target = folder / "KBH-101.json"
    data = json.loads(target.read_text())
    data["pages"][0]["elements"][0]["frame"][0] += 1.0  # a mark moved by 1 pt
    st = target.stat()
    target.write_text(json.dumps(data))
    os.utime(target, ns=(st.st_atime_ns, st.st_mtime_ns + 5_000_000_000))
    loads.clear()
    assert index.refresh() is True and loads == ["KBH-101.json"]


def test_damaged_template_in_a_folder_is_one_error_and_the_others_work(folder, specs, tmp_path):
    (folder / "KBH-999.json").write_text("{not json")
    index = TemplateIndex.open([folder])
    assert index.problems == ("KBH-999.json: template is not valid JSON (Expecting property name enclosed in double "
                              "quotes: line 1 column 2 (char 1))",)
    assert len(index) == 4
    page, found = found_of(specs[1], tmp_path)
    rec = record_for(page.source, 1, found, index, CheckSettings())
    assert rec["template"] == "KBH-101" and rec["verdict"] == "pass"
    with pytest.raises(TemplateError, match=r"^KBH-999\.json: template is not valid JSON"):
        TemplateIndex.open([folder / "KBH-999.json"])  # named on its own, it is an error


def test_index_ships_to_workers_without_the_elements_read(folder, specs, tmp_path):
    index = TemplateIndex.open([folder])
    page, found = found_of(specs[3], tmp_path)
    record_for(page.source, 1, found, index, CheckSettings())
    assert len(index._loaded) > 0
    shipped = pickle.loads(pickle.dumps(index))
    assert len(shipped._loaded) == 0
    # Far smaller than the templates it stands for: arrays, names and paths only.
    assert len(pickle.dumps(index)) < sum(f.stat().st_size for f in folder.glob("*.json")) / 10
    assert record_for(page.source, 1, found, shipped, CheckSettings())["template"] == "KBH-103"


def test_templates_command_lists_warns_and_names_the_damaged_file(folder, specs):
    import dataclasses

    twin = dataclasses.replace(lookalike.template_of(specs[0]), name="KBH-900")
    save_template(twin, folder / "KBH-900.json")
    (folder / "broken.json").write_text('{"format": "layoutcheck-template", "format_version": 1, "name": "x", "pages": []}')
    res = CliRunner().invoke(main, ["templates", str(folder)])
    assert res.exit_code == 1, res.output
    lines = res.output.splitlines()
    assert lines[0] == "warning: broken.json: template has no pages; left out, the other templates are used"
    assert lines[1].split() == ["template", "form", "revision", "pages", "elements", "zones"]
    t0 = load_template(folder / "KBH-100.json")
    assert lines[3].split() == ["KBH-100", "KBH-100", "-", "1", str(len(t0.pages[0].elements)), str(len(t0.pages[0].zones))]
    warn = [ln for ln in lines if ln.startswith("warning: KBH-")]
    assert warn == [ln for ln in warn if "too alike: pages would be ambiguous" in ln]
    assert len(warn) == 1 and warn[0].startswith("warning: KBH-100 page 1 and KBH-900 page 1 are too alike")
    assert lines[-1] == "5 template(s), 5 page(s), 1 damaged, 1 alike pair(s)"


def test_learn_writes_form_and_revision_and_old_templates_still_load(tmp_path, specs):
    pdf = lookalike.draw_pdf(specs[0], tmp_path / "ref.pdf")
    out = tmp_path / "r3.json"
    res = CliRunner().invoke(main, ["learn", pdf, "-o", str(out), "--form", "KBH-100", "--revision", "3"])
    assert res.exit_code == 0, res.output
    data = json.loads(out.read_text())
    assert (data["format_version"], data["form"], data["revision"]) == (2, "KBH-100", "3")
    t = load_template(out)
    assert (t.form, t.revision, t.form_name) == ("KBH-100", "3", "KBH-100")
    for f in sorted((ROOT / "templates").glob("*.json")):  # version 1 files of the demo forms
        assert json.loads(f.read_text())["format_version"] == 1
        assert load_template(f).revision is None


def test_expect_revision_must_name_a_revision_the_templates_have(folder, tmp_path, specs):
    pdf = lookalike.draw_pdf(specs[0], tmp_path / "in.pdf")
    res = CliRunner().invoke(main, ["verify", str(folder), pdf, "--expect-revision", "KBH-100=9"])
    assert res.exit_code == 2
    assert "Invalid value for --expect-revision: no template is revision 9 of KBH-100" in res.output
    res = CliRunner().invoke(main, ["verify", str(folder), pdf, "--expect-revision", "KBH-100="])
    assert res.exit_code == 2 and "'KBH-100=' is not REVISION or FORM=REVISION" in res.output


@pytest.mark.slow
def test_worker_processes_read_templates_through_the_index(folder, specs, tmp_path):
    from layoutcheck.batch import BatchOptions, run_batch

    index = TemplateIndex.open([folder])
    pdfs = [lookalike.draw_pdf(specs[k], tmp_path / f"in{k}.pdf") for k in (2, 0, 3)]
    result = run_batch(pdfs, index, options=BatchOptions(jobs=2, keep_records=True))
    assert [(r["template"], r["verdict"]) for r in result.records] == [("KBH-102", "pass"), ("KBH-100", "pass"), ("KBH-103", "pass")]
    assert len(index._loaded) == 0  # the pages were checked in the workers, which read the templates themselves


def test_verify_expect_revision_end_to_end(tmp_path):
    """Two revisions in a folder, a page of revision 2 checked as if revision 1 were expected."""
    d = tmp_path / "revs"
    d.mkdir()
    specs = lookalike.family(2, n_revised=1)  # KBH-100 revision 1, and revision 2 with a box moved 8 mm
    for s in specs:
        save_template(lookalike.template_of(s), d / f"{s.name}.json")
    pdf = lookalike.draw_pdf(specs[1], tmp_path / "r2.pdf")
    out = tmp_path / "out.jsonl"
    res = CliRunner().invoke(main, ["verify", str(d), pdf, "--expect-revision", "KBH-100=1", "--json", str(out), "-q"])
    assert res.exit_code == 1, res.output
    (rec,) = [json.loads(ln) for ln in out.read_text().splitlines()]
    assert (rec["template"], rec["form"], rec["revision"], rec["expected_revision"]) == ("KBH-100-r2", "KBH-100", "2", "1")
    assert rec["verdict"] == "mismatched"
    assert rec["findings"][0]["message"].startswith("Page is KBH-100 revision 2, not revision 1 as expected: box ")
    res = CliRunner().invoke(main, ["verify", str(d), pdf, "--expect-revision", "2", "--json", str(out), "-q"])
    assert res.exit_code == 0, res.output

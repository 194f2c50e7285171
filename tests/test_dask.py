"""The same batch on Dask distributed: the same records, in the same order, resumable."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from layoutcheck.batch import BatchOptions, run_batch
from layoutcheck.check import learn

SAMPLES = Path(__file__).resolve().parents[1] / "sample_forms"
# The born-digital demo inputs (14 pages); the scanned ones add time and nothing to the check.
INPUTS = sorted(str(p) for p in (SAMPLES / "inputs").glob("*.pdf") if not p.name.startswith("scan_"))


@pytest.fixture(scope="module")
def cluster():
    from distributed import LocalCluster

    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None) as c:
        yield c


@pytest.fixture(scope="module")
def templates():
    return [learn([str(SAMPLES / "references" / n)], with_raster=False)
            for n in ("KBH-101_vessel_arrival.pdf", "KBH-310_berth_application.pdf")]


def strip(path):
    return [{k: v for k, v in json.loads(x).items() if k != "elapsed_ms"} for x in Path(path).read_text().splitlines()]


def test_dask_records_equal_local_and_resume(cluster, templates, tmp_path):
    local, remote = tmp_path / "local.jsonl", tmp_path / "dask.jsonl"
    run_batch(INPUTS, templates, output=str(local))
    opts = BatchOptions(engine="dask", scheduler=cluster.scheduler_address)
    run_batch(INPUTS, templates, output=str(remote), options=opts)
    assert strip(remote) == strip(local) and len(strip(local)) == 14
    # Interrupted after five records (the sixth torn): resuming on Dask completes it exactly.
    text = local.read_text().splitlines(keepends=True)
    remote.write_text("".join(text[:5]) + text[5][:40])
    res = run_batch(INPUTS, templates, output=str(remote),
                    options=BatchOptions(engine="dask", scheduler=cluster.scheduler_address, resume=True))
    assert res.skipped == 5 and res.written == 9
    assert strip(remote) == strip(local)


def test_time_limit_holds_inside_dask_tasks(cluster, templates, tmp_path):
    """The page time limit is enforced inside the task: the page's own worker process is stopped."""
    import shutil

    from test_hostile import slow_pdf

    slow = slow_pdf(tmp_path / "slow.pdf")
    good = [str(tmp_path / n) for n in ("good.pdf", "again.pdf")]
    for g in good:
        shutil.copy(SAMPLES / "inputs" / "101_exact.pdf", g)
    opts = BatchOptions(engine="dask", scheduler=cluster.scheduler_address, page_timeout=1.5, keep_records=True)
    res = run_batch([good[0], str(slow), good[1]], templates, options=opts)
    assert [r["verdict"] for r in res.records] == ["pass", "error", "pass"]
    assert res.records[1]["error"] == "slow.pdf page 1: took longer than the page time limit of 1.5 s (--page-timeout); stopped"
    assert res.records[1]["elapsed_ms"] >= 1500

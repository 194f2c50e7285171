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

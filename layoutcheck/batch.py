"""Batches: many files, one JSON Lines record per page, in a stable order, nothing lost.

What a batch guarantees
-----------------------
- Every page of every input yields exactly one record; a file that cannot be opened at all
  yields one record with ``page`` null. Records come in input order, then page order, whatever
  the number of workers or the engine.
- Each record is one whole line written with a single ``os.write`` on a file opened with
  ``O_APPEND``: the kernel has the line as soon as the call returns, so killing the process
  never loses a written record and never leaves half of one. The file is ``fsync``-ed at most
  once every ``fsync_seconds`` (default 1 s) and at the end; a power cut can lose at most the
  last second of records, and a line torn by it is dropped when the run is resumed.
- ``resume=True`` reads the output file first: a torn last line is cut off, every complete
  record's key (absolute source path, page) counts as done, and only the remaining pages are
  checked and appended. Resume uses the same input list, so pass the same arguments.
- Pages run in worker processes (``jobs``), each holding one open document at a time
  (pypdfium2 is not thread-safe). A page that runs over ``page_timeout`` seconds gets an error
  record; its worker process is killed and a fresh one started, and the batch carries on. A
  worker that dies (a reader crash) is handled the same way.
- With ``engine="dask"`` the same tasks (one per file to plan, one per page) run on a Dask
  distributed cluster; the client writes the records, in order, as results arrive. The page
  time limit applies to the local pool only.

Multi-page forms
----------------
A file is taken to hold one copy of a form. When its pages match a template of several pages,
a file-level pass runs once every page of the file is checked: each record matched to that
template gets a ``mismatched`` finding when a template page got no input page ("lacks page
2") or when two input pages matched the same template page ("repeats page 1"). The records of
such files are held back until the file is complete, so the pass sees all of them.
"""

from __future__ import annotations

import glob
import heapq
import json
import os
import sys
import time
from collections import Counter, defaultdict
from dataclasses import dataclass, field
from typing import Callable, Iterable, Sequence

from .check import CheckSettings, check_page, error_record, handoff_fields
from .sources import KNOWN_EXTENSIONS, PageError, ReadLimits, open_document, record_path, where
from .template import Template
from .verdict import SEVERITY, VERDICTS, Finding

GLOB_CHARS = set("*?[")


# -- inputs ---------------------------------------------------------------------------------------
def expand_inputs(items: Iterable[str], stdin=None) -> list[str]:
    """Input paths from files, folders (recursively, known extensions), globs and ``-``.

    ``-`` reads one path per line from ``stdin`` (blank lines skipped; each line is expanded in
    turn). A glob is expanded here, sorted, so shells that do not expand them work the same. A
    glob that matches nothing, and a path that does not exist, are kept: they become a "no such
    file" error record rather than vanishing. Paths come back absolute (see
    :func:`~layoutcheck.sources.record_path`), as records and ``--resume`` name them.
    """
    return [record_path(p) for p in _expand(items, stdin)]


def _expand(items: Iterable[str], stdin=None) -> list[str]:
    out: list[str] = []
    for item in items:
        if item == "-":
            stream = stdin if stdin is not None else sys.stdin
            lines = [ln.strip() for ln in stream.read().splitlines()]
            out.extend(_expand([ln for ln in lines if ln and ln != "-"]))
            continue
        if os.path.isdir(item):
            out.extend(_folder_files(item))
        elif not os.path.exists(item) and GLOB_CHARS & set(item):
            hits = sorted(glob.glob(item, recursive=True))
            if not hits:
                out.append(item)
            for h in hits:
                out.extend(_folder_files(h) if os.path.isdir(h) else [h])
        else:
            out.append(item)
    return out


def _folder_files(folder: str) -> list[str]:
    found = []
    for root, dirs, files in os.walk(folder):
        dirs.sort()
        for f in files:
            if os.path.splitext(f)[1].lower() in KNOWN_EXTENSIONS:
                found.append(os.path.join(root, f))
    return sorted(found)


# -- the work, as plain functions a worker runs ---------------------------------------------------
class _OpenDocument:
    """The one document a worker holds open, reused while tasks stay on the same file."""

    def __init__(self) -> None:
        self.key: tuple | None = None
        self.doc = None

    def get(self, path: str, limits: ReadLimits):
        key = (path, limits)
        if self.key != key:
            self.drop()
            self.doc = open_document(path, limits)
            self.key = key
        return self.doc

    def drop(self) -> None:
        if self.doc is not None:
            self.doc.close()
        self.doc, self.key = None, None


_OPEN = _OpenDocument()


def plan_file(path: str, limits: ReadLimits) -> list:
    """What a file yields, in order: page numbers to check, and ready records (dicts)."""
    doc = _OPEN.get(path, limits)
    return [error_record(e.source, e.page, e.message) if isinstance(e, PageError) else int(e) for e in doc.plan]


def check_one(path: str, page: int, templates: Sequence[Template], settings: CheckSettings, limits: ReadLimits) -> dict:
    """The record of one page, reading through the worker's open document."""
    doc = _OPEN.get(path, limits)
    try:
        return check_page(doc.page(page), templates, settings)
    except Exception as exc:  # a bug on one page must not end the batch
        return error_record(path, page, f"{where(path, page)}: could not be checked ({type(exc).__name__}: {' '.join(str(exc).split())[:200]})")
    finally:
        doc.release()


# -- output ---------------------------------------------------------------------------------------
class RecordSink:
    """Appends whole JSON lines atomically (one ``os.write`` each on an ``O_APPEND`` fd)."""

    def __init__(self, path: str | None, fsync_seconds: float = 1.0):
        self.path = path
        self.fsync_seconds = fsync_seconds
        self._last_sync = time.monotonic()
        self.stream = None
        if path is None:
            self.fd = None
        elif path == "-":
            try:
                self.fd = sys.stdout.fileno()
                sys.stdout.flush()
            except (AttributeError, OSError, ValueError):  # a captured stdout without a descriptor
                self.fd, self.stream = None, sys.stdout
        else:
            self.fd = os.open(path, os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o644)

    def write(self, record: dict) -> None:
        if self.stream is not None:
            self.stream.write(json.dumps(record, ensure_ascii=False) + "\n")
            self.stream.flush()
            return
        if self.fd is None:
            return
        data = (json.dumps(record, ensure_ascii=False) + "\n").encode("utf-8")
        view = memoryview(data)
        while view:  # a regular file takes it whole; the loop only matters for pipes
            view = view[os.write(self.fd, view):]
        if self.path != "-" and time.monotonic() - self._last_sync >= self.fsync_seconds:
            os.fsync(self.fd)
            self._last_sync = time.monotonic()

    def close(self) -> None:
        if self.fd is not None and self.path != "-":
            os.fsync(self.fd)
            os.close(self.fd)
        self.fd = None


def read_done(path: str) -> dict[tuple[str, int | None], dict]:
    """Records already in an output file, by key; cuts off a torn last line first.

    Returns key -> ``{"verdict", "template", "template_page"}`` (what the summary and the
    multi-page pass need).
    """
    done: dict[tuple[str, int | None], dict] = {}
    if not os.path.exists(path):
        return done
    with open(path, "rb") as fh:
        data = fh.read()
    end = data.rfind(b"\n") + 1
    if end < len(data):  # a line without its newline was being written when the run stopped
        with open(path, "r+b") as fh:
            fh.truncate(end)
            os.fsync(fh.fileno())
    for line in data[:end].splitlines():
        try:
            r = json.loads(line)
            # Records before paths were written absolute name files from the run's folder.
            key = (record_path(r["source"]), r["page"])
            done[key] = {"verdict": r["verdict"], "template": r.get("template"), "template_page": r.get("template_page")}
        except (ValueError, KeyError, TypeError):
            continue  # a damaged line in the middle: its page is checked again
    return done


# -- multi-page forms -----------------------------------------------------------------------------
def page_set_findings(records: list[dict], prior: list[dict], templates: Sequence[Template]) -> None:
    """Add missing- and repeated-page findings to the records of one file (in place).

    ``prior`` are records of the same file written by an earlier, interrupted run: they count,
    but are not changed.
    """
    multi = {t.name: t for t in templates if len(t.pages) > 1}
    if not multi:
        return
    groups: dict[str, list] = defaultdict(list)
    for rec in records:
        if rec.get("template") in multi and rec.get("template_page") is not None:
            groups[rec["template"]].append((rec.get("page"), rec["template_page"], rec))
    for rec in prior:
        if rec.get("template") in multi and rec.get("template_page") is not None:
            groups[rec["template"]].append((rec.get("page"), rec["template_page"], None))
    for name, items in groups.items():
        t = multi[name]
        used = Counter(tp for _, tp, _ in items)
        missing = [p.number for p in t.pages if used[p.number] == 0]
        pairs = ", ".join(f"{pg}->{tp}" for pg, tp, _ in sorted(items, key=lambda x: x[0] or 0))
        for pg, tp, rec in items:
            if rec is None:
                continue
            new = []
            if missing:
                which = ", ".join(str(m) for m in missing)
                new.append(Finding("mismatched", f"File lacks page {which} of form {name} ({len(t.pages)} pages; "
                                   f"file page -> form page: {pairs})", value=float(len(missing)), limit=0.0))
            if used[tp] > 1:
                others = ", ".join(str(o) for o, otp, _ in items if otp == tp and o != pg)
                new.append(Finding("mismatched", f"Page {pg} repeats page {tp} of form {name}, as file page {others} does "
                                   "(an extra page)", value=float(used[tp]), limit=1.0))
            if new:
                rec["findings"] = sorted(rec["findings"] + [f.to_dict() for f in new], key=lambda f: SEVERITY[f["verdict"]])
                if SEVERITY["mismatched"] < SEVERITY[rec["verdict"]]:
                    rec["verdict"] = "mismatched"


# -- settings and result --------------------------------------------------------------------------
@dataclass(frozen=True)
class BatchOptions:
    """How a batch runs (not what it checks)."""

    #: Worker processes; 1 with no page time limit runs in this process.
    jobs: int = 1
    #: Seconds one page may take before its worker is replaced; None for no limit.
    page_timeout: float | None = None
    #: "local" (this machine) or "dask".
    engine: str = "local"
    #: Dask scheduler address; None starts a local cluster of ``jobs`` workers.
    scheduler: str | None = None
    #: Continue the output file instead of starting it afresh.
    resume: bool = False
    #: Seconds between fsyncs of the output file.
    fsync_seconds: float = 1.0
    #: Keep every record in memory (for the summary table and the HTML report).
    keep_records: bool = False

    def __post_init__(self) -> None:
        if self.jobs < 1:
            raise ValueError(f"jobs must be at least 1, got {self.jobs}")
        if self.page_timeout is not None and not self.page_timeout > 0:
            raise ValueError(f"page timeout must be positive, got {self.page_timeout}")
        if self.engine not in ("local", "dask"):
            raise ValueError(f"engine must be 'local' or 'dask', got {self.engine!r}")


@dataclass
class BatchResult:
    counts: Counter = field(default_factory=Counter)
    records: list[dict] = field(default_factory=list)
    written: int = 0
    skipped: int = 0

    @property
    def total(self) -> int:
        return sum(self.counts.values())

    @property
    def all_pass(self) -> bool:
        return self.total > 0 and self.counts["pass"] == self.total

    def summary(self) -> str:
        parts = [f"{self.counts[v]} {v}" for v in reversed(VERDICTS) if self.counts[v]]
        line = f"{self.total} page(s): " + (", ".join(parts) if parts else "none")
        return line + (f" ({self.skipped} already done)" if self.skipped else "")


# -- ordering -------------------------------------------------------------------------------------
class _Order:
    """Holds results until every earlier one is in, then writes them in input and page order."""

    def __init__(self, files: list[str], templates, sink: RecordSink, done: dict, result: BatchResult,
                 progress: Callable[[int, int], None] | None):
        self.files = files
        self.templates = templates
        self.sink = sink
        self.done = done
        self.result = result
        self.progress = progress
        self.hold = any(len(t.pages) > 1 for t in templates)
        self.plans: dict[int, list] = {}  # file index -> entries still to emit (page ints / dicts)
        self.results: dict[tuple[int, int], dict] = {}
        self.cursor = 0  # file being emitted
        self.pos = 0  # entry within it
        self.held: list[dict] = []
        self.pages_total = 0
        self.pages_done = 0
        self.planned = 0  # files whose plan is known
        self.on_file: Callable[[str, list[dict]], None] | None = None
        self.file_records: list[dict] = []

    def key(self, i: int, entry) -> tuple[str, int | None]:
        return (self.files[i], entry if isinstance(entry, int) else entry["page"])

    def set_plan(self, i: int, entries: list) -> list[int]:
        """Record a file's plan; returns the page numbers that still need checking."""
        todo = [e for e in entries if self.key(i, e) not in self.done]
        self.result.skipped += len(entries) - len(todo)
        for e in entries:
            k = self.key(i, e)
            if k in self.done:
                self.result.counts[self.done[k]["verdict"]] += 1
        self.plans[i] = todo
        self.pages_total += len(todo)
        self.planned += 1
        return [e for e in todo if isinstance(e, int)]

    def add(self, i: int, page: int, record: dict) -> None:
        self.results[(i, page)] = record

    def ahead(self) -> int:
        return len(self.results)

    def flush(self) -> None:
        while self.cursor in self.plans:
            entries = self.plans[self.cursor]
            while self.pos < len(entries):
                e = entries[self.pos]
                if isinstance(e, int):
                    rec = self.results.pop((self.cursor, e), None)
                    if rec is None:
                        return
                else:
                    rec = e
                self.pos += 1
                self._emit(rec)
            self._end_file()
            if self.on_file is not None:
                self.on_file(self.files[self.cursor], self.file_records)
                self.file_records = []
            del self.plans[self.cursor]
            self.cursor += 1
            self.pos = 0

    def _emit(self, rec: dict) -> None:
        if self.hold:
            self.held.append(rec)
        else:
            self._write(rec)

    def _end_file(self) -> None:
        if not self.held:
            return
        src = self.files[self.cursor]
        prior = [{"page": k[1], **v} for k, v in self.done.items() if k[0] == src] if self.result.skipped else []
        page_set_findings(self.held, prior, self.templates)
        for rec in self.held:
            self._write(rec)
        self.held = []

    def _write(self, rec: dict) -> None:
        # Every record carries the same fields, error records included (zones, normalised).
        handoff_fields(rec, self._settings)
        self.sink.write(rec)
        self.result.counts[rec["verdict"]] += 1
        self.result.written += 1
        if self.result is not None and self._keep:
            self.result.records.append(rec)
        if self.on_file is not None:
            self.file_records.append(rec)
        self.pages_done += 1
        if self.progress:
            # Files not yet opened count as one page each, so the total is right from the start
            # for single-page files and grows as longer files are opened.
            self.progress(self.pages_done, self.pages_total + len(self.files) - self.planned)

    _keep = False
    _settings = CheckSettings()


# -- engines --------------------------------------------------------------------------------------
def run_batch(inputs: Sequence[str], templates: Sequence[Template], settings: CheckSettings = CheckSettings(),
              limits: ReadLimits = ReadLimits(), output: str | None = None, options: BatchOptions = BatchOptions(),
              progress: Callable[[int, int], None] | None = None,
              on_file: Callable[[str, list[dict]], None] | None = None) -> BatchResult:
    """Check every page of ``inputs`` (already expanded) and write the records to ``output``.

    ``output`` is a path, ``"-"`` for standard output, or None for no file (keep the records
    with ``options.keep_records``). ``progress(done, total)`` is called after each record, with
    files not yet opened counted as one page; ``on_file(path, records)`` once a file's records
    are all written, in input order. Never raises for bad input; see the module notes.
    """
    files = [os.path.normpath(p) if p != "-" else p for p in inputs]
    done = read_done(output) if options.resume and output and output != "-" else {}
    if output and output not in ("-",) and not options.resume:
        with open(output, "wb"):
            pass  # a fresh run starts a fresh file
    sink = RecordSink(output, options.fsync_seconds)
    result = BatchResult()
    order = _Order(files, list(templates), sink, done, result, progress)
    order._keep = options.keep_records
    order._settings = settings
    order.on_file = on_file
    try:
        if options.engine == "dask":
            _run_dask(files, templates, settings, limits, options, order)
        elif options.jobs == 1 and options.page_timeout is None:
            _run_here(files, templates, settings, limits, order)
        else:
            _run_pool(files, templates, settings, limits, options, order)
    finally:
        sink.close()
        _OPEN.drop()
    return result


def _run_here(files, templates, settings, limits, order: _Order) -> None:
    for i, path in enumerate(files):
        for page in order.set_plan(i, plan_file(path, limits)):
            order.add(i, page, check_one(path, page, templates, settings, limits))
            order.flush()
        order.flush()
        _OPEN.drop()


class _Scheduler:
    """Tasks in input order: plan a file, then its pages; bounded look-ahead."""

    def __init__(self, files: list[str], order: _Order, window: int):
        self.files = files
        self.order = order
        self.window = window
        self.heap: list[tuple] = []
        self.next_plan = 0
        self.running = 0

    def add_pages(self, i: int, pages: list[int]) -> None:
        for p in pages:
            heapq.heappush(self.heap, (i, p))

    def next_task(self):
        """("plan", i) or ("page", i, page), or None when the window is full or nothing is ready."""
        if self.running + self.order.ahead() >= self.window:
            return None
        if self.heap and (self.next_plan >= len(self.files) or self.heap[0][0] < self.next_plan):
            i, p = heapq.heappop(self.heap)
            self.running += 1
            return ("page", i, p)
        if self.next_plan < len(self.files) and self.next_plan <= self.order.cursor + self.window:
            i = self.next_plan
            self.next_plan += 1
            self.running += 1
            return ("plan", i)
        return None

    def finished(self) -> bool:
        return self.next_plan >= len(self.files) and not self.heap and self.running == 0


def _settle(sched: "_Scheduler", order: _Order, task: tuple, out) -> None:
    """A finished task: a file's plan schedules its pages; a page's record joins the order."""
    sched.running -= 1
    if task[0] == "plan":
        sched.add_pages(task[1], order.set_plan(task[1], out))
    else:
        order.add(task[1], task[2], out)
    order.flush()


def _pool_worker(conn, templates, settings, limits) -> None:  # pragma: no cover - runs in a child
    """A worker process: plan files and check pages as told, one at a time."""
    # Import the readers and extractors before saying ready, so no page pays for them.
    import pdfplumber  # noqa: F401
    import pypdfium2  # noqa: F401

    from .extract import raster, vector  # noqa: F401

    conn.send(("ready", None, None, None))
    try:
        while True:
            try:
                task = conn.recv()
            except EOFError:
                break
            if task is None:
                break
            if task[0] == "plan":
                out = plan_file(task[2], limits)
            else:
                out = check_one(task[2], task[3], templates, settings, limits)
            conn.send((task[0], task[1], task[3] if task[0] == "page" else None, out))
    finally:
        _OPEN.drop()


class _Worker:
    def __init__(self, ctx, templates, settings, limits):
        parent, child = ctx.Pipe()
        self.conn = parent
        self.proc = ctx.Process(target=_pool_worker, args=(child, templates, settings, limits), daemon=True)
        self.proc.start()
        child.close()
        self.task = None
        self.started = 0.0
        self.ready = False

    def kill(self) -> None:
        self.proc.kill()
        self.proc.join(5)
        self.conn.close()


def _run_pool(files, templates, settings, limits, options: BatchOptions, order: _Order) -> None:
    import multiprocessing as mp
    from multiprocessing.connection import wait

    ctx = mp.get_context("spawn")  # no fork: safe whatever threads the caller runs
    workers = [_Worker(ctx, templates, settings, limits) for _ in range(options.jobs)]
    sched = _Scheduler(files, order, window=options.jobs * 4)
    limit = options.page_timeout

    def settle(task, out) -> None:
        _settle(sched, order, task, out)

    def failed(task, why: str) -> dict | list:
        path = files[task[1]]
        if task[0] == "plan":
            return [error_record(path, None, f"{where(path, None)}: {why}")]
        return error_record(path, task[2], f"{where(path, task[2])}: {why}")

    try:
        while not sched.finished():
            for w in workers:
                if w.task is None and w.ready:
                    t = sched.next_task()
                    if t is None:
                        break
                    w.task, w.started = t, time.monotonic()
                    w.conn.send((t[0], t[1], files[t[1]], t[2] if t[0] == "page" else None))
            starting = [w for w in workers if not w.ready]
            busy = [w for w in workers if w.task is not None]
            if not busy and not starting:  # cannot happen: tasks go out in order, so the earliest is always running
                raise RuntimeError("batch scheduler stalled")
            now = time.monotonic()
            wait_for = None if limit is None or not busy else max(0.0, min(w.started + limit for w in busy) - now)
            ready = wait([w.conn for w in busy + starting] + [w.proc.sentinel for w in busy + starting], timeout=wait_for)
            for k, w in enumerate(workers):
                if not w.ready and w.conn in ready:
                    try:
                        w.conn.recv()
                        w.ready = True
                    except (EOFError, OSError):
                        raise RuntimeError(f"a worker process could not start (exit code {w.proc.exitcode})") from None
                    continue
                if w.task is None:
                    continue
                task = w.task
                got = None
                if w.conn in ready:
                    try:
                        got = w.conn.recv()
                    except (EOFError, OSError):
                        got = None
                if got is not None:
                    w.task = None
                    settle(task, got[3])
                    continue
                over = limit is not None and time.monotonic() - w.started >= limit
                dead = w.proc.sentinel in ready or not w.proc.is_alive()
                if over or dead:
                    code = w.proc.exitcode
                    w.kill()
                    why = (f"took longer than {limit:g} s; stopped (--page-timeout)" if over and not dead
                           else f"the reading process died (exit code {code})")
                    settle(task, failed(task, why))
                    workers[k] = _Worker(ctx, templates, settings, limits)
    finally:
        for w in workers:
            try:
                w.conn.send(None)
            except (OSError, BrokenPipeError):
                pass
        for w in workers:
            w.proc.join(5)
            if w.proc.is_alive():
                w.kill()


def _dask_plan(path: str, limits: ReadLimits) -> list:
    with _DASK_LOCK:
        return plan_file(path, limits)


def _dask_page(path: str, page: int, templates, settings: CheckSettings, limits: ReadLimits) -> dict:
    with _DASK_LOCK:  # one document, one page at a time per worker process
        return check_one(path, page, templates, settings, limits)


import threading as _threading  # noqa: E402

_DASK_LOCK = _threading.Lock()


def _run_dask(files, templates, settings, limits, options: BatchOptions, order: _Order) -> None:
    from distributed import Client, LocalCluster, as_completed

    cluster = None
    if options.scheduler:
        client = Client(options.scheduler)
    else:
        cluster = LocalCluster(n_workers=options.jobs, threads_per_worker=1, processes=True, dashboard_address=None)
        client = Client(cluster)
    try:
        nthreads = max(1, sum(client.nthreads().values()))
        from .index import as_index

        tmpl = client.scatter([as_index(templates)], broadcast=True)[0]  # one object, on every worker
        sched = _Scheduler(files, order, window=nthreads * 4)
        pending = as_completed([], with_results=True)
        meta: dict = {}

        def submit_ready() -> None:
            while True:
                t = sched.next_task()
                if t is None:
                    return
                if t[0] == "plan":
                    fut = client.submit(_dask_plan, files[t[1]], limits, key=f"plan-{t[1]}-{time.monotonic_ns()}", pure=False)
                else:
                    fut = client.submit(_dask_page, files[t[1]], t[2], tmpl, settings, limits,
                                        key=f"page-{t[1]}-{t[2]}-{time.monotonic_ns()}", pure=False)
                meta[fut.key] = t
                pending.add(fut)

        submit_ready()
        while not sched.finished():
            fut, out = next(pending)
            _settle(sched, order, meta.pop(fut.key), out)
            submit_ready()
    finally:
        client.close()
        if cluster is not None:
            cluster.close()

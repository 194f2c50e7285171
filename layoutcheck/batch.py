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
- Pages run in worker processes (``jobs``; see :mod:`layoutcheck.worker`), each holding one
  open document at a time (pypdfium2 is not thread-safe), under limits that are on by default:
  ``page_timeout`` seconds per task (reading the file or checking one page) and ``memory_mb``
  of memory per worker. A page over either gets an error record naming the limit and its value;
  its worker is replaced and the batch carries on. A worker that dies (a reader crash) is
  handled the same way. ``elapsed_ms`` counts the whole page: reading, rendering, extraction,
  matching. Only with both limits off (None) do pages run in the calling process.
- With ``engine="dask"`` the same tasks (one per file to plan, one per page) run on a Dask
  distributed cluster; the client writes the records, in order, as results arrive. Each Dask
  task runs its page in a worker process of its own, started once per Dask worker and kept,
  so the same time and memory limits hold there, enforced inside the task.
- SIGTERM and SIGINT (when the batch runs in the main thread) stop the batch taking new pages;
  pages already running get ``grace_seconds`` to finish, and those still running then get no
  record (``resume`` does them). The result says ``interrupted``. A second signal ends the
  grace period at once.
- A record that cannot be written (a full disk, an I/O error, no permission) raises
  :class:`OutputError` with one line naming the file and the error; the part of the record
  already written is cut off again, so the file ends on its last whole record and ``resume``
  continues once there is space. The output file is written in place and appended to (so a
  run can be followed and resumed); a fresh run starts it afresh.

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
import signal
import subprocess
import sys
import threading
import time
from collections import Counter, defaultdict
from dataclasses import dataclass, field, replace
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
    """The record of one page, reading through the worker's open document.

    ``elapsed_ms`` covers the whole page: reading and rendering it as well as checking it.
    A :class:`MemoryError` is passed on: the worker that meets it answers for the limit and
    leaves (see :mod:`layoutcheck.worker`).
    """
    t0 = time.perf_counter()
    doc = _OPEN.get(path, limits)
    try:
        rec = check_page(doc.page(page), templates, settings)
    except MemoryError:
        raise
    except Exception as exc:  # a bug on one page must not end the batch
        rec = error_record(path, page, f"{where(path, page)}: could not be checked ({type(exc).__name__}: {' '.join(str(exc).split())[:200]})")
    finally:
        doc.release()
    rec["elapsed_ms"] = round((time.perf_counter() - t0) * 1000, 2)
    return rec


def failed_task(kind: str, path: str, page: int | None, why: str, elapsed_s: float = 0.0) -> dict | list:
    """What a task that could not finish yields: a plan of one error record, or a page's record."""
    if kind == "plan":
        return [error_record(path, None, f"{where(path, None)}: {why}", elapsed_s * 1000)]
    return error_record(path, page, f"{where(path, page)}: {why}", elapsed_s * 1000)


def forget_document() -> None:
    """Close the document this process holds open, if any."""
    _OPEN.drop()


# -- output ---------------------------------------------------------------------------------------
class OutputError(Exception):
    """An output that could not be written; the message is one line naming the file and the error."""


def output_error(path: str | None, exc: OSError, what: str = "records") -> OutputError:
    name = "standard output" if path in (None, "-") else path
    why = exc.strerror or type(exc).__name__
    return OutputError(f"{name}: {what} could not be written ({why})")


class RecordSink:
    """Appends whole JSON lines atomically (one ``os.write`` each on an ``O_APPEND`` fd).

    A write that fails part-way is cut back off the file (``ftruncate`` to the size before it),
    so the file always ends on a whole record; then :class:`OutputError` is raised.
    """

    def __init__(self, path: str | None, fsync_seconds: float = 1.0):
        self.path = path
        self.fsync_seconds = fsync_seconds
        self._last_sync = time.monotonic()
        self.stream = None
        self.size = 0
        if path is None:
            self.fd = None
        elif path == "-":
            try:
                self.fd = sys.stdout.fileno()
                sys.stdout.flush()
            except (AttributeError, OSError, ValueError):  # a captured stdout without a descriptor
                self.fd, self.stream = None, sys.stdout
        else:
            try:
                self.fd = os.open(path, os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o644)
                self.size = os.fstat(self.fd).st_size
            except OSError as exc:
                raise output_error(path, exc) from None

    def write(self, record: dict) -> None:
        line = json.dumps(record, ensure_ascii=False) + "\n"
        try:
            line.encode("utf-8")
        except UnicodeEncodeError:  # a file name that is not UTF-8: written as JSON escapes
            line = json.dumps(record) + "\n"
        if self.stream is not None:
            try:
                self.stream.write(line)
                self.stream.flush()
            except OSError as exc:
                raise output_error(self.path, exc) from None
            return
        if self.fd is None:
            return
        view = memoryview(line.encode("utf-8"))
        try:
            while view:  # a regular file takes it whole; the loop only matters for pipes
                view = view[os.write(self.fd, view):]
            if self.path != "-" and time.monotonic() - self._last_sync >= self.fsync_seconds:
                os.fsync(self.fd)
                self._last_sync = time.monotonic()
        except OSError as exc:
            self._cut_back()
            raise output_error(self.path, exc) from None
        self.size += len(line.encode("utf-8"))

    def _cut_back(self) -> None:
        """Drop what a failed write left of its record (a regular file only)."""
        if self.path in (None, "-") or self.fd is None:
            return
        try:
            if os.fstat(self.fd).st_size > self.size:
                os.ftruncate(self.fd, self.size)
        except OSError:
            pass  # resume cuts a torn last line off anyway

    def close(self) -> None:
        fd, self.fd = self.fd, None
        if fd is None or self.path == "-":
            return
        try:
            os.fsync(fd)
        except OSError as exc:
            raise output_error(self.path, exc) from None
        finally:
            os.close(fd)


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
#: Seconds one task (reading a file, or checking one page) may take by default. A page of a
#: form takes under 2 s here (``docs/benchmarks.md``), so 60 s leaves room for a slow machine
#: and still stops a page that would take minutes.
PAGE_TIMEOUT_S = 60.0
#: Memory per worker process by default, MB (see :mod:`layoutcheck.worker` for what is counted).
#: An idle worker holds about 150 MB; checking an A3 scan at 600 dpi (70 million pixels) needs
#: between 384 and 512 MB (``bench/bench_hostile.py``). 1536 MB is three times that, and keeps
#: 8 workers within 12 GB.
MEMORY_MB = 1536
#: Seconds running pages get to finish after SIGTERM or SIGINT.
GRACE_S = 10.0


@dataclass(frozen=True)
class BatchOptions:
    """How a batch runs (not what it checks), with its limits."""

    #: Worker processes.
    jobs: int = 1
    #: Seconds one page (or the opening of one file) may take before its worker is replaced;
    #: None for no limit.
    page_timeout: float | None = PAGE_TIMEOUT_S
    #: Memory per worker process, MB; None for no limit. With both limits None and one job,
    #: pages run in this process.
    memory_mb: int | None = MEMORY_MB
    #: Seconds running pages get to finish after SIGTERM or SIGINT.
    grace_seconds: float = GRACE_S
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
    #: Stop cleanly on SIGTERM and SIGINT (only when the batch runs in the main thread).
    handle_signals: bool = True

    def __post_init__(self) -> None:
        if self.jobs < 1:
            raise ValueError(f"jobs must be at least 1, got {self.jobs}")
        if self.page_timeout is not None and not self.page_timeout > 0:
            raise ValueError(f"page timeout must be positive, got {self.page_timeout}")
        if self.memory_mb is not None and not self.memory_mb >= 64:
            raise ValueError(f"memory limit must be at least 64 MB, got {self.memory_mb}")
        if not self.grace_seconds >= 0:
            raise ValueError(f"grace period must be 0 or more seconds, got {self.grace_seconds}")
        if self.engine not in ("local", "dask"):
            raise ValueError(f"engine must be 'local' or 'dask', got {self.engine!r}")

    @property
    def in_process(self) -> bool:
        """Pages run in the calling process: one job and no limit to enforce."""
        return self.jobs == 1 and self.page_timeout is None and self.memory_mb is None


@dataclass
class BatchResult:
    counts: Counter = field(default_factory=Counter)
    records: list[dict] = field(default_factory=list)
    written: int = 0
    skipped: int = 0
    #: Stopped by SIGTERM or SIGINT before every page had its record.
    interrupted: bool = False

    @property
    def total(self) -> int:
        return sum(self.counts.values())

    @property
    def all_pass(self) -> bool:
        return self.total > 0 and self.counts["pass"] == self.total and not self.interrupted

    def summary(self) -> str:
        parts = [f"{self.counts[v]} {v}" for v in reversed(VERDICTS) if self.counts[v]]
        line = f"{self.total} page(s): " + (", ".join(parts) if parts else "none")
        line += f" ({self.skipped} already done)" if self.skipped else ""
        return line + ("; interrupted: repeat the command with --resume to check the rest" if self.interrupted else "")


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
class _Stop:
    """Set by SIGTERM or SIGINT: take no new pages; a second signal ends the grace period."""

    def __init__(self) -> None:
        self.requested = 0.0  # monotonic time of the first signal, 0 before
        self.hurry = False

    def __call__(self, signum, frame) -> None:
        if self.requested:
            self.hurry = True
        else:
            self.requested = time.monotonic()

    def over(self, grace: float) -> bool:
        """The grace period after the first signal has run out."""
        return bool(self.requested) and (self.hurry or time.monotonic() - self.requested >= grace)


class _Signals:
    """SIGTERM and SIGINT handlers for the length of a batch (main thread only), then the old ones."""

    def __init__(self, stop: _Stop, active: bool):
        self.stop = stop
        self.active = active and threading.current_thread() is threading.main_thread()
        self.old: dict = {}

    def __enter__(self) -> "_Signals":
        if self.active:
            for s in (signal.SIGTERM, signal.SIGINT):
                self.old[s] = signal.signal(s, self.stop)
        return self

    def __exit__(self, *exc) -> None:
        for s, h in self.old.items():
            signal.signal(s, h)


def run_batch(inputs: Sequence[str], templates: Sequence[Template], settings: CheckSettings = CheckSettings(),
              limits: ReadLimits = ReadLimits(), output: str | None = None, options: BatchOptions = BatchOptions(),
              progress: Callable[[int, int], None] | None = None,
              on_file: Callable[[str, list[dict]], None] | None = None) -> BatchResult:
    """Check every page of ``inputs`` (already expanded) and write the records to ``output``.

    ``output`` is a path, ``"-"`` for standard output, or None for no file (keep the records
    with ``options.keep_records``). ``progress(done, total)`` is called after each record, with
    files not yet opened counted as one page; ``on_file(path, records)`` once a file's records
    are all written, in input order. Never raises for bad input; raises :class:`OutputError`
    when the records cannot be written. See the module notes.
    """
    files = [os.path.normpath(p) if p != "-" else p for p in inputs]
    done = read_done(output) if options.resume and output and output != "-" else {}
    if output and output not in ("-",) and not options.resume:
        try:
            with open(output, "wb"):
                pass  # a fresh run starts a fresh file
        except OSError as exc:
            raise output_error(output, exc) from None
    if options.resume and settings.normalise_dir:
        # Pages redone by a resumed run may replace the images their first try wrote.
        settings = replace(settings, normalise_replace=True)
    sink = RecordSink(output, options.fsync_seconds)
    result = BatchResult()
    order = _Order(files, list(templates), sink, done, result, progress)
    order._keep = options.keep_records
    order._settings = settings
    order.on_file = on_file
    stop = _Stop()
    try:
        with _Signals(stop, options.handle_signals):
            if options.engine == "dask":
                _run_dask(files, templates, settings, limits, options, order, stop)
            elif options.in_process:
                _run_here(files, templates, settings, limits, order, stop)
            else:
                _run_pool(files, templates, settings, limits, options, order, stop)
    finally:
        try:
            sink.close()
        finally:
            _OPEN.drop()
    result.interrupted = bool(stop.requested)
    return result


def _run_here(files, templates, settings, limits, order: _Order, stop: _Stop) -> None:
    for i, path in enumerate(files):
        for page in order.set_plan(i, plan_file(path, limits)):
            if stop.requested:
                return
            order.add(i, page, check_one(path, page, templates, settings, limits))
            order.flush()
        order.flush()
        _OPEN.drop()
        if stop.requested:
            return


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


def _worker_env() -> dict:
    """The environment of a worker process: this package importable, as in the parent, and one
    BLAS thread (a worker checks one page at a time; the jobs are the parallelism). The BLAS
    thread pool's buffers count against the memory limit, and grow with the number of cores
    (``bench/bench_hostile.py`` measures an idle worker with and without them)."""
    env = dict(os.environ)
    for name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
        env.setdefault(name, "1")
    here = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    env["PYTHONPATH"] = here + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
    return env


class _Worker:
    """A worker process (:mod:`layoutcheck.worker`) and the two pipes to it."""

    def __init__(self, templates, settings: CheckSettings, limits: ReadLimits, memory_mb: int | None):
        from multiprocessing.connection import Connection

        to_r, to_w = os.pipe()
        from_r, from_w = os.pipe()
        try:
            self.proc = subprocess.Popen([sys.executable, "-m", "layoutcheck.worker", str(to_r), str(from_w)],
                                         pass_fds=(to_r, from_w), env=_worker_env(), stdin=subprocess.DEVNULL,
                                         start_new_session=True)
        finally:
            os.close(to_r)
            os.close(from_w)
        # A new session: a Ctrl-C at the terminal reaches the batch alone, which decides.
        self.send_conn = Connection(to_w, readable=False)
        self.conn = Connection(from_r, writable=False)
        self.task = None
        self.started = 0.0
        self.ready = False
        self.memory_mb = memory_mb
        self.send(("init", templates, settings, limits, memory_mb))

    def send(self, msg) -> None:
        """Send a message; a worker that has died is found by its closed pipe, not here."""
        try:
            self.send_conn.send(msg)
        except OSError:
            pass

    def exit_note(self) -> str:
        """Why the process ended, in words."""
        try:
            code = self.proc.wait(5)
        except subprocess.TimeoutExpired:
            return "the reading process stopped answering"
        what = f"signal {-code}" if code < 0 else f"exit code {code}"
        hint = f"; a page over the memory limit ({self.memory_mb} MB, --max-memory) can do this" if self.memory_mb else ""
        return f"the reading process died ({what}{hint})"

    def kill(self) -> None:
        if self.proc.poll() is None:
            self.proc.kill()
        try:
            self.proc.wait(5)
        except subprocess.TimeoutExpired:
            pass
        for c in (self.conn, self.send_conn):
            try:
                c.close()
            except OSError:
                pass

    def close(self) -> None:
        """Ask the worker to leave; kill it if it does not within a few seconds."""
        self.send(None)
        try:
            self.proc.wait(5)
        except subprocess.TimeoutExpired:
            pass
        self.kill()


def _timeout_note(limit: float) -> str:
    return f"took longer than the page time limit of {limit:g} s (--page-timeout); stopped"


def _run_pool(files, templates, settings, limits, options: BatchOptions, order: _Order, stop: _Stop) -> None:
    from multiprocessing.connection import wait

    def new_worker() -> _Worker:
        return _Worker(templates, settings, limits, options.memory_mb)

    workers = [new_worker() for _ in range(options.jobs)]
    sched = _Scheduler(files, order, window=options.jobs * 4)
    limit = options.page_timeout

    try:
        while not sched.finished():
            if stop.requested:
                if not any(w.task is not None for w in workers) or stop.over(options.grace_seconds):
                    return  # pages still running get no record: resume does them
            else:
                for w in workers:
                    if w.task is None and w.ready:
                        t = sched.next_task()
                        if t is None:
                            break
                        w.task, w.started = t, time.monotonic()
                        w.send((t[0], t[1], files[t[1]], t[2] if t[0] == "page" else None))
            starting = [w for w in workers if not w.ready]
            busy = [w for w in workers if w.task is not None]
            if not busy and not starting:  # cannot happen: tasks go out in order, so the earliest is always running
                raise RuntimeError("batch scheduler stalled")
            now = time.monotonic()
            # Wake at least twice a second, so a signal is acted on soon.
            wait_for = 0.5 if limit is None or not busy else min(0.5, max(0.0, min(w.started + limit for w in busy) - now))
            ready = wait([w.conn for w in busy + starting], timeout=wait_for)
            for k, w in enumerate(workers):
                if not w.ready and w.conn in ready:
                    try:
                        w.conn.recv()
                        w.ready = True
                    except (EOFError, OSError):
                        raise RuntimeError(f"a worker process could not start ({w.exit_note()})") from None
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
                    _settle(sched, order, task, got[3])
                    if got[4]:  # it ran out of memory and leaves
                        w.kill()
                        workers[k] = new_worker()
                    continue
                elapsed = time.monotonic() - w.started
                over = limit is not None and elapsed >= limit
                dead = w.conn in ready or w.proc.poll() is not None
                if over or dead:
                    why = w.exit_note() if dead else _timeout_note(limit)
                    w.kill()
                    path = files[task[1]]
                    _settle(sched, order, task, failed_task(task[0], path, task[2] if task[0] == "page" else None, why, elapsed))
                    workers[k] = new_worker()
    finally:
        for w in workers:
            if w.task is not None:
                w.kill()
            else:
                w.close()


class _TaskRunner:
    """One worker process driven one task at a time, with the time limit (inside a Dask task)."""

    def __init__(self) -> None:
        self.worker: _Worker | None = None
        self.setup: tuple | None = None

    def run(self, task: tuple, templates, settings: CheckSettings, limits: ReadLimits, options: BatchOptions):
        from multiprocessing.connection import wait

        setup = (settings, limits, options.memory_mb)
        if (self.worker is None or self.setup != setup or self.templates is not templates
                or self.worker.proc.poll() is not None):
            self.close()
            self.worker = _Worker(templates, settings, limits, options.memory_mb)
            self.setup, self.templates = setup, templates
            try:
                self.worker.conn.recv()
            except (EOFError, OSError):
                note = self.worker.exit_note()
                self.close()
                raise RuntimeError(f"a worker process could not start ({note})") from None
        w = self.worker
        kind, path, page = task
        started = time.monotonic()
        w.send((kind, 0, path, page))
        ready = wait([w.conn], timeout=options.page_timeout)
        if w.conn in ready:
            try:
                _, _, _, out, retire = w.conn.recv()
                if retire:
                    self.close()
                return out
            except (EOFError, OSError):
                why = w.exit_note()
        else:
            why = _timeout_note(options.page_timeout)
        self.close()
        return failed_task(kind, path, page, why, time.monotonic() - started)

    def close(self) -> None:
        if self.worker is not None:
            self.worker.kill()
        self.worker, self.setup, self.templates = None, None, None

    templates = None


_RUNNER = _TaskRunner()
_DASK_LOCK = threading.Lock()


def _dask_task(kind: str, path: str, page: int | None, templates, settings: CheckSettings, limits: ReadLimits,
               options: BatchOptions):
    """A Dask task: plan a file or check a page, in this Dask worker's own page worker process."""
    with _DASK_LOCK:  # one document, one page at a time per Dask worker process
        if options.in_process:
            return plan_file(path, limits) if kind == "plan" else check_one(path, page, templates, settings, limits)
        return _RUNNER.run((kind, path, page), templates, settings, limits, options)


def _run_dask(files, templates, settings, limits, options: BatchOptions, order: _Order, stop: _Stop) -> None:
    from distributed import Client, LocalCluster, wait as dask_wait

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
        meta: dict = {}

        def submit_ready() -> None:
            while not stop.requested:
                t = sched.next_task()
                if t is None:
                    return
                page = t[2] if t[0] == "page" else None
                fut = client.submit(_dask_task, t[0], files[t[1]], page, tmpl, settings, limits, options,
                                    key=f"{t[0]}-{t[1]}-{page}-{time.monotonic_ns()}", pure=False)
                meta[fut.key] = (fut, t)

        submit_ready()
        while not sched.finished():
            running = [f for f, _ in meta.values()]
            if stop.requested and (stop.over(options.grace_seconds) or not running):
                client.cancel(running)
                return  # pages still running get no record: resume does them
            try:
                # Wake at least twice a second, so a signal is acted on soon.
                dask_wait(running, timeout=0.5, return_when="FIRST_COMPLETED")
            except TimeoutError:
                continue
            for fut in running:
                if fut.done():
                    _, t = meta.pop(fut.key)
                    _settle(sched, order, t, fut.result())
            submit_ready()
    finally:
        client.close()
        if cluster is not None:
            cluster.close()

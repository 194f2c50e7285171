"""A watched inbox: files dropped into a folder are checked, recorded and filed.

Each file in ``INBOX`` (subfolders included; names starting with ``.`` and the usual partial-
download suffixes are left alone) is taken once it has settled: its size and modification time
have been still for ``settle`` seconds, or at once when it arrived by rename (its inode changed
after its last write: ``st_ctime > st_mtime``). Its records are appended to
``OUT/records.jsonl``, each with ``moved_to``; then the file is moved, under the same relative
path, to ``OUT/pass/`` (every page passed), ``OUT/error/`` (a page could not be checked) or
``OUT/review/`` (anything else). A name already taken gets a suffix (``scan_2.pdf``): nothing is
ever overwritten. ``OUT/review.html`` shows the flagged pages whose files are still in
``review/`` or ``error/``; it is rewritten after every round.

Crash safety
------------
A journal, ``OUT/.journal.jsonl``, says what is done. For each file, in this order: the records
are appended and synced; a ``recorded`` line (content hash, relative path, destination, and the
length of ``records.jsonl`` after them) is appended and synced; the file is moved; a ``moved``
line follows. On start, ``records.jsonl`` is cut back to the length the journal last vouched
for (dropping the records of a file checked but not journaled), and every file ``recorded``
but not ``moved`` is moved to its journaled place. So a run killed at any moment and started
again leaves every file in exactly one folder with exactly one set of records.

Built on :mod:`layoutcheck.api` only.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, Sequence

from .api import SEVERITY, BatchOptions, CheckSettings, ReadLimits, Template, as_index, run_batch, write_report

#: The three folders a file ends in.
FOLDERS = ("pass", "review", "error")
JOURNAL = ".journal.jsonl"
#: Names writers give files still being written (left alone).
PARTIAL_SUFFIXES = (".part", ".partial", ".tmp", ".crdownload", ".download", "~")
#: Seconds between looks at the inbox.
POLL_SECONDS = 0.5


@dataclass(frozen=True)
class WatchSettings:
    """How the inbox is watched (what is checked is :class:`~layoutcheck.api.CheckSettings`)."""

    #: Seconds a file's size and modification time must be still before it is taken.
    settle: float = 2.0
    #: Take the files there at the start, then stop.
    once: bool = False
    #: Records file (default ``OUT/records.jsonl``) and review report (default ``OUT/review.html``).
    records: str | None = None
    report: str | None = None

    def __post_init__(self) -> None:
        if not self.settle >= 0:
            raise ValueError(f"settle must be 0 or more seconds, got {self.settle}")


@dataclass
class WatchSummary:
    """What a run did: files filed per folder and pages per verdict."""

    files: dict = field(default_factory=lambda: {f: 0 for f in FOLDERS})
    verdicts: dict = field(default_factory=dict)
    #: Seconds spent drawing review.html.
    report_seconds: float = 0.0
    #: Stopped by SIGTERM or SIGINT during a round: the files of pages still running then stay in
    #: the inbox, and a restart takes them.
    interrupted: bool = False

    @property
    def all_pass(self) -> bool:
        return self.files["review"] == 0 and self.files["error"] == 0


def folder_for(records: Sequence[dict]) -> str:
    """``pass`` when every page passed, ``error`` when the worst is an error, else ``review``."""
    worst = min((r["verdict"] for r in records), key=lambda v: SEVERITY[v], default="error")
    return worst if worst in ("pass", "error") else "review"


def content_hash(path: str | os.PathLike) -> str:
    """SHA-256 of a file's bytes, hex."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def free_name(path: Path, taken: set[str]) -> Path:
    """``path``, or ``stem_2.ext``, ``stem_3.ext``... : the first neither on disk nor in ``taken``."""
    cand, k = path, 1
    while cand.exists() or str(cand) in taken:
        k += 1
        cand = path.with_name(f"{path.stem}_{k}{path.suffix}")
    return cand


def _fsync_dir(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _append(fd: int, data: bytes, sync: bool = True) -> None:
    view = memoryview(data)
    while view:
        view = view[os.write(fd, view):]
    if sync:
        os.fsync(fd)


def move(src: Path, dest: Path) -> None:
    """Move a file without overwriting; a rename, or copy-and-delete across filesystems."""
    dest.parent.mkdir(parents=True, exist_ok=True)
    try:
        os.link(src, dest)  # fails if dest exists: never overwrites
        os.unlink(src)
    except OSError as exc:
        if dest.exists():
            raise
        if exc.errno not in (18, 1, 95, 38):  # EXDEV, EPERM, EOPNOTSUPP, ENOSYS: no hard link here
            raise
        tmp = dest.with_name(f".{dest.name}.copying")
        shutil.copy2(src, tmp)
        with open(tmp, "rb") as fh:
            os.fsync(fh.fileno())
        os.rename(tmp, dest)
        os.unlink(src)
    _fsync_dir(dest.parent)


class Journal:
    """The append-only journal of a watched inbox (see module docs)."""

    def __init__(self, path: Path, records: Path):
        self.path = path
        self.last: dict[str, dict] = {}  # key -> last entry
        self.end = 0  # records.jsonl length the journal vouches for
        fresh = not path.exists()
        if not fresh:
            data = path.read_bytes()
            cut = data.rfind(b"\n") + 1
            if cut < len(data):  # a line torn by a crash: it never happened
                with open(path, "r+b") as fh:
                    fh.truncate(cut)
            for line in data[:cut].splitlines():
                entry = json.loads(line)
                self.end = max(self.end, entry.get("end", 0))
                if "key" in entry:
                    self.last[entry["key"]] = entry
        self.fd = os.open(path, os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o644)
        if fresh:
            # Records already in the file before the first run are someone's: keep them.
            self.write({"state": "start", "end": records.stat().st_size if records.exists() else 0})

    def write(self, entry: dict, sync: bool = True) -> None:
        """Append one entry; ``sync=False`` for an entry that recovery can tell without it."""
        _append(self.fd, (json.dumps(entry, ensure_ascii=False) + "\n").encode("utf-8"), sync)
        if "key" in entry:
            self.last[entry["key"]] = entry
        self.end = max(self.end, entry.get("end", 0))

    def pending(self) -> list[dict]:
        """Entries recorded but not yet moved."""
        return [e for e in self.last.values() if e["state"] == "recorded"]

    def close(self) -> None:
        os.close(self.fd)


class Settler:
    """Decides when a file in the inbox is whole (see module docs)."""

    def __init__(self, settle: float):
        self.settle = settle
        self.seen: dict[str, tuple[int, int, float]] = {}  # path -> (size, mtime_ns, still since)

    def ready(self, path: str, now: float) -> bool:
        try:
            st = os.stat(path)
        except FileNotFoundError:
            self.seen.pop(path, None)
            return False
        sig = (st.st_size, st.st_mtime_ns)
        prev = self.seen.get(path)
        since = prev[2] if prev is not None and prev[:2] == sig else now
        self.seen[path] = (*sig, since)
        if st.st_size > 0 and st.st_ctime_ns > st.st_mtime_ns:
            return True  # renamed (or linked) in after its last write: whole
        return now - since >= self.settle or time.time() - st.st_mtime >= self.settle

    def forget(self, path: str) -> None:
        self.seen.pop(path, None)


def inbox_files(inbox: Path, skip: Sequence[Path] = ()) -> list[str]:
    """Files of the inbox, sorted; hidden names, partial downloads and ``skip`` folders left out."""
    skip_real = {os.path.realpath(s) for s in skip}
    out = []
    for root, dirs, files in os.walk(inbox):
        dirs[:] = sorted(d for d in dirs if not d.startswith(".")
                         and os.path.realpath(os.path.join(root, d)) not in skip_real)
        for f in files:
            if f.startswith(".") or f.lower().endswith(PARTIAL_SUFFIXES):
                continue
            out.append(os.path.abspath(os.path.join(root, f)))
    return sorted(out)


class Watcher:
    """One watched inbox and its output folder; :meth:`run` does the work."""

    def __init__(self, inbox: str | os.PathLike, out_dir: str | os.PathLike, templates: Sequence[Template],
                 settings: CheckSettings = CheckSettings(), limits: ReadLimits = ReadLimits(),
                 options: BatchOptions = BatchOptions(), watch: WatchSettings = WatchSettings(),
                 log: Callable[[str], None] = print, progress_factory: Callable | None = None):
        self.inbox = Path(inbox).resolve()
        self.out = Path(out_dir).resolve()
        # One index for every round: signatures in arrays, templates read when a page needs them.
        self.templates = as_index(templates)
        self.settings = settings
        self.limits = limits
        self.options = options
        self.watch = watch
        self.log = log
        self.progress_factory = progress_factory
        self.records_path = Path(watch.records or self.out / "records.jsonl")
        self.report_path = Path(watch.report or self.out / "review.html")
        self.summary = WatchSummary()

    # -- start-up -----------------------------------------------------------------------------
    def _recover(self) -> None:
        """Cut records the journal does not vouch for; finish moves the journal promised."""
        size = self.records_path.stat().st_size if self.records_path.exists() else 0
        if size > self.journal.end:
            with open(self.records_path, "r+b") as fh:
                fh.truncate(self.journal.end)
                os.fsync(fh.fileno())
            self.log(f"records.jsonl: cut {size - self.journal.end} bytes of records of a file not yet filed")
        for entry in self.journal.pending():
            src, dest = Path(entry["source"]), Path(entry["dest"])
            if dest.exists():
                if src.exists() and content_hash(src) == entry["key"].split(":", 1)[0]:
                    src.unlink()  # a copy across filesystems finished, the delete did not
            elif src.exists():
                move(src, dest)
                self.log(f"{entry['rel']}: filed to {dest.relative_to(self.out)} (recorded before the last stop)")
            else:
                self.log(f"{entry['rel']}: gone from the inbox before it was filed; its records stay")
            self.journal.write({"key": entry["key"], "state": "moved"})

    # -- one file -----------------------------------------------------------------------------
    def _file(self, path: str, records: list[dict]) -> None:
        """Record, journal and move one checked file (called in input order)."""
        src = Path(path)
        rel = os.path.relpath(src, self.inbox)
        key = f"{content_hash(src)}:{rel}"
        folder = folder_for(records)
        dest = free_name(self.out / folder / rel, self._reserved)
        self._reserved.add(str(dest))
        lines = []
        for rec in records:
            rec["moved_to"] = str(dest)
            lines.append(json.dumps(rec, ensure_ascii=False) + "\n")
        _append(self.records_fd, "".join(lines).encode("utf-8"))
        end = os.fstat(self.records_fd).st_size
        self.journal.write({"key": key, "rel": rel, "state": "recorded", "source": str(src), "dest": str(dest),
                            "end": end})
        move(src, dest)
        # Not synced: lost in a crash, recovery finds the file already at its destination.
        self.journal.write({"key": key, "state": "moved"}, sync=False)
        self._settler.forget(path)
        self.summary.files[folder] += 1
        counts: dict[str, int] = {}
        for rec in records:
            counts[rec["verdict"]] = counts.get(rec["verdict"], 0) + 1
            self.summary.verdicts[rec["verdict"]] = self.summary.verdicts.get(rec["verdict"], 0) + 1
        words = ", ".join(f"{n} {v}" for v, n in sorted(counts.items(), key=lambda kv: SEVERITY[kv[0]]))
        first = next((r["error"] or r["findings"][0]["message"] for r in records if r["verdict"] != "pass"), "")
        self.log(f"{rel}: {len(records)} page(s): {words} -> {folder}/{os.path.relpath(dest, self.out / folder)}"
                 + (f" ({first})" if first else ""))
        self._filed_this_round += 1

    # -- rounds -------------------------------------------------------------------------------
    def _round(self, paths: list[str]) -> None:
        bar = self.progress_factory(len(paths)) if self.progress_factory else None
        self._filed_this_round = 0
        try:
            result = run_batch(paths, self.templates, self.settings, self.limits, output=None, options=self.options,
                               progress=bar.update_to if bar is not None else None, on_file=self._file)
            self.summary.interrupted = result.interrupted
        finally:
            if bar is not None:
                bar.close()
        if self._filed_this_round:
            self._write_report()

    def _write_report(self) -> None:
        """The flagged pages whose files still wait in review/ or error/."""
        flagged = []
        with open(self.records_path, encoding="utf-8") as fh:
            for line in fh:
                rec = json.loads(line)
                dest = rec.get("moved_to")
                if rec["verdict"] != "pass" and dest and os.path.exists(dest):
                    # The picture is read from where the file is now.
                    flagged.append({**rec, "source": dest})
        t0, c0 = time.perf_counter(), time.process_time()
        named = self.templates.by_name({r["template"] for r in flagged if r.get("template")})
        write_report(self.report_path, flagged, named, self.settings.tolerances, views=self._views)
        dt, cpu = time.perf_counter() - t0, time.process_time() - c0
        self.summary.report_seconds += dt
        self.log(f"{self.report_path.name}: {len(flagged)} flagged page(s) waiting for review "
                 f"(drawn in {dt:.1f} s, {cpu:.1f} s CPU)")

    def run(self) -> WatchSummary:
        """Watch until interrupted (or, with ``once``, until the files there at the start are filed)."""
        for f in FOLDERS:
            (self.out / f).mkdir(parents=True, exist_ok=True)
        self.records_path.parent.mkdir(parents=True, exist_ok=True)
        self.journal = Journal(self.out / JOURNAL, self.records_path)
        self.records_fd = os.open(self.records_path, os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o644)
        self._reserved: set[str] = set()
        self._settler = Settler(self.watch.settle)
        self._filed_this_round = 0
        self._views: dict = {}  # each flagged page is drawn once, however often review.html is rewritten
        try:
            self._recover()
            skip = [self.out] + [self.out / f for f in FOLDERS]
            todo = set(inbox_files(self.inbox, skip)) if self.watch.once else None
            while True:
                now = time.monotonic()
                present = inbox_files(self.inbox, skip)
                if todo is not None:
                    todo &= set(present)
                    present = [p for p in present if p in todo]
                ready = [p for p in present if self._settler.ready(p, now)]
                if ready:
                    self._round(ready)
                    if self.summary.interrupted:
                        break
                    if todo is not None:
                        todo -= set(ready)
                if todo is not None and not todo:
                    break
                time.sleep(POLL_SECONDS if not ready else 0)
        finally:
            os.close(self.records_fd)
            self.journal.close()
        return self.summary


def watch(inbox: str | os.PathLike, out_dir: str | os.PathLike, templates: Sequence[Template],
          settings: CheckSettings = CheckSettings(), limits: ReadLimits = ReadLimits(),
          options: BatchOptions = BatchOptions(), watch_settings: WatchSettings = WatchSettings(),
          log: Callable[[str], None] = print, progress_factory: Callable | None = None) -> WatchSummary:
    """Watch ``inbox`` and file its pages into ``out_dir`` (see module docs)."""
    return Watcher(inbox, out_dir, templates, settings, limits, options, watch_settings, log, progress_factory).run()


"""A set of templates as a compact index: signatures in numpy arrays, elements read on demand.

An office may hold a thousand templates. Reading every one into element objects costs seconds
and hundreds of megabytes in every worker, yet a page is solved against only a few of them. A
:class:`TemplateIndex` keeps, per template, a small :class:`TemplateInfo` (name, form, revision,
page counts, file) and, per template page, one row of two signature arrays (as born-digital
pages and as scans show the page, see :mod:`layoutcheck.identify`). A template's elements are
read from its file when the page needs it and kept in a small least-recently-used cache.

Opened on folders, the index is stored beside the templates in ``.layoutcheck-index.npz`` (or,
for a folder it may not write, under the user's cache folder), so the next start reads one small
file instead of every template. A template whose modification time or size changed is hashed
again; a new content hash means it is read again. Open indexes look again every
``refresh_seconds`` while pages are checked, so a long run sees a template that was changed.

A damaged template in a folder is left out with one problem line naming the file
(:attr:`TemplateIndex.problems`); the others keep working. A damaged file named on its own is an
error, as before.

An index pickles to its arrays, infos and file paths (not the elements read so far), so every
worker process, local or on a Dask cluster, gets a small object and reads what it needs. An
index built from templates already in memory (:meth:`TemplateIndex.from_templates`) carries them.
"""

from __future__ import annotations

import hashlib
import json
import os
import time
from collections import OrderedDict
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Iterable, Iterator, Sequence

import numpy as np

from .elements import PageElements
from .identify import SIGNATURE_LENGTH, distances, signature
from .template import Template, TemplateError, TemplatePage, load_template

INDEX_FILE = ".layoutcheck-index.npz"
#: Bumped whenever what the stored index holds changes (the signature included).
INDEX_VERSION = 1
SOURCES = ("vector", "raster")


@dataclass(frozen=True)
class PageInfo:
    """What the index knows of a template page without reading its elements."""

    number: int
    elements: int
    raster_elements: int
    sections: int
    zones: int


@dataclass(frozen=True)
class TemplateInfo:
    """What the index knows of a template without reading its elements."""

    name: str
    form: str | None
    revision: str | None
    pages: tuple[PageInfo, ...]
    path: str | None = None
    mtime_ns: int = 0
    size: int = 0
    sha256: str = ""

    @property
    def form_name(self) -> str:
        return self.form or self.name

    def to_dict(self) -> dict:
        return asdict(self)

    @classmethod
    def from_dict(cls, d: dict) -> "TemplateInfo":
        return cls(d["name"], d["form"], d["revision"], tuple(PageInfo(**p) for p in d["pages"]), d["path"],
                   int(d["mtime_ns"]), int(d["size"]), d["sha256"])


def info_of(t: Template, path: str | None = None, stat: os.stat_result | None = None, sha256: str = "") -> TemplateInfo:
    pages = tuple(PageInfo(p.number, len(p.elements), len(p.raster_elements), len(p.sections), len(p.zones)) for p in t.pages)
    return TemplateInfo(t.name, t.form, t.revision, pages, path, stat.st_mtime_ns if stat else 0, stat.st_size if stat else 0, sha256)


def page_signatures(t: Template) -> dict[str, np.ndarray]:
    """Signature vectors of every page of ``t``, as each source shows it: source -> (pages, 32)."""
    return {src: np.stack([signature(p.width, p.height, p.elements_for(src)).vector() for p in t.pages]) for src in SOURCES}


@dataclass
class _Entry:
    """One template file (or in-memory template) while an index is built."""

    info: TemplateInfo
    sigs: dict
    template: Template | None = None


class TemplateIndex:
    """Templates by signature rows; see the module notes.

    Rows are template pages, in template order then page order. ``len(index)`` is the number of
    templates; iterating yields their :class:`TemplateInfo` (``name``, ``pages`` with ``number``),
    so code that only needs names and page counts never reads elements.
    """

    def __init__(self, entries: Sequence[_Entry], sources: Sequence[str] = (), problems: Sequence[str] = (),
                 in_memory: bool = False, cache_size: int = 64, refresh_seconds: float = 5.0):
        self.infos: list[TemplateInfo] = [e.info for e in entries]
        self._templates = [e.template for e in entries] if in_memory else None
        self.sources = tuple(str(s) for s in sources)
        self.problems: tuple[str, ...] = tuple(problems)
        self.cache_size = cache_size
        self.refresh_seconds = refresh_seconds
        self._loaded: OrderedDict = OrderedDict()
        self._checked = time.monotonic()
        self._set_rows(entries)

    def _set_rows(self, entries: Sequence[_Entry]) -> None:
        rows = [(i, p.number) for i, e in enumerate(entries) for p in e.info.pages]
        self.rows = np.array(rows, np.int32).reshape(len(rows), 2)
        self.signatures = {src: (np.concatenate([e.sigs[src] for e in entries]).astype(np.float32) if entries
                                 else np.zeros((0, SIGNATURE_LENGTH), np.float32)) for src in SOURCES}
        keys: dict[tuple, int] = {}
        self._group = np.array([keys.setdefault((self.infos[i].form_name, int(n)), len(keys)) for i, n in rows], np.int32)
        self._row_of = {(i, int(n)): k for k, (i, n) in enumerate(rows)}

    # -- building --------------------------------------------------------------------------------
    @classmethod
    def from_templates(cls, templates: Iterable[Template]) -> "TemplateIndex":
        """An index of templates already in memory (kept in it)."""
        entries = [_Entry(info_of(t), page_signatures(t), t) for t in templates]
        return cls(entries, in_memory=True)

    @classmethod
    def open(cls, paths: Iterable[str | os.PathLike], store: bool = True, **kwargs) -> "TemplateIndex":
        """The index of template files and folders of ``*.json`` templates.

        A folder's stored index is used for every file unchanged since (same modification time
        and size, or same content hash) and written back when something changed, if ``store``.
        Raises :class:`~layoutcheck.template.TemplateError` for a damaged file named on its own,
        a folder without templates, or when no template at all can be used.
        """
        sources = [str(p) for p in paths]
        entries, problems = _read_sources(sources, store)
        if not entries:
            raise TemplateError(problems[0] if len(problems) == 1 else
                                f"no usable template in {', '.join(sources)}" + (f": {'; '.join(problems)}" if problems else ""))
        return cls(entries, sources, problems, **kwargs)

    def refresh(self) -> bool:
        """Look at the template files again; re-read the changed ones. True when anything changed."""
        self._checked = time.monotonic()
        if not self.sources:
            return False
        entries, problems = _read_sources(self.sources, store=True)
        old = [(i.path, i.sha256) for i in self.infos]
        if [(e.info.path, e.info.sha256) for e in entries] == old and tuple(problems) == self.problems:
            self.infos = [e.info for e in entries]  # new modification times, same content
            return False
        self.infos = [e.info for e in entries]
        self.problems = tuple(problems)
        self._loaded.clear()
        self._set_rows(entries)
        return True

    # -- reading ---------------------------------------------------------------------------------
    @property
    def n_pages(self) -> int:
        return len(self.rows)

    def __len__(self) -> int:
        return len(self.infos)

    def __iter__(self) -> Iterator[TemplateInfo]:
        return iter(self.infos)

    def template(self, i: int) -> Template:
        """Template ``i``, read from its file when not in memory (least recently used kept)."""
        if self._templates is not None:
            return self._templates[i]
        info = self.infos[i]
        key = (info.path, info.sha256)
        t = self._loaded.get(key)
        if t is None:
            t = load_template(info.path)  # type: ignore[arg-type]
            self._loaded[key] = t
            while len(self._loaded) > self.cache_size:
                self._loaded.popitem(last=False)
        else:
            self._loaded.move_to_end(key)
        return t

    def page(self, row: int) -> tuple[Template, TemplatePage]:
        """``(template, template page)`` of an index row."""
        i, n = self.rows[row]
        t = self.template(int(i))
        return t, t.page(int(n))

    def info(self, row: int) -> TemplateInfo:
        return self.infos[int(self.rows[row][0])]

    def ranked(self, found: PageElements) -> np.ndarray:
        """Rows by signature distance to ``found``, nearest first (stable)."""
        if self.sources and time.monotonic() - self._checked >= self.refresh_seconds:
            self.refresh()
        src = "raster" if found.source == "raster" else "vector"
        q = signature(found.width, found.height, found.elements).vector()
        return np.argsort(distances(q, self.signatures[src]), kind="stable")

    def group(self, row: int) -> int:
        """Same number for the same page of revisions of one form."""
        return int(self._group[row])

    def siblings(self, row: int) -> list[int]:
        """Rows of the same page of the other revisions of the form."""
        return [int(r) for r in np.flatnonzero(self._group == self._group[row]) if r != row]

    def row(self, template: int, number: int) -> int | None:
        return self._row_of.get((template, number))

    def revision_row(self, row: int, revision: str) -> int | None:
        """The row of the same page in revision ``revision`` of the row's form, if the index has it."""
        for r in [row, *self.siblings(row)]:
            if self.info(r).revision == revision:
                return r
        return None

    def by_name(self, names: Iterable[str]) -> list[Template]:
        """The templates of these names (read as needed), in index order."""
        wanted = set(names)
        return [self.template(i) for i, info in enumerate(self.infos) if info.name in wanted]

    def __getstate__(self) -> dict:
        state = self.__dict__.copy()
        state["_loaded"] = OrderedDict()  # workers read what they need themselves
        return state


_LISTS: OrderedDict = OrderedDict()


def as_index(templates) -> TemplateIndex:
    """``templates`` as an index: itself if it is one, else an in-memory index (kept for reuse)."""
    if isinstance(templates, TemplateIndex):
        return templates
    items = tuple(templates)
    key = tuple(id(t) for t in items)
    hit = _LISTS.get(key)
    if hit is not None and all(a is b for a, b in zip(hit[0], items)):
        _LISTS.move_to_end(key)
        return hit[1]
    index = TemplateIndex.from_templates(items)
    _LISTS[key] = (items, index)  # holding the templates keeps their ids from being reused
    while len(_LISTS) > 8:
        _LISTS.popitem(last=False)
    return index


# -- files and the stored index -------------------------------------------------------------------
def _read_sources(sources: Sequence[str], store: bool) -> tuple[list[_Entry], list[str]]:
    entries: list[_Entry] = []
    problems: list[str] = []
    for src in sources:
        p = Path(src)
        if p.is_dir():
            files = sorted(f for f in p.glob("*.json"))
            if not files:
                raise TemplateError(f"{src}: folder holds no template (*.json) files")
            stored = _load_store(p)
            got = []
            for f in files:
                try:
                    got.append(_read_file(f, stored.get(f.name)))
                except TemplateError as exc:
                    problems.append(str(exc))
            if store and _changed(stored, got):
                _write_store(p, got)
            entries.extend(got)
        else:
            entries.append(_read_file(p, None))  # a damaged file named on its own is an error
    return entries, problems


def _read_file(path: Path, stored: _Entry | None) -> _Entry:
    try:
        st = path.stat()
    except OSError as exc:
        raise TemplateError(f"{path.name}: template cannot be read ({exc.strerror})") from None
    if stored is not None and stored.info.mtime_ns == st.st_mtime_ns and stored.info.size == st.st_size:
        return _Entry(_with_path(stored.info, path, st), stored.sigs)
    try:
        sha = hashlib.sha256(path.read_bytes()).hexdigest()
    except OSError as exc:
        raise TemplateError(f"{path.name}: template cannot be read ({exc.strerror})") from None
    if stored is not None and stored.info.sha256 == sha:
        return _Entry(_with_path(stored.info, path, st), stored.sigs)
    t = load_template(path)
    return _Entry(info_of(t, str(path), st, sha), page_signatures(t))


def _with_path(info: TemplateInfo, path: Path, st: os.stat_result) -> TemplateInfo:
    return TemplateInfo(info.name, info.form, info.revision, info.pages, str(path), st.st_mtime_ns, st.st_size, info.sha256)


def _changed(stored: dict, got: list[_Entry]) -> bool:
    if set(stored) != {Path(e.info.path).name for e in got}:  # type: ignore[arg-type]
        return True
    return any(stored[Path(e.info.path).name].info != e.info for e in got)  # type: ignore[arg-type]


def _store_paths(folder: Path) -> list[Path]:
    """Where a folder's index is kept: beside the templates, else in the user's cache folder."""
    cache = Path(os.environ.get("XDG_CACHE_HOME") or Path.home() / ".cache") / "layoutcheck"
    key = hashlib.sha256(str(folder.resolve()).encode()).hexdigest()[:20]
    return [folder / INDEX_FILE, cache / f"index-{key}.npz"]


def _load_store(folder: Path) -> dict[str, _Entry]:
    """The stored index of a folder, by file name; empty when there is none or it is unusable."""
    for path in _store_paths(folder):
        if not path.exists():
            continue
        try:
            with np.load(path, allow_pickle=False) as z:
                if int(z["version"]) != INDEX_VERSION:
                    continue
                infos = [TemplateInfo.from_dict(d) for d in json.loads(str(z["infos"]))]
                arrays = {src: z[src] for src in SOURCES}
        except (OSError, ValueError, KeyError, TypeError, json.JSONDecodeError):
            continue  # a damaged store is rebuilt from the templates
        out = {}
        k = 0
        for info in infos:
            n = len(info.pages)
            out[Path(info.path).name] = _Entry(info, {src: arrays[src][k:k + n] for src in SOURCES})  # type: ignore[arg-type]
            k += n
        return out
    return {}


def _write_store(folder: Path, entries: list[_Entry]) -> None:
    infos = json.dumps([e.info.to_dict() for e in entries])
    arrays = {src: (np.concatenate([e.sigs[src] for e in entries]) if entries else np.zeros((0, SIGNATURE_LENGTH)))
              .astype(np.float32) for src in SOURCES}
    for path in _store_paths(folder):
        tmp = path.with_name(path.name + f".{os.getpid()}.tmp")
        try:
            path.parent.mkdir(parents=True, exist_ok=True)
            with open(tmp, "wb") as fh:
                np.savez(fh, version=np.array(INDEX_VERSION), infos=np.array(infos), **arrays)
            os.replace(tmp, path)  # readers never see half a file
            return
        except OSError:
            try:
                tmp.unlink()
            except OSError:
                pass

"""The HTML report: one self-contained file a person reads to act on flagged pages.

``write_report(path, records, templates, tolerances, base_dir=None)`` writes

- up to :data:`SINGLE_FILE_MAX_PAGES` records: **one HTML file** at ``path``, with every page
  picture embedded as a data URI (16-level PNG, or JPEG where smaller, at :data:`PAGE_DPI`);
- more records: ``path`` is an **index page** (summary and the list of pages) and each record gets
  a page of its own in the folder ``<stem>_pages/`` beside it, so that no single file grows past
  what a browser opens comfortably (300 A4 pages are about 15-25 MB of pictures). When ``path`` is
  a folder or has no ``.html`` suffix, the index is ``path/index.html`` and the pages go to
  ``path/pages/``.

Safety: text from input files is untrusted. Templates autoescape; every string shown passes
:func:`layoutcheck.report.build.clean` (controls and direction overrides removed); nothing from
an input becomes a link; and each file carries a Content-Security-Policy that lets no script run
but the report's own (pinned by its sha256), loads nothing from the network and images only from
data URIs.

Returns the path of the file to open.
"""

from __future__ import annotations

import base64
import datetime as _dt
import hashlib
import os
from pathlib import Path
from typing import Sequence

from markupsafe import Markup

from ..verdict import VERDICTS, Tolerances
from . import build
from .build import PAGE_DPI, clean  # noqa: F401  (part of the package's face)

#: Most records written into one file; beyond this the report becomes an index plus one page per
#: record (see module docs).
SINGLE_FILE_MAX_PAGES = 300

#: The report's one script: verdict filter buttons. Its sha256 goes into the CSP.
FILTER_SCRIPT = """
(function () {
  var buttons = document.querySelectorAll("button[data-filter]");
  var entries = document.querySelectorAll("[data-verdict]");
  var shown = document.getElementById("shown");
  function show(which) {
    var n = 0;
    buttons.forEach(function (b) {
      b.setAttribute("aria-pressed", b.getAttribute("data-filter") === which ? "true" : "false");
    });
    entries.forEach(function (el) {
      var on = which === "all" || el.getAttribute("data-verdict") === which;
      el.hidden = !on;
      if (on && el.tagName === "LI") { n += 1; }
    });
    if (shown) { shown.textContent = which === "all" ? "all " + n + " shown" : n + " shown: " + which; }
  }
  buttons.forEach(function (b) {
    b.addEventListener("click", function () { show(b.getAttribute("data-filter")); });
  });
})();
"""


def script_hash(script: str) -> str:
    """CSP source expression for an inline script (sha256 of its exact text, base64)."""
    return "'sha256-" + base64.b64encode(hashlib.sha256(script.encode("utf-8")).digest()).decode("ascii") + "'"


def csp(with_script: bool) -> str:
    script = script_hash(FILTER_SCRIPT) if with_script else "'none'"
    return ("default-src 'none'; img-src data:; style-src 'unsafe-inline'; "
            f"script-src {script}; base-uri 'none'; form-action 'none'")


def _finalize(value):
    """Every value a template prints is cleaned of controls and direction overrides."""
    if isinstance(value, Markup):
        return value
    if isinstance(value, str):
        return clean(value)
    return value


def environment():
    from jinja2 import Environment, FileSystemLoader, StrictUndefined, select_autoescape

    env = Environment(loader=FileSystemLoader(str(Path(__file__).parent)),
                      autoescape=select_autoescape(["html"]), finalize=_finalize,
                      undefined=StrictUndefined, trim_blocks=True, lstrip_blocks=True)
    env.globals["VERDICTS"] = VERDICTS
    return env


def _common(records: Sequence[dict], templates: Sequence, tolerances: Tolerances) -> dict:
    return {
        "generated": _dt.datetime.now().astimezone().strftime("%Y-%m-%d %H:%M %Z").strip(),
        "total": len(records),
        "counts": build.counts(records),
        "plots": build.plots(records, tolerances),
        "tolerances": build.tolerance_rows(tolerances),
        "templates": build.template_rows(templates, records),
        "flagged": sum(r.get("verdict") != "pass" for r in records),
    }


def write_report(path, records: Sequence[dict], templates: Sequence, tolerances: Tolerances = Tolerances(),
                 base_dir: str | os.PathLike | None = None, views: dict | None = None) -> Path:
    """Write the HTML report of ``records`` (see module docs); returns the file to open.

    ``views``, a dict the caller keeps between calls, holds each page's drawn view by (source,
    page), so a report rewritten as records arrive draws each page once; entries of pages no
    longer reported are dropped.
    """
    records = list(records)
    env = environment()
    tindex = build.template_index(templates)
    common = _common(records, templates, tolerances)
    path = Path(path)

    def view_of(i: int, r: dict) -> dict:
        if views is None:
            return build.page_view(i, r, tindex, tolerances, base_dir)
        key = (r.get("source"), r.get("page"))
        if key not in views:
            views[key] = build.page_view(i, r, tindex, tolerances, base_dir)
        return {**views[key], "anchor": f"p{i + 1}", "number": i + 1}

    if views is not None:
        for key in set(views) - {(r.get("source"), r.get("page")) for r in records}:
            del views[key]
    if len(records) <= SINGLE_FILE_MAX_PAGES:
        pages = [view_of(i, r) for i, r in enumerate(records)]
        html = env.get_template("report.html").render(
            csp=csp(True), script=Markup(FILTER_SCRIPT), pages=pages, mode="single", **common)
        _write(path, html)
        return path
    if path.suffix.lower() in (".html", ".htm") and not path.is_dir():
        index, folder, rel = path, path.parent / f"{path.stem}_pages", f"{path.stem}_pages"
    else:
        index, folder, rel = path / "index.html", path / "pages", "pages"
    folder.mkdir(parents=True, exist_ok=True)
    entries = []
    n = len(records)
    for i, r in enumerate(records):
        view = view_of(i, r)
        name = f"{i + 1:05d}.html"
        view["href"] = f"{rel}/{name}"
        prev_href = f"{i:05d}.html" if i > 0 else None
        next_href = f"{i + 2:05d}.html" if i + 1 < n else None
        html = env.get_template("page.html").render(
            csp=csp(False), page=view, total=n, prev_href=prev_href, next_href=next_href,
            index_href=f"../{index.name}", generated=common["generated"])
        _write(folder / name, html)
        entries.append({k: view[k] for k in ("anchor", "number", "name", "page", "verdict", "title", "href",
                                             "template", "findings")})
    html = env.get_template("index.html").render(csp=csp(True), script=Markup(FILTER_SCRIPT), pages=entries,
                                                 mode="index", **common)
    _write(index, html)
    return index


def _write(path: Path, text: str) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(path.name + ".tmp")
    try:
        tmp.write_text(text, encoding="utf-8")
        os.replace(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)  # a full disk must not leave a stray temporary file
        raise

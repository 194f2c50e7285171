"""Command line: ``layoutcheck learn``, ``layoutcheck verify``, ``layoutcheck demo``.

Thin on purpose: everything a library user would also need lives in the modules it calls.
Exit codes (:mod:`layoutcheck.exitcodes`): 0 every page passed, 1 some page did not, 2 usage
error or unreadable template, 3 records or report incomplete (a write failed, or interrupted).
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

import click

from . import __version__
from .exitcodes import EXIT_FLAGGED, EXIT_INCOMPLETE, EXIT_PASS, EXIT_USAGE, HELP as EXIT_HELP
from .sources import ReadLimits, printable
from .template import TemplateError, load_template, save_template
from .verdict import VERDICTS, Tolerances


class TemplateProblem(click.ClickException):
    """An unreadable template: exit code 2, one line."""

    exit_code = EXIT_USAGE


class Incomplete(click.ClickException):
    """Records or report could not be written: exit code 3, one line."""

    exit_code = EXIT_INCOMPLETE


def load_templates(paths) -> list:
    """Templates from files and folders of ``*.json`` files."""
    out = []
    for p in paths:
        pp = Path(p)
        files = sorted(pp.glob("*.json")) if pp.is_dir() else [pp]
        if pp.is_dir() and not files:
            raise TemplateProblem(f"{p}: folder holds no template (*.json) files")
        for f in files:
            try:
                out.append(load_template(f))
            except TemplateError as exc:
                raise TemplateProblem(str(exc)) from None
    return out


def summary_table(records: list[dict]) -> str:
    """A plain table a person reads: one row per page, then counts per verdict."""
    rows = [("file", "page", "verdict", "template", "turn°", "scale", "shift mm", "support", "what")]
    for r in records:
        p = r.get("pose") or {}
        what = r["error"] or "; ".join(f["message"] for f in r["findings"][:2]) or "-"
        shift = p.get("shift_mm")
        rows.append((
            printable(os.path.basename(r["source"])), str(r["page"] if r["page"] is not None else "-"), r["verdict"],
            r.get("template") or "-",
            f"{p['rotation_deg']:+.2f}" if p else "-",
            f"{p['scale']:.4f}" if p else "-",
            f"{shift[0]:+.1f},{shift[1]:+.1f}" if shift else "-",
            f"{r['support']:.2f}", what[:90],
        ))
    widths = [max(len(row[i]) for row in rows) for i in range(len(rows[0]) - 1)]
    lines = []
    for k, row in enumerate(rows):
        lines.append("  ".join(cell.ljust(w) for cell, w in zip(row[:-1], widths)) + "  " + row[-1])
        if k == 0:
            lines.append("  ".join("-" * w for w in widths) + "  " + "-" * 4)
    lines.append("")
    lines.append(counts_line(records))
    return "\n".join(lines)


def counts_line(records: list[dict]) -> str:
    counts = {v: 0 for v in VERDICTS}
    for r in records:
        counts[r["verdict"]] = counts.get(r["verdict"], 0) + 1
    parts = [f"{counts[v]} {v}" for v in reversed(VERDICTS) if counts[v]]
    return f"{len(records)} page(s): " + (", ".join(parts) if parts else "none")


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="layoutcheck")
def main() -> None:
    """Verify the layout of scanned and born-digital forms before OCR."""


@main.command()
@click.argument("references", nargs=-1, required=True, type=click.Path(dir_okay=False))
@click.option("-o", "--output", "output", required=True, type=click.Path(dir_okay=False), help="Template file to write (JSON).")
@click.option("--name", help="Template name (default: from the reference's file name).")
@click.option("--pages", "pages_spec", help="Pages of the reference to learn, e.g. 1,3-4 (default: all).")
@click.option("--dpi", type=float, help="Resolution of reference scans that do not state one.")
@click.option("--section-name", "section_names", multiple=True, metavar="ID=NAME", help="Name a found section, e.g. section-02='Cargo'.")
@click.option("--zones", "zones_file", type=click.Path(exists=True, dir_okay=False), help="Zones JSON that overrides or adds field zones.")
@click.option("--password", help="Password of an encrypted reference PDF.")
def learn(references, output, name, pages_spec, dpi, section_names, zones_file, password):
    """Learn a template from a reference (a blank PDF or a clean scan), or from several good samples."""
    from .check import LearnError, learn as learn_template, parse_pages

    try:
        pages = parse_pages(pages_spec)
    except ValueError as exc:
        raise click.BadParameter(str(exc), param_hint="--pages") from None
    names = {}
    for item in section_names:
        if "=" not in item:
            raise click.BadParameter(f"{item!r} is not ID=NAME", param_hint="--section-name")
        k, v = item.split("=", 1)
        names[k.strip()] = v.strip()
    limits = ReadLimits(dpi=dpi, password=password)
    try:
        template = learn_template(list(references), name=name, pages=pages, limits=limits, section_names=names)
        if zones_file:
            from .zones import apply_zone_file

            template = apply_zone_file(template, zones_file)
    except LearnError as exc:
        raise click.ClickException(str(exc)) from None
    save_template(template, output)
    for p in template.pages:
        click.echo(f"{template.name} page {p.number}: {len(p.elements)} elements in {len(p.sections)} sections"
                   + (f", {len(p.raster_elements)} as seen in a scan" if p.raster_elements else "")
                   + (f", {len(p.unstable)} unstable" if p.unstable else ""))
        if p.unstable:
            # Found on some good samples only: not judged on input pages, so a person should know.
            by_id = {e.id: e for e in p.elements}
            names = [by_id[i].label() for i in p.unstable if i in by_id]
            shown = ", ".join(names[:10]) + (f" and {len(names) - 10} more" if len(names) > 10 else "")
            click.echo(f"  not on every sample (not judged): {shown}")
    click.echo(f"wrote {output}")


def tolerance_options(f):
    f = click.option("--max-skew", type=float, default=Tolerances.max_skew_deg, show_default=True, help="Degrees of turn accepted.")(f)
    f = click.option("--max-scale-error", type=float, default=Tolerances.max_scale_error_pct, show_default=True, help="Percent scale error accepted.")(f)
    f = click.option("--max-shift", type=float, default=Tolerances.max_shift_mm, show_default=True, help="Millimetres of shift accepted.")(f)
    f = click.option("--element-tolerance", type=float, default=Tolerances.element_tolerance_mm, show_default=True, help="Millimetres an element may sit off its place.")(f)
    f = click.option("--element-size-tolerance", type=float, default=Tolerances.element_size_pct, show_default=True, help="Percent size change of an element accepted.")(f)
    f = click.option("--min-support", type=float, default=Tolerances.min_support, show_default=True, help="Share of elements that must agree for the page to be the form.")(f)
    return f


def make_tolerances(max_skew, max_scale_error, max_shift, element_tolerance, element_size_tolerance, min_support) -> Tolerances:
    try:
        return Tolerances(max_skew, max_scale_error, max_shift, element_tolerance, element_size_tolerance, min_support)
    except ValueError as exc:
        raise click.UsageError(str(exc)) from None


def handoff_options(f):
    """``--zones``, ``--normalise DIR``, ``--normalise-dpi``, ``--normalise-format``, passed on as
    one ``handoff`` dict of :class:`~layoutcheck.check.CheckSettings` fields."""
    import functools

    @functools.wraps(f)
    def inner(*args, zones, normalise_dir, normalise_dpi, normalise_format, **kwargs):
        handoff = {"zones": bool(zones), "normalise_dir": normalise_dir, "normalise_dpi": normalise_dpi,
                   "normalise_format": normalise_format.lower()}
        return f(*args, handoff=handoff, **kwargs)

    inner = click.option("--normalise-format", type=click.Choice(["png", "tiff"], case_sensitive=False), default="png", show_default=True,
                         help="Format of normalised page images (the dpi is stored in the file).")(inner)
    inner = click.option("--normalise-dpi", type=click.FloatRange(min=50, max=1200), default=None,
                         help="Resolution of normalised images (default: the scan's; 200 for born-digital pages).")(inner)
    inner = click.option("--normalise", "normalise_dir", type=click.Path(file_okay=False), default=None,
                         help="Write each recognised page, turned, scaled and shifted into the template's frame, to this folder.")(inner)
    inner = click.option("--zones", "zones", is_flag=True, help="Add to each record where the template's zones lie on the page (pixels for scans, points for PDFs).")(inner)
    return inner


def batch_options(f):
    """``--jobs``, ``--resume``, ``--engine``, ``--scheduler`` and the limits (``--page-timeout``,
    ``--max-memory``, ``--max-content-mb``, ``--max-drawing-ops``), passed on as one ``batch``
    dict (see :mod:`layoutcheck.batch`)."""
    import functools

    from .batch import MEMORY_MB, PAGE_TIMEOUT_S

    @functools.wraps(f)
    def inner(*args, jobs, resume, page_timeout, max_memory, max_content_mb, max_drawing_ops, engine, scheduler, **kwargs):
        batch = {"jobs": jobs, "resume": resume, "page_timeout": page_timeout or None, "memory_mb": max_memory or None,
                 "max_content_bytes": int(max_content_mb * 1024 * 1024), "max_drawing_ops": max_drawing_ops,
                 "engine": engine, "scheduler": scheduler}
        return f(*args, batch=batch, **kwargs)

    inner = click.option("--scheduler", metavar="ADDRESS", help="Dask scheduler to run on, e.g. tcp://scheduler-host:8786 (with --engine dask).")(inner)
    inner = click.option("--engine", type=click.Choice(["local", "dask"]), default="local", show_default=True,
                         help="Run pages in local worker processes, or on Dask distributed (a local cluster unless --scheduler).")(inner)
    inner = click.option("--max-drawing-ops", type=click.IntRange(min=1), default=ReadLimits.max_drawing_ops, show_default=True,
                         metavar="N", help="Most path operations drawn on one PDF page; a page with more gets an error record.")(inner)
    inner = click.option("--max-content-mb", type=click.FloatRange(min=0, min_open=True), default=ReadLimits.max_content_bytes / 1024 / 1024,
                         show_default=True, metavar="MB", help="Largest decoded content of one PDF page; a page with more gets an error record.")(inner)
    inner = click.option("--max-memory", type=click.IntRange(min=0), default=MEMORY_MB, show_default=True, metavar="MB",
                         help="Memory per worker process; a page that needs more gets an error record and its worker is replaced (0: no limit).")(inner)
    inner = click.option("--page-timeout", type=click.FloatRange(min=0), default=PAGE_TIMEOUT_S, show_default=True, metavar="SECONDS",
                         help="Most seconds one page may take; its worker is then replaced and the page gets an error record (0: no limit).")(inner)
    inner = click.option("--resume", is_flag=True, help="Continue an interrupted run: keep the records in --json FILE, check only the pages not there.")(inner)
    inner = click.option("-j", "--jobs", type=click.IntRange(min=1), default=1, show_default=True, help="Pages checked at once, in worker processes.")(inner)
    return inner


def _progress_bar():
    """A one-line progress bar on standard error, only when it is a terminal."""
    stream = sys.stderr
    if not stream.isatty():
        return None, lambda: None
    state = {"last": 0.0}

    def show(done: int, total: int) -> None:
        import time as _time

        now = _time.monotonic()
        if now - state["last"] < 0.1 and done < total:
            return
        state["last"] = now
        width = 30
        filled = int(width * done / total) if total else 0
        stream.write(f"\r[{'#' * filled}{'.' * (width - filled)}] {done}/{total} pages")
        stream.flush()

    def end() -> None:
        stream.write("\n")
        stream.flush()

    return show, end


@main.command(epilog=EXIT_HELP)
@click.argument("template", type=click.Path(exists=True))
@click.argument("inputs", nargs=-1, required=True)
@click.option("--json", "json_out", type=click.Path(dir_okay=False, allow_dash=True), help="Write JSON Lines records here ('-' for standard output).")
@click.option("--report", "report_out", type=click.Path(), help="Write an HTML report here.")
@click.option("--dpi", type=float, help="Resolution of scans that do not state one.")
@click.option("--password", help="Password for encrypted PDFs.")
@click.option("--max-pages", type=int, default=ReadLimits.max_pages, show_default=True, help="Most pages read from one file.")
@click.option("--max-pixels", type=int, default=ReadLimits.max_pixels, show_default=True, help="Largest image decoded, in pixels.")
@click.option("--also", "more_templates", multiple=True, type=click.Path(exists=True), help="A further template (file or folder) to choose from.")
@tolerance_options
@click.option("-q", "--quiet", is_flag=True, help="No summary table.")
@handoff_options
@batch_options
def verify(template, inputs, json_out, report_out, dpi, password, max_pages, max_pixels, more_templates,
           max_skew, max_scale_error, max_shift, element_tolerance, element_size_tolerance, min_support, quiet,
           handoff, batch):
    """Check INPUT files (PDF, PNG, JPEG, TIFF) against TEMPLATE (a file or a folder of templates).

    INPUTS are files, folders (searched recursively), globs, or '-' for a list of paths on
    standard input. Each page gets one JSON Lines record, in input and page order.
    """
    from .batch import BatchOptions, OutputError, expand_inputs, run_batch
    from .check import CheckSettings

    templates = load_templates([template, *more_templates])
    tol = make_tolerances(max_skew, max_scale_error, max_shift, element_tolerance, element_size_tolerance, min_support)
    settings = CheckSettings(tolerances=tol, **handoff)
    limits = ReadLimits(max_pixels=max_pixels, max_pages=max_pages, dpi=dpi, password=password,
                        max_content_bytes=batch["max_content_bytes"], max_drawing_ops=batch["max_drawing_ops"])
    if batch["resume"] and (not json_out or json_out == "-"):
        raise click.UsageError("--resume needs --json FILE (the run's output file)")
    if batch["scheduler"] and batch["engine"] != "dask":
        raise click.UsageError("--scheduler needs --engine dask")
    files = expand_inputs(inputs)
    if not files:
        raise click.UsageError("no input files given")
    try:
        options = BatchOptions(jobs=batch["jobs"], page_timeout=batch["page_timeout"], memory_mb=batch["memory_mb"],
                               engine=batch["engine"], scheduler=batch["scheduler"], resume=batch["resume"],
                               keep_records=bool(report_out) or not quiet)
    except ValueError as exc:
        raise click.UsageError(str(exc)) from None
    show, end = _progress_bar() if not quiet else (None, lambda: None)
    try:
        result = run_batch(files, templates, settings, limits, output=json_out, options=options, progress=show)
    except OutputError as exc:
        raise Incomplete(str(exc)) from None
    finally:
        if show is not None:
            end()
    records = result.records
    if report_out:
        _write_report(report_out, records, templates, tol)
    out = sys.stderr if json_out == "-" else sys.stdout
    if not quiet and records:
        click.echo("\n".join(summary_table(records).split("\n")[:-1]), file=out)
    click.echo(result.summary(), file=out)
    sys.exit(EXIT_INCOMPLETE if result.interrupted else EXIT_PASS if result.all_pass else EXIT_FLAGGED)


def _write_report(path, records, templates, tolerances):
    from .report import write_report

    try:
        write_report(path, records, templates, tolerances)
    except OSError as exc:
        raise Incomplete(f"{exc.filename or path}: report could not be written ({exc.strerror or type(exc).__name__})") from None


@main.command()
@click.option("--out", "out_dir", default="demo-out", show_default=True, type=click.Path(file_okay=False), help="Folder for templates, records and the report.")
def demo(out_dir):
    """Learn the bundled sample forms, verify the bundled inputs, write records and a report."""
    from .demo import run_demo

    code = run_demo(Path(out_dir), echo=click.echo)
    sys.exit(code)


if __name__ == "__main__":  # pragma: no cover
    main()

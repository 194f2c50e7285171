"""Command line: ``layoutcheck learn``, ``verify``, ``templates``, ``watch``, ``show``, ``promote`` and ``demo``.

Thin on purpose: everything a library user would also need lives in :mod:`layoutcheck.api`, the
only part of the library this module uses.
Exit codes (:mod:`layoutcheck.exitcodes`): 0 every page passed, 1 some page did not, 2 usage
error or unreadable template, 3 records or report incomplete (a write failed, or interrupted).
"""

from __future__ import annotations

import contextlib
import signal
import sys
import threading
from pathlib import Path

import click
from click_option_group import optgroup

from . import __version__
from .api import (EXIT_FLAGGED, EXIT_HELP, EXIT_INCOMPLETE, EXIT_PASS, EXIT_USAGE, MEMORY_MB, PAGE_TIMEOUT_S,
                  BatchOptions, CheckSettings, OutputError, LearnError, ReadLimits, TemplateError, Tolerances, alike_templates,
                  expand_inputs, open_template_index,
                  learn as learn_template, learning_summary, load_templates as api_load_templates, parse_pages, promote,
                  run_batch, save_template, summary_table, update_template, write_report)


class TemplateProblem(click.ClickException):
    """An unreadable template: exit code 2, one line."""

    exit_code = EXIT_USAGE


class Incomplete(click.ClickException):
    """Records or report could not be written: exit code 3, one line."""

    exit_code = EXIT_INCOMPLETE


def _interrupt(signum, frame):
    raise KeyboardInterrupt


@contextlib.contextmanager
def interruptible():
    """SIGTERM stops a command as Ctrl-C does; either, outside the batch (which handles them
    itself, letting running pages finish), ends it with one line and exit code 3."""
    main_thread = threading.current_thread() is threading.main_thread()
    old = signal.signal(signal.SIGTERM, _interrupt) if main_thread else None
    try:
        yield
    except KeyboardInterrupt:
        raise Incomplete("interrupted: the records or the report may be incomplete; "
                         "repeat the same command with --resume to finish") from None
    finally:
        if main_thread:
            signal.signal(signal.SIGTERM, old)


def load_templates(paths, warn=None):
    """The templates of files and folders of ``*.json`` files, as one index.

    A damaged template in a folder is left out, with one line naming it passed to ``warn``; a
    damaged file named on its own, or no usable template at all, is a :class:`TemplateProblem`.
    """
    try:
        index = open_template_index(paths)
    except TemplateError as exc:
        raise TemplateProblem(str(exc)) from None
    for problem in index.problems:
        (warn or (lambda m: click.echo(m, err=True)))(f"warning: {problem}; left out, the other templates are used")
    return index


def parse_expect_revision(items) -> tuple:
    """``--expect-revision`` values: ``REV`` (every form) or ``FORM=REV``."""
    out = []
    for item in items:
        form, _, rev = item.rpartition("=")
        if not rev.strip():
            raise click.BadParameter(f"{item!r} is not REVISION or FORM=REVISION", param_hint="--expect-revision")
        out.append((form.strip() or None, rev.strip()))
    return tuple(out)


def expected_revisions(items, templates) -> tuple:
    """Parsed ``--expect-revision`` values, each checked against the revisions the templates have."""
    expected = parse_expect_revision(items)
    for form, rev in expected:
        if not any((form is None or t.form_name == form) and t.revision == rev for t in templates):
            raise click.BadParameter(f"no template is revision {rev}" + (f" of {form}" if form else ""),
                                     param_hint="--expect-revision")
    return expected


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="layoutcheck")
def main() -> None:
    """Verify the layout of scanned and born-digital forms before OCR."""


@main.command()
@click.argument("references", nargs=-1, required=True, type=click.Path())
@click.option("-o", "--output", "output", type=click.Path(dir_okay=False), help="Template file to write (JSON); with --update, default: the template updated.")
@click.option("--update", "update", type=click.Path(exists=True, dir_okay=False),
              help="Add the REFERENCES (scans, or folders of them) as more samples to this template.")
@click.option("--name", help="Template name (default: from the reference's file name).")
@click.option("--pages", "pages_spec", help="Pages of the reference to learn, e.g. 1,3-4 (default: all).")
@click.option("--dpi", type=float, help="Resolution of reference scans that do not state one.")
@click.option("--section-name", "section_names", multiple=True, metavar="ID=NAME", help="Name a found section, e.g. section-02='Cargo'.")
@click.option("--zones", "zones_file", type=click.Path(exists=True, dir_okay=False), help="Zones JSON that overrides or adds field zones.")
@click.option("--password", help="Password of an encrypted reference PDF.")
@click.option("--form", "form", help="The form this template is a revision of, e.g. KBH-101 (with --revision).")
@click.option("--revision", help="Which revision of the form this template is, e.g. 3.")
@click.option("--min-dpi", type=float, default=Tolerances.min_dpi, show_default=True,
              help="Least effective resolution of a photographed reference.")
def learn(references, output, update, name, pages_spec, dpi, section_names, zones_file, password, form, revision,
          min_dpi):
    """Learn a template from a reference (a blank PDF or a clean scan), or from several good samples."""
    if output is None and update is None:
        raise click.UsageError("give the template file to write with -o/--output")
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
    try:
        if update:
            template = update_template(update, list(references), dpi=dpi, password=password, zones=zones_file)
            output = output or update
        else:
            template = learn_template(list(references), name=name, pages=pages, dpi=dpi, password=password,
                                      section_names=names, zones=zones_file, form=form, revision=revision,
                                      min_dpi=min_dpi)
    except TemplateError as exc:
        raise TemplateProblem(str(exc)) from None
    except LearnError as exc:
        raise click.ClickException(str(exc)) from None
    save_template(template, output)
    for line in learning_summary(template):
        click.echo(line)
    click.echo(f"wrote {output}")


def _stack(f, decorators):
    """Apply decorators listed in the order they show in ``--help``."""
    for d in reversed(decorators):
        f = d(f)
    return f


def input_options(f):
    """Inputs: how files are read, and which further templates to choose from."""
    return _stack(f, [
        optgroup.group("Inputs"),
        optgroup.option("--dpi", type=float, help="Resolution of scans that do not state one."),
        optgroup.option("--password", help="Password for encrypted PDFs."),
        optgroup.option("--max-pages", type=int, default=ReadLimits.max_pages, show_default=True, help="Most pages read from one file."),
        optgroup.option("--max-pixels", type=int, default=ReadLimits.max_pixels, show_default=True, help="Largest image decoded, in pixels."),
        optgroup.option("--also", "more_templates", multiple=True, type=click.Path(exists=True), help="A further template (file or folder) to choose from."),
        optgroup.option("--expect-revision", "expect_revision", multiple=True, metavar="[FORM=]REVISION",
                        help="Pages should be this revision of their form (or of FORM); a page that is another revision is mismatched."),
    ])


def output_options(json_help: str, report_help: str):
    """Outputs: records, report, quiet."""
    def apply(f):
        return _stack(f, [
            optgroup.group("Outputs"),
            optgroup.option("--json", "json_out", type=click.Path(dir_okay=False, allow_dash=True), help=json_help),
            optgroup.option("--report", "report_out", type=click.Path(), help=report_help),
            optgroup.option("-q", "--quiet", is_flag=True, help="No summary table and no progress bar."),
        ])
    return apply


def tolerance_options(f):
    """The tolerances a verdict is judged by, passed on as one :class:`Tolerances`
    (``tolerances``); the source of each default is in :mod:`layoutcheck.verdict`."""
    import functools

    @functools.wraps(f)
    def inner(*args, max_skew, max_scale_error, max_shift, element_tolerance, element_size_tolerance, min_support,
              min_dpi, max_cut, max_warp, **kwargs):
        try:
            tolerances = Tolerances(max_skew_deg=max_skew, max_scale_error_pct=max_scale_error, max_shift_mm=max_shift,
                                    element_tolerance_mm=element_tolerance, element_size_pct=element_size_tolerance,
                                    min_support=min_support, min_dpi=min_dpi, max_cut_mm=max_cut, max_warp_mm=max_warp)
        except ValueError as exc:
            raise click.UsageError(str(exc)) from None
        return f(*args, tolerances=tolerances, **kwargs)

    return _stack(inner, [
        optgroup.group("Tolerances"),
        optgroup.option("--max-skew", type=float, default=Tolerances.max_skew_deg, show_default=True, help="Degrees of turn accepted."),
        optgroup.option("--max-scale-error", type=float, default=Tolerances.max_scale_error_pct, show_default=True, help="Percent scale error accepted."),
        optgroup.option("--max-shift", type=float, default=Tolerances.max_shift_mm, show_default=True, help="Millimetres of shift accepted."),
        optgroup.option("--element-tolerance", type=float, default=Tolerances.element_tolerance_mm, show_default=True, help="Millimetres an element may sit off its place."),
        optgroup.option("--element-size-tolerance", type=float, default=Tolerances.element_size_pct, show_default=True, help="Percent size change of an element accepted."),
        optgroup.option("--min-support", type=float, default=Tolerances.min_support, show_default=True, help="Share of elements that must agree for the page to be the form."),
        optgroup.option("--min-dpi", type=float, default=Tolerances.min_dpi, show_default=True,
                        help="Least effective resolution anywhere on the form of a photo; below it the photo is to be taken again."),
        optgroup.option("--max-cut", type=float, default=Tolerances.max_cut_mm, show_default=True, metavar="MM",
                        help="Millimetres of the form that may lie beyond an edge of the image; more is 'incomplete'."),
        optgroup.option("--max-warp", type=float, default=Tolerances.max_warp_mm, show_default=True, metavar="MM",
                        help="Millimetres the content may bend away from one flat placement (paper not flat) before it is a finding."),
    ])


def handoff_options(f):
    """``--zones``, ``--normalise DIR``, ``--normalise-dpi``, ``--normalise-format``, passed on as
    one ``handoff`` dict of :class:`~layoutcheck.api.CheckSettings` fields."""
    import functools

    @functools.wraps(f)
    def inner(*args, zones, normalise_dir, normalise_dpi, normalise_format, **kwargs):
        handoff = {"zones": bool(zones), "normalise_dir": normalise_dir, "normalise_dpi": normalise_dpi,
                   "normalise_format": normalise_format.lower()}
        return f(*args, handoff=handoff, **kwargs)

    return _stack(inner, [
        optgroup.group("Hand-off to OCR"),
        optgroup.option("--zones", "zones", is_flag=True, help="Add to each record where the template's zones lie on the page (pixels for scans, points for PDFs)."),
        optgroup.option("--normalise", "normalise_dir", type=click.Path(file_okay=False), default=None,
                        help="Write each recognised page, turned, scaled and shifted into the template's frame, to this folder."),
        optgroup.option("--normalise-dpi", type=click.FloatRange(min=50, max=1200), default=None,
                        help="Resolution of normalised images (default: the scan's; 200 for born-digital pages)."),
        optgroup.option("--normalise-format", type=click.Choice(["png", "tiff"], case_sensitive=False), default="png", show_default=True,
                        help="Format of normalised page images (the dpi is stored in the file)."),
    ])


def batch_options(resume: bool = True):
    """``--jobs``, ``--resume``, ``--engine``, ``--scheduler`` and the limits (``--page-timeout``,
    ``--max-memory``, ``--max-content-mb``, ``--max-drawing-ops``), passed on as one ``batch``
    dict (see :mod:`layoutcheck.batch`); ``watch`` always resumes, so has no ``--resume``."""
    import functools

    def apply(f):
        @functools.wraps(f)
        def inner(*args, jobs, page_timeout, max_memory, max_content_mb, max_drawing_ops, engine, scheduler,
                  resume=False, **kwargs):
            batch = {"jobs": jobs, "resume": resume, "page_timeout": page_timeout or None, "memory_mb": max_memory or None,
                     "max_content_bytes": int(max_content_mb * 1024 * 1024), "max_drawing_ops": max_drawing_ops,
                     "engine": engine, "scheduler": scheduler}
            return f(*args, batch=batch, **kwargs)

        return _stack(inner, [
            optgroup.group("Batch"),
            optgroup.option("-j", "--jobs", type=click.IntRange(min=1), default=1, show_default=True, help="Pages checked at once, in worker processes."),
            *([optgroup.option("--resume", is_flag=True, help="Continue an interrupted run: keep the records in --json FILE, check only the pages not there.")]
              if resume else []),
            optgroup.option("--page-timeout", type=click.FloatRange(min=0), default=PAGE_TIMEOUT_S, show_default=True, metavar="SECONDS",
                            help="Most seconds one page may take; its worker is then replaced and the page gets an error record (0: no limit)."),
            optgroup.option("--max-memory", type=click.IntRange(min=0), default=MEMORY_MB, show_default=True, metavar="MB",
                            help="Memory per worker process; a page that needs more gets an error record and its worker is replaced (0: no limit)."),
            optgroup.option("--max-content-mb", type=click.FloatRange(min=0, min_open=True), default=ReadLimits.max_content_bytes / 1024 / 1024,
                            show_default=True, metavar="MB", help="Largest decoded content of one PDF page; a page with more gets an error record."),
            optgroup.option("--max-drawing-ops", type=click.IntRange(min=1), default=ReadLimits.max_drawing_ops, show_default=True,
                            metavar="N", help="Most path operations drawn on one PDF page; a page with more gets an error record."),
            optgroup.option("--engine", type=click.Choice(["local", "dask"]), default="local", show_default=True,
                            help="Run pages in local worker processes, or on Dask distributed (a local cluster unless --scheduler)."),
            optgroup.option("--scheduler", metavar="ADDRESS", help="Dask scheduler to run on, e.g. tcp://scheduler-host:8786 (with --engine dask)."),
        ])
    return apply


def read_limits(dpi, password, max_pages, max_pixels, batch) -> ReadLimits:
    """The read limits of ``verify`` and ``watch`` from their options."""
    return ReadLimits(max_pixels=max_pixels, max_pages=max_pages, dpi=dpi, password=password,
                      max_content_bytes=batch["max_content_bytes"], max_drawing_ops=batch["max_drawing_ops"])


class ProgressBar:
    """Pages done, pages per second and time left on standard error (tqdm), on a terminal only.

    The total starts as the number of files (one page each) and grows as longer files are opened.
    """

    def __init__(self, files: int, stream=None):
        from tqdm import tqdm

        self.bar = tqdm(total=files, unit="page", file=stream or sys.stderr, dynamic_ncols=True, leave=True,
                        desc=f"{files} file(s)")

    def update_to(self, done: int, total: int) -> None:
        if total != self.bar.total:
            self.bar.total = total
        self.bar.update(done - self.bar.n)

    def close(self) -> None:
        self.bar.close()


def _progress(quiet: bool):
    """A ProgressBar factory when standard error is a terminal and not ``quiet``, else None."""
    return None if quiet or not sys.stderr.isatty() else ProgressBar


@main.command(epilog=EXIT_HELP)
@click.argument("template", type=click.Path(exists=True))
@click.argument("inputs", nargs=-1, required=True)
@input_options
@output_options("Write JSON Lines records here ('-' for standard output).", "Write an HTML report here.")
@tolerance_options
@batch_options()
@handoff_options
def verify(template, inputs, json_out, report_out, dpi, password, max_pages, max_pixels, more_templates, expect_revision,
           tolerances, quiet, handoff, batch):
    """Check INPUT files (PDF, PNG, JPEG, TIFF) against TEMPLATE (a file or a folder of templates).

    INPUTS are files, folders (searched recursively), globs, or '-' for a list of paths on
    standard input. Each page gets one JSON Lines record, in input and page order.
    """
    templates = load_templates([template, *more_templates])
    settings = CheckSettings(tolerances=tolerances, expect_revision=expected_revisions(expect_revision, templates), **handoff)
    limits = read_limits(dpi, password, max_pages, max_pixels, batch)
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
    make_bar = _progress(quiet)
    with interruptible():
        bar = make_bar(len(files)) if make_bar else None
        try:
            result = run_batch(files, templates, settings, limits, output=json_out, options=options,
                               progress=bar.update_to if bar else None)
        except OutputError as exc:
            raise Incomplete(str(exc)) from None
        finally:
            if bar is not None:
                bar.close()
        records = result.records
        if report_out:
            _write_report(report_out, records, templates.by_name({r["template"] for r in records if r.get("template")}), tolerances)
        # With records on standard output, the people's summary goes to standard error.
        to_err = json_out == "-"
        if not quiet and records:
            click.echo("\n".join(summary_table(records).split("\n")[:-1]), err=to_err)
        click.echo(result.summary(), err=to_err)
    sys.exit(EXIT_INCOMPLETE if result.interrupted else EXIT_PASS if result.all_pass else EXIT_FLAGGED)


def _write_report(path, records, templates, tolerances):
    try:
        write_report(path, records, templates, tolerances)
    except OSError as exc:
        raise Incomplete(f"{exc.filename or path}: report could not be written ({exc.strerror or type(exc).__name__})") from None


@main.command("templates")
@click.argument("template_dir", type=click.Path(exists=True))
@click.option("--neighbours", type=click.IntRange(min=1), default=3, show_default=True,
              help="Nearest templates (by layout signature) each template is compared with.")
def templates_command(template_dir, neighbours):
    """List the templates of TEMPLATE_DIR and warn about pairs so alike that pages would be ambiguous."""
    index = load_templates([template_dir], warn=click.echo)
    rows = [("template", "form", "revision", "pages", "elements", "zones")]
    for t in index:
        rows.append((t.name, t.form_name, t.revision or "-", str(len(t.pages)), str(sum(p.elements for p in t.pages)),
                     str(sum(p.zones for p in t.pages))))
    widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
    for k, r in enumerate(rows):
        click.echo("  ".join(c.ljust(w) for c, w in zip(r, widths)).rstrip())
        if k == 0:
            click.echo("  ".join("-" * w for w in widths))
    pairs = alike_templates(index, CheckSettings(), neighbours)
    for p in pairs:
        a, b = index.info(p.row), index.info(p.other)
        na, nb = int(index.rows[p.row][1]), int(index.rows[p.other][1])
        what = "revisions that no element tells apart" if p.same_form else "too alike: pages would be ambiguous"
        click.echo(f"warning: {a.name} page {na} and {b.name} page {nb} are {what} "
                   f"({p.support:.0%} of {b.name}'s elements in place on a clean page of {a.name}; lead {p.margin:g})")
    click.echo(f"{len(index)} template(s), {index.n_pages} page(s), {len(index.problems)} damaged, {len(pairs)} alike pair(s)")
    sys.exit(EXIT_FLAGGED if pairs or index.problems else EXIT_PASS)


@main.command(epilog=EXIT_HELP)
@click.argument("template", type=click.Path(exists=True))
@click.argument("inbox", type=click.Path(exists=True, file_okay=False))
@optgroup.group("Watching")
@optgroup.option("--out", "out_dir", required=True, type=click.Path(file_okay=False),
                 help="Folder for records.jsonl, review.html and the pass/, review/ and error/ folders.")
@optgroup.option("--once", is_flag=True, help="Take the files there now, then stop (for cron).")
@optgroup.option("--settle", type=click.FloatRange(min=0), default=2.0, show_default=True, metavar="SECONDS",
                 help="Take a file once its size and time have been still this long (at once when renamed in).")
@input_options
@output_options("Records file instead of OUT/records.jsonl ('-' is refused: records are appended file by file).",
                "Review report instead of OUT/review.html.")
@tolerance_options
@batch_options(resume=False)
@handoff_options
def watch(template, inbox, out_dir, once, settle, json_out, report_out, dpi, password, max_pages, max_pixels,
          more_templates, expect_revision, tolerances, quiet, handoff, batch):
    """Watch INBOX: check each file dropped there against TEMPLATE, record it, and move it to
    OUT/pass/, OUT/review/ or OUT/error/.

    Records are appended to OUT/records.jsonl (each with where its file went); OUT/review.html
    shows the flagged pages still in review/ and error/. Killed at any moment and started again,
    every file ends in exactly one folder with exactly one set of records.
    """
    from .watch import WatchSettings, watch as run_watch

    if json_out == "-":
        raise click.UsageError("watch appends records file by file to a file; --json - is refused")
    if batch["scheduler"] and batch["engine"] != "dask":
        raise click.UsageError("--scheduler needs --engine dask")
    templates = load_templates([template, *more_templates])
    settings = CheckSettings(tolerances=tolerances, expect_revision=expected_revisions(expect_revision, templates), **handoff)
    limits = read_limits(dpi, password, max_pages, max_pixels, batch)
    try:
        options = BatchOptions(jobs=batch["jobs"], page_timeout=batch["page_timeout"], memory_mb=batch["memory_mb"],
                               engine=batch["engine"], scheduler=batch["scheduler"])
        ws = WatchSettings(settle=settle, once=once, records=json_out, report=report_out)
    except ValueError as exc:
        raise click.UsageError(str(exc)) from None
    make_bar = _progress(quiet)

    def log(line: str) -> None:
        if make_bar:
            from tqdm import tqdm

            tqdm.write(line, file=sys.stderr)
        else:
            click.echo(line, err=True)

    with interruptible():
        summary = run_watch(inbox, out_dir, templates, settings, limits, options, ws, log=log, progress_factory=make_bar)
    files = summary.files
    click.echo(f"{sum(files.values())} file(s) filed: {files['pass']} pass, {files['review']} review, {files['error']} error")
    sys.exit(EXIT_INCOMPLETE if summary.interrupted else EXIT_PASS if summary.all_pass else EXIT_FLAGGED)


@main.command()
@click.argument("template", type=click.Path(exists=True, dir_okay=False))
@click.option("-o", "--output", "output", required=True, type=click.Path(dir_okay=False), help="HTML file to write.")
@click.option("--reference", type=click.Path(exists=True, dir_okay=False),
              help="The reference the template was learned from, for the picture (default: looked for beside the template).")
@click.option("--dpi", type=float, help="Resolution of a reference scan that does not state one.")
def show(template, output, reference, dpi):
    """Write a page that shows TEMPLATE: every element, section and zone drawn on the reference and
    labelled, and a searchable table of the elements."""
    from .api import show_template

    try:
        (tmpl,) = api_load_templates(template)
    except TemplateError as exc:
        raise TemplateProblem(str(exc)) from None
    path = show_template(tmpl, output, reference=reference, template_path=template, dpi=dpi)
    click.echo(f"wrote {path}")


@main.command("promote")
@click.argument("template", type=click.Path(exists=True, dir_okay=False))
@click.argument("element_ids", nargs=-1, required=True)
@click.option("--page", type=click.IntRange(min=1), default=1, show_default=True, help="Template page the elements are on.")
@click.option("-o", "--output", "output", type=click.Path(dir_okay=False), help="Template file to write (default: TEMPLATE, rewritten).")
def promote_command(template, element_ids, page, output):
    """Take ELEMENT_IDS, set aside as probable fill-in when TEMPLATE was learned from a filled
    scan, into the form (see them first with ``layoutcheck show``)."""
    try:
        (tmpl,) = api_load_templates(template)
        for element_id in element_ids:
            tmpl = promote(tmpl, page, element_id)
    except TemplateError as exc:
        raise TemplateProblem(str(exc)) from None
    except LearnError as exc:
        raise click.ClickException(str(exc)) from None
    save_template(tmpl, output or template)
    click.echo(f"{tmpl.name} page {page}: {', '.join(element_ids)} now part of the form; wrote {output or template}")


@main.command()
@click.option("--out", "out_dir", default="demo-out", show_default=True, type=click.Path(file_okay=False), help="Folder for templates, records and the report.")
def demo(out_dir):
    """Learn the bundled sample forms, verify the bundled inputs, write records and a report."""
    from .demo import run_demo

    code = run_demo(Path(out_dir), echo=click.echo)
    sys.exit(code)


if __name__ == "__main__":  # pragma: no cover
    main()

"""Command line: ``layoutcheck learn``, ``layoutcheck verify``, ``layoutcheck demo``.

Thin on purpose: everything a library user would also need lives in the modules it calls.
Exit codes: 0 every page passed, 1 some page did not, 2 usage error or unreadable template.
"""

from __future__ import annotations

import json
import os
import sys
from pathlib import Path

import click

from . import __version__
from .sources import ReadLimits
from .template import TemplateError, load_template, save_template
from .verdict import VERDICTS, Tolerances

EXIT_PASS, EXIT_FLAGGED, EXIT_USAGE = 0, 1, 2


class TemplateProblem(click.ClickException):
    """An unreadable template: exit code 2, one line."""

    exit_code = EXIT_USAGE


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
            os.path.basename(r["source"]), str(r["page"] if r["page"] is not None else "-"), r["verdict"],
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


@main.command()
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
def verify(template, inputs, json_out, report_out, dpi, password, max_pages, max_pixels, more_templates,
           max_skew, max_scale_error, max_shift, element_tolerance, element_size_tolerance, min_support, quiet):
    """Check INPUT files (PDF, PNG, JPEG, TIFF) against TEMPLATE (a file or a folder of templates)."""
    from .check import CheckSettings, check_files

    templates = load_templates([template, *more_templates])
    tol = make_tolerances(max_skew, max_scale_error, max_shift, element_tolerance, element_size_tolerance, min_support)
    settings = CheckSettings(tolerances=tol)
    limits = ReadLimits(max_pixels=max_pixels, max_pages=max_pages, dpi=dpi, password=password)
    sink = _open_sink(json_out)
    records = []
    try:
        for rec in check_files(list(inputs), templates, settings, limits):
            records.append(rec)
            if sink is not None:
                sink.write(json.dumps(rec, ensure_ascii=False) + "\n")
                sink.flush()
    finally:
        if sink is not None and sink is not sys.stdout:
            sink.close()
    if report_out:
        _write_report(report_out, records, templates, tol)
    out = click.get_text_stream("stderr") if json_out == "-" else click.get_text_stream("stdout")
    if not quiet:
        click.echo(summary_table(records), file=out)
    elif records:
        click.echo(counts_line(records), file=out)
    sys.exit(EXIT_PASS if records and all(r["verdict"] == "pass" for r in records) else EXIT_FLAGGED)


def _open_sink(json_out):
    if not json_out:
        return None
    if json_out == "-":
        return sys.stdout
    return open(json_out, "w", encoding="utf-8")


def _write_report(path, records, templates, tolerances):
    from .report import write_report

    write_report(path, records, templates, tolerances)


@main.command()
@click.option("--out", "out_dir", default="demo-out", show_default=True, type=click.Path(file_okay=False), help="Folder for templates, records and the report.")
def demo(out_dir):
    """Learn the bundled sample forms, verify the bundled inputs, write records and a report."""
    from .demo import run_demo

    code = run_demo(Path(out_dir), echo=click.echo)
    sys.exit(code)


if __name__ == "__main__":  # pragma: no cover
    main()

"""Plain-text summaries of records for a terminal: a table a person reads, and verdict counts."""

from __future__ import annotations

import os

from .sources import printable
from .verdict import VERDICTS


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
    """``12 page(s): 10 pass, 2 shifted``."""
    counts = {v: 0 for v in VERDICTS}
    for r in records:
        counts[r["verdict"]] = counts.get(r["verdict"], 0) + 1
    parts = [f"{counts[v]} {v}" for v in reversed(VERDICTS) if counts[v]]
    return f"{len(records)} page(s): " + (", ".join(parts) if parts else "none")

"""Printing results as a table (for people) or CSV/JSON (for scripts)."""

from __future__ import annotations

import csv
import json
import sys
from typing import Sequence, TextIO

FORMATS = ("table", "csv", "json")


DEMO_EVIDENCE_HELP = ("count demo entries' invented odor notes (e.g. the deuterated isotopologues) as "
                      "observations (left out by default)")


def _cell(value) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        return f"{value:.3f}"
    return str(value)


def emit(rows: Sequence[dict], columns: Sequence[str], fmt: str = "table", *,
         out: TextIO | None = None, max_width: int = 48) -> None:
    """Write rows (dicts) with the given columns in the chosen format."""
    out = out or sys.stdout
    if fmt == "json":
        json.dump([{c: r.get(c) for c in columns} for r in rows], out, indent=2, default=str)
        out.write("\n")
        return
    if fmt == "csv":
        writer = csv.writer(out, lineterminator="\n")
        writer.writerow(columns)
        for r in rows:
            writer.writerow([_cell(r.get(c)) for c in columns])
        return
    texts = [[_cell(r.get(c)) for c in columns] for r in rows]
    texts = [[t if len(t) <= max_width else t[: max_width - 1] + "…" for t in row] for row in texts]
    widths = [max([len(c)] + [len(row[i]) for row in texts]) for i, c in enumerate(columns)]
    out.write("  ".join(c.ljust(w) for c, w in zip(columns, widths)).rstrip() + "\n")
    out.write("  ".join("-" * w for w in widths) + "\n")
    for row in texts:
        out.write("  ".join(t.ljust(w) for t, w in zip(row, widths)).rstrip() + "\n")


def progress_bar(total: int, description: str, *, unit: str, enabled: bool = True):
    """A tqdm bar on stderr, shown only to a person at a terminal."""
    from tqdm import tqdm

    return tqdm(total=total, desc=description, unit=unit, file=sys.stderr,
                disable=not (enabled and sys.stderr.isatty()))

"""Saving a Comparison: the tables, the decision record, the summary, the report.

Files (our names): ``comparisons.csv``, ``groups.csv``, ``ledger.csv`` (rows
set aside), ``decision.json``, ``summary.txt`` and ``report.html``.  Every
file is rendered in memory first, so a failure while rendering writes
nothing; each is then written atomically (temporary file, rename).  A folder
that already holds any of them is refused unless ``force``.
"""

from __future__ import annotations

import os

from ..output import prepare_folder, safe_csv_text, write_atomic

__all__ = ["OUTPUT_FILES", "render_files", "save"]

OUTPUT_FILES = ("comparisons.csv", "groups.csv", "ledger.csv", "decision.json",
                "summary.txt", "report.html")


def render_files(result) -> dict[str, str]:
    """Return the text of every output file, keyed by file name."""
    from .html import html_report
    return {
        "comparisons.csv": safe_csv_text(result.comparisons),
        "groups.csv": safe_csv_text(result.groups),
        "ledger.csv": safe_csv_text(result.ledger.to_frame()),
        "decision.json": result.decision.to_json() + "\n",
        "summary.txt": result.summary() + "\n",
        "report.html": html_report(result),
    }


def save(result, folder, force: bool = False) -> list[str]:
    """Write every output file of ``result`` into ``folder``; return the paths."""
    folder = prepare_folder(folder, OUTPUT_FILES, force=force)
    texts = render_files(result)
    paths = []
    for name in OUTPUT_FILES:
        path = os.path.join(folder, name)
        write_atomic(path, texts[name])
        paths.append(path)
    return paths

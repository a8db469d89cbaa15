"""Saving a Comparison: the tables, the decision record, the summary, the report.

Files (our names): ``comparisons.csv``, ``groups.csv``, ``ledger.csv`` (rows
set aside), ``decision.json``, ``summary.txt`` and ``report.html``.  Every
file is rendered in memory first, so a failure while rendering writes
nothing; the set is then written all or none (temporary files, then renames;
see :func:`famwise.report.output.write_files`).  A folder
that already holds any of them is refused unless ``force``.
"""

from __future__ import annotations

from .output import prepare_folder, safe_csv_text, write_files

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
    # All the files or none: an interruption leaves the folder as it was.
    return write_files(folder, {name: texts[name] for name in OUTPUT_FILES})

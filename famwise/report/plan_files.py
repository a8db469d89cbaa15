"""Saving a plan: ``power.csv``, ``power.json``, ``power.txt``, ``power.html`` and
``power.svg`` (the power curves as an image file).

Rendered in memory first, then written all or none
(:func:`famwise.report.output.write_files`); a folder that already holds any
of them is refused unless ``force``.
"""

from __future__ import annotations

from .output import prepare_folder, safe_csv_text, write_files

__all__ = ["PLAN_FILES", "render_plan_files", "save_plan"]

PLAN_FILES = ("power.csv", "power.json", "power.txt", "power.html", "power.svg")


def render_plan_files(result) -> dict[str, str]:
    from .plan_html import curves_svg, plan_html, standalone_svg
    curves = curves_svg(result)
    return {"power.csv": safe_csv_text(result.table), "power.json": result.to_json() + "\n",
            "power.txt": result.summary() + "\n", "power.html": plan_html(result, curves),
            "power.svg": standalone_svg(curves[0])}


def save_plan(result, folder, force: bool = False) -> list[str]:
    folder = prepare_folder(folder, PLAN_FILES, force=force)
    texts = render_plan_files(result)
    return write_files(folder, {name: texts[name] for name in PLAN_FILES})

"""The ``report`` command (the file edge of :mod:`prioritize.report.proposal`).

A plain function with typer-annotated parameters; the application registers it with
``app.command("report")(report_command)``.  Heavy imports happen inside it so that
``prioritize --help`` stays fast.
"""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Optional

import typer

from .. import CAUTION
from ..console import friendly


def report_paths_text(paths) -> str:
    """What was written, and which file to open."""
    html, figures = paths[0], paths[1:]
    folder = figures[0].parent if figures else None
    return (f"Report written to {html} (open it in a browser; self-contained)"
            + (f"\n  figures as PNG and SVG in {folder}" if folder else ""))


@friendly
def report_command(
    ranked: Annotated[Path, typer.Argument(
        exists=True, dir_okay=False, help="Ranked table from `prioritize rank` (any of its formats).")],
    night: Annotated[Optional[Path], typer.Option(
        "--night", exists=True, dir_okay=False, help="Night plan from `prioritize night -o PLAN` "
                                                     "(adds the altitude chart).")] = None,
    season: Annotated[Optional[Path], typer.Option(
        "--season", exists=True, dir_okay=False, help="Season table from `prioritize season -o TABLE` "
                                                      "(adds the visibility chart).")] = None,
    output: Annotated[Optional[Path], typer.Option(
        "--output", "-o", help="HTML file (default: <ranked>_report.html beside the table); the "
                               "figures go to <name>_figures/ beside it.")] = None,
):
    """Write a self-contained HTML report: diagrams, budget, summary and assumptions.

    Figures (HR and Kiel diagrams with tracks; for a cluster the colour-magnitude
    and rotation diagrams; significance against lifetime; the detectability map on
    the HR diagram; the exposure budget; with --night / --season the altitude and
    visibility charts) are embedded in the page and also written as PNG and SVG.

    Example: prioritize report ranked.csv --night plan.csv --season season.csv -o report.html
    """
    from ..errors import CatalogError
    from .proposal import report_for_file

    if output is not None and output.suffix.lower() not in (".html", ".htm"):
        raise CatalogError("the report is an HTML file: give a name ending in .html", path=str(output))
    typer.echo(report_paths_text(report_for_file(ranked, output, night, season)))
    typer.echo(f"Caution: {CAUTION}")

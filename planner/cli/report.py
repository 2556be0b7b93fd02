"""``kplan report``: the design report."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from ..inputs.choices import PAPERS as PAPER_CHOICES
from .app import app
from .options import MAX_TRIALS


@app.command()
def report(
    plan: Annotated[Path, typer.Argument(help="plan file (TOML)")],
    recipe: Annotated[Path, typer.Argument(help="recipe CSV")],
    out_path: Annotated[Path, typer.Option("--out", help="where to write the report", metavar="PATH")] = Path(
        "report.pdf"
    ),
    html: Annotated[bool, typer.Option("--html", help="write HTML instead of PDF", metavar="")] = False,
    paper: Annotated[
        str, typer.Option(help=f"paper size: {' | '.join(PAPER_CHOICES)}", metavar="TEXT")
    ] = "A4",
    trials: Annotated[
        int, typer.Option(help="Monte-Carlo experiments", min=0, max=MAX_TRIALS, metavar="INTEGER")
    ] = 2000,
    seed: Annotated[
        int, typer.Option(help="seed of the Monte-Carlo random numbers", min=0, metavar="INTEGER")
    ] = 0,
    design_json: Annotated[
        Path | None, typer.Option("--design", help="design.json from kplan design", metavar="PATH")
    ] = None,
) -> None:
    """Print the design report: verdict, recipe, plots, checks with fixes, parameters and correlations."""
    from .paper_output import _paper_output

    _paper_output("report", plan, recipe, out_path, html, paper, trials, seed, design_json)

"""``kplan sheet``: the prep sheet for the bench."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from ..inputs.choices import PAPERS as PAPER_CHOICES
from .app import app
from .options import MAX_TRIALS


@app.command()
def sheet(
    plan: Annotated[Path, typer.Argument(help="plan file (TOML)")],
    recipe: Annotated[Path, typer.Argument(help="recipe CSV")],
    out_path: Annotated[
        Path, typer.Option("--out", help="where to write the prep sheet", metavar="PATH")
    ] = Path("prep.pdf"),
    html: Annotated[bool, typer.Option("--html", help="write HTML instead of PDF", metavar="")] = False,
    paper: Annotated[
        str, typer.Option(help=f"paper size: {' | '.join(PAPER_CHOICES)}", metavar="TEXT")
    ] = "A4",
    trials: Annotated[
        int,
        typer.Option(
            help="Monte-Carlo experiments behind the bands", min=0, max=MAX_TRIALS, metavar="INTEGER"
        ),
    ] = 500,
    seed: Annotated[
        int, typer.Option(help="seed of the Monte-Carlo random numbers", min=0, metavar="INTEGER")
    ] = 0,
) -> None:
    """Print the prep sheet: stocks and how to make them, each tube's volumes in order, expected
    absorbance with its band, a measurement checklist and the safety notes."""
    from .paper_output import _paper_output

    _paper_output("sheet", plan, recipe, out_path, html, paper, trials, seed)

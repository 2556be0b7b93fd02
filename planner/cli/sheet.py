"""``kplan sheet``: the prep sheet for the bench."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

from .app import app
from .options import HtmlFlag, McSeed, PaperSize, PlanFile, RecipeFile, path_option, trials_option


@app.command()
def sheet(
    plan: PlanFile,
    recipe: RecipeFile,
    out_path: Annotated[Path, path_option("where to write the prep sheet", "--out")] = Path("prep.pdf"),
    html: HtmlFlag = False,
    paper: PaperSize = "A4",
    trials: Annotated[int, trials_option("Monte-Carlo experiments behind the bands")] = 500,
    seed: McSeed = 0,
) -> None:
    """Print the prep sheet: stocks and how to make them, each tube's volumes in order, expected
    absorbance with its band, a measurement checklist and the safety notes."""
    from .paper_output import paper_output

    paper_output("sheet", plan, recipe, out_path, html, paper, trials, seed)

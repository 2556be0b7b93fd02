"""``kplan report``: the design report."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

from .app import app
from .options import HtmlFlag, McSeed, PaperSize, PlanFile, RecipeFile, path_option, trials_option


@app.command()
def report(
    plan: PlanFile,
    recipe: RecipeFile,
    out_path: Annotated[Path, path_option("where to write the report", "--out")] = Path("report.pdf"),
    html: HtmlFlag = False,
    paper: PaperSize = "A4",
    trials: Annotated[int, trials_option("Monte-Carlo experiments")] = 2000,
    seed: McSeed = 0,
    design_json: Annotated[Path | None, path_option("design.json from kplan design", "--design")] = None,
) -> None:
    """Print the design report: verdict, recipe, plots, checks with fixes, parameters and correlations."""
    from .paper_output import paper_output

    paper_output("report", plan, recipe, out_path, html, paper, trials, seed, design_json)

"""``kplan design``: choose tube volumes on the glassware's grid."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from ..inference.design_criteria import CRITERIA as DESIGN_CRITERIA
from ..inputs.plan import load_plan
from .app import UserError, app, dump_json, out
from .app import safe_text as S
from .options import MAX_TUBES
from .show import print_design


@app.command()
def design(
    plan: Annotated[Path, typer.Argument(help="plan file (TOML)")],
    out_dir: Annotated[Path | None, typer.Option("--out", help="folder for recipe.csv and design.json")] = None,
    tubes: Annotated[int | None, typer.Option(help="number of tubes (overrides design.tubes)", min=1,
                                              max=MAX_TUBES)] = None,
    criterion: Annotated[str | None, typer.Option(
        help=f"what to optimise: {' | '.join(DESIGN_CRITERIA)} (overrides design.criterion)")] = None,
    robust: Annotated[bool | None, typer.Option(
        "--robust/--no-robust", help="average over the guesses' uncertainty (overrides design.robust)")] = None,
    seed: Annotated[int, typer.Option(help="seed of the exchange algorithm's random starts", min=0)] = 0,
    as_json: Annotated[bool, typer.Option("--json", help="print the design summary as JSON")] = False,
) -> None:
    """Choose tube volumes on the glassware's grid that resolve K as precisely as possible."""
    from ..inputs.files import check_output_folder, write_atomic_many
    from ..inputs.recipe import recipe_to_csv
    from ..jobs.design import design as run_design

    if criterion is not None and criterion not in DESIGN_CRITERIA:
        raise UserError(f"--criterion {criterion}: choose one of {', '.join(DESIGN_CRITERIA)}")
    if out_dir is not None:
        check_output_folder(out_dir)  # before the search, not after it
    p = load_plan(plan)
    d = run_design(p, tubes=tubes, criterion=criterion, robust=robust, seed=seed)
    summary = d.summary()
    if out_dir is not None:
        # one unit: a recipe.csv beside a design.json from another run would be worse than neither
        write_atomic_many({out_dir / "recipe.csv": recipe_to_csv(d.recipe, p),
                           out_dir / "design.json": dump_json(summary) + "\n"})
    if as_json:
        print(dump_json(summary))
        return
    print_design(d, p)
    if out_dir is not None:
        out.print(f"wrote {S(out_dir / 'recipe.csv')} and {S(out_dir / 'design.json')}")

"""``kplan stocks``: how to make each stock and how much a recipe needs."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from .app import app, dump_json
from .options import JsonFlag, PlanFile


@app.command()
def stocks(
    plan: PlanFile,
    recipe: Annotated[Path | None, typer.Argument(help="recipe CSV, for the volumes needed")] = None,
    as_json: JsonFlag = False,
    scarce: Annotated[
        list[str] | None,
        typer.Option(
            "--scarce",
            help="plan this stock as scarce: the smallest flask that holds what the recipe needs and the "
            "least reagent the balance allows (repeatable)",
            metavar="ID",
        ),
    ] = None,
) -> None:
    """How to make each stock (mass to weigh, flask, uncertainty, what sets the mass) and how much a
    recipe needs."""
    from ..inputs.plan import load_plan
    from ..inputs.recipe import read_recipe_csv
    from ..jobs.stocks.needs import stock_needs
    from .show import print_stock_needs

    p = load_plan(plan)
    r = read_recipe_csv(recipe, p) if recipe else None
    needs = stock_needs(p, r, scarce=tuple(scarce or ()))
    if as_json:
        from ..paper.json_out import stocks_json

        print(dump_json(stocks_json(p.title, needs)))
        return
    print_stock_needs(p, needs, r is not None)

"""``kplan new``: write a commented starter plan from a built-in scenario."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from .app import DEMO_SCENARIO, SCENARIOS, UserError, app, out, scenario_text
from .app import safe_text as S


@app.command()
def new(
    path: Annotated[Path, typer.Argument(help="where to write the starter plan")],
    scenario: Annotated[
        str, typer.Option(help=f"built-in scenario: {', '.join(SCENARIOS)}", metavar="TEXT")
    ] = DEMO_SCENARIO,
    force: Annotated[bool, typer.Option(help="overwrite an existing file", metavar="")] = False,
) -> None:
    """Write a commented starter plan from a built-in scenario."""
    from ..inputs.files import check_output_file, write_atomic
    from ..inputs.plan import parse_plan_text

    text = scenario_text(scenario)
    check_output_file(path)
    if path.exists() and not force:
        raise UserError(f"{path} exists: choose another path or pass --force")
    parse_plan_text(text)  # the shipped scenarios must always validate
    write_atomic(path, text)
    out.print(f"wrote {S(path)} (scenario '{scenario}'); edit it, then run: kplan check {S(path)}")

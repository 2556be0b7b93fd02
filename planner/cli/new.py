"""``kplan new``: write a commented starter plan from a built-in scenario."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from .app import DEMO_SCENARIO, SCENARIOS, UserError, app, out, parse_scenario, scenario_files, scenario_text
from .app import safe_text as S
from .options import flag_option, text_option


@app.command()
def new(
    path: Annotated[Path, typer.Argument(help="where to write the starter plan")],
    scenario: Annotated[str, text_option(f"built-in scenario: {', '.join(SCENARIOS)}")] = DEMO_SCENARIO,
    force: Annotated[bool, flag_option("overwrite an existing file")] = False,
) -> None:
    """Write a commented starter plan from a built-in scenario."""
    from ..inputs.files import check_output_file, write_atomic_many

    text = scenario_text(scenario)
    check_output_file(path)
    extra = {path.parent / name: body for name, body in scenario_files(scenario).items()}
    for p in (path, *extra):
        if p.exists() and not force:
            raise UserError(f"{p} exists: choose another path or pass --force")
    parse_scenario(scenario, text)  # the shipped scenarios must always validate
    write_atomic_many({path: text, **extra})  # the plan and the files it names, together or not at all
    also = f" and {', '.join(S(p) for p in extra)}" if extra else ""
    out.print(f"wrote {S(path)}{also} (scenario '{scenario}'); edit it, then run: kplan check {S(path)}")

"""``kplan series``: plan a classic hand-made series and say whether it can answer its question."""

from __future__ import annotations

import json
import sys
from pathlib import Path
from typing import Annotated

import typer
from rich.markup import escape
from rich.table import Table

from ..inputs.plan import load_plan
from ..jobs.classic import METHODS
from .app import UserError, app, out


@app.command()
def series(
    plan: Annotated[Path, typer.Argument(help="plan file (TOML)")],
    method: Annotated[str, typer.Option(help=f"which classic series: {' | '.join(METHODS)}")],
    out_dir: Annotated[Path | None, typer.Option("--out", help="folder for recipe.csv and series.json")] = None,
    as_json: Annotated[bool, typer.Option("--json", help="print one JSON object instead of tables")] = False,
    points: Annotated[int | None, typer.Option(help="job: number of mole fractions (default 9)", min=1)] = None,
    total: Annotated[str | None, typer.Option(
        help="job: total [M]0 + [L]0 per tube, e.g. '2 mM' (default: the largest that stays in the linear range)")
    ] = None,
) -> None:
    """Plan a classic series (Job's continuous variation, …) on the plan's glassware; exit 0 when it can
    answer its question, 1 when it cannot."""
    from ..inputs.files import write_atomic
    from ..inputs.recipe import recipe_to_csv
    from ..inputs.units import UnitError, parse_quantity
    from ..jobs.classic import run_series

    if method not in METHODS:
        raise UserError(f"--method {method}: choose one of {', '.join(METHODS)}")
    total_M = None
    if total is not None:
        try:
            total_M = parse_quantity(total, "concentration")
        except UnitError as exc:
            raise UserError(f"--total {total}: {exc}") from None
    p = load_plan(plan)
    r = run_series(p, method, points=points, total_M=total_M)
    summary = r.summary()
    text = json.dumps(summary, indent=2, allow_nan=False)
    if out_dir is not None:
        write_atomic(out_dir / "recipe.csv", recipe_to_csv(r.recipe, p))
        write_atomic(out_dir / "series.json", text + "\n")
    if as_json:
        print(text)
    else:
        print_series(r, p)
        if out_dir is not None:
            out.print(f"wrote {out_dir / 'recipe.csv'} and {out_dir / 'series.json'}")
    sys.exit(r.exit_code)


def print_series(r, p) -> None:
    """Verdict, the method's findings, the tubes and the checks."""
    from ..paper import fmt

    out.print(f"[bold]{escape(r.title)}[/bold] — {r.method} series")
    out.print(f"Question: {escape(r.question)}")
    colour = "green" if r.answers else "red"
    out.print(f"Verdict: [bold {colour}]{'answers it' if r.answers else 'cannot answer it'}[/] — "
              f"{escape(r.verdict_reason)}")
    for line in r.notes:
        out.print(f"  • {escape(line)}")
    a = r.assessment
    rows = a.tube_rows()
    dispensed = r.recipe.dispensed_ids(p)
    step = p.glassware.step_mL
    t = Table(title="Tubes")
    for c in ("tube", *(f"{s} / mL" for s in dispensed), "M tot", "L tot", "A ± sd", *r.columns):
        t.add_column(c, justify="right")
    lo, hi = a.model.linear_range
    for i, tube in enumerate(r.recipe.tubes):
        A = rows[i]["absorbance"]
        a_txt = f"{A:.3f} ± {rows[i]['absorbance_sd']:.3f}"
        if not lo <= A <= hi:
            a_txt = f"[red]{a_txt} out[/red]"
        t.add_row(escape(tube), *(fmt.volume(r.recipe.column(s)[i], step) for s in dispensed),
                  fmt.conc(a.state.totals_M[i, 0]), fmt.conc(a.state.totals_M[i, 1]), a_txt,
                  *(f"{float(v[i]):.3f}" for v in r.columns.values()))
    out.print(t)
    col = {"pass": "green", "warn": "yellow", "fail": "red"}
    t = Table(title="Checks")
    for c in ("check", "status", "what was found / what to do"):
        t.add_column(c)
    for c in r.checks:
        t.add_row(c.id, f"[{col[c.status]}]{c.status}[/]", escape(c.message))
    out.print(t)

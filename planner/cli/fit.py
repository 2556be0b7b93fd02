"""``kplan fit``: fit measured readings with the plan's model."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import numpy as np
import typer
from rich.table import Table

from ..inputs.plan import load_plan
from ..paper import fmt
from .app import UserError, app, dump_json, out
from .app import safe_text as S


@app.command()
def fit(
    plan: Annotated[Path, typer.Argument(help="plan file (TOML)")],
    readings: Annotated[Path, typer.Argument(help="CSV: the recipe columns plus an 'absorbance' column")],
    as_json: Annotated[bool, typer.Option("--json", help="print one JSON object instead of tables")] = False,
) -> None:
    """Fit measured readings with the plan's model, and compare the result with the plan's promise."""
    from ..inputs.recipe import parse_recipe_with_column, read_text_file
    from ..jobs.fit import ABSORBANCE_COLUMNS, Readings, fit_readings

    p = load_plan(plan)
    # read here by the recipe CSV's own rules (quoted labels, comments only above the header, limits)
    recipe, absorbance = parse_recipe_with_column(read_text_file(readings, "readings"), p, ABSORBANCE_COLUMNS,
                                                  str(readings))
    data = Readings(recipe, absorbance)
    _check_absorbances(data, readings)
    f = fit_readings(p, data)
    if as_json:
        print(dump_json(f.summary()))
        return
    out.print(f"[bold]{S(f.title)}[/bold] — fit of {f.recipe.n_tubes} readings")
    if not f.converged:
        out.print("[red]the fit did not converge: check the readings and the plan's guesses[/red]")
    t = Table(title="Fitted parameters")
    for c in ("parameter", "estimate", "SE", "SE the plan promised"):
        t.add_column(c, justify="right")
    for n, e, se_, pr in zip(f.names, f.estimate, f.se, f.promised_se, strict=True):
        t.add_row(S(n), fmt.sig(float(e), 4), fmt.sig(float(se_), 2), fmt.sig(float(pr), 2))
    out.print(t)
    verdict = ("the scatter matches the error model" if f.p_value > 0.05 else
               "the scatter is larger than the error model predicts: look for a bad tube, drift or a wrong model")
    out.print(f"χ² = {f.chi2:.2f} on {f.dof} degrees of freedom (p = {f.p_value:.2f}): {verdict}")
    t = Table(title="Residuals")
    for c in ("tube", "measured A", "fitted A", "residual", "standardised"):
        t.add_column(c, justify="right")
    for i, tube in enumerate(f.recipe.tubes):
        z = float(f.standardised[i])
        zt = f"{z:+.2f}" if abs(z) < 3 else f"[red]{z:+.2f}[/red]"
        t.add_row(S(tube), f"{f.absorbance[i]:.3f}", f"{f.fitted[i]:.3f}", f"{f.residual[i]:+.4f}", zt)
    out.print(t)


MAX_ABSORBANCE = 10.0  # no photometer reads beyond this; a larger number is a typo or another quantity


def _check_absorbances(data, source: Path) -> None:
    """Refuse a reading that is not a finite absorbance within ±MAX_ABSORBANCE, naming its tube."""
    a = np.asarray(data.absorbance, dtype=float)
    bad = np.flatnonzero(~np.isfinite(a) | (np.abs(a) > MAX_ABSORBANCE))
    if bad.size:
        i = int(bad[0])
        raise UserError(f"{source}, tube {data.recipe.tubes[i]}: absorbance {a[i]:g} is not a reading: "
                        f"write a finite number between {-MAX_ABSORBANCE:g} and {MAX_ABSORBANCE:g}")

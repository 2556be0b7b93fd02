"""``kplan fit``: fit measured readings with the plan's model."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from ..inputs.text import plural
from .app import app, dump_json, out
from .app import safe_text as S


@app.command()
def fit(
    plan: Annotated[Path, typer.Argument(help="plan file (TOML)")],
    readings: Annotated[Path, typer.Argument(help="CSV: the recipe columns plus an 'absorbance' column")],
    as_json: Annotated[
        bool, typer.Option("--json", help="print one JSON object instead of tables", metavar="")
    ] = False,
    exclude: Annotated[
        str | None,
        typer.Option("--exclude", metavar="TUBES", help="tubes to leave out, comma-separated, e.g. T3,T7"),
    ] = None,
    keep_out_of_range: Annotated[
        bool,
        typer.Option(
            "--keep-out-of-range",
            help="fit readings outside the linear range too (left out by default)",
            metavar="",
        ),
    ] = False,
) -> None:
    """Fit measured readings with the plan's model, and compare the result with the plan's promise.
    Exit code 1 when the readings do not determine the constants."""
    from ..inputs.plan import load_plan
    from ..jobs.compile import compile_study
    from ..jobs.measure.fit import check_absorbances, fit_study
    from .options import read_points

    p = load_plan(plan)
    study = compile_study(p)
    skip = tuple(x.strip() for x in (exclude or "").split(",") if x.strip())
    data = read_points(readings, p, study, readings=True)
    check_absorbances(data.absorbance, data.recipe.tubes, str(readings))
    f = fit_study(study, data, exclude=skip, keep_out_of_range=keep_out_of_range)
    if as_json:
        print(dump_json(f.summary()))
    else:
        _print_fit(f, plan, readings, skip)
    if not f.determined:
        raise typer.Exit(1)


def _print_fit(f, plan: Path, readings: Path, skip: tuple[str, ...]) -> None:
    from rich.table import Table

    from ..paper import fmt

    out.print(
        f"[bold]{S(f.title)}[/bold] — fit of {int(f.used.sum())} of {plural(f.recipe.n_tubes, 'reading')}"
    )
    for tube, why in f.excluded:
        hint = " (--keep-out-of-range keeps it)" if "linear range" in why else ""
        out.print(f"[yellow]left out[/yellow] {S(tube)}: {S(why)}{hint}")
    if not f.determined:
        out.print(f"[red]not determined:[/red] {S(f.reason)}")
    t = Table(title="Fitted parameters")
    for c in ("parameter", "estimate", "SE", "95 % interval (profile)", "SE the plan promised"):
        t.add_column(c, justify="right")
    for n, e, se_, pr in zip(f.names, f.estimate, f.se, f.promised_se, strict=True):
        ci = "—"
        if n == f"log_beta[{f.target}]" and f.profile_ci95 is not None:
            lo, hi = f.profile_ci95
            ci = (
                f"{fmt.sig(lo, 4) if lo is not None else '(open)'} – "
                f"{fmt.sig(hi, 4) if hi is not None else '(open)'}"
            )
        t.add_row(S(n), fmt.sig(float(e), 4), fmt.sig(float(se_), 2), ci, fmt.sig(float(pr), 2))
    out.print(t)
    if f.dof >= 1 and f.determined:
        out.print(
            f"χ² = {f.chi2:.2f} on {f.dof} degrees of freedom (upper tail p = {f.p_value:.2f}, lower "
            f"tail p = {f.p_low:.2f}): {f.chi2_verdict}"
        )
    elif f.determined:
        out.print(f.chi2_verdict)
    if f.interval_note:
        out.print(f"[yellow]{S(f.interval_note)}[/yellow]")
    for tube, z, shift in f.suspects:
        cmd = f"kplan fit {plan} {readings} --exclude {','.join((*skip, tube))}"
        out.print(
            f"[red]suspect[/red] {S(tube)}: its reading lies {shift:+.3f} from what the other tubes predict "
            f"(z = {z:+.1f}); to leave it out: {S(cmd)}"
        )
    _print_residuals(f)


def _print_residuals(f) -> None:
    import numpy as np
    from rich.table import Table

    t = Table(title="Residuals")
    for c in ("tube", "measured A", "fitted A", "residual", "standardised"):
        t.add_column(c, justify="right")
    for i, tube in enumerate(f.recipe.tubes):
        z = float(f.standardised[i])
        zt = "—" if not np.isfinite(z) else f"{z:+.2f}"
        if not f.used[i]:
            zt = f"{zt} (left out)"
        elif f.outliers[i]:
            zt = f"[red]{zt} suspect[/red]"
        fa = f"{f.fitted[i]:.3f}" if np.isfinite(f.fitted[i]) else "—"
        rs = f"{f.residual[i]:+.4f}" if np.isfinite(f.residual[i]) else "—"
        t.add_row(S(tube), f"{f.absorbance[i]:.3f}", fa, rs, zt)
    out.print(t)

"""``kplan series``: plan a classic hand-made series and say whether it can answer its question."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Annotated

import typer

from ..inputs.choices import SERIES_METHODS as METHODS
from ..inputs.limits import MAX_REPLICATES, MAX_TUBES
from .app import UserError, app, dump_json, out
from .app import safe_text as S
from .options import JsonFlag, PlanFile, count_option, path_option, text_option

# the parameters of planner.jobs.classic.run_series, as the options of this command that set them
OPTION_OF = {
    "points": "--points",
    "total_M": "--total",
    "excess_M": "--excess",
    "limiting": "--limiting",
    "tubes": "--replicates",
    "vary": "--vary",
    "max_ratio": "--max-ratio",
}


OutDir = Annotated[Path | None, path_option("folder for recipe.csv and series.json", "--out")]
Method = Annotated[str, text_option(f"which classic series: {' | '.join(METHODS)}")]
Points = Annotated[
    int | None,
    count_option(
        "job: number of mole fractions (default 9); mole-ratio: number of tubes (default 10)", MAX_TUBES
    ),
]
Total = Annotated[
    str | None,
    text_option(
        "the concentration the method holds: job — [M]0 + [L]0 per tube (default: the largest "
        "in the linear range); calibration — the limiting reagent's (default: full conversion reads "
        "mid-range); mole-ratio — the fixed reagent's (default: the largest in the linear range)"
    ),
]
Limiting = Annotated[
    str | None,
    text_option("calibration: the reagent converted, M or L (default: L, or M for complexes richer in L)"),
]
Excess = Annotated[
    str | None,
    text_option(
        "calibration: the other reagent's concentration, e.g. '0.1 M' (default: what converts "
        "99.9 %, else 99 %, over the guess's range)"
    ),
]
Replicates = Annotated[
    int | None, count_option("calibration: replicate calibration tubes (default 1)", MAX_REPLICATES)
]
OldReplicates = Annotated[
    int | None, count_option("older spelling of --replicates", MAX_REPLICATES, hidden=True)
]
Vary = Annotated[
    str | None, text_option("mole-ratio: the rising reagent, L (metal fixed, default) or M (ligand fixed)")
]
MaxRatio = Annotated[
    float | None,
    typer.Option(
        help="mole-ratio: highest ratio rising/fixed (default 2.5 × the richest complex's ratio)",
        metavar="FLOAT",
    ),
]
SurveyRecipe = Annotated[
    Path | None,
    path_option("survey: the tubes to choose the wavelength for (default: the evenly stepped ligand series)"),
]


@app.command()
def series(
    plan: PlanFile,
    method: Method,
    out_dir: OutDir = None,
    as_json: JsonFlag = False,
    points: Points = None,
    total: Total = None,
    limiting: Limiting = None,
    excess: Excess = None,
    replicates: Replicates = None,
    tubes: OldReplicates = None,
    vary: Vary = None,
    max_ratio: MaxRatio = None,
    recipe: SurveyRecipe = None,
) -> None:
    """Plan a classic series on the plan's glassware — Job's continuous variation (job), the 'complete
    conversion' tube (calibration), the mole-ratio series (mole-ratio), the wavelength survey over the
    plan's bands (survey) — and say whether it can answer its question: exit 0 when it can, 1 when it
    cannot."""
    from ..inputs.files import check_output_folder
    from ..inputs.plan import load_plan

    _validate_method(method)
    if tubes is not None and replicates is not None:
        raise UserError("--tubes is the older spelling of --replicates: give one of them")
    replicates = replicates if replicates is not None else tubes
    # run_series' parameters as the options give them (in the order their errors are reported)
    params = {
        "points": points,
        "total_M": total,
        "limiting": limiting,
        "excess_M": excess,
        "tubes": replicates,
        "vary": vary,
        "max_ratio": max_ratio,
    }
    _validate_options(method, params, recipe)
    for key in ("total_M", "excess_M"):
        params[key] = _concentration(OPTION_OF[key], params[key])
    if out_dir is not None:  # before the work; the outputs may not overwrite the plan or the recipe
        check_output_folder(out_dir, ("recipe.csv", "series.json"), (plan, recipe))
    p = load_plan(plan)
    given = None
    if recipe is not None:
        from ..inputs.recipe import read_recipe_csv

        given = read_recipe_csv(recipe, p)
    r = _run(p, method, params, given)
    _emit(r, p, out_dir, as_json)
    sys.exit(r.exit_code)


def _validate_method(method: str) -> None:
    from ..jobs.classic import METHODS

    if method not in METHODS:
        raise UserError(f"--method {method}: choose one of {', '.join(METHODS)}")


def _validate_options(method: str, params: dict, recipe: Path | None) -> None:
    """Refuse an option given to a method it does not apply to (``params`` named as run_series names them)."""
    from ..jobs.classic import METHOD_OPTIONS

    given = {OPTION_OF[k].removeprefix("--"): v for k, v in params.items()} | {"recipe": recipe}
    for name, value in given.items():
        if value is not None and method not in METHOD_OPTIONS[name]:
            raise UserError(
                f"--{name} applies to --method {' / '.join(METHOD_OPTIONS[name])}, not to {method}: "
                f"leave it out"
            )


def _concentration(option: str, value: str | None) -> float | None:
    """The concentration an option gives, in mol/L (None when it is not given)."""
    from ..inputs.units import UnitError, parse_quantity

    if value is None:
        return None
    try:
        return parse_quantity(value, "concentration")
    except UnitError as exc:
        raise UserError(f"{option} {value}: {exc}") from None


def _emit(r, p, out_dir: Path | None, as_json: bool) -> None:
    """Write the series' files (with --out), then print its JSON or its tables."""
    text = dump_json(r)
    if out_dir is not None:
        _write(out_dir, r, p, text)
    if as_json:
        print(text)
        return
    print_series(r, p)
    if out_dir is not None and r.recipe.n_tubes:
        out.print(f"wrote {S(out_dir / 'recipe.csv')} and {S(out_dir / 'series.json')}")
    elif out_dir is not None:
        out.print(f"wrote {S(out_dir / 'series.json')} (no tubes: the series cannot be made)")


def _run(p, method: str, params: dict, given):
    """The series job, its parameter errors named by this command's options."""
    from ..inputs.plan import PlanError
    from ..jobs.classic import run_series

    try:
        return run_series(p, method, recipe=given, **params)
    except PlanError as exc:  # the series' parameters are this command's options
        if exc.key in OPTION_OF:
            raise UserError(f"{OPTION_OF[exc.key]}: {as_options(exc.message)}") from None
        raise


def as_options(message: str) -> str:
    """A job's message with the parameter names that read as code (``total_M``, ``max_ratio``) written
    as the options that set them; plain words (points, limiting) stay words."""
    import re

    names = [k for k in OPTION_OF if "_" in k]
    return re.sub(r"\b(" + "|".join(names) + r")\b", lambda m: OPTION_OF[m.group(1)], message)


def _write(out_dir: Path, r, p, text: str) -> None:
    """recipe.csv and series.json as one unit (a recipe beside the JSON of another run would mislead);
    a series that cannot be made has no recipe, only its series.json."""
    from ..inputs.files import write_atomic, write_atomic_many
    from ..inputs.recipe import recipe_to_csv

    if r.recipe.n_tubes:
        write_atomic_many(
            {out_dir / "recipe.csv": recipe_to_csv(r.recipe, p), out_dir / "series.json": text + "\n"}
        )
    else:
        write_atomic(out_dir / "series.json", text + "\n")


def print_series(r, p) -> None:
    """Verdict, the method's findings, the tubes and the checks (every text through safe_text)."""
    from .show import STATUS_COLOUR, print_checks, reading_texts, totals_columns, tube_table

    out.print(f"[bold]{S(r.title)}[/bold] — {S(r.method)} series")
    out.print(f"Question: {S(r.question)}")
    colour = "green" if r.answers else "red"
    out.print(
        f"Verdict: [bold {colour}]{'answers it' if r.answers else 'cannot answer it'}[/] — "
        f"{S(r.verdict_reason)}"
    )
    for line in r.notes:
        out.print(f"  • {S(line)}")
    a = r.assessment
    if a is None:
        for c in r.checks:
            out.print(f"[{STATUS_COLOUR[c.status]}]{S(c.id)}[/]: {S(c.message)}")
        return
    columns = {
        **totals_columns(a.state),
        "A ± sd": reading_texts(a),
        **{S(k): [f"{float(x):.3f}" for x in v] for k, v in r.columns.items()},
    }
    out.print(tube_table("Tubes", r.recipe, p, p.glassware.step_mL, columns))
    print_checks(r.checks)

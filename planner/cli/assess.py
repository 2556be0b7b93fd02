"""``kplan assess``: judge a recipe against its plan."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from .app import app, dump_json
from .options import JsonFlag, McSeed, PlanFile, parse_at, read_points, trials_option, with_progress


@app.command()
def assess(
    plan: PlanFile,
    recipe: Annotated[
        Path,
        typer.Argument(
            help="recipe CSV: tube, then one column per stock (mL); for a titration: step, aliquot_mL"
        ),
    ],
    as_json: JsonFlag = False,
    trials: Annotated[int, trials_option("Monte-Carlo experiments (0: Cramér–Rao only)")] = 2000,
    seed: McSeed = 0,
    at: Annotated[
        list[str] | None,
        typer.Option(
            "--at",
            help="assess as if the true constant were different: NAME=LOGBETA (repeatable)",
            metavar="NAME=LOGBETA",
        ),
    ] = None,
) -> None:
    """Judge a recipe: can it resolve K? Precision, checks with fixes, and every tube's expected reading.
    Exit code 0 resolved, 1 unresolved or only bounded, 2 bad input."""
    from ..inputs.plan import load_plan
    from ..jobs.compile import compile_study
    from ..jobs.plan.assess import assess_study
    from .show import print_assessment, print_spectra

    p = load_plan(plan)
    study = compile_study(p)
    r = read_points(recipe, p, study)
    at_values = parse_at(at or [], list(study.model.species))
    job = assess_study
    if study.spectra is not None:  # imported only here: the factor analysis needs scipy.stats
        from ..jobs.spectra.assess import assess_spectra

        job = assess_spectra
    extra = {} if study.spectra is not None else {"suggest": True}  # what would help: one wavelength
    a = with_progress(
        lambda prog: job(study, r, trials=trials, seed=seed, at=at_values, progress=prog, **extra),
        trials,
        quiet=as_json,
        tubes=r.n_tubes * (study.spectra.size // 20 + 1 if study.spectra is not None else 1),
    )
    if as_json:
        print(dump_json(a))
    else:
        print_assessment(a, p)
        print_spectra(a.spectra, p.target, p.optics.wavelength_nm, a.detection)
    if a.verdict is not None and a.verdict != "resolved":
        raise typer.Exit(1)  # the recipe fails: unresolved or only bounded (exit codes in the README)

"""``kplan design``: choose tube volumes on the glassware's grid."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from ..inputs.choices import CRITERIA as DESIGN_CRITERIA
from ..inputs.limits import MAX_ADDITIONS
from ..inputs.text import plural
from .app import UserError, app, dump_json, out
from .app import safe_text as S
from .options import MAX_TUBES, PlanFile, count_option, flag_option, path_option, seed_option, text_option

OutDir = Annotated[Path | None, path_option("folder for recipe.csv and design.json", "--out")]
Tubes = Annotated[int | None, count_option("number of tubes (overrides design.tubes)", MAX_TUBES)]
Additions = Annotated[
    int | None,
    count_option("titration plans: number of additions (overrides titration.additions)", MAX_ADDITIONS),
]
Criterion = Annotated[
    str | None, text_option(f"what to optimise: {' | '.join(DESIGN_CRITERIA)} (overrides design.criterion)")
]
Robust = Annotated[
    bool | None,
    flag_option("average over the guesses' uncertainty (overrides design.robust)", "--robust/--no-robust"),
]
ExchangeSeed = Annotated[int, seed_option("seed of the exchange algorithm's random starts")]
DesignJson = Annotated[bool, flag_option("print the design summary as JSON", "--json")]
After = Annotated[
    Path | None,
    path_option("readings so far (recipe CSV + absorbance): fit them and design the next tubes", "--after"),
]


@app.command()
def design(
    plan: PlanFile,
    out_dir: OutDir = None,
    tubes: Tubes = None,
    additions: Additions = None,
    criterion: Criterion = None,
    robust: Robust = None,
    seed: ExchangeSeed = 0,
    as_json: DesignJson = False,
    after: After = None,
) -> None:
    """Choose tube volumes on the glassware's grid that resolve K as precisely as possible
    (with --after: the next tubes, given what the readings so far taught)."""
    from ..inference.design_criteria import CRITERIA as DESIGN_CRITERIA
    from ..inputs.files import check_output_folder
    from ..inputs.plan import load_plan
    from ..jobs.plan.design import design as run_design

    if criterion is not None and criterion not in DESIGN_CRITERIA:
        raise UserError(f"--criterion {criterion}: choose one of {', '.join(DESIGN_CRITERIA)}")
    if out_dir is not None:
        # before the search, not after it; the outputs may not overwrite the plan or the readings
        names = ("recipe.csv", "schedule.csv", "design.json", "all-readings.csv")
        check_output_folder(out_dir, names, (plan, after))
    p = load_plan(plan)
    if after is not None:
        if p.titration is not None:
            raise UserError(
                "--after: a titration continues in its own cell, and sequential design is for separately "
                "made tubes: design the titration again with the readings' lessons in the plan's guesses"
            )
        return _next_batch(p, after, out_dir, tubes, robust, seed, as_json)
    if p.titration is not None:
        if tubes is not None and additions is not None:
            raise UserError("--tubes and --additions: a titration plan takes --additions only")
        # --tubes is the older spelling of --additions on a titration plan (the points are additions)
        return _titration(p, out_dir, additions if additions is not None else tubes, robust, as_json)
    if additions is not None:
        raise UserError("--additions applies to titration plans ([titration]); use --tubes for tubes")
    if p.optics.has_spectra:
        from ..jobs.compile import compile_study
        from ..jobs.spectra.design import design_spectra

        d = design_spectra(compile_study(p), tubes=tubes, criterion=criterion, robust=robust, seed=seed)
    else:
        d = run_design(p, tubes=tubes, criterion=criterion, robust=robust, seed=seed)
    _emit(d, p, out_dir, as_json)
    if d.verdict is not None and d.verdict != "resolved":
        raise typer.Exit(1)  # the best design cannot reach goal_se (or fails a check): README, exit codes


def _emit(d, p, out_dir: Path | None, as_json: bool) -> None:
    """Write recipe.csv and design.json (with --out), then print the JSON or the design's tables."""
    from ..inputs.files import write_atomic_many
    from ..inputs.recipe import recipe_to_csv
    from .show import model_check_alternatives, print_design, print_spectra

    text = dump_json(d)
    if out_dir is not None:
        # one unit: a recipe.csv beside a design.json from another run would be worse than neither
        write_atomic_many(
            {
                out_dir / "recipe.csv": recipe_to_csv(d.recipe, p),
                out_dir / "design.json": text + "\n",
            }
        )
    if as_json:
        print(text)
        return
    print_design(d, p)
    print_spectra(d.assessment.spectra, p.target, p.optics.wavelength_nm, model_check_alternatives(d))
    if out_dir is not None:
        out.print(f"wrote {S(out_dir / 'recipe.csv')} and {S(out_dir / 'design.json')}")


def _next_batch(p, after: Path, out_dir: Path | None, tubes, robust, seed: int, as_json: bool) -> None:
    """``kplan design --after``: fit the readings so far, then design the next tubes or say to stop."""
    import numpy as np

    from ..inputs.files import write_atomic_many
    from ..inputs.readings import read_readings_csv, readings_to_csv
    from ..inputs.recipe import concat_recipes, recipe_to_csv
    from ..jobs.compile import compile_study
    from ..jobs.measure.fit import check_absorbances
    from ..jobs.plan.sequential import next_batch

    study = compile_study(p)
    readings = read_readings_csv(after, p)
    check_absorbances(readings.absorbance, readings.recipe.tubes, str(after))
    nb = next_batch(study, readings, tubes=tubes, seed=seed, robust=robust)
    text = dump_json(nb)
    going = nb.recipe is not None and not nb.stop
    if out_dir is not None and going:
        both = concat_recipes([readings.recipe, nb.recipe])
        template = np.concatenate([readings.absorbance, np.full(nb.recipe.n_tubes, np.nan)])
        write_atomic_many(
            {
                out_dir / "recipe.csv": recipe_to_csv(nb.recipe, p),
                out_dir / "all-readings.csv": readings_to_csv(both, p, template),
                out_dir / "design.json": text + "\n",
            }
        )
    if as_json:
        print(text)
        return
    _print_next(p, nb)
    if out_dir is not None and going:
        out.print(
            f"wrote {S(out_dir / 'recipe.csv')} (the next tubes), {S(out_dir / 'all-readings.csv')} (every "
            f"tube: fill in the new absorbances, then kplan fit reads it as one file) and "
            f"{S(out_dir / 'design.json')}"
        )


def _print_next(p, nb) -> None:
    from ..paper import fmt
    from .show import reading_texts, tube_table

    out.print(f"[bold]{S(p.title)}[/bold] — after {plural(nb.measured.recipe.n_tubes, 'reading')}")
    out.print(S(nb.reason))
    if nb.stop or nb.recipe is None:
        out.print("[yellow]stop:[/yellow] no next batch")
        return
    a = nb.assessment
    row = {tube: i for i, tube in enumerate(a.recipe.tubes)}
    readings = reading_texts(a, flag=False)
    columns = {"A ± sd (at what was learned)": [readings[row[t]] for t in nb.recipe.tubes]}
    out.print(
        tube_table(
            f"The next {plural(nb.recipe.n_tubes, 'tube')}", nb.recipe, p, p.glassware.step_mL, columns
        )
    )
    target = S(p.target)
    even_over_design = nb.se_after_even / nb.se_after if nb.se_after > 0 else float("nan")
    word = "better" if even_over_design >= 1 else "worse"
    out.print(
        f"SE(log β[{target}]) of all {nb.everything.n_tubes} tubes together: "
        f"[bold]{fmt.sig(nb.se_now, 2)}[/bold] now → [bold]{fmt.sig(nb.se_after, 2)}[/bold] expected with "
        f"these; with an evenly spaced batch instead: {fmt.sig(nb.se_after_even, 2)} (these are "
        f"×{fmt.sig(_at_least_1(even_over_design), 2)} {word})"
    )
    bad = [c for c in nb.assessment.checks if c.status != "pass"]
    if bad:
        out.print("checks of all tubes together:")
        for c in bad:
            out.print(f"  [yellow]{c.status}[/yellow] {S(c.id)}: {S(c.message)}")
    else:
        out.print("every check passes for all tubes together")


def _titration(p, out_dir: Path | None, additions, robust, as_json: bool) -> None:
    """``kplan design`` for a plan with [titration]: the aliquot schedule."""
    from rich.table import Table

    from ..inputs.files import write_atomic_many
    from ..inputs.schedule import schedule_to_csv
    from ..jobs.compile import compile_study
    from ..jobs.titration.titrate import design_titration
    from ..paper import fmt

    d = design_titration(compile_study(p), additions=additions, robust=robust)
    text = dump_json(d)
    if out_dir is not None:
        write_atomic_many(
            {
                out_dir / "schedule.csv": schedule_to_csv(d.schedule),
                out_dir / "design.json": text + "\n",
            }
        )
    if as_json:
        print(text)
        return
    t = d.study.bench.titration
    out.print(f"[bold]{S(p.title)}[/bold] — titration schedule")
    out.print(
        f"cell: {t.start_volume_mL:g} mL of {S(t.cell)}; titrant {S(d.titrant)}; "
        f"{plural(d.schedule.aliquot_mL.size, 'addition')}; {plural(d.candidates, 'schedule')} tried, "
        f"{d.feasible} inside the "
        f"linear range over the guess's range"
    )
    tab = Table(title="Designed schedule")
    for c in ("step", "aliquot / mL", "added so far / mL", "cell / mL", "A ± sd"):
        tab.add_column(c, justify="right")
    a, sd = d.assessment.state.absorbance, d.assessment.absorbance_sd
    cell_dec = max(fmt.step_decimals(t.step_mL), fmt.step_decimals(t.start_volume_mL))
    for i, step in enumerate(d.schedule.steps):
        tab.add_row(
            S(step),
            fmt.volume(d.schedule.aliquot_mL[i], t.step_mL),
            fmt.volume(d.schedule.added_mL[i], t.step_mL),
            f"{t.start_volume_mL + d.schedule.added_mL[i]:.{cell_dec}f}",
            f"{a[i]:.3f} ± {sd[i]:.3f}",
        )
    out.print(tab)
    equal_over_design = d.se_equal_over_design
    word = "better" if equal_over_design >= 1 else "worse"
    out.print(
        f"SE(log β[{S(d.study.target)}]) at the guess: [bold]{fmt.sig(d.se_target, 2)}[/bold]; equal "
        f"aliquots: {fmt.sig(d.se_equal, 2)} (×{fmt.sig(_at_least_1(equal_over_design), 2)} {word})"
    )
    if out_dir is not None:
        out.print(f"wrote {out_dir / 'schedule.csv'} and {out_dir / 'design.json'}")


def _at_least_1(ratio: float) -> float:
    """A ratio of SEs written as "× r better" or "× r worse": r ≥ 1 either way."""
    return ratio if ratio >= 1 else 1 / ratio

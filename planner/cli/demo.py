"""``kplan demo``: the built-in scenario through everything the tool does."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from .app import DEMO_SCENARIO, app, dump_json, out, scenario_text
from .app import safe_text as S
from .options import path_option


@app.command()
def demo(
    out_dir: Annotated[Path, path_option("folder for the demo's files", "--out")] = Path("kplan-demo"),
    spectra: Annotated[
        bool,
        typer.Option(
            "--spectra",
            help="also plan, assess, simulate and fit the whole-spectrum example (every wavelength of the "
            "window; about twice as long)",
        ),
    ] = False,
) -> None:
    """Run the built-in scenario through everything the tool does and say what it wrote."""
    from ..inputs.files import check_output_folder, write_atomic
    from ..inputs.plan import parse_plan_text
    from ..inputs.recipe import parse_recipe_csv, recipe_to_csv
    from ..jobs.compile import compile_study
    from ..jobs.demo import demo_recipe_csv
    from ..jobs.plan.assess import assess_study
    from ..jobs.plan.design import design_study
    from .show import print_assessment, print_design

    check_output_folder(out_dir)  # before a minute of work, not after it
    text = scenario_text(DEMO_SCENARIO)
    p = parse_plan_text(text, source=f"scenario {DEMO_SCENARIO}")
    study = compile_study(p)  # once for every step of the demo
    written = [write_atomic(out_dir / "plan.toml", text)]
    out.rule("1. the usual hand-made recipe: constant metal, evenly spaced ligand")
    csv_text = demo_recipe_csv(p)
    written.append(write_atomic(out_dir / "recipe-even.csv", csv_text))
    r_even = parse_recipe_csv(csv_text, p)
    a_even = assess_study(study, r_even, trials=2000, seed=0)
    print_assessment(a_even, p)
    written.append(write_atomic(out_dir / "assessment-even.json", dump_json(a_even) + "\n"))
    out.rule("2. the designed recipe")
    d = design_study(study, seed=0)
    print_design(d, p)
    written.append(write_atomic(out_dir / "recipe.csv", recipe_to_csv(d.recipe, p)))
    written.append(write_atomic(out_dir / "design.json", dump_json(d) + "\n"))
    out.rule("3. the designed recipe, assessed with Monte Carlo")
    a = assess_study(study, d.recipe, trials=2000, seed=0)
    print_assessment(a, p)
    written.append(write_atomic(out_dir / "assessment.json", dump_json(a) + "\n"))
    written.extend(_demo_paper(p, d, a, out_dir))
    if spectra:
        written.extend(_demo_spectra(out_dir))
    out.print("\n[bold]Wrote[/bold]")
    for w in written:
        out.print(f"  {S(w)}")
    out.print(
        f"Try: kplan check {S(out_dir / 'plan.toml')}   kplan assess {S(out_dir / 'plan.toml')} "
        f"{S(out_dir / 'recipe.csv')}"
    )
    if not spectra:
        out.print("Whole spectra (every wavelength an instrument records): kplan demo --spectra")


def _demo_paper(p, d, a, out_dir: Path) -> list[Path]:
    """Prep sheet and report of the designed recipe."""
    from ..inputs.files import write_atomic_bytes
    from ..jobs.stocks.needs import stock_needs
    from ..paper.render import prep_sheet as render_sheet
    from ..paper.render import report as render_report

    sheet_pdf = write_atomic_bytes(
        out_dir / "prep.pdf", render_sheet(p, d.recipe, a, stock_needs(p, d.recipe), order=p.glassware.order)
    )
    report_pdf = write_atomic_bytes(out_dir / "report.pdf", render_report(p, d.recipe, a, design=d))
    return [sheet_pdf, report_pdf]


SPECTRA_TRIALS = 1000  # the whole-spectrum Monte Carlo of the demo (the assessment's default is 2000)


def _demo_spectra(out_dir: Path) -> list[Path]:
    """Whole spectra: the example with two overlapping bands designed, assessed against the best single
    wavelength, measured (simulated) and fitted."""
    import numpy as np

    from ..inputs.files import write_atomic, write_atomic_bytes
    from ..inputs.plan import parse_plan_text
    from ..inputs.recipe import recipe_to_csv
    from ..inputs.spectra_readings import spectra_readings_to_csv
    from ..jobs.compile import compile_study
    from ..jobs.spectra.assess import assess_spectra
    from ..jobs.spectra.design import design_spectra
    from ..jobs.spectra.fit import fit_spectra
    from ..jobs.spectra.simulated import simulated_spectra
    from ..paper.render import fit_report
    from ..paper.render import report as render_report
    from .app import scenario_files
    from .fit import print_spectra_fit
    from .show import model_check_alternatives, print_assessment, print_design, print_spectra

    written = []
    text = scenario_text("spectra")
    for name, body in scenario_files("spectra").items():
        written.append(write_atomic(out_dir / name, body))
    written.append(write_atomic(out_dir / "spectra-plan.toml", text))
    p = parse_plan_text(text, source="scenario spectra", base_dir=out_dir)
    study = compile_study(p)
    out.rule("4. whole spectra: two complexes with overlapping bands, every wavelength 400–700 nm")
    d = design_spectra(study, seed=0)
    print_design(d, p)
    print_spectra(d.assessment.spectra, p.target, p.optics.wavelength_nm, model_check_alternatives(d))
    written.append(write_atomic(out_dir / "spectra-recipe.csv", recipe_to_csv(d.recipe, p)))
    written.append(write_atomic(out_dir / "spectra-design.json", dump_json(d) + "\n"))
    out.rule("5. the whole-spectrum design, assessed with Monte Carlo")
    a = assess_spectra(study, d.recipe, trials=SPECTRA_TRIALS, seed=0)
    print_assessment(a, p)
    print_spectra(a.spectra, p.target, p.optics.wavelength_nm, a.detection)
    written.append(write_atomic(out_dir / "spectra-assessment.json", dump_json(a) + "\n"))
    rep = render_report(p, d.recipe, a, design=d)
    written.append(write_atomic_bytes(out_dir / "spectra-report.pdf", rep))
    out.rule("6. simulated spectra of those tubes (every error source), fitted globally")
    readings = simulated_spectra(study, d.recipe, np.random.default_rng(1))
    written.append(write_atomic(out_dir / "spectra-readings.csv", spectra_readings_to_csv(readings, p)))
    f = fit_spectra(study, readings)
    print_spectra_fit(f, p)
    written.append(write_atomic(out_dir / "spectra-fit.json", dump_json(f) + "\n"))
    written.append(write_atomic_bytes(out_dir / "spectra-fit.pdf", fit_report(p, f)))
    return written

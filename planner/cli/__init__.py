"""The `kplan` command line: parse arguments, call one core function, print or write the result."""

from __future__ import annotations

import json
import math
import sys
import warnings
from importlib import resources
from pathlib import Path
from typing import Annotated

import numpy as np
import typer
from rich.console import Console
from rich.markup import escape
from rich.table import Table

from ..inference.design_criteria import CRITERIA as DESIGN_CRITERIA
from ..inputs.plan import PlanError, load_plan, parse_plan_text
from ..inputs.recipe import RecipeError, read_recipe_csv
from ..paper import fmt

app = typer.Typer(
    name="kplan",
    help="Plan, check and fit absorbance experiments that measure metal–ligand formation constants.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)
out = Console()
err = Console(stderr=True)

SCENARIOS = ("teaching", "stepwise", "proton")

DEMO_SCENARIO = "teaching"


class UserError(Exception):
    """Raised by the shell for bad input that is not a plan or recipe problem."""


def _user_errors() -> tuple[type[BaseException], ...]:
    from ..inference.design_criteria import DesignError
    from ..inference.fit_result import FitError
    from ..model.closed_forms import EquilibriumError
    from ..paper.sheets import RenderError
    from ..uncertainty.catalogue import GlasswareError
    from ..uncertainty.stocks import StockError

    return (PlanError, RecipeError, UserError, EquilibriumError, GlasswareError, StockError, DesignError,
            FitError, RenderError)


def scenario_text(name: str) -> str:
    """Text of a built-in scenario plan."""
    if name not in SCENARIOS:
        raise UserError(f"--scenario: unknown scenario '{name}'; choose one of {', '.join(SCENARIOS)}")
    return resources.files("planner.data").joinpath("scenarios", f"{name}.toml").read_text(encoding="utf-8")


# ----------------------------------------------------------------------------------------------------
@app.command()
def check(plan: Annotated[Path, typer.Argument(help="plan file (TOML)")]) -> None:
    """Validate a plan and show what was understood: species, constants, stocks, glassware."""
    p = load_plan(plan)
    out.print(f"[bold]{p.title}[/bold]  ({plan})")
    t = Table(title="Components")
    for c in ("component", "label", "charge / pH"):
        t.add_column(c)
    t.add_row("M", p.components.M.label, f"{p.components.M.charge:+d}")
    t.add_row("L", p.components.L.label, f"{p.components.L.charge:+d}")
    if p.components.H is not None:
        t.add_row("H", "H+", f"pH {p.components.H.pH:.2f} (buffered)")
    out.print(t)
    t = Table(title="Species and constants")
    for c in ("species", "formula", "log β (guess)", "± sd", "ε / L mol⁻¹ cm⁻¹", "fitted?"):
        t.add_column(c)
    for s in p.species:
        f = " ".join(f"{k}{v if v != 1 else ''}" for k, v in s.formula.items() if v)
        e = p.optics.epsilon.get(s.name)
        t.add_row(s.name, f, f"{s.log_beta:.2f}", f"{s.log_beta_sd:.2f}",
                  f"{e.value:g} ± {e.rsd:.0%}" if e else "—",
                  "yes" if s.log_beta_sd > 0 else "held fixed")
    for comp in ("M", "L"):
        e = p.optics.epsilon.get(comp)
        if e:
            t.add_row(f"{comp} (free)", comp, "—", "—", f"{e.value:g} ± {e.rsd:.0%}", "—")
    out.print(t)
    o = p.optics
    out.print(f"Optics: {o.wavelength_nm:g} nm, path {o.path_cm:g} cm, linear range "
              f"{o.linear_range[0]:g}–{o.linear_range[1]:g}, stray light {o.stray_light:g}, "
              f"noise k1={o.noise.k1:g} k2={o.noise.k2:g} k3={o.noise.k3:g}")
    t = Table(title="Stocks")
    for c in ("id", "label", "M", "L", "other ions", "rsd", "on hand", "dispenser"):
        t.add_column(c)
    for s in p.stock:
        d = p.dispenser_for(s.id)
        disp = f"{d.kind} {d.capacity_mL:g} mL ({d.cls})" if d else ("diluent" if s.diluent else "none")
        t.add_row(s.id, s.label, fmt.conc(s.conc["M"]) if "M" in s.conc else "",
                  fmt.conc(s.conc["L"]) if "L" in s.conc else "",
                  ", ".join(f"{k} {fmt.conc(v)}" for k, v in s.ions.items()),
                  f"{s.conc_rsd:.1%}", f"{s.on_hand:g} mL" if s.on_hand else "—", disp)
    out.print(t)
    g = p.glassware
    out.print(f"Tubes: {g.tube_volume_mL:g} mL, make-up {g.make_up}, grid {g.step_mL:g} mL, "
              f"min {g.min_volume_mL:g} mL, rinse {g.rinse_mL:g} mL, dead volume {g.dead_volume_mL:g} mL")
    from ..uncertainty.budget import plan_devices
    from ..uncertainty.delivery import delivery_uncertainty, flask_volume_uncertainty

    devices = plan_devices(p)
    t = Table(title="Glassware (from the catalogue)")
    for c in ("device", "tolerance", "u, full delivery", "source", "delivers"):
        t.add_column(c)
    for d, item in zip(p.glassware.dispenser, devices.items, strict=True):
        du = delivery_uncertainty(item, np.array([item.capacity_mL]))
        src = item.source + (" (from memory)" if item.from_memory else "")
        t.add_row(item.label, f"± {item.tolerance_mL:g} mL", f"{float(du.combined_mL[0]):.3g} mL", src,
                  ", ".join(d.stocks))
    if devices.flask is not None:
        fl = devices.flask
        src = fl.source + (" (from memory)" if fl.from_memory else "")
        t.add_row(fl.label, f"± {fl.tolerance_mL:g} mL", f"{flask_volume_uncertainty(fl):.3g} mL", src,
                  "make-up of every tube")
    out.print(t)
    d = p.design
    out.print(f"Design: {d.tubes} tubes, target {p.target}, criterion {d.criterion}, "
              f"robust {'yes' if d.robust else 'no'}, goal SE {d.goal_se:g}"
              + (f", fixed {', '.join(f'{k} {v:g} mL' for k, v in d.fixed.items())}" if d.fixed else ""))
    out.print("[green]plan OK[/green]")


@app.command()
def new(
    path: Annotated[Path, typer.Argument(help="where to write the starter plan")],
    scenario: Annotated[str, typer.Option(help=f"built-in scenario: {', '.join(SCENARIOS)}")] = DEMO_SCENARIO,
    force: Annotated[bool, typer.Option(help="overwrite an existing file")] = False,
) -> None:
    """Write a commented starter plan from a built-in scenario."""
    from ..inputs.files import write_atomic

    text = scenario_text(scenario)
    if path.exists() and not force:
        raise UserError(f"{path} exists: choose another path or pass --force")
    parse_plan_text(text)  # the shipped scenarios must always validate
    write_atomic(path, text)
    out.print(f"wrote {path} (scenario '{scenario}'); edit it, then run: kplan check {path}")


@app.command()
def assess(
    plan: Annotated[Path, typer.Argument(help="plan file (TOML)")],
    recipe: Annotated[Path, typer.Argument(help="recipe CSV: tube, then one column per stock (mL)")],
    as_json: Annotated[bool, typer.Option("--json", help="print one JSON object instead of tables")] = False,
    trials: Annotated[int, typer.Option(help="Monte-Carlo experiments (0: Cramér–Rao only)", min=0)] = 2000,
    seed: Annotated[int, typer.Option(help="seed of the Monte-Carlo random numbers")] = 0,
    at: Annotated[list[str] | None, typer.Option(
        "--at", help="assess as if the true constant were different: NAME=LOGBETA (repeatable)")] = None,
) -> None:
    """Judge a recipe: can it resolve K? Precision, checks with fixes, and every tube's expected reading."""
    from ..jobs.assess import assess as run_assess

    p = load_plan(plan)
    r = read_recipe_csv(recipe, p)
    at_values = parse_at(at or [])
    a = _with_progress(lambda prog: run_assess(p, r, trials=trials, seed=seed, at=at_values, progress=prog),
                       trials, quiet=as_json)
    if as_json:
        print(json.dumps(a.summary(), indent=2))
        return
    print_assessment(a, p)


def parse_at(items: list[str]) -> dict[str, float]:
    """'ML=4.3' pairs from repeated --at options."""
    out = {}
    for item in items:
        name, sep, value = item.partition("=")
        try:
            if not sep:
                raise ValueError
            out[name.strip()] = float(value)
        except ValueError:
            raise UserError(f"--at {item}: write NAME=LOGBETA, e.g. --at ML=4.3") from None
    return out


def _with_progress(run, trials: int, quiet: bool):
    """Run ``run(progress)`` with a rich progress bar on long Monte-Carlo runs."""
    if quiet or trials < 5000 or not err.is_terminal:
        return run(None)
    from rich.progress import Progress

    with Progress(console=err, transient=True) as bar:
        task = bar.add_task("Monte Carlo", total=trials)
        return run(lambda done, total: bar.update(task, completed=done))


def print_assessment(a, p) -> None:
    """Rich tables of an assessment: verdict first, then parameters, checks and tubes."""
    out.print(f"[bold]{escape(a.title)}[/bold]")
    vcol = {"resolved": "green", "bounded": "yellow", "unresolved": "red"}
    if a.verdict:
        out.print(f"Verdict: [bold {vcol[a.verdict]}]{a.verdict}[/] — {escape(a.verdict_reason)}")
    elif a.verdict_reason:
        out.print(escape(a.verdict_reason))
    if a.parameters:
        t = Table(title="Parameters")
        for c in ("parameter", "guess", "assumed true", "SE (Cramér–Rao)", "MC sd", "MC bias", "MC 95 %"):
            t.add_column(c, justify="right")
        for q in a.parameters:
            ci = q.get("mc_ci95")
            t.add_row(q["name"], fmt.sig(q["guess"], 4), fmt.sig(q["true"], 4), fmt.sig(q["se"], 2),
                      fmt.sig(q.get("mc_sd"), 2), fmt.sig(q.get("mc_bias"), 2),
                      f"{fmt.sig(ci[0], 4)} – {fmt.sig(ci[1], 4)}" if ci and ci[0] is not None else "—")
        out.print(t)
        if a.cramer_rao is not None and len(a.parameters) > 1:
            t = Table(title="Correlations")
            t.add_column("")
            for n in a.params.names:
                t.add_column(n, justify="right")
            for i, n in enumerate(a.params.names):
                t.add_row(n, *(fmt.sig(x, 2) for x in a.cramer_rao.corr[i]))
            out.print(t)
        if a.mc is not None and a.mc.failed_fraction > 0:
            out.print(f"Monte Carlo: {a.mc.failed_fraction:.1%} of fits failed")
    if a.profile is not None:
        pr = a.profile
        side = []
        if pr.low_unbounded:
            side.append("cannot be told from K → 0")
        if pr.high_unbounded:
            side.append("cannot be told from K → ∞")
        out.print(f"χ² profile of log β[{p.target}] (other parameters refitted; 3.84 = 95 % threshold)"
                  + (f" — {'; '.join(side)}" if side else ""))
        t = Table(show_header=True, box=None, pad_edge=False)
        picks = np.unique(np.linspace(0, pr.log_beta.size - 1, 9).round().astype(int))
        t.add_column("log β", justify="right")
        for k in picks:
            t.add_column(("K→0 " if k == 0 else "K→∞ " if k == pr.log_beta.size - 1 else "")
                         + f"{pr.log_beta[k]:.2f}", justify="right")
        t.add_row("Δχ²", *(fmt.sig(float(pr.delta_chi2[k]), 3) for k in picks))
        out.print(t)
    colour = {"pass": "green", "warn": "yellow", "fail": "red"}
    t = Table(title="Checks")
    for c in ("check", "status", "what was found / what to do"):
        t.add_column(c)
    for c in a.checks:
        t.add_row(c.id, f"[{colour[c.status]}]{c.status}[/]", escape(c.message))
    out.print(t)
    m = a.model
    r = a.recipe
    dispensed = r.dispensed_ids(p)
    t = Table(title="Tubes")
    for c in ("tube", *(f"{s} / mL" for s in dispensed), "M tot", "L tot",
              *(m.species), "A ± sd", "saturation", "I / M"):
        t.add_column(c, justify="right")
    rows = a.tube_rows()
    lo, hi = m.linear_range
    step = p.glassware.step_mL
    st = a.state
    for i, tube in enumerate(r.tubes):
        A = rows[i]["absorbance"]
        a_txt = f"{A:.3f} ± {rows[i]['absorbance_sd']:.3f}"
        if not lo <= A <= hi:
            a_txt = f"[red]{a_txt} out[/red]"
        t.add_row(escape(tube), *(fmt.volume(r.column(s)[i], step) for s in dispensed),
                  fmt.conc(st.totals_M[i, 0]), fmt.conc(st.totals_M[i, 1]),
                  *(fmt.conc(st.species_M[i, k]) for k in range(len(m.species))),
                  a_txt, f"{st.saturation[i]:.2f}", f"{st.ionic_strength_M[i]:.3g}")
    out.print(t)


@app.command()
def design(
    plan: Annotated[Path, typer.Argument(help="plan file (TOML)")],
    out_dir: Annotated[Path | None, typer.Option("--out", help="folder for recipe.csv and design.json")] = None,
    tubes: Annotated[int | None, typer.Option(help="number of tubes (overrides design.tubes)", min=1)] = None,
    criterion: Annotated[str | None, typer.Option(
        help=f"what to optimise: {' | '.join(DESIGN_CRITERIA)} (overrides design.criterion)")] = None,
    robust: Annotated[bool | None, typer.Option(
        "--robust/--no-robust", help="average over the guesses' uncertainty (overrides design.robust)")] = None,
    seed: Annotated[int, typer.Option(help="seed of the exchange algorithm's random starts")] = 0,
    as_json: Annotated[bool, typer.Option("--json", help="print the design summary as JSON")] = False,
) -> None:
    """Choose tube volumes on the glassware's grid that resolve K as precisely as possible."""
    from ..inputs.files import write_atomic
    from ..inputs.recipe import recipe_to_csv
    from ..jobs.design import design as run_design

    if criterion is not None and criterion not in DESIGN_CRITERIA:
        raise UserError(f"--criterion {criterion}: choose one of {', '.join(DESIGN_CRITERIA)}")
    p = load_plan(plan)
    d = run_design(p, tubes=tubes, criterion=criterion, robust=robust, seed=seed)
    summary = d.summary()
    if out_dir is not None:
        write_atomic(out_dir / "recipe.csv", recipe_to_csv(d.recipe, p))
        write_atomic(out_dir / "design.json", json.dumps(summary, indent=2) + "\n")
    if as_json:
        print(json.dumps(summary, indent=2))
        return
    print_design(d, p)
    if out_dir is not None:
        out.print(f"wrote {out_dir / 'recipe.csv'} and {out_dir / 'design.json'}")


def print_design(d, p) -> None:
    """The designed recipe, its promise and the comparison with an evenly spaced series."""
    s = d.summary()
    out.print(f"[bold]{escape(p.title)}[/bold] — design")
    out.print(f"criterion {d.criterion}, {'robust over the guess' if d.robust else 'at the guess only'}, "
              f"{d.recipe.n_tubes} tubes, seed {d.seed}; {d.n_candidates} candidate tubes on the grid, "
              f"{d.n_feasible} inside the linear range over the guess's range")
    for note in d.notes:
        out.print(f"[yellow]note:[/yellow] {escape(note)}")
    t = Table(title="Designed recipe")
    dispensed = d.recipe.dispensed_ids(p)
    for c in ("tube", *(f"{x} / mL" for x in dispensed), "A ± sd", "saturation"):
        t.add_column(c, justify="right")
    for i, row in enumerate(s["tubes"]):
        t.add_row(row["tube"], *(fmt.volume(d.recipe.column(x)[i], p.glassware.step_mL) for x in dispensed),
                  f"{row['absorbance']:.3f} ± {row['absorbance_sd']:.3f}", f"{row['saturation']:.2f}")
    out.print(t)
    target = p.target
    out.print(f"SE(log β[{target}]) at the guess: [bold]{fmt.sig(d.se_target, 2)}[/bold]; evenly spaced series "
              f"of {d.recipe.n_tubes} tubes: {fmt.sig(d.se_even, 2)} (×{fmt.sig(d.se_ratio_vs_even, 2)} better); "
              f"efficiency ≥ {math.floor(d.efficiency_bound * 1000) / 1000:.3f} of the best possible on these candidates")
    if d.se_across:
        t = Table(title=f"SE(log β[{target}]) if the truth differs from the guess")
        for c in (f"true log β[{target}]", "designed", "evenly spaced"):
            t.add_column(c, justify="right")
        for a, b, c in d.se_across:
            t.add_row(f"{a:.2f}", fmt.sig(b, 2), fmt.sig(c, 2))
        out.print(t)
    bad = [c for c in s["checks"] if c["status"] != "pass"]
    for c in bad:
        out.print(f"[yellow]{c['id']}[/yellow]: {escape(c['message'])}")


@app.command()
def fit(
    plan: Annotated[Path, typer.Argument(help="plan file (TOML)")],
    readings: Annotated[Path, typer.Argument(help="CSV: the recipe columns plus an 'absorbance' column")],
    as_json: Annotated[bool, typer.Option("--json", help="print one JSON object instead of tables")] = False,
) -> None:
    """Fit measured readings with the plan's model, and compare the result with the plan's promise."""
    from ..jobs.fit import fit_readings, read_readings_csv

    p = load_plan(plan)
    f = fit_readings(p, read_readings_csv(readings, p))
    if as_json:
        print(json.dumps(f.summary(), indent=2))
        return
    out.print(f"[bold]{escape(f.title)}[/bold] — fit of {f.recipe.n_tubes} readings")
    if not f.converged:
        out.print("[red]the fit did not converge: check the readings and the plan's guesses[/red]")
    t = Table(title="Fitted parameters")
    for c in ("parameter", "estimate", "SE", "SE the plan promised"):
        t.add_column(c, justify="right")
    for n, e, se_, pr in zip(f.names, f.estimate, f.se, f.promised_se, strict=True):
        t.add_row(n, fmt.sig(float(e), 4), fmt.sig(float(se_), 2), fmt.sig(float(pr), 2))
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
        t.add_row(escape(tube), f"{f.absorbance[i]:.3f}", f"{f.fitted[i]:.3f}", f"{f.residual[i]:+.4f}", zt)
    out.print(t)


PAPER_CHOICES = ("A4", "Letter")  # the same keys as planner.render.PAPERS (checked in the tests)


def _paper_output(kind: str, plan: Path, recipe: Path, out_path: Path, html: bool, paper: str, trials: int,
                  seed: int, design_json: Path | None = None) -> None:
    from ..inputs.files import write_atomic_bytes
    from ..jobs.assess import assess as run_assess
    from ..jobs.stock_needs import stock_needs
    from ..paper.render import PAPERS
    from ..paper.render import prep_sheet as render_sheet
    from ..paper.render import report as render_report
    from ..uncertainty.budget import require_glassware_fits

    if paper not in PAPERS:
        raise UserError(f"--paper {paper}: choose one of {', '.join(PAPERS)}")
    fmt_ = "html" if html else "pdf"
    p = load_plan(plan)
    r = read_recipe_csv(recipe, p)
    if kind == "sheet":
        require_glassware_fits(p, r)  # a sheet is followed at the bench: every volume must be deliverable
    a = _with_progress(lambda prog: run_assess(p, r, trials=trials, seed=seed, progress=prog), trials, quiet=False)
    if kind == "sheet":
        data = render_sheet(p, r, a, stock_needs(p, r), paper=paper, fmt=fmt_, order=p.glassware.order)
    else:
        design_summary = None
        if design_json is not None:
            try:
                design_summary = json.loads(design_json.read_text(encoding="utf-8"))
            except (OSError, json.JSONDecodeError) as exc:
                raise UserError(f"--design {design_json}: cannot read it as the JSON from kplan design ({exc})") from None
        data = render_report(p, r, a, design=design_summary, paper=paper, fmt=fmt_)
    write_atomic_bytes(out_path, data)
    out.print(f"wrote {out_path} ({len(data) / 1024:.0f} kB, {paper})")


@app.command()
def sheet(
    plan: Annotated[Path, typer.Argument(help="plan file (TOML)")],
    recipe: Annotated[Path, typer.Argument(help="recipe CSV")],
    out_path: Annotated[Path, typer.Option("--out", help="where to write the prep sheet")] = Path("prep.pdf"),
    html: Annotated[bool, typer.Option("--html", help="write HTML instead of PDF")] = False,
    paper: Annotated[str, typer.Option(help=f"paper size: {' | '.join(PAPER_CHOICES)}")] = "A4",
    trials: Annotated[int, typer.Option(help="Monte-Carlo experiments behind the bands", min=0)] = 500,
    seed: Annotated[int, typer.Option(help="seed of the Monte-Carlo random numbers")] = 0,
) -> None:
    """Print the prep sheet: stocks and how to make them, each tube's volumes in order, expected
    absorbance with its band, a measurement checklist and the safety notes."""
    _paper_output("sheet", plan, recipe, out_path, html, paper, trials, seed)


@app.command()
def report(
    plan: Annotated[Path, typer.Argument(help="plan file (TOML)")],
    recipe: Annotated[Path, typer.Argument(help="recipe CSV")],
    out_path: Annotated[Path, typer.Option("--out", help="where to write the report")] = Path("report.pdf"),
    html: Annotated[bool, typer.Option("--html", help="write HTML instead of PDF")] = False,
    paper: Annotated[str, typer.Option(help=f"paper size: {' | '.join(PAPER_CHOICES)}")] = "A4",
    trials: Annotated[int, typer.Option(help="Monte-Carlo experiments", min=0)] = 2000,
    seed: Annotated[int, typer.Option(help="seed of the Monte-Carlo random numbers")] = 0,
    design_json: Annotated[Path | None, typer.Option("--design", help="design.json from kplan design")] = None,
) -> None:
    """Print the design report: verdict, recipe, plots, checks with fixes, parameters and correlations."""
    _paper_output("report", plan, recipe, out_path, html, paper, trials, seed, design_json)


@app.command()
def stocks(
    plan: Annotated[Path, typer.Argument(help="plan file (TOML)")],
    recipe: Annotated[Path | None, typer.Argument(help="recipe CSV, for the volumes needed")] = None,
    as_json: Annotated[bool, typer.Option("--json", help="print one JSON object instead of tables")] = False,
) -> None:
    """How to make each stock (mass to weigh, flask, uncertainty) and how much a recipe needs."""
    from ..jobs.stock_needs import stock_needs

    p = load_plan(plan)
    r = read_recipe_csv(recipe, p) if recipe else None
    needs = stock_needs(p, r)
    if as_json:
        print(json.dumps({"title": p.title, "stocks": [n.summary() for n in needs]}, indent=2))
        return
    print_stock_needs(p, needs, r is not None)


def print_stock_needs(p, needs, with_recipe: bool) -> None:
    out.print(f"[bold]{p.title}[/bold] — stocks")
    t = Table(title="Preparation")
    for c in ("stock", "concentration", "how to make it", "u (rel.)", "plan assumes"):
        t.add_column(c)
    for n in needs:
        s = p.stock_by_id(n.id)
        conc = ", ".join(f"{k} {fmt.conc(v)}" for k, v in s.conc.items()) or "—"
        if n.preparation is not None:
            pr = n.preparation
            how = (f"weigh {pr.mass_g:.4f} g {pr.formula} (FW {pr.formula_weight_g_mol:.2f}), dissolve and make up "
                   f"to {pr.weighed_flask.capacity_mL:g} mL")
            for st in pr.steps:
                how += (f"; then {st.pipette.capacity_mL:g} mL of it to {st.flask.capacity_mL:g} mL "
                        f"({fmt.conc(st.to_conc_M)})")
            how = escape(how)
            if pr.mass_g < pr.min_weight_g:
                how += f" [red](below the {pr.min_weight_g:.3f} g minimum weight)[/red]"
            u = f"{pr.u_rel:.2%}"
            flag = "" if n.plan_rsd >= pr.u_rel * 0.999 else " [yellow](below what weighing gives)[/yellow]"
            assumed = f"{n.plan_rsd:.2%}{flag}"
        else:
            how = escape(n.problem or ("diluent" if s.diluent else
                                       "no formula given: add formula = '...' to compute the mass"))
            u, assumed = "—", f"{n.plan_rsd:.2%}"
        t.add_row(n.id, conc, how, u, assumed)
    out.print(t)
    if with_recipe:
        t = Table(title="Volumes needed (recipe + rinse + dead volume)")
        for c in ("stock", "recipe / mL", "tubes", "needed / mL", "on hand / mL", ""):
            t.add_column(c)
        for n in needs:
            ok = n.enough
            mark = "" if ok is None else ("[green]enough[/green]" if ok else "[red]NOT ENOUGH: make more[/red]")
            t.add_row(n.id, f"{n.recipe_mL:.2f}", str(n.deliveries), f"{n.needed_mL:.1f}",
                      f"{n.on_hand_mL:g}" if n.on_hand_mL is not None else "—", mark)
        out.print(t)


@app.command()
def demo(
    out_dir: Annotated[Path, typer.Option("--out", help="folder for the demo's files")] = Path("kplan-demo"),
) -> None:
    """Run the built-in scenario through everything the tool does and say what it wrote."""
    from ..inputs.files import write_atomic
    from ..inputs.recipe import parse_recipe_csv, recipe_to_csv
    from ..jobs.assess import assess as run_assess
    from ..jobs.demo import demo_recipe_csv
    from ..jobs.design import design as run_design

    text = scenario_text(DEMO_SCENARIO)
    p = parse_plan_text(text, source=f"scenario {DEMO_SCENARIO}")
    written = [write_atomic(out_dir / "plan.toml", text)]
    out.rule("1. the usual hand-made recipe: constant metal, evenly spaced ligand")
    csv_text = demo_recipe_csv(p)
    written.append(write_atomic(out_dir / "recipe-even.csv", csv_text))
    r_even = parse_recipe_csv(csv_text, p)
    a_even = run_assess(p, r_even, trials=2000, seed=0)
    print_assessment(a_even, p)
    written.append(write_atomic(out_dir / "assessment-even.json", json.dumps(a_even.summary(), indent=2) + "\n"))
    out.rule("2. the designed recipe")
    d = run_design(p, seed=0)
    print_design(d, p)
    written.append(write_atomic(out_dir / "recipe.csv", recipe_to_csv(d.recipe, p)))
    written.append(write_atomic(out_dir / "design.json", json.dumps(d.summary(), indent=2) + "\n"))
    out.rule("3. the designed recipe, assessed with Monte Carlo")
    a = run_assess(p, d.recipe, trials=2000, seed=0)
    print_assessment(a, p)
    written.append(write_atomic(out_dir / "assessment.json", json.dumps(a.summary(), indent=2) + "\n"))
    written.extend(_demo_paper(p, d, a, out_dir))
    out.print("\n[bold]Wrote[/bold]")
    for w in written:
        out.print(f"  {w}")
    out.print(f"Try: kplan check {out_dir / 'plan.toml'}   kplan assess {out_dir / 'plan.toml'} "
              f"{out_dir / 'recipe.csv'}")


def _demo_paper(p, d, a, out_dir: Path) -> list[Path]:
    """Prep sheet and report of the designed recipe."""
    from ..inputs.files import write_atomic_bytes
    from ..jobs.stock_needs import stock_needs
    from ..paper.render import prep_sheet as render_sheet
    from ..paper.render import report as render_report

    sheet_pdf = write_atomic_bytes(out_dir / "prep.pdf", render_sheet(p, d.recipe, a, stock_needs(p, d.recipe),
                                                                      order=p.glassware.order))
    report_pdf = write_atomic_bytes(out_dir / "report.pdf", render_report(p, d.recipe, a, design=d.summary()))
    return [sheet_pdf, report_pdf]


def main() -> None:
    """Console entry point: user errors become one line on stderr and exit code 2."""
    errors = _user_errors()
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("default")
            app()  # standalone: usage errors already exit 2 with a message
    except errors as exc:
        err.print(f"[red]error:[/red] {escape(str(exc))}", highlight=False, soft_wrap=True)
        sys.exit(2)


if __name__ == "__main__":  # pragma: no cover
    main()

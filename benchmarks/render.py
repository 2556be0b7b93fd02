"""Time to print: one prep sheet and one design report as PDF, against a baseline measured in the same run.

Baseline: WeasyPrint turning the *same* HTML into PDF with the figures taken out (for the prep sheet,
which has no figures, its own HTML). The ratio says what building the sheet and drawing the figures
add on top of the HTML → PDF step itself. Budgets (brief "sheets"): prep sheet ≤ 2 s, report ≤ 5 s.

The assessment (Monte Carlo) is computed once beforehand and is not part of the times: printing is
what is measured. The first call, which loads WeasyPrint, fonts and matplotlib, is reported apart.

Run: ``python benchmarks/render.py [--repeats N] [--plan examples/stepwise-weak.toml --recipe ...]``.
"""

from __future__ import annotations

import argparse
import re
import statistics
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
BUDGET_PREP_S, BUDGET_REPORT_S = 2.0, 5.0


def timed(fn, repeats: int) -> float:
    """Median wall time of ``repeats`` calls, s."""
    times = []
    for _ in range(repeats):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return statistics.median(times)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--plan", type=Path, default=None, help="plan file (default: the teaching scenario)")
    ap.add_argument("--recipe", type=Path, default=None, help="recipe CSV (default: the demo series)")
    ap.add_argument("--trials", type=int, default=2000)
    args = ap.parse_args()

    from planner.inputs.plan import load_plan, parse_plan_text
    from planner.inputs.recipe import parse_recipe_csv, read_recipe_csv
    from planner.jobs.demo import demo_recipe_csv
    from planner.jobs.plan.assess import assess
    from planner.jobs.stocks.needs import stock_needs
    from planner.paper import render

    if args.plan:
        plan = load_plan(args.plan)
    else:
        from importlib import resources

        plan = parse_plan_text(
            resources.files("planner.data").joinpath("scenarios", "teaching.toml").read_text(encoding="utf-8")
        )
    recipe = (
        read_recipe_csv(args.recipe, plan) if args.recipe else parse_recipe_csv(demo_recipe_csv(plan), plan)
    )
    a = assess(plan, recipe, trials=args.trials, seed=0)
    needs = stock_needs(plan, recipe)
    date = "2026-12-01"
    print(f"plan: {plan.title} — {recipe.n_tubes} tubes, assessment with {args.trials} trials (not timed)")

    t = time.perf_counter()
    render.prep_sheet(plan, recipe, a, needs, date=date)
    t_cold_prep = time.perf_counter() - t
    t = time.perf_counter()
    render.report(plan, recipe, a, date=date)
    t_cold_rep = time.perf_counter() - t
    print(
        f"first calls (load WeasyPrint and fonts, then matplotlib): prep sheet {t_cold_prep:.2f} s "
        f"[{'within' if t_cold_prep <= BUDGET_PREP_S else 'OVER'} budget], report {t_cold_rep:.2f} s "
        f"[{'within' if t_cold_rep <= BUDGET_REPORT_S else 'OVER'} budget]"
    )

    prep_html = render.prep_sheet(plan, recipe, a, needs, date=date, fmt="html").decode("utf-8")
    report_html = render.report(plan, recipe, a, date=date, fmt="html").decode("utf-8")
    bare_report = re.sub(r'<td class="fig">.*?</td>', "<td></td>", report_html, flags=re.S)

    t_prep_base = timed(lambda: render.html_to_pdf(prep_html), args.repeats)
    t_prep = timed(lambda: render.prep_sheet(plan, recipe, a, needs, date=date), args.repeats)
    t_rep_base = timed(lambda: render.html_to_pdf(bare_report), args.repeats)
    t_rep_html = timed(lambda: render.report(plan, recipe, a, date=date, fmt="html"), args.repeats)
    t_rep = timed(lambda: render.report(plan, recipe, a, date=date), args.repeats)

    rows = [
        ("prep sheet PDF", t_prep, t_prep_base, BUDGET_PREP_S),
        ("report PDF with figures", t_rep, t_rep_base, BUDGET_REPORT_S),
    ]
    print(f"\nmedian of {args.repeats} runs")
    print(f"{'':28s}{'time / s':>10s}{'baseline / s':>14s}{'ratio':>8s}{'budget / s':>12s}  ok")
    for name, tx, tb, budget in rows:
        print(
            f"{name:28s}{tx:10.3f}{tb:14.3f}{tx / tb:8.2f}{budget:12.1f}  {'yes' if tx <= budget else 'NO'}"
        )
    print(f"  of which figures + scan (report HTML alone): {t_rep_html:.3f} s")
    print("baseline: the same HTML to PDF without figures (prep sheet: its own HTML)")


if __name__ == "__main__":
    main()

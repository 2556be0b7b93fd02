"""Time to make a class set (``kplan cards``), against one prep sheet measured in the same run.

For 30 and 200 students of the teaching scenario: the class set (pooled design, jitter, every card
assessed with its χ² profile, pooled SEs), the class stock list, and every output file (cards.pdf,
key.pdf, key.csv, key.xlsx, stocks.pdf, stocks.csv), as the command makes them
(:func:`planner.cli.cards.make_class_files`: the students' cards are printed in a second process
while the first assesses them and prints the key). Baseline: one prep
sheet of the plan's designed recipe (assessment without Monte Carlo + PDF), the thing a class set
replaces N copies of. Budgets (issue 13, on a 2-core machine): 30 cards ≤ 5 s, 200 cards ≤ 30 s.
The first WeasyPrint call (fonts) is made before timing.

Run: ``python benchmarks/cards.py [--counts 30 200] [--repeats 1]``.
"""

from __future__ import annotations

import argparse
import statistics
import time
from importlib import resources

BUDGET_S = {30: 5.0, 200: 30.0}


def timed(fn, repeats: int) -> tuple[float, object]:
    times, res = [], None
    for _ in range(repeats):
        t = time.perf_counter()
        res = fn()
        times.append(time.perf_counter() - t)
    return statistics.median(times), res


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--counts", type=int, nargs="+", default=[30, 200])
    ap.add_argument("--repeats", type=int, default=1)
    ap.add_argument("--seed", type=int, default=0)
    args = ap.parse_args()

    from planner.cli.cards import make_class_files
    from planner.inputs.plan import parse_plan_text
    from planner.inputs.roster import roster_of_count
    from planner.jobs.compile import compile_study
    from planner.jobs.plan.assess import assess_study
    from planner.jobs.plan.design import design_study
    from planner.jobs.stocks.needs import stock_needs
    from planner.paper import render

    plan = parse_plan_text(
        resources.files("planner.data").joinpath("scenarios", "teaching.toml").read_text(encoding="utf-8")
    )
    study = compile_study(plan)
    recipe = design_study(study, seed=args.seed).recipe
    render.html_to_pdf("<p>warm-up</p>")

    def one_sheet():
        a = assess_study(study, recipe, trials=0)
        return render.prep_sheet(plan, recipe, a, stock_needs(plan, recipe), date="2026-12-01")

    t_sheet, _ = timed(one_sheet, max(args.repeats, 3))
    print(f"one prep sheet (assess + PDF): {t_sheet:.2f} s")
    for n in args.counts:
        roster = roster_of_count(n)
        parts = {}

        def run(roster=roster, parts=parts):
            cs, _, files = make_class_files(plan, roster, tubes=None, seed=args.seed, paper="A4")
            parts.update(sound=cs.sound, se=cs.se)
            return files

        t, _ = timed(run, args.repeats)
        se = parts["se"]
        print(
            f"{n:4d} cards: {t:6.2f} s = "
            f"{t / t_sheet:5.1f} prep sheets = {t / n:.3f} s per card; budget "
            f"{BUDGET_S.get(n, float('nan')):g} s; "
            f"sound={parts['sound']}"
        )
        print(
            f"      SE log β: card median {se['cards_median']:.4f}, pooled {se['pooled']:.4f}, "
            f"{n} × best {se['pooled_best_copies']:.4f}, {n} × even {se['pooled_even_copies']:.4f}, "
            f"pooled without stock errors {se['pooled_without_stock']:.4f}"
        )


if __name__ == "__main__":
    main()

"""Time to make a class set (``kplan cards``), as ratios against one prep sheet measured in the same run.

Baseline (printed first): one prep sheet of the plan's designed recipe — its assessment without Monte
Carlo and its PDF — the thing a class set replaces N copies of. Then, for 30 and 200 students of the
teaching scenario, everything ``kplan cards`` makes (:func:`planner.cli.cards.make_class_files`): the class
set (teaching series drawn and chosen, every card assessed, pooled SEs), the class stock list, and every
output file (cards.pdf, key.pdf, key.csv, key.xlsx, stocks.pdf, stocks.csv); the students' cards are laid
out in a second process while the first assesses them and prints the key. Also the same with ``--pooled``.

Two clocks, both against the prep sheet on the same clock: wall seconds (what the user waits for; on a
shared machine they move with its load, printed before and after) and CPU seconds of this process and its
children (the work done; steadier under load). Then a breakdown of one process's CPU, with the cards laid
out whole (every card's text laid out on every page, as before the repeated parts were stamped) beside the
stamped layout, and the key laid out whole (every number a line of text) beside the key whose numbers are
written from one layout of their glyphs.

The first WeasyPrint call (fonts) is made before timing. Aim (issue "Cards that teach"): 30 cards ≤ 3 ×
one prep sheet.

Run: ``python benchmarks/cards.py [--counts 30 200] [--repeats 1]``.
"""

from __future__ import annotations

import argparse
import os
import resource
import statistics
import time
from importlib import resources

AIM = {30: 3.0}


def cpu_s() -> float:
    """CPU seconds of this process and of its children that have ended (the printing process)."""
    me = resource.getrusage(resource.RUSAGE_SELF)
    kids = resource.getrusage(resource.RUSAGE_CHILDREN)
    return me.ru_utime + me.ru_stime + kids.ru_utime + kids.ru_stime


def timed(fn, repeats: int) -> tuple[float, float, object]:
    """Median wall and CPU seconds of ``fn()`` over ``repeats`` runs, and its last result."""
    walls, cpus, res = [], [], None
    for _ in range(repeats):
        t, c = time.perf_counter(), cpu_s()
        res = fn()
        walls.append(time.perf_counter() - t)
        cpus.append(cpu_s() - c)
    return statistics.median(walls), statistics.median(cpus), res


def _parts(plan, n: int, seed: int) -> dict[str, float]:
    """CPU seconds of each part, all in this process (no second printing process)."""
    from planner.inputs.roster import roster_of_count
    from planner.jobs.classroom.cards import class_set
    from planner.jobs.classroom.stock_list import class_stocks
    from planner.paper import card_layout, key_layout
    from planner.paper import cards as pc

    out = {}
    clock = time.process_time
    t = clock()
    roster = roster_of_count(n)
    cs = class_set(plan, roster, seed=seed)
    out["class set"] = clock() - t
    t = clock()
    st = class_stocks(plan, [c.recipe for c in cs.cards], roster)
    pc.key_document(plan, cs, st)
    out["key.pdf"] = clock() - t
    t = clock()
    key_layout.whole_key(pc.key_context(plan, cs, st)).write_pdf()
    out["key.pdf laid out whole"] = clock() - t
    t = clock()
    pc.key_csv(plan, cs)
    pc.key_xlsx(plan, cs)
    out["key.csv + key.xlsx"] = clock() - t
    t = clock()
    pc.stocks_document(plan, cs, st)
    pc.stocks_csv(plan, st)
    out["stock list"] = clock() - t
    t = clock()
    lay, _ = pc.card_layout(plan, cs)
    out["cards: layout"] = clock() - t
    t = clock()
    lay.write_pdf()
    out["cards: PDF"] = clock() - t
    t = clock()
    ctx = pc.cards_context(plan, cs)
    card_layout.whole_cards(ctx).write_pdf()
    out["cards laid out whole (layout + PDF)"] = clock() - t
    return out


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

    print("load average (1, 5, 15 min) before: " + ", ".join(f"{x:.2f}" for x in os.getloadavg()))
    w_sheet, c_sheet, _ = timed(one_sheet, max(args.repeats, 3))
    print(f"baseline: one prep sheet (assessment + PDF): {w_sheet:.2f} s wall, {c_sheet:.2f} s CPU")
    for n in args.counts:
        for pooled in (False, True):
            roster = roster_of_count(n)
            keep: dict = {}

            def run(roster=roster, keep=keep, pooled=pooled):
                cs, _, files = make_class_files(
                    plan, roster, tubes=None, seed=args.seed, paper="A4", pooled=pooled
                )
                keep.update(cs=cs)
                return files

            wall, cpu, _ = timed(run, args.repeats)
            cs = keep["cs"]
            aim = ""
            if n in AIM and not pooled:
                met = "met" if wall / w_sheet <= AIM[n] else "NOT met"
                aim = f" (aim ≤ {AIM[n]:g} × on the wall clock: {met})"
            print(
                f"{n:4d} cards{' --pooled' if pooled else '':9s}: {wall:6.2f} s wall = {wall / w_sheet:5.1f} "
                f"× one prep sheet{aim}; {cpu:6.2f} s CPU = {cpu / c_sheet:5.1f} ×; {wall / n:.3f} s a card; "
                f"sound={cs.sound}, efficiency vs copies of the best recipe {cs.efficiency:.2f}"
            )
        cpu_parts = _parts(plan, n, args.seed)
        print("      CPU s, one process: " + ", ".join(f"{k} {v:.2f}" for k, v in cpu_parts.items()))
    print("load average (1, 5, 15 min) after: " + ", ".join(f"{x:.2f}" for x in os.getloadavg()))


if __name__ == "__main__":
    main()

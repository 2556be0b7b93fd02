"""``kplan grade``: the class's own constant, every student's readings against the class's model, the
likely mix-up."""

from __future__ import annotations

import math
from pathlib import Path
from typing import Annotated

import typer

from ..inputs.text import plural
from .app import UserError, app, dump_json, out
from .app import safe_text as S
from .options import JsonFlag, PlanFile, flag_option, path_option, text_option


@app.command()
def grade(
    plan: PlanFile,
    key_dir: Annotated[
        Path, typer.Argument(metavar="KEYDIR", help="the folder kplan cards wrote (its key.csv)")
    ],
    results: Annotated[Path, typer.Argument(help="CSV: student, tube, absorbance")],
    as_json: JsonFlag = False,
    out_dir: Annotated[
        Path | None, path_option("folder for grades.csv, grades.xlsx and the class report", "--out")
    ] = None,
    html: Annotated[bool, flag_option("write the class report as HTML instead of PDF", "--html")] = False,
    paper: Annotated[str, text_option("paper size of the class report: A4 | Letter")] = "A4",
) -> None:
    """Grade a class by consensus: the class's own constant (with how far the plan's guess was off), each
    student's readings against the class's model, and the likely mix-up behind each flagged student."""
    from ..inputs.files import write_atomic_many
    from ..inputs.gradebook import read_key, read_results
    from ..inputs.plan import load_plan
    from ..jobs.classroom.grade import grade_class
    from ..jobs.compile import compile_study
    from ..paper.grades import grade_report, grades_csv, grades_xlsx
    from ..paper.render import PAPERS

    if paper not in PAPERS:
        raise UserError(f"--paper {paper}: choose one of {', '.join(PAPERS)}")
    if out_dir is not None:  # before the work; the outputs may not overwrite an input
        from ..inputs.files import check_output_folder

        names = ("grades.csv", "grades.xlsx", "grades.html" if html else "grades.pdf")
        key_file = key_dir / "key.csv" if key_dir.is_dir() else key_dir
        check_output_folder(out_dir, names, (plan, key_file, results))
    p = load_plan(plan)
    study = compile_study(p)
    g = grade_class(study, read_key(key_dir, p), read_results(results))
    if out_dir is not None:
        report_name = "grades.html" if html else "grades.pdf"
        # one unit: every file is made before any is written, so a failure leaves none
        report = grade_report(g, paper=paper, fmt_="html" if html else "pdf")
        write_atomic_many(
            {
                out_dir / "grades.csv": grades_csv(g),
                out_dir / "grades.xlsx": grades_xlsx(g),
                out_dir / report_name: report,
            }
        )
    if as_json:
        print(dump_json(g))
        return
    _print_grade(g)
    if out_dir is not None:
        out.print(f"wrote {S(out_dir / 'grades.csv')}, {S(out_dir / 'grades.xlsx')} and the class report")


def _finite(x) -> float | None:
    x = float(x) if x is not None else float("nan")
    return x if math.isfinite(x) else None


def _print_grade(g) -> None:
    from rich.table import Table

    from ..paper import fmt

    out.print(f"[bold]{S(g.title)}[/bold] — {plural(len(g.students), 'student')}")
    if g.pooled is not None:
        for prm in g.pooled_parameters:
            ci = prm.profile_ci95 if prm.is_target else None
            ci = (_finite(ci[0]), _finite(ci[1])) if ci is not None else None
            out.print(
                f"class {S(prm.name)} = {fmt.sig(_finite(prm.estimate), 5)} ± {fmt.sig(_finite(prm.se), 2)}"
                + (f" (95 % {fmt.sig(ci[0], 5)} – {fmt.sig(ci[1], 5)})" if ci and None not in ci else "")
                + f"; the plan guessed {fmt.sig(prm.guess, 4)}"
            )
        out.print(f"from {plural(int(g.pooled.used.sum()), 'student')}; {S(g.pooled_chi2_verdict)}")
        if g.key_note:
            out.print(f"[yellow]{S(g.key_note)}[/yellow]")
    else:
        out.print("[yellow]no student's readings could be pooled: judged against the plan's guess[/yellow]")
    t = Table(title="Students")
    for c in ("student", "name", "verdict", "in key band", "in class band", "own log β", "likely mix-up"):
        t.add_column(c)
    for s in g.students:
        own = s.own
        verdict = s.verdict if s.verdict != "flagged" else "[red]flagged[/red]"
        why = s.explanation or ""
        if why == "unexplained" and s.candidate:
            why = f"unexplained (candidate: {s.candidate})"
        n = int(s.in_band.size)
        t.add_row(
            S(s.card.student),
            S(s.card.name),
            verdict,
            f"{s.tubes_in_band}/{n}",
            f"{s.tubes_in_class_band}/{n}",
            f"{fmt.sig(_finite(own[0]), 4)} ± {fmt.sig(_finite(own[1]), 2)}" if own is not None else "—",
            S(why),
        )
    out.print(t)

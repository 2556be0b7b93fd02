"""``kplan grade``: the class's own constant, every student's readings against the class's model, the
likely mix-up."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from ..inputs.text import plural
from .app import UserError, app, dump_json, out
from .app import safe_text as S


@app.command()
def grade(
    plan: Annotated[Path, typer.Argument(help="plan file (TOML)")],
    key_dir: Annotated[
        Path, typer.Argument(metavar="KEYDIR", help="the folder kplan cards wrote (its key.csv)")
    ],
    results: Annotated[Path, typer.Argument(help="CSV: student, tube, absorbance")],
    as_json: Annotated[
        bool, typer.Option("--json", help="print one JSON object instead of tables", metavar="")
    ] = False,
    out_dir: Annotated[
        Path | None,
        typer.Option("--out", help="folder for grades.csv, grades.xlsx and the class report", metavar="PATH"),
    ] = None,
    html: Annotated[
        bool, typer.Option("--html", help="write the class report as HTML instead of PDF", metavar="")
    ] = False,
    paper: Annotated[
        str, typer.Option(help="paper size of the class report: A4 | Letter", metavar="TEXT")
    ] = "A4",
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
    summary = g.summary()
    if out_dir is not None:
        report_name = "grades.html" if html else "grades.pdf"
        # one unit: every file is made before any is written, so a failure leaves none
        report = grade_report(summary, paper=paper, fmt_="html" if html else "pdf")
        write_atomic_many(
            {
                out_dir / "grades.csv": grades_csv(summary),
                out_dir / "grades.xlsx": grades_xlsx(summary),
                out_dir / report_name: report,
            }
        )
    if as_json:
        print(dump_json(summary))
        return
    _print_grade(g, summary)
    if out_dir is not None:
        out.print(f"wrote {S(out_dir / 'grades.csv')}, {S(out_dir / 'grades.xlsx')} and the class report")


def _print_grade(g, summary: dict) -> None:
    from rich.table import Table

    from ..paper import fmt

    out.print(f"[bold]{S(g.title)}[/bold] — {plural(len(g.students), 'student')}")
    pooled = summary["pooled"]
    if pooled is not None:
        for prm in pooled["parameters"]:
            ci = prm.get("profile_ci95")
            out.print(
                f"class {S(prm['name'])} = {fmt.sig(prm['estimate'], 5)} ± {fmt.sig(prm['se'], 2)}"
                + (f" (95 % {fmt.sig(ci[0], 5)} – {fmt.sig(ci[1], 5)})" if ci and None not in ci else "")
                + f"; the plan guessed {fmt.sig(prm['guess'], 4)}"
            )
        out.print(f"from {plural(pooled['students'], 'student')}; {S(pooled['chi2_verdict'])}")
        if summary["key_note"]:
            out.print(f"[yellow]{S(summary['key_note'])}[/yellow]")
    else:
        out.print("[yellow]no student's readings could be pooled: judged against the plan's guess[/yellow]")
    t = Table(title="Students")
    for c in ("student", "name", "verdict", "in key band", "in class band", "own log β", "likely mix-up"):
        t.add_column(c)
    for s in summary["students"]:
        own = s["own_fit"]
        verdict = s["verdict"] if s["verdict"] != "flagged" else "[red]flagged[/red]"
        why = s["explanation"] or ""
        if why == "unexplained" and s["candidate"]:
            why = f"unexplained (candidate: {s['candidate']})"
        t.add_row(
            S(s["student"]),
            S(s["name"]),
            verdict,
            f"{s['tubes_in_band']}/{s['tubes']}",
            f"{s['tubes_in_class_band']}/{s['tubes']}",
            f"{fmt.sig(own['log_beta'], 4)} ± {fmt.sig(own['se'], 2)}" if own else "—",
            S(why),
        )
    out.print(t)

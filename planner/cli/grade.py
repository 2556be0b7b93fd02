"""``kplan grade``: every student's readings against the key, the class's pooled constant, the likely
mix-up."""

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
    """Grade a class: each student's readings against the key's bands, the pooled constant from every
    student not flagged, and the likely mix-up behind each flagged student."""
    from rich.table import Table

    from ..inputs.files import check_output_folder, write_atomic, write_atomic_bytes
    from ..inputs.gradebook import read_key, read_results
    from ..inputs.plan import load_plan
    from ..jobs.classroom.grade import grade_class
    from ..jobs.compile import compile_study
    from ..paper import fmt
    from ..paper.grades import grade_report, grades_csv, grades_xlsx
    from ..paper.render import PAPERS

    if paper not in PAPERS:
        raise UserError(f"--paper {paper}: choose one of {', '.join(PAPERS)}")
    if out_dir is not None:  # before the work; the outputs may not overwrite an input
        names = ("grades.csv", "grades.xlsx", "grades.html" if html else "grades.pdf")
        key_file = key_dir / "key.csv" if key_dir.is_dir() else key_dir
        check_output_folder(out_dir, names, (plan, key_file, results))
    p = load_plan(plan)
    study = compile_study(p)
    g = grade_class(study, read_key(key_dir, p), read_results(results))
    summary = g.summary()
    if out_dir is not None:
        report_name = "grades.html" if html else "grades.pdf"
        write_atomic(out_dir / "grades.csv", grades_csv(summary))
        write_atomic_bytes(out_dir / "grades.xlsx", grades_xlsx(summary))
        write_atomic_bytes(
            out_dir / report_name, grade_report(summary, paper=paper, fmt_="html" if html else "pdf")
        )
    if as_json:
        print(dump_json(summary))
        return
    out.print(f"[bold]{S(g.title)}[/bold] — {plural(len(g.students), 'student')}")
    pooled = summary["pooled"]
    if pooled is not None:
        for prm in pooled["parameters"]:
            ci = prm.get("profile_ci95")
            out.print(
                f"pooled {S(prm['name'])} = {fmt.sig(prm['estimate'], 5)} ± {fmt.sig(prm['se'], 2)}"
                + (f" (95 % {fmt.sig(ci[0], 5)} – {fmt.sig(ci[1], 5)})" if ci and None not in ci else "")
                + f" from {plural(pooled['students'], 'student')}; {S(pooled['chi2_verdict'])}"
            )
    t = Table(title="Students")
    for c in ("student", "name", "verdict", "in band", "own log β", "likely mix-up"):
        t.add_column(c)
    for s in summary["students"]:
        own = s["own_fit"]
        verdict = s["verdict"] if s["verdict"] != "flagged" else "[red]flagged[/red]"
        t.add_row(
            S(s["student"]),
            S(s["name"]),
            verdict,
            f"{s['tubes_in_band']}/{s['tubes']}",
            f"{fmt.sig(own['log_beta'], 4)} ± {fmt.sig(own['se'], 2)}" if own else "—",
            S(s["explanation"] or ""),
        )
    out.print(t)
    if out_dir is not None:
        out.print(f"wrote {out_dir / 'grades.csv'}, {out_dir / 'grades.xlsx'} and the class report")

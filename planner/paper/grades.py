"""What grading puts on paper: the class report (HTML/PDF) and the grade book (CSV and XLSX).

Every number comes from :class:`planner.jobs.classroom.grade.ClassGrade`; this module only formats and draws.
Outputs are deterministic: the report carries the date it is given, and the XLSX file is rewritten with
fixed zip and document timestamps, so the same inputs give the same bytes.
"""

from __future__ import annotations

import numpy as np

from ..inputs.tables import write_csv
from ..inputs.text import plural
from . import fmt
from .figures import ACCENT, BAND, INK, WARN, _draw
from .workbook import append_row, stable_xlsx

GRADE_COLUMNS = (
    "student",
    "name",
    "section",
    "verdict",
    "tubes_in_band",
    "tubes",
    "chi2",
    "p_value",
    "own_log_beta",
    "own_se",
    "explanation",
)


def grade_rows(summary: dict) -> list[list]:
    """One row per student, in ``GRADE_COLUMNS`` order (numbers as numbers, blanks as "")."""
    out = []
    for s in summary["students"]:
        own = s["own_fit"] or {}
        out.append(
            [
                s["student"],
                s["name"],
                s["section"],
                s["verdict"],
                s["tubes_in_band"],
                s["tubes"],
                s["chi2"] if s["chi2"] is not None else "",
                s["p_value"] if s["p_value"] is not None else "",
                own.get("log_beta", ""),
                own.get("se", ""),
                s["explanation"] or "",
            ]
        )
    return out


def _cell(v) -> str:
    if isinstance(v, float):
        return f"{v:.6g}"
    return str(v)


def grades_csv(summary: dict) -> str:
    """``grades.csv``: one row per student; every text cell is data, never a spreadsheet formula."""
    return write_csv(GRADE_COLUMNS, ([_cell(v) for v in row] for row in grade_rows(summary)))


def grades_xlsx(summary: dict) -> bytes:
    """The grade book as an XLSX workbook (sheet "grades", and "pooled" with the class's constants);
    numbers as numbers, every text as text (never a formula)."""
    from openpyxl import Workbook

    wb = Workbook()
    ws = wb.active
    ws.title = "grades"
    append_row(ws, list(GRADE_COLUMNS))
    for row in grade_rows(summary):
        append_row(ws, row)
    ps = wb.create_sheet("pooled")
    append_row(ps, ["parameter", "estimate", "se", "profile_ci95_low", "profile_ci95_high"])
    for p in (summary.get("pooled") or {}).get("parameters", []):
        ci = p.get("profile_ci95") or [None, None]
        append_row(ps, [p["name"], p["estimate"], p["se"], ci[0], ci[1]])
    return stable_xlsx(wb)


def readings_svg(summary: dict, *, prefix: str = "fg") -> str:
    """Every student's reading against the key's expected value, with each tube's acceptance band;
    flagged students in red."""

    def paint(fig, ax):
        exp, got, lo, hi, flag = [], [], [], [], []
        for s in summary["students"]:
            for r in s["readings"]:
                if r["absorbance"] is None or r["expected"] is None:
                    continue
                exp.append(r["expected"])
                got.append(r["absorbance"])
                lo.append(r["band_low"] if r["band_low"] is not None else np.nan)
                hi.append(r["band_high"] if r["band_high"] is not None else np.nan)
                flag.append(s["verdict"] == "flagged")
        exp, got, lo, hi, flag = (np.array(x, dtype=float) for x in (exp, got, lo, hi, flag))
        if exp.size:
            order = np.argsort(exp)
            ax.fill_between(exp[order], lo[order], hi[order], color=BAND, lw=0, label="key's band")
            ax.plot([exp.min(), exp.max()], [exp.min(), exp.max()], color=INK, lw=0.7, label="expected")
            ok = flag == 0
            ax.plot(exp[ok], got[ok], "o", ms=2.2, color=ACCENT, label="students not flagged")
            if (~ok).any():
                ax.plot(exp[~ok], got[~ok], "x", ms=3.0, color=WARN, label="flagged students")
        ax.set_xlabel("expected absorbance (key)")
        ax.set_ylabel("reading")
        ax.legend(loc="upper left")

    return _draw(prefix, paint)


def grade_context(summary: dict, *, date: str, paper: str) -> dict:
    """Template context of the class report (plain values only)."""
    from markupsafe import Markup

    pooled = summary.get("pooled")
    target = summary["target"]
    facts = [
        ("Students", str(len(summary["students"]))),
        ("Flagged", str(sum(s["verdict"] == "flagged" for s in summary["students"]))),
        ("Incomplete", str(sum(s["verdict"] == "incomplete" for s in summary["students"]))),
    ]
    pooled_rows = []
    if pooled is not None:
        facts.append(
            ("Pooled from", f"{plural(pooled['students'], 'student')}, {plural(pooled['tubes'], 'tube')}")
        )
        for p in pooled["parameters"]:
            ci = p.get("profile_ci95")
            pooled_rows.append(
                {
                    "name": p["name"].replace("log_beta", "log β").replace("epsilon", "ε"),
                    "estimate": fmt.sig(p["estimate"], 5),
                    "se": fmt.sig(p["se"], 2),
                    "ci": (f"{fmt.sig(ci[0], 5)} – {fmt.sig(ci[1], 5)}" if ci and None not in ci else "—"),
                }
            )
    rows = []
    for s in summary["students"]:
        own = s["own_fit"]
        rows.append(
            {
                "student": s["student"],
                "name": s["name"],
                "section": s["section"],
                "verdict": s["verdict"],
                "band": f"{s['tubes_in_band']} / {s['tubes']}",
                "chi2": fmt.sig(s["chi2"], 3) if s["chi2"] is not None else "—",
                "own": (f"{fmt.sig(own['log_beta'], 4)} ± {fmt.sig(own['se'], 2)}" if own else "—"),
                "explanation": s["explanation"] or "",
            }
        )
    return {
        "title": summary["title"],
        "date": date,
        "paper": paper,
        "target": target,
        "facts": facts,
        "pooled": pooled,
        "pooled_rows": pooled_rows,
        "pooled_verdict": (pooled or {}).get("chi2_verdict", ""),
        "excluded": summary["excluded"],
        "unknown": summary["unknown_students"],
        "rows": rows,
        "figure": Markup(readings_svg(summary)),
    }


def grade_report(summary: dict, *, paper: str = "A4", fmt_: str = "pdf", date=None) -> bytes:
    """The class report as PDF (or HTML)."""
    from .render import _check, _date_text, _out, render_html

    _check(paper, fmt_)
    ctx = grade_context(summary, date=_date_text(date), paper=paper)
    return _out(render_html("grades.html.j2", ctx), fmt_)

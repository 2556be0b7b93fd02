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

NOT_ABSORBANCE = 10.0  # numbers above this are not absorbances (%T or typos): left out of the figures

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
    "tubes_in_class_band",
    "judged_against",
    "candidate",
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
                s.get("tubes_in_class_band", ""),
                s.get("judged_against") or "",
                s.get("candidate") or "",
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


POOLED_COLUMNS = (
    "parameter",
    "estimate",
    "se",
    "profile_ci95_low",
    "profile_ci95_high",
    "guess",
    "guess_sd",
    "off_by",
)
READING_COLUMNS = (
    "student",
    "tube",
    "absorbance",
    "key_expected",
    "key_band_low",
    "key_band_high",
    "class_expected",
    "class_band_low",
    "class_band_high",
    "in_class_band",
)


def grades_xlsx(summary: dict) -> bytes:
    """The grade book as an XLSX workbook: sheet "grades", "pooled" with the class's constants beside the
    guess, and "readings" with every reading against the key's band and the class's; numbers as numbers,
    every text as text (never a formula)."""
    from openpyxl import Workbook

    wb = Workbook()
    ws = wb.active
    ws.title = "grades"
    append_row(ws, list(GRADE_COLUMNS))
    for row in grade_rows(summary):
        append_row(ws, row)
    ps = wb.create_sheet("pooled")
    append_row(ps, list(POOLED_COLUMNS))
    for p in (summary.get("pooled") or {}).get("parameters", []):
        ci = p.get("profile_ci95") or [None, None]
        append_row(
            ps,
            [
                p["name"],
                p["estimate"],
                p["se"],
                ci[0],
                ci[1],
                p.get("guess"),
                p.get("guess_sd"),
                p.get("off_by"),
            ],
        )
    rs = wb.create_sheet("readings")
    append_row(rs, list(READING_COLUMNS))
    for s in summary["students"]:
        for r in s.get("readings", []):
            append_row(
                rs,
                [s["student"], r["tube"], r["absorbance"], r["expected"], r["band_low"], r["band_high"]]
                + [r["class_expected"], r["class_band_low"], r["class_band_high"], r["in_class_band"]],
            )
    return stable_xlsx(wb)


def readings_svg(summary: dict, *, against: str = "class", prefix: str = "fg") -> str:
    """Every student's reading against the value expected for it — at the class's constants (``against =
    "class"``, with the bands recomputed there) or by the key made at the plan's guess (``"key"``) — with
    each tube's ±2 sd band; flagged students in red."""
    exp_key, lo_key, hi_key = (
        ("class_expected", "class_band_low", "class_band_high")
        if against == "class"
        else ("expected", "band_low", "band_high")
    )

    def paint(fig, ax):
        exp, got, lo, hi, flag = [], [], [], [], []
        for s in summary["students"]:
            if any(abs(r["absorbance"] or 0.0) > NOT_ABSORBANCE for r in s["readings"]):
                continue  # a student whose numbers are not absorbances (%T, typos)
            for r in s["readings"]:
                if r["absorbance"] is None or r[exp_key] is None:
                    continue
                exp.append(r[exp_key])
                got.append(r["absorbance"])
                lo.append(r[lo_key] if r[lo_key] is not None else np.nan)
                hi.append(r[hi_key] if r[hi_key] is not None else np.nan)
                flag.append(s["verdict"] == "flagged")
        exp, got, lo, hi, flag = (np.array(x, dtype=float) for x in (exp, got, lo, hi, flag))
        if exp.size:
            order = np.argsort(exp)
            ax.fill_between(exp[order], lo[order], hi[order], color=BAND, lw=0, label="±2 sd band")
            ax.plot([exp.min(), exp.max()], [exp.min(), exp.max()], color=INK, lw=0.7, label="expected")
            ok = flag == 0
            ax.plot(exp[ok], got[ok], "o", ms=2.2, color=ACCENT, label="students not flagged")
            if (~ok).any():
                ax.plot(exp[~ok], got[~ok], "x", ms=3.0, color=WARN, label="flagged students")
        ax.set_xlabel(
            "expected absorbance ("
            + ("class's constants" if against == "class" else "key, at the guess")
            + ")"
        )
        ax.set_ylabel("reading")
        ax.legend(loc="upper left")

    return _draw(prefix, paint)


def _pooled_rows(pooled: dict | None) -> list[dict]:
    rows = []
    for p in (pooled or {}).get("parameters", []):
        ci = p.get("profile_ci95")
        is_lb = p["name"].startswith("log_beta")
        guess = (
            f"{fmt.sig(p['guess'], 3)} ± {fmt.sig(p['guess_sd'], 2)}"
            if is_lb
            else f"{fmt.sig(p['guess'], 3)} ± {fmt.sig(100 * p['guess_sd'] / p['guess'], 2)} %"
        )
        rows.append(
            {
                "name": p["name"].replace("log_beta[", "log β(").replace("epsilon[", "ε(").replace("]", ")"),
                "estimate": fmt.sig(p["estimate"], 5),
                "se": fmt.sig(p["se"], 2),
                "ci": (f"{fmt.sig(ci[0], 5)} – {fmt.sig(ci[1], 5)}" if ci and None not in ci else "—"),
                "guess": guess,
                "off": (
                    f"{p['off_by']:+.2f} ({abs(p['off_by_sd'] or 0):.1f} sd)"
                    if is_lb
                    else f"{100 * p['off_by'] / p['guess']:+.1f} %"
                ),
            }
        )
    return rows


def _student_rows(summary: dict) -> list[dict]:
    rows = []
    for s in summary["students"]:
        own = s["own_fit"]
        why = s["explanation"] or ""
        if why == "unexplained" and s.get("candidate"):
            why = f"unexplained (candidate: {s['candidate']})"
        rows.append(
            {
                "student": s["student"],
                "name": s["name"],
                "section": s["section"],
                "verdict": s["verdict"],
                "band": f"{s['tubes_in_band']} / {s['tubes']}",
                "class_band": f"{s['tubes_in_class_band']} / {s['tubes']}",
                "chi2": fmt.sig(s["chi2"], 3) if s["chi2"] is not None else "—",
                "own": (f"{fmt.sig(own['log_beta'], 4)} ± {fmt.sig(own['se'], 2)}" if own else "—"),
                "explanation": why,
            }
        )
    return rows


def grade_context(summary: dict, *, date: str, paper: str) -> dict:
    """Template context of the class report (plain values only)."""
    from markupsafe import Markup

    pooled = summary.get("pooled")
    facts = [
        ("Students", str(len(summary["students"]))),
        ("Flagged", str(sum(s["verdict"] == "flagged" for s in summary["students"]))),
        ("Incomplete", str(sum(s["verdict"] == "incomplete" for s in summary["students"]))),
    ]
    if pooled is not None:
        facts.append(
            ("Class fit from", f"{plural(pooled['students'], 'student')}, {plural(pooled['tubes'], 'tube')}")
        )
    judged = summary.get("judged_against") == "class"
    return {
        "title": summary["title"],
        "date": date,
        "paper": paper,
        "target": summary["target"],
        "facts": facts,
        "pooled": pooled,
        "pooled_rows": _pooled_rows(pooled),
        "pooled_verdict": (pooled or {}).get("chi2_verdict", ""),
        "guess_note": summary.get("guess_note", ""),
        "key_note": summary.get("key_note", ""),
        "judged_against_class": judged,
        "excluded": summary["excluded"],
        "unknown": summary["unknown_students"],
        "rows": _student_rows(summary),
        "figure_class": Markup(readings_svg(summary, against="class", prefix="fc")) if judged else "",
        "figure_key": Markup(readings_svg(summary, against="key", prefix="fk")),
    }


def grade_report(summary: dict, *, paper: str = "A4", fmt_: str = "pdf", date=None) -> bytes:
    """The class report as PDF (or HTML)."""
    from .render import _check, _date_text, _out, render_html

    _check(paper, fmt_)
    ctx = grade_context(summary, date=_date_text(date), paper=paper)
    return _out(render_html("grades.html.j2", ctx), fmt_)

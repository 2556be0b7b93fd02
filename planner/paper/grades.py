"""What grading puts on paper: the class report (HTML/PDF) and the grade book (CSV and XLSX).

Every number comes from :class:`planner.jobs.classroom.grade.ClassGrade`; this module only formats and draws.
Outputs are deterministic: the report carries the date it is given, and the XLSX file is rewritten with
fixed zip and document timestamps, so the same inputs give the same bytes.
"""

from __future__ import annotations

import math

import numpy as np

from ..inputs.tables import write_csv
from ..inputs.text import plural
from ..jobs.classroom.grade import ClassGrade
from ..jobs.classroom.grade_text import pretty
from . import fmt
from .figures import ACCENT, BAND, INK, WARN, draw_svg
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


def _f(x) -> float | None:
    """A finite float, or None."""
    x = float(x) if x is not None else float("nan")
    return x if math.isfinite(x) else None


def _blank(x) -> float | str:
    """A number for a table cell, "" where it is missing or not finite."""
    v = _f(x)
    return "" if v is None else v


def grade_rows(g: ClassGrade) -> list[list]:
    """One row per student, in ``GRADE_COLUMNS`` order (numbers as numbers, blanks as "")."""
    out = []
    for s in g.students:
        own = s.own
        out.append(
            [
                s.card.student,
                s.card.name,
                s.card.section,
                s.verdict,
                s.tubes_in_band,
                int(s.in_band.size),
                _blank(s.chi2),
                _blank(s.p_value),
                _f(own[0]) if own is not None else "",
                _f(own[1]) if own is not None else "",
                s.explanation or "",
                s.tubes_in_class_band,
                s.judged_against or "",
                s.candidate or "",
            ]
        )
    return out


def _cell(v) -> str:
    if isinstance(v, float):
        return f"{v:.6g}"
    return str(v)


def grades_csv(g: ClassGrade) -> str:
    """``grades.csv``: one row per student; every text cell is data, never a spreadsheet formula."""
    return write_csv(GRADE_COLUMNS, ([_cell(v) for v in row] for row in grade_rows(g)))


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


def grades_xlsx(g: ClassGrade) -> bytes:
    """The grade book as an XLSX workbook: sheet "grades", "pooled" with the class's constants beside the
    guess, and "readings" with every reading against the key's band and the class's; numbers as numbers,
    every text as text (never a formula)."""
    from openpyxl import Workbook

    wb = Workbook()
    ws = wb.active
    ws.title = "grades"
    append_row(ws, list(GRADE_COLUMNS))
    for row in grade_rows(g):
        append_row(ws, row)
    ps = wb.create_sheet("pooled")
    append_row(ps, list(POOLED_COLUMNS))
    for p in g.pooled_parameters:
        ci = (p.profile_ci95 if p.is_target else None) or (None, None)
        append_row(
            ps, [p.name, _f(p.estimate), _f(p.se), _f(ci[0]), _f(ci[1]), p.guess, p.guess_sd, _f(p.off_by)]
        )
    rs = wb.create_sheet("readings")
    append_row(rs, list(READING_COLUMNS))
    for s in g.students:
        c = s.card
        columns = (c.recipe.tubes, s.absorbance, c.expected, c.band_low, c.band_high)
        for t, a, e, lo, hi, ce, cl, ch, ic in zip(
            *columns, s.class_expected, s.class_band_low, s.class_band_high, s.in_class_band, strict=True
        ):
            append_row(
                rs, [s.card.student, t, _f(a), _f(e), _f(lo), _f(hi), _f(ce), _f(cl), _f(ch), bool(ic)]
            )
    return stable_xlsx(wb)


def _plotted_readings(g: ClassGrade, against: str):
    """(expected, reading, band low, band high, flagged) of every reading the figure shows: the readings
    of students whose numbers are absorbances, where both the reading and its expected value exist."""
    parts: list[list[np.ndarray]] = [[], [], [], [], []]
    for s in g.students:
        a = np.asarray(s.absorbance, dtype=float)
        if np.any(np.abs(np.nan_to_num(a)) > NOT_ABSORBANCE):
            continue  # a student whose numbers are not absorbances (%T, typos)
        if against == "class":
            e, lo, hi = s.class_expected, s.class_band_low, s.class_band_high
        else:
            e, lo, hi = s.card.expected, s.card.band_low, s.card.band_high
        e, lo, hi = (np.asarray(x, dtype=float) for x in (e, lo, hi))
        keep = np.isfinite(a) & np.isfinite(e)
        for out, x in zip(parts, (e, a, lo, hi, np.full(a.size, s.verdict == "flagged")), strict=True):
            out.append(np.asarray(x, dtype=float)[keep])
    return tuple(np.concatenate(x) if x else np.zeros(0) for x in parts)


def readings_svg(g: ClassGrade, *, against: str = "class", prefix: str = "fg") -> str:
    """Every student's reading against the value expected for it — at the class's constants (``against =
    "class"``, with the bands recomputed there) or by the key made at the plan's guess (``"key"``) — with
    each tube's ±2 sd band; flagged students in red."""

    def paint(fig, ax):
        exp, got, lo, hi, flag = _plotted_readings(g, against)
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

    return draw_svg(prefix, paint)


def _pooled_rows(g: ClassGrade) -> list[dict]:
    rows = []
    for p in g.pooled_parameters:
        ci = p.profile_ci95 if p.is_target else None
        is_lb = p.name.startswith("log_beta")
        guess = (
            f"{fmt.sig(p.guess, 3)} ± {fmt.sig(p.guess_sd, 2)}"
            if is_lb
            else f"{fmt.sig(p.guess, 3)} ± {fmt.sig(100 * p.guess_sd / p.guess, 2)} %"
        )
        est, off = _f(p.estimate), _f(p.off_by)
        rows.append(
            {
                "name": pretty(p.name),
                "estimate": fmt.sig(est, 5),
                "se": fmt.sig(_f(p.se), 2),
                "ci": (
                    f"{fmt.sig(ci[0], 5)} – {fmt.sig(ci[1], 5)}"
                    if ci and None not in (_f(ci[0]), _f(ci[1]))
                    else "—"
                ),
                "guess": guess,
                "off": (
                    f"{off:+.2f} ({abs(_f(p.off_by_sd) or 0):.1f} sd)"
                    if is_lb
                    else f"{100 * off / p.guess:+.1f} %"
                ),
            }
        )
    return rows


def _student_rows(g: ClassGrade) -> list[dict]:
    rows = []
    for s in g.students:
        own = s.own
        why = s.explanation or ""
        if why == "unexplained" and s.candidate:
            why = f"unexplained (candidate: {s.candidate})"
        n = int(s.in_band.size)
        chi2 = _f(s.chi2)
        rows.append(
            {
                "student": s.card.student,
                "name": s.card.name,
                "section": s.card.section,
                "verdict": s.verdict,
                "band": f"{s.tubes_in_band} / {n}",
                "class_band": f"{s.tubes_in_class_band} / {n}",
                "chi2": fmt.sig(chi2, 3) if chi2 is not None else "—",
                "own": (f"{fmt.sig(_f(own[0]), 4)} ± {fmt.sig(_f(own[1]), 2)}" if own is not None else "—"),
                "explanation": why,
            }
        )
    return rows


def grade_context(g: ClassGrade, *, date: str, paper: str) -> dict:
    """Template context of the class report (plain values only)."""
    from markupsafe import Markup

    cm = g.pooled
    facts = [
        ("Students", str(len(g.students))),
        ("Flagged", str(sum(s.verdict == "flagged" for s in g.students))),
        ("Incomplete", str(sum(s.verdict == "incomplete" for s in g.students))),
    ]
    if cm is not None:
        facts.append(
            ("Class fit from", f"{plural(int(cm.used.sum()), 'student')}, {plural(cm.tubes, 'tube')}")
        )
    judged = g.judged_against == "class"
    return {
        "title": g.title,
        "date": date,
        "paper": paper,
        "target": g.target,
        "facts": facts,
        "pooled": cm is not None,
        "pooled_rows": _pooled_rows(g),
        "pooled_verdict": g.pooled_chi2_verdict,
        "guess_note": g.guess_note,
        "key_note": g.key_note,
        "judged_against_class": judged,
        "excluded": [{"student": s, "reason": r} for s, r in g.excluded],
        "unknown": list(g.unknown),
        "rows": _student_rows(g),
        "figure_class": Markup(readings_svg(g, against="class", prefix="fc")) if judged else "",
        "figure_key": Markup(readings_svg(g, against="key", prefix="fk")),
    }


def grade_report(g: ClassGrade, *, paper: str = "A4", fmt_: str = "pdf", date=None) -> bytes:
    """The class report as PDF (or HTML)."""
    from .render import date_text, output_bytes, render_html, validate_paper_format

    validate_paper_format(paper, fmt_)
    ctx = grade_context(g, date=date_text(date), paper=paper)
    return output_bytes(render_html("grades.html.j2", ctx), fmt_)

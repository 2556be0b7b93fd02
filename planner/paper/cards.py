"""A class set on paper: the students' cards, the instructor's key and the class stock list.

Cards speak to students: who, the date line, the stocks on the bench and their dispensers, the order
of addition, each tube's volumes, an empty column for the readings, how to measure and a compact
safety box. Cards carry no expected absorbances and none of the plan file's key names; those go to
the instructor's key (``key.pdf`` / ``key.csv`` / ``key.xlsx``), whose bands are ±2 sd of each
tube's full error budget, taken from the card's own assessment. Every file is a pure function of the
class set (no clock, no environment): the same seed and roster give byte-identical files.

As for every sheet, Jinja2 autoescapes roster text (markup prints as the characters typed) and
WeasyPrint fetches nothing but inline ``data:`` URLs (:func:`planner.paper.render.html_to_pdf`).
"""

from __future__ import annotations

from ..inputs.plan import Plan
from ..inputs.tables import write_csv
from ..inputs.text import plural
from ..jobs.classroom.cards import ClassSet
from ..jobs.classroom.stock_list import ClassStock
from . import fmt, safety
from .bench_volumes import reading_note
from .render import PAPERS, html_to_pdf, render_html
from .sheets import (
    RenderError,
    _dispenser_text,
    addition_order,
    addition_steps,
    blank_text,
    checklist,
    pretty_formula,
)
from .workbook import append_row, stable_xlsx

__all__ = [
    "KEY_COLUMNS",
    "cards_document",
    "key_csv",
    "key_document",
    "key_rows",
    "key_xlsx",
    "stocks_csv",
    "stocks_document",
]

KEY_COLUMNS = ("student", "name", "section", "tube")  # then one column per stock, then the three below
KEY_TAIL = ("absorbance", "band_low", "band_high")
BAND_SD = 2.0  # acceptance band: ±2 sd of the full error budget [common practice: ~95 % coverage]
NAME_MAX = 48  # characters of roster text printed on a page (the CSV and the workbook keep it whole)
UNKNOWN_HAZARD = (
    "no hazard data on this card: read the supplier's safety data sheet and ask your "
    "instructor before you use it"
)


def short(text: str, limit: int = NAME_MAX) -> str:
    """Roster text for a page: at most ``limit`` characters (an ellipsis marks a cut), so a runaway cell
    cannot push a card onto a second page or stall the line breaker."""
    return text if len(text) <= limit else text[: limit - 1] + "…"


def _check(paper: str, fmt_: str) -> None:
    if paper not in PAPERS:
        raise RenderError(f"paper = {paper!r}: choose one of {', '.join(PAPERS)}")
    if fmt_ not in ("pdf", "html"):
        raise RenderError(f"fmt = {fmt_!r}: choose pdf or html")


def _out(html: str, fmt_: str) -> bytes:
    return html.encode("utf-8") if fmt_ == "html" else html_to_pdf(html)


# --------------------------------------------------------------------------------------------------
# the students' cards
# --------------------------------------------------------------------------------------------------
def _student_safety(plan: Plan) -> dict:
    """The safety box in students' words: reagents, signal words, pictograms, statements, what to wear
    and where waste goes, the usual cautions; no advice addressed to whoever writes the plan."""
    cards, cmr = [], []
    for r in safety.hazards_for(plan):
        hz = r.hazards
        if hz is None:
            cards.append({"name": r.name, "known": False, "message": UNKNOWN_HAZARD})
            continue
        cards.append(
            {
                "name": hz.name,
                "known": True,
                "formula": pretty_formula(hz.formula),
                "signal": hz.signal_word or "not classified",
                "pictograms": [f"{p} {safety.PICTOGRAMS[p]}" for p in hz.pictograms],
                "statements": [f"{c} {t}" for c, t in hz.statements()],
                "ppe": list(hz.ppe),
                "waste": hz.waste,
                "incompatible": list(hz.incompatible),
            }
        )
        if hz.cmr:
            cmr.append(hz.name)
    return {
        "cards": cards,
        "cmr": cmr,
        "cautions": list(safety.GENERAL_CAUTIONS),
        "always": safety.ALWAYS,
        "clashes": [c.advice for c in safety.clashes(safety.hazards_for(plan))],
    }


def _card_shared(plan: Plan, cards) -> dict:
    g, o = plan.glassware, plan.optics
    rec0 = cards[0].recipe
    seq = addition_order(plan, rec0, g.order)
    to_mark = g.make_up == "to-mark" and plan.diluent is not None
    blank_name, _ = blank_text(plan)
    stocks = []
    for sid in seq:
        s = plan.stock_by_id(sid)
        d = plan.dispenser_for(sid)
        stocks.append(
            {
                "id": sid,
                "label": s.label,
                "dispenser": _dispenser_text(d) if d else "as your instructor shows",
            }
        )
    if to_mark:
        dil = plan.diluent
        stocks.append(
            {"id": dil.id, "label": dil.label, "dispenser": "wash bottle, to the mark of each flask"}
        )
    return {
        "title": plan.title,
        "facts": [
            ("Wavelength", f"{fmt.sig(o.wavelength_nm, 3)} nm"),
            ("Cuvette path", f"{fmt.fixed(o.path_cm, 0.001)} cm"),
            (
                "Tubes",
                f"{rec0.n_tubes} × {fmt.sig(g.tube_volume_mL, 3)} mL"
                + (" volumetric flasks" if to_mark else ", every volume added"),
            ),
        ],
        "seq": seq,
        "stocks": stocks,
        "columns": [
            {"id": sid, "how": _dispenser_text(plan.dispenser_for(sid)) if plan.dispenser_for(sid) else ""}
            for sid in seq
        ],
        "makeup": f"{plan.diluent.id} to the mark" if to_mark else None,
        "step_text": fmt.volume(g.step_mL, g.step_mL),
        "reading_note": reading_note(plan, seq),
        "checklist": checklist(plan, blank_name),
        "safety": _student_safety(plan),
        "custom_order": g.order is not None,
    }


def cards_context(plan: Plan, cs, *, paper: str = "A4") -> dict:
    """Template context of ``cards.pdf`` (one page per student); ``cs`` is a :class:`ClassSet` or the
    drafted cards (anything with student, name, section, bench and recipe)."""
    drafts = cs.cards if isinstance(cs, ClassSet) else tuple(cs)
    shared = _card_shared(plan, drafts)
    step = plan.glassware.step_mL
    cards = []
    for c in drafts:
        steps = addition_steps(plan, c.recipe, shared["seq"], custom=shared["custom_order"])
        rows = [
            {
                "tube": t,
                "cells": [
                    ("—" if c.recipe.column(sid)[i] == 0 else fmt.volume(c.recipe.column(sid)[i], step))
                    for sid in shared["seq"]
                ],
            }
            for i, t in enumerate(c.recipe.tubes)
        ]
        cards.append(
            {
                "student": short(c.student),
                "name": short(c.name),
                "section": short(c.section),
                "bench": short(c.bench),
                "steps": [{"text": s.text, "why": s.why} for s in steps],
                "rows": rows,
            }
        )
    return {"kind": "cards", "paper": paper, **shared, "cards": cards}


DENSITIES = 4  # type sizes tried until every card fits on one page (0: the normal size)


def cards_document(plan: Plan, cs, *, paper: str = "A4", fmt_: str = "pdf") -> bytes:
    """``cards.pdf``: one page per student (or the HTML with ``fmt_="html"``); ``cs`` as in
    :func:`cards_context`.

    A card that runs onto a second page (many tubes, many reagents in the safety box) is set again
    in smaller type, at most DENSITIES − 1 times; the laid-out pages are counted before the PDF is
    written, so a card set that fits at once is laid out once.
    """
    import weasyprint

    from .render import DataOnlyFetcher

    _check(paper, fmt_)
    ctx = cards_context(plan, cs, paper=paper)
    want = len(ctx["cards"])
    for density in range(DENSITIES):
        html = render_html("cards.html.j2", {**ctx, "density": density})
        if fmt_ == "html":
            return html.encode("utf-8")
        doc = weasyprint.HTML(string=html, base_url=None, url_fetcher=DataOnlyFetcher()).render()
        if len(doc.pages) <= want:
            break
    return doc.write_pdf()


# --------------------------------------------------------------------------------------------------
# the instructor's key
# --------------------------------------------------------------------------------------------------
def key_rows(plan: Plan, cs: ClassSet) -> list[dict]:
    """One row per student and tube: volumes of every stock (plan order), the expected absorbance and
    its acceptance band (±2 sd of the tube's full error budget), from each card's assessment."""
    rows = []
    for c in cs.cards:
        for t in c.assessment.tube_rows():
            a, sd = t["absorbance"], t["absorbance_sd"]
            rows.append(
                {
                    "student": c.student,
                    "name": c.name,
                    "section": c.section,
                    "tube": t["tube"],
                    "volumes_mL": t["volumes_mL"],
                    "absorbance": a,
                    "band_low": a - BAND_SD * sd,
                    "band_high": a + BAND_SD * sd,
                }
            )
    return rows


def key_csv(plan: Plan, cs: ClassSet) -> str:
    """``key.csv``: student, name, section, tube, one column per stock (mL), absorbance, band_low,
    band_high; every text cell is data, never a spreadsheet formula (and reads back as written)."""
    ids = [s.id for s in plan.stock]
    return write_csv(
        [*KEY_COLUMNS, *ids, *KEY_TAIL],
        (
            [
                r["student"],
                r["name"],
                r["section"],
                r["tube"],
                *(f"{r['volumes_mL'][s]:.4f}" for s in ids),
                f"{r['absorbance']:.4f}",
                f"{r['band_low']:.4f}",
                f"{r['band_high']:.4f}",
            ]
            for r in key_rows(plan, cs)
        ),
    )


def key_xlsx(plan: Plan, cs: ClassSet) -> bytes:
    """``key.xlsx``: the key as a workbook (numbers as numbers, text as text), its timestamps fixed so
    the bytes depend on the class set only."""

    from openpyxl import Workbook

    ids = [s.id for s in plan.stock]
    wb = Workbook()
    ws = wb.active
    ws.title = "key"
    append_row(ws, [*KEY_COLUMNS, *ids, *KEY_TAIL])
    for r in key_rows(plan, cs):
        append_row(
            ws,
            [
                r["student"],
                r["name"],
                r["section"],
                r["tube"],
                *(round(r["volumes_mL"][s], 4) for s in ids),
                round(r["absorbance"], 4),
                round(r["band_low"], 4),
                round(r["band_high"], 4),
            ],
        )
    ws.freeze_panes = "E2"
    info = wb.create_sheet("about")
    append_row(info, ["title", plan.title])
    append_row(info, ["seed", cs.seed])
    append_row(
        info, ["band", f"±{BAND_SD:g} sd of each tube's full error budget (photometric, delivery, stock)"]
    )
    return stable_xlsx(wb)


def key_context(plan: Plan, cs: ClassSet, stocks: tuple[ClassStock, ...], *, paper: str = "A4") -> dict:
    """Template context of ``key.pdf``: the class's numbers, then one row per student with each tube's
    expected absorbance and band."""
    se = cs.se
    n = cs.best.n_tubes
    students = []
    for c in cs.cards:
        cells = []
        for t in c.assessment.tube_rows():
            a, sd = t["absorbance"], t["absorbance_sd"]
            cells.append(
                {
                    "a": fmt.fixed(a, 0.001),
                    "band": f"{fmt.fixed(a - BAND_SD * sd, 0.001)}–{fmt.fixed(a + BAND_SD * sd, 0.001)}",
                }
            )
        students.append(
            {
                "student": short(c.student),
                "name": short(c.name, 40),
                "section": short(c.section, 20),
                "bench": short(c.bench, 20),
                "se": fmt.sig(c.assessment.target_se, 2),
                "verdict": c.assessment.verdict or "—",
                "passes": c.passes,
                "problems": c.problems,
                "cells": cells,
            }
        )
    rows = [
        ("one student, this class's median card", se["cards_median"], None),
        ("one student, the best single recipe", se["best_single"], None),
        ("one student, the evenly spaced series", se["even_single"], None),
        (f"the whole class pooled ({plural(len(cs.cards), 'card')}, stocks shared)", se["pooled"], None),
        (
            f"{plural(len(cs.cards), 'copy', 'copies')} of the best single recipe",
            se["pooled_best_copies"],
            se["pooled_best_copies"] / se["pooled"],
        ),
        (
            f"{plural(len(cs.cards), 'copy', 'copies')} of the evenly spaced series",
            se["pooled_even_copies"],
            se["pooled_even_copies"] / se["pooled"],
        ),
        ("the class pooled, each section making its own stocks", se["pooled_stock_per_section"], None),
        ("the class pooled, stock errors left out (stocks standardised)", se["pooled_without_stock"], None),
    ]
    notes = list(cs.notes)
    # what the cards do not say to students goes to the instructor: the plan author's notes (plan keys
    # named) and the reagents without hazard data
    from ..jobs.stocks.needs import stock_needs
    from .stock_text import plan_notes

    notes.extend(plan_notes(plan, [n.summary() for n in stock_needs(plan)]))
    for r in safety.hazards_for(plan):
        if r.hazards is None and r.message:
            notes.append(f"safety: {r.message}")
    for s in stocks:
        st = plan.stock_by_id(s.id)
        if s.preparation is not None and st.conc_rsd < s.preparation.u_rel * 0.999:
            notes.append(
                f"stock {s.id}: the weighing gives u = {fmt.percent(s.preparation.u_rel)} but the plan "
                f"assumes conc_rsd = {fmt.percent(st.conc_rsd)}: raise conc_rsd or standardise the stock"
            )
        if s.enough is False:
            notes.append(
                f"stock {s.id}: the class needs {fmt.fixed(s.total_mL, 0.1)} mL but on_hand is "
                f"{fmt.sig(s.on_hand_mL, 3)} mL: make {fmt.fixed(s.shortfall_mL, 0.1)} mL more "
                f"(or raise on_hand in the plan)"
            )
    return {
        "kind": "key",
        "paper": paper,
        "title": plan.title,
        "target": cs.target,
        "goal": fmt.sig(cs.goal_se, 2),
        "seed": cs.seed,
        "n": n,
        "count": len(cs.cards),
        "sound": cs.sound,
        "passing": sum(c.passes for c in cs.cards),
        "jitter": f"±{cs.radius_steps} grid step(s) (±{fmt.sig(cs.radius_steps * cs.step_mL, 2)} mL)",
        "se_rows": [
            (label, fmt.sig(v, 2), fmt.sig(r, 3) if r is not None else "")
            for label, v, r in se_rows_filter(rows)
        ],
        "efficiency": fmt.percent((se["pooled_best_copies"] / se["pooled"]) ** 2, 3),
        "notes": notes,
        "students": students,
        "tubes": [f"T{i + 1}" for i in range(n)],
    }


def se_rows_filter(rows):
    return [r for r in rows if r[1] is not None]


def key_document(
    plan: Plan, cs: ClassSet, stocks: tuple[ClassStock, ...], *, paper: str = "A4", fmt_: str = "pdf"
) -> bytes:
    """``key.pdf``: the instructor's key."""
    _check(paper, fmt_)
    return _out(render_html("key.html.j2", key_context(plan, cs, stocks, paper=paper)), fmt_)


# --------------------------------------------------------------------------------------------------
# the class stock list
# --------------------------------------------------------------------------------------------------
def _how(plan: Plan, s: ClassStock) -> list[str]:
    p = s.preparation
    g = plan.glassware
    if p is None:
        if s.problem:
            return [s.problem]
        return ["make up as its description says (no formula in the plan, so no mass is computed)"]
    times = f"{s.batches} × " if s.batches > 1 else ""
    lines = [
        f"{times}weigh {fmt.mass(p.mass_g, g.balance.readability_g)} of {pretty_formula(p.formula)} "
        f"(M = {fmt.sig(p.formula_weight_g_mol, 5)} g/mol) and make up to the mark of a "
        f"{p.weighed_flask.label}"
    ]
    for st in p.steps:
        lines.append(
            f"pipette {fmt.sig(st.pipette.capacity_mL, 3)} mL into a {st.flask.label} and make up to the mark"
        )
    if p.mass_g < p.min_weight_g:
        lines.append(
            f"{fmt.mass(p.mass_g, g.balance.readability_g)} is below the balance's minimum weight "
            f"(USP <41>): weigh more into a larger flask and dilute"
        )
    return lines


def stocks_context(plan: Plan, cs: ClassSet, stocks: tuple[ClassStock, ...], *, paper: str = "A4") -> dict:
    g = plan.glassware
    sections = [name for name, *_ in stocks[0].sections] if stocks else []
    rows = []
    for s in stocks:
        made = (s.preparation.flask.capacity_mL * s.batches) if s.preparation else None
        rows.append(
            {
                "id": s.id,
                "label": s.label,
                "tubes": fmt.fixed(s.tubes_mL, 0.1),
                "benches": s.benches,
                "allowance": fmt.fixed(s.allowance_mL, 0.1),
                "total": fmt.fixed(s.total_mL, 0.1),
                "made": f"{fmt.sig(made, 4)} mL" if made else "—",
                "on_hand": f"{fmt.sig(s.on_hand_mL, 4)} mL" if s.on_hand_mL is not None else "—",
                "enough": s.enough,
                "short": fmt.fixed(s.shortfall_mL, 0.1),
                "how": _how(plan, s),
                "sections": [
                    {
                        "name": name or "—",
                        "tubes": fmt.fixed(v, 0.1),
                        "benches": b,
                        "total": fmt.fixed(t, 0.1),
                        "weigh": None
                        if sp is None
                        else (f"{sp[1]} × " if sp[1] > 1 else "")
                        + f"{fmt.mass(sp[0].mass_g, g.balance.readability_g)} "
                        f"in {sp[0].flask.capacity_mL:g} mL",
                    }
                    for (name, v, b, t), sp in zip(
                        s.sections, s.section_preparations or (None,) * len(s.sections), strict=True
                    )
                ],
            }
        )
    return {
        "kind": "stocks",
        "paper": paper,
        "title": plan.title,
        "count": len(cs.cards),
        "rinse": fmt.sig(g.rinse_mL, 3),
        "dead": fmt.sig(g.dead_volume_mL, 3),
        "rows": rows,
        "sections": [s or "—" for s in sections],
        "many_sections": len(sections) > 1,
    }


def stocks_document(
    plan: Plan, cs: ClassSet, stocks: tuple[ClassStock, ...], *, paper: str = "A4", fmt_: str = "pdf"
) -> bytes:
    """``stocks.pdf``: the class stock list."""
    _check(paper, fmt_)
    return _out(render_html("class_stocks.html.j2", stocks_context(plan, cs, stocks, paper=paper)), fmt_)


STOCK_COLUMNS = (
    "stock",
    "scope",
    "tubes_mL",
    "benches",
    "allowance_mL",
    "total_mL",
    "on_hand_mL",
    "enough",
    "mass_g",
    "flask_mL",
    "batches",
)


def stocks_csv(plan: Plan, stocks: tuple[ClassStock, ...]) -> str:
    """``stocks.csv``: one row per stock for the class (scope ``class``), then one per stock and section."""
    g = plan.glassware
    allow = g.rinse_mL + g.dead_volume_mL
    rows = []
    for s in stocks:
        p = s.preparation
        rows.append(
            [
                s.id,
                "class",
                f"{s.tubes_mL:.2f}",
                s.benches,
                f"{s.allowance_mL:.2f}",
                f"{s.total_mL:.2f}",
                "" if s.on_hand_mL is None else f"{s.on_hand_mL:.2f}",
                "" if s.enough is None else ("yes" if s.enough else "no"),
                "" if p is None else f"{p.mass_g:.4f}",
                "" if p is None else f"{p.flask.capacity_mL:g}",
                s.batches if p is not None else "",
            ]
        )
    for s in stocks:
        preps = s.section_preparations or (None,) * len(s.sections)
        for (name, v, b, t), sp in zip(s.sections, preps, strict=True):
            rows.append(
                [
                    s.id,
                    f"section {name}" if name else "section",
                    f"{v:.2f}",
                    b,
                    f"{b * allow:.2f}",
                    f"{t:.2f}",
                    "",
                    "",
                    "" if sp is None else f"{sp[0].mass_g:.4f}",
                    "" if sp is None else f"{sp[0].flask.capacity_mL:g}",
                    "" if sp is None else sp[1],
                ]
            )
    return write_csv(STOCK_COLUMNS, rows)

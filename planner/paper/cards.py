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
from .class_stocks import stocks_csv, stocks_page
from .render import output_bytes, render_html, validate_paper_format
from .sheets import (
    addition_order,
    addition_steps,
    blank_text,
    checklist,
    dispenser_text,
    pretty_formula,
)
from .workbook import append_row, stable_xlsx

__all__ = [
    "KEY_COLUMNS",
    "card_layout",
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
NAME_MAX = 80  # characters of a name printed on a page: two lines of the header box (the CSV and the
# workbook keep it whole)
ID_MAX = 24  # characters of an id, section or bench printed on a page
LABEL_MAX = 60  # characters of a stock's label under its id in the tube table (two short lines)
UNKNOWN_HAZARD = (
    "no hazard data on this card: read the supplier's safety data sheet and ask your "
    "instructor before you use it"
)


def short(text: str, limit: int = NAME_MAX) -> str:
    """Roster text for a page: at most ``limit`` characters (an ellipsis marks a cut), so a runaway cell
    cannot push a card onto a second page or stall the line breaker; the page wraps it onto two lines."""
    return text if len(text) <= limit else text[: limit - 1] + "…"


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


def _dispensed_with(plan: Plan, sid: str) -> str:
    d = plan.dispenser_for(sid)
    return dispenser_text(d) if d else "as your instructor shows"


def _card_shared(plan: Plan, cards) -> dict:
    """What every card of the set says alike: the header facts, the stocks in the order of addition
    (each with its label and dispenser), the columns of the tube table, the checklist and safety."""
    g, o = plan.glassware, plan.optics
    rec0 = cards[0].recipe
    seq = addition_order(plan, rec0, g.order)
    to_mark = g.make_up == "to-mark" and plan.diluent is not None
    blank_name, _ = blank_text(plan)
    stocks = [
        {"id": sid, "label": plan.stock_by_id(sid).label, "dispenser": _dispensed_with(plan, sid)}
        for sid in seq
    ]
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
        "columns": [{"id": sid, "label": short(plan.stock_by_id(sid).label, LABEL_MAX)} for sid in seq],
        "makeup": f"{plan.diluent.id} to the mark" if to_mark else None,
        "step_text": fmt.volume(g.step_mL, g.step_mL),
        "reading_note": reading_note(plan, seq),
        "checklist": checklist(plan, blank_name),
        "safety": _student_safety(plan),
        "custom_order": g.order is not None,
    }


def series_text(plan: Plan, series, recipe) -> str | None:
    """What a card's tubes vary and what to plot, in students' words (None for cards without a series)."""
    if series is None:
        return None
    step = plan.glassware.step_mL
    v, w = recipe.column(series.varied), recipe.column(series.partner)
    lo, hi = fmt.volume(float(v.min()), step), fmt.volume(float(v.max()), step)
    if series.kind == "job":
        total = fmt.volume(float((v + w)[0]), step)
        return (
            f"{series.varied} + {series.partner} make {total} mL in every tube; {series.varied} rises from "
            f"{lo} to {hi} mL. Plot each reading against the fraction {series.varied} / ({series.varied} + "
            f"{series.partner}) (Job's method)."
        )
    held = fmt.volume(float(w[0]), step)
    head = (
        f"{series.partner} is the same in every tube ({held} mL); {series.varied} rises from {lo} to {hi} mL."
    )
    if series.kind == "mole-ratio":
        return f"{head} Plot each reading against the mole ratio of {series.varied} to {series.partner}."
    return f"{head} Plot each reading against the volume of {series.varied}: the curve rises and levels off."


def cards_context(plan: Plan, cs, *, paper: str = "A4") -> dict:
    """Template context of ``cards.pdf`` (one page per student); ``cs`` is a :class:`ClassSet` or the
    drafted cards (anything with student, name, section, bench, recipe and series)."""
    drafts = cs.cards if isinstance(cs, ClassSet) else tuple(cs)
    shared = _card_shared(plan, drafts)
    step = plan.glassware.step_mL
    cards = []
    for c in drafts:
        steps = addition_steps(plan, c.recipe, shared["seq"], custom=shared["custom_order"])
        cols = [c.recipe.column(sid) for sid in shared["seq"]]
        rows = [
            {"tube": t, "cells": ["—" if col[i] == 0 else fmt.volume(col[i], step) for col in cols]}
            for i, t in enumerate(c.recipe.tubes)
        ]
        cards.append(
            {
                "student": short(c.student, ID_MAX),
                "name": short(c.name),
                "section": short(c.section, ID_MAX),
                "bench": short(c.bench, ID_MAX),
                "label": " — ".join(
                    x for x in (short(c.student, ID_MAX), short(c.name)) if x
                ),  # its bookmark
                "steps": [{"text": s.text, "why": s.why} for s in steps],
                "series": series_text(plan, getattr(c, "series", None), c.recipe),
                "rows": rows,
            }
        )
    return {"kind": "cards", "paper": paper, **shared, "cards": cards, "mode": "full", "slot_height_px": {}}


def card_layout(plan: Plan, cs, *, paper: str = "A4"):
    """The laid-out cards (:class:`planner.paper.card_layout.CardLayout`, one page per card; its
    ``write_pdf()`` gives the PDF) and the type size used.

    What repeats from card to card is laid out once and drawn on every page; a card that runs onto a
    second page (many tubes, many reagents in the safety box) is set again in smaller type, at most
    DENSITIES − 1 times (:mod:`planner.paper.card_layout`).
    """
    from .card_layout import lay_out

    lay = lay_out(cards_context(plan, cs, paper=paper))
    return lay, lay.density


def cards_document(plan: Plan, cs, *, paper: str = "A4", fmt_: str = "pdf") -> bytes:
    """``cards.pdf``: one page per student (or the HTML of the whole cards at the first type size with
    ``fmt_="html"``); ``cs`` as in :func:`cards_context`; see :func:`card_layout`."""
    from .card_layout import FIRST_DENSITY

    validate_paper_format(paper, fmt_)
    if fmt_ == "html":
        ctx = cards_context(plan, cs, paper=paper)
        return render_html("cards.html.j2", {**ctx, "density": FIRST_DENSITY.get(paper, 0)}).encode("utf-8")
    lay, _ = card_layout(plan, cs, paper=paper)
    return lay.write_pdf()


# --------------------------------------------------------------------------------------------------
# the instructor's key
# --------------------------------------------------------------------------------------------------
def key_rows(plan: Plan, cs: ClassSet) -> list[dict]:
    """One row per student and tube: volumes of every stock (plan order), the expected absorbance and
    its acceptance band (±2 sd of the tube's full error budget), from each card's assessment."""
    rows = []
    for c in cs.cards:
        r = c.assessment.recipe
        vols = r.volumes_mL.tolist()
        for i, (t, a, sd) in enumerate(_tube_bands(c.assessment)):
            rows.append(
                {
                    "student": c.student,
                    "name": c.name,
                    "section": c.section,
                    "tube": t,
                    "volumes_mL": dict(zip(r.stock_ids, vols[i], strict=True)),
                    "absorbance": a,
                    "band_low": a - BAND_SD * sd,
                    "band_high": a + BAND_SD * sd,
                }
            )
    return rows


def _tube_bands(a) -> list[tuple[str, float, float]]:
    """(tube, expected absorbance, its sd from every error source) of an assessment's tubes."""
    return list(zip(a.recipe.tubes, a.state.absorbance.tolist(), a.absorbance_sd.tolist(), strict=True))


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


def _series_short(plan: Plan, c) -> str:
    """A card's series in a few words for the key ("CU 0.70–7.30"), or "—"."""
    if c.series is None:
        return "—"
    v = c.recipe.column(c.series.varied)
    step = plan.glassware.step_mL
    return f"{c.series.varied} {fmt.volume(float(v.min()), step)}–{fmt.volume(float(v.max()), step)}"


def _key_students(plan: Plan, cs: ClassSet) -> list[dict]:
    students = []
    for c in cs.cards:
        cells = []
        for _, a, sd in _tube_bands(c.assessment):
            cells.append(
                {
                    "a": fmt.fixed(a, 0.001),
                    "band": f"{fmt.fixed(a - BAND_SD * sd, 0.001)}–{fmt.fixed(a + BAND_SD * sd, 0.001)}",
                }
            )
        sat = c.spread.saturation[1] if c.spread is not None else None
        students.append(
            {
                "student": short(c.student, ID_MAX),
                "name": short(c.name),
                "section": short(c.section, ID_MAX),
                "series": _series_short(plan, c),
                "distinct": c.spread.distinct if c.spread is not None else "",
                "saturation": "" if sat is None else f"{fmt.fixed(sat[0], 0.01)}–{fmt.fixed(sat[1], 0.01)}",
                "se": fmt.sig(c.assessment.target_se, 2),
                "passes": c.passes,
                "problems": c.problems,
                "cells": cells,
            }
        )
    return students


def _se_rows(cs: ClassSet) -> list[tuple[str, str, str]]:
    se, N = cs.se, len(cs.cards)
    rows = [
        ("one student, this class's median card", se["cards_median"], None),
        ("one student, the best single recipe", se["best_single"], None),
        ("one student, the evenly spaced series", se["even_single"], None),
        (f"the whole class pooled ({plural(N, 'card')}, stocks shared)", se["pooled"], None),
        (
            f"{plural(N, 'copy', 'copies')} of the best single recipe",
            se["pooled_best_copies"],
            se["pooled_best_copies"] / se["pooled"],
        ),
        (
            f"{plural(N, 'copy', 'copies')} of the evenly spaced series",
            se["pooled_even_copies"],
            se["pooled_even_copies"] / se["pooled"],
        ),
        ("the class pooled, each section making its own stocks", se["pooled_stock_per_section"], None),
        ("the class pooled, stock errors left out (stocks standardised)", se["pooled_without_stock"], None),
        (
            f"{plural(N, 'copy', 'copies')} of the best single recipe, stock errors left out",
            se["pooled_best_copies_without_stock"],
            se["pooled_best_copies_without_stock"] / se["pooled_without_stock"],
        ),
    ]
    return [
        (label, fmt.sig(v, 2), fmt.sig(r, 3) if r is not None else "")
        for label, v, r in rows
        if v is not None
    ]


def _key_notes(plan: Plan, cs: ClassSet, stocks: tuple[ClassStock, ...]) -> list[str]:
    """What the cards do not say to students goes to the instructor: how the set was made, the plan
    author's notes (plan keys named), the reagents without hazard data, stocks short or under-stated."""
    from ..jobs.stocks.needs import stock_needs
    from .stock_text import plan_notes

    notes = list(cs.notes)
    notes.extend(plan_notes(plan, stock_needs(plan)))
    for r in safety.hazards_for(plan):
        if r.hazards is None and r.message:
            notes.append(f"safety: {r.message}")
    for s in stocks:
        st = plan.stock_by_id(s.id)
        said = any(x.startswith(f"stock {s.id}: weighing and glassware give") for x in notes)
        if s.preparation is not None and st.conc_rsd < s.preparation.u_rel * 0.999 and not said:
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
    return notes


LAB_TEXT = {
    "binding-curve": "a binding curve: one reagent held, the other rising, saturation spread over 0.2–0.8 at "
    "the guess and at log β ± 1 sd",
    "mole-ratio": "a mole-ratio series: the metal held, the ligand rising past the complex's ratio",
    "job": "a Job series: metal and ligand at a constant total, the metal's fraction rising past the "
    "complex's",
}


def _how_made(cs: ClassSet) -> str:
    if cs.lab == "pooled":
        jitter = f"±{plural(cs.radius_steps, 'grid step')} (±{fmt.sig(cs.radius_steps * cs.step_mL, 2)} mL)"
        return (
            f"The cards were made for the pooled fit alone: the optimal design of the class's tubes, dealt "
            f"out and moved at most {jitter} to make the cards different."
        )
    return (
        f"Every card is a teaching series — {LAB_TEXT[cs.lab]} — with at least 5 distinct compositions; the "
        f"cards were chosen together so that the class's pooled fit stays efficient for K."
    )


def _failing_text(n: int) -> str:
    """ "1 card fails" / "3 cards fail": the count, its noun and the verb in agreement."""
    return f"{plural(n, 'card')} {'fails' if n == 1 else 'fail'}"


def key_context(plan: Plan, cs: ClassSet, stocks: tuple[ClassStock, ...], *, paper: str = "A4") -> dict:
    """Template context of ``key.pdf``: the class's numbers, then one row per student with each tube's
    expected absorbance and band."""
    n = cs.best.n_tubes
    return {
        "kind": "key",
        "mode": "full",
        "paper": paper,
        "title": plan.title,
        "target": cs.target,
        "goal": fmt.sig(cs.goal_se, 2),
        "seed": cs.seed,
        "n": n,
        "count": len(cs.cards),
        "cards_text": plural(len(cs.cards), "card"),
        "tubes_text": plural(n, "tube"),
        "failing_text": _failing_text(len(cs.cards) - sum(c.passes for c in cs.cards)),
        "sound": cs.sound,
        "passing": sum(c.passes for c in cs.cards),
        "how_made": _how_made(cs),
        "se_rows": _se_rows(cs),
        "efficiency": fmt.percent(cs.efficiency, 3),
        "efficiency_without_stock": fmt.percent(cs.efficiency_without_stock, 3),
        "notes": _key_notes(plan, cs, stocks),
        "students": _key_students(plan, cs),
        "tubes": [f"T{i + 1}" for i in range(n)],
    }


def key_document(
    plan: Plan, cs: ClassSet, stocks: tuple[ClassStock, ...], *, paper: str = "A4", fmt_: str = "pdf"
) -> bytes:
    """``key.pdf``: the instructor's key."""
    from .key_layout import key_pdf

    validate_paper_format(paper, fmt_)
    ctx = key_context(plan, cs, stocks, paper=paper)
    if fmt_ == "html":
        return render_html("key.html.j2", ctx).encode("utf-8")
    return key_pdf(ctx)


# --------------------------------------------------------------------------------------------------
# the class stock list (:mod:`planner.paper.class_stocks`)
# --------------------------------------------------------------------------------------------------
def stocks_document(
    plan: Plan, cs, stocks: tuple[ClassStock, ...], *, paper: str = "A4", fmt_: str = "pdf"
) -> bytes:
    """``stocks.pdf``: the class stock list; ``cs`` a :class:`ClassSet` or the drafted cards."""
    validate_paper_format(paper, fmt_)
    count = len(cs.cards) if isinstance(cs, ClassSet) else len(cs)
    return output_bytes(stocks_page(plan, count, stocks, paper=paper), fmt_)

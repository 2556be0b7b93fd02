"""The class stock list on paper (``stocks.pdf``) and as a table (``stocks.csv``).

How each stock is made is said in the words of the prep sheet and ``kplan stocks``
(:func:`planner.paper.stock_text.prep_lines` on :func:`planner.jobs.stocks.needs.stock_needs`'s entry for
the class's flask): every solute with its mass, the solvent and the flask. One source of stock text, two
outputs.
"""

from __future__ import annotations

from ..inputs.plan import Plan
from ..inputs.tables import write_csv
from ..inputs.text import plural
from ..jobs.classroom.stock_list import ClassStock
from . import fmt
from .render import render_html
from .stock_text import mass_basis_text, prep_lines, pretty_formula

__all__ = ["STOCK_COLUMNS", "solute_masses", "stocks_csv", "stocks_context", "stocks_page"]


def _how(plan: Plan, s: ClassStock) -> tuple[list[str], list[str]]:
    """(instructions, warnings) for the class's batch: the prep sheet's own sentences."""
    if s.need is None:
        return ["not used by any card"], []
    need = s.need
    lines, warns = prep_lines(plan, s.id, need)
    basis = need.mass_basis
    if basis and basis.set_by in ("flask", "recipe"):  # the class's flask, not the plan's recipe
        said = mass_basis_text(need)
        whole = f"{s.batches} × {s.need.flask_mL:g} mL" if s.batches > 1 else f"{s.need.flask_mL:g} mL"
        lines = [
            f"Mass set by the flask that holds what the class needs ({fmt.fixed(s.total_mL, 0.1)} mL in "
            f"{whole})."
            if x == said
            else x
            for x in lines
        ]
    if s.batches > 1:
        lines = [f"Make {s.batches} batches, each as follows.", *lines]
    return lines, warns


def solute_masses(need, batches: int, *, pretty: bool = True) -> str:
    """Every weighed solute of one batch with its mass ("0.2440 g Cu(NO₃)₂·3H₂O, 0.7077 g KNO₃"), the
    solutions added and the salts without a formula named; "N × (…)" for N batches."""
    if need is None:
        return ""
    f = pretty_formula if pretty else (lambda x: x)
    parts = []
    prep = need.preparation
    if prep is not None:
        parts.append(f"{prep.mass_g:.4f} g {f(prep.formula)}")
    for x in need.solutes:
        if x.role == "salt" and x.mass_g is not None:
            parts.append(f"{x.mass_g:.4f} g {f(x.formula)}")
        elif x.role == "solution":
            parts.append(f"{f(x.formula)} from a standardised solution to {fmt.conc(x.conc_M)}")
        elif x.role == "component" and prep is None:
            parts.append(f"the {x.name} for {fmt.conc(x.conc_M)} (no formula: weigh as its supplier says)")
    text = ", ".join(parts)
    return f"{batches} × ({text})" if batches > 1 and text else text


def _section_rows(s: ClassStock) -> list[dict]:
    needs = s.section_needs or (None,) * len(s.sections)
    out = []
    for (name, v, b, t), sn in zip(s.sections, needs, strict=True):
        out.append(
            {
                "name": name or "—",
                "tubes": fmt.fixed(v, 0.1),
                "benches": b,
                "total": fmt.fixed(t, 0.1),
                "make": None if sn is None else f"{solute_masses(sn[0], sn[1])} in {sn[0].flask_mL:g} mL",
            }
        )
    return out


def stocks_context(plan: Plan, count: int, stocks: tuple[ClassStock, ...], *, paper: str = "A4") -> dict:
    g = plan.glassware
    sections = [name for name, *_ in stocks[0].sections] if stocks else []
    rows = []
    for s in stocks:
        made = s.need.flask_mL * s.batches if s.need is not None and s.need.flask_mL else None
        how, warns = _how(plan, s)
        rows.append(
            {
                "id": s.id,
                "label": s.label,
                "tubes": fmt.fixed(s.tubes_mL, 0.1),
                "benches": s.benches,
                "allowance": fmt.fixed(s.allowance_mL, 0.1),
                "total": fmt.fixed(s.total_mL, 0.1),
                "made": f"{made:g}" if made else "—",
                "on_hand": f"{s.on_hand_mL:g}" if s.on_hand_mL is not None else "—",
                "enough": s.enough,
                "short": fmt.fixed(s.shortfall_mL, 0.1),
                "how": how,
                "warnings": warns,
                "sections": _section_rows(s),
            }
        )
    return {
        "kind": "stocks",
        "paper": paper,
        "title": plan.title,
        "count": count,
        "students_text": plural(count, "student"),
        "rinse": fmt.fixed(g.rinse_mL, 0.01),
        "dead": fmt.fixed(g.dead_volume_mL, 0.01),
        "rows": rows,
        "sections": [s or "—" for s in sections],
        "many_sections": len(sections) > 1,
    }


def stocks_page(plan: Plan, count: int, stocks: tuple[ClassStock, ...], *, paper: str = "A4") -> str:
    """The HTML of ``stocks.pdf``."""
    return render_html("class_stocks.html.j2", stocks_context(plan, count, stocks, paper=paper))


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
    "solutes",
    "solvent",
)


def _csv_row(sid: str, scope: str, v, b, allow, t, need, batches, extra=("", "")) -> list:
    p = need.preparation if need is not None else None
    return [
        sid,
        scope,
        f"{v:.2f}",
        b,
        f"{allow:.2f}",
        f"{t:.2f}",
        *extra,
        "" if p is None else f"{p.mass_g:.4f}",
        "" if need is None or not need.flask_mL else f"{need.flask_mL:g}",
        batches if need is not None else "",
        "" if need is None else solute_masses(need, 1, pretty=False),
        "" if need is None else need.solvent,
    ]


def stocks_csv(plan: Plan, stocks: tuple[ClassStock, ...]) -> str:
    """``stocks.csv``: one row per stock for the class (scope ``class``), then one per stock and section.
    ``mass_g`` is the metal or ligand salt's mass per batch; ``solutes`` every solute of one batch with its
    mass (g, 4 decimals). Every text cell is data, never a spreadsheet formula."""
    g = plan.glassware
    allow = g.rinse_mL + g.dead_volume_mL
    rows = []
    for s in stocks:
        on_hand = "" if s.on_hand_mL is None else f"{s.on_hand_mL:.2f}"
        enough = "" if s.enough is None else ("yes" if s.enough else "no")
        rows.append(
            _csv_row(
                s.id,
                "class",
                s.tubes_mL,
                s.benches,
                s.allowance_mL,
                s.total_mL,
                s.need,
                s.batches,
                (on_hand, enough),
            )
        )
    for s in stocks:
        needs = s.section_needs or (None,) * len(s.sections)
        for (name, v, b, t), sn in zip(s.sections, needs, strict=True):
            scope = f"section {name}" if name else "section"
            need, batches = sn if sn is not None else (None, "")
            rows.append(_csv_row(s.id, scope, v, b, b * allow, t, need, batches))
    return write_csv(STOCK_COLUMNS, rows)

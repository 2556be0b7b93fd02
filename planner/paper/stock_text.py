"""What the prep sheet says about each stock, for the bench, and the notes for the plan's author.

Every solute of a stock (its M or L salt, the salts its other ions pair into, an acid added from a
standardised solution), the solvent and the flask, from the entries of
:func:`planner.jobs.stocks.needs.stock_needs`. Bench text never names a plan key; :func:`plan_notes`
(printed on the report) does.
"""

from __future__ import annotations

import re
from collections.abc import Sequence

from ..inputs.plan import Plan
from ..jobs.stocks.mass_basis import MassBasis
from ..jobs.stocks.needs import Solute, StockNeed
from ..uncertainty.stocks import USP41_READABILITY_FACTOR, StockPreparation
from . import fmt, safety

__all__ = [
    "conc_lines",
    "mass_advice_text",
    "mass_basis_text",
    "mass_words",
    "needed_text",
    "plan_notes",
    "prep_lines",
    "pretty_formula",
]


_SUBSCRIPT = str.maketrans("0123456789", "₀₁₂₃₄₅₆₇₈₉")


def pretty_formula(formula: str) -> str:
    """A formula as printed: counts as subscripts, hydrate dot as '·' ("CuSO4.5H2O" → "CuSO₄·5H₂O")."""
    parts = re.split(r"[.·•∙⋅*](?=\d*[A-Z(\[])", formula.strip())
    out = []
    for part in parts:
        coef, rest = re.match(r"(\d*)(.*)", part, flags=re.S).groups()
        out.append(coef + re.sub(r"(?<=[A-Za-z)\]])\d+", lambda m: m.group(0).translate(_SUBSCRIPT), rest))
    return "·".join(out)


def conc_lines(plan: Plan, sid: str, need: StockNeed) -> tuple[list[str], str | None]:
    s = plan.stock_by_id(sid)
    prep = need.preparation
    rsd = s.conc_rsd if s.conc_rsd > 0 else (prep.u_rel if prep else 0.0)
    lines = []
    for comp, c in s.conc.items():
        who = getattr(plan.components, comp).label or comp
        lines.append(f"{who}: {fmt.conc_with_uncertainty(c, rsd * c)}")
    basis = None
    if lines:  # said for the bench: where the ± comes from, without the plan's key names
        basis = (
            "± as stated in the plan"
            if s.conc_rsd > 0
            else "± from the weighing and glassware"
            if prep
            else "uncertainty not stated"
        )
    return lines, basis


def _salt_text(x: Solute, readability_g: float) -> str:
    """One weighed salt or added acid of a stock, as said at the bench."""
    if x.role == "solution":
        return (
            f"{fmt.sig(x.conc_M * 1e3, 3)} mmol/L of {pretty_formula(x.formula)} ({x.name}), "
            f"from a standardised solution"
        )
    return (
        f"{fmt.mass(x.mass_g, readability_g)} of {pretty_formula(x.formula)} "
        f"({x.name}, M = {fmt.sig(x.formula_weight_g_mol, 5)} g/mol)"
    )


def _weighed_lines(
    prep: StockPreparation, need: StockNeed, extra_txt: str, solvent: str, d: float
) -> list[str]:
    """The weighing (and any dilution chain) of a stock's metal or ligand salt, its u, what sets its mass."""
    lines = []
    assay = f", assay {fmt.percent(prep.purity, 3)}" if prep.purity < 1 else ""
    head = (
        f"Weigh {fmt.mass(prep.mass_g, d)} of {pretty_formula(prep.formula)} "
        f"(M = {fmt.sig(prep.formula_weight_g_mol, 5)} g/mol{assay})"
    )
    if prep.steps:
        lines.append(
            f"{head}; dissolve in {solvent} and make up to the mark of a "
            f"{prep.weighed_flask.label} ({fmt.conc(prep.weighed_conc_M)})."
        )
        for j, st in enumerate(prep.steps):
            last = j == len(prep.steps) - 1
            add = f", add {extra_txt}," if last and extra_txt else ""
            lines.append(
                f"Pipette {fmt.sig(st.pipette.capacity_mL, 3)} mL ({st.pipette.label}) into a "
                f"{st.flask.label}"
                f"{add} and make up to the mark with {solvent}: {fmt.conc(st.to_conc_M)}."
            )
    else:
        lines.append(
            f"{head}{' and ' + extra_txt if extra_txt else ''}; dissolve in {solvent} and make up "
            f"to the mark of a {prep.weighed_flask.label}."
        )
    lines.append(f"Weighing and glassware give u = {fmt.percent(prep.u_rel)}.")
    basis = mass_basis_text(need)
    return [*lines, basis] if basis else lines


def prep_lines(plan: Plan, sid: str, need: StockNeed) -> tuple[list[str], list[str]]:
    """(instructions, warnings) for making one stock: every solute, the solvent and the flask."""
    s = plan.stock_by_id(sid)
    g = plan.glassware
    d = g.balance.readability_g
    prep = need.preparation
    solutes = need.solutes
    extra = [x for x in solutes if x.role in ("salt", "solution")]
    extra_txt = " and ".join(_salt_text(x, d) for x in extra)
    solvent = need.solvent or "deionised water"
    flask = need.flask_label
    warns: list[str] = []
    lines: list[str] = []
    if prep:
        lines += _weighed_lines(prep, need, extra_txt, solvent, d)
        if prep.mass_g < prep.min_weight_g:
            warns.append(
                f"{fmt.mass(prep.mass_g, d)} is below the balance's minimum weight of "
                f"{fmt.mass(prep.min_weight_g, d)} (USP <41>): weigh more into a larger flask and dilute."
            )
    else:
        comp = [x for x in solutes if x.role == "component"]
        parts = [
            f"the {x.name}{' (with ' + ', '.join(x.ions[1:]) + ')' if len(x.ions) > 1 else ''} "
            f"for {fmt.conc(x.conc_M)} (no formula given, so weigh it as its supplier or your notes say)"
            for x in comp
        ]
        if extra_txt:
            parts.append(extra_txt)
        if parts and flask:
            verb = "Weigh" if extra and not comp else "Take"
            lines.append(
                f"{verb} {' and '.join(parts)}; dissolve in {solvent} and make up to the mark of a {flask}."
            )
        elif flask and not solutes:
            lines.append(f"{solvent[0].upper()}{solvent[1:]}, nothing dissolved.")
        if need.problem:
            warns.append(str(need.problem))
    min_wt = _min_weight_g(plan)
    for x in extra:
        if x.role == "salt" and x.mass_g < min_wt:
            warns.append(
                f"{fmt.mass(x.mass_g, d)} of {pretty_formula(x.formula)} is below the balance's "
                f"minimum "
                f"weight ({fmt.mass(min_wt, d)}, USP <41>): add it from a more concentrated solution instead."
            )
    for x in solutes:
        if x.role == "unpaired":
            warns.append(
                f"{', '.join(x.ions)}: no common salt pairs these ions; make them up as the label says."
            )
    gap = need.charge_gap
    if gap:
        warns.append(
            f"The ions listed for this stock do not balance in charge: {gap.ion} "
            f"({fmt.conc(gap.conc_M)}) is missing, so the planned ionic strength is "
            f"{fmt.percent(gap.ionic_strength_low)} low. Ask whoever wrote the plan before making it."
        )
    if s.diluent:
        lines.append("It is also the blank.")
    return lines, warns


def mass_words(m_g: float) -> str:
    """A mass in words for a sentence, in g, mg or µg to three significant figures ("214 mg")."""
    for unit, f in (("g", 1.0), ("mg", 1e3), ("µg", 1e6)):
        if abs(m_g) * f >= 1 or unit == "µg":
            return f"{fmt.sig(m_g * f, 3)} {unit}"
    return f"{m_g:g} g"  # pragma: no cover - the loop always returns


_FLASK_WHY = {
    "plan": "the flask chosen for this stock",
    "on-hand": "enough to keep the stated volume on hand",
    "default": "the usual smallest stock flask",
    "recipe": "the smallest flask that holds what the tubes need",
    "least-reagent": (
        "the flask that lets the dilution reach the balance's minimum weight with the least reagent"
    ),
}


def mass_basis_text(need: StockNeed) -> str:
    """What sets a stock's mass, in words for the bench (no plan keys): the recipe's need, the flask, or the
    balance's minimum weight (USP <41>)."""
    b = need.mass_basis
    if not b:
        return ""
    flask = need.flask_mL
    needs = "" if b.recipe_mass_g is None else f"; the tubes need {mass_words(b.recipe_mass_g)} of it"
    if b.set_by == "recipe":
        return f"Mass set by what the tubes need, in {_FLASK_WHY[b.flask_reason]} ({flask:g} mL){needs}."
    if b.set_by == "flask":
        return f"Mass set by the flask ({flask:g} mL, {_FLASK_WHY[b.flask_reason]}){needs}."
    return (
        f"Mass set by the balance's minimum weight ({mass_words(b.min_weight_g)}, USP <41>): the "
        f"{flask:g} mL flask would take only {mass_words(b.direct_mass_g)}{needs}, so a concentrate "
        "is weighed and diluted."
    )


def mass_advice_text(need: StockNeed) -> str:
    """How to weigh less of a stock's reagent: plan it as scarce, or a balance good enough to weigh the
    flask's mass directly (USP <41>: minimum weight 2000·s, s at least 0.41 × the scale interval)."""
    b = need.mass_basis
    if not b:
        return ""
    out = []
    least = b.least_mass_g
    if least is not None and not b.scarce and least < 0.95 * b.mass_g:
        out.append(f"Planned as scarce it would weigh {mass_words(least)}.")
    s = b.repeatability_to_weigh_directly_g
    if s:
        out.append(
            f"A balance with a repeatability of at most {mass_words(s)} (scale interval at most "
            f"{mass_words(s / USP41_READABILITY_FACTOR)}) would weigh {mass_words(b.direct_mass_g)} "
            "directly."
        )
    return " ".join(out)


def _min_weight_g(plan: Plan) -> float:
    from ..uncertainty.stocks import minimum_weight_g

    b = plan.glassware.balance
    return minimum_weight_g(b.repeatability_g, readability_g=b.readability_g)


def needed_text(plan: Plan, need: StockNeed) -> tuple[str, list[str], bool | None]:
    """(volume needed, its parts one per line, enough on hand?) for the stock table."""
    if need.needed_mL is None:
        return "—", [], None
    used, total = need.recipe_mL, need.needed_mL
    g = plan.glassware
    txt = f"{fmt.fixed(total, 0.1)} mL"
    sub: list[str] = []
    if total > used:  # the allowance is the rinse plus what the dispenser keeps: say both
        sub = [
            f"{fmt.fixed(used, 0.1)} in tubes",
            f"+ {fmt.fixed(g.rinse_mL, 0.1)} rinse",
            f"+ {fmt.fixed(g.dead_volume_mL, 0.1)} dead volume",
        ]
    return txt, sub, need.enough


def _scarce_note(sid: str, b: MassBasis | None) -> str:
    """A note for the author when planning the stock as scarce would weigh clearly less reagent."""
    least = b.least_mass_g if b else None
    if not b or b.scarce or least is None or least >= 0.95 * b.mass_g:
        return ""
    need = "" if b.recipe_mass_g is None else f" where the tubes need {mass_words(b.recipe_mass_g)}"
    return (
        f"stock {sid}: weighs {mass_words(b.mass_g)}{need}; with scarce = true it would be made in the "
        f"smallest flask that holds it and weigh {mass_words(least)}"
    )


def plan_notes(plan: Plan, needs: Sequence[StockNeed]) -> list[str]:
    """Notes for the plan's author (plan-file keys named): they go on the report, never on the bench sheet."""
    notes = []
    for n in needs:
        s = plan.stock_by_id(n.id)
        prep = n.preparation
        if prep and s.conc_rsd < prep.u_rel * 0.999:
            notes.append(
                f"stock {s.id}: weighing and glassware give u = {fmt.percent(prep.u_rel)}, more than "
                f"conc_rsd = {fmt.sig(s.conc_rsd, 2)} assumes: raise conc_rsd to "
                f"{fmt.sig(prep.u_rel, 2)} or standardise the stock"
            )
        gap = n.charge_gap
        if gap:
            ion = gap.ion if not gap.ion.startswith("a") else "the counter-ion"
            notes.append(
                f"stock {s.id}: its ions do not balance in charge; add {ion} "
                f"({fmt.conc(gap.conc_M)}) to its ions, or the ionic strength is "
                f"{fmt.percent(gap.ionic_strength_low)} low"
            )
        note = _scarce_note(s.id, n.mass_basis)
        if note:
            notes.append(note)
        comp = [c for c in ("M", "L") if c in s.conc]
        if comp and not s.formula:
            notes.append(
                f"stock {s.id}: give formula = '...' of its "
                f"{' and '.join({'M': 'metal', 'L': 'ligand'}[c] for c in comp)} salt so the sheet "
                f"can say how much to weigh"
            )
    for r in safety.hazards_for(plan):
        if r.hazards is None and not r.message.startswith(safety.NO_DATA):
            notes.append(
                f"stock {', '.join(r.stock_ids)}: name its reagent (reagent = '...') so the safety box "
                f"can list its hazards"
            )
    return notes

"""What goes on the printed prep sheet and design report, as plain strings (no HTML, no chemistry).

These functions turn the plan, the recipe, the assessment (:class:`~planner.jobs.plan.assess.Assessment`)
and the stock needs (:class:`~planner.jobs.stocks.needs.StockNeed`) into template contexts. Every number is
formatted here, by :mod:`planner.paper.fmt`, from the same values ``--json`` prints, so the paper and the
JSON agree digit for digit. The templates only lay the strings out. The order of addition and the bench's
small texts (dispensers, blank, checklist) are made in :mod:`planner.paper.bench_steps` and re-exported here.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

from markupsafe import Markup

from ..inputs.plan import Plan
from ..inputs.recipe import Recipe
from ..jobs.plan.assess import Assessment
from ..jobs.plan.checks import SATURATION_WINDOW
from ..jobs.stocks.needs import StockNeed
from . import fmt, safety
from .bench_steps import (
    DEFAULT_ADDITION,
    RenderError,
    addition_order,
    addition_steps,
    blank_text,
    checklist,
    dispenser_text,
    spectrum_text,
    stock_role,
)
from .bench_volumes import reading_note
from .pictograms import pictogram_svg
from .stock_text import conc_lines, needed_text, plan_notes, prep_lines, pretty_formula

__all__ = [
    "DEFAULT_ADDITION",
    "DesignFacts",
    "RenderError",
    "addition_order",
    "blank_text",
    "checklist",
    "prep_context",
    "plan_notes",
    "pretty_formula",
    "report_context",
    "safety_context",
    "stock_role",
]

LN10 = math.log(10.0)


# --------------------------------------------------------------------------------------------------
# safety
# --------------------------------------------------------------------------------------------------
def safety_context(plan: Plan) -> dict:
    """Cards for every reagent of the plan, the CMR alert, clashes and the usual cautions."""
    reagents = safety.hazards_for(plan)
    cards, cmr = [], []
    for r in reagents:
        hz = r.hazards
        card = {
            "name": r.name,
            "stocks": ", ".join(r.stock_ids),
            "inferred": r.inferred,
            "message": r.message,
            "known": hz is not None,
        }
        if hz is not None:
            card.update(
                {
                    "formula": pretty_formula(hz.formula),
                    "signal": hz.signal_word or "not classified",
                    "danger": hz.signal_word == "Danger",
                    "pictograms": [
                        {"code": p, "name": safety.PICTOGRAMS[p], "svg": Markup(pictogram_svg(p))}
                        for p in hz.pictograms
                    ],
                    "statements": [{"code": c, "text": t} for c, t in hz.statements()],
                    "cmr": hz.cmr,
                    "cmr_codes": ", ".join(hz.cmr_codes),
                    "incompatible": list(hz.incompatible),
                    "ppe": list(hz.ppe),
                    "waste": hz.waste,
                    "notes": hz.notes,
                    "provenance": (
                        f"Library entry recalled from memory ({hz.source}); checked {hz.checked}."
                        if hz.from_memory
                        else f"Library entry: {hz.source}; checked {hz.checked}."
                    ),
                }
            )
            if hz.cmr:
                cmr.append({"name": hz.name, "codes": ", ".join(hz.cmr_codes), "stocks": card["stocks"]})
        cards.append(card)
    return {
        "cards": cards,
        "cmr": cmr,
        "cmr_advice": (
            "Use the least that resolves the constant (fewer or smaller tubes, a lower "
            "concentration) or substitute a less hazardous reagent; weigh solids in a fume "
            "hood or ventilated enclosure, and follow your institution's rules for CMR "
            "substances (some require prior approval or a register of use)."
        ),
        "clashes": [c.advice for c in safety.clashes(reagents)],
        "cautions": list(safety.GENERAL_CAUTIONS),
        "always": safety.ALWAYS,
    }


# --------------------------------------------------------------------------------------------------
# prep sheet
# --------------------------------------------------------------------------------------------------
def _levelling_fact(plan: Plan, a: Assessment) -> list[tuple[str, str]]:
    """Header line saying the background-electrolyte volumes level the ionic strength (when they do)."""
    bg = plan.background
    if bg is None:
        return []
    values = a.state.ionic_strength_M.tolist()
    if not values:
        return []
    lo, hi = min(values), max(values)
    return [("Ionic strength", f"{fmt.sig(lo, 3)}–{fmt.sig(hi, 3)} M: the {bg.id} volumes level it")]


def tube_columns(a: Assessment, species: str) -> tuple[list[float], list[float], list[float]]:
    """Each tube's expected reading, the half-width of its ±2 sd band, and its concentration of
    ``species`` (mol/L), as plain numbers for the tube tables."""
    k = a.model.index(species)
    return a.state.absorbance.tolist(), (2 * a.absorbance_sd).tolist(), a.state.species_M[:, k].tolist()


def prep_context(
    plan: Plan,
    recipe: Recipe,
    a: Assessment,
    needs: Sequence[StockNeed],
    *,
    date: str,
    paper: str,
    order: Sequence[str] | None = None,
) -> dict:
    """Template context of the prep sheet from the assessment and the stocks' needs."""
    g, o = plan.glassware, plan.optics
    step = g.step_mL
    dil = plan.diluent
    to_mark = g.make_up == "to-mark" and dil is not None
    seq = addition_order(plan, recipe, order)
    steps = addition_steps(plan, recipe, seq, custom=order is not None)
    blank_name, blank_sentence = blank_text(plan)
    stocks = _stock_rows(plan, needs, to_mark)
    target = plan.target
    a_step = o.display_step if o.display_step > 0 else 0.001
    c_unit, rows = _tube_rows(plan, a, seq, a_step, to_mark)
    safe = safety_context(plan)
    spectra = o.has_spectra
    return {
        "kind": "prep",
        "a_heading": "Highest A of the spectrum (±2 sd)" if spectra else "Expected A (±2 sd)",
        "blank_where": "over the whole spectrum" if spectra else "at the working wavelength",
        "paper": paper,
        "title": plan.title,
        "date": date,
        "facts": _prep_facts(plan, recipe, a, to_mark),
        "blank": blank_sentence,
        "blank_name": blank_name,
        "verdict": a.verdict,
        "verdict_reason": a.verdict_reason,
        "failing": list(a.failed),
        "stocks": stocks,
        "steps": [{"text": s.text, "why": s.why} for s in steps],
        "columns": [f"{sid}" for sid in seq],
        "column_units": "mL",
        "step_text": fmt.volume(step, step),
        "reading_note": reading_note(plan, seq),
        "makeup": f"{dil.id} to the mark / mL" if to_mark else None,
        "target": target,
        "target_label": fmt.species(target),
        "conc_unit": c_unit,
        "a_step": fmt.sig(a_step, 1),
        "rows": rows,
        "checklist": checklist(plan, blank_name),
        "safety": safe,
        "cmr": bool(safe["cmr"]),
    }


def _prep_facts(plan: Plan, recipe: Recipe, a: Assessment, to_mark: bool) -> list[tuple[str, str]]:
    """The sheet's header: wavelength (or spectrum), path, linear range, tubes, temperature."""
    g, o = plan.glassware, plan.optics
    lo, hi = o.linear_range
    return [
        ("Spectrum", spectrum_text(plan))
        if o.has_spectra
        else ("Wavelength", f"{fmt.sig(o.wavelength_nm, 3)} nm"),
        ("Path length", f"{fmt.fixed(o.path_cm, 0.001)} cm"),
        ("Linear range", f"A {fmt.fixed(lo, 0.01)}–{fmt.fixed(hi, 0.01)}"),
        (
            "Tubes",
            f"{recipe.n_tubes} × {fmt.sig(g.tube_volume_mL, 3)} mL"
            + (" volumetric flasks" if to_mark else ", every volume added"),
        ),
        ("Temperature", f"{fmt.sig(plan.temperature_C, 3)} °C"),
        *_levelling_fact(plan, a),
    ]


def _stock_rows(plan: Plan, needs: Sequence[StockNeed], to_mark: bool) -> list[dict]:
    """Each stock: its concentration, how to make it, how much is needed and what delivers it."""
    by_id = {n.id: n for n in needs}
    missing = [s.id for s in plan.stock if s.id not in by_id]
    if missing:
        raise RenderError(
            f"needs: no entry for stock(s) {', '.join(missing)}: pass stock_needs(plan, recipe)"
        )
    stocks = []
    for s in plan.stock:
        n = by_id[s.id]
        c_lines, basis = conc_lines(plan, s.id, n)
        how, warns = prep_lines(plan, s.id, n)
        needed, needed_sub, enough = needed_text(plan, n)
        d = plan.dispenser_for(s.id)
        if d is not None:
            disp = dispenser_text(d)
        elif s.diluent and to_mark:
            disp = "to the mark of each flask"
        else:
            disp = "not dispensed" if n.deliveries == 0 else "no dispenser in the plan"
        on_hand = f"{fmt.sig(n.on_hand_mL, 3)} mL" if n.on_hand_mL is not None else "—"
        if enough is False:
            warns = [f"NOT ENOUGH on hand: make at least {needed}.", *warns]
        stocks.append(
            {
                "id": s.id,
                "label": s.label,
                "diluent": s.diluent,
                "conc": c_lines,
                "conc_basis": basis,
                "needed": needed,
                "needed_sub": needed_sub,
                "enough": enough,
                "on_hand": on_hand,
                "dispenser": disp,
                "how": how,
                "warnings": warns,
            }
        )
    return stocks


def _tube_rows(
    plan: Plan, a: Assessment, seq: tuple[str, ...], a_step: float, to_mark: bool
) -> tuple[str, list[dict]]:
    """The complex's concentration unit and each tube's row: volumes in the order of addition, the
    diluent to expect under to-mark, the expected absorbance band and the complex's concentration."""
    step = plan.glassware.step_mL
    lo, hi = plan.optics.linear_range
    absorbance, half, complex_M = tube_columns(a, plan.target)
    bands = fmt.band_column(absorbance, half, a_step)
    c_unit, c_txt = fmt.conc_column(complex_M)
    vols = {sid: a.recipe.column(sid).tolist() for sid in a.recipe.stock_ids}
    rows = []
    for i, tube in enumerate(a.recipe.tubes):
        cells = [("—" if vols[sid][i] == 0 else fmt.volume(vols[sid][i], step)) for sid in seq]
        # under to-mark the diluent is the remainder: say how much to expect, so a flask already
        # full before the diluent goes in is noticed at the bench
        rest = fmt.volume(vols[plan.diluent.id][i], step) if to_mark else ""
        rows.append(
            {
                "tube": tube,
                "cells": cells,
                "makeup": rest,
                "absorbance": bands[i],
                "out": not (lo <= absorbance[i] <= hi),
                "complex": c_txt[i],
            }
        )
    return c_unit, rows


# --------------------------------------------------------------------------------------------------
# design report
# --------------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class DesignFacts:
    """What the report says of the design behind a recipe: its criterion, the lower bound on its
    efficiency and how many times smaller its SE is than the evenly spaced series' (None: not known)."""

    criterion: str | None = None
    efficiency_bound: float | None = None
    se_even_over_design: float | None = None

    @classmethod
    def of(cls, design) -> DesignFacts:
        """The facts of a :class:`~planner.jobs.plan.design.Design`."""
        return cls(design.criterion, design.efficiency_bound, design.se_even_over_design)

    @classmethod
    def from_json(cls, data: Mapping) -> DesignFacts:
        """The facts of a ``design.json`` that ``kplan design --out`` wrote (keys missing or null: None)."""
        return cls(
            data.get("criterion"), data.get("efficiency_bound"), data.get("se_ratio_vs_even")
        )  # the JSON key


_DESIGN_KEYS = (
    ("criterion", "criterion"),
    ("efficiency_bound", "efficiency bound (vs the best approximate design)"),
    ("se_even_over_design", "SE ratio against the evenly spaced series"),
)


def _design_rows(design: DesignFacts | None) -> list[tuple[str, str]]:
    if design is None:
        return []
    rows = []
    for key, label in _DESIGN_KEYS:
        v = getattr(design, key)
        if v is not None:
            rows.append((label, fmt.sig(float(v), 3) if isinstance(v, int | float) else str(v)))
    return rows


def _relative_se(name: str, true: float, se: float | None) -> str:
    """Relative SE of the quantity itself: of K for a log β (ln 10 · SE, first order), else SE/|value|."""
    if se is None:
        return "—"
    if name.startswith("log_beta["):
        return f"{fmt.percent(LN10 * se)} of K"
    return fmt.percent(se / abs(true)) if true else "—"


def _finite(x) -> float | None:
    x = float(x)
    return x if math.isfinite(x) else None


def _parameter_rows(a: Assessment) -> list[dict]:
    """The report's parameter table: guess, assumed truth, SE (also relative), Monte Carlo."""
    params = []
    for p in a.parameters:
        se, true = _finite(p.se), p.true
        ci = p.mc_ci95
        params.append(
            {
                "name": fmt.param_label(p.name),
                "guess": fmt.sig(p.guess, 4),
                "true": fmt.sig(true, 4),
                "se": fmt.sig(se, 2),
                "rel": _relative_se(p.name, true, se),
                "mc_sd": fmt.sig(_finite(p.mc_sd) if p.mc_sd is not None else None, 2),
                "mc_bias": fmt.sig(_finite(p.mc_bias) if p.mc_bias is not None else None, 2),
                "ci": (
                    f"{fmt.sig(_finite(ci[0]), 4)} – {fmt.sig(_finite(ci[1]), 4)}"
                    if ci and _finite(ci[0]) is not None
                    else "—"
                ),
            }
        )
    return params


def _report_rows(plan: Plan, a: Assessment, seq, sat_flag: bool) -> tuple[dict, list[dict]]:
    """(concentration units, tube rows) of the report's recipe table."""
    step = plan.glassware.step_mL
    lo, hi = plan.optics.linear_range
    o = plan.optics
    absorbance, half, complex_M = tube_columns(a, plan.target)
    bands = fmt.band_column(absorbance, half, o.display_step if o.display_step > 0 else 0.001)
    units, cols = {}, {}
    for key, values in (
        ("M", a.state.totals_M[:, 0].tolist()),
        ("L", a.state.totals_M[:, 1].tolist()),
        ("complex", complex_M),
    ):
        units[key], cols[key] = fmt.conc_column(values)
    vols = {sid: a.recipe.column(sid).tolist() for sid in a.recipe.stock_ids}
    sat = a.state.saturation.tolist()
    rows = []
    for i, tube in enumerate(a.recipe.tubes):
        rows.append(
            {
                "tube": tube,
                "cells": [("—" if vols[s][i] == 0 else fmt.volume(vols[s][i], step)) for s in seq],
                "M": cols["M"][i],
                "L": cols["L"][i],
                "complex": cols["complex"][i],
                "saturation": fmt.fixed(sat[i], 0.01),
                # coloured only when the saturation check itself is not passed: tubes near 0 or 1 are
                # part of a good design (they fix ε and the ends of the curve)
                "sat_out": sat_flag and not (SATURATION_WINDOW[0] <= sat[i] <= SATURATION_WINDOW[1]),
                "absorbance": bands[i],
                "out": not (lo <= absorbance[i] <= hi),
            }
        )
    return units, rows


def report_context(
    plan: Plan,
    recipe: Recipe,
    a: Assessment,
    *,
    date: str,
    paper: str,
    figures: dict[str, str],
    design: DesignFacts | None = None,
    notes: Sequence[str] = (),
) -> dict:
    """Template context of the design report (verdict first) from the assessment."""
    g = plan.glassware
    seq = addition_order(plan, recipe)
    target = plan.target
    lo, hi = plan.optics.linear_range
    sat_flag = any(c.id == "saturation" and c.status != "pass" for c in a.checks)
    units, rows = _report_rows(plan, a, seq, sat_flag)
    o = plan.optics
    params = _parameter_rows(a)
    names = list(a.params.names) if a.cramer_rao is not None and a.params is not None else []
    corr_rows = []
    if len(names) > 1:
        corr_rows = [
            {"name": fmt.param_label(n), "cells": [fmt.fixed(x, 0.01) if x is not None else "—" for x in row]}
            for n, row in zip(names, ([_finite(x) for x in r] for r in a.cramer_rao.corr), strict=True)
        ]
    prof = a.profile
    prof_text = None
    if prof is not None:
        d = [_finite(x) for x in prof.delta_chi2]
        prof_text = (
            f"Δχ² = {fmt.sig(d[0], 3)} towards K → 0 and {fmt.sig(d[-1], 3)} towards K → ∞ "
            f"(3.84 marks the 95 % limit)"
        )
    mc = a.mc
    return {
        "kind": "report",
        "paper": paper,
        "title": plan.title,
        "date": date,
        "verdict": a.verdict,
        "verdict_reason": fmt.chem_text(a.verdict_reason),
        "goal_se": fmt.sig(a.goal_se, 2),
        "target": target,
        "target_label": fmt.species(target),
        "units": units,
        "notes": list(notes),
        "facts": [
            (
                "Target",
                f"{fmt.param_label(f'log_beta[{target}]')}, goal SE ≤ {fmt.sig(a.goal_se, 2)}",
            ),
            ("Wavelength", f"{fmt.sig(o.wavelength_nm, 3)} nm, path {fmt.fixed(o.path_cm, 0.001)} cm"),
            ("Linear range", f"A {fmt.fixed(lo, 0.01)}–{fmt.fixed(hi, 0.01)}"),
            ("Tubes", f"{recipe.n_tubes} × {fmt.sig(g.tube_volume_mL, 3)} mL, make-up {g.make_up}"),
            (
                "Monte Carlo",
                f"{int(mc.estimates.shape[0])} simulated experiments, "
                f"{fmt.percent(mc.failed_fraction)} failed fits"
                if mc is not None
                else "not run",
            ),
        ],
        "columns": list(seq),
        "rows": rows,
        "figures": figures,
        "checks": [{"id": c.id, "status": c.status, "message": fmt.chem_text(c.message)} for c in a.checks],
        "params": params,
        "corr_names": [fmt.param_label(n) for n in names] if corr_rows else [],
        "corr_rows": corr_rows,
        "profile": prof_text,
        "design": _design_rows(design),
        "window": f"{fmt.sig(SATURATION_WINDOW[0], 1)}–{fmt.sig(SATURATION_WINDOW[1], 1)}",
        "sat_flag": sat_flag,
        "a_heading": "Expected A (±2 sd)",
    }

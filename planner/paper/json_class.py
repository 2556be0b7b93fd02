"""The ``--json`` shapes of a class: cards, the class stock list, grades and mix-ups."""

from __future__ import annotations

import numpy as np

from .json_fields import attrs, finite, float_or_none, num, nums, table
from .json_stocks import preparation_json, stock_need_json


# --------------------------------------------------------------------------------------------------
# a class: cards, the class stock list, grades
# --------------------------------------------------------------------------------------------------
def spread_json(sp) -> dict:
    lo, mid, hi = sp.saturation
    return {
        "distinct_compositions": sp.distinct,
        "ratio_span": sp.ratio_span if np.isfinite(sp.ratio_span) else None,
        "saturation": {"minus_1sd": list(lo), "guess": list(mid), "plus_1sd": list(hi)},
    }


def card_json(c) -> dict:
    out = {
        "student": c.student,
        "section": c.section,
        "bench": c.bench,
        "passes": c.passes,
        "problems": c.problems,
        "verdict": c.assessment.verdict,
        "se": num(c.assessment.target_se),
        "series": None
        if c.series is None
        else {"kind": c.series.kind, "varied": c.series.varied, "partner": c.series.partner},
    }
    if c.spread is not None:
        out.update(spread_json(c.spread))
    return out


def class_set_json(cs) -> dict:
    """The class set of ``kplan cards --json`` (the command adds the stocks and the files it wrote)."""
    return {
        **attrs(cs, "title target goal_se lab"),
        "students": len(cs.cards),
        "tubes_per_student": cs.best.n_tubes,
        **attrs(cs, "seed sound distinct"),
        "jitter_steps": cs.radius_steps,
        "jitter_mL": cs.radius_steps * cs.step_mL,
        "se": {k: num(v) for k, v in cs.se.items()},
        "efficiency_vs_best_copies": num(cs.efficiency),
        "efficiency_vs_best_copies_without_stock": num(cs.efficiency_without_stock),
        "se_ratio_even_copies_vs_pooled": num(cs.se["pooled_even_copies"] / cs.se["pooled"]),
        "cards": [card_json(c) for c in cs.cards],
        "failing": [s for s, _ in cs.failing()],
        "notes": list(cs.notes),
    }


def class_stock_json(s) -> dict:
    """One stock of the class stock list."""
    return {
        **attrs(s, "id label tubes_mL benches allowance_mL total_mL"),
        "sections": [{"section": a, "tubes_mL": v, "benches": b, "total_mL": t} for a, v, b, t in s.sections],
        **attrs(s, "on_hand_mL enough shortfall_mL"),
        "preparation": preparation_json(s.preparation) if s.preparation else None,
        **attrs(s, "batches problem"),
        "section_preparations": [
            None if sp is None else {"preparation": preparation_json(sp[0]), "batches": sp[1]}
            for sp in s.section_preparations
        ],
        "make": stock_need_json(s.need) if s.need is not None else None,
        "section_make": [
            None if sn is None else {"make": stock_need_json(sn[0]), "batches": sn[1]}
            for sn in s.section_needs
        ],
    }


def student_json(s) -> dict:
    """One student of ``kplan grade --json``: the verdict, the χ² test, their own fit and every reading
    against the key's band and the class's."""
    own = {"log_beta": num(s.own[0]), "se": num(s.own[1])} if s.own is not None else None
    return {
        **attrs(s.card, "student name section"),
        **attrs(s, "verdict explanation evidence candidate"),
        "chi2": num(s.chi2),
        "dof": s.dof,
        "p_value": num(s.p_value),
        **attrs(s, "judged_against tubes_in_band tubes_in_class_band"),
        "tubes": int(s.in_band.size),
        "own_fit": own,
        "readings": table(
            tube=s.card.recipe.tubes,
            absorbance=nums(s.absorbance),
            expected=nums(s.card.expected),
            band_low=nums(s.card.band_low),
            band_high=nums(s.card.band_high),
            in_band=s.in_band.astype(bool),
            class_expected=nums(s.class_expected),
            class_band_low=nums(s.class_band_low),
            class_band_high=nums(s.class_band_high),
            in_class_band=s.in_class_band.astype(bool),
        ),
    }


def pooled_parameter_json(p) -> dict:
    row = {
        "name": p.name,
        **finite(p, "estimate se"),
        **attrs(p, "guess guess_sd"),
        "off_by": num(p.off_by),
        "off_by_sd": num(p.off_by_sd) if p.off_by_sd is not None else None,
    }
    if p.is_target:
        ci = p.profile_ci95
        row["profile_ci95"] = [num(ci[0]), num(ci[1])] if ci is not None else None
    return row


def class_grade_json(g) -> dict:
    """``kplan grade --json``: every student, the class's constants beside the plan's guess, and what the
    key's bands missed because of it."""
    pooled = None
    cm = g.pooled
    if cm is not None:
        pooled = {
            "students": int(cm.used.sum()),
            "tubes": cm.tubes,
            "determined": cm.determined,
            "reason": cm.reason,
            "parameters": [pooled_parameter_json(p) for p in g.pooled_parameters],
            "chi2": num(cm.chi2),
            "dof": cm.dof,
            "p_value": num(cm.p_value),
            "p_low": num(cm.p_low),
            "chi2_verdict": g.pooled_chi2_verdict,
            "interval_scale": num(cm.scale),
            "stocks": [
                {"stock": sid, "factor": num(factor), "factor_sd": num(sd)}
                for sid, factor, sd in g.stock_factors
            ],
        }
    shares = g.band_shares
    return {
        "title": g.title,
        "target": g.target,
        "judged_against": g.judged_against,
        "students": [student_json(s) for s in g.students],
        "pooled": pooled,
        "guess_note": g.guess_note,
        "band_shares": {"key": shares.key, "class": shares.in_class, "readings": shares.readings},
        "key_note": g.key_note,
        "excluded": [{"student": s, "reason": r} for s, r in g.excluded],
        "unknown_students": list(g.unknown),
    }


def explanation_json(e) -> dict:
    return {
        **attrs(e, "kind text"),
        **float_or_none(e, "delta_loglik score"),
        "chi2_after": num(e.chi2_after),
        "passes": bool(e.passes),
    }


def diagnosis_json(d) -> dict:
    """The likely mix-up behind one set of readings, with the explanations ranked."""
    cand = d.candidate
    return {
        "explanation": d.text,
        "kind": d.best.kind if d.best else None,
        "evidence": d.evidence,
        "candidate": cand.text if cand else None,
        "as_likely": [explanation_json(e) for e in d.ties],
        "chi2": float(d.chi2),
        "ranked": [explanation_json(e) for e in d.ranked],
    }

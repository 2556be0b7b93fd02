"""The grade as plain data (``kplan grade --json``, the grade book and the class report read it): every
student, the class's constants beside the plan's guess, and what the key's bands missed because of it."""

from __future__ import annotations

import numpy as np

from ..measure.core import CHI2_TAIL

KEY_NOTE_POINTS = 5.0  # the key's bands are said to be off when they hold this many % fewer readings


def _f(x) -> float | None:
    x = float(x) if x is not None else float("nan")
    return x if np.isfinite(x) else None


def pretty(name: str) -> str:
    """log_beta[ML] → log β(ML), epsilon[ML] → ε(ML)."""
    return name.replace("log_beta[", "log β(").replace("epsilon[", "ε(").replace("]", ")")


def student_summary(s) -> dict:
    own = {"log_beta": _f(s.own[0]), "se": _f(s.own[1])} if s.own is not None else None
    d = s.diagnosis
    cand = d.candidate if d is not None else None
    judged = bool(np.all(np.isfinite(s.class_expected)))
    return {
        "student": s.card.student,
        "name": s.card.name,
        "section": s.card.section,
        "verdict": s.verdict,
        "explanation": d.text if d else None,
        "evidence": d.evidence if d else None,
        "candidate": cand.text if cand else None,
        "chi2": _f(s.chi2),
        "dof": s.dof,
        "p_value": _f(s.p_value),
        "judged_against": ("class" if judged else "plan's guess") if s.verdict != "incomplete" else None,
        "tubes_in_band": int(np.sum(s.in_band)),
        "tubes_in_class_band": int(np.sum(s.in_class_band)),
        "tubes": int(s.in_band.size),
        "own_fit": own,
        "readings": [
            {
                "tube": t,
                "absorbance": _f(a),
                "expected": _f(e),
                "band_low": _f(lo),
                "band_high": _f(hi),
                "in_band": bool(ib),
                "class_expected": _f(ce),
                "class_band_low": _f(cl),
                "class_band_high": _f(ch),
                "in_class_band": bool(ic),
            }
            for t, a, e, lo, hi, ib, ce, cl, ch, ic in zip(
                s.card.recipe.tubes,
                s.absorbance,
                s.card.expected,
                s.card.band_low,
                s.card.band_high,
                s.in_band,
                s.class_expected,
                s.class_band_low,
                s.class_band_high,
                s.in_class_band,
                strict=True,
            )
        ],
    }


def chi2_verdict(dof: int, p_high: float, p_low: float) -> str:
    if dof < 1 or not np.isfinite(p_high):
        return "no degrees of freedom left: χ² cannot test the fit"
    if p_high < CHI2_TAIL:
        return (
            "the class's readings scatter more than the plan's error model predicts (a noisier instrument or "
            "glassware than planned): the SEs and the interval are widened by √(χ²/dof)"
        )
    if p_low < CHI2_TAIL:
        return (
            "the class's readings scatter less than the plan's error model predicts: it may be too "
            "pessimistic"
        )
    return "the class's readings scatter as the plan's error model predicts"


def _parameters(g) -> list[dict]:
    cm, params = g.pooled, g.study.params
    out = []
    for p, name in enumerate(params.names):
        guess, sd = float(params.guess[p]), float(params.prior_sd[p])
        est = float(cm.theta[p])
        row = {
            "name": name,
            "estimate": _f(est),
            "se": _f(cm.se[p]),
            "guess": guess,
            "guess_sd": sd,
            "off_by": _f(est - guess),
            "off_by_sd": _f((est - guess) / sd) if sd > 0 else None,
        }
        if p == params.target:
            row["profile_ci95"] = [_f(cm.ci[0]), _f(cm.ci[1])] if cm.ci is not None else None
        out.append(row)
    return out


def guess_note(g) -> str:
    """ "the class measured log β(ML) = 3.452 ± 0.006; the plan guessed 3.30 ± 0.50 (+0.15, 0.3 sd)"…"""
    if g.pooled is None:
        return ""
    parts = []
    for row in _parameters(g):
        nm = pretty(row["name"])
        if row["name"].startswith("log_beta"):
            parts.append(
                f"{nm} = {row['estimate']:.3f} ± {row['se']:.2g}; the plan guessed {row['guess']:.2f} ± "
                f"{row['guess_sd']:.2g} (off by {row['off_by']:+.2f}, "
                f"{abs(row['off_by_sd'] or 0):.1f} of its sd)"
            )
        else:
            rel = row["off_by"] / row["guess"] if row["guess"] else float("nan")
            parts.append(
                f"{nm} = {row['estimate']:.4g} ± {row['se']:.2g}; the plan guessed {row['guess']:.4g} ± "
                f"{row['guess_sd'] / row['guess']:.0%} (off by {rel:+.1%})"
            )
    return "the class measured " + "; ".join(parts)


def band_shares(students: list[dict]) -> dict:
    """Shares of the readings of students judged ok inside the key's bands and inside the class's."""
    ok = [r for s in students if s["verdict"] == "ok" for r in s["readings"]]
    if not ok:
        return {"key": None, "class": None, "readings": 0}
    return {
        "key": sum(r["in_band"] for r in ok) / len(ok),
        "class": sum(r["in_class_band"] for r in ok) / len(ok),
        "readings": len(ok),
    }


def key_note(shares: dict) -> str:
    if shares["key"] is None or shares["class"] is None:
        return ""
    k, c = 100 * shares["key"], 100 * shares["class"]
    if c - k < KEY_NOTE_POINTS:
        return ""
    return (
        f"the key's bands were made before the lab at the plan's guess: they hold {k:.0f} % of the readings "
        f"of the students judged ok, the bands at the class's constants {c:.0f} % — the guess was off, not "
        f"the students"
    )


def class_summary(g) -> dict:
    students = [s.summary(g.target) for s in g.students]
    pooled = None
    cm = g.pooled
    if cm is not None:
        ids = g.study.model.stock_conc_M.shape[0]
        rsd = g.study.model.stock_conc_rsd
        se_z = np.sqrt(np.maximum(np.diag(cm.cov)[g.study.params.size :], 0.0))
        pooled = {
            "students": int(cm.used.sum()),
            "tubes": cm.tubes,
            "determined": cm.determined,
            "reason": cm.reason,
            "parameters": _parameters(g),
            "chi2": _f(cm.chi2),
            "dof": cm.dof,
            "p_value": _f(cm.p_value),
            "p_low": _f(cm.p_low),
            "chi2_verdict": chi2_verdict(cm.dof, cm.p_value, cm.p_low),
            "interval_scale": _f(cm.scale),
            "stocks": [
                {"stock": sid, "factor": _f(1 + rsd[j] * cm.z[j]), "factor_sd": _f(rsd[j] * se_z[j])}
                for j, sid in enumerate(g.study.bench.stock_ids[:ids])
                if rsd[j] > 0
            ],
        }
    shares = band_shares(students)
    return {
        "title": g.title,
        "target": g.target,
        "judged_against": "class" if cm is not None else "plan's guess",
        "students": students,
        "pooled": pooled,
        "guess_note": guess_note(g),
        "band_shares": shares,
        "key_note": key_note(shares),
        "excluded": [{"student": s, "reason": r} for s, r in g.excluded],
        "unknown_students": list(g.unknown),
    }

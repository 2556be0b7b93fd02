"""Grading a class: every student's readings against the key, the class's pooled constant, and the likely
mix-up behind each flagged student (``kplan grade``).

A student is flagged when their readings, taken together, are not what their recipe predicts: the χ² of
the readings against the expected values with the full covariance of the error budget exceeds the 95 %
point of χ²(n) (so a clean student is flagged 5 % of the time — the test's nominal rate — however many
tubes they read); the key's per-tube bands are shown beside it. Each student's own constant is fitted
where their tubes determine it. The class's constant comes from one global fit of every student not
flagged (their tubes share the stock bottles, so the stock errors are shared in the fit's covariance).
Flagged students get the likely mix-up (:mod:`planner.jobs.classroom.mixup`), judged with the pooled
constants.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ...inference.precision import unpack, whitening
from ...inference.study import Study
from ...inference.tails import chi2_sf
from ...inputs.gradebook import KeyCard
from ...inputs.readings import Readings
from ...inputs.recipe import Recipe, RecipeError, concat_recipes
from ...uncertainty.budget import error_budget
from ..compile import expected_state
from ..measure.fit import Fit, fit_study
from .mixup import Diagnosis, diagnose

FLAG_LEVEL = 0.05  # the per-student χ² test's level: the share of clean students flagged [common practice]


@dataclass(frozen=True)
class StudentGrade:
    """One student's result.

    Attributes
    ----------
    card : the key's card.
    absorbance : (n,) their readings (NaN where a tube was not reported).
    in_band : (n,) reading inside the key's band.
    chi2, dof, p_value : the readings against the expectations (full covariance).
    verdict : "ok" | "flagged" | "incomplete".
    own : their own (log β, SE) of the target (None when their tubes cannot determine it).
    diagnosis : the likely mix-up (flagged students only).
    """

    card: KeyCard
    absorbance: np.ndarray
    in_band: np.ndarray
    chi2: float
    dof: int
    p_value: float
    verdict: str
    own: tuple[float, float] | None
    diagnosis: Diagnosis | None

    def summary(self, target: str) -> dict:
        def f(x):
            x = float(x)
            return x if np.isfinite(x) else None

        own = {"log_beta": f(self.own[0]), "se": f(self.own[1])} if self.own is not None else None
        return {
            "student": self.card.student,
            "name": self.card.name,
            "section": self.card.section,
            "verdict": self.verdict,
            "explanation": self.diagnosis.text if self.diagnosis else None,
            "evidence": self.diagnosis.evidence if self.diagnosis else None,
            "chi2": f(self.chi2),
            "dof": self.dof,
            "p_value": f(self.p_value),
            "tubes_in_band": int(np.sum(self.in_band)),
            "tubes": int(self.in_band.size),
            "own_fit": own,
            "readings": [
                {
                    "tube": t,
                    "absorbance": f(a),
                    "expected": f(e),
                    "band_low": f(lo),
                    "band_high": f(hi),
                    "in_band": bool(ib),
                }
                for t, a, e, lo, hi, ib in zip(
                    self.card.recipe.tubes,
                    self.absorbance,
                    self.card.expected,
                    self.card.band_low,
                    self.card.band_high,
                    self.in_band,
                    strict=True,
                )
            ],
        }


@dataclass(frozen=True)
class ClassGrade:
    """The class: each student's grade and the pooled fit.

    Attributes
    ----------
    students : one :class:`StudentGrade` per key card, in key order.
    pooled : the global fit of the students not flagged (None when none remain).
    excluded : (student, reason) of those left out of the pooled fit.
    unknown : students in the results who are not in the key.
    """

    title: str
    target: str
    students: tuple[StudentGrade, ...]
    pooled: Fit | None
    excluded: tuple[tuple[str, str], ...]
    unknown: tuple[str, ...]

    def summary(self) -> dict:
        pooled = None
        if self.pooled is not None:
            p = self.pooled.summary()
            pooled = {
                "students": len(self.students) - len(self.excluded),
                "tubes": int(self.pooled.used.sum()),
                "determined": p["determined"],
                "reason": p["reason"],
                "parameters": p["parameters"],
                "chi2": p["chi2"],
                "dof": p["dof"],
                "p_value": p["p_value"],
                "chi2_verdict": p["chi2_verdict"],
            }
        return {
            "title": self.title,
            "target": self.target,
            "students": [s.summary(self.target) for s in self.students],
            "pooled": pooled,
            "excluded": [{"student": s, "reason": r} for s, r in self.excluded],
            "unknown_students": list(self.unknown),
        }


def own_fits(
    study: Study, recipes: list[Recipe], absorbance: np.ndarray, whiten: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Each student's own fit, all at once: recipes with the same number of tubes n, readings (S, n),
    whitening matrices (S, n, n). Returns estimates and SEs (S, P) and whether each is determined (S,)."""
    from ...inference.lm import fit_many
    from ...inference.precision import ReadingModel
    from ...model.compiled import tube_ions_M
    from ..measure.fit import N_STARTS, _not_determined

    model, params = study.model, study.params
    S = len(recipes)
    tot = np.stack([(r.volumes_mL @ model.stock_conc_M) / r.total_volume_mL[:, None] for r in recipes])
    ions = np.stack([tube_ions_M(model, r.volumes_mL, r.total_volume_mL) for r in recipes])
    # several starts per student over the guess's range, as kplan fit does: tile the students
    k = N_STARTS
    reading = ReadingModel(model, params, np.repeat(tot, k, axis=0), np.repeat(ions, k, axis=0))
    starts = np.tile(params.guess, (S * k, 1))
    if params.target >= 0:
        starts[:, params.target] += np.tile(np.linspace(-3, 3, k), S) * params.prior_sd[params.target]
    lo, hi = reading.bounds()
    res = fit_many(
        reading.f,
        starts,
        np.repeat(absorbance, k, axis=0),
        jac=reading.jac,
        whiten=np.repeat(whiten, k, axis=0),
        scale_cov=False,
        lower=lo,
        upper=hi,
    )
    chi = np.where(res.converged, res.chi2, np.inf).reshape(S, k)
    best = np.argmin(chi, axis=1) + np.arange(S) * k
    theta, se, conv = res.theta[best], res.se[best], res.converged[best]
    ok = np.array([_not_determined(params, theta[i], se[i], bool(conv[i]), lo, hi) is None for i in range(S)])
    return theta, se, ok


def grade_class(
    study: Study,
    cards: tuple[KeyCard, ...],
    results: dict[str, dict[str, float]],
    *,
    diagnose_flagged: bool = True,
) -> ClassGrade:
    """Grade every student of the key against their readings (see the module docstring)."""
    model, params = study.model, study.params
    known = {c.student for c in cards}
    unknown = tuple(sorted(s for s in results if s not in known))
    rows = []
    for card in cards:  # bookkeeping per student; the numerics below are batched over students
        got = results.get(card.student, {})
        for t in got:
            if t not in card.recipe.tubes:
                raise RecipeError(
                    f"results, student {card.student}",
                    f"tube '{t}' is not on their card ({', '.join(card.recipe.tubes)})",
                )
        a = np.array([got.get(t, np.nan) for t in card.recipe.tubes], dtype=float)
        rows.append((card, a))
    complete = [i for i, (_, a) in enumerate(rows) if np.all(np.isfinite(a))]
    chi2 = np.full(len(rows), np.nan)
    W: dict[int, np.ndarray] = {}
    expected: dict[int, np.ndarray] = {}
    for i in complete:  # one small error budget per student (their own tubes)
        card, a = rows[i]
        state = expected_state(model, card.recipe)
        W[i] = whitening(error_budget(study.bench, model, card.recipe, state).total)
        expected[i] = state.absorbance
        r = W[i] @ (a - state.absorbance)
        chi2[i] = float(r @ r)
    own: dict[int, Fit | tuple[float, float] | None] = {}
    by_n: dict[int, list[int]] = {}
    for i in complete:
        if rows[i][1].size > params.size:
            by_n.setdefault(rows[i][1].size, []).append(i)
    for _n, idx in by_n.items():
        theta, se, ok = own_fits(
            study,
            [rows[i][0].recipe for i in idx],
            np.stack([rows[i][1] for i in idx]),
            np.stack([W[i] for i in idx]),
        )
        t = params.target
        for j, i in enumerate(idx):
            own[i] = (float(theta[j, t]), float(se[j, t])) if ok[j] and t >= 0 else None
    verdicts = []
    for i, (_card, a) in enumerate(rows):
        if i not in W:
            verdicts.append("incomplete")
        else:
            verdicts.append("flagged" if chi2_sf(chi2[i], a.size) < FLAG_LEVEL else "ok")
    ok_idx = [i for i, v in enumerate(verdicts) if v == "ok"]
    excluded = tuple(
        (
            rows[i][0].student,
            "readings do not match the recipe (χ² test)" if v == "flagged" else "not every tube was reported",
        )
        for i, v in enumerate(verdicts)
        if v != "ok"
    )
    pooled = None
    lb, eps = model.log_beta, model.epsilon_M_cm
    if ok_idx:
        rec = concat_recipes([rows[i][0].recipe for i in ok_idx], [rows[i][0].student for i in ok_idx])
        pooled = fit_study(
            study, Readings(rec, np.concatenate([rows[i][1] for i in ok_idx])), keep_out_of_range=True
        )
        if pooled.determined:
            lb, eps, _ = unpack(model, params, pooled.estimate)
    students = []
    for i, (card, a) in enumerate(rows):
        diag = None
        if verdicts[i] == "flagged" and diagnose_flagged:
            diag = diagnose(study, card.recipe, a, log_beta=lb, epsilon_M_cm=eps)
        n = a.size if i in W else 0
        p = float(chi2_sf(chi2[i], n)) if n else float("nan")
        in_band = (a >= card.band_low) & (a <= card.band_high)
        students.append(StudentGrade(card, a, in_band, float(chi2[i]), n, p, verdicts[i], own.get(i), diag))
    return ClassGrade(study.title, study.target, tuple(students), pooled, excluded, unknown)

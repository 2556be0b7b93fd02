"""Grading a class by consensus: every student's readings against the model the class measured, the class's
constant with how far the guess was off, and the likely mix-up behind each flagged student (``kplan grade``).

1. Readings are screened: a student with a tube missing is "incomplete"; a number above 10 is not an
   absorbance (no photometer reads it) — a whole student's readings between 0 and 100 are checked as %T —
   and such students are flagged and left out of the class's fit. A number that is neither an absorbance
   nor a %T (beyond ±100, or above 10 beside negative readings) is refused.
2. Each student's own constant is fitted where their tubes determine it; their median starts the class's
   fit.
3. The class's model (:mod:`planner.jobs.classroom.consensus`): one fit of every usable student's
   readings (constants, absorptivities and the class's stock factors fitted, not taken from the plan),
   students whose readings fail against it set aside until the set settles.
4. Each student is judged against the class's model with the class fit's own uncertainty carried into the
   test: flagged when their χ² exceeds the 95 % point of χ²(n), so a clean student is flagged about one time
   in twenty whatever the guess was. The key's bands (made before the lab, at the guess) are shown beside
   bands recomputed at the class's constants.
5. Flagged students get the likely mix-up judged against the class's model
   (:mod:`planner.jobs.classroom.mixup`).

Without a class model (no usable student, or the class's readings do not determine the constants) each
student is judged against the plan's guess with the full error budget, and the grade says so.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ...inference.precision import whitening
from ...inference.study import Study
from ...inference.tails import chi2_sf
from ...inputs.errors import InputError
from ...inputs.gradebook import KeyCard
from ...inputs.recipe import RecipeError
from .consensus import FLAG_LEVEL, ClassModel, Judgement, Tubes, robust_class
from .grade_text import class_summary, student_summary
from .mixup import NOT_ABSORBANCE, Baseline, Diagnosis, diagnose, guess_baseline
from .own import own_fits

PERCENT_MAX = 100.0  # beyond this a number is neither an absorbance nor a %T

__all__ = ["FLAG_LEVEL", "ClassGrade", "StudentGrade", "grade_class"]


@dataclass(frozen=True)
class StudentGrade:
    """One student's result.

    Attributes
    ----------
    card : the key's card.
    absorbance : (n,) their readings (NaN where a tube was not reported).
    in_band : (n,) reading inside the key's band (made at the guess).
    chi2, dof, p_value : the readings against the class's model (NaN when not judged).
    verdict : "ok" | "flagged" | "incomplete".
    own : their own (log β, SE) of the target (None when their tubes cannot determine it).
    diagnosis : the likely mix-up (flagged students only).
    class_expected, class_band_low, class_band_high : (n,) each tube's reading predicted by the class's
        model and its ±2 sd band (NaN without a class model).
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
    class_expected: np.ndarray
    class_band_low: np.ndarray
    class_band_high: np.ndarray

    @property
    def in_class_band(self) -> np.ndarray:
        return (self.absorbance >= self.class_band_low) & (self.absorbance <= self.class_band_high)

    def summary(self, target: str) -> dict:
        return student_summary(self)


@dataclass(frozen=True)
class ClassGrade:
    """The class: each student's grade and the class's model.

    Attributes
    ----------
    students : one :class:`StudentGrade` per key card, in key order.
    pooled : the class's model (None when no student could be pooled).
    excluded : (student, reason) of those left out of the class's fit.
    unknown : students in the results who are not in the key.
    study : the compiled plan (for the guess the class is compared with).
    """

    title: str
    target: str
    students: tuple[StudentGrade, ...]
    pooled: ClassModel | None
    excluded: tuple[tuple[str, str], ...]
    unknown: tuple[str, ...]
    study: Study

    def summary(self) -> dict:
        return class_summary(self)


def _readings(cards: tuple[KeyCard, ...], results: dict[str, dict[str, float]]) -> list[np.ndarray]:
    rows = []
    for card in cards:  # bookkeeping per student; the numerics are batched over students
        got = results.get(card.student, {})
        for t in got:
            if t not in card.recipe.tubes:
                raise RecipeError(
                    f"results, student {card.student}",
                    f"tube '{t}' is not on their card ({', '.join(card.recipe.tubes)})",
                )
        a = np.array([got.get(t, np.nan) for t in card.recipe.tubes], dtype=float)
        bad = np.flatnonzero(np.isinf(a) | (np.abs(np.nan_to_num(a)) > PERCENT_MAX))
        if bad.size:
            i = int(bad[0])
            raise InputError(
                f"results, student {card.student}, tube {card.recipe.tubes[i]}: {a[i]:g} is not a reading "
                f"(neither an absorbance nor a %T): correct it or leave the tube out"
            )
        rows.append(a)
    return rows


def _screen(study: Study, cards, rows) -> tuple[np.ndarray, np.ndarray]:
    """(complete, not absorbances) per student."""
    complete = np.array([bool(np.all(np.isfinite(a))) for a in rows])
    top = NOT_ABSORBANCE
    odd = np.array([c and bool(np.any(a > top)) for a, c in zip(rows, complete, strict=True)])
    for card, a, o in zip(cards, rows, odd, strict=True):
        if o and np.any(a < 0):
            i = int(np.argmax(a))
            raise InputError(
                f"results, student {card.student}, tube {card.recipe.tubes[i]}: {a[i]:g} is not an "
                f"absorbance "
                f"(above {top:g}) and other readings are negative, so not a %T either: correct the readings"
            )
    return complete, odd


def grade_class(
    study: Study,
    cards: tuple[KeyCard, ...],
    results: dict[str, dict[str, float]],
    *,
    diagnose_flagged: bool = True,
) -> ClassGrade:
    """Grade every student of the key against the class's model (see the module docstring)."""
    known = {c.student for c in cards}
    unknown = tuple(sorted(s for s in results if s not in known))
    rows = _readings(cards, results)
    complete, odd = _screen(study, cards, rows)
    graded = np.flatnonzero(complete)  # students with every tube read
    tubes = (
        Tubes.of(study.model, [cards[i].recipe for i in graded], [rows[i] for i in graded])
        if graded.size
        else None
    )
    usable = ~odd[graded]
    own = own_fits(study, tubes, usable) if tubes is not None else {}
    cm, jd = None, None
    if tubes is not None and usable.any():
        cm, jd = robust_class(study, tubes, usable, _start(study, own))
    students = _grades(study, cards, rows, graded, odd, own, cm, jd, tubes, diagnose_flagged)
    excluded = tuple(
        (s.card.student, _why_out(s, odd[i]))
        for i, s in enumerate(students)
        if not _in_fit(i, graded, cm, jd)
    )
    return ClassGrade(
        study.title, study.target, tuple(students), cm if jd is not None else None, excluded, unknown, study
    )


def _start(study: Study, own: dict[int, tuple[np.ndarray, np.ndarray]]) -> np.ndarray:
    """The median of the students' own fits (robust while fewer than half are wrong), else the guess."""
    if len(own) >= 3:
        return np.median(np.stack([theta for theta, _ in own.values()]), axis=0)
    return study.params.guess.copy()


def _in_fit(i: int, graded: np.ndarray, cm: ClassModel | None, jd: Judgement | None) -> bool:
    if cm is None or jd is None:
        return False
    pos = np.flatnonzero(graded == i)
    return bool(pos.size and cm.used[pos[0]])


def _why_out(s: StudentGrade, odd: bool) -> str:
    if s.verdict == "incomplete":
        return "not every tube was reported"
    if odd:
        return "readings are not absorbances"
    return "readings do not match the class's model (χ² test)"


def _grades(study, cards, rows, graded, odd, own, cm, jd, tubes, diagnose_flagged) -> list[StudentGrade]:
    pos = {int(i): k for k, i in enumerate(graded)}
    starts = np.concatenate([[0], np.cumsum(tubes.sizes)[:-1]]) if tubes is not None else np.zeros(0, int)
    out = []
    t = study.params.target
    for i, (card, a) in enumerate(zip(cards, rows, strict=True)):
        n = a.size
        nan = np.full(n, np.nan)
        in_band = (a >= card.band_low) & (a <= card.band_high)
        o = own.get(pos.get(i, -1))
        own_t = (float(o[0][t]), float(o[1][t])) if o is not None and t >= 0 else None
        if i not in pos:
            out.append(
                StudentGrade(card, a, in_band, np.nan, 0, np.nan, "incomplete", own_t, None, nan, nan, nan)
            )
            continue
        k = pos[i]
        base, chi2, p = _judged(study, card, a, k, jd, starts, cm)
        flagged = bool(odd[i]) or p < FLAG_LEVEL
        diag = None
        if flagged and diagnose_flagged:
            diag = diagnose(study, card.recipe, a, baseline=base)
        sd = np.sqrt(np.diag(base.cov)) if jd is not None else nan
        exp = base.expected if jd is not None else nan
        out.append(
            StudentGrade(
                card,
                a,
                in_band,
                chi2,
                n,
                p,
                "flagged" if flagged else "ok",
                own_t,
                diag,
                exp,
                exp - 2 * sd,
                exp + 2 * sd,
            )
        )
    return out


def _judged(study, card, a, k, jd, starts, cm) -> tuple[Baseline, float, float]:
    """The baseline a student is judged against, their χ² and its upper tail."""
    n = a.size
    if jd is None:  # no class model: the plan's guess with the full error budget
        base = guess_baseline(study, card.recipe)
        r = whitening(base.cov) @ (a - base.expected)
        chi2 = float(r @ r)
        return base, chi2, float(chi2_sf(chi2, n))
    sl = slice(starts[k], starts[k] + n)
    base = Baseline(cm.stock_model(study), jd.expected[sl], *jd.parts_of(k))
    return base, float(jd.stat[k]), float(jd.p[k])

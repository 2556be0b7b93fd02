"""The likely mix-up: which slip at the bench best explains readings that do not match their recipe.

The readings are judged against a baseline: the class's own model (its constants, its stocks'
fitted concentrations, and each student's covariance about it, :mod:`planner.jobs.classroom.consensus`),
or, without a class, the plan's guess with the full error budget. Each explanation predicts every
reading:

- the bench slips of :mod:`planner.jobs.classroom.slips` (a wrong or wrongly made stock, two dispensers
  swapped, a misread delivery, a tube not made up to the mark), predicted with the baseline's model;
- ``swapped-tubes``: two tubes read in each other's place;
- ``wavelength``: every reading scaled by one factor (a wrong or uncalibrated wavelength scales ε; a
  cuvette of another path does the same);
- ``blank``: every reading shifted by one offset (a missing or wrong blank);
- ``drift``: a baseline drifting by the same step from one reading to the next, in the card's order;
- ``noise``: the readings scatter more than the error model allows (its scale fitted), no slip needed.

Each is scored by its log-likelihood under the baseline's covariance Σ, log L = −½ rᵀ Σ⁻¹ r (the noise
hypothesis: with Σ scaled by its fitted factor), against "no mix-up", and ranked by the approximate log
posterior odds Δ = 2 Δlog L − k ln n − 2 ln N: the BIC penalty for its k fitted numbers (Schwarz 1978,
Ann. Stat. 6:461) plus a look-elsewhere penalty for choosing the best of the N variants of its kind. An
explanation is named only when Δ ≥ ``DECISIVE`` (10: "very strong" evidence on the 2 ln B scale of Kass
& Raftery 1995, JASA 90:773) and, after it, the readings pass the χ² acceptance point (the 99 % point of
χ²(n − k): the grade flags at 5 %, an explanation is named unless the readings contradict it at 1 %).
Among the most likely explanations (within ``TIE`` of the best) only those that pass are named; when
none does, the readings are "unexplained", with the best shown as a candidate: a slip that leaves the
readings still failing explains nothing. Several are named together
when the readings cannot decisively tell them apart — one reading per tube often cannot tell a delivery
1 mL too large from a tube not made up to the mark, nor a scale error from a stock off its label.

Readings that are not absorbances (a number above 10, which no photometer shows) get one hypothesis
only: ``percent-T``, readings written as %T, checked by converting them (A = −log10(%T/100)).
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from functools import lru_cache

import numpy as np

from ...inference.precision import whitening
from ...inference.study import Study
from ...inference.tails import chi2_ppf
from ...inputs.recipe import Recipe
from ...model.compiled import Model, predict, tube_ions_M
from ...model.optics import photometric_sd
from ...uncertainty.budget import error_budget
from ..compile import expected_state
from .slips import bench_variants

DECISIVE = 10.0  # 2 ln B ≥ 10: very strong evidence (Kass & Raftery 1995)
TIE = DECISIVE
MAX_TIES = 3
# after the explanation the readings must pass χ² at this level: the flag is raised at 5 %, an explanation
# is named unless the readings contradict it at 1 % (so about one true slip in a hundred stays a candidate)
ACCEPT_LEVEL = 0.01
KINDS = (
    "wrong-stock",
    "swapped-tubes",
    "misread-volume",
    "not-made-up",
    "wavelength",
    "blank",
    "drift",
    "swapped-stocks",
    "noise",
    "percent-T",
)


@dataclass(frozen=True)
class Explanation:
    """One hypothesis about what went wrong, scored against "no mix-up".

    Attributes
    ----------
    kind : one of ``KINDS``.
    text : what happened, in words for the instructor.
    delta_loglik : log L(explanation) − log L(no mix-up).
    score : Δ = 2 Δlog L − k ln n − 2 ln N (the evidence, see the module docstring).
    chi2_after : χ² of the readings once the explanation is applied; ``passes`` when it is within the
        acceptance point.
    """

    kind: str
    text: str
    delta_loglik: float
    score: float
    chi2_after: float = float("nan")
    passes: bool = False
    k: int = 0

    def summary(self) -> dict:
        return {
            "kind": self.kind,
            "text": self.text,
            "delta_loglik": float(self.delta_loglik),
            "score": float(self.score),
            "chi2_after": float(self.chi2_after) if np.isfinite(self.chi2_after) else None,
            "passes": bool(self.passes),
        }


@dataclass(frozen=True)
class Diagnosis:
    """The likely mix-up behind one set of readings.

    Attributes
    ----------
    best : the named explanation (decisive, and the readings pass after it), or None ("unexplained").
    ranked : the top explanations by evidence, best first.
    chi2 : χ² of the readings against the baseline.
    ties : explanations the readings cannot decisively rule out against the best.
    """

    best: Explanation | None
    ranked: tuple[Explanation, ...]
    chi2: float
    ties: tuple[Explanation, ...] = ()

    @property
    def candidate(self) -> Explanation | None:
        """The best-ranked explanation when none is named (shown as a candidate only)."""
        return self.ranked[0] if self.best is None and self.ranked else None

    @property
    def text(self) -> str:
        if self.best is None:
            return "unexplained"
        if not self.ties:
            return self.best.text
        return self.best.text + "; the readings cannot rule out: " + "; ".join(e.text for e in self.ties)

    @property
    def evidence(self) -> str:
        if self.best is None:
            top = self.candidate
            if top is None:
                return "no single slip explains the readings"
            why = (
                f"evidence {top.score:.1f} < {DECISIVE:g}"
                if top.score < DECISIVE
                else f"after it χ² = {top.chi2_after:.1f} still fails"
            )
            return f"no single slip explains the readings (closest candidate: {top.text}; {why})"
        return (
            f"evidence 2Δln L − penalties = {self.best.score:.1f} ≥ {DECISIVE:g} against no mix-up, and the "
            f"readings pass after it (χ² = {self.best.chi2_after:.1f})"
        )

    def summary(self) -> dict:
        cand = self.candidate
        return {
            "explanation": self.text,
            "kind": self.best.kind if self.best else None,
            "evidence": self.evidence,
            "candidate": cand.text if cand else None,
            "as_likely": [e.summary() for e in self.ties],
            "chi2": float(self.chi2),
            "ranked": [e.summary() for e in self.ranked],
        }


@dataclass(frozen=True)
class Baseline:
    """What the readings are judged against: the model (constants and stock concentrations), each tube's
    expected reading under it, and the covariance of the readings about it, in two parts: ``own``, the
    errors of the student's own tubes and readings (photometric, deliveries, make-up: what a slip changes),
    and ``shared`` (the stocks' errors, or the class fit's uncertainty)."""

    model: Model
    expected: np.ndarray
    own: np.ndarray
    shared: np.ndarray
    stock_shared: bool = False  # the shared part is the stocks' errors (recomputed for a slip's tubes)

    @property
    def cov(self) -> np.ndarray:
        return self.own + self.shared


def slip_covariance(bench, base: Baseline, model: Model, recipe: Recipe) -> np.ndarray:
    """The covariance of the readings of the tubes a slip describes: their own error budget (photometric,
    deliveries, and the stocks' errors when the baseline carries them), plus the baseline's class part."""
    b = error_budget(bench, model, recipe, expected_state(model, recipe))
    if base.stock_shared:
        return b.total
    return b.photometric + b.delivery + base.shared


def guess_baseline(study: Study, recipe: Recipe) -> Baseline:
    """The plan's guess with the full error budget (stock errors included): the baseline without a class."""
    state = expected_state(study.model, recipe)
    b = error_budget(study.bench, study.model, recipe, state)
    return Baseline(study.model, state.absorbance, b.photometric + b.delivery, b.stock, stock_shared=True)


@lru_cache(maxsize=256)
def accept_point(dof: int) -> float:
    """χ² acceptance point at ``ACCEPT_LEVEL`` for ``dof`` degrees of freedom."""
    return float(chi2_ppf(1.0 - ACCEPT_LEVEL, max(int(dof), 1)))


NOT_ABSORBANCE = 10.0  # no photometer reads beyond this: larger numbers are %T or typos (as kplan fit)


def _fit_cost(a: np.ndarray, mu: np.ndarray, base: Baseline) -> tuple[np.ndarray, np.ndarray]:
    """χ² + ln det Σ of the readings ``a`` against each prediction ``mu`` (H, n): Σ is the baseline's
    covariance with its photometric part taken at the predicted readings (the noise of a reading grows
    with its absorbance, so a slip that moves readings up or down changes their noise too)."""
    m = base.model
    phot0 = photometric_sd(base.expected, *m.noise_k, display_step=m.display_step) ** 2
    phot = photometric_sd(mu, *m.noise_k, display_step=m.display_step) ** 2
    cov = base.cov - np.diag(phot0)
    cov = np.broadcast_to(cov, mu.shape[:-1] + cov.shape).copy()
    idx = np.arange(mu.shape[-1])
    cov[..., idx, idx] += phot
    L = np.linalg.cholesky(cov)
    r = np.linalg.solve(L, (a - mu)[..., None])[..., 0]
    return np.sum(r * r, axis=-1), 2.0 * np.sum(np.log(np.einsum("...ii->...i", L)), axis=-1)


def diagnose(
    study: Study, recipe: Recipe, absorbance: np.ndarray, *, baseline: Baseline | None = None, top: int = 5
) -> Diagnosis:
    """Rank the explanations of ``absorbance`` read from tubes meant to follow ``recipe`` (see the module
    docstring); ``baseline`` defaults to the plan's guess."""
    base = baseline or guess_baseline(study, recipe)
    a = np.asarray(absorbance, dtype=float)
    chi0, ld0 = (float(x[0]) for x in _fit_cost(a, base.expected[None, :], base))
    if np.any(a > NOT_ABSORBANCE):
        return _not_absorbances(a, base, chi0)
    model = base.model
    nominal = predict(
        model,
        _totals(recipe, model),
        tube_ions_M(model, recipe.volumes_mL, recipe.total_volume_mL),
        warn=False,
    ).absorbance
    ref = _Ref(a, base, chi0, ld0, nominal)
    tubes: dict[str, Recipe | Model] = {}
    expl = _bench(study, recipe, ref, tubes) + _readings(ref)
    expl.sort(key=lambda e: -e.score)
    expl = _refined(study, ref, expl, tubes)
    # the most likely explanations (within TIE of the top): named only those after which the readings pass
    lead = [e for e in expl if expl[0].score >= DECISIVE and e.score >= expl[0].score - TIE]
    named = [e for e in lead if e.passes]
    best = named[0] if named else None
    return Diagnosis(best, tuple(expl[:top]), chi0, tuple(named[1 : 1 + MAX_TIES]))


@dataclass(frozen=True)
class _Ref:
    """The readings and "no mix-up": its χ² and ln det Σ."""

    a: np.ndarray
    base: Baseline
    chi0: float
    logdet0: float
    nominal: np.ndarray

    def explain(self, kinds, texts: list[str], mu: np.ndarray, k, N) -> list[Explanation]:
        """Score the predictions ``mu`` (H, n): Δ = 2 Δlog L − k ln n − 2 ln N (``kinds``, ``k`` and ``N`` one
        for all or one per hypothesis)."""
        n = self.a.size
        H = mu.shape[0]
        kinds = [kinds] * H if isinstance(kinds, str) else list(kinds)
        k = np.broadcast_to(np.asarray(k, dtype=int), (H,))
        N = np.broadcast_to(np.asarray(N, dtype=float), (H,))
        chi, logdet = _fit_cost(self.a, mu, self.base)
        dl = 0.5 * ((self.chi0 - chi) + (self.logdet0 - logdet))
        score = 2 * dl - k * np.log(n) - 2 * np.log(np.maximum(N, 1.0))
        ok = chi <= np.array([accept_point(n - kk) for kk in k])
        return [
            Explanation(kd, t, float(d), float(sc), float(c), bool(o), int(kk))
            for kd, t, d, sc, c, o, kk in zip(kinds, texts, dl, score, chi, ok, k, strict=True)
        ]


REFINE = 4  # the leading bench slips are scored again with their own tubes' error budget


def _refined(study: Study, ref: _Ref, expl: list[Explanation], tubes: dict) -> list[Explanation]:
    """The leading bench slips scored with the error budget of the tubes they describe (a slip changes
    the tubes, and with them the delivery and photometric errors), then ranked again."""
    n = ref.a.size
    out = list(expl)
    for k, e in enumerate(expl[:REFINE]):  # a handful of small error budgets
        if e.text not in tubes:
            continue
        rec, model = tubes[e.text]
        mu = expected_state(model, rec).absorbance - ref.nominal + ref.base.expected
        cov = slip_covariance(study.bench, ref.base, model, rec)
        L = np.linalg.cholesky(cov)
        r = np.linalg.solve(L, ref.a - mu)
        chi = float(r @ r)
        logdet = 2.0 * float(np.sum(np.log(np.diag(L))))
        dl = 0.5 * ((ref.chi0 - chi) + (ref.logdet0 - logdet))
        penalty = 2 * e.delta_loglik - e.score
        out[k] = replace(
            e, delta_loglik=dl, score=2 * dl - penalty, chi2_after=chi, passes=chi <= accept_point(n - e.k)
        )
    out.sort(key=lambda e: -e.score)
    return out


def _bench(study: Study, recipe: Recipe, ref: _Ref, tubes: dict) -> list[Explanation]:
    """The slips of :mod:`planner.jobs.classroom.slips` and two tubes swapped, scored in one batch."""
    base = ref.base
    model = base.model
    n = recipe.n_tubes
    var = bench_variants(study.bench, recipe, model.stock_conc_M)
    out: list[Explanation] = []
    if var.items:
        Vh, Ch, Th = np.stack(var.volumes), np.stack(var.conc), np.stack(var.total)
        tot = np.einsum("hnk,hkc->hnc", Vh, Ch) / Th[..., None]
        mu = predict(model, tot, tube_ions_M(model, Vh, Th), warn=False).absorbance
        mu = (
            mu - ref.nominal + base.expected
        )  # the change each slip makes, on the baseline's expected readings
        for v, V, C, T in zip(var.items, var.volumes, var.conc, var.total, strict=True):
            tubes[v.text] = (Recipe(recipe.tubes, recipe.stock_ids, V, T), replace(model, stock_conc_M=C))
        best: dict[str, Explanation] = {}
        scored = ref.explain(
            [v.kind for v in var.items],
            [v.text for v in var.items],
            mu,
            [v.k for v in var.items],
            [v.N for v in var.items],
        )
        for v, e in zip(var.items, scored, strict=True):
            if not v.group:  # keep the best entry of each fitted grid
                out.append(e)
            elif v.group not in best or e.score > best[v.group].score:
                best[v.group] = e
        out += list(best.values())
    pairs = [(i, j) for i in range(n) for j in range(i + 1, n)]
    if pairs:
        idx = np.array(pairs)
        rows = np.arange(len(pairs))
        sw = np.repeat(base.expected[None, :], len(pairs), axis=0)
        sw[rows, idx[:, 0]], sw[rows, idx[:, 1]] = base.expected[idx[:, 1]], base.expected[idx[:, 0]]
        texts = [f"{recipe.tubes[i]} and {recipe.tubes[j]} swapped" for i, j in pairs]
        out += ref.explain("swapped-tubes", texts, sw, 0, len(pairs))
    return out


def _totals(recipe: Recipe, model: Model) -> np.ndarray:
    return (recipe.volumes_mL @ model.stock_conc_M) / recipe.total_volume_mL[:, None]


READING_SLIPS = (
    (
        "wavelength",
        "every reading scaled by {x:.3f}: a wrong or uncalibrated wavelength, or a cuvette of another path",
    ),
    ("blank", "every reading shifted by {x:+.3f} (missing or wrong blank)"),
    ("drift", "the baseline drifted {x:+.4f} per reading, in the card's order (re-blank between readings)"),
)


def _readings(ref: _Ref) -> list[Explanation]:
    """Scale, offset and drift (one number each, by generalised least squares at the baseline's weights)
    and a larger noise."""
    a, base = ref.a, ref.base
    n = a.size
    W = whitening(base.cov)
    Wm, Wa = W @ base.expected, W @ a
    out = []
    for kind, words in READING_SLIPS:
        shape = {"wavelength": base.expected, "blank": np.ones(n), "drift": np.arange(1.0, n + 1.0)}[kind]
        g = W @ shape
        gg = float(g @ g)
        if kind == "wavelength":
            x = float(g @ Wa) / gg if gg > 0 else 1.0
            mu = x * base.expected
        else:
            x = float(g @ (Wa - Wm)) / gg if gg > 0 else 0.0
            mu = base.expected + x * shape
        out += ref.explain(kind, [words.format(x=x)], mu[None, :], 1, 1)
    if ref.chi0 > n:  # Σ scaled by λ = χ²/n: 2Δlog L = χ² − n − n ln(χ²/n)
        lam = ref.chi0 / n
        dl = 0.5 * (ref.chi0 - n - n * np.log(lam))
        text = (
            f"the readings scatter ×{np.sqrt(lam):.1f} more than the error model allows, and no single slip "
            f"explains them (a noisy instrument, dirty cuvettes, careless deliveries)"
        )
        out.append(Explanation("noise", text, float(dl), float(2 * dl - np.log(n)), float(n), True))
    return out


PERCENT_T_LEVEL = 0.001  # converted %T readings are accepted unless they fail χ² at this level


def _not_absorbances(a, base: Baseline, chi0) -> Diagnosis:
    """Readings the instrument cannot show: %T, or not absorbances at all. Converted readings are judged
    at a stricter level than slips: the finding is that they are not absorbances; the χ² only asks whether
    %T is what they are."""
    n = a.size
    if np.all((a > 0) & (a <= 100)):
        conv = -np.log10(a / 100.0)
        r = whitening(base.cov) @ (conv - base.expected)
        chi = float(r @ r)
        ok = bool(chi <= float(chi2_ppf(1.0 - PERCENT_T_LEVEL, n)))
        text = (
            f"the readings look like %T (values {a.min():.3g}–{a.max():.3g}): as A = −log10(%T/100) they "
            f"match the model (χ² = {chi:.1f} on {n})"
        )
        e = Explanation("percent-T", text, 0.5 * (chi0 - chi), chi0 - chi, chi, ok)
        if ok:
            return Diagnosis(e, (e,), chi0)
        e = replace(
            e,
            text=f"readings are not absorbances (values up to {a.max():.3g}); as %T they do not match the "
            f"model either (χ² = {chi:.1f} on {n})",
        )
        return Diagnosis(None, (e,), chi0)
    e = Explanation("percent-T", f"readings are not absorbances (values up to {a.max():.3g})", 0.0, 0.0)
    return Diagnosis(None, (e,), chi0)

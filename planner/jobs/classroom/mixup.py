"""The likely mix-up: which slip at the bench best explains readings that do not match their recipe.

Each explanation is a hypothesis about what was really in the tubes, or about the reading, and predicts
every tube's absorbance with the known constants (the plan's, or the class's pooled fit):

- ``wrong-stock``: one reagent taken from another bottle of the plan, or from a 10× more concentrated or
  10× more dilute bottle of the same reagent, in every tube;
- ``swapped-tubes``: two tubes read in each other's place;
- ``misread-volume``: one delivery off by 1 mL or 0.1 mL (a burette read at the wrong mark) or with its
  two last digits transposed (2.15 mL delivered as 2.51 mL);
- ``not-made-up``: one tube not filled to the mark (its volume short by an unknown fraction);
- ``wavelength``: every reading scaled by one factor (a wrong or uncalibrated wavelength scales ε);
- ``blank``: every reading shifted by one offset (a missing or wrong blank).

Each is scored by its log-likelihood under the error budget's covariance Σ of the intended recipe,
log L = −½ rᵀ Σ⁻¹ r, against "no mix-up", and ranked by the approximate log posterior odds

    Δ = 2 Δlog L − k ln n − 2 ln N,

the BIC penalty for its k fitted numbers (Schwarz 1978, Ann. Stat. 6:461) plus a look-elsewhere penalty
for choosing the best of the N variants of its kind (a uniform prior over them). An explanation is
reported when Δ ≥ ``DECISIVE`` (10: "very strong" evidence on the 2 ln B scale of Kass & Raftery 1995,
JASA 90:773); otherwise the readings are "unexplained". Everything is evaluated in one batch: all
hypotheses' tubes are speciated together.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ...inference.precision import whitening
from ...inference.study import Study
from ...inputs.recipe import Recipe
from ...model.compiled import predict, tube_ions_M
from ...uncertainty.budget import error_budget
from ..compile import expected_state

DECISIVE = 10.0  # 2 ln B ≥ 10: very strong evidence (Kass & Raftery 1995)
# alternatives the readings cannot decisively rule out against the best (Δ < DECISIVE) are named with it:
# one reading per tube often cannot tell a delivery 1 mL too large from a tube not made up to the mark
TIE = DECISIVE
MAX_TIES = 3
MISREAD_STEPS_ML = (1.0, -1.0, 0.1, -0.1)
STOCK_FACTORS = (10.0, 0.1)
MAKE_UP_FRACTIONS = np.linspace(0.1, 0.9, 9)  # share of the diluent actually added (grid for the fit)
KINDS = ("wrong-stock", "swapped-tubes", "misread-volume", "not-made-up", "wavelength", "blank")


@dataclass(frozen=True)
class Explanation:
    """One hypothesis about what went wrong, scored against "no mix-up".

    Attributes
    ----------
    kind : one of ``KINDS``.
    text : what happened, in words for the instructor.
    delta_loglik : log L(explanation) − log L(no mix-up).
    score : Δ = 2 Δlog L − k ln n − 2 ln N (the evidence, see the module docstring).
    """

    kind: str
    text: str
    delta_loglik: float
    score: float

    def summary(self) -> dict:
        return {
            "kind": self.kind,
            "text": self.text,
            "delta_loglik": float(self.delta_loglik),
            "score": float(self.score),
        }


@dataclass(frozen=True)
class Diagnosis:
    """The likely mix-up behind one set of readings.

    Attributes
    ----------
    best : the decisive explanation (score ≥ DECISIVE), or None ("unexplained").
    ties : up to ``MAX_TIES`` other explanations the readings cannot decisively rule out against the best
        (within ``TIE``): one reading per tube often cannot tell, say, a delivery 1 mL too large from a tube
        not made up to the mark.
    ranked : the top explanations, best first.
    chi2 : χ² of the readings against the recipe's expectations (the full covariance).
    """

    best: Explanation | None
    ranked: tuple[Explanation, ...]
    chi2: float
    ties: tuple[Explanation, ...] = ()

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
            top = self.ranked[0] if self.ranked else None
            return "no single slip explains the readings decisively" + (
                f" (best: {top.text}, evidence {top.score:.1f} < {DECISIVE:g})" if top else ""
            )
        return f"evidence 2Δln L − penalties = {self.best.score:.1f} ≥ {DECISIVE:g} against no mix-up"

    def summary(self) -> dict:
        return {
            "explanation": self.text,
            "kind": self.best.kind if self.best else None,
            "evidence": self.evidence,
            "as_likely": [e.summary() for e in self.ties],
            "chi2": float(self.chi2),
            "ranked": [e.summary() for e in self.ranked],
        }


def _fmt_mL(v: float) -> str:
    return f"{v:.2f} mL"


def _transposed(v: float) -> float | None:
    """2.15 → 2.51: the last two digits of the volume written to 0.01 mL, swapped (None if unchanged)."""
    s = f"{v:.2f}"
    digits = [c for c in s if c.isdigit()]
    if len(digits) < 2 or digits[-1] == digits[-2]:
        return None
    digits[-1], digits[-2] = digits[-2], digits[-1]
    txt = "".join(digits)
    return float(txt[:-2] + "." + txt[-2:])


def diagnose(  # noqa: C901
    study: Study,
    recipe: Recipe,
    absorbance: np.ndarray,
    *,
    log_beta: np.ndarray | None = None,
    epsilon_M_cm: np.ndarray | None = None,
    top: int = 5,
) -> Diagnosis:
    """Rank the explanations of ``absorbance`` read from tubes meant to follow ``recipe``.

    Parameters
    ----------
    log_beta, epsilon_M_cm : the constants taken as known (default: the plan's guesses).
    """
    model, bench = study.model, study.bench
    a = np.asarray(absorbance, dtype=float)
    n = recipe.n_tubes
    lb = model.log_beta if log_beta is None else np.asarray(log_beta, dtype=float)
    eps = model.epsilon_M_cm if epsilon_M_cm is None else np.asarray(epsilon_M_cm, dtype=float)
    state = expected_state(model, recipe, log_beta=lb, epsilon_M_cm=eps)
    W = whitening(error_budget(bench, model, recipe, state).total)
    mu0 = state.absorbance
    r0 = W @ (a - mu0)
    chi0 = float(r0 @ r0)

    V = recipe.volumes_mL
    Vt = recipe.total_volume_mL
    C = model.stock_conc_M
    k = V.shape[1]
    dispensed = [recipe.stock_ids.index(s) for s in bench.dispensed_ids(recipe)]
    used = [j for j in dispensed if np.any(V[:, j] > 0)]
    texts: list[tuple[str, str, int, int]] = []  # (kind, text, k params, N variants)
    vols: list[np.ndarray] = []  # (n, k) volumes per hypothesis
    concs: list[np.ndarray] = []  # (k, 2) stock concentrations per hypothesis
    totals_vol: list[np.ndarray] = []  # (n,) total volume per hypothesis

    # wrong stock: the same wrong bottle in every tube
    subs = []
    for j in used:
        for j2 in range(k):
            if j2 != j and not np.allclose(C[j2], C[j]):
                subs.append((j, C[j2], f"{recipe.stock_ids[j2]} taken instead of {recipe.stock_ids[j]}"))
        for fac in STOCK_FACTORS:
            subs.append(
                (j, C[j] * fac, f"{recipe.stock_ids[j]} taken from a bottle {fac:g}× as concentrated")
            )
    for j, row, text in subs:
        Cj = C.copy()
        Cj[j] = row
        texts.append(("wrong-stock", text, 0, len(subs)))
        vols.append(V)
        concs.append(Cj)
        totals_vol.append(Vt)
    # one delivery misread
    mis = []
    for i in range(n):
        for j in used:
            v = V[i, j]
            cands = [
                (
                    v + d,
                    f"{recipe.tubes[i]}: {recipe.stock_ids[j]} {_fmt_mL(v + d)} delivered instead of "
                    f"{_fmt_mL(v)}",
                )
                for d in MISREAD_STEPS_ML
            ]
            tv = _transposed(v) if v > 0 else None
            if tv is not None:
                cands.append(
                    (
                        tv,
                        f"{recipe.tubes[i]}: {recipe.stock_ids[j]} {_fmt_mL(tv)} delivered instead of "
                        f"{_fmt_mL(v)} (digits transposed)",
                    )
                )
            for new, text in cands:
                if new < 0:
                    continue
                Vi = V.copy()
                Vi[i, j] = new
                tot = Vt.copy()
                if not bench.to_mark:
                    tot[i] = Vi[i].sum()
                elif (
                    Vi[i].sum()
                    - (Vi[i, recipe.stock_ids.index(bench.diluent_id)] if bench.diluent_id else 0.0)
                    > bench.tube_volume_mL
                ):
                    continue
                mis.append((Vi, tot, text))
    for Vi, tot, text in mis:
        texts.append(("misread-volume", text, 0, len(mis)))
        vols.append(Vi)
        concs.append(C)
        totals_vol.append(tot)
    # a tube not made up to the mark (to-mark only): its volume is the dispensed stocks plus part of the
    # diluent; the fraction is fitted on a grid (one fitted number)
    short = []
    if bench.to_mark and bench.diluent_id is not None:
        jd = recipe.stock_ids.index(bench.diluent_id)
        for i in range(n):
            rest = V[i, jd]
            if rest <= 0:
                continue
            for fr in MAKE_UP_FRACTIONS:
                tot = Vt.copy()
                tot[i] = Vt[i] - (1.0 - fr) * rest
                short.append((i, tot, fr))
    for i, tot, fr in short:
        texts.append(
            (
                "not-made-up",
                f"{recipe.tubes[i]} not made up to the mark (about {fr:.0%} of the water added)",
                1,
                n,
            )
        )
        vols.append(V)
        concs.append(C)
        totals_vol.append(tot)

    H = len(vols)
    mu = np.empty((H, n))
    if H:
        Vh = np.stack(vols)  # (H, n, k)
        Ch = np.stack(concs)  # (H, k, 2)
        Th = np.stack(totals_vol)  # (H, n)
        tot = np.einsum("hnk,hkc->hnc", Vh, Ch) / Th[..., None]
        ions = tube_ions_M(model, Vh, Th)
        mu = predict(model, tot, ions, log_beta=lb, epsilon_M_cm=eps, warn=False).absorbance
    # swapped tubes: readings exchanged (no new chemistry)
    pairs = [(i, j) for i in range(n) for j in range(i + 1, n)]
    sw = np.repeat(mu0[None, :], len(pairs), axis=0)
    for p, (i, j) in enumerate(pairs):  # index bookkeeping only; the scoring below is batched
        sw[p, i], sw[p, j] = mu0[j], mu0[i]
    for i, j in pairs:
        texts.append(("swapped-tubes", f"{recipe.tubes[i]} and {recipe.tubes[j]} swapped", 0, len(pairs)))
    mu = np.concatenate([mu, sw]) if pairs else mu
    # scores of the discrete hypotheses (the not-made-up grid keeps its best fraction per tube below)
    R = (a[None, :] - mu) @ W.T
    chi = np.sum(R * R, axis=1)
    expl = []
    for h, (kind, text, kpar, N) in enumerate(texts):
        dl = 0.5 * (chi0 - chi[h])
        expl.append(Explanation(kind, text, dl, 2 * dl - kpar * np.log(n) - 2 * np.log(max(N, 1))))
    if short:  # one entry per tube: the best fraction
        best_short: dict[str, Explanation] = {}
        for e in [e for e in expl if e.kind == "not-made-up"]:
            tube = e.text.split(" not made up")[0]
            if tube not in best_short or e.score > best_short[tube].score:
                best_short[tube] = e
        expl = [e for e in expl if e.kind != "not-made-up"] + list(best_short.values())
    # wavelength (scale) and blank (offset): one fitted number each, by generalised least squares
    Wm, Wa, W1 = W @ mu0, W @ a, W @ np.ones(n)
    scale = float(Wm @ Wa / (Wm @ Wm)) if Wm @ Wm > 0 else 1.0
    chi_s = float(np.sum((Wa - scale * Wm) ** 2))
    off = float(W1 @ (Wa - Wm) / (W1 @ W1))
    chi_b = float(np.sum((Wa - Wm - off * W1) ** 2))
    for kind, text, c in (
        ("wavelength", f"every reading scaled by {scale:.3f} (wrong or uncalibrated wavelength)", chi_s),
        ("blank", f"every reading shifted by {off:+.3f} (missing or wrong blank)", chi_b),
    ):
        dl = 0.5 * (chi0 - c)
        expl.append(Explanation(kind, text, dl, 2 * dl - np.log(n)))
    expl.sort(key=lambda e: -e.score)
    best = expl[0] if expl and expl[0].score >= DECISIVE else None
    ties = tuple(e for e in expl[1:] if best is not None and e.score >= best.score - TIE)[:MAX_TIES]
    return Diagnosis(best, tuple(expl[:top]), chi0, ties)


def inject(
    study: Study, recipe: Recipe, kind: str | None, rng: np.random.Generator
) -> tuple[np.ndarray, str, float]:
    """Simulated readings of ``recipe`` with one slip of ``kind`` (None: a clean student), for tests and
    benchmarks; returns (readings, a fragment the right explanation's text contains, the slip's size: the
    whitened norm of the change it makes to the noise-free readings — below ~3 it hides in the noise)."""
    from ...inference.simulate import simulate

    model, bench = study.model, study.bench
    n = recipe.n_tubes
    V, Vt, C = recipe.volumes_mL.copy(), recipe.total_volume_mL.copy(), model.stock_conc_M.copy()
    used = [recipe.stock_ids.index(s) for s in bench.dispensed_ids(recipe) if np.any(recipe.column(s) > 0)]
    i = int(rng.integers(n))
    j = used[int(rng.integers(len(used)))]
    tag = ""
    if kind == "wrong-stock":
        fac = STOCK_FACTORS[int(rng.integers(len(STOCK_FACTORS)))]
        C[j] = C[j] * fac
        tag = f"{recipe.stock_ids[j]} taken from a bottle {fac:g}×"
    elif kind == "misread-volume":
        d = MISREAD_STEPS_ML[int(rng.integers(2))]  # the 1 mL slips (0.1 mL ones hide in the noise)
        if V[i, j] + d < 0:
            d = -d
        V[i, j] += d
        tag = f"{recipe.tubes[i]}: {recipe.stock_ids[j]} {_fmt_mL(V[i, j])}"
    elif kind == "not-made-up":
        jd = recipe.stock_ids.index(bench.diluent_id)
        i = int(np.argmax(V[:, jd] * (1 + 0.01 * rng.random(n))))  # a tube with water to leave out
        Vt[i] -= 0.5 * V[i, jd]
        tag = f"{recipe.tubes[i]} not made up"
    m = model if kind != "wrong-stock" else _with_stocks(model, C)
    rec = Recipe(recipe.tubes, recipe.stock_ids, V, Vt)
    sim = simulate(bench, m, rec, rng, 1)
    a = sim.absorbance[0]
    clean = expected_state(model, recipe)
    W = whitening(error_budget(bench, model, recipe, clean).total)
    shifted = expected_state(m, rec).absorbance
    if kind == "swapped-tubes":
        k = (i + 1 + int(rng.integers(n - 1))) % n
        a[[i, k]] = a[[k, i]]
        shifted = clean.absorbance.copy()
        shifted[[i, k]] = shifted[[k, i]]
        lo, hi = sorted((i, k))
        tag = f"{recipe.tubes[lo]} and {recipe.tubes[hi]} swapped"
    elif kind == "wavelength":
        a = a * 0.85
        shifted = clean.absorbance * 0.85
        tag = "scaled"
    elif kind == "blank":
        a = a + 0.05
        shifted = clean.absorbance + 0.05
        tag = "shifted"
    return a, tag, float(np.linalg.norm(W @ (shifted - clean.absorbance)))


def _with_stocks(model, conc):
    from dataclasses import replace

    return replace(model, stock_conc_M=conc)

"""The class's own model: one robust fit of every student's readings, and each student judged against it.

The plan's constants are guesses, as uncertain as the effects a grade must see, so students are judged
against the model the class itself measured, never against the guess (domain.md §4, "Judging measured
data against a plan").

The class fit. Every reading is A = f(θ; tube) + S z + D_s u_s + e: θ the fitted constants and
absorptivities; z the class's stock factors (one bottle of each stock for the class: each stock's
concentration error in sd units, shared by every tube made from it), fitted with a standard normal prior
(their stated uncertainty); u_s the calibration errors of student s's dispensers and e the independent
errors (photometric, random delivery, make-up), together the student's own covariance
Σ_s = diag(v_s) + D_s D_sᵀ. Students are independent given (θ, z), so the whitening is block diagonal
(:class:`planner.inference.blocks.BlockWhitening`): memory and time grow linearly with the class. The
photometric part of v depends on the readings: the weights are re-evaluated at the fit and refitted.

Robust to the students it should not trust: the fit starts from the median of the students' own fits and
from the half of the class closest to it (both robust while fewer than half are wrong), then sets aside,
iteratively, every student whose readings fail the test below, until the set no longer changes.

The test of a student. With X_s and e_s the student's whitened Jacobian rows (in θ and z) and residuals
at the class fit and C the fit's covariance, the statistic is eᵀ(I − X C Xᵀ)⁻¹e for a student in the fit
and eᵀ(I + X C Xᵀ)⁻¹e for one set aside: both are the χ² of the student's readings against the model
fitted without them, which follows χ²(n_s) exactly for a linear model (the deletion and prediction forms
of the same residual; Cook & Weisberg 1982, Residuals and Influence in Regression, §2.2 and §3.5). So the
class fit's own uncertainty is carried into every test, and a clean student is flagged at the test's
level whatever the guess was.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from ...inference.blocks import BlockWhitening, WithPrior
from ...inference.intervals import CHI2_95_1DOF, profile_interval
from ...inference.lm import fit_many
from ...inference.precision import ReadingModel, unpack
from ...inference.study import Study
from ...inference.tails import chi2_sf
from ...inputs.recipe import Recipe, concat_recipes
from ...model.compiled import Model, predict, tube_ions_M
from ...uncertainty.budget import error_factors
from ..measure.core import chi2_tails, determined_mask
from ..measure.fit import not_determined

FLAG_LEVEL = 0.05  # the per-student test's level: the share of clean students flagged [common practice]
MAX_ROUNDS = 12  # rounds of setting aside; the set settles in two or three


@dataclass(frozen=True)
class Tubes:
    """The tubes of S students, concatenated in student order.

    Attributes
    ----------
    recipe : all tubes as one recipe; sizes : (S,) tubes per student; y : (N,) the readings.
    totals, ions : (N, 2) and (N, ·) per tube.
    """

    recipe: Recipe
    sizes: np.ndarray
    y: np.ndarray
    totals: np.ndarray
    ions: np.ndarray

    @classmethod
    def of(cls, model: Model, recipes: list[Recipe], readings: list[np.ndarray]) -> Tubes:
        rec = concat_recipes(recipes, [str(k) for k in range(len(recipes))])
        tot = (rec.volumes_mL @ model.stock_conc_M) / rec.total_volume_mL[:, None]
        ions = tube_ions_M(model, rec.volumes_mL, rec.total_volume_mL)
        sizes = np.array([r.n_tubes for r in recipes], dtype=int)
        return cls(rec, sizes, np.concatenate(readings), tot, ions)

    def take(self, students: np.ndarray) -> Tubes:
        """The tubes of the students ``students`` (indices, in order)."""
        starts = np.concatenate([[0], np.cumsum(self.sizes)[:-1]])
        idx = np.concatenate([np.arange(starts[s], starts[s] + self.sizes[s]) for s in students])
        return Tubes(
            self.recipe.take(idx), self.sizes[students], self.y[idx], self.totals[idx], self.ions[idx]
        )


@dataclass(frozen=True)
class Factors:
    """The error model of the tubes at one θ: independent variance, the student's own dispenser loadings
    and the class's stock loadings (all per 1 sd)."""

    var: np.ndarray
    device: np.ndarray
    stock: np.ndarray

    def whitening(self, sizes: np.ndarray) -> BlockWhitening:
        return BlockWhitening.of(self.var, self.device, sizes)


def factors_at(study: Study, tubes: Tubes, theta: np.ndarray) -> Factors:
    """The error factors of every tube at the parameters ``theta`` (P,)."""
    model = study.model
    lb, eps, _ = unpack(model, study.params, np.asarray(theta, dtype=float))
    state = predict(model, tubes.totals, tubes.ions, log_beta=lb, epsilon_M_cm=eps, warn=False)
    f = error_factors(study.bench, model, tubes.recipe, state)
    return Factors(f.independent_var, f.J_device, f.J_stock)


@dataclass(frozen=True)
class ClassModel:
    """The class's fit.

    Attributes
    ----------
    theta : (P,) the constants and absorptivities; z : (k,) the stock factors (sd units).
    cov : (P + k, P + k) their covariance; se : (P,) the SEs of θ (widened by ``scale`` where the class's
        scatter exceeds the error model).
    chi2, dof, p_value, p_low : the fit's χ² over the students it used.
    scale : √(χ²/dof) when the upper tail fails, else 1.
    ci : (lo, hi) profile 95 % interval of the target (None: open side).
    determined, reason : whether the class's readings determine θ, and why not.
    used : (S,) students in the fit (of the students graded); tubes : tubes it used.
    """

    theta: np.ndarray
    z: np.ndarray
    cov: np.ndarray
    se: np.ndarray
    chi2: float
    dof: int
    p_value: float
    p_low: float
    scale: float
    ci: tuple[float | None, float | None] | None
    determined: bool
    reason: str
    used: np.ndarray
    tubes: int

    def stock_model(self, study: Study) -> Model:
        """The plan's model at the class's constants and with each stock at its fitted concentration."""
        model = study.model
        lb, eps, _ = unpack(model, study.params, self.theta)
        conc = model.stock_conc_M * (1.0 + model.stock_conc_rsd * self.z)[:, None]
        return replace(model, log_beta=lb, epsilon_M_cm=eps, stock_conc_M=conc)


def _ext(reading: ReadingModel, S: np.ndarray, P: int):
    """The model and Jacobian in (θ, z), with z's prior rows appended: A = f(θ) + S z, and z itself."""
    k = S.shape[1]

    def f(phi):
        th, z = phi[:, :P], phi[:, P:]
        return np.concatenate([reading.f(th) + z @ S.T, z], axis=1)

    def jac(phi):
        th = phi[:, :P]
        J = reading.jac(th)
        T = J.shape[0]
        top = np.concatenate([J, np.broadcast_to(S, (T,) + S.shape)], axis=2)
        bottom = np.broadcast_to(np.concatenate([np.zeros((k, P)), np.eye(k)], axis=1), (T, k, P + k))
        return np.concatenate([top, bottom], axis=1)

    return f, jac


def _fit(study: Study, tubes: Tubes, phi0: np.ndarray):
    """One class fit from ``phi0`` (P + k,), weighted at the start, then re-weighted at the fit and refitted.

    Returns (φ̂, covariance, χ², converged, (f, jac, whitening, y, lower, upper) of the last fit)."""
    P = study.params.size
    reading = ReadingModel(study.model, study.params, tubes.totals, tubes.ions)
    lo, hi = reading.bounds()
    k = study.model.stock_conc_M.shape[0]
    lo_e, hi_e = np.concatenate([lo, np.full(k, -np.inf)]), np.concatenate([hi, np.full(k, np.inf)])
    y = np.concatenate([tubes.y, np.zeros(k)])
    phi = np.asarray(phi0, dtype=float)
    for _ in range(2):
        fac = factors_at(study, tubes, np.clip(phi[:P], lo, hi))
        W = WithPrior(fac.whitening(tubes.sizes), k)
        f, jac = _ext(reading, fac.stock, P)
        res = fit_many(f, phi, y, jac=jac, whiten=W, scale_cov=False, lower=lo_e, upper=hi_e)
        phi = np.asarray(res.theta)[0]
    return phi, np.asarray(res.cov)[0], float(res.chi2[0]), bool(res.converged[0]), (f, jac, W, y, lo_e, hi_e)


def class_fit(
    study: Study, tubes: Tubes, keep: np.ndarray, start: np.ndarray, *, interval: bool
) -> ClassModel:
    """Fit the students ``keep`` (bool over the students of ``tubes``) from ``start`` (P,)."""
    params = study.params
    P = params.size
    k = study.model.stock_conc_M.shape[0]
    sub = tubes.take(np.flatnonzero(keep))
    phi, cov, chi2, conv, ctx = _fit(study, sub, np.concatenate([start, np.zeros(k)]))
    se = np.sqrt(np.maximum(np.diag(cov)[:P], 0.0)) if np.all(np.isfinite(cov)) else np.full(P, np.nan)
    dof = int(sub.y.size) - P
    p_high, p_low, scale = chi2_tails(np.array([chi2]), dof)
    reading = ReadingModel(study.model, params, sub.totals, sub.ions)
    lo, hi = reading.bounds()
    reason = not_determined(params, phi[:P], se, conv, lo, hi)
    det = reason is None and bool(
        determined_mask(params, phi[None, :P], se[None], np.array([conv]), lo, hi)[0]
    )
    s = float(scale[0]) if det else 1.0
    ci = None
    if det and interval and params.target >= 0:
        f, jac, W, y, lo_e, hi_e = ctx
        a, b = profile_interval(
            f,
            jac,
            W,
            y,
            phi[None, :],
            params.target,
            se=se[params.target : params.target + 1],
            chi2_min=np.array([chi2]),
            lower=lo_e,
            upper=hi_e,
            threshold=CHI2_95_1DOF * s**2,
        )
        ci = (float(a[0]) if np.isfinite(a[0]) else None, float(b[0]) if np.isfinite(b[0]) else None)
    return ClassModel(
        phi[:P],
        phi[P:],
        cov,
        se * s,
        chi2,
        dof,
        float(p_high[0]),
        float(p_low[0]),
        s,
        ci,
        det,
        reason or "",
        keep.copy(),
        int(sub.y.size),
    )


@dataclass(frozen=True)
class Judgement:
    """Every student against the class's model.

    Attributes
    ----------
    stat, p : (S,) the χ² of each student's readings against the model fitted without them, and its upper
        tail at n_s degrees of freedom.
    expected : (N,) each tube's reading predicted by the class's model (stock factors included).
    band_sd : (N,) sd of a tube's reading about it (the student's own errors and the class fit's).
    J, device, var, C, starts, sizes : what :meth:`parts_of` needs (Jacobian in (θ, z), dispenser loadings,
        independent variances, the fit's covariance, each student's first tube and tube count).
    """

    stat: np.ndarray
    p: np.ndarray
    expected: np.ndarray
    band_sd: np.ndarray
    J: np.ndarray
    device: np.ndarray
    var: np.ndarray
    C: np.ndarray
    starts: np.ndarray
    sizes: np.ndarray

    def parts_of(self, s: int) -> tuple[np.ndarray, np.ndarray]:
        """(own, shared) (n_s, n_s) covariance of student s's readings about ``expected``: their own errors,
        and the class fit's uncertainty (together what a student set aside is judged with)."""
        sl = slice(self.starts[s], self.starts[s] + self.sizes[s])
        Js, Ds = self.J[sl], self.device[sl]
        return np.diag(self.var[sl]) + Ds @ Ds.T, Js @ self.C @ Js.T


def judge(study: Study, tubes: Tubes, cm: ClassModel, in_fit: np.ndarray) -> Judgement:
    """Each student's statistic (see the module docstring), batched over students with equal tube counts."""
    fac = factors_at(study, tubes, cm.theta)
    reading = ReadingModel(study.model, study.params, tubes.totals, tubes.ions)
    J = np.concatenate([reading.jac(cm.theta[None, :])[0], fac.stock], axis=1)  # (N, P + k)
    expected = reading.f(cm.theta[None, :])[0] + fac.stock @ cm.z
    Wb = fac.whitening(tubes.sizes)
    e = Wb.apply(tubes.y - expected)
    X = Wb.apply_jac(J)
    C = cm.cov
    band = fac.var + np.sum(fac.device**2, axis=1) + np.einsum("np,pq,nq->n", J, C, J)
    starts = np.concatenate([[0], np.cumsum(tubes.sizes)[:-1]])
    S = tubes.sizes.size
    stat = np.full(S, np.nan)
    p = np.full(S, np.nan)
    for n in np.unique(tubes.sizes):  # one batch per tube count (a class usually has one)
        who = np.flatnonzero(tubes.sizes == n)
        idx = starts[who][:, None] + np.arange(n)  # (S_n, n)
        Xs, es = X[idx], e[idx]
        M = Xs @ C @ np.swapaxes(Xs, 1, 2)
        sign = np.where(in_fit[who], -1.0, 1.0)[:, None, None]
        # a student who alone fixes a direction of the fit (leverage 1) has no deletion residual there: the
        # tiny ridge keeps the solve finite, and such a statistic is not a test
        A = np.eye(n) * (1.0 + 1e-10) + sign * M
        stat[who] = np.einsum("si,si->s", es, np.linalg.solve(A, es[..., None])[..., 0])
        p[who] = chi2_sf(stat[who], int(n))
    return Judgement(stat, p, expected, np.sqrt(band), J, fac.device, fac.var, C, starts, tubes.sizes)


def raw_chi2(study: Study, tubes: Tubes, theta: np.ndarray) -> np.ndarray:
    """(S,) each student's χ² per tube against the model at ``theta`` with the stocks as labelled."""
    fac = factors_at(study, tubes, theta)
    reading = ReadingModel(study.model, study.params, tubes.totals, tubes.ions)
    e = fac.whitening(tubes.sizes).apply(tubes.y - reading.f(np.asarray(theta)[None, :])[0])
    starts = np.concatenate([[0], np.cumsum(tubes.sizes)[:-1]])
    return np.add.reduceat(e * e, starts) / tubes.sizes


def _best_half(score: np.ndarray, usable: np.ndarray) -> np.ndarray:
    """The usable students whose score is at most the median of the usable ones."""
    return usable & (score <= np.median(score[usable]))


def robust_class(study: Study, tubes: Tubes, usable: np.ndarray, start: np.ndarray):
    """Fit the class from its better half, judge everyone, keep those who pass, and again until the set
    settles (see the module docstring).

    The first fit uses the half of the students closest to the model at ``start`` (a least-trimmed start
    at the student level, after Rousseeuw 1984, JASA 79:871), so a few wild students cannot bend it; a
    round that would keep fewer than half keeps the better half instead. Returns (ClassModel, Judgement),
    with no Judgement when the class's readings do not determine the constants, or (None, None) without
    a usable student.
    """
    if usable.sum() < 1:
        return None, None
    keep = _best_half(raw_chi2(study, tubes, start), usable)
    cm = None
    for _ in range(MAX_ROUNDS):
        cm = class_fit(study, tubes, keep, start, interval=False)
        if not cm.determined:
            return cm, None
        jd = judge(study, tubes, cm, keep)
        new = usable & (jd.p >= FLAG_LEVEL)
        if new.sum() < 0.5 * usable.sum():
            new = _best_half(jd.stat / tubes.sizes, usable)
        if np.array_equal(new, keep):
            break
        keep, start = new, cm.theta
    cm = class_fit(study, tubes, keep, cm.theta, interval=True)
    jd = judge(study, tubes, cm, keep) if cm.determined else None
    return cm, jd

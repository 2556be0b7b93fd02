"""The fit of measured readings, batched: T experiments of the same tubes at once.

Each experiment is fitted by generalised least squares with the plan's error budget (photometric,
delivery and stock errors, correlated across tubes) from several starts over the guess's range, then
re-weighted once at its own fit (the photometric noise depends on the readings) and refitted; the
covariance of the estimates is (JᵀΣ⁻¹J)⁻¹ at the solution. The χ² of each fit is judged on both tails of
χ²(dof); when the scatter is larger than the error model allows (upper tail below ``CHI2_TAIL``), the
interval is widened by s = √(χ²/dof), the usual scaling of a least-squares covariance by the observed
scatter (the convention of the NIST StRD certified values; Birge 1932, Phys. Rev. 40:207). The 95 %
interval of the target's log β is the profile-likelihood interval (Δχ² ≤ 3.84 s²) with its ends found by
root-finding (:func:`planner.inference.intervals.profile_interval`).

:func:`fit_batch` is what ``kplan fit`` runs for one experiment and what the coverage checks run for
hundreds: no loop over experiments or tubes.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ...inference.intervals import CHI2_95_1DOF, profile_interval
from ...inference.lm import fit_many
from ...inference.precision import ReadingModel, unpack, whitening
from ...inference.study import Study
from ...inference.tails import chi2_cdf, chi2_sf
from ...inputs.recipe import Recipe
from ...model.compiled import tube_ions_M
from ...uncertainty.budget import error_budget, error_factors
from ..compile import expected_state
from .outliers import suspects

N_STARTS = 7  # starts spread over ±3 sd of the target's guess
CHI2_TAIL = 0.05  # each tail of the χ² test [common practice]
SE_LIMIT = 5.0  # log10 units: an SE beyond this is no determination at all


@dataclass(frozen=True)
class Batch:
    """T fits of the same tubes.

    Attributes
    ----------
    theta, se : (T, P) estimates and their error-model standard errors.
    cov : (T, P, P) (JᵀΣ⁻¹J)⁻¹ at each fit.
    chi2 : (T,); dof : tubes − parameters.
    p_high, p_low : (T,) upper and lower tails of χ²(dof) at chi2.
    converged, determined : (T,) the final fit met a convergence test; it determines every parameter.
    scale : (T,) the interval's widening s (1 where the scatter matches the error model).
    ci : (T, 2) profile 95 % interval of the target (NaN: open side, or no interval).
    W : (T, n, n) whitening of each experiment's covariance at its fit.
    suspects, suspect_z, suspect_shift : (T, m) the wild readings the backward search found (tube index,
        −1 for none), their statistics and shifts.
    """

    theta: np.ndarray
    se: np.ndarray
    cov: np.ndarray
    chi2: np.ndarray
    dof: int
    p_high: np.ndarray
    p_low: np.ndarray
    converged: np.ndarray
    determined: np.ndarray
    scale: np.ndarray
    ci: np.ndarray
    W: np.ndarray
    suspects: np.ndarray
    suspect_z: np.ndarray
    suspect_shift: np.ndarray


def reading_model(study: Study, recipe: Recipe) -> ReadingModel:
    """The expected readings of ``recipe``'s tubes as a function of the fitted parameters."""
    model = study.model
    ions = tube_ions_M(model, recipe.volumes_mL, recipe.total_volume_mL)
    return ReadingModel(model, study.params, expected_state(model, recipe).totals_M, ions)


def covariance_at(study: Study, recipe: Recipe, theta: np.ndarray) -> np.ndarray:
    """(T, n, n) covariance of the readings of ``recipe`` at each parameter vector of ``theta`` (T, P): the
    full error budget evaluated where each fit landed (vectorised over T for separately made tubes)."""
    model, bench = study.model, study.bench
    theta = np.atleast_2d(theta)
    lb, eps, _ = unpack(model, study.params, theta)
    if bench.titration is not None:  # a titration's budget is built point by point along the additions
        return np.stack(
            [
                error_budget(
                    bench, model, recipe, expected_state(model, recipe, log_beta=lb[k], epsilon_M_cm=eps[k])
                ).total
                for k in range(theta.shape[0])
            ]
        )
    state = expected_state(model, recipe, batch=theta.shape[0], log_beta=lb, epsilon_M_cm=eps, warn=False)
    f = error_factors(bench, model, recipe, state)
    shared = np.concatenate([f.J_stock, f.J_device], axis=-1)
    cov = shared @ np.swapaxes(shared, -1, -2)
    idx = np.arange(recipe.n_tubes)
    cov[:, idx, idx] += f.independent_var
    return cov


def whitening_at(study: Study, recipe: Recipe, theta: np.ndarray) -> np.ndarray:
    """(T, n, n) W with WᵀW = Σ⁻¹ at each parameter vector (batched inverse Cholesky factors)."""
    cov = covariance_at(study, recipe, theta)
    L = np.linalg.cholesky(cov)
    return np.linalg.solve(L, np.broadcast_to(np.eye(cov.shape[-1]), cov.shape))


def determined_mask(params, theta, se, converged, lo, hi) -> np.ndarray:
    """(T,) fits that determine every parameter: converged, off the box's edges, finite SEs, and no log β
    with an SE beyond ``SE_LIMIT`` (see :func:`planner.jobs.measure.fit.not_determined` for the words)."""
    tol_lo = 1e-6 * np.maximum(1.0, np.abs(lo))
    tol_hi = 1e-6 * np.maximum(1.0, np.abs(hi))
    at_edge = (np.abs(theta - lo) < tol_lo) | (np.abs(theta - hi) < tol_hi)
    edge = np.any(at_edge & (np.isfinite(lo + hi) | (params.kind == 1)), axis=-1)
    lb = params.kind == 0
    too_wide = np.any(se[:, lb] > SE_LIMIT, axis=-1) if lb.any() else np.zeros(theta.shape[0], dtype=bool)
    return converged & ~edge & np.all(np.isfinite(se), axis=-1) & ~too_wide


def fit_batch(study: Study, recipe: Recipe, Y: np.ndarray, *, interval: bool = True) -> Batch:
    """Fit readings ``Y`` (T, n) of the tubes of ``recipe`` (see the module docstring).

    Where the backward search names wild readings (:mod:`planner.jobs.measure.outliers`), the interval
    also holds the interval of the fit without them: until the user decides which fit to believe, the
    interval covers both (the estimate stays the fit of every tube used).
    """
    params = study.params
    Y = np.atleast_2d(np.asarray(Y, dtype=float))
    T, n = Y.shape
    reading = reading_model(study, recipe)
    lo, hi = reading.bounds()
    theta1 = _best_start(study, recipe, reading, Y)
    # the photometric part of the error model depends on the readings: re-weight at each fit, refit once
    W = whitening_at(study, recipe, theta1)
    fit = _refit(reading, theta1, Y, W)
    dof = n - params.size
    det = determined_mask(params, fit.theta, fit.se, np.asarray(fit.converged), lo, hi)
    p_high, p_low, scale = chi2_tails(fit.chi2, dof)
    X = W @ reading.jac(fit.theta)
    e = np.einsum("tij,tj->ti", W, Y - reading.f(fit.theta))
    cap = max(0, min(n - params.size - 1, n // 3))
    taken, zs, ds = suspects(X, e, W, max_suspects=cap)
    taken = np.where(det[:, None], taken, -1)
    ci = np.full((T, 2), np.nan)
    if interval and params.target >= 0 and det.any():
        rows = np.flatnonzero(det)
        ci[rows] = _interval(reading, W[rows], Y[rows], fit, rows, scale[rows])
        bad = np.flatnonzero(det & np.any(taken >= 0, axis=1))
        if bad.size:
            ci[bad] = _hull(ci[bad], _without(study, recipe, reading, Y[bad], fit, bad, taken[bad]))
    return Batch(
        np.asarray(fit.theta),
        np.asarray(fit.se),
        np.asarray(fit.cov),
        np.asarray(fit.chi2),
        dof,
        p_high,
        p_low,
        np.asarray(fit.converged),
        det,
        scale,
        ci,
        W,
        taken,
        zs,
        ds,
    )


def _best_start(study: Study, recipe: Recipe, reading: ReadingModel, Y: np.ndarray) -> np.ndarray:
    """The best of ``N_STARTS`` fits per experiment, starting over ±3 sd of the target's guess."""
    params = study.params
    T = Y.shape[0]
    lo, hi = reading.bounds()
    W0 = whitening(error_budget(study.bench, study.model, recipe, expected_state(study.model, recipe)).total)
    k = N_STARTS
    starts = np.tile(params.guess, (T * k, 1))
    if params.target >= 0:
        starts[:, params.target] += np.tile(np.linspace(-3, 3, k), T) * params.prior_sd[params.target]
    res = fit_many(
        reading.f,
        starts,
        np.repeat(Y, k, axis=0),
        jac=reading.jac,
        whiten=W0,
        scale_cov=False,
        lower=lo,
        upper=hi,
    )
    raw = np.where(np.isnan(res.chi2), np.inf, res.chi2).reshape(T, k)
    chi = np.where(np.asarray(res.converged).reshape(T, k), raw, np.inf)
    chi = np.where(np.isfinite(chi).any(axis=1)[:, None], chi, raw)  # no start converged: the best anyway
    return np.asarray(res.theta)[np.argmin(chi, axis=1) + np.arange(T) * k]


def _refit(reading: ReadingModel, theta: np.ndarray, Y: np.ndarray, W: np.ndarray):
    lo, hi = reading.bounds()
    w = W if W.shape[0] > 1 else W[0]
    return fit_many(reading.f, theta, Y, jac=reading.jac, whiten=w, scale_cov=False, lower=lo, upper=hi)


def chi2_tails(chi2: np.ndarray, dof) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Upper and lower tails of χ²(dof) and the widening s = √(χ²/dof) where the upper tail fails
    (``dof`` a whole number, or one per experiment)."""
    chi2 = np.asarray(chi2, dtype=float)
    dofs = np.broadcast_to(np.asarray(dof), chi2.shape)
    p_high = np.full(chi2.shape, np.nan)
    p_low = np.full(chi2.shape, np.nan)
    for d in np.unique(dofs[dofs > 0]):  # a few distinct degrees of freedom at most
        m = dofs == d
        p_high[m], p_low[m] = chi2_sf(chi2[m], int(d)), chi2_cdf(chi2[m], int(d))
    wide = (dofs > 0) & (p_high < CHI2_TAIL)
    scale = np.where(wide, np.sqrt(np.where(wide, chi2, 1.0) / np.maximum(dofs, 1)), 1.0)
    return p_high, p_low, scale


def _interval(reading: ReadingModel, W, Y, fit, rows, scale) -> np.ndarray:
    lo, hi = reading.bounds()
    t = reading.params.target
    a, b = profile_interval(
        reading.f,
        reading.jac,
        W,
        Y,
        np.asarray(fit.theta)[rows],
        t,
        se=np.asarray(fit.se)[rows, t],
        chi2_min=np.asarray(fit.chi2)[rows],
        lower=lo,
        upper=hi,
        threshold=CHI2_95_1DOF * scale**2,
    )
    return np.stack([a, b], axis=1)


DELETE = 1e8  # a suspect's variance times this: the fit without it (a mean-shift parameter, in effect)


def _without(study: Study, recipe: Recipe, reading: ReadingModel, Y, fit, rows, taken) -> np.ndarray:
    """The profile interval of each experiment ``rows`` fitted without its suspects ``taken``."""
    theta = np.asarray(fit.theta)[rows]
    cov = covariance_at(study, recipe, theta)
    R = np.arange(rows.size)[:, None]
    hit = taken >= 0
    idx = np.maximum(taken, 0)
    boost = np.where(hit, cov[R, idx, idx] * DELETE, 0.0)
    np.add.at(cov, (np.broadcast_to(R, taken.shape)[hit], idx[hit], idx[hit]), boost[hit])
    W = np.linalg.solve(np.linalg.cholesky(cov), np.broadcast_to(np.eye(cov.shape[-1]), cov.shape))
    res = _refit(reading, theta, Y, W)
    _, _, scale = chi2_tails(res.chi2, Y.shape[1] - reading.params.size - hit.sum(axis=1))
    return _interval(reading, W, Y, res, np.arange(rows.size), scale)


def _hull(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """The smallest interval holding both (an open side stays open)."""
    lo = np.where(np.isnan(a[:, 0]) | np.isnan(b[:, 0]), np.nan, np.minimum(a[:, 0], b[:, 0]))
    hi = np.where(np.isnan(a[:, 1]) | np.isnan(b[:, 1]), np.nan, np.maximum(a[:, 1], b[:, 1]))
    return np.stack([lo, hi], axis=1)

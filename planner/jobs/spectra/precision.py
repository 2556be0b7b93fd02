"""Precision of the constants from whole spectra: Cramér–Rao, Monte Carlo, χ² profile, and what one
wavelength alone would give.

Cramér–Rao: the Fisher information of the constants with every fitted spectrum (one ε per wavelength)
and the tube-level errors as nuisance parameters, Jᵀ J with J Kaufman's projected Jacobian at the
noise-free readings (:mod:`planner.inference.varpro`) — exactly the Schur complement of the full
information matrix, computed with the covariance of the readings that keeps each tube's delivery and
stock errors correlated across its wavelengths (Cramér 1946; Rao 1945). Monte Carlo: whole experiments
simulated with every error source (each tube's own volumes and the stocks drawn once per experiment and
read at every wavelength, photometric noise per reading), each refitted by variable projection.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from ...inference.lm import fit_many
from ...inference.precision import (
    CHI2_95_1DOF,
    LOG_BETA_RANGE,
    CramerRao,
    MonteCarlo,
    Profile,
    cramer_rao,
    limit_ends,
    pack,
    unpack,
)
from ...inference.simulate import simulate
from ...inference.study import Study
from ...inference.varpro import SeparableProblem, Weights
from ...inputs.recipe import Recipe
from ...model.spectra import linearise, spectra_readings
from ...uncertainty.bench import Bench
from .reading import SpectraModel, expected, spectra_model

MC_CHUNK = 250  # simulated experiments fitted at once (memory: ~ chunk × n × W × (r + 2 s) floats)


class _Whitened:
    """Stands for the whitening of rows that are already whitened (``W @ J`` is J)."""

    def __matmul__(self, x):
        return np.asarray(x, dtype=float)


def bounds(params) -> tuple[np.ndarray, np.ndarray]:
    """The box of the constants (log β within the range the single-wavelength fit allows)."""
    return np.full(params.size, LOG_BETA_RANGE[0]), np.full(params.size, LOG_BETA_RANGE[1])


def jacobian(sm: SpectraModel, weights: Weights, theta: np.ndarray) -> np.ndarray:
    """(n W + r, P) projected Jacobian at the noise-free readings of θ."""
    th = np.atleast_2d(theta)
    return SeparableProblem(sm.basis, sm.linear_readings(th), weights).full_jacobian(th)[0]


def spectra_cramer_rao(sm: SpectraModel, weights: Weights, theta: np.ndarray) -> CramerRao:
    """Cramér–Rao bound of the constants from every wavelength (spectra and shared errors as nuisance)."""
    return cramer_rao(jacobian(sm, weights, theta), W=_Whitened())


def information_by_wavelength(cr: CramerRao, n: int, W: int, target: int) -> np.ndarray:
    """(W,) each wavelength's share of the information about the target constant.

    With u = F⁻¹ e_t, 1/Var(θ̂_t) = Σ_rows (J_row · u)² / [F⁻¹]_tt²: every reading contributes a
    non-negative part (its row of the projected Jacobian along the target's efficient direction); the
    shares of the readings of one wavelength are summed and normalised over the wavelengths.
    """
    if target < 0 or not np.all(np.isfinite(cr.cov)):
        return np.full(W, np.nan)
    u = cr.cov[:, target]
    part = (cr.jacobian[: n * W] @ u) ** 2  # rows wavelength by wavelength (varpro's order)
    by_w = part.reshape(W, n).sum(axis=1)
    total = by_w.sum()
    return by_w / total if total > 0 else np.full(W, np.nan)


def spectra_monte_carlo(
    bench: Bench,
    recipe: Recipe,
    sm: SpectraModel,
    weights: Weights,
    rng: np.random.Generator,
    n_trials: int,
    true_theta: np.ndarray,
    *,
    chunk: int = MC_CHUNK,
    progress: Callable[[int, int], None] | None = None,
) -> MonteCarlo:
    """Simulate ``n_trials`` whole-spectrum experiments at ``true_theta`` (the guessed spectra) and refit
    each by variable projection, starting from the guess, in chunks of ``chunk``."""
    params, model, spectra = sm.params, sm.model, sm.spectra
    lb, _, _ = unpack(model, params, true_theta)
    lo, hi = bounds(params)
    est = np.full((n_trials, params.size), np.nan)
    ok = np.zeros(n_trials, dtype=bool)
    done = 0
    while done < n_trials:
        m = min(chunk, n_trials - done)
        # each experiment's own volumes and stocks, read at every wavelength; noise per reading
        exp = simulate(bench, model, recipe, rng, m, log_beta=lb, photometric=False)
        rd = spectra_readings(spectra, exp.state.absorber_conc_M(), model.path_cm)
        y = rd.absorbance + rd.absorbance_sd * rng.standard_normal(rd.absorbance.shape)
        Y = np.nan_to_num(linearise(y, spectra.stray_light), nan=0.0) * weights.used
        prob = SeparableProblem(sm.basis, Y, weights)
        theta0 = np.broadcast_to(params.guess, (m, params.size)).copy()
        res = fit_many(prob.f, theta0, prob.y(params.size), jac=prob.jac, scale_cov=False, lower=lo, upper=hi)
        good = res.converged & np.all(np.isfinite(res.theta), axis=1)
        est[done : done + m] = np.where(good[:, None], res.theta, np.nan)
        ok[done : done + m] = good
        done += m
        if progress is not None:
            progress(done, n_trials)
    return _summary(est, ok, true_theta)


def _summary(est: np.ndarray, ok: np.ndarray, true_theta: np.ndarray) -> MonteCarlo:
    good = est[ok]
    P = est.shape[1]
    if good.shape[0] >= 2:
        sd = good.std(axis=0, ddof=1)
        bias = good.mean(axis=0) - true_theta
        ci = np.percentile(good, [2.5, 97.5], axis=0).T
    else:
        sd = bias = np.full(P, np.nan)
        ci = np.full((P, 2), np.nan)
    return MonteCarlo(est, np.asarray(true_theta, dtype=float), sd, bias, ci, float(1.0 - ok.mean()))


def profile_chi2(sm: SpectraModel, weights: Weights, Y: np.ndarray, theta: np.ndarray, grid: np.ndarray):
    """(G,) χ² of the spectra Y (n, W) with the target's log β at each ``grid`` value, the other
    constants and every spectrum refitted (all grid points in one batch)."""
    params = sm.params
    t = params.target
    G = grid.size
    others = [p for p in range(params.size) if p != t]

    def full(sub):
        th = np.empty((G, params.size))
        th[:, others] = sub
        th[:, t] = grid
        return th

    def basis(sub):
        C, dC, K, dK = sm.basis(full(sub))
        return C, dC[..., others], K, dK[..., others]

    prob = SeparableProblem(basis, np.broadcast_to(Y, (G,) + Y.shape), weights, rowwise=False)
    sub0 = np.broadcast_to(theta[others], (G, len(others))).copy()
    if not others:
        return prob.evaluate(sub0)["chi2"]
    lo, hi = bounds(params)
    res = fit_many(
        prob.f, sub0, prob.y(len(others)), jac=prob.jac, scale_cov=False, lower=lo[others], upper=hi[others]
    )
    return np.where(np.isfinite(res.chi2), res.chi2, np.inf)


def spectra_profile(
    sm: SpectraModel, weights: Weights, true_theta: np.ndarray, *, n_grid: int = 25
) -> Profile:
    """Δχ² of the noise-free spectra over the target's log β, the other constants and every spectrum
    refitted (Raue et al. 2009, Bioinformatics 25:1923, as :func:`planner.inference.precision.profile`)."""
    t = sm.params.target
    inner = true_theta[t] + np.linspace(-3.0, 3.0, n_grid)
    low, high = limit_ends(_Reading(sm), true_theta)
    grid = np.concatenate([[low], inner, [high]])
    chi2 = profile_chi2(sm, weights, sm.linear_readings(true_theta[None])[0], true_theta, grid)
    return Profile(grid, chi2, bool(chi2[0] < CHI2_95_1DOF), bool(chi2[-1] < CHI2_95_1DOF))


@dataclass(frozen=True)
class _Reading:
    """What :func:`planner.inference.precision.limit_ends` reads of a reading model."""

    sm: SpectraModel

    @property
    def params(self):
        return self.sm.params

    @property
    def model(self):
        return self.sm.model

    @property
    def totals_M(self):
        return self.sm.totals_M


def target_se_spectra(study: Study, recipe: Recipe, log_beta: np.ndarray | None = None) -> float:
    """Exact whole-spectrum Cramér–Rao SE of the target for ``recipe`` (at other true constants)."""
    sm = spectra_model(study, recipe)
    lb = study.model.log_beta if log_beta is None else log_beta
    ex = expected(study, recipe, sm, lb)
    cr = spectra_cramer_rao(sm, ex.weights, pack(study.model, sm.params, log_beta=lb))
    t = sm.params.target
    return float(cr.se[t]) if t >= 0 else float("nan")

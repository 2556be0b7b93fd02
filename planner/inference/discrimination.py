"""Can a recipe's data tell the main model from an alternative one (e.g. a 1:2 complex it leaves out)?

If the alternative is true, the main model fitted by generalised least squares leaves a χ² that follows a
noncentral χ² distribution with n − P degrees of freedom and noncentrality λ = the minimum over the main
model's parameters of the whitened squared misfit to the alternative's noise-free readings (Atkinson &
Fedorov 1975, Biometrika 62:57, whose T-optimal designs maximise this λ). The χ² test at level α rejects
the main model with probability P(χ²_{n−P}(λ) > χ²_{n−P, 1−α}): the detection power.

Two ways to get it:
- :func:`linear_noncentrality` (for the design optimiser): the misfit linearised at the guess, with the
  errors shared across tubes as unit-prior nuisance factors, λ = ‖r‖² − bᵀ M⁻¹ b for whitened misfit rows
  r, b = Fᵀ r and M = FᵀF + M0 — the same projection the exchange algorithm's information uses;
- :func:`detection_power` (for the reports): whole experiments simulated from the alternative with every
  error source, each fitted with the main model, and the share the χ² test rejects; beside it the power
  from the exact (nonlinear) noise-free misfit.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np

from ..inputs.recipe import Recipe
from ..model.compiled import Model, predict, tube_ions_M
from ..uncertainty.bench import Bench
from .lm import fit_many
from .precision import Parameters, ReadingModel, unpack, whitening
from .simulate import simulate
from .tails import chi2_ppf, ncx2_sf

LEVEL = 0.05  # the χ² test's level [common practice]
POWER_GOAL = 0.80  # a check that finds a real effect four times in five [common practice]


def linear_noncentrality(
    F: np.ndarray, R: np.ndarray, M0: np.ndarray | None, counts: np.ndarray
) -> np.ndarray:
    """λ of each alternative for a design given as tube counts on the candidates.

    Parameters
    ----------
    F : (C, P') whitened Jacobian rows of the main model (nuisance-factor columns included).
    R : (A, C) whitened misfit of each alternative at each candidate (alternative − main, at the guess).
    M0 : (P', P') prior information (the nuisance factors' unit prior), or None.
    counts : (C,) tubes at each candidate.
    """
    x = np.asarray(counts, dtype=float)
    M = (F * x[:, None]).T @ F + (0.0 if M0 is None else M0)
    b = (R * x) @ F  # (A, P')
    s = (R**2) @ x  # (A,)
    sol = np.linalg.lstsq(M, b.T, rcond=None)[0]  # (P', A)
    return np.maximum(s - np.einsum("ap,pa->a", b, sol), 0.0)


def power_from_noncentrality(lam: float | np.ndarray, dof: int, level: float = LEVEL) -> np.ndarray:
    """P(χ²_dof(λ) > χ²_{dof, 1−level}); 0 when dof < 1 (no test is possible)."""
    lam = np.asarray(lam, dtype=float)
    if dof < 1:
        return np.zeros_like(lam)
    return ncx2_sf(critical_chi2(dof, level), dof, np.maximum(lam, 1e-300))


@functools.lru_cache(maxsize=256)
def critical_chi2(dof: int, level: float = LEVEL) -> float:
    """χ²_{dof, 1−level}, the test's critical value (cached: a design asks for the same few many times)."""
    return float(chi2_ppf(1.0 - level, dof))


@dataclass(frozen=True)
class Detection:
    """How well a recipe's data reject the main model when an alternative is true.

    Attributes
    ----------
    alternative : name of the species the alternative adds.
    power : share of simulated experiments (alternative true, main model fitted) whose χ² test at
        ``LEVEL`` rejects the main model (NaN when no experiment was simulated).
    power_noise_free : the same from the noncentral χ² at the exact noise-free misfit λ.
    noncentrality : λ, the main model's least whitened squared misfit to the alternative's readings.
    dof : tubes − fitted parameters.
    trials : simulated experiments.
    """

    alternative: str
    power: float
    power_noise_free: float
    noncentrality: float
    dof: int
    trials: int


def detection_power(
    bench: Bench,
    model: Model,
    params: Parameters,
    recipe: Recipe,
    name: str,
    alt: Model,
    cov_A: np.ndarray | None,
    rng: np.random.Generator,
    trials: int,
    *,
    level: float = LEVEL,
    W=None,
) -> Detection:
    """Detection power of ``recipe`` against the alternative ``alt`` (see the module docstring).

    Parameters
    ----------
    cov_A : (n, n) covariance of the readings under the main model at the guess (the error budget), the
        weighting a fit of real data would use; or ``W``, its whitening (e.g. from :func:`whitening_of`).
    trials : simulated experiments (0: the noise-free power only).
    """
    n = recipe.n_tubes
    dof = n - params.size
    if dof < 1:  # as many tubes as parameters (or fewer): the main model fits anything, no test exists
        return Detection(name, 0.0, 0.0, float("nan"), dof, 0)
    tot = (recipe.volumes_mL @ model.stock_conc_M) / recipe.total_volume_mL[:, None]
    ions = tube_ions_M(model, recipe.volumes_mL, recipe.total_volume_mL)
    reading = ReadingModel(model, params, tot, ions)
    if W is None:
        assert cov_A is not None, "give cov_A or its whitening W"
        W = whitening(cov_A)
    lo, hi = reading.bounds()
    y0 = predict(alt, tot, ions, warn=False).absorbance
    # exact noise-free misfit: the best the main model can do on the alternative's readings
    starts = np.repeat(params.guess[None, :], 3, axis=0)
    if params.target >= 0:
        starts[:, params.target] += np.array([-1.0, 0.0, 1.0]) * max(params.prior_sd[params.target], 0.5)
    res0 = fit_many(
        reading.f,
        starts,
        np.broadcast_to(y0, (3, n)),
        jac=reading.jac,
        whiten=W,
        scale_cov=False,
        lower=lo,
        upper=hi,
    )
    chi0 = res0.chi2[np.isfinite(res0.chi2)]
    lam = float(chi0.min()) if chi0.size else float("nan")
    p_nf = float(power_from_noncentrality(lam, dof, level)) if np.isfinite(lam) else float("nan")
    power = float("nan")
    if trials > 0 and dof >= 1:
        sim = simulate(bench, alt, recipe, rng, trials)
        theta0 = np.broadcast_to(params.guess, (trials, params.size)).copy()
        res = fit_many(
            reading.f, theta0, sim.absorbance, jac=reading.jac, whiten=W, scale_cov=False, lower=lo, upper=hi
        )
        ok = res.converged & np.isfinite(res.chi2)
        crit = critical_chi2(dof, level)
        # a fit that fails on the alternative's data is itself a sign the model is wrong: count it as caught
        power = float(np.mean(np.where(ok, res.chi2 > crit, True)))
    elif dof < 1:
        power = 0.0
    return Detection(name, power, p_nf, lam, dof, int(trials if dof >= 1 else 0))


def detection_powers(
    bench: Bench,
    model: Model,
    params: Parameters,
    recipe: Recipe,
    alternatives: tuple[tuple[str, Model], ...],
    rng: np.random.Generator,
    trials: int,
    *,
    W,
    level: float = LEVEL,
) -> tuple[Detection, ...]:
    """:func:`detection_power` for every alternative at once: the exact noise-free fits of all
    alternatives in one batched fit, and the simulated experiments of all of them in another.

    Parameters
    ----------
    alternatives : (name, model) pairs.
    W : whitening of the readings' covariance under the main model (the weighting of a real fit).
    trials : simulated experiments per alternative (0: the noise-free power only).
    """
    n, A = recipe.n_tubes, len(alternatives)
    dof = n - params.size
    if A == 0:
        return ()
    if dof < 1:
        return tuple(Detection(name, 0.0, 0.0, float("nan"), dof, 0) for name, _ in alternatives)
    tot = (recipe.volumes_mL @ model.stock_conc_M) / recipe.total_volume_mL[:, None]
    ions = tube_ions_M(model, recipe.volumes_mL, recipe.total_volume_mL)
    reading = ReadingModel(model, params, tot, ions)
    lo, hi = reading.bounds()
    y0 = np.stack([predict(alt, tot, ions, warn=False).absorbance for _, alt in alternatives])  # (A, n)
    starts = np.repeat(params.guess[None, :], 3, axis=0)
    if params.target >= 0:
        starts[:, params.target] += np.array([-1.0, 0.0, 1.0]) * max(params.prior_sd[params.target], 0.5)
    res0 = fit_many(
        reading.f,
        np.tile(starts, (A, 1)),
        np.repeat(y0, 3, axis=0),
        jac=reading.jac,
        whiten=W,
        scale_cov=False,
        lower=lo,
        upper=hi,
    )
    chi0 = np.where(np.isfinite(res0.chi2), res0.chi2, np.inf).reshape(A, 3).min(axis=1)
    lam = np.where(np.isfinite(chi0), chi0, np.nan)
    power = np.full(A, np.nan)
    if trials > 0:
        sims = [simulate(bench, alt, recipe, rng, trials).absorbance for _, alt in alternatives]
        theta0 = np.broadcast_to(params.guess, (A * trials, params.size)).copy()
        res = fit_many(
            reading.f,
            theta0,
            np.concatenate(sims),
            jac=reading.jac,
            whiten=W,
            scale_cov=False,
            lower=lo,
            upper=hi,
        )
        ok = res.converged & np.isfinite(res.chi2)
        crit = critical_chi2(dof, level)
        # a fit that fails on the alternative's data is itself a sign the model is wrong: count it as caught
        power = np.mean(np.where(ok, res.chi2 > crit, True).reshape(A, trials), axis=1)
    out = []
    for a, (name, _) in enumerate(alternatives):
        p_nf = float(power_from_noncentrality(lam[a], dof, level)) if np.isfinite(lam[a]) else float("nan")
        out.append(Detection(name, float(power[a]), p_nf, float(lam[a]), dof, int(trials)))
    return tuple(out)


def misfit_rows(
    model: Model, params: Parameters, alt: Model, totals_M: np.ndarray, ions_M: np.ndarray, sd: np.ndarray
) -> np.ndarray:
    """(C,) whitened misfit (alternative − main) of candidate tubes at the guess."""
    lb, eps, _ = unpack(model, params, params.guess)
    a_main = predict(model, totals_M, ions_M, log_beta=lb, epsilon_M_cm=eps, warn=False).absorbance
    a_alt = predict(alt, totals_M, ions_M, warn=False).absorbance
    return (a_alt - a_main) / sd

"""After the measurement: fit the readings with the plan's model and compare with the plan's promise.

The readings are fitted by generalised least squares with the same error budget the assessment used
(photometric, delivery and stock errors, correlated across tubes), from several starts over the guess's
range so a poor guess does not trap the fit; the covariance of the estimates is (JᵀΣ⁻¹J)⁻¹ at the
solution. χ²/dof tells whether the scatter matches the error model (a χ² test, dof = tubes − parameters).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.stats import chi2 as chi2_dist

from ..inference.lm import fit_many
from ..inference.precision import ReadingModel, cramer_rao, unpack, whitening
from ..inference.study import Study
from ..inputs.plan import Plan
from ..inputs.readings import Readings
from ..inputs.recipe import Recipe, RecipeError
from ..model.compiled import tube_ions_M
from ..uncertainty.budget import error_budget
from .assess import expected_state
from .compile import compile_study

N_STARTS = 7  # starts spread over ±3 sd of the target's guess


@dataclass(frozen=True)
class Fit:
    """The fitted constants and how they compare with the plan.

    Attributes
    ----------
    names, estimate, se : fitted parameters, their values and standard errors (error model absolute).
    promised_se : Cramér–Rao SE the plan predicted for this recipe at the guess.
    chi2, dof, p_value : goodness of fit against the error model.
    fitted, residual, standardised : per tube, absorbance units (standardised: whitened residuals).
    converged : whether the best start met a convergence test.
    """

    title: str
    recipe: Recipe
    absorbance: np.ndarray
    names: tuple[str, ...]
    estimate: np.ndarray
    se: np.ndarray
    promised_se: np.ndarray
    chi2: float
    dof: int
    p_value: float
    fitted: np.ndarray
    residual: np.ndarray
    standardised: np.ndarray
    converged: bool
    target: str

    def summary(self) -> dict:
        def f(x):
            x = float(x)
            return x if np.isfinite(x) else None

        return {
            "title": self.title,
            "target": self.target,
            "converged": self.converged,
            "parameters": [{"name": n, "estimate": f(e), "se": f(s), "promised_se": f(p)}
                           for n, e, s, p in zip(self.names, self.estimate, self.se, self.promised_se, strict=True)],
            "chi2": f(self.chi2), "dof": self.dof, "p_value": f(self.p_value),
            "tubes": [{"tube": t, "absorbance": f(a), "fitted": f(m), "residual": f(r), "standardised": f(z)}
                      for t, a, m, r, z in zip(self.recipe.tubes, self.absorbance, self.fitted, self.residual,
                                               self.standardised, strict=True)],
        }


def fit_readings(plan: Plan, readings: Readings) -> Fit:
    """Fit measured readings with the plan's model and full error budget."""
    return fit_study(compile_study(plan), readings)


def fit_study(study: Study, readings: Readings) -> Fit:
    """:func:`fit_readings` on a compiled plan."""
    model, params, bench = study.model, study.params, study.bench
    rec = readings.recipe
    if params.size == 0:
        raise RecipeError("plan", "nothing to fit: give the target log_beta_sd > 0 (or ε an rsd)")
    if rec.n_tubes < params.size:
        raise RecipeError("readings", f"{rec.n_tubes} tubes cannot determine {params.size} parameters: add tubes")
    state = expected_state(model, rec)
    cov = error_budget(bench, model, rec, state).total
    W = whitening(cov)
    ions = tube_ions_M(model, rec.volumes_mL, rec.total_volume_mL)
    reading = ReadingModel(model, params, state.totals_M, ions)
    starts = np.repeat(params.guess[None, :], N_STARTS, axis=0)
    if params.target >= 0:
        starts[:, params.target] += np.linspace(-3, 3, N_STARTS) * params.prior_sd[params.target]
    lo, hi = reading.bounds()
    res = fit_many(reading.f, starts, readings.absorbance, jac=reading.jac, whiten=W, scale_cov=False,
                   lower=lo, upper=hi)
    chi2 = np.where(res.converged, res.chi2, np.inf)
    best = int(np.argmin(chi2)) if np.isfinite(chi2).any() else int(np.argmin(res.chi2))
    theta = res.theta[best]
    # the photometric part of the error model depends on the readings: re-weight at the fit, refit once
    lb, eps, _ = unpack(model, params, theta)
    state_fit = expected_state(model, rec, log_beta=lb, epsilon_M_cm=eps)
    W = whitening(error_budget(bench, model, rec, state_fit).total)
    res = fit_many(reading.f, theta, readings.absorbance, jac=reading.jac, whiten=W, scale_cov=False,
                   lower=lo, upper=hi)
    best = 0
    theta = res.theta[0]
    fitted = reading.f(theta[None, :])[0]
    resid = readings.absorbance - fitted
    dof = rec.n_tubes - params.size
    c2 = float(res.chi2[best])
    promised = cramer_rao(reading.jac(params.guess[None, :])[0], cov).se
    return Fit(study.title, rec, readings.absorbance, params.names, theta, res.se[best], promised, c2, dof,
               float(chi2_dist.sf(c2, dof)) if dof > 0 else float("nan"), fitted, resid, W @ resid,
               bool(res.converged[best]), study.target)

"""After the measurement: fit the readings with the plan's model and compare with the plan's promise.

The readings are fitted by generalised least squares with the same error budget the assessment used
(photometric, delivery and stock errors, correlated across tubes), from several starts over the guess's
range so a poor guess does not trap the fit; the covariance of the estimates is (JᵀΣ⁻¹J)⁻¹ at the
solution. χ²/dof tells whether the scatter matches the error model (a χ² test, dof = tubes − parameters).
"""

from __future__ import annotations

import csv
import io
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from scipy.stats import chi2 as chi2_dist

from ..inference.lm import fit_many
from ..inference.precision import ReadingModel, cramer_rao, free_parameters, whitening
from ..inputs.plan import Plan
from ..inputs.recipe import Recipe, RecipeError, parse_recipe_csv, read_text_file
from ..model.compiled import build_model, tube_ions_M
from ..uncertainty.budget import error_budget, plan_devices
from .assess import expected_state

ABSORBANCE_COLUMNS = ("absorbance", "A", "measured_A")
N_STARTS = 7  # starts spread over ±3 sd of the target's guess


@dataclass(frozen=True)
class Readings:
    """A recipe with one measured absorbance per tube."""

    recipe: Recipe
    absorbance: np.ndarray


def parse_readings_csv(text: str, plan: Plan, source: str = "<readings>") -> Readings:
    """Readings CSV: the recipe columns (tube, stock volumes in mL) plus an ``absorbance`` column."""
    rows = list(csv.reader(io.StringIO(text)))
    rows = [r for r in rows if r and any(c.strip() for c in r) and not r[0].lstrip().startswith("#")]
    if not rows:
        raise RecipeError(source, "empty: expected a header 'tube,<stock>,...,absorbance'")
    header = [h.strip() for h in rows[0]]
    col = next((h for h in header if h in ABSORBANCE_COLUMNS), None)
    if col is None:
        raise RecipeError(f"{source} header", f"no absorbance column: add one named {' or '.join(ABSORBANCE_COLUMNS)}")
    j = header.index(col)
    a = []
    for ln, r in enumerate(rows[1:], start=2):
        if len(r) != len(header):
            raise RecipeError(f"{source} line {ln}", f"expected {len(header)} fields, got {len(r)}")
        try:
            a.append(float(r[j]))
        except ValueError:
            raise RecipeError(f"{source} line {ln}, {col}", f"'{r[j]}' is not an absorbance; leave no blanks") from None
    recipe_text = "\n".join(",".join(c for k, c in enumerate(r) if k != j) for r in rows)
    rec = parse_recipe_csv(recipe_text, plan, source)
    return Readings(rec, np.array(a))


def read_readings_csv(path: str | Path, plan: Plan) -> Readings:
    """Read a readings CSV (see :func:`parse_readings_csv`)."""
    return parse_readings_csv(read_text_file(path, "readings"), plan, str(path))


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
    model = build_model(plan)
    params = free_parameters(plan, model)
    rec = readings.recipe
    if params.size == 0:
        raise RecipeError("plan", "nothing to fit: give the target log_beta_sd > 0 (or ε an rsd)")
    if rec.n_tubes < params.size:
        raise RecipeError("readings", f"{rec.n_tubes} tubes cannot determine {params.size} parameters: add tubes")
    state = expected_state(plan, rec, model)
    devices = plan_devices(plan)
    cov = error_budget(plan, model, rec, state, devices).total
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
    from ..inference.precision import unpack

    lb, eps, _ = unpack(model, params, theta)
    state_fit = expected_state(plan, rec, model, log_beta=lb, epsilon_M_cm=eps)
    W = whitening(error_budget(plan, model, rec, state_fit, devices).total)
    res = fit_many(reading.f, theta, readings.absorbance, jac=reading.jac, whiten=W, scale_cov=False,
                   lower=lo, upper=hi)
    best = 0
    theta = res.theta[0]
    fitted = reading.f(theta[None, :])[0]
    resid = readings.absorbance - fitted
    dof = rec.n_tubes - params.size
    c2 = float(res.chi2[best])
    promised = cramer_rao(reading.jac(params.guess[None, :])[0], cov).se
    return Fit(plan.title, rec, readings.absorbance, params.names, theta, res.se[best], promised, c2, dof,
               float(chi2_dist.sf(c2, dof)) if dof > 0 else float("nan"), fitted, resid, W @ resid,
               bool(res.converged[best]), plan.target)

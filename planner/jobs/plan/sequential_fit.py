"""What the readings so far taught, for planning the next tubes: a fit that always has an answer.

Between batches the question is not "are the constants determined?" but "where are they most likely, and
how uncertain?". So the fit carries the plan's own prior (each fitted parameter's guess ± its sd, as a
Gaussian, the Bayesian sequential design of Chaloner & Verdinelli 1995, Stat. Sci. 10:273), and every
reading counts:

- readings inside or below the linear range are used as measured, with the full error budget (below the
  range Beer–Lambert still holds; only the relative noise is large, and the error model carries it);
- readings above the linear range follow no Beer–Lambert line, but say "at least the upper limit": each
  is a censored reading, P(A > hi) = Φ((f − hi)/σ), entered as the least-squares residual
  √(−2 ln Φ(z)) (the censored-normal likelihood of Tobin 1958, Econometrica 26:24), σ the reading's own
  sd. A first batch that ran over the range says the complex is stronger, or absorbs more, than guessed.

The result is the posterior mode and covariance (the prior rows are extra observations of a least-squares
problem, so :func:`planner.inference.lm.fit_many` returns both).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ...inference.lm import fit_many
from ...inference.precision import ReadingModel, whitening
from ...inference.study import Study
from ...inputs.readings import Readings
from ...model.compiled import tube_ions_M
from ...uncertainty.budget import error_budget
from ..compile import expected_state
from ..measure.core import N_STARTS


@dataclass(frozen=True)
class Posterior:
    """The readings so far with the plan's prior.

    Attributes
    ----------
    names, estimate, se : fitted parameters, their posterior mode and sd.
    censored : (n,) readings above the linear range, used as "at least the upper limit".
    converged : whether the fit met a convergence test.
    """

    names: tuple[str, ...]
    estimate: np.ndarray
    se: np.ndarray
    censored: np.ndarray
    converged: bool


def _log_phi(z: np.ndarray) -> np.ndarray:
    from scipy.special import log_ndtr

    return log_ndtr(z)


def _censored_rows(reading: ReadingModel, hi: float, sd: np.ndarray):
    """Residuals √(−2 ln Φ(z)), z = (f − hi)/σ, and their Jacobian, for the censored tubes."""

    def f(theta):
        z = (reading.f(theta) - hi) / sd
        return np.sqrt(np.maximum(-2.0 * _log_phi(z), 0.0))

    def jac(theta):
        z = (reading.f(theta) - hi) / sd
        r = np.sqrt(np.maximum(-2.0 * _log_phi(z), 1e-300))
        # d r / d z = −φ(z) / (Φ(z) r) = −exp(ln φ − ln Φ) / r
        log_pdf = -0.5 * z * z - 0.5 * np.log(2 * np.pi)
        drdz = -np.exp(log_pdf - _log_phi(z)) / r
        return (drdz / sd)[..., None] * reading.jac(theta)

    return f, jac


def posterior_fit(study: Study, readings: Readings) -> Posterior:
    """The posterior mode and covariance of the fitted parameters (see the module docstring)."""
    model, params = study.model, study.params
    rec, y = readings.recipe, readings.absorbance
    hi = model.linear_range[1]
    cens = y > hi
    inside = rec.take(~cens)
    ions = tube_ions_M(model, rec.volumes_mL, rec.total_volume_mL)
    state = expected_state(model, rec)
    r_in = ReadingModel(model, params, state.totals_M[~cens], ions[~cens])
    r_out = ReadingModel(model, params, state.totals_M[cens], ions[cens])
    n_in, n_out, P = int((~cens).sum()), int(cens.sum()), params.size
    sd_out = state.absorbance_sd[cens]
    f_c, j_c = _censored_rows(r_out, hi, np.maximum(sd_out, 1e-6))
    prior_sd = params.prior_sd

    def f(theta):
        parts = [r_in.f(theta)] if n_in else []
        if n_out:
            parts.append(f_c(theta))
        return np.concatenate([*parts, theta / prior_sd], axis=1)

    def jac(theta):
        T = theta.shape[0]
        parts = [r_in.jac(theta)] if n_in else []
        if n_out:
            parts.append(j_c(theta))
        return np.concatenate([*parts, np.broadcast_to(np.diag(1.0 / prior_sd), (T, P, P))], axis=1)

    target = np.concatenate([y[~cens], np.zeros(n_out), params.guess / prior_sd])
    starts = np.tile(params.guess, (N_STARTS, 1))
    if params.target >= 0:
        starts[:, params.target] += np.linspace(-3, 3, N_STARTS) * prior_sd[params.target]
    lo, hi_b = r_in.bounds() if n_in else r_out.bounds()
    starts = np.clip(starts, lo, hi_b)
    theta, at = starts, params.guess
    for _ in range(2):  # weighted at the guess, then re-weighted at the mode (the noise follows the readings)
        Wx = np.eye(n_in + n_out + P)
        if n_in:
            Wx[:n_in, :n_in] = _whitening_at(study, inside, at)
        res = fit_many(f, theta, target, jac=jac, whiten=Wx, scale_cov=False, lower=lo, upper=hi_b)
        chi = np.where(res.converged, res.chi2, np.inf)
        b = int(np.argmin(chi)) if np.isfinite(chi).any() else int(np.nanargmin(res.chi2))
        theta = np.asarray(res.theta)[b : b + 1]
        at = theta[0]
    return Posterior(params.names, theta[0], np.asarray(res.se)[b], cens, bool(res.converged[b]))


def _whitening_at(study: Study, recipe, theta: np.ndarray) -> np.ndarray:
    from ...inference.precision import unpack

    lb, eps, _ = unpack(study.model, study.params, theta)
    state = expected_state(study.model, recipe, log_beta=lb, epsilon_M_cm=eps)
    return whitening(error_budget(study.bench, study.model, recipe, state).total)

"""After the measurement: fit whole spectra — the constants and every unknown spectrum at once.

A global fit of every reading by generalised least squares with the plan's error budget (each tube's
delivery and stock errors correlated across its wavelengths), the spectra eliminated by variable
projection (Golub & Pereyra 1973, SIAM J. Numer. Anal. 10:413) so the search runs over the constants
alone (:mod:`planner.inference.varpro`), from several starts over the guess's range, re-weighted once at
the fit. Readings above the linear range's top are left out (they follow no Beer–Lambert line), as in the
single-wavelength fit (:mod:`planner.jobs.measure.fit`), whose "not determined" rules, two-sided χ² and
profile-likelihood interval this fit shares.

Beside the constants: the fitted spectra with their standard errors (the linear parameters' covariance
given the constants, plus the constants' own uncertainty carried through), the standardised residuals
of each tube, and the factor analysis of the data matrix — its singular values and the number of
significant factors (Malinowski 1977, Anal. Chem. 49:612) against the model's number of absorbing
species: a check of the model no single wavelength can give.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from ...inference.factors import FactorAnalysis, factor_analysis
from ...inference.intervals import profile_crossings_of
from ...inference.lm import fit_many
from ...inference.precision import unpack
from ...inference.study import Study
from ...inference.tails import chi2_cdf, chi2_sf
from ...inference.varpro import SeparableProblem, linear_parameters, solve
from ...inputs.recipe import RecipeError, totals_M
from ...inputs.spectra_readings import SpectraReadings
from ...model.compiled import tube_ions_M
from ...model.spectra import linearise
from ..measure.core import N_STARTS
from ..measure.fit import FittedConstants, chi2_verdict
from ..measure.fit import not_determined as _not_determined
from .assess import expected_factors
from .precision import bounds, profile_chi2, spectra_cramer_rao
from .reading import Expected, SpectraModel, expected, spectral_parameters

TUBE_OUTLIER_P = 0.001  # a tube whose readings' χ² is this improbable is marked [common practice]


@dataclass(frozen=True)
class SpectraFit(FittedConstants):
    """The fitted constants and spectra, and how they compare with the plan (:class:`FittedConstants`
    and below).

    Attributes
    ----------
    names, estimate, se, promised_se : fitted constants, their values, SEs (error model absolute) and
        the whole-spectrum Cramér–Rao SE the plan promised for the tubes used, at the guess.
    chi2, dof, p_value, p_low : goodness of fit (upper and lower tails of χ²(dof)).
    tubes : the tubes fitted; wavelength_nm (W,) the wavelengths fitted.
    spectra_names, epsilon, epsilon_se : the fitted spectra (s, W) and their SEs, L mol⁻¹ cm⁻¹.
    tube_rms, tube_p : per tube, the RMS of its standardised residuals and the upper-tail p of their χ².
    used : (n, W) the readings that entered the fit.
    factors : the factor analysis of the data matrix; absorbing_species / above_noise the model's count
        and how many stand above the noise.
    """

    p_low: float
    converged: bool
    determined: bool
    reason: str
    tubes: tuple[str, ...]
    wavelength_nm: np.ndarray
    spectra_names: tuple[str, ...]
    epsilon: np.ndarray
    epsilon_se: np.ndarray
    tube_rms: np.ndarray
    tube_p: np.ndarray
    used: np.ndarray
    factors: FactorAnalysis | None
    absorbing_species: int
    above_noise: int
    excluded: tuple[tuple[str, str], ...] = ()
    profile_ci95: tuple[float | None, float | None] | None = None
    readings_left_out: int = 0
    wavelengths_left_out: int = 0
    extra: dict = field(default_factory=dict)

    @property
    def chi2_verdict(self) -> str:
        return chi2_verdict(self)

    @property
    def factor_verdict(self) -> str:
        fa = self.factors
        if fa is None:
            return "too few tubes or wavelengths for a factor analysis"
        k, want = fa.n_indicator, self.above_noise
        if k == want:
            return (
                f"the data matrix holds {k} significant factors, as the model's absorbing species above the "
                f"noise"
            )
        if k > want:
            return (
                f"the data matrix holds {k} significant factors, more than the model's {want} absorbing "
                f"species above the noise: a species the model leaves out (another complex), drift or a "
                f"baseline shift"
            )
        return (
            f"the data matrix holds {k} significant factors, fewer than the model's {want}: spectra too "
            f"alike "
            f"to tell apart, or a species that did not form"
        )

    @property
    def outlier_tubes(self) -> np.ndarray:
        return self.tube_p < TUBE_OUTLIER_P


def _select(study: Study, readings: SpectraReadings, exclude) -> tuple[np.ndarray, tuple, np.ndarray]:
    """Tubes kept, (tube, reason) for the others, and the wavelengths inside the plan's window."""
    keep = np.ones(len(readings.tubes), dtype=bool)
    why = []
    for label in exclude:
        if label not in readings.tubes:
            raise RecipeError(f"exclude {label}", f"no tube '{label}' in the readings")
        keep[readings.tubes.index(label)] = False
        why.append((label, "excluded by request"))
    w = study.spectra.wavelength_nm
    inside = (readings.wavelength_nm >= w[0] - 1e-9) & (readings.wavelength_nm <= w[-1] + 1e-9)
    if inside.sum() < 3:
        raise RecipeError(
            "readings",
            f"fewer than 3 wavelengths inside the plan's window {w[0]:g}–{w[-1]:g} nm: check "
            "optics.window_nm",
        )
    return keep, tuple(why), inside


def fit_spectra(
    study: Study, readings: SpectraReadings, *, exclude: tuple[str, ...] = (), keep_out_of_range: bool = False
) -> SpectraFit:
    """Fit measured spectra with the plan's model and error budget (see the module docstring)."""
    if readings.recipe is None:
        raise RecipeError("readings", "the spectra need the tubes' recipe: give the recipe CSV beside them")
    model = study.model
    params = spectral_parameters(study)
    if params.size == 0:
        raise RecipeError("plan", "nothing to fit: give the target log_beta_sd > 0")
    keep, excluded, inside = _select(study, readings, exclude)
    rec = readings.recipe.take(keep)
    y = readings.absorbance[keep][:, inside]
    sm = SpectraModel(
        model,
        study.spectra.at(readings.wavelength_nm[inside]),
        params,
        totals_M(rec, model.stock_conc_M),
        tube_ions_M(model, rec.volumes_mL, rec.total_volume_mL),
        bool(np.any(study.params.kind == 2)),
    )
    Y = linearise(y, sm.spectra.stray_light)
    used = np.isfinite(Y) & (keep_out_of_range | (y <= model.linear_range[1]))
    Y = np.where(used, Y, 0.0)
    ex0 = expected(study, rec, sm, used=used)
    theta, res, prob = _search(sm, Y, ex0, params)
    # the photometric part of the error model depends on the readings: re-weight at the fit, refit once
    lb, _, _ = unpack(model, params, theta)
    fitted = _with_spectra(sm, prob.linear_parameters(theta[None])[0])
    ex1 = expected(study, rec, fitted, lb, used=used)
    lo, hi = bounds(params)
    prob = SeparableProblem(sm.basis, Y[None], ex1.weights)
    res = fit_many(
        prob.f, theta[None], prob.y(params.size), jac=prob.jac, scale_cov=False, lower=lo, upper=hi
    )
    theta, se, c2 = res.theta[0], res.se[0], float(res.chi2[0])
    converged = bool(res.converged[0])
    reason = _not_determined(params, theta, se, converged, lo, hi)
    dof = int(prob.dof(theta[None])[0])
    promised = spectra_cramer_rao(sm, ex0.weights, params.guess).se
    ci = _profile_interval(sm, Y, ex1, theta, se, c2) if reason is None and params.target >= 0 else None
    E, E_se = _spectra_with_se(prob, theta, res.cov[0] if reason is None else None)
    z = prob.residuals(theta[None]).residual[0].T  # (n, W) standardised residuals
    n_used = used.sum(axis=1)
    tube_chi2 = np.sum(z**2, axis=1)
    tube_p = _tube_p_values(prob, theta, tube_chi2)
    full = used.all(axis=0)
    fa = factor_analysis(y[:, full]) if full.sum() >= 3 and rec.n_tubes >= 3 else None
    # the plan's spectra at the fitted constants: a wrong model's fitted spectra absorb what it leaves out
    count, above = expected_factors(sm, expected(study, rec, sm, lb, used=used))
    return SpectraFit(
        study.title,
        study.target,
        params.names,
        theta,
        se if reason is None else np.full(params.size, np.nan),
        promised,
        c2,
        dof,
        float(chi2_sf(c2, dof)) if dof > 0 else float("nan"),
        float(chi2_cdf(c2, dof)) if dof > 0 else float("nan"),
        converged,
        reason is None,
        reason or "",
        rec.tubes,
        sm.spectra.wavelength_nm,
        sm.basis_names,
        E,
        E_se,
        np.sqrt(tube_chi2 / np.maximum(n_used, 1)),
        tube_p,
        used,
        fa,
        count,
        above,
        excluded,
        ci,
        int((~used).sum()),
        int((~inside).sum()),
    )


def _tube_p_values(prob: SeparableProblem, theta: np.ndarray, tube_chi2: np.ndarray) -> np.ndarray:
    """Upper-tail p of each tube's χ², on its own degrees of freedom: its readings less their leverage
    (the diagonal of the per-wavelength projection on the fitted spectra, Σ_λ (1 − h_iλ)) [derived]."""
    Q = prob.evaluate(theta[None])["proj"].Q[0]  # (W, s, n)
    lever = np.einsum("wsn,wsn->nw", Q, Q)
    dof_i = np.sum(prob.weights.used * (1.0 - lever), axis=1)
    return np.array([float(chi2_sf(c, max(round(k), 1))) for c, k in zip(tube_chi2, dof_i, strict=True)])


def _search(sm: SpectraModel, Y: np.ndarray, ex: Expected, params):
    """The best of several starts over ±3 sd of the target's guess."""
    starts = np.repeat(params.guess[None, :], N_STARTS, axis=0)
    if params.target >= 0:
        starts[:, params.target] += np.linspace(-3, 3, N_STARTS) * params.prior_sd[params.target]
    lo, hi = bounds(params)
    starts = np.clip(starts, lo, hi)
    prob = SeparableProblem(sm.basis, np.broadcast_to(Y, (N_STARTS,) + Y.shape), ex.weights)
    res = fit_many(prob.f, starts, prob.y(params.size), jac=prob.jac, scale_cov=False, lower=lo, upper=hi)
    chi2 = np.where(res.converged, res.chi2, np.inf)
    best = int(np.argmin(chi2)) if np.isfinite(chi2).any() else int(np.argmin(res.chi2))
    single = SeparableProblem(sm.basis, Y[None], ex.weights)
    return res.theta[best], res, single


def _with_spectra(sm: SpectraModel, E: np.ndarray) -> SpectraModel:
    """The model with its fitted spectra in place of the guesses (for the error model at the fit)."""
    eps = sm.spectra.epsilon_M_cm.copy()
    eps[:, sm.free] = E[: sm.free.size].T
    return replace(sm, spectra=replace(sm.spectra, epsilon_M_cm=eps))


def _spectra_with_se(prob: SeparableProblem, theta: np.ndarray, cov_theta: np.ndarray | None):
    """Fitted spectra (s, W) and their SEs: Cov(E | θ) per wavelength, R⁻¹R⁻ᵀ + X M⁻¹ Xᵀ with
    X = R⁻¹ Q S̃ (the latent errors' share), plus ∂E/∂θ Cov(θ) ∂E/∂θᵀ."""
    th = theta[None]
    c = prob.evaluate(th)
    proj, w = c["proj"], prob.weights
    E = prob.linear_parameters(th)[0]
    Q, R = proj.Q[0], proj.R[0]  # (W, s, n), (W, s, s)
    Rinv = np.linalg.pinv(R)
    var = np.einsum("wij,wij->wi", Rinv, Rinv)  # diag(R⁻¹ R⁻ᵀ)
    if w.rank:
        QS = np.einsum("wsn,nwr->wsr", Q, w.factors())
        X = Rinv @ QS  # (W, s, r)
        L = proj.M_chol[0]
        Y = np.linalg.solve(L, np.swapaxes(X, 1, 2).reshape(-1, X.shape[0] * X.shape[1]))
        var = var + np.sum(Y**2, axis=0).reshape(X.shape[0], X.shape[1])
    if cov_theta is not None and np.all(np.isfinite(cov_theta)):
        dC, dK = c["dC"], c["dK"]
        dE = []
        for k in range(dK.shape[-1]):
            v = (np.swapaxes(dK[..., k], 1, 2) + np.einsum("tsw,tns->twn", E[None], dC[..., k])) * prob._wT
            sol = solve(proj, w, v)
            dE.append(-linear_parameters(proj, sol.coef)[0])
        D = np.stack(dE, axis=-1)  # (s, W, P)
        var = var + np.einsum("swp,pq,swq->ws", D, cov_theta, D)
    return E, np.sqrt(np.maximum(var.T, 0.0))


def _profile_interval(sm: SpectraModel, Y: np.ndarray, ex: Expected, theta, se, chi2_min: float):
    """Profile-likelihood 95 % interval of the target (Venzon & Moolgavkar 1988, Appl. Stat. 37:87), its
    ends found by root-finding (:func:`planner.inference.intervals.profile_crossings_of`)."""
    t = sm.params.target
    lo, hi = bounds(sm.params)
    return profile_crossings_of(
        lambda values: profile_chi2(sm, ex.weights, Y, theta, np.atleast_1d(values)),
        float(theta[t]),
        float(se[t]),
        float(chi2_min),
        float(lo[t]),
        float(hi[t]),
    )

"""The model check with whole spectra: would the global fit reveal a complex the plan leaves out?

For each alternative model (the plan's ``[[design.alternative]]``, or a 1:2 and a 2:1 complex beside a
single 1:1 complex; its spectrum from :attr:`planner.inference.study.Study.alternative_spectra`):

- the exact noncentrality λ: the least generalised-least-squares χ² of the main model — the free
  constants and every fitted spectrum, eliminated by variable projection — on the alternative's
  noise-free spectra, weighted as the spectra fit weighs real data (the tube-level covariance: each tube's
  delivery and stock errors correlated across its wavelengths). Under the alternative the fit's χ² follows
  a noncentral χ² with the fit's degrees of freedom (readings used − fitted spectra × wavelengths − free
  constants) and noncentrality λ (Atkinson & Fedorov 1975, Biometrika 62:57), so the χ² test at 5 %
  rejects the main model with probability P(χ²_dof(λ) > χ²_dof,0.95);
- the simulated power: whole experiments drawn from the alternative with every error source, each
  refitted with the main model by variable projection (batched), the share whose χ² test rejects it;
- the power of the factor analysis: the share of those simulated data matrices in which Malinowski's
  indicator function finds more factors than the main model's absorbing species that stand above the
  noise (Malinowski 1977, Anal. Chem. 49:612) — what the spectra fit reports as "a species the model
  leaves out" — and the share in which either test reveals the alternative;
- for comparison, the best single wavelength of the window: the exact noncentrality of the fit of that
  wavelength's readings alone (the constants and one ε per fitted spectrum, as the single-wavelength
  fit), its dof (tubes − parameters) and power; the wavelength is the best of a few picked by the
  linearised noncentrality at every wavelength at once.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from ...inference.discrimination import LEVEL, POWER_GOAL, Detection, critical_chi2, power_from_noncentrality
from ...inference.factors import indicator_factors
from ...inference.lm import fit_many
from ...inference.simulate import simulate
from ...inference.study import Study
from ...inference.varpro import SeparableProblem, Weights
from ...inputs.recipe import Recipe
from ...model.compiled import predict
from ...model.spectra import Spectra, linearise, spectra_readings
from ..plan.checks import Check
from .precision import MC_CHUNK, bounds
from .reading import Expected, SpectraModel
from .single import wavelength_rows

SINGLE_TRIED = 3  # wavelengths whose exact noncentrality is computed (the best by the linearised one)


def _f(x) -> float | None:
    x = float(x)
    return x if np.isfinite(x) else None


@dataclass(frozen=True)
class SpectraDetection(Detection):
    """:class:`planner.inference.discrimination.Detection` of a recipe read as whole spectra.

    Attributes
    ----------
    power_factors : share of simulated experiments whose data matrix holds more significant factors
        (indicator function) than the main model's absorbing species above the noise.
    power_either : share in which the χ² test or the factor analysis reveals the alternative.
    factors_main : the main model's absorbing species above the noise (what the factor count is held to).
    best_single_wavelength_nm : the single wavelength whose readings alone would reveal it best.
    power_noise_free_single, noncentrality_single, dof_single : the χ² test there (exact noncentrality).
    """

    power_factors: float = float("nan")
    power_either: float = float("nan")
    factors_main: int = 0
    best_single_wavelength_nm: float = float("nan")
    power_noise_free_single: float = float("nan")
    noncentrality_single: float = float("nan")
    dof_single: int = 0

    @property
    def revealed(self) -> float:
        """The power the check goes by: either test, simulated; without a simulation, the χ² test's."""
        return self.power_either if np.isfinite(self.power_either) else self.power_noise_free


def chi2_power(lam: float, dof: int, level: float = LEVEL) -> float:
    """:func:`planner.inference.discrimination.power_from_noncentrality`, with 1 at once where χ²_dof(λ)
    lies more than 12 sd above the critical value (its Poisson series would need ~λ/2 terms, and a
    whole spectrum's λ can run to thousands) [derived: mean dof + λ, variance 2(dof + 2λ)]."""
    if not np.isfinite(lam):
        return float("nan")
    if dof < 1:
        return 0.0
    if dof + lam - critical_chi2(dof, level) > 12.0 * np.sqrt(2.0 * (dof + 2.0 * lam)):
        return 1.0
    return float(power_from_noncentrality(lam, dof, level))


def alternative_spectra_of(study: Study, k: int) -> Spectra:
    """The plan's spectra with the spectrum of alternative ``k``'s added species as one more absorber
    (its column last, as :func:`planner.model.variants.with_species` puts the species)."""
    sp = study.spectra
    assert sp is not None, "the plan has no spectra"
    eps = study.alternative_spectra[k]
    return replace(
        sp,
        epsilon_M_cm=np.column_stack([sp.epsilon_M_cm, eps]),
        epsilon_rsd=np.column_stack([sp.epsilon_rsd, np.zeros_like(eps)]),
        free=np.append(sp.free, False),
    )


def alternative_readings(study: Study, sm: SpectraModel) -> np.ndarray:
    """(A, n, W) noise-free Beer–Lambert readings of ``sm``'s tubes if each alternative were true."""
    out = []
    for k, (_, alt) in enumerate(study.alternatives):
        conc = predict(alt, sm.totals_M, sm.ions_M, warn=False).absorber_conc_M()
        out.append(study.model.path_cm * conc @ alternative_spectra_of(study, k).epsilon_M_cm.T)
    return np.stack(out)


def _starts(params, count: int) -> np.ndarray:
    """Three starts per data set: the guess and the target's constant ±max(sd, 0.5) (as one wavelength)."""
    starts = np.repeat(params.guess[None, :], 3, axis=0)
    if params.target >= 0:
        starts[:, params.target] += np.array([-1.0, 0.0, 1.0]) * max(params.prior_sd[params.target], 0.5)
    lo, hi = bounds(params)
    return np.tile(np.clip(starts, lo, hi), (count, 1))


def least_chi2(sm: SpectraModel, weights: Weights, Y: np.ndarray) -> np.ndarray:
    """(A,) the main model's least χ² on each noise-free data set Y (A, n, W): the exact noncentrality
    (variable projection from three starts each, all in one batch)."""
    params = sm.params
    A = Y.shape[0]
    prob = SeparableProblem(sm.basis, np.repeat(Y, 3, axis=0) * weights.used, weights)
    lo, hi = bounds(params)
    res = fit_many(
        prob.f, _starts(params, A), prob.y(params.size), jac=prob.jac, scale_cov=False, lower=lo, upper=hi
    )
    chi2 = np.where(np.isfinite(res.chi2), res.chi2, np.inf).reshape(A, 3).min(axis=1)
    return np.where(np.isfinite(chi2), chi2, np.nan)


def fit_dof(sm: SpectraModel, weights: Weights) -> int:
    """Degrees of freedom of the spectra fit: readings used − spectra × wavelengths − free constants."""
    prob = SeparableProblem(sm.basis, np.zeros((1,) + weights.w.shape), weights)
    return int(prob.dof(sm.params.guess[None])[0])


def simulated_powers(
    study: Study,
    recipe: Recipe,
    sm: SpectraModel,
    weights: Weights,
    rng: np.random.Generator,
    trials: int,
    dof: int,
    above: int,
    level: float = LEVEL,
) -> np.ndarray:
    """(A, 3) per alternative the share of ``trials`` simulated experiments (every error source, the
    alternative true) whose main-model fit's χ² test rejects the main model, whose factor analysis finds
    more than ``above`` factors, and either. Fits in batches of :data:`MC_CHUNK`."""
    crit = critical_chi2(dof, level)
    full = weights.used.all(axis=0)
    with_factors = recipe.n_tubes >= 3 and int(full.sum()) >= 3
    lo, hi = bounds(sm.params)
    out = np.full((len(study.alternatives), 3), np.nan)
    for k, (_, alt) in enumerate(study.alternatives):
        spectra = alternative_spectra_of(study, k)
        chi2_hit, fa_hit = [], []
        done = 0
        while done < trials:
            m = min(MC_CHUNK, trials - done)
            exp = simulate(study.bench, alt, recipe, rng, m, photometric=False)
            rd = spectra_readings(spectra, exp.state.absorber_conc_M(), study.model.path_cm)
            y = rd.absorbance + rd.absorbance_sd * rng.standard_normal(rd.absorbance.shape)
            Y = np.nan_to_num(linearise(y, spectra.stray_light), nan=0.0) * weights.used
            prob = SeparableProblem(sm.basis, Y, weights)
            theta0 = np.broadcast_to(sm.params.guess, (m, sm.params.size)).copy()
            res = fit_many(
                prob.f, theta0, prob.y(sm.params.size), jac=prob.jac, scale_cov=False, lower=lo, upper=hi
            )
            ok = res.converged & np.isfinite(res.chi2)
            # a fit that fails on the alternative's data is itself a sign the model is wrong (as one
            # wavelength): count it as caught
            chi2_hit.append(np.where(ok, res.chi2 > crit, True))
            fa_hit.append(indicator_factors(y[:, :, full]) > above if with_factors else np.zeros(m, bool))
            done += m
        c, f = np.concatenate(chi2_hit), np.concatenate(fa_hit)
        out[k] = [c.mean(), f.mean() if with_factors else np.nan, (c | f).mean()]
    return out


def best_single_wavelength(
    sm: SpectraModel, ex: Expected, Y: np.ndarray, eligible: np.ndarray, level: float = LEVEL
) -> list[tuple[float, float, float, int]]:
    """Per alternative (wavelength nm, exact λ, power, dof) of the eligible wavelength whose readings
    alone would reveal it best (NaN and 0 when no wavelength is eligible or no test is possible).

    The linearised noncentrality at every wavelength at once, λ_w = rᵀΣ⁻¹r − gᵀ(JᵀΣ⁻¹J)⁻¹g with
    g = JᵀΣ⁻¹r (r the misfit at the guess, J and Σ of that wavelength alone), picks
    :data:`SINGLE_TRIED` wavelengths; each is then fitted exactly (variable projection at one wavelength)."""
    params = sm.params
    theta = params.guess
    J, cov = wavelength_rows(sm, ex, theta)  # (W, n, q), (W, n, n)
    n, q = J.shape[1], J.shape[2]
    dof = n - q
    main = sm.linear_readings(theta[None])[0]  # (n, W)
    r = np.swapaxes(Y - main[None], 1, 2)  # (A, W, n)
    A = Y.shape[0]
    if dof < 1 or not eligible.any():
        return [(float("nan"), float("nan"), 0.0, max(dof, 0))] * A
    Si_r = np.linalg.solve(cov[None], r[..., None])[..., 0]  # (A, W, n)
    Fw = np.swapaxes(J, 1, 2) @ np.linalg.solve(cov, J)  # (W, q, q)
    g = np.einsum("wnq,awn->awq", J, Si_r)
    lam_lin = np.einsum("awn,awn->aw", r, Si_r) - np.einsum("awq,awq->aw", g, _solve_each(Fw, g))
    lam_lin = np.where(eligible[None], lam_lin, -np.inf)
    out = []
    wl = sm.spectra.wavelength_nm
    for a in range(A):
        tried = np.argsort(-lam_lin[a])[:SINGLE_TRIED]
        best = (float("nan"), float("nan"), 0.0, dof)
        for w in tried[np.isfinite(lam_lin[a, tried])]:
            lam = float(_one_wavelength_chi2(sm, ex, Y[a : a + 1, :, [int(w)]], int(w))[0])
            power = chi2_power(lam, dof, level)
            if not np.isfinite(best[1]) or (np.isfinite(power) and power > best[2]):
                best = (float(wl[w]), lam, power, dof)
        out.append(best)
    return out


def _solve_each(F: np.ndarray, g: np.ndarray) -> np.ndarray:
    """F_w⁻¹ g_aw for (W, q, q) F and (A, W, q) g (a pseudo-inverse where F_w is singular)."""
    return np.einsum("wqr,awr->awq", np.linalg.pinv(F, hermitian=True), g)


def _one_wavelength_chi2(sm: SpectraModel, ex: Expected, Y: np.ndarray, w: int) -> np.ndarray:
    """The main model's least χ² on data Y (A, n, 1) read at wavelength index ``w`` alone."""
    one = replace(sm, spectra=sm.spectra.at(sm.spectra.wavelength_nm[[w]]))
    b = ex.budget
    weights = Weights.of(ex.readings.linear_sd[:, [w]], b.loadings[:, [w]], b.mixing, ex.used[:, [w]])
    return least_chi2(one, weights, Y)


def spectra_detection(
    study: Study,
    recipe: Recipe,
    sm: SpectraModel,
    ex: Expected,
    rng: np.random.Generator,
    trials: int,
    *,
    above: int,
    eligible: np.ndarray | None = None,
    level: float = LEVEL,
) -> tuple[SpectraDetection, ...]:
    """The model check of ``recipe`` read as whole spectra against each of the study's alternatives (see
    the module docstring); ``above`` is the main model's absorbing species above the noise, ``eligible``
    (W,) the wavelengths a single-wavelength experiment could use (None: no comparison)."""
    A = len(study.alternatives)
    if A == 0 or sm.params.size == 0:
        return ()
    weights = ex.weights
    dof = fit_dof(sm, weights)
    names = [name for name, _ in study.alternatives]
    if dof < 1:
        return tuple(SpectraDetection(nm, 0.0, 0.0, float("nan"), dof, 0, factors_main=above) for nm in names)
    Y = alternative_readings(study, sm)
    lam = least_chi2(sm, weights, Y)
    sims = np.full((A, 3), np.nan)
    if trials > 0:
        sims = simulated_powers(study, recipe, sm, weights, rng, trials, dof, above, level)
    single = (
        best_single_wavelength(sm, ex, Y, eligible, level)
        if eligible is not None
        else [(float("nan"), float("nan"), float("nan"), 0)] * A
    )
    out = []
    for a, name in enumerate(names):
        p_nf = chi2_power(lam[a], dof, level)
        wl, lam1, p1, dof1 = single[a]
        out.append(
            SpectraDetection(
                name,
                float(sims[a, 0]),
                p_nf,
                float(lam[a]),
                dof,
                int(trials),
                power_factors=float(sims[a, 1]),
                power_either=float(sims[a, 2]),
                factors_main=above,
                best_single_wavelength_nm=wl,
                power_noise_free_single=p1,
                noncentrality_single=lam1,
                dof_single=dof1,
            )
        )
    return tuple(out)


def spectra_model_check(det: tuple[SpectraDetection, ...], fix: str) -> Check:
    """The "model-check" check with whole spectra: would the fit — its χ² test or its factor analysis —
    reveal each alternative in at least :data:`POWER_GOAL` of experiments? ``fix`` says what to do."""
    if not det:
        return Check("model-check", "pass", "no alternative model to check against")

    def detail(d: SpectraDetection) -> str:
        chi2 = d.power if np.isfinite(d.power) else d.power_noise_free
        out = f"χ² test {chi2:.0%}"
        if np.isfinite(d.power_factors):
            out += f", an extra factor {d.power_factors:.0%}"
        if np.isfinite(d.best_single_wavelength_nm):
            nm, p1 = d.best_single_wavelength_nm, d.power_noise_free_single
            out += f"; the best single wavelength ({nm:g} nm) {p1:.0%}"
        return out

    weak = [d for d in det if not d.revealed >= POWER_GOAL]
    if not weak:
        return Check(
            "model-check",
            "pass",
            "the whole-spectrum fit would reveal "
            + ", ".join(f"{d.alternative} in {d.revealed:.0%} of experiments ({detail(d)})" for d in det),
        )
    return Check(
        "model-check",
        "warn",
        "if the system also formed a complex the plan leaves out, the whole-spectrum fit would reveal it in "
        "only "
        + "; ".join(f"{d.revealed:.0%} of experiments ({d.alternative}: {detail(d)})" for d in weak)
        + f" (goal {POWER_GOAL:.0%}): {fix}",
    )

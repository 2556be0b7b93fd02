"""Precision of the fitted parameters: Cramér–Rao, Monte Carlo and the χ² profile of log K.

Free parameters: log β of every species with ``log_beta_sd > 0``, ε of every absorber with ``rsd > 0``,
and optionally a blank offset. The Fisher information uses the full absorbance covariance of the error
budget (systematic stock and calibration errors included), F = Jᵀ Σ⁻¹ J, and Cov(θ̂) ≥ F⁻¹
(Cramér 1946; Rao 1945). The Monte Carlo fits whole simulated experiments with the same generalised
least-squares weighting (all trials at once, :func:`planner.inference.lm.fit_many`). The profile follows
Raue et al. 2009 (Bioinformatics 25:1923): a profile that stays below the χ² threshold towards a limit
means the constant is only bounded on that side.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..inputs.recipe import Recipe
from ..model.compiled import Model, predict
from ..model.jacobians import absorbance_derivatives
from ..uncertainty.bench import Bench
from ..uncertainty.budget import ErrorBudget
from .lm import fit_many
from .simulate import simulate

CHI2_95_1DOF = 3.841458820694124  # source: χ²(1) 95 % quantile (scipy.stats.chi2.ppf(0.95, 1))
PROFILE_SPAN = 10.0  # log10 units each side of the guess taken as "K -> 0" and "K -> ∞"
MC_AGREEMENT = 0.20  # Monte-Carlo sd must be within 20 % of the Cramér–Rao SE to confirm it
LOG_BETA_RANGE = (-20.0, 45.0)  # beyond these no absorbance experiment tells constants apart


@dataclass(frozen=True)
class Parameters:
    """Which parameters are fitted.

    Attributes
    ----------
    names : display names, e.g. "log_beta[ML]", "epsilon[ML]", "blank".
    kind : (P,) 0 = log β, 1 = ε, 2 = blank offset.
    index : (P,) species index (log β) or absorber index (ε).
    guess : (P,) the plan's values (log10 units; L mol⁻¹ cm⁻¹; absorbance).
    prior_sd : (P,) how uncertain the guess is, same units.
    target : index of log β[target] among the parameters, or −1 when it is held fixed.
    """

    names: tuple[str, ...]
    kind: np.ndarray
    index: np.ndarray
    guess: np.ndarray
    prior_sd: np.ndarray
    target: int

    @property
    def size(self) -> int:
        return len(self.names)


def free_parameters(model: Model, target: str, *, blank_offset: bool = False) -> Parameters:
    """The parameters a fit of this plan's data would estimate.

    Parameters
    ----------
    target : the species whose log β must be resolved.
    blank_offset : fit an unknown blank offset as well.
    """
    names, kind, idx, guess, sd = [], [], [], [], []
    for j, s in enumerate(model.species):
        if model.log_beta_sd[j] > 0:
            names.append(f"log_beta[{s}]")
            kind.append(0)
            idx.append(j)
            guess.append(model.log_beta[j])
            sd.append(model.log_beta_sd[j])
    for j, a in enumerate(model.absorbers):
        if model.epsilon_rsd[j] > 0:
            names.append(f"epsilon[{a}]")
            kind.append(1)
            idx.append(j)
            guess.append(model.epsilon_M_cm[j])
            sd.append(model.epsilon_rsd[j] * model.epsilon_M_cm[j])
    if blank_offset:
        names.append("blank")
        kind.append(2)
        idx.append(0)
        guess.append(0.0)
        sd.append(0.01)  # a blank mismatch of about 0.01 A [common practice]
    t = f"log_beta[{target}]"
    return Parameters(
        tuple(names),
        np.array(kind, dtype=int),
        np.array(idx, dtype=int),
        np.array(guess, dtype=float),
        np.array(sd, dtype=float),
        names.index(t) if t in names else -1,
    )


def unpack(model: Model, params: Parameters, theta: np.ndarray):
    """(log_beta (..., S), epsilon (..., 2 + S), blank (...)) from parameter vectors (..., P)."""
    theta = np.asarray(theta, dtype=float)
    batch = theta.shape[:-1]
    lb = np.broadcast_to(model.log_beta, batch + model.log_beta.shape).copy()
    eps = np.broadcast_to(model.epsilon_M_cm, batch + model.epsilon_M_cm.shape).copy()
    blank = np.zeros(batch)
    for p in range(params.size):
        if params.kind[p] == 0:
            lb[..., params.index[p]] = theta[..., p]
        elif params.kind[p] == 1:
            eps[..., params.index[p]] = theta[..., p]
        else:
            blank = theta[..., p]
    return lb, eps, blank


def pack(model: Model, params: Parameters, log_beta=None, epsilon_M_cm=None) -> np.ndarray:
    """Parameter vector from full log β / ε arrays (the inverse of :func:`unpack`)."""
    lb = model.log_beta if log_beta is None else np.asarray(log_beta, dtype=float)
    eps = model.epsilon_M_cm if epsilon_M_cm is None else np.asarray(epsilon_M_cm, dtype=float)
    out = np.zeros(params.size)
    for p in range(params.size):
        out[p] = (
            lb[params.index[p]]
            if params.kind[p] == 0
            else (eps[params.index[p]] if params.kind[p] == 1 else 0.0)
        )
    return out


@dataclass(frozen=True)
class ReadingModel:
    """Expected readings of a fixed set of tubes as a function of the parameters (batched).

    ``f(theta (T, P)) -> (T, n)`` and ``jac(theta) -> (T, n, P)``. ``totals_M`` is (n, 2) for the same
    tubes in every trial, or (T, n, 2) (with ``ions_M`` (T, n, k)) for different tubes in each trial.
    """

    model: Model
    params: Parameters
    totals_M: np.ndarray
    ions_M: np.ndarray

    @property
    def rowwise(self) -> bool:
        """True when every trial reads the same tubes: ``f`` and ``jac`` then take any subset of the
        trials' rows (see :func:`planner.inference.lm.fit_many`)."""
        return self.totals_M.ndim == 2

    def bounds(self) -> tuple[np.ndarray, np.ndarray]:
        """Box for the fit: log β within LOG_BETA_RANGE, ε ≥ 0."""
        lo = np.full(self.params.size, -np.inf)
        hi = np.full(self.params.size, np.inf)
        k = self.params.kind
        lo[k == 0] = LOG_BETA_RANGE[0]
        hi[k == 0] = LOG_BETA_RANGE[1]
        lo[k == 1] = 0.0
        return lo, hi

    def _state(self, theta):
        T = theta.shape[0]
        # trial points outside the box (wild LM steps) are evaluated at the guess and returned as NaN,
        # which the fit rejects, instead of asking the equilibrium solver for absurd constants
        lo, hi = self.bounds()
        wild = np.any((theta < lo) | (theta > hi) | ~np.isfinite(theta), axis=1)
        if wild.any():
            theta = np.where(wild[:, None], self.params.guess, theta)
        lb, eps, blank = unpack(self.model, self.params, theta)
        if self.totals_M.ndim == 3:  # one set of tubes per trial (T, n, 2): e.g. each student's own recipe
            tot, ions = self.totals_M, self.ions_M
        else:
            tot = np.broadcast_to(self.totals_M, (T,) + self.totals_M.shape)
            ions = np.broadcast_to(self.ions_M, (T,) + self.ions_M.shape)
        st = predict(self.model, tot, ions, log_beta=lb, epsilon_M_cm=eps, warn=False)
        return st, eps, blank, wild

    def f(self, theta: np.ndarray) -> np.ndarray:
        st, _, blank, wild = self._state(np.atleast_2d(theta))
        return np.where(wild[:, None], np.nan, st.absorbance + blank[:, None])

    def jac(self, theta: np.ndarray) -> np.ndarray:
        theta = np.atleast_2d(theta)
        st, eps, _, _ = self._state(theta)
        return parameter_jacobian(self.params, absorbance_derivatives(self.model, st, eps))


def parameter_jacobian(params: Parameters, der) -> np.ndarray:
    """dA/dθ (..., n, P) of the fitted parameters, from the absorbance derivatives ``der``
    (:func:`planner.model.jacobians.absorbance_derivatives`) of the same state."""
    shape = der.dA_dlog_beta.shape[:-1]
    cols = []
    for p in range(params.size):
        k = params.kind[p]
        if k == 0:
            cols.append(der.dA_dlog_beta[..., params.index[p]])
        elif k == 1:
            cols.append(der.dA_depsilon[..., params.index[p]])
        else:
            cols.append(np.ones(shape))
    return np.stack(cols, axis=-1) if cols else np.zeros(shape + (0,))


def whitening(cov: np.ndarray) -> np.ndarray:
    """W with Wᵀ W = Σ⁻¹ (inverse Cholesky factor), for generalised least squares."""
    L = np.linalg.cholesky(cov)
    return np.linalg.solve(L, np.eye(cov.shape[0]))


@dataclass(frozen=True)
class Whitening:
    """W with WᵀW = Σ⁻¹ for Σ = D + S Sᵀ (diagonal plus low rank), applied in O(n k), never stored n × n.

    With B = D^(−½) S = U diag(s) Vᵀ (thin SVD), Σ = D^(½) (I + BBᵀ) D^(½), and the symmetric
    W = [I + U (diag((1 + s²)^(−½)) − I) Uᵀ] D^(−½) has WᵀW = D^(−½) (I + BBᵀ)⁻¹ D^(−½) = Σ⁻¹ (Woodbury).
    The readings of separately made tubes have exactly this covariance: independent photometric and
    delivery errors (D) plus the errors every tube shares, one column of S per stock and per device.

    Attributes
    ----------
    d : (n,) D^(−½).
    U : (n, k) left singular vectors of B.
    shrink : (k,) (1 + s²)^(−½) − 1.
    """

    d: np.ndarray
    U: np.ndarray
    shrink: np.ndarray
    __array_ufunc__ = None  # so that ``array @ W`` defers to this class instead of making an object array

    @classmethod
    def of(cls, var: np.ndarray, S: np.ndarray) -> Whitening:
        d = 1.0 / np.sqrt(np.asarray(var, dtype=float))
        B = d[:, None] * np.asarray(S, dtype=float)
        if B.shape[1] == 0:
            return cls(d, np.zeros((d.size, 0)), np.zeros(0))
        U, sv, _ = np.linalg.svd(B, full_matrices=False)
        return cls(d, U, 1.0 / np.sqrt(1.0 + sv**2) - 1.0)

    def apply(self, x: np.ndarray) -> np.ndarray:
        """W x along the last axis: x (..., n) -> (..., n)."""
        y = np.asarray(x, dtype=float) * self.d
        return y + ((y @ self.U) * self.shrink) @ self.U.T

    def apply_jac(self, J: np.ndarray) -> np.ndarray:
        """W J for Jacobians (..., n, P)."""
        y = np.asarray(J, dtype=float) * self.d[:, None]
        return y + self.U @ (self.shrink[:, None] * (self.U.T @ y))

    def __matmul__(self, x):
        x = np.asarray(x, dtype=float)
        return self.apply(x) if x.ndim == 1 else self.apply_jac(x)

    # ``x @ W.T`` reads as for an array: the rows whitened
    T = property(lambda self: _WhiteningT(self))

    def dense(self) -> np.ndarray:
        return self.apply_jac(np.eye(self.d.size))


@dataclass(frozen=True)
class _WhiteningT:
    """``x @ W.T`` for rows x (..., n): the rows whitened."""

    w: Whitening
    __array_ufunc__ = None

    def __rmatmul__(self, x):
        return self.w.apply(x)


def whitening_of(budget: ErrorBudget):
    """The whitening of a budget's covariance: :class:`Whitening` (O(n k)) where the independent part is
    diagonal, as for separately made tubes; the dense inverse Cholesky factor otherwise (a titration,
    whose aliquot errors accumulate along the points)."""
    indep = budget.independent
    if np.count_nonzero(indep - np.diag(np.diag(indep))) == 0:
        return Whitening.of(np.diag(indep), np.concatenate([budget.J_stock, budget.J_device], axis=1))
    return whitening(budget.total)


@dataclass(frozen=True)
class CramerRao:
    """Fisher information and its inverse at the guess.

    Attributes
    ----------
    fisher : (P, P) Jᵀ Σ⁻¹ J.
    cov : (P, P) F⁻¹ (NaN where F is singular).
    se : (P,) Cramér–Rao standard errors, parameter units.
    corr : (P, P) correlation matrix.
    jacobian : (n, P) dA/dθ at the guess.
    """

    fisher: np.ndarray
    cov: np.ndarray
    se: np.ndarray
    corr: np.ndarray
    jacobian: np.ndarray


def cramer_rao(J: np.ndarray, cov_A: np.ndarray | None = None, *, W=None) -> CramerRao:
    """Cramér–Rao bound for a linearised model with absorbance covariance ``cov_A`` (or its whitening
    ``W``, e.g. :func:`whitening_of` a budget)."""
    if W is None:
        assert cov_A is not None, "give cov_A or its whitening W"
        W = whitening(cov_A)
    WJ = W @ J
    F = WJ.T @ WJ
    P = F.shape[0]
    if P == 0:
        e = np.zeros((0, 0))
        return CramerRao(F, e, np.zeros(0), e, J)
    # a pseudo-inverse via SVD of WJ, so an unidentifiable direction shows as a huge SE, not a crash
    u, s, vt = np.linalg.svd(WJ, full_matrices=False)
    tol = s.max() * max(WJ.shape) * np.finfo(float).eps if s.size else 0.0
    if s.size < P or np.any(s <= tol):  # fewer readings than parameters, or a flat direction
        cov = np.full((P, P), np.nan)
        se = np.full(P, np.inf)
        corr = np.full((P, P), np.nan)
    else:
        cov = (vt.T / s**2) @ vt
        se = np.sqrt(np.diag(cov))
        corr = cov / np.outer(se, se)
    return CramerRao(F, cov, se, corr, J)


@dataclass(frozen=True)
class MonteCarlo:
    """Distribution of the fitted parameters over simulated experiments.

    Attributes
    ----------
    estimates : (T, P) fitted values (NaN where the fit failed).
    true : (P,) the values the experiments were simulated with.
    sd, bias : (P,) sample sd and mean − true over the successful fits.
    ci95 : (P, 2) 2.5 and 97.5 percentiles.
    failed_fraction : share of fits that did not converge.
    """

    estimates: np.ndarray
    true: np.ndarray
    sd: np.ndarray
    bias: np.ndarray
    ci95: np.ndarray
    failed_fraction: float


def monte_carlo(
    bench: Bench,
    model: Model,
    recipe: Recipe,
    reading: ReadingModel,
    W: np.ndarray,
    rng: np.random.Generator,
    n_trials: int,
    true_theta: np.ndarray,
    *,
    chunk: int = 2000,
    progress=None,
) -> MonteCarlo:
    """Simulate ``n_trials`` experiments at ``true_theta`` and fit each (in chunks, all at once)."""
    params = reading.params
    lb, eps, _ = unpack(model, params, true_theta)
    est = np.empty((n_trials, params.size))
    ok = np.zeros(n_trials, dtype=bool)
    done = 0
    while done < n_trials:
        m = min(chunk, n_trials - done)
        sim = simulate(bench, model, recipe, rng, m, log_beta=lb, epsilon_M_cm=eps)
        theta0 = np.broadcast_to(params.guess, (m, params.size)).copy()
        lo, hi = reading.bounds()
        res = fit_many(
            reading.f,
            theta0,
            sim.absorbance,
            jac=reading.jac,
            whiten=W,
            scale_cov=False,
            lower=lo,
            upper=hi,
            rowwise=reading.rowwise,
        )
        est[done : done + m] = np.where(res.converged[:, None], res.theta, np.nan)
        ok[done : done + m] = res.converged & np.all(np.isfinite(res.theta), axis=1)
        done += m
        if progress is not None:
            progress(done, n_trials)
    good = est[ok]
    if good.shape[0] >= 2:
        sd = good.std(axis=0, ddof=1)
        bias = good.mean(axis=0) - true_theta
        ci = np.percentile(good, [2.5, 97.5], axis=0).T
    else:
        sd = np.full(params.size, np.nan)
        bias = np.full(params.size, np.nan)
        ci = np.full((params.size, 2), np.nan)
    return MonteCarlo(est, np.asarray(true_theta, dtype=float), sd, bias, ci, float(1.0 - ok.mean()))


@dataclass(frozen=True)
class Profile:
    """χ² of the noise-free data against the target's log β, the other parameters refitted.

    Attributes
    ----------
    log_beta : (G,) grid of the target's log β, the "K → 0" and "K → ∞" ends included (see
        :func:`_limit_ends`).
    delta_chi2 : (G,) Δχ² against the true value.
    low_unbounded, high_unbounded : True when the data cannot tell the truth from K -> 0 / K -> ∞
        (Δχ² below the 95 % threshold at the grid's end): K is then only bounded on the other side.
    """

    log_beta: np.ndarray
    delta_chi2: np.ndarray
    low_unbounded: bool
    high_unbounded: bool


def _limit_ends(reading: ReadingModel, true_theta: np.ndarray) -> tuple[float, float]:
    """log β of the target standing for "K → 0" and "K → ∞" in these tubes.

    The guess ± PROFILE_SPAN, widened where that is not yet a limit at these concentrations: at the low
    end the complex must be negligible in every tube, β_c C_max^(p+q−1) ≤ 1e-4, and at the high end
    the limiting reagent bound in every tube, β_c C_min^(p+q−1) ≥ 1e6 (β_c the conditional constant,
    C the larger / smaller positive total) [derived: the bound fraction of M + qL ⇌ MLq is about
    β_c C^(p+q−1) when small and 1 − O((β_c C^(p+q−1))^(-1/2)) when large]. So a strong constant is
    reported as bounded below, never as "cannot be told from K → 0" because guess − 10 still saturates.
    """
    from ..model.closed_forms import conditional_log_beta

    params, model = reading.params, reading.model
    t = params.target
    j = params.index[t]
    centre = float(true_theta[t])
    low, high = centre - PROFILE_SPAN, centre + PROFILE_SPAN
    p, q = model.stoich[j, 0], model.stoich[j, 1]
    tot = np.asarray(reading.totals_M, dtype=float)
    pos = tot[tot > 0]
    if p + q >= 2 and pos.size:
        shift = float(conditional_log_beta(model.log_beta, model.stoich, model.pH)[j] - model.log_beta[j])
        order = p + q - 1
        low = min(low, -4.0 - order * float(np.log10(pos.max())) - shift)
        high = max(high, 6.0 - order * float(np.log10(pos.min())) - shift)
    return max(low, LOG_BETA_RANGE[0]), min(high, LOG_BETA_RANGE[1])


def profile(reading: ReadingModel, W: np.ndarray, true_theta: np.ndarray, *, n_grid: int = 25) -> Profile:
    """Profile Δχ² over the target's log β; nuisance parameters refitted at every grid point."""
    params = reading.params
    t = params.target
    centre = true_theta[t]
    inner = centre + np.linspace(-3.0, 3.0, n_grid)
    low, high = _limit_ends(reading, true_theta)
    grid = np.concatenate([[low], inner, [high]])
    y0 = reading.f(true_theta[None, :])[0]
    others = [p for p in range(params.size) if p != t]
    G = grid.size
    if not others:
        theta = np.broadcast_to(true_theta, (G, params.size)).copy()
        theta[:, t] = grid
        r = (reading.f(theta) - y0) @ W.T
        chi2 = np.sum(r**2, axis=1)
    else:

        def full(theta_sub):  # fit_many always passes the whole batch: row g is grid point g
            th = np.empty((G, params.size))
            th[:, others] = theta_sub
            th[:, t] = grid
            return th

        def f(theta_sub):
            return reading.f(full(theta_sub))

        def jac(theta_sub):
            return reading.jac(full(theta_sub))[..., others]

        theta0 = np.broadcast_to(true_theta[others], (G, len(others))).copy()
        lo, hi = reading.bounds()
        res = fit_many(
            f,
            theta0,
            np.broadcast_to(y0, (G, y0.size)),
            jac=jac,
            whiten=W,
            scale_cov=False,
            lower=lo[others],
            upper=hi[others],
        )
        chi2 = np.where(np.isfinite(res.chi2), res.chi2, np.inf)
    # noise-free data: χ² at the truth is 0, so χ² itself is the Δχ² of the profile
    return Profile(grid, chi2, bool(chi2[0] < CHI2_95_1DOF), bool(chi2[-1] < CHI2_95_1DOF))


def budget_covariance(budget: ErrorBudget) -> np.ndarray:
    """The absorbance covariance used for information and weighting (every source)."""
    return budget.total

"""Where the variance of a fitted parameter comes from: exact shares by error source.

The generalised least-squares estimate θ̂ ≈ θ + A e with A = F⁻¹ Jᵀ Σ⁻¹ (F = Jᵀ Σ⁻¹ J) has
Cov(θ̂) = A Σ Aᵀ = F⁻¹ (Gauss–Markov; e.g. Seber & Wild 1989, Nonlinear Regression, §2.1). With the
readings' covariance a sum of independent sources, Σ = Σ_k Σ_k, the variance of parameter t splits
exactly into v_k = a_tᵀ Σ_k a_t (a_t the t-th row of A), the variance source k alone would cause in a
fit weighted by the whole Σ — what a Monte Carlo with that one source switched on measures [derived].

Fitting nuisance parameters (an unknown absorptivity) inflates every v_k. The shares reported here
separate that too: with A₀ the estimator of the same fit with those parameters known, the sources
get v⁰_k = a₀ᵀ Σ_k a₀ (summing to Var₀ = (F₀⁻¹)_tt) and the nuisance parameters the rest,
Var − Var₀ [derived]. The shares sum to 1 exactly.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class VarianceShares:
    """The variance of one parameter split by source.

    Attributes
    ----------
    variance : Var of the parameter, (F⁻¹)_tt.
    variance_known : the same with the nuisance parameters known.
    by_source : (K,) v⁰_k, each source's variance with the nuisance parameters known.
    nuisance : Var − Var₀, the variance that fitting the nuisance parameters adds.
    """

    variance: float
    variance_known: float
    by_source: np.ndarray
    nuisance: float

    @property
    def shares(self) -> np.ndarray:
        """(K + 1,) shares of the sources, then of the nuisance parameters; they sum to 1."""
        return np.append(self.by_source, self.nuisance) / self.variance


def _row(J: np.ndarray, Sigma_inv: np.ndarray, t: int) -> np.ndarray:
    """Row t of A = F⁻¹ Jᵀ Σ⁻¹ (least squares through an SVD of the whitened Jacobian)."""
    F = J.T @ Sigma_inv @ J
    return np.linalg.solve(F, J.T @ Sigma_inv)[t]


def variance_shares(
    J: np.ndarray, sources: list[np.ndarray], t: int, nuisance: list[int] | tuple[int, ...] = ()
) -> VarianceShares:
    """Shares of Var(θ̂_t) by source (module docstring).

    Parameters
    ----------
    J : (n, P) Jacobian of the readings.
    sources : K covariance matrices (n, n) of independent error sources; Σ is their sum.
    t : index of the parameter of interest.
    nuisance : indices of parameters whose being fitted is reported as a share of its own.
    """
    Sigma = np.sum(sources, axis=0)
    Sinv = np.linalg.inv(Sigma)
    a = _row(J, Sinv, t)
    var = float(a @ Sigma @ a)
    keep = [p for p in range(J.shape[1]) if p not in set(nuisance)]
    t0 = keep.index(t)
    a0 = _row(J[:, keep], Sinv, t0) if nuisance else a
    by = np.array([float(a0 @ S @ a0) for S in sources])
    var0 = float(by.sum())
    return VarianceShares(var, var0, by, max(var - var0, 0.0))

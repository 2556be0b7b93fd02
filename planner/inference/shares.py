"""Where the variance of a fitted parameter comes from: exact shares by error source.

The generalised least-squares estimate θ̂ ≈ θ + A e with A = F⁻¹ Jᵀ Σ⁻¹ (F = Jᵀ Σ⁻¹ J) has
Cov(θ̂) = A Σ Aᵀ = F⁻¹ (Gauss–Markov; e.g. Seber & Wild 1989, Nonlinear Regression, §2.1). With the
readings' covariance a sum of independent sources, Σ = Σ_k Σ_k, the variance of parameter t splits
exactly into v_k = a_tᵀ Σ_k a_t (a_t the t-th row of A): the variance source k alone causes in the fit
as it will be made — weighted by the whole Σ, every nuisance parameter fitted — which is what a Monte
Carlo with that one source switched on measures [derived]. The shares v_k / Var sum to 1.

Fitting nuisance parameters (an unknown absorptivity) inflates every v_k by the same mechanism; the
inflation is reported beside the shares, not as a share of its own: Var / Var₀, with Var₀ = (F₀⁻¹)_tt the
variance were those parameters known (the Schur complement of the information, e.g. Pukelsheim 1993,
Optimal Design of Experiments, §3.2) [derived].
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
    by_source : (K,) v_k, each source's variance in the fit as made; they sum to ``variance``.
    variance_known : the variance with the nuisance parameters known (= ``variance`` without any).
    """

    variance: float
    by_source: np.ndarray
    variance_known: float

    @property
    def shares(self) -> np.ndarray:
        """(K,) shares of the sources; they sum to 1."""
        return self.by_source / self.variance

    @property
    def nuisance_factor(self) -> float:
        """Var / Var₀: how much fitting the nuisance parameters multiplies the variance."""
        return self.variance / self.variance_known if self.variance_known > 0 else float("inf")


def _row(J: np.ndarray, Sigma_inv: np.ndarray, t: int) -> np.ndarray:
    """Row t of A = F⁻¹ Jᵀ Σ⁻¹."""
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
    nuisance : indices of the parameters whose being fitted is reported as a factor on the variance.
    """
    Sigma = np.sum(sources, axis=0)
    Sinv = np.linalg.inv(Sigma)
    a = _row(J, Sinv, t)
    by = np.array([float(a @ S @ a) for S in sources])
    var = float(by.sum())
    var0 = var
    if nuisance:
        keep = [p for p in range(J.shape[1]) if p not in set(nuisance)]
        J0 = J[:, keep]
        var0 = float(np.linalg.inv(J0.T @ Sinv @ J0)[keep.index(t), keep.index(t)])
    return VarianceShares(var, by, var0)

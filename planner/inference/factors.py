"""Factor analysis of a data matrix: how many independent components (absorbing species) does it hold?

For a matrix D of r rows and c columns (r ≥ c after transposing if needed) with eigenvalues
λ_1 ≥ … ≥ λ_c of DᵀD (the squared singular values), Malinowski's criteria:

- real error RE(k) = √(Σ_{j>k} λ_j / (r (c − k))), an estimate of the noise sd once k factors are taken
  (Malinowski 1977, Anal. Chem. 49:606);
- indicator function IND(k) = RE(k)/(c − k)², whose minimum marks the number of factors (Malinowski
  1977, Anal. Chem. 49:612);
- reduced eigenvalues REV_j = λ_j / ((r − j + 1)(c − j + 1)), equal on average for the error
  eigenvalues (Malinowski 1987, J. Chemom. 1:33), and the F-test of each against the pool of the
  smaller ones, F(1, c − k) = REV_k / mean-weighted REV of the pool (Malinowski 1989, J. Chemom. 3:49;
  "Factor Analysis in Chemistry", 3rd ed., Wiley 2002, ch. 4): scanning from the smallest eigenvalue up,
  the first significant one gives the number of factors.

The data are taken as they are (no centring: for absorbance the rank of the noise-free matrix is the
number of absorbing species whose concentrations vary independently).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.special import fdtrc  # the F distribution's upper tail, without loading scipy.stats (~0.8 s)

LEVEL = 0.05  # significance of the F-test [common practice]


@dataclass(frozen=True)
class FactorAnalysis:
    """Singular values of a data matrix and the number of significant factors.

    Attributes
    ----------
    singular_values : (c,) singular values, largest first.
    real_error : (c − 1,) RE(k) for k = 1 … c − 1.
    indicator : (c − 1,) IND(k) for k = 1 … c − 1.
    reduced_eigenvalues : (c,) REV_j.
    f_p_values : (c − 1,) p-value of the F-test of factor k against the pool of the smaller ones.
    n_indicator : the k minimising IND.
    n_f_test : the number of factors by the F-test at ``LEVEL``.
    """

    singular_values: np.ndarray
    real_error: np.ndarray
    indicator: np.ndarray
    reduced_eigenvalues: np.ndarray
    f_p_values: np.ndarray
    n_indicator: int
    n_f_test: int

    def __repr__(self) -> str:
        return f"FactorAnalysis(IND → {self.n_indicator}, F-test → {self.n_f_test} factors)"


def factor_analysis(D: np.ndarray, *, level: float = LEVEL) -> FactorAnalysis:
    """Malinowski's criteria for the data matrix ``D`` (at least 3 × 3)."""
    D = np.asarray(D, dtype=float)
    if D.shape[0] < D.shape[1]:
        D = D.T
    r, c = D.shape
    if c < 3:
        raise ValueError(f"factor analysis needs at least 3 rows and 3 columns, got {D.shape}")
    sv = np.linalg.svd(D, compute_uv=False)
    lam = sv**2
    k = np.arange(1, c)
    tail, re, ind = _indicator(lam, r, c)
    j = np.arange(1, c + 1)
    weight = (r - j + 1.0) * (c - j + 1.0)
    rev = lam / weight
    wtail = np.cumsum(weight[::-1])[::-1]
    with np.errstate(divide="ignore", invalid="ignore"):
        F = rev[k - 1] / (tail[k] / wtail[k])
    p = fdtrc(1, c - k, F)  # = scipy.stats.f.sf(F, 1, c - k)
    p = np.where(np.isfinite(p), p, 0.0)
    significant = p < level
    n_f = 0
    for kk in range(c - 1, 0, -1):  # from the smallest testable eigenvalue up
        if significant[kk - 1]:
            n_f = kk
            break
    return FactorAnalysis(sv, re, ind, rev, p, int(k[np.argmin(ind)]), n_f)


def _indicator(lam: np.ndarray, r: int, c: int):
    """Tail sums Σ_{i ≥ j} λ_i, RE(k) and IND(k) for eigenvalues ``lam`` (..., c), largest first."""
    k = np.arange(1, c)
    tail = np.cumsum(lam[..., ::-1], axis=-1)[..., ::-1]  # tail[j] = Σ_{i ≥ j} λ_i (0-based)
    re = np.sqrt(tail[..., k] / (r * (c - k)))
    return tail, re, re / (c - k) ** 2


def indicator_factors(D: np.ndarray) -> np.ndarray:
    """The number of factors by Malinowski's indicator function for each of a stack of data matrices
    ``D`` (..., r, c), at least 3 × 3 (as :attr:`FactorAnalysis.n_indicator`, without the rest)."""
    D = np.asarray(D, dtype=float)
    if D.shape[-2] < D.shape[-1]:
        D = np.swapaxes(D, -1, -2)
    r, c = D.shape[-2:]
    if c < 3:
        raise ValueError(f"factor analysis needs at least 3 rows and 3 columns, got {D.shape[-2:]}")
    lam = np.linalg.svd(D, compute_uv=False) ** 2
    _, _, ind = _indicator(lam, r, c)
    return np.argmin(ind, axis=-1) + 1

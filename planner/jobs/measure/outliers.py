"""Which tube bends the fit, and residuals that keep their sign.

A suspect reading is found by the mean-shift outlier model: for tube i, add one parameter δ_i that
shifts its reading alone; its generalised-least-squares estimate is δ̂_i = wᵢᵀ M e / wᵢᵀ M wᵢ with
variance 1 / wᵢᵀ M wᵢ (wᵢ the i-th column of the whitening W, e the whitened residuals, M the residual
projector of the whitened Jacobian), so z_i = wᵢᵀ M e / √(wᵢᵀ M wᵢ) is the likelihood-ratio statistic for
"tube i alone is off" — the same as fitting without the tube and asking how far it lies from the
prediction (Cook & Weisberg 1982, Residuals and Influence in Regression, §2.2; Beckman & Cook 1983,
Technometrics 25:119), with the correlation between tubes (shared stock and dispenser errors) respected.
One wild reading inflates every other residual of the fit it bends, so the search is backward (Hadi &
Simonoff 1993, JASA 88:1264): the largest |z| beyond the critical value becomes a suspect, its shift is
taken out, and the others are tested again, until none is beyond it. The critical value is Bonferroni's
for the largest of n two-sided tests at 5 % (a clean set of tubes has a suspect at most 5 % of the
time), and never below the usual |z| = 3. The model is linearised at the fit (one fit, no refits).

Standardised residuals are each raw residual over its own standard deviation: sd(rᵢ)² is
[Σ − J C Jᵀ]ᵢᵢ for a tube the fit used and Σᵢᵢ + Jᵢ C Jᵢᵀ − 2 Jᵢ C Jᵤᵀ Σᵤ⁻¹ Σᵤᵢ for one it left out (the
prediction error, correlated with the tubes used through the shared errors). So a standardised residual
always has the sign of the raw one (a whitened residual mixes the tubes and need not).
"""

from __future__ import annotations

import numpy as np

from ...inference.tails import chi2_ppf

OUTLIER_LEVEL = 0.05  # family-wise rate of a suspect among clean tubes (Bonferroni over the tubes)
OUTLIER_Z_MIN = 3.0  # never flag below |z| = 3 [common practice]


def critical_z(n: int) -> float:
    """|z| beyond which the largest of n mean-shift statistics marks a suspect (Bonferroni, two-sided)."""
    z = float(np.sqrt(chi2_ppf(1.0 - OUTLIER_LEVEL / max(n, 1), 1)))
    return max(z, OUTLIER_Z_MIN)


def _projectors(A: np.ndarray) -> np.ndarray:
    """I − A A⁺ for stacked A (T, n, m): the residual projector of each stack's columns (by SVD, safe when
    A is rank-deficient or has zero columns)."""
    T, n, m = A.shape
    if m == 0:
        return np.broadcast_to(np.eye(n), (T, n, n)).copy()
    u, s, _ = np.linalg.svd(A, full_matrices=False)
    keep = s > s.max(axis=-1, keepdims=True) * max(n, m) * np.finfo(float).eps
    u = u * keep[:, None, :]
    return np.eye(n) - u @ np.swapaxes(u, 1, 2)


def shift_statistics(X: np.ndarray, e: np.ndarray, Wd: np.ndarray, taken: np.ndarray):
    """z (T, n) and δ̂ (T, n) of every tube given the suspects ``taken`` (T, m; −1 for none) already
    shifted out (see the module docstring)."""
    T, n = e.shape
    rows = np.arange(T)[:, None]
    if taken.shape[1]:
        cols = np.swapaxes(Wd[rows, :, np.maximum(taken, 0)], 1, 2) * (taken >= 0)[:, None, :]
    else:
        cols = np.zeros((T, n, 0))
    M = _projectors(np.concatenate([X, cols], axis=2))
    r = np.einsum("tij,tj->ti", M, e)
    MW = M @ Wd
    num = np.einsum("tji,tj->ti", Wd, r)
    den = np.einsum("tji,tji->ti", Wd, MW)
    ok = den > 1e-12 * np.einsum("tji,tji->ti", Wd, Wd)
    safe = np.where(ok, den, 1.0)
    return np.where(ok, num / np.sqrt(safe), np.nan), np.where(ok, num / safe, np.nan)


def suspects(X: np.ndarray, e: np.ndarray, Wd: np.ndarray, *, max_suspects: int):
    """The backward search of T experiments at once.

    Parameters
    ----------
    X : (T, n, P) whitened Jacobians W J at the fits; e : (T, n) whitened residuals W (y − f);
    Wd : (T, n, n) the whitenings W. max_suspects : stop after this many (the fit keeps more tubes than
    parameters).

    Returns
    -------
    taken : (T, m) index of each suspect in the order found (−1 for none), m ≤ max_suspects.
    z, shift : (T, m) each suspect's statistic and estimated shift (absorbance units) with the other
        suspects shifted out (NaN for none).
    """
    T, n = e.shape
    crit = critical_z(n)
    taken = np.full((T, 0), -1, dtype=int)
    for _ in range(max(max_suspects, 0)):
        z, _ = shift_statistics(X, e, Wd, taken)
        hit = taken >= 0
        z[np.broadcast_to(np.arange(T)[:, None], taken.shape)[hit], taken[hit]] = np.nan
        az = np.where(np.isfinite(z), np.abs(z), -1.0)
        i = np.argmax(az, axis=1)
        new = az[np.arange(T), i] > crit
        if taken.shape[1]:
            new &= taken[:, -1] >= 0  # a search that stopped stays stopped
        if not new.any():
            break
        taken = np.concatenate([taken, np.where(new, i, -1)[:, None]], axis=1)
    m = taken.shape[1]
    zs = np.full((T, m), np.nan)
    ds = np.full((T, m), np.nan)
    for j in range(m):  # each suspect's own statistic, with the other suspects shifted out
        others = taken.copy()
        others[:, j] = -1
        z, d = shift_statistics(X, e, Wd, others)
        at = np.maximum(taken[:, j], 0)
        zs[:, j] = np.where(taken[:, j] >= 0, z[np.arange(T), at], np.nan)
        ds[:, j] = np.where(taken[:, j] >= 0, d[np.arange(T), at], np.nan)
    return taken, zs, ds


def standardised(sigma: np.ndarray, J: np.ndarray, used: np.ndarray, r: np.ndarray) -> np.ndarray:
    """Each residual over its standard deviation (see the module docstring); NaN where it is 0.

    Parameters
    ----------
    sigma : (N, N) covariance of all readings; J : (N, P) Jacobian; used : (N,) tubes in the fit;
    r : (N,) raw residuals y − f(θ̂).
    """
    u = np.flatnonzero(used)
    o = np.flatnonzero(~used)
    Su = sigma[np.ix_(u, u)]
    Ju = J[u]
    L = np.linalg.cholesky(Su)
    Xu = np.linalg.solve(L, Ju)
    C = np.linalg.pinv(Xu.T @ Xu)
    var = np.full(r.size, np.nan)
    var[u] = np.diag(Su) - np.einsum("ip,pq,iq->i", Ju, C, Ju)
    if o.size:
        Jo = J[o]
        # Jᵤᵀ Σᵤ⁻¹ Σᵤₒ through the Cholesky factor: (L⁻¹ Jᵤ)ᵀ (L⁻¹ Σᵤₒ)
        G = Xu.T @ np.linalg.solve(L, sigma[np.ix_(u, o)])  # (P, m)
        var[o] = sigma[o, o] + np.einsum("ip,pq,iq->i", Jo, C, Jo) - 2.0 * np.einsum("ip,pq,qi->i", Jo, C, G)
    floor = 1e-12 * np.diag(sigma)
    return np.where(var > floor, r / np.sqrt(np.where(var > floor, var, 1.0)), np.nan)

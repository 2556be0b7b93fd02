"""Tails of the χ² and normal distributions the tests use, in closed form for whole degrees of freedom.

Importing scipy.stats takes about a second and scipy.special a few tenths; a command that needs three
tail probabilities should not wait for either. For an integer number of degrees of freedom k the
upper tail of χ²_k is the regularised incomplete gamma function Q(k/2, x/2), which has closed forms
(Abramowitz & Stegun 1964, 26.4.4 and 26.4.5): for even k, Q = e^(−y) Σ_{i<k/2} yⁱ/i!, and for odd k,
Q = erfc(√y) + e^(−y) Σ_{i<(k−1)/2} y^(i+½)/Γ(i+3/2), with y = x/2. The noncentral χ² is the Poisson
mixture of central ones (A&S 26.4.25). The tests check every function against scipy.stats.
"""

from __future__ import annotations

import math

import numpy as np

_erfc = np.vectorize(math.erfc, otypes=[float])


def norm_cdf(x):
    """Φ(x), the standard normal distribution function."""
    return 0.5 * _erfc(-np.asarray(x, dtype=float) / math.sqrt(2.0))


def _whole(dof) -> int:
    k = int(round(float(dof)))
    if k < 1 or abs(k - float(dof)) > 1e-9:
        raise ValueError(f"degrees of freedom must be a whole number ≥ 1, got {dof!r}")
    return k


def chi2_sf(x, dof):
    """P(χ²_dof > x) for a whole number of degrees of freedom."""
    k = _whole(dof)
    y = np.maximum(np.asarray(x, dtype=float), 0.0) / 2.0
    yy = y[..., None]
    with np.errstate(divide="ignore", over="ignore", invalid="ignore", under="ignore"):
        ly = np.log(np.where(yy > 0, yy, 1.0))
        if k % 2 == 0:
            i = np.arange(k // 2)
            lgam = np.concatenate([[0.0], np.cumsum(np.log(np.arange(1, max(k // 2, 1))))])[
                : i.size
            ]  # log i!
            q = np.sum(np.exp(i * ly - yy - lgam), axis=-1)
        else:
            i = np.arange((k - 1) // 2)
            # log Γ(i + 3/2) = log Γ(3/2) + Σ_{j=1..i} log(j + 1/2)
            lgam = (
                math.lgamma(1.5)
                + np.concatenate([[0.0], np.cumsum(np.log(np.arange(1, i.size) + 0.5))])[: i.size]
            )
            q = _erfc(np.sqrt(y)) + np.sum(np.where(yy > 0, np.exp((i + 0.5) * ly - yy - lgam), 0.0), axis=-1)
    return np.clip(np.where(y > 0, q, 1.0), 0.0, 1.0)


def chi2_cdf(x, dof):
    """P(χ²_dof ≤ x); where it is small, from the series of the lower incomplete gamma function
    P(a, y) = yᵃ e^(−y) Σ yⁿ/Γ(a+n+1) (A&S 6.5.29), so that it keeps its relative precision."""
    k = _whole(dof)
    a = k / 2.0
    y = np.maximum(np.asarray(x, dtype=float), 0.0) / 2.0
    upper = 1.0 - chi2_sf(x, k)
    with np.errstate(divide="ignore", over="ignore", invalid="ignore", under="ignore"):
        term = np.exp(a * np.log(np.where(y > 0, y, 1.0)) - y - math.lgamma(a + 1.0))
        total = term.copy()
        for n in range(1, 400):
            term = term * y / (a + n)
            total = total + term
            if np.all(term <= 1e-17 * total):
                break
    small = (y > 0) & (y < a + 1.0)  # where the series converges fast and the difference would not
    return np.where(y > 0, np.where(small, np.minimum(total, 1.0), upper), 0.0)


def chi2_ppf(q, dof):
    """The x with P(χ²_dof ≤ x) = q (bisection on the closed-form tail, to 1e-13 relative)."""
    k = _whole(dof)
    q = np.asarray(q, dtype=float)
    lo = np.zeros_like(q)
    hi = np.full_like(q, k + 50.0 * math.sqrt(2.0 * k) + 100.0)
    for _ in range(200):
        mid = 0.5 * (lo + hi)
        below = chi2_cdf(mid, k) < q
        lo, hi = np.where(below, mid, lo), np.where(below, hi, mid)
        if np.all(hi - lo <= 1e-13 * np.maximum(hi, 1e-300)):
            break
    return 0.5 * (lo + hi)


def ncx2_sf(x, dof, nc):
    """P(χ²_dof(nc) > x): the Poisson(nc/2) mixture of central χ²_(dof+2j) tails (A&S 26.4.25), every
    term at once; the central tails by the recurrence Q(x | ν+2) = Q(x | ν) + (x/2)^(ν/2) e^(−x/2) /
    Γ(ν/2 + 1) (A&S 26.4.8), a cumulative sum of positive terms."""
    k = _whole(dof)
    lam = 0.5 * float(nc)
    if lam <= 0:
        return chi2_sf(x, k)
    jmax = int(lam + 12.0 * math.sqrt(lam) + 30)  # the Poisson weights are negligible beyond jmax
    j = np.arange(jmax + 1)
    log_fact = np.concatenate([[0.0], np.cumsum(np.log(j[1:]))])  # log j!
    weight = np.exp(j * math.log(lam) - lam - log_fact)
    a = k / 2.0 + j[:-1]  # ν/2 of the tail each increment starts from
    log_gamma = math.lgamma(k / 2.0 + 1.0) + np.concatenate([[0.0], np.cumsum(np.log(a[1:]))])  # log Γ(a+1)
    y = np.maximum(np.asarray(x, dtype=float), 0.0)[..., None] / 2.0
    with np.errstate(divide="ignore", over="ignore", invalid="ignore", under="ignore"):
        ly = np.log(np.where(y > 0, y, 1.0))
        step = np.where(y > 0, np.exp(a * ly - y - log_gamma), 0.0)
    tails = np.asarray(chi2_sf(x, k))[..., None] + np.concatenate(
        [np.zeros(step.shape[:-1] + (1,)), np.cumsum(step, axis=-1)], axis=-1
    )
    return np.clip(np.sum(np.minimum(tails, 1.0) * weight, axis=-1), 0.0, 1.0)

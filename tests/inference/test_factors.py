"""Malinowski's factor analysis on simulated data matrices of known rank."""

from __future__ import annotations

import numpy as np
import pytest

from planner.inference.factors import factor_analysis


def _matrix(rng, k: int, n: int = 12, W: int = 301, sigma: float = 0.003):
    """k 'species': positive concentrations (n) × Gaussian bands (W), plus noise of sd σ."""
    C = rng.uniform(0.05, 1.0, (n, k))
    wl = np.linspace(400, 700, W)
    peaks = np.linspace(450, 650, k) + rng.uniform(-10, 10, k)  # distinct, overlapping bands
    E = np.exp(-0.5 * ((wl[None, :] - peaks[:, None]) / rng.uniform(40, 60, (k, 1))) ** 2)
    return C @ E + sigma * rng.standard_normal((n, W))


@pytest.mark.parametrize("k", [1, 2, 3, 4])
def test_the_indicator_function_finds_the_number_of_species(k):
    # source: Malinowski 1977, Anal. Chem. 49:612 — IND(k) is smallest at the true number of factors when
    # the factors stand above the noise
    rng = np.random.default_rng(10 + k)
    found = [factor_analysis(_matrix(rng, k)).n_indicator for _ in range(40)]
    assert np.mean(np.array(found) == k) >= 0.95


def test_real_error_and_reduced_eigenvalues_estimate_the_noise():
    # source: Malinowski 1977, Anal. Chem. 49:606 — RE at the true number of factors estimates the noise
    # sd; Malinowski 1987, J. Chemom. 1:33 — the reduced eigenvalues of the error factors are about
    # equal (here within a factor 3, the last two left aside: their divisor (c − j + 1) is 1 or 2 and
    # the approximation behind it is poorest), those of the real factors far above them
    rng = np.random.default_rng(3)
    sigma = 0.003
    re, spread, gap = [], [], []
    for _ in range(30):
        fa = factor_analysis(_matrix(rng, 3, sigma=sigma))
        re.append(fa.real_error[2])
        err = fa.reduced_eigenvalues[3:-2]
        spread.append(err.max() / err.min())
        gap.append(fa.reduced_eigenvalues[2] / err.max())
    assert abs(np.mean(re) / sigma - 1.0) < 0.05
    assert np.max(spread) < 3.0
    assert np.min(gap) > 10


def test_the_f_test_agrees_on_clear_cases_and_pure_noise_has_no_factor():
    # source: Malinowski 1989, J. Chemom. 3:49 — the F-test of each reduced eigenvalue against the pool of
    # the smaller ones; on pure noise no eigenvalue is significant (at the 5 % level, in most matrices)
    rng = np.random.default_rng(5)
    assert factor_analysis(_matrix(rng, 2)).n_f_test == 2
    noise = [factor_analysis(0.003 * rng.standard_normal((12, 301))).n_f_test for _ in range(40)]
    assert np.mean(np.array(noise) == 0) >= 0.8


def test_singular_values_are_those_of_the_matrix_either_way_round():
    rng = np.random.default_rng(1)
    D = _matrix(rng, 2, n=7, W=20)
    a, b = factor_analysis(D), factor_analysis(D.T)
    assert np.allclose(a.singular_values, np.linalg.svd(D, compute_uv=False))
    assert np.allclose(a.indicator, b.indicator)
    with pytest.raises(ValueError):
        factor_analysis(np.ones((2, 10)))


def test_the_batched_indicator_is_the_one_by_one_analysis():
    # the stacked count (one SVD call for many matrices) equals factor_analysis on each matrix alone
    from planner.inference.factors import indicator_factors

    rng = np.random.default_rng(5)
    stack = np.stack([_matrix(rng, k, W=41) for k in (1, 2, 3, 2, 4)])
    np.testing.assert_array_equal(indicator_factors(stack), [factor_analysis(d).n_indicator for d in stack])
    np.testing.assert_array_equal(indicator_factors(np.swapaxes(stack, 1, 2)), indicator_factors(stack))

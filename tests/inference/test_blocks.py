"""The block-diagonal whitening of a class's readings is a whitening, applied without N × N matrices."""

from __future__ import annotations

import numpy as np

from planner.inference.blocks import BlockWhitening, WithPrior
from planner.inference.precision import Whitening


def _blocks(rng, sizes, r):
    var = rng.uniform(1e-6, 4e-6, sum(sizes))
    S = rng.normal(0, 1e-3, (sum(sizes), r))
    dense = np.zeros((sum(sizes), sum(sizes)))
    i = 0
    for n in sizes:
        dense[i : i + n, i : i + n] = np.diag(var[i : i + n]) + S[i : i + n] @ S[i : i + n].T
        i += n
    return var, S, dense


def test_block_whitening_inverts_the_block_diagonal_covariance():
    # derived (Woodbury, block by block): WᵀW = Σ⁻¹ for Σ = diag_b(D_b + S_b S_bᵀ), blocks of unequal size
    rng = np.random.default_rng(0)
    sizes = [8, 5, 8, 1, 12]
    var, S, cov = _blocks(rng, sizes, 2)
    W = BlockWhitening.of(var, S, np.array(sizes))
    Wd = W.apply_jac(np.eye(cov.shape[0]))
    np.testing.assert_allclose(Wd.T @ Wd, np.linalg.inv(cov), rtol=1e-8, atol=1e-6)
    x = rng.normal(size=(3, cov.shape[0]))
    np.testing.assert_allclose(W.apply(x), x @ Wd.T, rtol=1e-12, atol=1e-9)
    J = rng.normal(size=(2, cov.shape[0], 4))
    np.testing.assert_allclose(W.apply_jac(J), Wd @ J, rtol=1e-12, atol=1e-9)
    # one block alone is the single-block Woodbury whitening
    np.testing.assert_allclose(W.block_dense(2), Whitening.of(var[13:21], S[13:21]).dense(), rtol=1e-12)


def test_prior_rows_are_left_alone():
    rng = np.random.default_rng(1)
    var, S, cov = _blocks(rng, [4, 4], 1)
    W = WithPrior(BlockWhitening.of(var, S, np.array([4, 4])), 3)
    x = rng.normal(size=11)
    y = W.apply(x)
    np.testing.assert_allclose(y[8:], x[8:])
    np.testing.assert_allclose(y[:8], W.readings.apply(x[:8]))
    J = rng.normal(size=(11, 2))
    np.testing.assert_allclose(W.apply_jac(J)[8:], J[8:])

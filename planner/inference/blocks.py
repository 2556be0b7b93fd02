"""Whitening of many independent blocks of readings, each diagonal plus low rank, never stored N × N.

A class's readings: each student's tubes share that student's dispensers (their calibration errors, a
few columns of loadings per student), and different students' tubes are independent once the class's
shared stock errors are fitted as parameters. The covariance is block diagonal,
Σ = diag_b(D_b + S_b S_bᵀ), and its whitening is the block-diagonal of the Woodbury whitenings of
:class:`planner.inference.precision.Whitening`: with B_b = D_b^(−½) S_b = U_b diag(s_b) V_bᵀ,
W_b = [I + U_b (diag((1 + s_b²)^(−½)) − I) U_bᵀ] D_b^(−½). Applying it costs O(N r) and stores O(N r)
for N readings and r loadings per block; the SVDs of all blocks are one batched call (blocks padded to
the largest). So memory grows linearly with the number of blocks (students), not with its square.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class BlockWhitening:
    """W with WᵀW = Σ⁻¹ for block-diagonal Σ of diagonal-plus-low-rank blocks (see the module docstring).

    Attributes
    ----------
    d : (N,) D^(−½) of every reading.
    U : (N, r) each reading's row of its block's left singular vectors (blocks padded to r columns).
    shrink : (B, r) (1 + s²)^(−½) − 1 per block (0 for padding).
    starts : (B,) first reading of each block (blocks contiguous, in order, none empty).
    block : (N,) block of every reading.
    """

    d: np.ndarray
    U: np.ndarray
    shrink: np.ndarray
    starts: np.ndarray
    block: np.ndarray
    __array_ufunc__ = None

    @classmethod
    def of(cls, var: np.ndarray, S: np.ndarray, sizes: np.ndarray) -> BlockWhitening:
        """From per-reading variances (N,), loadings (N, r) (each row loads its own block's factors) and
        the block sizes (B,) in reading order."""
        var = np.asarray(var, dtype=float)
        S = np.asarray(S, dtype=float).reshape(var.size, -1)
        sizes = np.asarray(sizes, dtype=int)
        if np.any(sizes < 1) or sizes.sum() != var.size:
            raise ValueError("block sizes must be ≥ 1 and add up to the number of readings")
        starts = np.concatenate([[0], np.cumsum(sizes)[:-1]])
        block = np.repeat(np.arange(sizes.size), sizes)
        pos = np.arange(var.size) - starts[block]  # row within its block
        d = 1.0 / np.sqrt(var)
        r = S.shape[1]
        pad = np.zeros((sizes.size, int(sizes.max()), r))
        pad[block, pos] = d[:, None] * S
        if r == 0:
            return cls(d, np.zeros((var.size, 0)), np.zeros((sizes.size, 0)), starts, block)
        u, s, _ = np.linalg.svd(pad, full_matrices=False)
        k = u.shape[-1]
        return cls(d, u[block, pos], 1.0 / np.sqrt(1.0 + s[:, :k] ** 2) - 1.0, starts, block)

    def apply(self, x: np.ndarray) -> np.ndarray:
        """W x along the last axis: (..., N) -> (..., N)."""
        y = np.asarray(x, dtype=float) * self.d
        if self.U.shape[1] == 0:
            return y
        c = np.add.reduceat(y[..., :, None] * self.U, self.starts, axis=-2)  # (..., B, r)
        return y + np.einsum("nr,...nr->...n", self.U, (c * self.shrink)[..., self.block, :])

    def apply_jac(self, J: np.ndarray) -> np.ndarray:
        """W J for Jacobians (..., N, P)."""
        y = np.asarray(J, dtype=float) * self.d[:, None]
        if self.U.shape[1] == 0:
            return y
        c = np.add.reduceat(self.U[:, :, None] * y[..., :, None, :], self.starts, axis=-3)  # (..., B, r, P)
        return y + np.einsum("nr,...nrp->...np", self.U, (c * self.shrink[..., None])[..., self.block, :, :])

    def block_dense(self, b: int) -> np.ndarray:
        """Block b of W as a dense matrix (one student's whitening)."""
        i0 = int(self.starts[b])
        i1 = int(self.starts[b + 1]) if b + 1 < self.starts.size else self.d.size
        U = self.U[i0:i1]
        return (np.eye(i1 - i0) + (U * self.shrink[b]) @ U.T) * self.d[i0:i1]


@dataclass(frozen=True)
class WithPrior:
    """A whitening of N readings followed by k unit-variance prior rows (left as they are): the readings
    of a fit whose nuisance factors carry a standard normal prior, written as k extra observations."""

    readings: BlockWhitening
    k: int
    __array_ufunc__ = None

    def apply(self, x: np.ndarray) -> np.ndarray:
        x = np.asarray(x, dtype=float)
        n = x.shape[-1] - self.k
        return np.concatenate([self.readings.apply(x[..., :n]), x[..., n:]], axis=-1)

    def apply_jac(self, J: np.ndarray) -> np.ndarray:
        J = np.asarray(J, dtype=float)
        n = J.shape[-2] - self.k
        return np.concatenate([self.readings.apply_jac(J[..., :n, :]), J[..., n:, :]], axis=-2)

"""Choosing the class among the candidate cards: N distinct cards whose pooled fit is efficient for K.

The class's information on the fitted parameters θ and the stock factors z (one bottle of each stock for
the class, :mod:`._pooled`) is ``M(S) = M0 + Σ_{c∈S} M_c``: ``M0`` the unit prior of the stock factors and
``M_c`` card c's information with its own dispensers' calibration errors marginalised (Schur complement;
the class set's reported SE then lets students at one bench share their dispensers). The criterion is the
design's robust target criterion ``Σ_g ν_g log [M_g(S)⁻¹]_tt`` over the prior nodes g.

Sequential construction (Wynn 1970, Ann. Math. Stat. 41:1655): the first card is the best card alone; each
next card is one of largest directional derivative ``d_c = Σ_g ν_g b_gᵀ M_c,g b_g / v_g`` (``b_g = M_g⁻¹
e_t``, ``v_g = e_tᵀ b_g``), the rate at which adding card c lowers the criterion; no card is taken twice
(the cards must differ). So that the class holds cards of different shapes rather than the same best
shape nudged, the card is drawn (seeded) among those whose derivative is within ``NEAR`` of the largest;
each step then gains at least 1 − NEAR of the best step's first-order gain.
"""

from __future__ import annotations

import numpy as np

from ._grid import Grid, nonzero_columns

__all__ = ["NEAR", "card_information", "sequential_selection"]

NEAR = 0.10  # a card within 10 % of the best step's derivative may be drawn [our choice: variety]
CHUNK = 4096  # cards whose information is formed at once


def card_information(grid: Grid, cards: np.ndarray):
    """Information of each card on (θ, stock factors) at the nodes with weight, its own dispensers
    marginalised: Mc (G', K, Q, Q), the stock prior M0 (Q, Q) and the node weights ν (G',)."""
    ks, kd = nonzero_columns(grid.rows)
    g = np.flatnonzero(grid.crit > 0)
    r = grid.rows
    th, sk, dv = r.theta[g], r.stock[g][..., ks], r.device[g][..., kd]
    P = th.shape[-1]
    Q = P + int(ks.sum())
    out = np.empty((g.size, cards.shape[0], Q, Q))
    for a in range(0, cards.shape[0], CHUNK):  # a handful of chunks, each vectorised
        c = cards[a : a + CHUNK]
        X = np.concatenate([th[:, c], sk[:, c]], axis=-1)  # (G', k, n, Q)
        D = dv[:, c]
        M = np.einsum("gknp,gknq->gkpq", X, X)
        if D.shape[-1]:
            B = np.einsum("gknp,gknd->gkpd", X, D)
            C = np.einsum("gknd,gkne->gkde", D, D) + np.eye(D.shape[-1])
            M -= B @ np.linalg.solve(C, np.swapaxes(B, -1, -2))
        out[:, a : a + CHUNK] = M
    M0 = np.zeros((Q, Q))
    M0[P:, P:] = np.eye(Q - P)
    return out, M0, grid.crit[g]


def _target_solve(M: np.ndarray, t: int) -> tuple[np.ndarray, np.ndarray]:
    """``b = M⁻¹ e_t`` and ``v = b_t`` for a stack (..., Q, Q), solved on the unit-diagonal scaling."""
    d = np.sqrt(np.maximum(np.einsum("...ii->...i", M), 1e-300))
    Ms = M / (d[..., :, None] * d[..., None, :]) + 1e-12 * np.eye(M.shape[-1])
    e = np.zeros(M.shape[:-1])
    with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
        e[..., t] = 1.0 / d[..., t]
        b = np.linalg.solve(Ms, e[..., None])[..., 0] / d
    ok = np.all(np.isfinite(b), axis=-1) & (b[..., t] > 0)  # not estimable: infinite variance, no gain
    return np.where(ok[..., None], b, 0.0), np.where(ok, b[..., t], np.inf)


def sequential_selection(
    Mc: np.ndarray, M0: np.ndarray, nu: np.ndarray, t: int, N: int, rng: np.random.Generator
) -> tuple[np.ndarray, np.ndarray]:
    """Choose min(N, K) distinct cards (module docstring).

    Parameters
    ----------
    Mc : (G, K, Q, Q) information of each candidate card; M0 (Q, Q) prior; nu (G,) node weights.
    t : index of the target parameter.

    Returns
    -------
    chosen : (min(N, K),) candidate indices in the order taken.
    rest : the other candidates, largest derivative at the final design first (spares for a card the
        assessment rejects).
    """
    G, K = Mc.shape[:2]
    Q = M0.shape[0]
    _, v1 = _target_solve(M0 + Mc, t)  # each card alone: (G, K)
    loss1 = nu @ np.log(np.maximum(v1, 1e-300))
    free = np.ones(K, dtype=bool)
    first = _draw_near(-loss1, free, np.log(1.0 / (1.0 - NEAR)), rng, additive=True)
    chosen = [first]
    free[first] = False
    M = M0 + Mc[:, first]
    flat = Mc.reshape(G, K, Q * Q)
    for _ in range(1, min(N, K)):  # one card per student: the sequential construction itself
        d = _derivative(M, flat, nu, t)
        c = _draw_near(d, free, NEAR, rng)
        chosen.append(c)
        free[c] = False
        M = M + Mc[:, c]
    d = _derivative(M, flat, nu, t)
    rest = np.flatnonzero(free)
    return np.array(chosen, dtype=np.int64), rest[np.argsort(-d[rest], kind="stable")]


def _derivative(M: np.ndarray, flat: np.ndarray, nu: np.ndarray, t: int) -> np.ndarray:
    """``d_c = Σ_g ν_g b_gᵀ M_c,g b_g / v_g`` for every card (one matrix product)."""
    b, v = _target_solve(M, t)  # (G, Q), (G,)
    bb = np.einsum("gp,gq->gpq", b, b).reshape(b.shape[0], -1) / v[:, None]
    return nu @ np.einsum("gkx,gx->gk", flat, bb)


def _draw_near(score: np.ndarray, free: np.ndarray, tol: float, rng, additive: bool = False) -> int:
    """A free candidate drawn uniformly among those whose score is within ``tol`` of the best free one
    (relative, or additive on a log scale)."""
    s = np.where(free, score, -np.inf)
    top = s.max()
    near = np.flatnonzero(s >= (top - tol if additive else (1.0 - tol) * top))
    return int(near[rng.integers(near.size)])

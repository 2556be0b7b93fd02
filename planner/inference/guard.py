"""Exact designs that keep the power to detect alternative models at a bounded cost in precision
(generic design mathematics, no chemistry).

From a starting design x₀ (e.g. the target-optimal exact design), the exchange maximises

    D(x) = (1 / A) · Σ_a log(1 + λ_a(x))   subject to   Var_t(x) ≤ cap² · Var_t(x₀),

where Var_t = (M⁻¹)_tt is the variance of the target parameter t (M = M0 + Σ x_c F_cᵀF_c) and λ_a the
linearised noncentrality of the main model's lack of fit when alternative a is true (the T-criterion of
Atkinson & Fedorov 1975, Biometrika 62:57). Bounding the loss of the primary criterion while
maximising the discriminating one is the constrained form of the compound DT-criteria (Atkinson 2008,
J. Stat. Plan. Inference 138:56; Cook & Wong 1994, JASA 89:687 on the equivalence of constrained and
compound designs). log(1 + λ) keeps designs that cannot detect an alternative (λ = 0) finite.

The search is an exchange (Fedorov 1972): move the one tube whose move to another candidate raises D
most while the constraint holds, until no move does. Every move from a support point is scored for all
candidates at once by rank-one updates (Sherman–Morrison) of M⁻¹, so a step costs O(C·P²) per support
point, never a P × P solve per candidate.

A candidate may also give several whitened rows at once (a tube read as a whole spectrum: its absorbers'
concentrations in concentration space, see :mod:`planner.jobs.spectra.design`): F (C, k, P) and R (A, C,
k). Then a move changes M by a rank-k term, and the same scores come from the Woodbury identity with one
k × k solve per candidate (Woodbury 1950; Hager 1989, SIAM Rev. 31:221).

Scale: the ridge that keeps designs with fewer distinct tubes than parameters finite is relative to
each column's own information (its mean square over the candidates), so rescaling a parameter (ε in
L mol⁻¹ cm⁻¹ against a ten times longer path) changes nothing [derived: M → S M S for a diagonal
rescaling S, and so does the ridge].
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

MAX_MOVES = 200
IMPROVE = 1e-9  # a move must raise D by more than this (log units)
RIDGE = 1e-10  # relative to each column's mean information (module docstring)


@dataclass(frozen=True)
class GuardedDesign:
    """An exact design for the constrained criterion.

    Attributes
    ----------
    counts : (C,) tubes at each candidate.
    var_target : Var of the target parameter (M⁻¹)_tt of the design.
    var_start : the same for the starting design.
    noncentrality : (A,) linearised λ of each alternative.
    value : D at the design.
    moves : exchange steps made from the start (one tube each; a tube may move more than once).
    """

    counts: np.ndarray
    var_target: float
    var_start: float
    noncentrality: np.ndarray
    value: float
    moves: int

    @property
    def cost(self) -> float:
        """SE ratio against the starting design, √(Var_t / Var_t(x₀))."""
        return float(np.sqrt(self.var_target / self.var_start)) if self.var_start > 0 else float("nan")


def column_ridge(F: np.ndarray, ridge: float = RIDGE) -> np.ndarray:
    """(P, P) diagonal ridge, ``ridge`` × each column's mean square over the candidates (scale-free);
    F (C, P), or (C, k, P) with k rows per candidate."""
    sq = np.einsum("cp,cp->p", F, F) if F.ndim == 2 else np.einsum("ckp,ckp->p", F, F)
    ms = sq / max(F.shape[0], 1)
    return np.diag(ridge * np.where(ms > 0, ms, 1.0))


def _d_value(lam: np.ndarray, lam_cap: float = np.inf) -> np.ndarray:
    return np.mean(np.log1p(np.clip(lam, 0.0, lam_cap)), axis=-1)


class _State:
    """M, its inverse, b = Σ x_c r_ac F_c and s = Σ x_c r_ac² of a design."""

    def __init__(self, F, R, base, x):
        xf = x.astype(float)
        self.M = base + (F * xf[:, None]).T @ F
        self.Minv = np.linalg.inv(self.M)
        self.b = (R * xf) @ F  # (A, P)
        self.s = (R**2) @ xf  # (A,)

    def var_lam(self, t: int):
        lam = self.s - np.einsum("ap,pq,aq->a", self.b, self.Minv, self.b)
        return float(self.Minv[t, t]), np.maximum(lam, 0.0)


class _BlockState(_State):
    """The same for candidates of k rows each: F (C, k, P), R (A, C, k)."""

    def __init__(self, F, R, base, x):
        xf = x.astype(float)
        self.M = base + np.einsum("c,ckp,ckq->pq", xf, F, F)
        self.Minv = np.linalg.inv(self.M)
        self.b = np.einsum("c,ckp,ack->ap", xf, F, R)
        self.s = np.einsum("c,ack,ack->a", xf, R, R)


def _block_moves_from(st: _BlockState, F, R, i: int, t: int):
    """:func:`_moves_from` for candidates of k rows: Woodbury for the removal of candidate i's rows and
    for the addition of each candidate's, gᵀ(M_i + F_cᵀF_c)⁻¹g = gᵀM_i⁻¹g − (F_c M_i⁻¹ g)ᵀ S_c⁻¹ (F_c M_i⁻¹ g)
    with S_c = I + F_c M_i⁻¹ F_cᵀ [derived]."""
    k = F.shape[1]
    fi, ri = F[i], R[:, i, :]  # (k, P), (A, k)
    u = fi @ st.Minv  # (k, P)
    Mi = st.Minv + u.T @ np.linalg.solve(np.eye(k) - u @ fi.T, u)  # (M − F_iᵀF_i)⁻¹
    bi = st.b - ri @ fi  # (A, P)
    si = st.s - np.einsum("ak,ak->a", ri, ri)
    U = F @ Mi  # (C, k, P): F_c M_i⁻¹
    Q = np.einsum("ckp,clp->ckl", U, F)  # F_c M_i⁻¹ F_cᵀ
    S = Q + np.eye(k)
    ut = U[:, :, t]  # (C, k)
    var = Mi[t, t] - np.einsum("ck,ck->c", ut, np.linalg.solve(S, ut[..., None])[..., 0])
    h = bi @ Mi  # (A, P)
    rc = np.swapaxes(R, 0, 1)  # (C, A, k)
    Fh = np.einsum("ckp,ap->cak", F, h)
    Qr = np.einsum("ckl,cal->cak", Q, rc)
    v = Fh + Qr
    w = np.linalg.solve(S[:, None], v[..., None])[..., 0]  # (C, A, k)
    base = np.einsum("ap,ap->a", h, bi)
    quad = (
        base[None, :]
        + 2.0 * np.einsum("cak,cak->ca", rc, Fh)
        + np.einsum("cak,cak->ca", rc, Qr)
        - np.einsum("cak,cak->ca", v, w)
    )
    lam = si[None, :] + np.einsum("cak,cak->ca", rc, rc) - quad
    return var, np.maximum(lam, 0.0)


def _moves_from(st: _State, F, R, i: int, t: int):
    """Var_t and λ (C, A) after moving one tube from candidate i to each candidate c (rank-one updates)."""
    fi, ri = F[i], R[:, i]
    u = st.Minv @ fi
    Mi = st.Minv + np.outer(u, u) / (1.0 - fi @ u)  # (M − f fᵀ)⁻¹, Sherman–Morrison
    bi = st.b - ri[:, None] * fi[None, :]
    si = st.s - ri**2
    U = F @ Mi  # (C, P): M_i⁻¹ f_c
    q = np.einsum("cp,cp->c", U, F)
    den = 1.0 + q
    var = Mi[t, t] - U[:, t] ** 2 / den
    g = bi @ Mi  # (A, P)
    G = F @ g.T  # (C, A): f_cᵀ M_i⁻¹ b_a
    base = np.einsum("ap,ap->a", g, bi)
    rc = R.T  # (C, A)
    quad = base + 2.0 * rc * G + rc**2 * q[:, None] - (G + rc * q[:, None]) ** 2 / den[:, None]
    lam = si + rc**2 - quad
    return var, np.maximum(lam, 0.0)


def guarded_design(
    F: np.ndarray,
    R: np.ndarray,
    M0: np.ndarray | None,
    target: int,
    counts0: np.ndarray,
    cost_cap: float,
    *,
    lam_cap: float = np.inf,
    ridge: float = RIDGE,
) -> GuardedDesign:
    """Exchange from ``counts0`` (same number of tubes) to a local maximum of D with the SE of the target
    at most ``cost_cap`` times that of ``counts0``; then, keeping D, to the smallest variance.

    Parameters
    ----------
    F : (C, P') whitened Jacobian rows (one reading per candidate), or (C, k, P') with k rows each.
    R : (A, C) whitened misfit of each alternative at each candidate, or (A, C, k).
    M0 : (P', P') prior information, or None.
    target : index of the target parameter among the P' columns.
    counts0 : (C,) starting tube counts (e.g. the target-optimal exact design).
    cost_cap : largest allowed SE ratio √(Var_t / Var_t(x₀)) (≥ 1; inf: no bound, the T-criterion alone;
        below 1 nothing moves).
    lam_cap : noncentrality beyond which an alternative earns no more credit (e.g. the λ at which the
        test's power reaches 95 %): a design that already reveals every alternative then spends the rest
        of the exchange on precision instead of on ever larger λ.
    ridge : relative ridge (see :func:`column_ridge`).
    """
    F = np.asarray(F, dtype=float)
    R = np.atleast_2d(np.asarray(R, dtype=float))
    P = F.shape[-1]
    x = np.asarray(counts0, dtype=int).copy()
    base = (np.zeros((P, P)) if M0 is None else np.asarray(M0, dtype=float)) + column_ridge(F, ridge)
    state, moves_from = (_BlockState, _block_moves_from) if F.ndim == 3 else (_State, _moves_from)
    st = state(F, R, base, x)
    var0, lam = st.var_lam(target)
    if cost_cap < 1.0:
        return GuardedDesign(x, var0, var0, lam, float(_d_value(lam, lam_cap)), 0)
    limit = var0 * cost_cap**2 * (1.0 + 1e-12) if np.isfinite(cost_cap) else np.inf
    moves = 0
    for phase in ("discriminate", "polish"):
        for _ in range(MAX_MOVES):
            var, lam = st.var_lam(target)
            value = float(_d_value(lam, lam_cap))
            move = _best_move(st, F, R, x, target, limit, lam_cap, value, var, phase, moves_from)
            if move is None:
                break
            x[move[0]] -= 1
            x[move[1]] += 1
            moves += 1
            st = state(F, R, base, x)
    var, lam = st.var_lam(target)
    return GuardedDesign(x, var, var0, lam, float(_d_value(lam, lam_cap)), moves)


def _best_move(st, F, R, x, target, limit, lam_cap, value, var_now, phase, moves_from=_moves_from):
    """(from, to) of the best single-tube move, or None: in the "discriminate" phase the largest rise of D
    within the variance limit; in the "polish" phase the largest fall of the variance that keeps D."""
    best, found = (value + IMPROVE if phase == "discriminate" else var_now * (1.0 - 1e-9)), None
    for i in np.flatnonzero(x).tolist():  # the design's distinct tubes (a handful)
        var, lam_c = moves_from(st, F, R, i, target)
        d = _d_value(lam_c, lam_cap)
        if phase == "discriminate":
            score = np.where(var <= limit, d, -np.inf)
            score[i] = -np.inf  # moving a tube onto itself is no move
            c = int(np.argmax(score))
            if score[c] > best:
                best, found = float(score[c]), (i, c)
        else:
            score = np.where(d >= value - 1e-12, var, np.inf)
            score[i] = np.inf
            c = int(np.argmin(score))
            if score[c] < best:
                best, found = float(score[c]), (i, c)
    return found


def tubes_moved(counts_a: np.ndarray, counts_b: np.ndarray) -> int:
    """How many tubes of design a are not in design b (same number of tubes: half the L1 distance)."""
    return int(np.abs(np.asarray(counts_a) - np.asarray(counts_b)).sum() // 2)
